"""Snapshots and A/B: keep versions of the design with a note, pick two,
switch between them live (loudness-matched and crossfaded by the live host),
run a blind trial, and list exactly what differs, part by part."""
from __future__ import annotations

import random
from dataclasses import dataclass, field

from PyQt6.QtCore import Qt, pyqtSignal
from PyQt6.QtGui import QColor
from PyQt6.QtWidgets import (QComboBox, QGridLayout, QGroupBox, QHBoxLayout, QHeaderView,
                             QLabel, QLineEdit, QListWidget, QListWidgetItem, QPushButton,
                             QSpinBox, QTableWidget, QTableWidgetItem, QVBoxLayout, QWidget)

from engine.errors import SolderlessError
from gui import theme
from gui.model import Workbench, differences

CURRENT = "(current design)"


@dataclass
class BlindTrial:
    """A blind comparison: each round hides A or B behind 'X'; the listener
    says which it is. The score's p-value is the probability of doing at
    least as well by guessing (one-sided exact binomial test,
    ``scipy.stats.binomtest`` with p = 0.5)."""
    rounds: int = 10
    seed: int | None = None
    answers: list[tuple[str, str]] = field(default_factory=list)   # (hidden, guess)
    hidden: str = ""

    def __post_init__(self):
        self.rng = random.Random(self.seed)
        self.next_round()

    def next_round(self) -> str:
        self.hidden = self.rng.choice("AB")
        return self.hidden

    @property
    def done(self) -> bool:
        return len(self.answers) >= self.rounds

    def answer(self, guess: str) -> bool:
        ok = guess == self.hidden
        self.answers.append((self.hidden, guess))
        if not self.done:
            self.next_round()
        return ok

    @property
    def score(self) -> int:
        return sum(h == g for h, g in self.answers)

    def p_value(self) -> float:
        from scipy.stats import binomtest
        n = len(self.answers)
        if n == 0:
            return 1.0
        return float(binomtest(self.score, n, 0.5, alternative="greater").pvalue)


class SnapshotPanel(QWidget):
    """Signals: ``ab_requested(a, b)`` to run A and B (snapshot names or
    CURRENT), ``hear(which)`` with 'A', 'B'; ``stop_ab``."""
    ab_requested = pyqtSignal(str, str)
    hear = pyqtSignal(str)
    recall = pyqtSignal(str)

    def __init__(self, wb: Workbench, message=print, parent=None):
        super().__init__(parent)
        self.wb = wb
        self.message = message
        self.trial: BlindTrial | None = None
        lay = QHBoxLayout(self)
        lay.setContentsMargins(4, 4, 4, 4)
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
        bll = QVBoxLayout(bl)
        self.rounds = QSpinBox()
        self.rounds.setRange(4, 40)
        self.rounds.setValue(10)
        self.start_trial = QPushButton("Start trial")
        self.play_x = QPushButton("Hear X")
        self.say_a = QPushButton("X is A")
        self.say_b = QPushButton("X is B")
        self.result = QLabel("—")
        self.result.setWordWrap(True)
        self.result.setProperty("role", "read")
        rr = QHBoxLayout()
        rr.addWidget(QLabel("rounds"))
        rr.addWidget(self.rounds)
        bll.addLayout(rr)
        bll.addWidget(self.start_trial)
        bll.addWidget(self.play_x)
        ab = QHBoxLayout()
        ab.addWidget(self.say_a)
        ab.addWidget(self.say_b)
        bll.addLayout(ab)
        bll.addWidget(self.result, 1)
        lay.addWidget(bl, 1)
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
        self.start_trial.clicked.connect(self.begin_trial)
        self.play_x.clicked.connect(self._hear_x)
        self.say_a.clicked.connect(lambda: self.answer("A"))
        self.say_b.clicked.connect(lambda: self.answer("B"))
        for w in (self.play_x, self.say_a, self.say_b):
            w.setEnabled(False)
        wb.snapshots_changed.connect(self.refresh)
        wb.design_replaced.connect(self.refresh_diff)
        wb.part_changed.connect(lambda _q: self.refresh_diff())
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

    def show_offset(self, db: float | None) -> None:
        self.match.setText("loudness offset —" if db is None
                           else f"loudness offset {db:+.1f} LU (A − B)")

    def begin_trial(self) -> None:
        self.trial = BlindTrial(self.rounds.value())
        for w in (self.play_x, self.say_a, self.say_b):
            w.setEnabled(True)
        self.hear_a.setEnabled(False)
        self.hear_b.setEnabled(False)
        self.result.setText(f"round 1 of {self.trial.rounds}: hear X, then answer")

    def _hear_x(self) -> None:
        if self.trial is not None:
            self.hear.emit(self.trial.hidden)

    def answer(self, guess: str) -> None:
        t = self.trial
        if t is None or t.done:
            return
        t.answer(guess)
        n = len(t.answers)
        if t.done:
            for w in (self.play_x, self.say_a, self.say_b):
                w.setEnabled(False)
            self.hear_a.setEnabled(True)
            self.hear_b.setEnabled(True)
            self.result.setText(
                f"score {t.score} of {n}. Probability of scoring at least this well "
                f"by guessing: {t.p_value():.3f}"
                + (" — a real difference is likely heard." if t.p_value() < 0.05 else
                   " — not distinguishable from guessing."))
        else:
            # the score stays hidden until the end, so it cannot steer the answers
            self.result.setText(f"round {n + 1} of {t.rounds}: hear X, then answer "
                                f"({n} answered)")
