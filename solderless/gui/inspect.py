"""Looking inside: the operating point as a table with warnings, and the
small-signal frequency response and input impedance as plots. Filled from
:mod:`solderless.engine.analysis.preview` results; refreshed after each edit."""
from __future__ import annotations

import numpy as np
from PyQt6.QtCore import Qt
from PyQt6.QtGui import QColor
from PyQt6.QtWidgets import (QGroupBox, QHBoxLayout, QHeaderView, QLabel, QListWidget,
                             QListWidgetItem, QSplitter, QTableWidget, QTableWidgetItem,
                             QVBoxLayout, QWidget)

from solderless.engine.values import format_value
from solderless.gui import theme


def frequency_ticks(plot) -> None:
    """Readable ticks on a log frequency axis: 10, 20, 50, 100 ... 20k Hz
    (pyqtgraph's own minor labels run into each other on a narrow plot)."""
    major, minor = [], []
    for dec in (1, 10, 100, 1000, 10000):
        for m in (1, 2, 5):
            v = m * dec
            if 10 <= v <= 50000:
                label = f"{v // 1000}k" if v >= 1000 else f"{v}"
                (major if m == 1 else minor).append((float(np.log10(v)), label))
    plot.getAxis("bottom").setTicks([major, minor])


def _fmt(v, unit: str) -> str:
    if isinstance(v, str):
        return v
    try:
        if unit:
            return format_value(float(v), unit, style="eng", digits=4)
        return f"{float(v):.4g}"
    except (ValueError, OverflowError):
        return str(v)


class InspectPanel(QWidget):
    """Operating point table, warnings, |H(f)| and |Zin(f)|."""

    def __init__(self, parent=None):
        super().__init__(parent)
        import pyqtgraph as pg
        lay = QHBoxLayout(self)
        lay.setContentsMargins(4, 4, 4, 4)
        split = QSplitter(Qt.Orientation.Horizontal)
        lay.addWidget(split)
        opbox = QGroupBox("OPERATING POINT")
        ol = QVBoxLayout(opbox)
        self.warn = QListWidget()
        self.warn.setMaximumHeight(90)
        self.status = QLabel("no operating point yet")
        self.status.setProperty("role", "dim")
        self.table = QTableWidget(0, 4)
        self.table.setHorizontalHeaderLabels(["where", "what", "quantity", "value"])
        self.table.verticalHeader().setVisible(False)
        self.table.setAlternatingRowColors(True)
        self.table.setEditTriggers(QTableWidget.EditTrigger.NoEditTriggers)
        self.table.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.Stretch)
        ol.addWidget(self.status)
        ol.addWidget(self.warn)
        ol.addWidget(self.table, 1)
        split.addWidget(opbox)
        acbox = QGroupBox("SMALL SIGNAL")
        al = QVBoxLayout(acbox)
        self.gain = pg.PlotWidget()
        self.gain.setLogMode(x=True, y=False)
        self.gain.setLabel("left", "gain", units="dB")
        self.gain.showGrid(x=True, y=True, alpha=0.25)
        self.gain_curve = self.gain.plot(pen=pg.mkPen(theme.SET, width=2))
        self.zin = pg.PlotWidget()
        self.zin.setLogMode(x=True, y=True)

        self.zin.showGrid(x=True, y=True, alpha=0.25)
        self.zin_curve = self.zin.plot(pen=pg.mkPen(theme.READ, width=2))
        self.zin.setXLink(self.gain)
        # plain Hz and Ω on log axes: SI prefixes on a log axis read as 0.01 kHz
        for w in (self.gain, self.zin):
            for ax in ("left", "bottom"):
                w.getAxis(ax).enableAutoSIPrefix(False)
        self.zin.setLabel("left", "input impedance (Ω)")
        frequency_ticks(self.gain)
        frequency_ticks(self.zin)
        self.zin.setLabel("bottom", "frequency (Hz)")
        self.ac_status = QLabel("")
        self.ac_status.setProperty("role", "dim")
        al.addWidget(self.gain, 1)
        al.addWidget(self.zin, 1)
        al.addWidget(self.ac_status)
        split.addWidget(acbox)
        split.setSizes([420, 420])
        self.values: dict[tuple[str, str], str] = {}

    def show_op(self, rep) -> None:
        self.warn.clear()
        for w in rep.warnings:
            it = QListWidgetItem("⚠ " + w)
            it.setForeground(QColor(theme.WARN))
            self.warn.addItem(it)
        if not rep.warnings:
            it = QListWidgetItem("no warnings")
            it.setForeground(QColor(theme.DIM))
            self.warn.addItem(it)
        self.table.setRowCount(len(rep.rows))
        self.values = {}
        for i, (group, name, q, v, unit) in enumerate(rep.rows):
            txt = _fmt(v, unit)
            self.values[(name, q)] = txt
            for j, t in enumerate((group, name, q, txt)):
                it = QTableWidgetItem(t)
                if j == 3:
                    it.setForeground(QColor(theme.READ))
                    it.setTextAlignment(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
                self.table.setItem(i, j, it)
        self.status.setText(f"{len(rep.rows)} values, {len(rep.warnings)} warnings")

    def show_ac(self, r) -> None:
        mag = np.abs(r.H)
        with np.errstate(divide="ignore"):
            self.gain_curve.setData(r.f, 20 * np.log10(np.maximum(mag, 1e-12)))
        self.zin_curve.setData(r.f, np.maximum(np.abs(r.zin), 1e-3))
        self.ac_status.setText(f"{len(r.f)} frequencies, {r.f[0]:g} Hz to {r.f[-1]:g} Hz")

    def show_problem(self, what: str, msg: str) -> None:
        if what == "operating point":
            self.status.setText(f"operating point: {msg}")
        else:
            self.ac_status.setText(f"{what}: {msg}")
