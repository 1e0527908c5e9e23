"""The live panel: what goes in, what comes out, and what the circuit does.

Controls: source, audio devices, start/stop, offline preview, output level,
mute. Displays: bar meters for input and output level (dBFS), the gain
cell's control current (µA) and gain reduction (dB); scrolling traces of gain
reduction, control current and any probe over the last seconds; an
input-versus-output scope; CPU load, xruns and latency.

Two feeds fill the same displays: the live host's meter snapshots
(:meth:`solderless.engine.live.host.LiveHost.meters`, polled by a timer) and an offline
preview's per-block readings
(:class:`solderless.engine.analysis.preview.PreviewResult`). The panel computes
nothing; it draws what it is given.
"""
from __future__ import annotations

import math
from collections import deque

import numpy as np
from PyQt6.QtCore import QRectF, Qt, pyqtSignal
from PyQt6.QtGui import QColor, QFont, QPainter, QPen
from PyQt6.QtWidgets import (QComboBox, QGridLayout, QGroupBox, QHBoxLayout, QLabel, QLineEdit,
                             QPushButton, QSizePolicy, QSlider, QVBoxLayout, QWidget)

from solderless.gui import theme
from solderless.engine.analysis.preview import SOURCES

TRACE_SECONDS = 5.0
SCOPE_LIVE_S = 0.05
"""The live scope shows the last 50 ms of input and output (a few cycles of
a low guitar note)."""
SCOPE_MIN_V = 1e-3
"""Smallest half-range of the scope axes (1 mV): a silent input or output
keeps readable axes instead of shrinking to nothing."""
METER_HELP = {
    "input": ("input level: the signal at the input jack, RMS bar and peak mark, in dB "
              "relative to the converter's full scale (dBFS)"),
    "output": ("output level: what goes to the speakers after the output level control "
               "and the safety limiter, RMS bar and peak mark, dBFS"),
    "control": ("control current: the gain cell's control signal (the current the design "
                "names as its control, e.g. an OTA's bias current), µA"),
    "gain red.": ("gain reduction: how far the gain cell has turned the signal down from "
                  "its gain at rest, dB (0 dB = no reduction; more negative = more "
                  "compression). Read from the control current through the cell's law, "
                  "or measured as output level minus input level minus the small-signal "
                  "gain when no law is given"),
}


FLOOR_HELP = ("noise floor at the output jack, 20 Hz-20 kHz, from the noise analysis at the "
              "operating point (the figures 'solderless hiss' prints), unweighted and "
              "A-weighted (IEC 61672-1); recomputed after each edit. dBV: re 1 V rms; "
              "dBu: re 0.775 V rms")


def probe_label(name: str, unit: str) -> str:
    """A probe trace's label: its name and unit, e.g. ``v(out) (V)``."""
    return f"{name} ({unit})" if unit else name


class BarMeter(QWidget):
    """A vertical bar meter with a scale, a title and a numeric readout."""

    def __init__(self, title: str, unit: str, lo: float, hi: float, ticks, colour: str,
                 from_top: bool = False, parent=None):
        super().__init__(parent)
        self.title, self.unit, self.lo, self.hi = title, unit, lo, hi
        self.ticks = ticks
        self.colour = QColor(colour)
        self.from_top = from_top
        self.value: float | None = None
        self.hold: float | None = None
        self.blank = "—"                 # text shown when there is no value
        self.invalid = False
        self.setMinimumSize(70, 150)   # room for the noise row in a 940 px window
        self.setSizePolicy(QSizePolicy.Policy.Preferred, QSizePolicy.Policy.Expanding)

    def _readout(self) -> str:
        v = ("NaN" if self.invalid else self.blank if self.value is None
             else f"{self.value:.1f}")
        return f"{v} {self.unit}"

    def text(self) -> str:
        """What the meter shows as text (title and readout)."""
        return f"{self.title} {self._readout()}"

    def set_value(self, v: float | None, hold: float | None = None) -> None:
        # NaN/inf is shown as such, never as an empty (quiet-looking) meter
        self.invalid = v is not None and not math.isfinite(v)
        self.value = None if v is None or not math.isfinite(v) else float(v)
        self.hold = None if hold is None or not math.isfinite(hold) else float(hold)
        self.update()

    def _frac(self, v: float) -> float:
        return min(max((v - self.lo) / (self.hi - self.lo), 0.0), 1.0)

    def paintEvent(self, _e):
        p = QPainter(self)
        p.setRenderHint(QPainter.RenderHint.Antialiasing)
        w, h = self.width(), self.height()
        top, bot = 22, h - 24
        bx, bw = 8, 16
        p.setPen(QColor(theme.DIM))
        f = QFont()
        f.setPointSize(8)
        p.setFont(f)
        p.drawText(QRectF(0, 0, w, 18), Qt.AlignmentFlag.AlignCenter, self.title)
        p.fillRect(QRectF(bx, top, bw, bot - top), QColor(theme.INSET))
        p.setPen(QPen(QColor(theme.RULE), 1))
        p.drawRect(QRectF(bx, top, bw, bot - top))
        for t in self.ticks:
            y = bot - self._frac(t) * (bot - top)
            p.drawLine(int(bx + bw), int(y), int(bx + bw + 4), int(y))
            p.drawText(QRectF(bx + bw + 6, y - 7, w - bx - bw - 6, 14),
                       Qt.AlignmentFlag.AlignLeft | Qt.AlignmentFlag.AlignVCenter, f"{t:g}")
        if self.value is not None:
            fr = self._frac(self.value)
            if self.from_top:
                p.fillRect(QRectF(bx + 2, top + 1, bw - 4, (1 - fr) * (bot - top) - 1),
                           self.colour)
            else:
                y = bot - fr * (bot - top)
                p.fillRect(QRectF(bx + 2, y, bw - 4, bot - y - 1), self.colour)
        if self.hold is not None:
            y = bot - self._frac(self.hold) * (bot - top)
            p.setPen(QPen(QColor(theme.TEXT), 2))
            p.drawLine(int(bx + 1), int(y), int(bx + bw - 1), int(y))
        p.setPen(QColor(theme.READ))
        f2 = QFont(theme.MONO)
        f2.setPointSize(9)
        p.setFont(f2)
        p.drawText(QRectF(0, bot + 3, w, 18), Qt.AlignmentFlag.AlignCenter,
                   self._readout())
        p.end()


class StripChart(QWidget):
    """Stacked traces against time, painted directly with QPainter.

    Each trace is turned into one QPainterPath by pyqtgraph's vectorised
    ``arrayToQPath`` and drawn with a single call, so a redraw costs about a
    millisecond of GUI-thread time whatever the number of points (the GUI
    thread shares the GIL with the audio thread)."""

    def __init__(self, rows, parent=None):
        super().__init__(parent)
        self.rows = list(rows)                 # (key, label, colour)
        self.data: dict[str, tuple] = {}
        self.yr: dict[str, tuple[float, float]] = {k: (0.0, 1.0) for k, _, _ in self.rows}
        self.labels = {k: lab for k, lab, _ in self.rows}
        self.hidden: set[str] = set()
        self.xr = (0.0, 1.0)
        self.x_label = "time (s)"
        self.setMinimumHeight(180)
        self.setSizePolicy(QSizePolicy.Policy.Expanding, QSizePolicy.Policy.Expanding)

    def set_x_range(self, lo: float, hi: float, label: str | None = None) -> None:
        self.xr = (float(lo), float(hi))
        if label:
            self.x_label = label
        self.update()

    def set_trace(self, key: str, x, y, yrange=None, label: str | None = None) -> None:
        self.data[key] = (np.asarray(x, dtype=float), np.asarray(y, dtype=float))
        if yrange is not None:
            self.yr[key] = (float(yrange[0]), float(yrange[1]))
        if label is not None:
            self.labels[key] = label
        self.update()

    def set_visible_rows(self, keys) -> None:
        """Show only the traces in ``keys`` (others are hidden)."""
        self.hidden = {k for k, _, _ in self.rows if k not in set(keys)}
        self.update()

    def clear(self) -> None:
        self.data.clear()
        self.update()

    def visible_rows(self):
        return [r for r in self.rows if r[0] not in self.hidden]

    def paintEvent(self, _e):
        from PyQt6.QtGui import QTransform
        import pyqtgraph as pg
        p = QPainter(self)
        w, h = self.width(), self.height()
        f = QFont()
        f.setPointSize(8)
        p.setFont(f)
        rows = self.visible_rows()
        fm = p.fontMetrics()
        # the label column is as wide as the longest label (never cut short)
        widest = max([fm.horizontalAdvance(self.labels.get(k, k)) for k, _, _ in rows]
                     + [fm.horizontalAdvance(self.x_label) + 22, 60])
        left, right, top, bottom = min(widest + 12, max(w // 3, 78)), 8, 4, 20
        n = max(len(rows), 1)
        rh = (h - top - bottom) / n
        x0, x1 = self.xr
        for i, (key, _lab, colour) in enumerate(rows):
            r = QRectF(left, top + i * rh + 2, w - left - right, rh - 4)
            p.fillRect(r, QColor(theme.INSET))
            p.setPen(QPen(QColor(theme.RULE), 1))
            p.drawRect(r)
            y0, y1 = self.yr[key]
            p.setPen(QColor(theme.DIM))
            p.drawText(QRectF(2, r.top(), left - 6, 14), Qt.AlignmentFlag.AlignRight,
                       f"{y1:.3g}")
            p.drawText(QRectF(2, r.bottom() - 14, left - 6, 14), Qt.AlignmentFlag.AlignRight,
                       f"{y0:.3g}")
            p.setPen(QColor(colour))
            p.drawText(QRectF(2, r.center().y() - 8, left - 6, 16),
                       Qt.AlignmentFlag.AlignRight,
                       fm.elidedText(self.labels.get(key, key), Qt.TextElideMode.ElideMiddle,
                                     left - 6))
            if y0 < 0 < y1:
                yz = r.bottom() - (0 - y0) / (y1 - y0) * r.height()
                p.setPen(QPen(QColor(theme.RULE), 1, Qt.PenStyle.DotLine))
                p.drawLine(int(r.left()), int(yz), int(r.right()), int(yz))
            d = self.data.get(key)
            if d is None or len(d[0]) < 2 or x1 <= x0 or y1 <= y0:
                continue
            path = pg.arrayToQPath(d[0], d[1], connect="finite")
            sx = r.width() / (x1 - x0)
            sy = -r.height() / (y1 - y0)
            t = QTransform(sx, 0, 0, sy, r.left() - x0 * sx, r.bottom() - y0 * sy)
            p.save()
            p.setClipRect(r)
            p.setTransform(t)
            pen = QPen(QColor(colour), 1.3)
            pen.setCosmetic(True)
            p.setPen(pen)
            p.drawPath(path)
            p.restore()
        # time axis
        p.setPen(QColor(theme.DIM))
        span = x1 - x0
        if not (span > 0 and math.isfinite(span)):
            p.end()
            return
        step = 0.5 if span <= 3 else 1.0
        k = math.ceil(x0 / step)
        while k * step <= x1 + 1e-9:
            xv = k * step
            px = left + (xv - x0) / span * (w - left - right)
            p.drawLine(int(px), int(h - bottom), int(px), int(h - bottom + 3))
            p.drawText(QRectF(px - 20, h - bottom + 3, 40, 14), Qt.AlignmentFlag.AlignCenter,
                       f"{xv:g}")
            k += 1
        # clear of the first tick's number, which is centred on the left edge
        p.drawText(QRectF(0, h - bottom + 3, left - 24, 14), Qt.AlignmentFlag.AlignRight,
                   self.x_label)
        p.end()


class Readout(QWidget):
    """A label and a value painted directly: changing the value never changes
    the widget's size, so a meter frame repaints only this small rectangle
    (a QLabel would ask for a new layout, and the layout would repaint the
    plots around it)."""

    def __init__(self, label: str):
        super().__init__()
        self.label = label
        self.value = "—"
        self.bad = False
        self.setFixedHeight(20)

    def set(self, text: str, bad: bool = False) -> None:
        if text != self.value or bad != self.bad:
            self.value, self.bad = text, bad
            self.update()

    def text(self) -> str:
        return f"{self.label} {self.value}".strip()

    def paintEvent(self, _e):
        p = QPainter(self)
        f = QFont(theme.MONO)
        f.setPointSize(9)
        p.setFont(f)
        x = 2
        if self.label:
            p.setPen(QColor(theme.DIM))
            p.drawText(QRectF(x, 0, self.width(), self.height()),
                       Qt.AlignmentFlag.AlignVCenter, self.label)
            x += p.fontMetrics().horizontalAdvance(self.label + " ")
        p.setPen(QColor(theme.BAD if self.bad else theme.READ))
        p.drawText(QRectF(x, 0, self.width() - x, self.height()),
                   Qt.AlignmentFlag.AlignVCenter, self.value)
        p.end()


class LivePanel(QWidget):
    """Controls, meters, traces and scope. Signals ask the window to act."""
    preview_requested = pyqtSignal()
    start_requested = pyqtSignal()
    stop_requested = pyqtSignal()
    level_changed = pyqtSignal(float)
    mute_changed = pyqtSignal(bool)
    source_changed = pyqtSignal(str)
    midi_connect = pyqtSignal()
    probe_requested = pyqtSignal(str)
    midi_learn = pyqtSignal(bool)
    hiss_toggled = pyqtSignal(bool)

    def __init__(self, parent=None):
        super().__init__(parent)
        import pyqtgraph as pg
        self._pg = pg
        outer = QVBoxLayout(self)
        outer.setContentsMargins(4, 4, 4, 4)
        # controls
        ctl = QGroupBox("SIGNAL")
        g = QGridLayout(ctl)
        self.source = QComboBox()
        for key, label in SOURCES.items():
            self.source.addItem(label, key)
        self.source.currentIndexChanged.connect(
            lambda _i: self.source_changed.emit(self.source.currentData()))
        self.dev_in = QComboBox()
        self.dev_out = QComboBox()
        self.dev_in.setToolTip("input device")
        self.dev_out.setToolTip("output device")
        self.preview_btn = QPushButton("Preview  F5")
        self.preview_btn.setToolTip("render a few seconds offline (no audio device needed)")
        self.run_btn = QPushButton("Play  F6")
        self.run_btn.setCheckable(True)
        self.mute_btn = QPushButton("Mute")
        self.mute_btn.setCheckable(True)
        self.level = QSlider(Qt.Orientation.Horizontal)
        self.level.setRange(-400, 60)
        self.level.setValue(-200)
        self.level.setToolTip("output level, dB (playback starts low and ramps up)")
        self.level_lab = QLabel()
        self.level_lab.setProperty("role", "read")
        self._level_text(-200)
        g.addWidget(QLabel("source"), 0, 0)
        g.addWidget(self.source, 0, 1, 1, 3)
        g.addWidget(QLabel("in"), 1, 0)
        g.addWidget(self.dev_in, 1, 1)
        g.addWidget(QLabel("out"), 1, 2)
        g.addWidget(self.dev_out, 1, 3)
        g.addWidget(self.preview_btn, 2, 0, 1, 2)
        g.addWidget(self.run_btn, 2, 2)
        g.addWidget(self.mute_btn, 2, 3)
        g.addWidget(QLabel("level"), 3, 0)
        g.addWidget(self.level, 3, 1, 1, 2)
        g.addWidget(self.level_lab, 3, 3)
        self.midi_btn = QPushButton("MIDI knobs…")
        self.midi_btn.setToolTip("connect a MIDI controller: its knobs turn the design's pots")
        self.learn_btn = QPushButton("Learn")
        self.learn_btn.setCheckable(True)
        self.learn_btn.setEnabled(False)
        self.learn_btn.setToolTip("learn: turn a pot in the workbench, then turn a knob on "
                                  "the controller")
        self.midi_lab = QLabel("no controller")
        self.midi_lab.setProperty("role", "dim")
        g.addWidget(self.midi_btn, 4, 0, 1, 2)
        g.addWidget(self.learn_btn, 4, 2)
        g.addWidget(self.midi_lab, 4, 3)
        # the circuit's own noise, switched while playing (an edit: undo
        # takes it back), and the floor the analysis gives at the output
        self.hiss_btn = QPushButton("Circuit noise")
        self.hiss_btn.setCheckable(True)
        self.hiss_btn.setToolTip(
            "play the circuit's own noise inside the simulation: thermal noise of every "
            "resistor, shot noise of junction currents, flicker noise where a model card "
            "gives KF (switches while playing, without a click; the design's 'hiss' "
            "setting)")
        self.floor_lab = QLabel("floor —")
        self.floor_lab.setProperty("role", "read")
        self.floor_lab.setToolTip(FLOOR_HELP)
        g.addWidget(self.hiss_btn, 5, 0, 1, 2)
        g.addWidget(self.floor_lab, 5, 2, 1, 2)
        self.hiss_btn.toggled.connect(self.hiss_toggled)
        self.midi_btn.clicked.connect(self.midi_connect)
        self.learn_btn.toggled.connect(self.midi_learn)
        self.preview_btn.clicked.connect(self.preview_requested)
        self.run_btn.toggled.connect(lambda on: (self.start_requested if on
                                                 else self.stop_requested).emit())
        self.mute_btn.toggled.connect(self.mute_changed)
        self.level.valueChanged.connect(self._level_moved)
        # status readouts
        st = QHBoxLayout()
        self.cpu = Readout("CPU")
        self.xruns = Readout("xruns")
        self.latency = Readout("latency")
        self.state = Readout("")
        # fixed widths: a readout whose text changes width would re-lay-out and
        # repaint the whole panel (plots included) on every meter frame
        for w, width in ((self.state, 300), (self.cpu, 190), (self.xruns, 110),
                         (self.latency, 150)):
            w.setFixedWidth(width)
            st.addWidget(w)
        st.addStretch(1)
        # meters
        mbox = QGroupBox("METERS")
        ml = QHBoxLayout()
        self.m_in = BarMeter("input", "dBFS", -60, 0, (-60, -40, -20, -10, 0), theme.GOOD)
        self.m_out = BarMeter("output", "dBFS", -60, 0, (-60, -40, -20, -10, 0), theme.GOOD)
        self.m_ctl = BarMeter("control", "µA", 0, 100, (0, 25, 50, 75, 100), theme.READ)
        self.m_gr = BarMeter("gain red.", "dB", -30, 0, (-30, -20, -10, -5, 0), theme.SET,
                             from_top=True)
        for m in (self.m_in, self.m_out, self.m_ctl, self.m_gr):
            m.setToolTip(METER_HELP[m.title])
            ml.addWidget(m)
        self.meter_legend = QLabel()
        self.meter_legend.setWordWrap(True)
        self.meter_legend.setProperty("role", "dim")
        mcol = QVBoxLayout()
        mcol.addLayout(ml, 1)
        mcol.addWidget(self.meter_legend)
        self.dyn = QLabel("attack —   release —")
        self.dyn.setProperty("role", "read")
        self.dyn.setToolTip(
            "attack and release of the design, measured offline after each edit as the demo "
            "measures them: a 220 Hz tone burst; attack = time for the gain reduction to "
            "cover 63 % (1 - 1/e) of its step after the burst starts, release = time to "
            "recover 63 % after it ends")
        mcol.addWidget(self.dyn)
        mbox.setLayout(mcol)
        self.has_control = True
        self.blind = False
        self._legend()
        # traces
        tbox = QGroupBox("TRACES — LAST SECONDS")
        tl = QVBoxLayout(tbox)
        self.traces = StripChart([("gain reduction", "gain reduction (dB)", theme.SET),
                                  ("control current", "control current (µA)", theme.READ),
                                  ("probe", "probe", theme.TRACE_COLOURS[2])])
        self.traces.setToolTip(f"{METER_HELP['gain red.']}\n{METER_HELP['control']}\n"
                               "the last trace is the probe chosen below (its name and unit "
                               "on the left)")
        tl.addWidget(self.traces)
        self.probe_pick = QComboBox()
        self.probe_pick.setToolTip("the probe shown in the last trace: a net's voltage (V) "
                                   "or a device current (A, drawn in µA)")
        prow = QHBoxLayout()
        prow.addWidget(self.probe_pick, 2)
        self.probe_add = QLineEdit()
        self.probe_add.setPlaceholderText("add probe: v(out), ic(Q1) … Enter")
        self.probe_add.setToolTip("probe any net or device by the names in the Inside tab's "
                                  "operating point: v(net), v(net1,net2), i(part), ic(Q), "
                                  "vce(Q), id(D) …")
        prow.addWidget(self.probe_add, 1)
        tl.addLayout(prow)
        self.probe_add.returnPressed.connect(
            lambda: self.probe_requested.emit(self.probe_add.text()))
        # scope
        sbox = QGroupBox("SCOPE — OUT AGAINST IN")
        sl = QVBoxLayout(sbox)
        self.scope = pg.PlotWidget()
        self.scope.setLabel("bottom", "input", units="V")
        self.scope.setLabel("left", "output", units="V")
        self.scope.showGrid(x=True, y=True, alpha=0.2)
        self.scope.setMenuEnabled(False)
        self.scope_curve = self.scope.plot(pen=pg.mkPen(theme.GOOD, width=1.2))
        self.scope.setMinimumSize(200, 160)
        self.scope.setMouseEnabled(x=False, y=False)
        sl.addWidget(self.scope)
        # arrange
        top = QHBoxLayout()
        left = QVBoxLayout()
        left.addWidget(ctl)
        left.addWidget(mbox, 1)
        top.addLayout(left, 0)
        right = QVBoxLayout()
        right.addWidget(tbox, 3)
        right.addWidget(sbox, 2)
        top.addLayout(right, 1)
        outer.addLayout(top, 1)
        outer.addLayout(st)
        # history for the live feed
        self.hist: dict[str, deque] = {}
        self.hist_t: deque = deque(maxlen=4000)
        self.last_preview = None
        self._live_probe = None
        self.want_probe: str | None = None     # a probe just added: show it
        self._ranges: dict = {}
        self.probe_pick.currentTextChanged.connect(lambda _t: self._redraw_probe())

    def _level_text(self, v):
        self.level_lab.setText(f"{v / 10:+.1f} dB")

    def _level_moved(self, v):
        self._level_text(v)
        self.level_changed.emit(v / 10.0)

    def set_devices(self, devices: list[dict] | None, problem: str = "") -> None:
        self.dev_in.clear()
        self.dev_out.clear()
        if not devices:
            self.dev_in.addItem(problem or "no audio device", None)
            self.dev_out.addItem(problem or "no audio device", None)
            self.run_btn.setEnabled(False)
            self.run_btn.setToolTip("no audio device: use Preview (F5)")
            return
        self.dev_in.addItem("default", None)
        self.dev_out.addItem("default", None)
        for d in devices:
            if d["inputs"]:
                self.dev_in.addItem(d["name"], d["index"])
            if d["outputs"]:
                self.dev_out.addItem(d["name"], d["index"])

    # ------------------------------------------------------------ feeds
    def show_preview(self, r) -> None:
        """Fill meters, traces and scope from an offline preview."""
        self.last_preview = r
        self.traces.set_x_range(0.0, float(r.t[-1] + r.block / r.fs), "time (s)")
        self.state.set(f"preview {r.t[-1] + r.block / r.fs:.1f} s")
        s = r.series
        m = r.meters
        self.m_in.set_value(m["input"]["rms_dbfs"], m["input"]["peak_dbfs"])
        self.m_out.set_value(m["output"]["rms_dbfs"], m["output"]["peak_dbfs"])
        va = m.get("voices", {}).get("A", {})
        self.m_ctl.set_value(va.get("control_ua"))
        gr = va.get("gr_control_db")
        if gr is None:
            gr = va.get("gr_measured_db")
        self.m_gr.set_value(None if gr is None else min(gr, 0.0))
        for key in ("gain reduction", "control current"):
            self.traces.set_trace(key, r.t, s[key], self._fit(key, s[key]))
        self._scale_control(s["control current"])
        probes = [k for k in s if k not in ("input level", "output level", "control current",
                                            "gain reduction")]
        keep = self.probe_pick.currentText()
        self.probe_pick.blockSignals(True)
        self.probe_pick.clear()
        self.probe_pick.addItems(probes + ["input level", "output level"])
        if self.want_probe in probes:
            self.probe_pick.setCurrentText(self.want_probe)
        elif keep in probes + ["input level", "output level"]:
            self.probe_pick.setCurrentText(keep)
        elif len(probes) > 1:
            self.probe_pick.setCurrentIndex(1)
        self.probe_pick.blockSignals(False)
        self._redraw_probe()
        self.scope_curve.setData(r.scope_in, r.scope_out)
        self.scope.enableAutoRange()
        self.cpu.set(f"{100 * m.get('cpu_load_mean', 0.0):.0f} % (offline)")
        self.xruns.set("— offline")
        self.latency.set("— offline")

    def _redraw_probe(self) -> None:
        r = self.last_preview
        key = self.probe_pick.currentText()
        if r is None or key not in r.series:
            return
        unit = r.units.get(key, "")
        data = r.series[key]
        if unit == "A":
            data, unit = data * 1e6, "µA"
        self.traces.set_trace("probe", r.t, data, self._fit("probe", data),
                              label=probe_label(key, unit))

    def _fit(self, key: str, data) -> None:
        """Y range of a trace: gain reduction always shows at least 0 to -6 dB;
        other traces at least 2 % around their level, so a flat line looks flat
        rather than magnified noise."""
        d = np.asarray(data, dtype=float)
        d = d[np.isfinite(d)]
        if d.size == 0:
            return None
        lo, hi = float(d.min()), float(d.max())
        if key == "gain reduction":
            return (min(lo * 1.1, -6.0), max(hi, 0.0) + 0.5)
        span = max(hi - lo, 0.02 * max(abs(hi), abs(lo)), 1e-9)
        mid = (hi + lo) / 2
        return (mid - 0.6 * span, mid + 0.6 * span)

    def _scale_control(self, data) -> None:
        d = np.asarray(data, dtype=float)
        d = d[np.isfinite(d)]
        top = float(d.max()) if d.size else 0.0
        for scale in (10, 25, 50, 100, 250, 500, 1000, 2500, 5000):
            if top <= scale:
                break
        m = self.m_ctl
        m.hi = float(scale)
        parts = 5 if scale in (25, 250, 2500) else 4
        m.ticks = tuple(scale * k / parts for k in range(parts + 1))
        m.update()

    def show_live(self, snap: dict) -> None:
        """Update from a live host meter snapshot (called by a GUI timer)."""
        self.m_in.set_value(snap["input"]["rms_dbfs"], snap["input"]["peak_dbfs"])
        self.m_out.set_value(snap["output"]["rms_dbfs"], snap["output"]["peak_dbfs"])
        va = snap.get("voices", {}).get(snap.get("selected", "A"), {})
        self.m_ctl.set_value(va.get("control_ua"))
        gr = va.get("gr_control_db")
        if gr is None:
            gr = va.get("gr_measured_db")
        self.m_gr.set_value(None if gr is None else min(gr, 0.0))
        pk = self.probe_pick.currentText()
        probes = va.get("probes", {})
        if self.probe_pick.count() == 0 and probes:
            self.probe_pick.addItems(list(probes))
            if self.want_probe in probes:
                self.probe_pick.setCurrentText(self.want_probe)
            pk = self.probe_pick.currentText()
        unit = va.get("probe_units", {}).get(pk, "")
        val = probes.get(pk, np.nan)
        if unit == "A" and val is not None:
            val, unit = val * 1e6, "µA"
        if pk != self._live_probe:          # another probe: its trace starts afresh
            self._live_probe = pk
            self.hist_t.clear()
            self.hist.clear()
            self._ranges.pop("probe", None)
            self.traces.labels["probe"] = probe_label(pk, unit)
        self.hist_t.append(snap.get("blocks", 0))
        for key, v in (("gain reduction", gr), ("control current", va.get("control_ua")),
                       ("probe", val)):
            self.hist.setdefault(key, deque(maxlen=4000)).append(np.nan if v is None else v)
        lat = snap.get("latency", {})
        self.cpu.set(f"{100 * snap.get('cpu_load', 0):.0f} %  max "
                     f"{100 * snap.get('cpu_load_max', 0):.0f} %",
                     bad=snap.get("cpu_load", 0) > 0.8)
        self.xruns.set(str(snap.get("xruns", 0)), bad=snap.get("xruns", 0) > 0)
        self.latency.set(f"{1e3 * lat.get('total_s', 0):.1f} ms")
        self.state.set("LIVE " + snap.get("selected", "") +
                       (f"  muted: {snap['guard']}" if snap.get("guard") else ""),
                       bad=bool(snap.get("guard")))

    def redraw_live(self, fs: float, block: int) -> None:
        """Redraw the scrolling traces from the live history (GUI timer).
        Time runs as "seconds ago" on a fixed axis and the y ranges move only
        when the data leaves them, so the axes are not re-rendered every frame."""
        if not self.hist_t or not fs > 0 or not block > 0:
            return
        t = np.asarray(self.hist_t, dtype=float) * (block / fs)
        t = t - t[-1]
        keep = t >= -TRACE_SECONDS
        for key in ("gain reduction", "control current", "probe"):
            h = self.hist.get(key)
            if h is not None and len(h) == len(t):
                y = np.asarray(h, dtype=float)[keep]
                self.traces.set_trace(key, t[keep], y, self._follow(key, y))

    def _follow(self, key: str, y) -> None:
        d = y[np.isfinite(y)]
        if d.size == 0:
            return None
        lo, hi = float(d.min()), float(d.max())
        cur = self._ranges.get(key)
        if cur is not None and cur[0] <= lo and hi <= cur[1]:
            return cur
        if key == "gain reduction":
            r = (min(-6.0, 1.5 * lo), 0.5)
        else:
            span = max(hi - lo, 0.05 * max(abs(hi), abs(lo)), 1e-9)
            r = (lo - 0.5 * span, hi + 0.5 * span)
        self._ranges[key] = r
        return r

    def scope_points(self, rate: float) -> int:
        """How many scope pairs make ``SCOPE_LIVE_S`` at ``rate`` pairs/s."""
        return max(2, int(SCOPE_LIVE_S * rate))

    def show_scope(self, x, y) -> None:
        """Draw output against input from the live scope capture (volts)."""
        x = np.asarray(x, dtype=float)
        y = np.asarray(y, dtype=float)
        if len(x) < 2 or len(x) != len(y):
            return
        self.scope_curve.setData(x, y, connect="finite")
        # fixed ranges that move only when the data leaves them or shrinks to
        # a quarter, so the axes are not re-rendered every frame; never below
        # SCOPE_MIN_V (silence or denormal values would give the axis a zero
        # tick spacing, and pyqtgraph's axis divides by it)
        for key, d in (("scope x", x), ("scope y", y)):
            d = d[np.isfinite(d)]
            m = max(float(np.max(np.abs(d))) if len(d) else 0.0, SCOPE_MIN_V / 1.25)
            cur = self._ranges.get(key)
            if cur is None or m > cur or m < 0.25 * cur:
                r = 1.25 * m
                self._ranges[key] = r
                if key == "scope x":
                    self.scope.setXRange(-r, r, padding=0)
                else:
                    self.scope.setYRange(-r, r, padding=0)

    def _legend(self) -> None:
        if self.blind:
            self.meter_legend.setText("Blind trial: the output meter, control, gain "
                                      "reduction, traces and scope are hidden until it ends.")
            return
        parts = ["input / output: RMS level in dBFS (bar) and peak (mark)"]
        if self.has_control:
            parts.append("control: the gain cell's control current, µA")
            parts.append("gain red.: gain reduction, dB below the resting gain "
                         "(0 dB = none)")
        self.meter_legend.setText(";  ".join(parts))

    def set_has_control(self, on: bool) -> None:
        """Show the control and gain-reduction meters and traces only for a
        design that declares a control (a gain cell)."""
        self.has_control = bool(on)
        self.m_ctl.setVisible(self.has_control)
        self.m_gr.setVisible(self.has_control)
        self.dyn.setVisible(self.has_control)
        self.traces.set_visible_rows(
            ["gain reduction", "control current", "probe"] if self.has_control else ["probe"])
        self._legend()

    def set_hiss(self, on: bool) -> None:
        """Show whether the design's noise plays (without asking to switch it)."""
        self.hiss_btn.blockSignals(True)
        self.hiss_btn.setChecked(bool(on))
        self.hiss_btn.blockSignals(False)
        self.hiss_btn.setText("Circuit noise: on" if on else "Circuit noise: off")

    def show_floor(self, s: dict | None) -> None:
        """The noise-floor readout: a
        :func:`solderless.engine.analysis.noise.floor_summary`, in the
        words of the command line (:func:`~solderless.engine.analysis.noise.floor_figures`),
        or None when there is none; the full line of the command line is
        its tooltip."""
        if s is None:
            self.floor_lab.setText("floor —")
            self.floor_lab.setToolTip(FLOOR_HELP)
            return
        from solderless.engine.analysis.noise import floor_brief, floor_figures
        self.floor_lab.setText("floor " + floor_brief(s))
        self.floor_lab.setToolTip(f"{FLOOR_HELP}\n\nnoise floor at the output, 20 Hz-20 kHz: "
                                  + floor_figures(s))

    def show_dynamics(self, r) -> None:
        """Attack and release readouts (a
        :class:`solderless.engine.analysis.preview.Dynamics` or None)."""
        def ms(v):
            return "—" if v is None else (f"{v * 1e3:.1f} ms" if v < 0.1 else
                                          f"{v * 1e3:.0f} ms")
        if r is None:
            self.dyn.setText("attack —   release —")
            return
        self.dyn.setText(f"attack (63 %) {ms(r.attack_s)}   release (63 %) {ms(r.release_s)}")

    def set_blind(self, on: bool) -> None:
        """Blind trial: hide every reading that differs between A and B
        (output, control, gain reduction, CPU, traces, scope); keep the input
        meter (the same source feeds both), xruns and latency."""
        self.blind = bool(on)
        self._legend()
        for m in (self.m_out, self.m_ctl, self.m_gr):
            m.blank = "hidden" if self.blind else "—"
            m.set_value(None)
        if self.blind:
            self.traces.clear()
            self.scope_curve.setData([], [])
            self.cpu.set("hidden")
            self.state.set("LIVE (blind trial)")
        self.hist.clear()
        self.hist_t.clear()

    def show_blind(self, snap: dict) -> None:
        """A meter frame during a blind trial: only what is the same for A and B."""
        self.m_in.set_value(snap["input"]["rms_dbfs"], snap["input"]["peak_dbfs"])
        self.xruns.set(str(snap.get("xruns", 0)), bad=snap.get("xruns", 0) > 0)
        self.latency.set(f"{1e3 * snap.get('latency', {}).get('total_s', 0):.1f} ms")
        self.state.set("LIVE (blind trial)" +
                       (f"  muted: {snap['guard']}" if snap.get("guard") else ""),
                       bad=bool(snap.get("guard")))

    def stopped(self) -> None:
        """Playback ended: say so and blank the live readings (they no longer
        move, so they must not look live)."""
        self.set_blind(False)
        for m in (self.m_in, self.m_out, self.m_ctl, self.m_gr):
            m.set_value(None)
        self.state.set("stopped")
        self.cpu.set("—")
        self.xruns.set("—")
        self.latency.set("—")

    def clear_live(self) -> None:
        self.probe_pick.blockSignals(True)
        self.probe_pick.clear()              # the host's probes fill it again
        self.probe_pick.blockSignals(False)
        self._live_probe = None
        self.hist.clear()
        self.hist_t.clear()
        self._ranges = {}
        self.traces.set_x_range(-TRACE_SECONDS, 0.0, "seconds ago")
        self.scope_curve.setData([], [])
        self.scope.disableAutoRange()
