"""Compressor measurements: static curve, gain-reduction traces, attack and
release times.

Definitions used throughout (stated so results can be compared):

* **Levels** are RMS levels in dB relative to 1 V (dBV), measured on steady
  tones after the circuit has settled.
* **Static curve**: output level against input level for steady tones at
  stepped levels. Above the threshold a compressor's curve has a slope
  ``1/R`` (R the ratio); gain reduction is ``y - x`` in dB relative to the
  gain at low level (Giannoulis, Massberg & Reiss, "Digital dynamic range
  compressor design -- a tutorial and analysis", JAES 60(6), 2012).
* **Gain reduction from a control signal**: for a gain cell whose gain is
  proportional to its control quantity (a bipolar OTA: gm = Iabc / 2VT), the
  gain reduction is ``20 log10(control / control_at_rest)``; for a dB-linear
  ("log") cell it is the control change times its dB-per-unit scale.
* **Attack and release times** are time constants: the time for the gain
  reduction to cover 63 % (1 - 1/e) of its step after a level change (the
  time-constant convention of Giannoulis et al. 2012; the general term "step
  response time" is IEC 60050-351, 351-45-36). For a first-order response
  this equals its time constant tau; a 10-90 % rise is about 2.2 tau.

Nothing here runs on the audio thread.

Example
-------
>>> fs = 48000.0
>>> t = np.arange(int(fs)) / fs
>>> gr = -12.0 * np.exp(-t / 0.2)            # recovers with tau = 0.2 s
>>> round(float(release_time(gr, fs, start=0.0, final=0.0)), 3)
0.2
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np

#: Fraction of the step that defines a time constant (1 - 1/e).
TIME_CONSTANT_FRACTION = 1.0 - math.exp(-1.0)


def db(x: np.ndarray | float, floor: float = 1e-12) -> np.ndarray | float:
    """20 log10 of a magnitude, with a floor so silence gives a finite number."""
    return 20.0 * np.log10(np.maximum(np.abs(x), floor))


def rms(x: np.ndarray) -> float:
    """Root-mean-square value of a signal."""
    x = np.asarray(x, dtype=float)
    return float(np.sqrt(np.mean(x * x))) if x.size else 0.0


def rms_envelope(x: np.ndarray, fs: float, window: float = 0.010) -> np.ndarray:
    """Running RMS over a centred rectangular window of ``window`` seconds."""
    x = np.asarray(x, dtype=float)
    n = max(1, int(round(window * fs)))
    k = np.ones(n) / n
    return np.sqrt(np.maximum(np.convolve(x * x, k, mode="same"), 0.0))


def gain_reduction_from_control(control: np.ndarray, rest: float,
                                law: str = "linear", db_per_unit: float = 1.0) -> np.ndarray:
    """Gain reduction in dB (negative when the gain is reduced) from a gain
    cell's control quantity.

    law "linear": gain proportional to the control (bipolar OTA, where
    gm = Iabc / 2VT): ``20 log10(control / rest)``. law "log": gain in dB
    linear in the control: ``(control - rest) * db_per_unit``.
    """
    c = np.asarray(control, dtype=float)
    if law == "linear":
        if not rest > 0:
            raise ValueError("the control quantity at rest must be positive")
        return 20.0 * np.log10(np.maximum(c, rest * 1e-6) / rest)
    if law == "log":
        return (c - rest) * db_per_unit
    raise ValueError(f"unknown control law {law!r} (linear or log)")


def gain_reduction_from_levels(x: np.ndarray, y: np.ndarray, fs: float,
                               rest_gain_db: float, window: float = 0.010) -> np.ndarray:
    """Gain reduction in dB from input and output signals: the running level
    difference (RMS over ``window``) minus the small-signal gain at rest.
    Meaningful only where the input is not silent."""
    ex = rms_envelope(x, fs, window)
    ey = rms_envelope(y, fs, window)
    return db(ey) - db(ex) - rest_gain_db


def _step_time(trace: np.ndarray, fs: float, start: float, settle: float | None,
               fraction: float, smooth: float, final: float | None) -> float:
    g = np.asarray(trace, dtype=float)
    if smooth > 0:
        n = max(1, int(round(smooth * fs)))
        g = np.convolve(g, np.ones(n) / n, mode="same")
    i0 = int(round(start * fs))
    if not 0 <= i0 < g.size - 1:
        raise ValueError("start lies outside the trace")
    g0 = g[i0]
    tail = g[i0:] if settle is None else g[i0:i0 + int(round(settle * fs))]
    m = max(1, tail.size // 10)
    g1 = float(np.mean(tail[-m:])) if final is None else float(final)
    step = g1 - g0
    if step == 0.0:
        return float("nan")
    target = g0 + fraction * step
    seg = g[i0:]
    crossed = np.nonzero((seg - target) * np.sign(step) >= 0.0)[0]
    if crossed.size == 0:
        return float("nan")
    k = int(crossed[0])
    if k == 0:
        return 0.0
    # linear interpolation between the samples either side of the crossing
    a, b = seg[k - 1], seg[k]
    frac = (target - a) / (b - a) if b != a else 0.0
    return (k - 1 + frac) / fs


def release_time(gain_reduction: np.ndarray, fs: float, start: float,
                 settle: float | None = None, fraction: float = TIME_CONSTANT_FRACTION,
                 smooth: float = 0.0, final: float | None = None) -> float:
    """Release time in seconds: from ``start`` (when the loud signal stops)
    until the gain reduction has recovered by ``fraction`` (default 63 %,
    1 - 1/e) of its step towards the final value.

    The final value is the mean of the last tenth of the trace after
    ``start`` (or of the ``settle`` seconds after it) unless ``final`` gives
    it (0 dB for a release back to rest). ``smooth`` averages
    the trace over that many seconds first (to remove detector ripple).
    Returns NaN when there is no step or it is never reached. Convention:
    Giannoulis et al., JAES 2012 (time constant); IEC 60050-351-45-36.
    """
    return _step_time(gain_reduction, fs, start, settle, fraction, smooth, final)


def attack_time(gain_reduction: np.ndarray, fs: float, start: float,
                settle: float | None = None, fraction: float = TIME_CONSTANT_FRACTION,
                smooth: float = 0.0, final: float | None = None) -> float:
    """Attack time in seconds: from ``start`` (the onset of the loud signal)
    until the gain reduction has covered ``fraction`` (63 %) of its step;
    same conventions as :func:`release_time`."""
    return _step_time(gain_reduction, fs, start, settle, fraction, smooth, final)


@dataclass
class StaticCurve:
    """Steady-tone input and output levels (dBV RMS) of a static curve."""
    input_db: np.ndarray
    output_db: np.ndarray
    frequency: float

    @property
    def gain_db(self) -> np.ndarray:
        return self.output_db - self.input_db

    @property
    def gain_reduction_db(self) -> np.ndarray:
        """Gain relative to the gain at the lowest level (negative: reduced)."""
        return self.gain_db - self.gain_db[0]

    def slope(self, above_db: float) -> float:
        """Least-squares slope of output against input level for input levels
        at or above ``above_db`` (1 = no compression; 1/R above threshold)."""
        sel = self.input_db >= above_db
        if np.count_nonzero(sel) < 2:
            raise ValueError("fewer than two levels above the given input level")
        return float(np.polyfit(self.input_db[sel], self.output_db[sel], 1)[0])

    def threshold_db(self, reduction_db: float = 1.0) -> float:
        """Lowest input level where the gain has dropped by ``reduction_db``
        (interpolated); NaN when it never does."""
        gr = -self.gain_reduction_db
        idx = np.nonzero(gr >= reduction_db)[0]
        if idx.size == 0:
            return float("nan")
        k = int(idx[0])
        if k == 0:
            return float(self.input_db[0])
        a, b = gr[k - 1], gr[k]
        f = (reduction_db - a) / (b - a)
        return float(self.input_db[k - 1] + f * (self.input_db[k] - self.input_db[k - 1]))


def stepped_tone(levels_db: np.ndarray, fs: float, frequency: float = 440.0,
                 hold: float = 0.5) -> np.ndarray:
    """A sine at ``frequency`` whose RMS level steps through ``levels_db``
    (dBV), ``hold`` seconds per level, phase-continuous."""
    n = int(round(hold * fs))
    t = np.arange(n * len(levels_db)) / fs
    amp = np.repeat(np.sqrt(2.0) * 10.0 ** (np.asarray(levels_db, float) / 20.0), n)
    return amp * np.sin(2.0 * np.pi * frequency * t)


def static_curve(process: Callable[[np.ndarray], np.ndarray], fs: float,
                 levels_db: np.ndarray, frequency: float = 440.0, hold: float = 0.5,
                 measure: float = 0.25) -> StaticCurve:
    """Measure a static curve with steady tones at stepped levels.

    ``process`` maps an input signal (volts, at ``fs``) to the output signal
    (same length); it is called once on a phase-continuous tone that steps
    upward through ``levels_db`` (dBV RMS), ``hold`` seconds each. Each
    level's output is the RMS of the last ``measure`` seconds of its hold (the
    circuit has settled by then if the hold is several attack times long);
    the output's DC is removed first.
    """
    levels = np.asarray(levels_db, dtype=float)
    x = stepped_tone(levels, fs, frequency, hold)
    y = np.asarray(process(x), dtype=float)
    if y.shape != x.shape:
        raise ValueError("process must return one output sample per input sample")
    n = int(round(hold * fs))
    m = int(round(measure * fs))
    # whole periods in the measuring window, so the RMS has no ripple bias
    per = fs / frequency
    m = max(int(per), int(int(m / per) * per))
    out = []
    inn = []
    for k in range(len(levels)):
        seg_y = y[(k + 1) * n - m:(k + 1) * n]
        seg_x = x[(k + 1) * n - m:(k + 1) * n]
        out.append(db(rms(seg_y - np.mean(seg_y))))
        inn.append(db(rms(seg_x)))
    return StaticCurve(np.array(inn), np.array(out), frequency)


def tone_burst(fs: float, frequency: float = 220.0, amplitude: float = 0.5,
               lead: float = 0.3, burst: float = 0.6, tail: float = 1.5,
               quiet_amplitude: float = 0.0) -> tuple[np.ndarray, float, float]:
    """A test signal for attack and release: ``lead`` seconds at
    ``quiet_amplitude``, a ``burst`` at ``amplitude`` (volts peak), then
    ``tail`` seconds at ``quiet_amplitude`` again. Returns the signal and the
    burst's start and end times (seconds)."""
    n = int(round((lead + burst + tail) * fs))
    t = np.arange(n) / fs
    a = np.full(n, quiet_amplitude)
    i0, i1 = int(round(lead * fs)), int(round((lead + burst) * fs))
    a[i0:i1] = amplitude
    return a * np.sin(2.0 * np.pi * frequency * t), i0 / fs, i1 / fs
