"""The parts of the selected stage: one row per part, made for playing.

* values typed in engineering notation or IEC 60062 marking (``4k7``,
  ``100n``), checked on every keystroke (red when unreadable) and applied on
  Enter; Up/Down arrows walk the chosen E-series (IEC 60063), Shift+Up/Down
  nudge by 1 %;
* a snap button showing the nearest standard value and how far the typed
  value is from it;
* tolerance;
* pots as rotary controls with the rotation and both resulting resistances,
  a taper selector and a small plot of the law; a custom law is a few
  draggable points, heard as soon as a point is dropped;
* selector switches as a row of position buttons.

Rows hold only a part's qualified name and read everything else from the
workbench's current design, so undo and snapshot recall just refresh them.
"""
from __future__ import annotations

from PyQt6.QtCore import Qt, pyqtSignal
from PyQt6.QtGui import QKeyEvent
from PyQt6.QtWidgets import (QButtonGroup, QComboBox, QDial, QFrame, QGridLayout,
                             QHBoxLayout, QLabel, QLineEdit, QPushButton, QScrollArea,
                             QToolButton, QVBoxLayout, QWidget)

from solderless.engine.design import DEVICE_TYPES, taper_fraction
from solderless.engine.errors import SolderlessError
from solderless.engine.values import (format_value, nearest_preferred, parse_tolerance,
                           parse_value, preferred_deviation, step_preferred,
                           stepping_series)
from solderless.gui import theme
from solderless.gui.model import Workbench, taper_text

SERIES = ("E12", "E24", "E96")
TAPER_CHOICES = [("linear", "linear"), ("audio", "audio"),
                 ("reverse-audio", "reverse audio"), ("custom", "custom law")]


def step_pot_value(value: float, steps: int) -> float:
    """The track value ``steps`` places up (or down) the pots' series."""
    return step_preferred(value, stepping_series("pot"), steps)


NUDGE = 0.01            # Shift+arrow: 1 %
ROT_STEP = 0.01         # arrow on a pot dial: 1 % of rotation


def _set_prop(w, name, value):
    w.setProperty(name, value)
    w.style().unpolish(w)
    w.style().polish(w)


class ValueEdit(QLineEdit):
    """A value field: validates as you type, applies on Enter or focus-out,
    steps through a preferred-value series with the arrow keys."""
    committed = pyqtSignal(float)
    stepped = pyqtSignal(int)
    nudged = pyqtSignal(float)

    def __init__(self, unit: str, parent=None):
        super().__init__(parent)
        self.unit = unit
        self.setProperty("role", "value")
        self.setMaximumWidth(110)
        self.setMinimumWidth(80)
        self.textEdited.connect(self._check)
        self.returnPressed.connect(self._commit)
        self.parsed: float | None = None
        self.error = ""

    def show_value(self, x: float | None) -> None:
        if not self.hasFocus() or not self.isModified():
            self.setText("" if x is None else format_value(x, self.unit))
            self.setModified(False)
            self._check(self.text())

    def _check(self, text: str) -> None:
        try:
            self.parsed = parse_value(text)
            self.error = ""
        except SolderlessError as exc:
            self.parsed = None
            self.error = exc.message + (f" ({exc.hint})" if exc.hint else "")
        _set_prop(self, "valid", "true" if self.parsed is not None else "false")
        self.setToolTip(self.error or "Enter applies; Up/Down steps the E-series; "
                        "Shift+Up/Down nudges 1 %")

    def _commit(self) -> None:
        if self.parsed is not None:
            self.setModified(False)
            self.committed.emit(self.parsed)

    def focusOutEvent(self, e):
        if self.isModified():
            self._commit()
        super().focusOutEvent(e)

    def keyPressEvent(self, e: QKeyEvent) -> None:
        k = e.key()
        if k in (Qt.Key.Key_Up, Qt.Key.Key_Down):
            sign = 1 if k == Qt.Key.Key_Up else -1
            if e.modifiers() & Qt.KeyboardModifier.ShiftModifier:
                self.nudged.emit(1.0 + sign * NUDGE)
            else:
                self.stepped.emit(sign)
            return
        if k == Qt.Key.Key_Escape:
            self.setModified(False)
            self.clearFocus()
            return
        super().keyPressEvent(e)


class PartRow(QFrame):
    """Base row: name, type and the part's note as tooltip."""

    def __init__(self, wb: Workbench, qualname: str, parent=None):
        super().__init__(parent)
        self.wb = wb
        self.q = qualname
        self.setFrameShape(QFrame.Shape.StyledPanel)
        self.setStyleSheet(f"PartRow {{ background: {theme.PANEL}; border: 1px solid "
                           f"{theme.RULE}; border-radius: 5px; }}")
        self.grid = QGridLayout(self)
        self.grid.setContentsMargins(8, 4, 8, 4)
        self.grid.setHorizontalSpacing(8)
        info = self.info()
        self.name = QLabel(info.name)
        self.name.setStyleSheet(f"color: {theme.SET}; font-weight: bold; font-size: 11pt;")
        self.name.setMinimumWidth(64)
        self.kind = QLabel(info.type)
        self.kind.setProperty("role", "dim")
        self.grid.addWidget(self.name, 0, 0)
        self.grid.addWidget(self.kind, 1, 0)
        if info.note:
            self.setToolTip(info.note)
        self.message = print

    def info(self):
        for p in self.wb.design.parts():
            if p.qualname == self.q:
                return p
        raise KeyError(self.q)

    def part(self):
        return self.wb.design.part(self.q)

    def guard(self, fn, *a):
        """Run an edit; show a user mistake in the status line instead of raising."""
        try:
            return fn(*a)
        except SolderlessError as exc:
            self.message(str(exc))
            self.refresh()
            return None

    def refresh(self) -> None:
        pass


class ValueRow(PartRow):
    """A resistor, capacitor, inductor, source: value, series, step, snap, tolerance."""

    def __init__(self, wb, q, parent=None):
        super().__init__(wb, q, parent)
        info = self.info()
        self.edit = ValueEdit(info.unit)
        self.unit = QLabel(info.unit)
        self.unit.setProperty("role", "dim")
        self.series = QComboBox()
        self.series.addItems(SERIES)
        self.series.setCurrentText(stepping_series(info.type))
        self.series.setToolTip("preferred-value series (IEC 60063) for stepping and snapping")
        self.down = QToolButton(text="◂")
        self.up = QToolButton(text="▸")
        self.down.setToolTip("one value down the series")
        self.up.setToolTip("one value up the series")
        self.snap = QPushButton()
        self.snap.setToolTip("snap to the nearest standard value")
        self.tol = QLineEdit()
        self.tol.setMaximumWidth(56)
        self.tol.setPlaceholderText("tol")
        self.tol.setToolTip("tolerance, e.g. 5% or J")
        val = QHBoxLayout()
        val.setSpacing(4)
        for w in (self.edit, self.unit, self.down, self.up, self.series):
            val.addWidget(w)
        val.addStretch(1)
        self.grid.addLayout(val, 0, 1)
        low = QHBoxLayout()
        low.setSpacing(6)
        low.addWidget(self.snap)
        low.addWidget(QLabel("±"))
        low.addWidget(self.tol)
        low.addStretch(1)
        self.grid.addLayout(low, 1, 1)
        self.grid.setColumnStretch(1, 1)
        positive = info.type in ("resistor", "capacitor", "inductor")
        for w in (self.series, self.down, self.up, self.snap):
            w.setVisible(positive)
        self.tol.setVisible(positive)
        self.edit.committed.connect(lambda v: self.guard(self.wb.set_value, self.q, v))
        self.edit.stepped.connect(self.step)
        self.edit.nudged.connect(self.nudge)
        self.down.clicked.connect(lambda: self.step(-1))
        self.up.clicked.connect(lambda: self.step(+1))
        self.snap.clicked.connect(self.do_snap)
        self.series.currentTextChanged.connect(lambda _t: self.refresh())
        self.tol.editingFinished.connect(self.set_tol)
        self.refresh()

    def step(self, steps: int) -> None:
        v = self.info().value
        if v and v > 0:
            self.guard(self.wb.set_value, self.q,
                       step_preferred(v, self.series.currentText(), steps))

    def nudge(self, factor: float) -> None:
        v = self.info().value
        if v is not None:
            self.guard(self.wb.set_value, self.q, v * factor)

    def do_snap(self) -> None:
        v = self.info().value
        if v and v > 0:
            self.guard(self.wb.set_value, self.q, nearest_preferred(v, self.series.currentText()))

    def set_tol(self) -> None:
        t = self.tol.text().strip()
        try:
            tol = parse_tolerance(t) if t else None
        except SolderlessError as exc:
            self.message(str(exc))
            return
        if tol != self.info().tolerance:
            self.guard(self.wb.set_tolerance, self.q, tol)

    def refresh(self) -> None:
        info = self.info()
        self.edit.show_value(info.value)
        if info.value and info.value > 0 and self.snap.isVisible() or \
                (info.value and info.value > 0 and not self.snap.isHidden()):
            ser = self.series.currentText()
            near = nearest_preferred(info.value, ser)
            dev = preferred_deviation(info.value, ser)
            if abs(dev) < 1e-9:
                self.snap.setText(f"on {ser}")
                self.snap.setEnabled(False)
            else:
                self.snap.setText(f"⇥ {format_value(near, info.unit)}  ({100 * dev:+.1f} %)")
                self.snap.setEnabled(True)
        if not self.tol.hasFocus():
            self.tol.setText("" if info.tolerance is None else f"{info.tolerance * 100:g}%")


class TaperPlot(QWidget):
    """A small plot of a pot's law (fraction of the track a-wiper against
    rotation) with a marker at the current rotation; in custom mode the law's
    points can be dragged."""
    law_edited = pyqtSignal(list)

    def __init__(self, parent=None):
        super().__init__(parent)
        import pyqtgraph as pg
        lay = QVBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        self.pw = pg.PlotWidget()
        self.pw.setFixedSize(150, 105)
        self.pw.setMouseEnabled(False, False)
        self.pw.hideButtons()
        self.pw.setXRange(0, 1, padding=0.04)
        self.pw.setYRange(0, 1, padding=0.04)
        for ax in ("left", "bottom"):
            self.pw.getAxis(ax).setStyle(tickLength=-3, showValues=False)
        self.pw.getPlotItem().setMenuEnabled(False)
        lay.addWidget(self.pw)
        self.curve = self.pw.plot(pen=pg.mkPen(theme.SET, width=2))
        self.marker = pg.ScatterPlotItem(size=9, brush=pg.mkBrush(theme.READ), pen=None)
        self.pw.addItem(self.marker)
        self.handles: list = []
        self._pg = pg

    def show_law(self, taper, rotation: float) -> None:
        rs = [i / 48 for i in range(49)]
        self.curve.setData(rs, [taper_fraction(taper, r) for r in rs])
        self.marker.setData([rotation], [taper_fraction(taper, rotation)])
        custom = not isinstance(taper, str)
        pts = taper if custom else []
        if [tuple(h.pos()) for h in self.handles] != [tuple(p) for p in pts] or \
                len(self.handles) != len(pts):
            for h in self.handles:
                self.pw.removeItem(h)
            self.handles = []
            for r, f in pts:
                h = self._pg.TargetItem(pos=(r, f), size=9, movable=True,
                                        pen=self._pg.mkPen(theme.SET),
                                        brush=self._pg.mkBrush(theme.CASE))
                h.sigPositionChangeFinished.connect(self._dropped)
                self.pw.addItem(h)
                self.handles.append(h)

    def _dropped(self, _item=None) -> None:
        pts = []
        n = len(self.handles)
        for i, h in enumerate(self.handles):
            x, y = h.pos().x(), h.pos().y()
            x = 0.0 if i == 0 else 1.0 if i == n - 1 else min(max(x, 0.0), 1.0)
            y = min(max(y, 0.0), 1.0)
            pts.append([x, y])
        # keep the points in rising rotation order (a dragged point cannot pass another)
        for i in range(1, n):
            if pts[i][0] <= pts[i - 1][0]:
                pts[i][0] = min(1.0, pts[i - 1][0] + 1e-3)
        self.law_edited.emit(pts)


class PotDial(QDial):
    """A rotary control 0..1000 (per mille of rotation); arrows nudge 1 %."""

    def __init__(self, parent=None):
        super().__init__(parent)
        self.setRange(0, 1000)
        self.setSingleStep(int(ROT_STEP * 1000))
        self.setPageStep(100)
        self.setNotchesVisible(True)
        self.setNotchTarget(8.0)
        self.setWrapping(False)
        self.setFixedSize(72, 72)
        self.setFocusPolicy(Qt.FocusPolicy.StrongFocus)


class PotRow(PartRow):
    """A pot: dial, rotation, the two resistances, total value, taper and law."""

    def __init__(self, wb, q, parent=None):
        super().__init__(wb, q, parent)
        self.dial = PotDial()
        self.dial.setToolTip("turn the pot; arrows nudge 1 %, PgUp/PgDn 10 %")
        self.rot = QLabel()
        self.rot.setProperty("role", "big")
        self.ra = QLabel()
        self.rb = QLabel()
        for w in (self.ra, self.rb):
            w.setProperty("role", "read")
        self.total = ValueEdit("Ω")
        self.taper = QComboBox()
        for key, label in TAPER_CHOICES:
            self.taper.addItem(label, key)
        self.plot = TaperPlot()
        mid = QVBoxLayout()
        mid.setSpacing(2)
        top = QHBoxLayout()
        top.addWidget(self.rot)
        top.addStretch(1)
        mid.addLayout(top)
        mid.addWidget(self.ra)
        mid.addWidget(self.rb)
        tv = QHBoxLayout()
        tv.addWidget(QLabel("track"))
        tv.addWidget(self.total)
        tv.addStretch(1)
        mid.addLayout(tv)
        mid.addWidget(self.taper)
        self.grid.addWidget(self.dial, 0, 1, 2, 1)
        self.grid.addLayout(mid, 0, 2, 2, 1)
        self.grid.addWidget(self.plot, 0, 3, 2, 1)
        self.grid.setColumnStretch(2, 1)
        self.dial.valueChanged.connect(self._turned)
        self.total.committed.connect(lambda v: self.guard(self.wb.set_value, self.q, v))
        self.total.stepped.connect(lambda s: self.guard(
            self.wb.set_value, self.q, step_pot_value(self.info().value, s)))
        self.total.setToolTip("track value; Up/Down steps through the values pots are made "
                              "in (10k, 20k, 25k, 50k, 100k ...)")
        self.taper.activated.connect(self._taper_chosen)
        self.plot.law_edited.connect(lambda pts: self.guard(self.wb.set_taper, self.q, pts))
        self._quiet = False
        self.refresh()

    def _turned(self, v: int) -> None:
        if not self._quiet:
            self.guard(self.wb.set_rotation, self.q, v / 1000.0)

    def _taper_chosen(self, _i: int) -> None:
        key = self.taper.currentData()
        info = self.info()
        if key == "custom":
            if not isinstance(info.taper, str):
                return
            law = [[r, round(taper_fraction(info.taper, r), 4)] for r in (0, .25, .5, .75, 1)]
            self.guard(self.wb.set_taper, self.q, law)
        elif key != info.taper:
            self.guard(self.wb.set_taper, self.q, key)

    def refresh(self) -> None:
        info = self.info()
        part = self.part()
        self._quiet = True
        self.dial.setValue(int(round(info.rotation * 1000)))
        self._quiet = False
        self.rot.setText(f"{100 * info.rotation:5.1f} %")
        ra, rb = self.wb.design.pot_resistances(part)
        self.ra.setText(f"a–w {format_value(ra, 'Ω', style='eng')}")
        self.rb.setText(f"w–b {format_value(rb, 'Ω', style='eng')}")
        self.total.show_value(info.value)
        key = info.taper if isinstance(info.taper, str) else "custom"
        self.taper.setCurrentIndex(self.taper.findData(key))
        self.taper.setToolTip(taper_text(info.taper))
        self.plot.show_law(info.taper, info.rotation)


class SwitchRow(PartRow):
    """A selector switch: one button per position."""

    def __init__(self, wb, q, parent=None):
        super().__init__(wb, q, parent)
        info = self.info()
        box = QHBoxLayout()
        box.setSpacing(2)
        self.group = QButtonGroup(self)
        self.group.setExclusive(True)
        for i, lab in enumerate(info.labels):
            b = QPushButton(lab)
            b.setCheckable(True)
            b.setToolTip(f"position {i}: " + ", ".join(self.part().positions[i]))
            self.group.addButton(b, i)
            box.addWidget(b)
        box.addStretch(1)
        self.grid.addLayout(box, 0, 1, 2, 1)
        self.grid.setColumnStretch(1, 1)
        self.group.idClicked.connect(lambda i: self.guard(self.wb.set_position, self.q, i))
        self.refresh()

    def refresh(self) -> None:
        b = self.group.button(self.info().position or 0)
        if b is not None:
            b.setChecked(True)


def device_models(design, part_type: str) -> list[str]:
    """Library models a device part may take (empty when the engine cannot
    swap models)."""
    try:
        from solderless.engine.design import MODEL_KIND, models_of_kind
    except ImportError:
        return []
    if not hasattr(design, "set_model") or part_type not in MODEL_KIND:
        return []
    try:
        return list(models_of_kind(design, MODEL_KIND[part_type]))
    except SolderlessError:
        return []


class DeviceRow(PartRow):
    """A semiconductor or macromodel: its model (a choice of the library's
    models of the same kind, e.g. to swap clipping diodes or a transistor)."""

    def __init__(self, wb, q, parent=None):
        super().__init__(wb, q, parent)
        info = self.info()
        self.models = device_models(wb.design, info.type)
        if self.models:
            self.model = QComboBox()
            self.model.addItems(self.models)
            self.model.setToolTip("the part's device model (parts library); choosing another "
                                  "rebuilds the circuit with it")
            self.model.activated.connect(
                lambda _i: self.guard(self.wb.set_model, self.q, self.model.currentText()))
            m = self.model
        else:
            m = QLabel(f"model {info.model or '—'}")
            m.setProperty("role", "read")
            self.model = None
        params = self.part().params
        p = QLabel("  ".join(f"{k}={v:g}" for k, v in params.items()
                             if isinstance(v, (int, float)))[:90])
        p.setProperty("role", "dim")
        self.grid.addWidget(m, 0, 1)
        self.grid.addWidget(p, 1, 1)
        self.grid.setColumnStretch(1, 1)
        self.refresh()

    def refresh(self) -> None:
        if self.model is not None:
            cur = self.part().model
            self.model.blockSignals(True)
            if self.model.findText(cur) < 0:
                self.model.addItem(cur)
            self.model.setCurrentText(cur)
            self.model.blockSignals(False)


def make_row(wb: Workbench, info) -> PartRow:
    if info.type == "pot":
        return PotRow(wb, info.qualname)
    if info.type == "switch":
        return SwitchRow(wb, info.qualname)
    if info.type in DEVICE_TYPES:
        return DeviceRow(wb, info.qualname)
    return ValueRow(wb, info.qualname)


class PartsPanel(QScrollArea):
    """All parts of one stage (or the design-level parts when stage is '')."""

    def __init__(self, wb: Workbench, message=print, parent=None):
        super().__init__(parent)
        self.wb = wb
        self.message = message
        self.stage: str | None = None
        self.rows: dict[str, PartRow] = {}
        self.setWidgetResizable(True)
        self.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        self.body = QWidget()
        self.lay = QVBoxLayout(self.body)
        self.lay.setContentsMargins(4, 4, 4, 4)
        self.lay.setSpacing(4)
        self.setWidget(self.body)
        self.header = QLabel()
        self.header.setStyleSheet(f"color: {theme.TEXT}; font-size: 12pt; font-weight: bold;")
        self.sub = QLabel()
        self.sub.setProperty("role", "dim")
        self.sub.setWordWrap(True)
        wb.part_changed.connect(self._part_changed)
        wb.design_replaced.connect(self._replaced)

    def show_stage(self, stage: str | None) -> None:
        self.stage = stage
        self._rebuild()

    def _replaced(self) -> None:
        names = {s.name for s in self.wb.design.stages}
        if self.stage and self.stage not in names:
            self.stage = self.wb.design.stages[0].name if self.wb.design.stages else None
        self._rebuild()

    def _rebuild(self) -> None:
        while self.lay.count():
            it = self.lay.takeAt(0)
            w = it.widget()
            if w is not None and w not in (self.header, self.sub):
                w.hide()
                w.setParent(None)
                w.deleteLater()
        self.rows = {}
        d = self.wb.design
        if self.stage:
            st = d.stage(self.stage)
            self.header.setText(f"{st.name}   ·   {st.kind or 'stage'}"
                                + ("   ·   BYPASSED" if st.bypass else ""))
            self.sub.setText((st.notes or "").strip().replace("\n", " ")[:400])
        else:
            self.header.setText("design parts")
            self.sub.setText("supplies and parts shared by all stages")
        self.lay.addWidget(self.header)
        self.lay.addWidget(self.sub)
        want = self.stage or ""
        for info in d.parts():
            if info.stage == want:
                row = make_row(self.wb, info)
                row.message = self.message
                self.rows[info.qualname] = row
                self.lay.addWidget(row)
        self.lay.addStretch(1)

    def _part_changed(self, q: str) -> None:
        row = self.rows.get(q)
        if row is not None:
            try:
                row.refresh()
            except KeyError:
                self._rebuild()
