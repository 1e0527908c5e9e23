"""The workbench window: the chain across the top, the selected stage's
parts on the left, and on the right the live panel, the look inside
(operating point, small-signal plots) and the comparison of kept versions.

The window wires widgets to the :class:`solderless.gui.model.Workbench` (edits, undo),
the :class:`solderless.gui.preview.Analyser` (offline preview and analyses on a worker
thread) and, when playing, an :class:`solderless.engine.live.remote.HostProcess`: the
live host in a process of its own, so that the window's Python work (plots,
tables) never holds up the audio callback (they would share one GIL in one
process). Edits go to it as requests that do not wait; meters and the scope
are read from its shared-memory rings at the frame rate.
"""
from __future__ import annotations

import os
from pathlib import Path
from typing import Callable

from PyQt6.QtCore import QEventLoop, Qt, QTimer
from PyQt6.QtGui import QAction, QKeySequence
from PyQt6.QtWidgets import (QFileDialog, QFrame, QHBoxLayout, QInputDialog, QLabel,
                             QMainWindow, QMenu, QMessageBox, QPushButton, QSplitter,
                             QTabWidget, QToolBar, QVBoxLayout, QWidget)

from solderless.engine.design import builtin_designs, load_design, stage_library
from solderless.engine.errors import SolderlessError
from solderless.engine.settings import Settings, caution_once, config_dir
from solderless.gui import theme
from solderless.gui.chain import ChainView
from solderless.gui.inspect import InspectPanel
from solderless.gui.livepanel import LivePanel
from solderless.gui.midi import MidiKnobs, knob_map, knob_table, open_input
from solderless.gui.model import Autosave, Workbench
from solderless.gui.parts import PartsPanel
from solderless.gui.preview import Analyser
from solderless.gui.snapshots import CURRENT, SnapshotPanel

AUTOSAVE_MS = 15000
REFRESH_DEBOUNCE_MS = 300
DYN_DEBOUNCE_MS = 1500
"""While playing live, attack and release are measured again only after the
edits have paused this long: the measurement simulates 2.6 s of audio in
this process and would take frames from the meters during a knob sweep
(bench/bench_gui.py measures the frame rate)."""
METER_MS = 30          # about 33 frames per second (target: at least 30)
NETLIST_FILTER = "SPICE netlists (*.cir *.sp *.spice *.net *.ckt *.txt)"
DESIGN_FILTER = "Solderless designs (*.toml)"


def is_builtin_path(path) -> bool:
    """True for a file under the built-in presets folder (read-only)."""
    from solderless.engine.design import PRESETS
    try:
        return Path(path).resolve().is_relative_to(PRESETS.resolve())
    except (OSError, ValueError):
        return False


def has_control(design) -> bool:
    """Whether a design declares a gain-cell control (its meters' ``control``)."""
    return bool((getattr(design, "meters", None) or {}).get("control"))


def _file_stem(name: str) -> str:
    stem = "".join(c if c.isalnum() or c in "-_" else "-" for c in str(name)).strip("-")
    return stem or "design"


class NoticeBar(QFrame):
    """A strip of dismissable notices at the top of the window."""

    def __init__(self, parent=None):
        super().__init__(parent)
        self.lay = QVBoxLayout(self)
        self.lay.setContentsMargins(6, 2, 6, 2)
        self.lay.setSpacing(2)
        self.notices: list[QFrame] = []

    def add(self, text: str, kind: str = "info", buttons=()) -> QFrame:
        colour = {"info": theme.READ, "warn": theme.WARN, "bad": theme.BAD}[kind]
        box = QFrame()
        box.setStyleSheet(f"QFrame {{ background: #23282e; border-left: 4px solid {colour};"
                          f" border-radius: 3px; }}")
        row = QHBoxLayout(box)
        row.setContentsMargins(8, 4, 4, 4)
        lab = QLabel(text)
        lab.setWordWrap(True)
        lab.setStyleSheet(f"color: {theme.TEXT}; border: 0px;")
        row.addWidget(lab, 1)
        for label, fn in buttons:
            b = QPushButton(label)
            b.clicked.connect(fn)
            b.clicked.connect(lambda _c=False, bx=box: self.remove(bx))
            row.addWidget(b)
        close = QPushButton("✕")
        close.setFixedWidth(28)
        close.setToolTip("dismiss")
        close.clicked.connect(lambda _c=False, bx=box: self.remove(bx))
        row.addWidget(close)
        box.text = text
        self.lay.addWidget(box)
        self.notices.append(box)
        return box

    def remove(self, box) -> None:
        if box in self.notices:
            self.notices.remove(box)
            box.setParent(None)
            box.deleteLater()

    def texts(self) -> list[str]:
        return [b.text for b in self.notices]


def _probe_list(design) -> list[str]:
    """The probes a live host meters for ``design`` (its control first)."""
    from solderless.engine.live.host import _probes_for
    return list(_probes_for(design)[0])


def design_location(path) -> str:
    """Where a design lives, for the header: a built-in design by its name
    (never the folder it was installed in), a user's file with the home
    folder written as ~, or "(not saved)"."""
    if not path:
        return "(not saved)"
    p = Path(path)
    try:
        rp = p.resolve()
        for name, f in builtin_designs().items():
            if Path(f).resolve() == rp:
                return f"built-in design: {name}"
        return "~/" + str(rp.relative_to(Path.home().resolve()))
    except (OSError, ValueError):
        return str(p)


class MainWindow(QMainWindow):
    """The workbench. ``ask`` may be replaced (tests) by a function
    ``ask(question) -> 'save' | 'discard' | 'cancel'``."""

    def __init__(self, design=None, *, config: Path | None = None, recover: str = "ask",
                 factory: Callable | None = None, source: str = "synth:notes",
                 seconds: float = 3.0):
        super().__init__()
        self.config = Path(config) if config else config_dir()
        self.settings = Settings(self.config)
        self.autosave = Autosave(self.config)
        self.factory = factory
        self.wb = Workbench()
        self.analyser = Analyser(factory)
        self.analyser.source = source
        self.analyser.seconds = seconds
        self.host = None
        self.live_driver = "device"      # "paced": no sound card (benches, tests)
        self._live_variant = False
        self.ask: Callable[[str], str] | None = None
        self.ask_path: Callable[[Path], str | os.PathLike | None] | None = None
        self.last_preview = None
        self.last_op = None
        self.last_ac = None
        self.last_ab = None
        self.last_overlay = None
        self.last_dyn = None
        self.problems: list[tuple[str, str]] = []
        self.blind = False
        self.setWindowTitle("Solderless workbench")
        self.resize(1480, 940)
        self._build()
        i = self.live.source.findData(source)
        self.live.source.blockSignals(True)
        if i < 0:                           # a source given by name: offer it too
            self.live.source.addItem(source, source)
            i = self.live.source.count() - 1
        self.live.source.setCurrentIndex(i)  # live playback starts from the same source
        self.live.source.blockSignals(False)
        self._actions()
        self._wire()
        if self.settings.problem:
            self.notices.add(self.settings.problem, "warn")
        if design is not None:
            self.set_design(design)
        self._check_autosaves(recover)
        self._caution()
        self.autosave_timer = QTimer(self)
        self.autosave_timer.timeout.connect(self.autosave_now)
        self.autosave_timer.start(AUTOSAVE_MS)

    # ------------------------------------------------------------ layout
    def _build(self) -> None:
        central = QWidget()
        v = QVBoxLayout(central)
        v.setContentsMargins(6, 4, 6, 4)
        v.setSpacing(4)
        self.notices = NoticeBar()
        v.addWidget(self.notices)
        head = QHBoxLayout()
        self.title = QLabel()
        self.title.setStyleSheet(f"color: {theme.TEXT}; font-size: 15pt; font-weight: bold;"
                                 " letter-spacing: 1px;")
        self.file_lab = QLabel()
        self.file_lab.setProperty("role", "dim")
        self.busy = QLabel()
        self.busy.setProperty("role", "read")
        head.addWidget(self.title)
        head.addWidget(self.file_lab, 1)
        head.addWidget(self.busy)
        v.addLayout(head)
        self.chain_bar = QToolBar()
        v.addWidget(self.chain_bar)
        self.chain = ChainView(self.wb, self.say)
        split = QSplitter(Qt.Orientation.Vertical)
        split.addWidget(self.chain)
        lower = QSplitter(Qt.Orientation.Horizontal)
        self.parts = PartsPanel(self.wb, self.say)
        self.parts.setMinimumWidth(440)
        lower.addWidget(self.parts)
        self.tabs = QTabWidget()
        self.live = LivePanel()
        self.inspect = InspectPanel()
        self.compare = SnapshotPanel(self.wb, self.say)
        self.tabs.addTab(self.live, "Live")
        self.tabs.addTab(self.inspect, "Inside")
        self.tabs.addTab(self.compare, "Compare")
        from solderless.gui.buildview import BuildPanel
        self.build_view = BuildPanel(lambda: self.wb.design.copy())
        self.tabs.addTab(self.build_view, "Build")
        lower.addWidget(self.tabs)
        lower.setSizes([500, 960])
        split.addWidget(lower)
        split.setSizes([200, 720])
        self.vsplit = split
        v.addWidget(split, 1)
        self.setCentralWidget(central)
        self.statusBar().showMessage("ready")
        self._devices()

    def _devices(self) -> None:
        try:
            from solderless.engine.live.stream import list_devices
            devs = list_devices()
            self.live.set_devices(devs)
        except (SolderlessError, ImportError, OSError) as exc:
            self.live.set_devices(None, "no audio device")
            self.live.run_btn.setToolTip(f"no audio device ({exc}); use Preview (F5)")

    def _act(self, menu, text, fn, keys=None, tip=None) -> QAction:
        a = QAction(text, self)
        if keys:
            a.setShortcuts([QKeySequence(k) for k in (keys if isinstance(keys, list) else [keys])])
        if tip:
            a.setStatusTip(tip)
            a.setToolTip(tip)
        a.triggered.connect(lambda _c=False: fn())
        menu.addAction(a)
        self.addAction(a)
        return a

    def _actions(self) -> None:
        mb = self.menuBar()
        f = mb.addMenu("&File")
        self._act(f, "Open design…", self.open_dialog, "Ctrl+O")
        self.builtin_menu = f.addMenu("Open built-in design")
        for name in builtin_designs():
            a = self.builtin_menu.addAction(name)
            a.triggered.connect(lambda _c=False, n=name: self.open_path(n))
        self.recent_menu = f.addMenu("Recent")
        self.recent_menu.aboutToShow.connect(self._fill_recent)
        self._act(f, "Import netlist as design…", self.import_design_dialog, "Ctrl+Shift+I")
        self._act(f, "Import netlist as stage…", self.import_stage_dialog, "Ctrl+I")
        f.addSeparator()
        self._act(f, "Save", self.save, "Ctrl+S")
        self._act(f, "Save as…", self.save_as_dialog, "Ctrl+Shift+S")
        f.addSeparator()
        self._act(f, "Quit", self.close, "Ctrl+Q")
        e = mb.addMenu("&Edit")
        self.undo_act = self._act(e, "Undo", lambda: self._guard(self.wb.undo), "Ctrl+Z")
        self.redo_act = self._act(e, "Redo", lambda: self._guard(self.wb.redo),
                                  ["Ctrl+Shift+Z", "Ctrl+Y"])
        s = mb.addMenu("&Stage")
        self.add_menu = QMenu("Add from library", self)
        groups: dict[str, QMenu] = {}
        for name in stage_library():
            g, _, leaf = name.partition("/")
            if g not in groups:
                groups[g] = self.add_menu.addMenu(g)
            a = groups[g].addAction(leaf)
            a.triggered.connect(lambda _c=False, n=name: self.add_stage(n))
        s.addMenu(self.add_menu)
        self.remove_act = self._act(s, "Remove stage", self.remove_stage, "Ctrl+Del")
        self.dup_act = self._act(s, "Duplicate stage", self.duplicate_stage, "Ctrl+D")
        self.left_act = self._act(s, "Move stage earlier", lambda: self.move_stage(-1),
                                  "Alt+Left")
        self.right_act = self._act(s, "Move stage later", lambda: self.move_stage(+1),
                                   "Alt+Right")
        self.bypass_act = self._act(s, "Bypass / engage stage", self.toggle_bypass, "Ctrl+B")
        self.link_act = self._act(s, "Link ports…", self.link_dialog, "Ctrl+L",
                                  "join a port of one stage to a port of another "
                                  "(or drag between ports in the chain)")
        self._act(s, "Previous stage", lambda: self.chain.select_offset(-1), "Ctrl+PgUp")
        self._act(s, "Next stage", lambda: self.chain.select_offset(+1), "Ctrl+PgDown")
        self._act(s, "Design parts (supplies)", lambda: self.parts.show_stage(None), "Ctrl+0")
        p = mb.addMenu("&Play")
        self._act(p, "Offline preview", self.preview, "F5")
        self._act(p, "Start / stop live", lambda: self.live.run_btn.toggle(), "F6")
        self._act(p, "Mute", lambda: self.live.mute_btn.toggle(), "Ctrl+M")
        self._act(p, "Hear A", lambda: self.hear("A"), "Ctrl+1")
        self._act(p, "Hear B", lambda: self.hear("B"), "Ctrl+2")
        self._act(p, "Keep current as snapshot", self.compare.keep_current, "Ctrl+K")
        vw = mb.addMenu("&View")
        for i, name in enumerate(("Live", "Inside", "Compare")):
            self._act(vw, name, lambda i=i: self.tabs.setCurrentIndex(i), f"Alt+{i + 1}")
        self._act(vw, "Focus chain", lambda: self.chain.setFocus(), "Ctrl+E")
        self._act(vw, "Focus parts", self._focus_parts, "Ctrl+P")
        h = mb.addMenu("&Help")
        self._act(h, "Keys", self.show_keys, "F1")
        # chain toolbar
        tb = self.chain_bar
        add_btn = QPushButton("+ Add stage")
        add_btn.setMenu(self.add_menu)
        tb.addWidget(add_btn)
        for a, label in ((self.remove_act, "Remove"), (self.dup_act, "Duplicate"),
                         (self.left_act, "◂ Earlier"), (self.right_act, "Later ▸"),
                         (self.bypass_act, "Bypass"), (self.link_act, "Link…")):
            b = QPushButton(label)
            b.setToolTip(f"{a.text()} ({a.shortcut().toString()})")
            b.clicked.connect(a.trigger)
            tb.addWidget(b)
        b = QPushButton("Import stage…")
        b.clicked.connect(self.import_stage_dialog)
        tb.addWidget(b)
        tb.addSeparator()
        self.undo_btn = QPushButton("↶ Undo")
        self.redo_btn = QPushButton("↷ Redo")
        self.undo_btn.clicked.connect(lambda _c=False: self._guard(self.wb.undo))
        self.redo_btn.clicked.connect(lambda _c=False: self._guard(self.wb.redo))
        tb.addWidget(self.undo_btn)
        tb.addWidget(self.redo_btn)

    def _focus_parts(self) -> None:
        for row in self.parts.rows.values():
            w = getattr(row, "edit", None) or getattr(row, "dial", None)
            if w is not None:
                w.setFocus()
                return

    def _wire(self) -> None:
        self.chain.stage_selected.connect(self.parts.show_stage)
        self.wb.history_changed.connect(self._history)
        self.wb.values_changed.connect(self._values_changed)
        self.wb.applied.connect(self._forward)
        self.wb.structure_changed.connect(self._structure_changed)
        self.wb.design_replaced.connect(self._replaced)
        self.refresh_timer = QTimer(self)
        self.refresh_timer.setSingleShot(True)
        self.refresh_timer.timeout.connect(self.refresh_analysis)
        self.dyn_timer = QTimer(self)
        self.dyn_timer.setSingleShot(True)
        self.dyn_timer.timeout.connect(lambda: self.analyser.request_dyn(self.wb.design))
        self.analyser.preview_ready.connect(self._preview_ready)
        self.analyser.op_ready.connect(self._op_ready)
        self.analyser.ac_ready.connect(self._ac_ready)
        self.analyser.ab_ready.connect(self._ab_ready)
        self.analyser.failed.connect(self._failed)
        # bound methods, not lambdas, for the signals of objects that may
        # outlive the window (the analyser's worker, the model): Qt drops a
        # bound slot's connections and queued calls when the window goes
        self.analyser.busy_changed.connect(self._busy_changed)
        self.live.preview_requested.connect(self.preview)
        self.live.start_requested.connect(self.start_live)
        self.live.stop_requested.connect(self.stop_live)
        self.live.level_changed.connect(self._level)
        self.live.mute_changed.connect(self._mute)
        self.live.source_changed.connect(self._source)
        self.compare.ab_requested.connect(self.start_ab)
        self.compare.hear.connect(self.hear)
        self.compare.recall.connect(self._recall)
        self.compare.overlay_requested.connect(self.request_overlay)
        self.midi = MidiKnobs(self._knob_turn, self._remember_knobs, self)
        self.midi.message.connect(self.say)
        self.midi.learned.connect(self._midi_learned)
        self.live.midi_connect.connect(self.connect_midi)
        self.live.probe_requested.connect(self.add_probe)
        self.live.midi_learn.connect(self.midi.learn)
        self.wb.edited.connect(self._edited_for_midi)
        self.analyser.overlay_ready.connect(self._overlay_ready)
        self.analyser.dyn_ready.connect(self._dyn_ready)
        self.analyser.floor_ready.connect(self._floor_ready)
        self.live.hiss_toggled.connect(self.set_hiss)
        self.compare.can_trial = self._trial_ready
        self.compare.trial_changed.connect(self._set_blind)
        self.meter_timer = QTimer(self)
        # a coarse timer may stretch 30 ms by 5 %; the frame rate is a target
        self.meter_timer.setTimerType(Qt.TimerType.PreciseTimer)
        self.meter_timer.timeout.connect(self._poll_meters)

    def _busy_changed(self, busy: bool) -> None:
        self.busy.setText("working…" if busy else "")

    def _edited_for_midi(self, kind: str, q: str, _value) -> None:
        if kind == "rotation":
            self.midi.pot_turned(q)

    # ------------------------------------------------------------ messages
    def say(self, text: str) -> None:
        """Show a message in the status line (user mistakes land here)."""
        self.statusBar().showMessage(text, 15000)

    def _failed(self, what: str, msg: str) -> None:
        self.problems.append((what, msg))
        if what in ("operating point", "frequency response"):
            self.inspect.show_problem(what, msg)
        else:
            self.live.state.set(f"{what}: {msg}"[:120], bad=True)
        self.say(f"{what}: {msg}")

    def show_keys(self) -> None:
        lines = []
        for a in self.actions():
            if a.shortcut().toString():
                lines.append(f"{a.shortcut().toString():<16} {a.text()}")
        lines.append("Up/Down              step a value through its E-series")
        lines.append("Shift+Up/Down        nudge a value by 1 %")
        lines.append("arrows on a pot      turn it 1 % (PgUp/PgDn 10 %)")
        lines.append("Left/Right in chain  select the previous / next stage")
        QMessageBox.information(self, "Keys", "\n".join(lines))

    def _caution(self) -> None:
        caution_once(lambda text: self.notices.add(text, "warn"), self.config)

    # ------------------------------------------------------------ design
    def set_design(self, d) -> None:
        self.stop_live()
        self.wb.set_design(d)
        self.chain.select(d.stages[0].name if d.stages else None)
        self._history()
        self.refresh_analysis()

    def _replaced(self) -> None:
        d = self.wb.design
        try:
            self.midi.set_mapping(knob_map(d))
        except SolderlessError as exc:
            self.midi.set_mapping({})
            self.notices.add(f"MIDI knob mappings ignored: {exc}", "warn")
        self._midi_label()
        self.live.set_has_control(has_control(d))
        self.title.setText(d.name)
        self.file_lab.setText(f"  {design_location(d.path)}")
        if self.chain.selected:
            self.parts.stage = self.chain.selected
        self.schedule_refresh()

    def _history(self) -> None:
        self.undo_act.setEnabled(self.wb.can_undo())
        self.redo_act.setEnabled(self.wb.can_redo())
        self.undo_btn.setEnabled(self.wb.can_undo())
        self.redo_btn.setEnabled(self.wb.can_redo())
        self.undo_btn.setToolTip(f"Undo {self.wb.undo_text()} (Ctrl+Z)")
        self.redo_btn.setToolTip(f"Redo {self.wb.redo_text()} (Ctrl+Shift+Z)")
        d = self.wb.design
        try:                         # an undone knob mapping is undone here too
            self.midi.set_mapping(knob_map(d))
        except SolderlessError:
            pass
        self.live.set_hiss(bool(getattr(d, "hiss", False)))   # undo and redo too
        self.title.setText(d.name + ("  •" if self.wb.dirty else ""))
        self.setWindowTitle(f"{d.name}{' *' if self.wb.dirty else ''} — Solderless workbench")

    def schedule_refresh(self) -> None:
        self.refresh_timer.start(REFRESH_DEBOUNCE_MS)

    def refresh_analysis(self) -> int:
        """Recompute the operating point, the small-signal plots and (when not
        playing live) the offline preview, on the worker thread."""
        self.refresh_timer.stop()
        if not self.wb.design.stages:
            return 0
        live = self.host is not None
        if live:
            self.dyn_timer.start(DYN_DEBOUNCE_MS)
        return self.analyser.request(self.wb.design, preview=not live, dyn=not live)

    def preview(self) -> int:
        return self.analyser.request(self.wb.design, op=False, ac=False, preview=True)

    def _preview_ready(self, g, r) -> None:
        self.last_preview = r
        if self.host is not None:        # playing live: the live feed owns the panel
            return
        self.live.show_preview(r)
        for m in r.messages:
            self.say(m)

    def _op_ready(self, g, rep) -> None:
        self.last_op = rep
        self.inspect.show_op(rep)

    def _ac_ready(self, g, r) -> None:
        self.last_ac = r
        self.inspect.show_ac(r)

    def _ab_ready(self, g, r) -> None:
        self.last_ab = r
        self.compare.show_offset(r.offset_db)

    def wait_idle(self, timeout_s: float = 120.0) -> bool:
        """Process events until the analyser has nothing queued (tests,
        screenshots)."""
        import time
        t_end = time.monotonic() + timeout_s
        loop = QEventLoop()
        while time.monotonic() < t_end:
            loop.processEvents(QEventLoop.ProcessEventsFlag.AllEvents, 50)
            if self.analyser.pending == 0 and not self.refresh_timer.isActive() \
                    and not self.dyn_timer.isActive():
                loop.processEvents(QEventLoop.ProcessEventsFlag.AllEvents, 50)
                return True
            time.sleep(0.01)
        return False

    # ------------------------------------------------------------ edits -> sound
    def _values_changed(self, changes: dict) -> None:
        self.schedule_refresh()

    def _forward(self, edit) -> None:
        """Send an edit the workbench applied (undo and redo included) to the
        live host, as data: the host applies the very same edit. New values
        land at the next block boundary with the circuit state carried over
        (pot moves are ramped); a structural edit (a stage, a link, a
        bypass, a switch, a model) builds a new simulator in the host and
        crossfades to it, as the console's edits do. Only a change of the
        probe list restarts playback: the meters' layout is fixed while a
        host runs."""
        from solderless.engine.design.edits import (AddProbe, RemoveProbe, ReplaceDesign,
                                                    SetDocumentTable)
        h = self.host
        if h is None or isinstance(edit, SetDocumentTable):
            return
        probes_changed = isinstance(edit, (AddProbe, RemoveProbe)) or (
            isinstance(edit, ReplaceDesign) and
            list(h.info.get("probes", [[]])[0] or []) != _probe_list(self.wb.design))
        if probes_changed:
            self.say("the probes changed: restarting live playback")
            self.stop_live()
            self.live.run_btn.setChecked(True)
            return
        h.edit(edit, reported=True)          # answered later; failures in messages

    def _structure_changed(self) -> None:
        self.schedule_refresh()

    # ------------------------------------------------------------ stage actions
    def _guard(self, fn, *a):
        try:
            return fn(*a)
        except SolderlessError as exc:
            self.say(str(exc))
            return None

    def add_stage(self, template: str) -> None:
        idx = None
        names = [s.name for s in self.wb.design.stages]
        if self.chain.selected in names:
            idx = names.index(self.chain.selected) + 1
        n = self._guard(self.wb.add_stage, template, idx)
        if n:
            self.chain.select(n)

    def remove_stage(self) -> None:
        if self.chain.selected:
            self._guard(self.wb.remove_stage, self.chain.selected)
            self.chain.select(self.chain.selected)

    def duplicate_stage(self) -> None:
        if self.chain.selected:
            n = self._guard(self.wb.duplicate_stage, self.chain.selected)
            if n:
                self.chain.select(n)

    def move_stage(self, delta: int) -> None:
        if self.chain.selected:
            name = self.chain.selected
            self._guard(self.wb.move_stage, name, delta)
            self.chain.select(name)

    def toggle_bypass(self) -> None:
        name = self.chain.selected
        if name:
            self._guard(self.wb.set_bypass, name, not self.wb.design.stage(name).bypass)
            self.chain.select(name)

    def link_dialog(self) -> None:
        ports = [f"{s.name}.{p}" for s in self.wb.design.stages for p in s.ports]
        if len(ports) < 2:
            return
        a, ok = QInputDialog.getItem(self, "Link ports", "from port", ports, 0, False)
        if not ok:
            return
        b, ok = QInputDialog.getItem(self, "Link ports", f"join {a} to", ports, 1, False)
        if ok:
            self._guard(self.wb.add_link, tuple(a.split(".", 1)), tuple(b.split(".", 1)))

    def _recall(self, name: str) -> None:
        self._guard(self.wb.recall_snapshot, name)

    # ------------------------------------------------------------ files
    def _decide(self, question: str) -> str:
        if self.ask is not None:
            return self.ask(question)
        r = QMessageBox.question(
            self, "Unsaved changes", question,
            QMessageBox.StandardButton.Save | QMessageBox.StandardButton.Discard |
            QMessageBox.StandardButton.Cancel, QMessageBox.StandardButton.Save)
        return {QMessageBox.StandardButton.Save: "save",
                QMessageBox.StandardButton.Discard: "discard"}.get(r, "cancel")

    def may_discard(self) -> bool:
        """Ask before unsaved changes are thrown away; True to go on."""
        if not self.wb.dirty:
            return True
        ans = self._decide(f"'{self.wb.design.name}' has unsaved changes. Save them first?")
        if ans == "save":
            return self.save()
        return ans == "discard"

    def open_path(self, path: str | os.PathLike) -> bool:
        if not self.may_discard():
            return False
        try:
            d = load_design(path)
        except SolderlessError as exc:
            self.notices.add(f"Could not open {path}: {exc}", "bad")
            self.say(str(exc))
            return False
        self.autosave.clear(self.wb.design)
        self.set_design(d)
        nl = getattr(d, "netlist", None)
        for w in (nl.warnings if nl is not None else []):
            self.notices.add(w, "warn")
        if d.path and Path(str(path)).exists():
            self.settings.add_recent(d.path)
        return True

    def open_dialog(self) -> None:
        fn, _ = QFileDialog.getOpenFileName(self, "Open design", "",
                                            f"{DESIGN_FILTER};;{NETLIST_FILTER}")
        if fn:
            self.open_path(fn)

    def import_design_dialog(self) -> None:
        fn, _ = QFileDialog.getOpenFileName(self, "Import netlist as design", "",
                                            NETLIST_FILTER)
        if fn:
            self.open_path(fn)

    def import_stage_dialog(self) -> None:
        fn, _ = QFileDialog.getOpenFileName(self, "Import netlist as stage", "",
                                            NETLIST_FILTER)
        if fn:
            n = self._guard(self.wb.import_stage, fn)
            if n:
                self.chain.select(n)

    def _fill_recent(self) -> None:
        self.recent_menu.clear()
        for p in self.settings.data.get("recent", []):
            a = self.recent_menu.addAction(p)
            a.triggered.connect(lambda _c=False, q=p: self.open_path(q))
        if not self.settings.data.get("recent"):
            self.recent_menu.addAction("(none)").setEnabled(False)

    def user_designs_dir(self) -> Path:
        """Where the workbench offers to save new designs and copies of
        built-in ones: ``designs`` in the user's Solderless folder."""
        return self.config / "designs"

    def save(self, path: str | os.PathLike | None = None) -> bool:
        """Save atomically (to the design's own file unless ``path`` is given).
        A built-in design (under solderless/presets/) is read-only: Save becomes Save as,
        offered in the user's designs folder."""
        d = self.wb.design
        target = Path(path) if path else d.path
        if target is not None and is_builtin_path(target):
            if path is None:
                self.say(f"'{d.name}' is a built-in design and stays as it is: "
                         "save your version under a new name")
                return self.save_as_dialog()
            self.notices.add(f"Not saved: {target} is a built-in design (read-only). "
                             "Choose a file of your own (File > Save as).", "bad")
            return False
        if (d.doc is None and getattr(d, "netlist", None) is None) or target is None \
                or target.suffix.lower() != ".toml":
            if path is None:
                return self.save_as_dialog()
            self.say("a design is saved as a .toml file")
            return False
        try:
            d.save(target)
        except (SolderlessError, OSError) as exc:
            self.notices.add(f"Not saved: {exc}. Your work is still open; try another "
                             "folder (File > Save as).", "bad")
            return False
        self.autosave.clear(d)
        self.wb.mark_saved()
        self.settings.add_recent(target)
        self._replaced()
        self.say(f"saved {target}")
        return True

    def _suggest_path(self) -> Path:
        d = self.wb.design
        folder = self.user_designs_dir()
        stem = Path(d.path).stem if d.path else _file_stem(d.name)
        cand = folder / f"{stem}.toml"
        k = 2
        while cand.exists():
            cand = folder / f"{stem}-{k}.toml"
            k += 1
        return cand

    def save_as_dialog(self) -> bool:
        """Ask for a file name (``ask_path(suggested)`` when set, for tests),
        starting in the user's designs folder, and save there."""
        suggested = self._suggest_path()
        try:
            suggested.parent.mkdir(parents=True, exist_ok=True)
        except OSError:
            pass
        if self.ask_path is not None:
            fn = self.ask_path(suggested)
        else:
            fn, _ = QFileDialog.getSaveFileName(self, "Save design as", str(suggested),
                                                DESIGN_FILTER)
        if not fn:
            return False
        fn = str(fn)
        if not fn.endswith(".toml"):
            fn += ".toml"
        return self.save(fn)

    def autosave_now(self) -> Path | None:
        if not self.wb.dirty:
            return None
        try:
            return self.autosave.write(self.wb.design)
        except (SolderlessError, OSError) as exc:
            self.say(f"autosave failed: {exc}")
            return None

    def _check_autosaves(self, policy: str) -> None:
        """Offer autosaves left by workbench sessions that no longer run.
        ``policy``: "ask" (a notice with Open / Discard; ignoring it keeps
        the offer for next time), "yes" (open the newest), "no" (a scripted
        run such as --screenshot: do not even look)."""
        if policy == "no":
            return
        for path in self.autosave.pending():
            rec = self.autosave.recover(path)
            if rec.design is None:
                self.notices.add(rec.message, "warn")
                continue
            if policy == "yes":
                self._adopt(rec)
                policy = "ask"           # the others stay on offer
            else:
                self.notices.add(rec.message.replace(" Save it to keep it.", "")
                                 + " Open it now?", "info",
                                 buttons=[("Open recovered", lambda r=rec: self._adopt(r)),
                                          ("Discard", lambda r=rec: self._discard(r))])

    def _adopt(self, rec) -> None:
        self.set_design(rec.design)
        self.wb.generation += 1          # recovered work is unsaved work
        self._history()
        self.say(rec.message)
        # the old file goes only once the work is autosaved in this session
        if rec.path is not None and self.autosave_now() is not None:
            self.autosave.adopted(rec.path)

    def _discard(self, rec) -> None:
        if rec.path is not None:
            aside = self.autosave.discard(rec.path)
            self.say(f"recovered work discarded (kept as {aside})" if aside else
                     "the autosave could not be moved aside")

    def closeEvent(self, e) -> None:
        if not self.may_discard():
            e.ignore()
            return
        self.stop_live()
        for t in (self.refresh_timer, self.autosave_timer, self.meter_timer, self.dyn_timer):
            t.stop()
        self.analyser.shutdown()
        self.analyser.blockSignals(True)
        self.midi.detach()
        self.autosave.clear(self.wb.design)
        e.accept()

    # ------------------------------------------------------------ live
    def _source(self, spec: str) -> None:
        self.analyser.source = spec
        if self.host is not None:
            self.host.set_source(spec)       # the host process reads the spec itself
        else:
            self.preview()

    def start_live(self, variant=None) -> bool:
        """Start the live host process on a copy of the design (and a
        variant for A/B). Returns at once; the process builds and warms the
        design (a few seconds) while the panel shows that it is starting,
        and edits made meanwhile are queued for it."""
        from solderless.engine.live.remote import HostProcess
        if self.host is not None:
            return True
        paced = self.live_driver == "paced"
        kw = {}
        if self.factory is not None:
            kw["simulator_factory"] = self.factory
        try:
            # the host's copy leaves the TOML document out: the workbench
            # keeps the one document, the host follows the edits it is sent
            host = HostProcess(self.wb.design.copy(document=False), variant,
                               source=self.live.source.currentData(),
                               level_db=(-120.0 if self.live.mute_btn.isChecked()
                                         else self.live.level.value() / 10.0),
                               autosave=False, start=not paced, paced=paced,
                               start_kwargs={"input_device": self.live.dev_in.currentData(),
                                             "output_device": self.live.dev_out.currentData()},
                               wait=False, **kw)
        except (SolderlessError, ImportError, OSError) as exc:
            self._live_refused(exc)
            return False
        self.host = host
        self._live_variant = variant is not None
        self.live.clear_live()
        self.live.state.set("starting the live host …")
        self.meter_timer.start(METER_MS)
        return True

    def _live_refused(self, exc) -> None:
        self.say(f"cannot play live: {exc}")
        self.live.run_btn.blockSignals(True)
        self.live.run_btn.setChecked(False)
        self.live.run_btn.blockSignals(False)

    def wait_live(self, timeout_s: float = 300.0) -> bool:
        """Process events until the live host is running (tests, benches)."""
        import time
        t_end = time.monotonic() + timeout_s
        loop = QEventLoop()
        while time.monotonic() < t_end and self.host is not None:
            loop.processEvents(QEventLoop.ProcessEventsFlag.AllEvents, 20)
            if self.host is not None and self.host.ready:
                return True
            time.sleep(0.01)
        return False

    def stop_live(self) -> None:
        self.meter_timer.stop() if hasattr(self, "meter_timer") else None
        h, self.host = self.host, None
        if hasattr(self, "compare") and self.compare.trial is not None \
                and not self.compare.trial.done and self.blind:
            self.compare.end_trial("playback stopped: trial ended")
        if h is not None:
            h.close()
        if hasattr(self, "live"):
            self.live.stopped()
        if hasattr(self, "live"):
            self.live.run_btn.blockSignals(True)
            self.live.run_btn.setChecked(False)
            self.live.run_btn.blockSignals(False)

    def request_overlay(self, a: str, b: str) -> int:
        """Compute A's and B's curves for the overlay (worker thread)."""
        try:
            da, db = self.compare.design_of(a), self.compare.design_of(b)
        except SolderlessError as exc:
            self.say(str(exc))
            return 0
        return self.analyser.request_overlay(da, db, (a, b))

    def _overlay_ready(self, g, result) -> None:
        self.last_overlay = result
        self.compare.show_overlay(result)

    def set_hiss(self, on: bool) -> None:
        """Switch the design's noise on or off: the SetHiss edit, as the
        console's 'hiss' makes it (undoable; sent to the live host, which
        switches it while playing)."""
        from solderless.engine.design.edits import SetHiss
        self._guard(self.wb.apply, SetHiss(bool(on)))
        self._history()
        if self.host is None:
            self.schedule_refresh()      # the offline preview plays it too

    def _floor_ready(self, g, s) -> None:
        self.last_floor = s
        self.live.show_floor(s)

    def _dyn_ready(self, g, r) -> None:
        self.last_dyn = r
        self.live.show_dynamics(r)

    def add_probe(self, expr: str) -> str | None:
        """Add a probe and show it in the probe trace (a rebuild when live)."""
        name = self._guard(self.wb.add_probe, expr)
        if name:
            self.live.probe_add.clear()
            self.live.want_probe = name
            self.say(f"probe {name} added")
        return name

    # ------------------------------------------------------------ MIDI knobs
    def connect_midi(self, port=None) -> bool:
        """Read knobs from ``port`` (a mido port or stand-in), or open the
        first MIDI input; a missing MIDI system is a message, not a failure."""
        if port is None:
            try:
                port = open_input()
            except SolderlessError as exc:
                self.live.midi_lab.setText("MIDI unavailable")
                self.live.midi_lab.setToolTip(str(exc))
                self.notices.add(f"MIDI knobs: {exc}", "warn")
                self.say(str(exc))
                return False
        self.midi.attach(port)
        self.live.learn_btn.setEnabled(True)
        self._midi_label(getattr(port, "name", "MIDI controller"))
        return True

    def _midi_label(self, name: str | None = None) -> None:
        if name:
            self._midi_port_name = name
        n = len(self.midi.mapping)
        name = getattr(self, "_midi_port_name", "")
        self.live.midi_lab.setText(f"{name}: {n} knob{'s' if n != 1 else ''}" if name
                                   else f"{n} knob{'s' if n != 1 else ''} mapped")
        self.live.midi_lab.setToolTip("\n".join(f"CC {cc} (channel {ch}) → {pot}"
                                                for (ch, cc), pot in self.midi.mapping.items())
                                      or "no knob mapped yet: use Learn")

    def _knob_turn(self, pot: str, rotation: float) -> None:
        if not self.blind:                  # no edits during a blind trial
            self.wb.set_rotation(pot, rotation)

    def _remember_knobs(self, mapping: dict) -> None:
        from solderless.engine.design.edits import SetDocumentTable
        self._guard(self.wb.apply, SetDocumentTable("midi", knob_table(mapping),
                                                    "map MIDI knobs"))

    def _midi_learned(self, *_learned) -> None:
        self.live.learn_btn.blockSignals(True)
        self.live.learn_btn.setChecked(False)
        self.live.learn_btn.blockSignals(False)
        self._midi_label()

    def _trial_ready(self) -> str:
        """'' when a blind trial may start (A and B both playing), else why not."""
        h = self.host
        if h is None or not self._live_variant:
            return "A and B are not playing (Compare: Run A and B)"
        if not h.ready:
            return "the live host is still starting"
        if h.n_voices < 2:
            return "only one side is playing"
        return ""

    def _set_blind(self, on: bool) -> None:
        """Enter or leave blind mode: nothing on screen may tell A from B."""
        self.blind = on
        self.live.set_blind(on)
        # no edits during a trial: the live host applies an edit to the side
        # being heard, which would tell X apart (and the parts list would show it)
        for w in (self.parts, self.chain, self.chain_bar, self.undo_btn, self.redo_btn):
            w.setEnabled(not on)
        for a in (self.undo_act, self.redo_act):
            a.setEnabled(not on)
        if not on:
            self._history()
        self.compare.show_offset(None, hidden=on)
        if on:
            self.statusBar().showMessage("blind trial running: meters, traces and scope "
                                         "are hidden until it ends")
        else:
            self.statusBar().clearMessage()

    def _poll_meters(self) -> None:
        """Meter timer: read meters and scope from the host's shared rings
        and redraw (no round trip to the host process)."""
        h = self.host
        if h is None:
            return
        if not h.ready:
            err = h.start_error
            if err is not None:                  # it could not start
                self.stop_live()
                self._live_refused(err)
            return
        snap = h.meters()
        if self.blind:
            self.live.show_blind(snap)
        else:
            self.live.show_live(snap)
            self.live.redraw_live(h.fs, h.block)
            self.live.show_scope(*h.scope_latest(
                self.live.scope_points(h.info["scope"]["rate"])))
            if h.n_voices > 1:
                self.compare.show_offset(snap.get("loudness_offset_db"))
        h.poll_state()
        while not h.messages.empty():
            m = h.messages.get()
            if not self.blind:          # a voice's message would name the side
                self.say(m)
        if h.error is not None:
            self.say(f"playback stopped: {h.error}")
            self.stop_live()

    def _level(self, db: float) -> None:
        if self.host is not None:
            self.host.post_reported("set_level_db",
                                    -120.0 if self.live.mute_btn.isChecked() else db)

    def _mute(self, on: bool) -> None:
        if self.host is not None:
            self.host.post_reported("set_level_db",
                                    -120.0 if on else self.live.level.value() / 10.0)

    def start_ab(self, a: str, b: str) -> None:
        """Play A and B together (the host matches loudness and crossfades)."""
        da = self.compare.design_of(a)
        db = self.compare.design_of(b)
        if not self.live.run_btn.isEnabled() and self.live_driver != "paced":
            self.analyser.request_ab(da, db)
            self.say("no audio device: A and B are compared offline (loudness match only)")
            return
        self.stop_live()
        wb_design = self.wb.design
        self.wb.design = da
        try:
            ok = self.start_live(variant=db.copy(document=False))
        finally:
            self.wb.design = wb_design
        if ok:
            self.live.run_btn.blockSignals(True)
            self.live.run_btn.setChecked(True)
            self.live.run_btn.blockSignals(False)
            self.say(f"A = {a}, B = {b}: Ctrl+1 / Ctrl+2 to switch")

    def hear(self, which: str) -> None:
        h = self.host
        if h is None or not self._live_variant:
            self.say("run A and B first (Compare tab)")
            return
        if not h.ready:
            self.say("the live host is still starting")
            return
        try:
            h.select(which)
        except SolderlessError as exc:
            self.say(str(exc))
