"""Snapshots and A/B: keep versions of the design with a note, pick two,
switch between them live (loudness-matched and crossfaded by the live host),
run a blind trial, and list exactly what differs, part by part."""
from __future__ import annotations

import time
from pathlib import Path
from typing import Callable

from PyQt6.QtCore import Qt, QTimer, pyqtSignal
from PyQt6.QtGui import QColor
import numpy as np
from PyQt6.QtWidgets import (QButtonGroup, QComboBox, QFileDialog, QTabWidget, QGridLayout, QGroupBox, QHBoxLayout, QHeaderView,
                             QLabel, QLineEdit, QListWidget, QListWidgetItem, QPushButton,
                             QSpinBox, QTableWidget, QTableWidgetItem, QVBoxLayout, QWidget)

from solderless.engine.analysis.trial import MIN_LISTEN_S, BlindTrial, TrialError
from solderless.engine.errors import SolderlessError
from solderless.gui import theme
from solderless.gui.model import Workbench, differences

CURRENT = "(current design)"


class SnapshotPanel(QWidget):
    """Signals: ``ab_requested(a, b)`` to run A and B (snapshot names or
    CURRENT), ``hear(which)`` with 'A', 'B'; ``stop_ab``."""
    ab_requested = pyqtSignal(str, str)
    hear = pyqtSignal(str)
    recall = pyqtSignal(str)
    trial_changed = pyqtSignal(bool)
    overlay_requested = pyqtSignal(str, str)

    def __init__(self, wb: Workbench, message=print, parent=None):
        super().__init__(parent)
        self.wb = wb
        self.message = message
        self.trial: BlindTrial | None = None
        self.can_trial: Callable[[], str] | None = None    # '' when A and B play
        self.ask_path: Callable[[], str | None] | None = None
        self.min_listen_s = MIN_LISTEN_S
        self.clock: Callable[[], float] = time.monotonic
        outer = QVBoxLayout(self)
        outer.setContentsMargins(4, 4, 4, 4)
        lay = QHBoxLayout()
        outer.addLayout(lay, 3)
        # keep
        keep = QGroupBox("KEPT VERSIONS")
        kl = QVBoxLayout(keep)
        self.name = QLineEdit()
        self.name.setPlaceholderText("name, e.g. slower release")
        self.note = QLineEdit()
        self.note.setPlaceholderText("note: what to listen for")
        self.take = QPushButton("Keep current  Ctrl+K")
        self.list = QListWidget()
        self.recall_btn = QPushButton("Recall")
        self.delete_btn = QPushButton("Delete")
        kl.addWidget(self.name)
        kl.addWidget(self.note)
        kl.addWidget(self.take)
        kl.addWidget(self.list, 1)
        row = QHBoxLayout()
        row.addWidget(self.recall_btn)
        row.addWidget(self.delete_btn)
        kl.addLayout(row)
        lay.addWidget(keep, 1)
        # compare
        cmp_ = QGroupBox("A / B")
        cl = QGridLayout(cmp_)
        self.a = QComboBox()
        self.b = QComboBox()
        self.run_ab = QPushButton("Run A and B")
        self.hear_a = QPushButton("A")
        self.hear_b = QPushButton("B")
        for btn in (self.hear_a, self.hear_b):
            btn.setCheckable(True)
            btn.setMinimumWidth(60)
            btn.setStyleSheet("font-size: 14pt; font-weight: bold;")
        self.match = QLabel("loudness offset —")
        self.match.setProperty("role", "read")
        cl.addWidget(QLabel("A"), 0, 0)
        cl.addWidget(self.a, 0, 1)
        cl.addWidget(QLabel("B"), 1, 0)
        cl.addWidget(self.b, 1, 1)
        cl.addWidget(self.run_ab, 2, 0, 1, 2)
        hb = QHBoxLayout()
        hb.addWidget(self.hear_a)
        hb.addWidget(self.hear_b)
        hb.addWidget(self.match, 1)
        cl.addLayout(hb, 3, 0, 1, 2)
        self.diff = QTableWidget(0, 4)
        self.diff.setHorizontalHeaderLabels(["part", "what", "A", "B"])
        self.diff.verticalHeader().setVisible(False)
        self.diff.setEditTriggers(QTableWidget.EditTrigger.NoEditTriggers)
        self.diff.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.Stretch)
        self.diff_label = QLabel("differences")
        self.diff_label.setProperty("role", "dim")
        cl.addWidget(self.diff_label, 4, 0, 1, 2)
        cl.addWidget(self.diff, 5, 0, 1, 2)
        cl.setRowStretch(5, 1)
        lay.addWidget(cmp_, 2)
        # blind
        bl = QGroupBox("BLIND TRIAL")
        bl.setToolTip("X is A or B, chosen at random each round. Nothing on screen says "
                      "which: meters, traces and the scope are hidden while the trial runs "
                      "(the loudness match stays on). Hear X for at least "
                      f"{MIN_LISTEN_S:g} s before answering.")
        bll = QVBoxLayout(bl)
        self.rounds = QSpinBox()
        self.rounds.setRange(4, 100)
        self.rounds.setValue(10)
        self.start_trial = QPushButton("Start trial")
        self.start_trial.setToolTip("needs A and B playing (Run A and B first)")
        self.trial_a = QPushButton("A")
        self.trial_b = QPushButton("B")
        self.play_x = QPushButton("X")
        self.trial_btns = QButtonGroup(self)
        self.trial_btns.setExclusive(False)
        for btn, tip in ((self.trial_a, "hear A (known)"), (self.trial_b, "hear B (known)"),
                         (self.play_x, "hear X (the unknown)")):
            btn.setCheckable(True)
            btn.setToolTip(tip)
            self.trial_btns.addButton(btn)
        self.say_a = QPushButton("X is A")
        self.say_b = QPushButton("X is B")
        self.export_btn = QPushButton("Export log…")
        self.export_btn.setToolTip("write the trial's log (time, round, what was hidden, "
                                   "answer, listening time), score and probability as CSV")
        self.result = QLabel("—")
        self.result.setWordWrap(True)
        self.result.setProperty("role", "read")
        self.heard = QLabel("")
        self.heard.setProperty("role", "dim")
        rr = QHBoxLayout()
        rr.addWidget(QLabel("rounds"))
        rr.addWidget(self.rounds)
        bll.addLayout(rr)
        bll.addWidget(self.start_trial)
        hx = QHBoxLayout()
        for btn in (self.trial_a, self.trial_b, self.play_x):
            hx.addWidget(btn)
        bll.addLayout(hx)
        ab = QHBoxLayout()
        ab.addWidget(self.say_a)
        ab.addWidget(self.say_b)
        bll.addLayout(ab)
        bll.addWidget(self.heard)
        bll.addWidget(self.result, 1)
        bll.addWidget(self.export_btn)
        lay.addWidget(bl, 1)
        # overlay
        ov = QGroupBox("OVERLAY — A AGAINST B")
        ovl = QVBoxLayout(ov)
        orow = QHBoxLayout()
        self.overlay_btn = QPushButton("Overlay A and B")
        self.overlay_btn.setToolTip("frequency response and input impedance (small-signal "
                                    "analysis), gain reduction and control current through "
                                    "a tone burst, of A and B on the same axes")
        self.overlay_note = QLabel("A: solid amber line, B: dashed cyan line")
        self.overlay_note.setProperty("role", "dim")
        orow.addWidget(self.overlay_btn)
        orow.addWidget(self.overlay_note, 1)
        ovl.addLayout(orow)
        self.overlay_tabs = QTabWidget()
        self.overlay_plots = {}
        import pyqtgraph as pg
        for key, title, left, logx, logy in (
                ("gain", "frequency response", "gain (dB)", True, False),
                ("zin", "input impedance", "input impedance (Ω)", True, True),
                ("gr", "gain reduction", "gain reduction (dB)", False, False),
                ("ctl", "control", "control", False, False)):
            pw = pg.PlotWidget()
            pw.setLogMode(x=logx, y=logy)
            pw.showGrid(x=True, y=True, alpha=0.25)
            pw.setLabel("left", left)
            pw.setLabel("bottom", "frequency (Hz)" if logx else "time (s)")
            for ax in ("left", "bottom"):
                pw.getAxis(ax).enableAutoSIPrefix(False)
            pw.addLegend(offset=(-10, 10))
            if logx:
                from solderless.gui.inspect import frequency_ticks
                frequency_ticks(pw)
            pw.setMinimumHeight(150)
            self.overlay_plots[key] = pw
            self.overlay_tabs.addTab(pw, title)
        ovl.addWidget(self.overlay_tabs, 1)
        outer.addWidget(ov, 2)
        self.overlay = None
        self.overlay_btn.clicked.connect(
            lambda: self.overlay_requested.emit(self.a.currentText(), self.b.currentText()))
        self.listen_timer = QTimer(self)
        self.listen_timer.timeout.connect(self._show_heard)
        self.trial_a.clicked.connect(lambda: self._trial_hear("A"))
        self.trial_b.clicked.connect(lambda: self._trial_hear("B"))
        self.export_btn.clicked.connect(self.export_dialog)
        # wiring
        self.take.clicked.connect(self.keep_current)
        self.recall_btn.clicked.connect(self._recall)
        self.delete_btn.clicked.connect(self._delete)
        self.a.currentTextChanged.connect(lambda _t: self.refresh_diff())
        self.b.currentTextChanged.connect(lambda _t: self.refresh_diff())
        self.run_ab.clicked.connect(lambda: self.ab_requested.emit(self.a.currentText(),
                                                                   self.b.currentText()))
        self.hear_a.clicked.connect(lambda: self._hear("A"))
        self.hear_b.clicked.connect(lambda: self._hear("B"))
        self.start_trial.clicked.connect(self._start_or_stop)
        self.play_x.clicked.connect(self._hear_x)
        self.say_a.clicked.connect(lambda: self.answer("A"))
        self.say_b.clicked.connect(lambda: self.answer("B"))
        self._trial_controls(False)
        self.export_btn.setEnabled(False)
        wb.snapshots_changed.connect(self.refresh)
        wb.design_replaced.connect(self.refresh_diff)
        wb.part_changed.connect(self._part_changed)
        self.refresh()

    # ------------------------------------------------------------ keeping
    def keep_current(self) -> None:
        try:
            s = self.wb.take_snapshot(self.name.text(), self.note.text())
        except SolderlessError as exc:
            self.message(str(exc))
            return
        self.name.clear()
        self.note.clear()
        self.message(f"kept '{s.name}'")

    def _selected(self) -> str | None:
        it = self.list.currentItem()
        return it.data(Qt.ItemDataRole.UserRole) if it else None

    def _recall(self) -> None:
        n = self._selected()
        if n:
            self.recall.emit(n)

    def _delete(self) -> None:
        n = self._selected()
        if n:
            self.wb.delete_snapshot(n)

    def refresh(self) -> None:
        self.list.clear()
        for s in self.wb.snapshots:
            it = QListWidgetItem(f"{s.name}" + (f" — {s.note}" if s.note else ""))
            it.setData(Qt.ItemDataRole.UserRole, s.name)
            self.list.addItem(it)
        names = [CURRENT] + [s.name for s in self.wb.snapshots]
        for combo, default in ((self.a, 1), (self.b, 0)):
            keep = combo.currentText()
            combo.blockSignals(True)
            combo.clear()
            combo.addItems(names)
            if keep in names:
                combo.setCurrentText(keep)
            else:
                combo.setCurrentIndex(min(default, len(names) - 1))
            combo.blockSignals(False)
        self.refresh_diff()

    def design_of(self, name: str):
        return self.wb.design if name == CURRENT else self.wb.snapshot(name).design

    def _part_changed(self, _qualname: str) -> None:
        self.refresh_diff()

    def refresh_diff(self) -> None:
        try:
            da, db = self.design_of(self.a.currentText()), self.design_of(self.b.currentText())
        except SolderlessError:
            return
        diffs = differences(da, db)
        self.diff.setRowCount(len(diffs))
        for i, d in enumerate(diffs):
            for j, t in enumerate((d.what, d.field, d.a, d.b)):
                it = QTableWidgetItem(t)
                if j >= 2:
                    it.setForeground(QColor(theme.SET if j == 2 else theme.READ))
                self.diff.setItem(i, j, it)
        self.diff_label.setText(f"{len(diffs)} difference{'s' if len(diffs) != 1 else ''} "
                                f"between A and B" if diffs else "A and B are identical")

    # ------------------------------------------------------------ listening
    def _hear(self, which: str) -> None:
        self.hear_a.setChecked(which == "A")
        self.hear_b.setChecked(which == "B")
        self.hear.emit(which)

    def show_overlay(self, result) -> None:
        """Draw A and B (two :class:`solderless.engine.analysis.preview.Traces`)
        on the overlay plots: A solid amber, B dashed cyan, each named in the
        legend."""
        import pyqtgraph as pg
        self.overlay = result
        pens = (pg.mkPen(theme.SET, width=2),
                pg.mkPen(theme.READ, width=2, style=Qt.PenStyle.DashLine))
        for pw in self.overlay_plots.values():
            pw.clear()
            if pw.plotItem.legend is not None:
                pw.plotItem.legend.clear()
        has_dyn = False
        for side, tr, pen in zip("AB", result, pens):
            label = f"{side}: {tr.name}"
            if tr.ac is not None:
                mag = np.abs(tr.ac.H)
                self.overlay_plots["gain"].plot(
                    tr.ac.f, 20 * np.log10(np.maximum(mag, 1e-12)), pen=pen, name=label)
                self.overlay_plots["zin"].plot(tr.ac.f, np.maximum(np.abs(tr.ac.zin), 1e-3),
                                               pen=pen, name=label)
            if tr.t is not None:
                has_dyn = True
                self.overlay_plots["gr"].plot(tr.t, tr.gr_db, pen=pen, name=label)
                self.overlay_plots["ctl"].plot(tr.t, tr.control, pen=pen, name=label)
                self.overlay_plots["ctl"].setLabel("left", f"control ({tr.control_unit})")
        for key in ("gr", "ctl"):
            i = self.overlay_tabs.indexOf(self.overlay_plots[key])
            self.overlay_tabs.setTabEnabled(i, has_dyn)
            self.overlay_tabs.setTabToolTip(
                i, "" if has_dyn else "neither design declares a gain-cell control")
        self.overlay_note.setText(f"A: {result[0].name} (solid amber)   "
                                  f"B: {result[1].name} (dashed cyan)")

    def show_offset(self, db: float | None, hidden: bool = False) -> None:
        if hidden:
            self.match.setText("loudness matched (offset hidden during the trial)")
            return
        self.match.setText("loudness offset —" if db is None
                           else f"loudness offset {db:+.1f} LU (A − B)")

    def _trial_controls(self, on: bool) -> None:
        for w in (self.trial_a, self.trial_b, self.play_x, self.say_a, self.say_b):
            w.setEnabled(on)
            if w.isCheckable():
                w.setChecked(False)
        for w in (self.hear_a, self.hear_b, self.run_ab, self.a, self.b, self.rounds):
            w.setEnabled(not on)
        self.start_trial.setText("Stop trial" if on else "Start trial")

    def _start_or_stop(self) -> None:
        if self.trial is not None and not self.trial.done:
            self.end_trial("trial stopped")
        else:
            self.begin_trial()

    def begin_trial(self) -> bool:
        """Start a trial; refused unless A and B are both playing
        (``can_trial()`` returns '' or the reason)."""
        why = self.can_trial() if self.can_trial is not None else "A and B are not playing"
        if why:
            self.result.setText(f"cannot start the trial: {why}")
            self.message(f"cannot start the trial: {why}")
            return False
        self.trial = BlindTrial(self.rounds.value(), min_listen_s=self.min_listen_s,
                                clock=self.clock)
        self._trial_controls(True)
        self.export_btn.setEnabled(False)
        self.trial_changed.emit(True)
        self.result.setText(f"round 1 of {self.trial.rounds}: hear X, then answer")
        self._show_heard()
        self.listen_timer.start(200)
        return True

    def end_trial(self, why: str = "") -> None:
        t = self.trial
        if t is None:
            return
        t.listen_stop()
        self.listen_timer.stop()
        self._trial_controls(False)
        self.export_btn.setEnabled(bool(t.log))
        self.trial_changed.emit(False)
        n = len(t.log)
        head = (why + ". ") if why else ""
        self.result.setText(
            head + f"score {t.score} of {n}. Probability of scoring at least this well "
            f"by guessing: {t.p_value():.3f}"
            + (" — a real difference is likely heard." if t.p_value() < 0.05 else
               " — not distinguishable from guessing."))
        self.heard.setText("")

    def _trial_hear(self, which: str) -> None:
        t = self.trial
        if t is None or t.done:
            return
        t.listen_stop()
        self.trial_a.setChecked(which == "A")
        self.trial_b.setChecked(which == "B")
        self.play_x.setChecked(False)
        self.hear.emit(which)

    def _hear_x(self) -> None:
        t = self.trial
        if t is None or t.done:
            return
        self.trial_a.setChecked(False)
        self.trial_b.setChecked(False)
        self.play_x.setChecked(True)
        self.hear.emit(t.hidden)
        t.listen_start()

    def _show_heard(self) -> None:
        t = self.trial
        if t is None or t.done:
            return
        self.heard.setText(f"X heard {t.listened():.1f} s of {t.min_listen_s:g} s")

    def answer(self, guess: str) -> bool:
        t = self.trial
        if t is None or t.done:
            return False
        try:
            t.answer(guess)
        except TrialError as exc:
            self.message(str(exc))
            self.result.setText(str(exc))
            return False
        n = len(t.log)
        if t.done:
            self.end_trial()
        else:
            for w in (self.trial_a, self.trial_b, self.play_x):
                w.setChecked(False)
            # the score stays hidden until the end, so it cannot steer the answers
            self.result.setText(f"round {n + 1} of {t.rounds}: hear X, then answer "
                                f"({n} answered)")
            self._show_heard()
        return True

    def export_log(self, path) -> Path:
        """Write the last trial's log as CSV (atomically)."""
        from solderless.engine.design import atomic_write_text
        if self.trial is None or not self.trial.log:
            raise TrialError("no trial has been answered yet")
        target = Path(path)
        atomic_write_text(target, self.trial.csv_text(self.a.currentText(),
                                                      self.b.currentText()))
        return target

    def export_dialog(self) -> None:
        if self.ask_path is not None:
            fn = self.ask_path()
        else:
            fn, _ = QFileDialog.getSaveFileName(self, "Export trial log", "blind-trial.csv",
                                                "CSV (*.csv)")
        if not fn:
            return
        try:
            p = self.export_log(fn)
        except (SolderlessError, OSError) as exc:
            self.message(f"log not written: {exc}")
            return
        self.message(f"trial log written to {p}")
