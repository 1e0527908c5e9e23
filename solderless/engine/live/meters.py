"""Meters: per-block statistics written by the audio thread, read as
ballistic meter values by any other thread.

The audio thread writes one frame per block into a :class:`~solderless.engine.live.ring.FrameRing`
(column layout below). :class:`MeterReader` drains the ring from the terminal
or GUI thread and turns frames into readings:

* **Peak**: the largest absolute sample; the display holds a new peak for
  ``PEAK_HOLD_S`` (1.0 s) and then falls back at ``PEAK_FALL_DB_PER_S``
  (20 dB/s) towards the current block peak.
* **RMS**: root of the mean square over a rectangular sliding window of
  ``RMS_WINDOW_S`` (300 ms), rounded to whole blocks.
* dBFS is referenced to a full-scale sine (AES17): a sine whose peak just
  reaches full scale reads 0 dBFS on both its peak and its RMS
  (RMS dBFS = 20 log10(rms * sqrt(2) / full_scale_peak)).
* dBu is referenced to 0.775 V RMS.
* Gain reduction follows the convention "output level change in dB"
  (negative when the circuit turns the gain down). From the control quantity,
  for a gain cell whose gain is proportional to it (a bipolar OTA: gm = Iabc /
  2VT), ``20 log10(I / I_quiescent)``; measured, ``20 log10(rms_out / rms_in)``
  minus the small-signal gain in dB.
"""
from __future__ import annotations

import math
from collections import deque

import numba
import numpy as np

from solderless.engine.live.limiter import GUARD_REASONS

DBU_REF_VRMS = 0.775
PEAK_HOLD_S = 1.0
PEAK_FALL_DB_PER_S = 20.0
RMS_WINDOW_S = 0.300
FLOOR_DB = -150.0

# frame columns ---------------------------------------------------------------
C_BLOCK, C_TIME = 0, 1
C_IN_PEAK, C_IN_MS = 2, 3            # volts at the input jack
C_OUT_PEAK, C_OUT_MS = 4, 5          # volts at the output jack (what is heard)
C_DAC_PEAK, C_DAC_MS = 6, 7          # full-scale units after level and limiter
C_CPU, C_XRUNS, C_GUARD = 8, 9, 10
C_AB_POS = 11                        # 0 = A heard, 1 = B heard
C_LOUD_A, C_LOUD_B, C_OFFSET = 12, 13, 14   # K-weighted power A/B, dB offset
C_LIMIT_GR = 15                      # deepest limiter gain in the block, dB
C_OUT_MS_A, C_OUT_MS_B = 16, 17
C_OUT_PEAK_A, C_OUT_PEAK_B = 18, 19
C_PROBES = 20                        # then probes of A, then probes of B



def _max_nan(a: float, b: float) -> float:
    """max() that keeps a NaN once seen (Python's max drops it by order)."""
    if a != a or b != b:
        return math.nan
    return max(a, b)


def dbu_to_vrms(dbu: float) -> float:
    """Volts RMS for a level in dBu (0 dBu = 0.775 V RMS)."""
    return DBU_REF_VRMS * 10.0 ** (dbu / 20.0)


def vrms_to_dbu(v: float) -> float:
    """Level in dBu of ``v`` volts RMS (NaN for NaN, inf for inf)."""
    return to_db(v / DBU_REF_VRMS)


def to_db(x: float) -> float:
    """20 log10(x), floored at ``FLOOR_DB`` for zero or negative input. NaN
    stays NaN and infinity stays infinity: a meter never shows an invalid
    signal as silence."""
    if x != x:
        return math.nan
    if x == math.inf:
        return math.inf
    return 20.0 * math.log10(x) if x > 1e-300 else FLOOR_DB


def fmt_db(x, width: int = 6, floor: float = -149.0) -> str:
    """A dB reading for the terminal: ``NaN`` for an invalid signal,
    ``+inf`` for an infinite one, ``-inf`` at the floor."""
    if x is not None and x != x:
        return "NaN".rjust(width)
    if x == math.inf:
        return "+inf".rjust(width)
    if x is None or x <= floor:
        return "-inf".rjust(width)
    return f"{x:{width}.1f}"


@numba.njit(nogil=True, cache=True)
def peak_ms(x, n):  # pragma: no cover - compiled
    """Peak absolute value and mean square of ``x[:n]``. A NaN sample makes
    both NaN (an infinite one, both infinite), so the meters show it."""
    pk = 0.0
    acc = 0.0
    bad = False
    for i in range(n):
        v = x[i]
        if v != v:
            bad = True
            continue
        a = abs(v)
        if a > pk:
            pk = a
        acc += v * v
    if bad:
        return np.nan, np.nan
    return pk, acc / max(n, 1)


@numba.njit(nogil=True, cache=True)
def probe_means_mapped(buf, nframes, row, col0, idx, width):  # pragma: no cover
    """Write the mean of each probe row ``j`` of ``buf[:, :nframes]`` into
    column ``col0 + idx[j]`` of ``row``; columns of probes the simulator
    lacks read NaN."""
    for c in range(width):
        row[col0 + c] = np.nan
    for p in range(idx.shape[0]):
        acc = 0.0
        for i in range(nframes):
            acc += buf[p, i]
        row[col0 + idx[p]] = acc / nframes if nframes > 0 else np.nan


SCOPE_DECIMATE = 2
"""The scope capture keeps every second sample (24 kHz at 48 kHz: enough
points per cycle to draw an input/output transfer curve)."""
SCOPE_FRAMES = 16384


@numba.njit(nogil=True, cache=True)
def scope_write(data, written, x, y, n, decim, phase):  # pragma: no cover - compiled
    """Append every ``decim``-th sample pair ``(x[i], y[i])`` of a block to the
    ring ``data`` (rows of 2), then publish by advancing ``written[0]`` once.
    ``phase[0]`` carries the decimation phase across blocks. Audio thread."""
    cap = data.shape[0]
    w = written[0]
    ph = phase[0]
    for i in range(n):
        if ph == 0:
            r = w % cap
            data[r, 0] = x[i]
            data[r, 1] = y[i]
            w += 1
        ph += 1
        if ph >= decim:
            ph = 0
    phase[0] = ph
    written[0] = w


class _Session:
    """Figures over the whole session (since the reader was made): the largest
    input and output peaks, the deepest gain reduction, the control current's
    range and the CPU load per block (kept for percentiles)."""

    def __init__(self):
        self.in_peak = 0.0
        self.out_peak = 0.0
        self.dac_peak = 0.0
        self.gr_min: list[float | None] = [None, None]
        self.ctl_min: list[float | None] = [None, None]
        self.ctl_max: list[float | None] = [None, None]
        self.cpu = np.zeros(1 << 16)
        self.n_cpu = 0
        self.invalid_blocks: dict[str, int] = {}

    def feed_cpu(self, c: float) -> None:
        self.cpu[self.n_cpu % self.cpu.shape[0]] = c
        self.n_cpu += 1

    def feed_control(self, v: int, cur: float) -> None:
        if math.isnan(cur):
            return
        lo, hi = self.ctl_min[v], self.ctl_max[v]
        self.ctl_min[v] = cur if lo is None else min(lo, cur)
        self.ctl_max[v] = cur if hi is None else max(hi, cur)

    def feed_gr(self, v: int, gr: float | None) -> None:
        if gr is None or math.isnan(gr):
            return
        g = self.gr_min[v]
        self.gr_min[v] = gr if g is None else min(g, gr)

    def cpu_stats(self) -> dict:
        k = min(self.n_cpu, self.cpu.shape[0])
        if k == 0:
            return {"median": None, "p99": None, "max": None, "blocks": 0}
        c = self.cpu[:k]
        return {"median": float(np.median(c)), "p99": float(np.percentile(c, 99)),
                "max": float(c.max()), "blocks": int(self.n_cpu)}


class _Ballistics:
    """Peak hold/fall and windowed RMS of one level column pair."""

    def __init__(self, window_frames: int):
        self.msq: deque[float] = deque(maxlen=max(1, window_frames))
        self.hold_db = FLOOR_DB
        self.age = 0.0
        self.last_peak = 0.0
        self.invalid_age = math.inf     # seconds since the last NaN/inf block

    def feed(self, peak: float, ms: float, dt: float) -> None:
        self.last_peak = peak
        if not (math.isfinite(peak) and math.isfinite(ms)):
            # an invalid block: shown as such for the hold time, kept out of
            # the running figures so they recover once the signal is valid
            self.invalid_age = 0.0
            self.msq.append(0.0)
            return
        self.invalid_age += dt
        self.msq.append(ms)
        p_db = to_db(peak)
        if p_db >= self.hold_db:
            self.hold_db = p_db
            self.age = 0.0
        else:
            self.age += dt
            if self.age > PEAK_HOLD_S:
                self.hold_db = max(p_db, self.hold_db - PEAK_FALL_DB_PER_S * dt)

    @property
    def invalid(self) -> bool:
        """True while a NaN or infinite block is within the peak hold time."""
        return self.invalid_age <= PEAK_HOLD_S

    @property
    def rms(self) -> float:
        """Windowed RMS (linear); NaN while :attr:`invalid`."""
        if self.invalid:
            return math.nan
        return math.sqrt(max(0.0, sum(self.msq) / len(self.msq))) if self.msq else 0.0

    @property
    def peak(self) -> float:
        """Displayed peak (linear), with hold and fall applied; NaN while
        :attr:`invalid`."""
        if self.invalid:
            return math.nan
        if self.hold_db <= FLOOR_DB:
            return 0.0
        try:
            return 10.0 ** (self.hold_db / 20.0)
        except OverflowError:       # a peak within a hair of the float maximum
            return math.inf


class MeterReader:
    """Turns ring frames into meter readings (runs off the audio thread).

    Parameters
    ----------
    ring : the host's frame ring.
    fs, block : sample rate (Hz) and block size (samples) of the stream.
    in_full_scale_v, out_full_scale_v : peak volts at the jack that map to
        digital full scale on input and output.
    probe_names_a, probe_names_b : probe names in frame order.
    control_index : position of the gain-cell control probe in A's probes
        (None if the design has none), and ``control_quiescent`` its value at
        the operating point with no signal.
    """

    def __init__(self, ring, fs: float, block: int, in_full_scale_v: float,
                 out_full_scale_v: float, probe_names_a=(), probe_names_b=(),
                 probe_units_a=(), probe_units_b=()):
        self.ring = ring
        self.fs = float(fs)
        self.block = int(block)
        self.dt = block / fs
        self.in_fs_v = float(in_full_scale_v)
        self.out_fs_v = float(out_full_scale_v)
        self.names_a = tuple(probe_names_a)
        self.names_b = tuple(probe_names_b)
        self.units_a = tuple(probe_units_a) or ("",) * len(self.names_a)
        self.units_b = tuple(probe_units_b) or ("",) * len(self.names_b)
        w = max(1, int(round(RMS_WINDOW_S * fs / block)))
        self.window_frames = w
        self.inp = _Ballistics(w)
        self.out = _Ballistics(w)
        self.dac = _Ballistics(w)
        self.out_a = _Ballistics(w)
        self.out_b = _Ballistics(w)
        self.since = 0
        self.lost = 0
        self.frames_seen = 0
        self.cpu_max = 0.0
        self.cpu_sum = 0.0
        self.limit_gr_min = 0.0
        self.last = None
        # per-voice control: (probe index, quiescent value) set by the host
        self.control_a: tuple[int, float] | None = None
        self.control_b: tuple[int, float] | None = None
        self.small_signal_gain_db: list[float | None] = [None, None]
        self.control_hist: list[deque] = [deque(maxlen=w), deque(maxlen=w)]
        # "linear": gain proportional to the control (OTA); other laws get no
        # control-based gain reduction (their scale is not known here)
        self.control_law: list[str] = ["linear", "linear"]
        self.session = _Session()

    def poll(self) -> dict:
        """Drain new frames and return the current readings (see :meth:`snapshot`)."""
        frames, self.since, lost = self.ring.read_new(self.since)
        self.lost += lost
        for f in frames:
            # Python floats: arithmetic on a runaway reading (1e300 A of
            # control current times 1e6) gives inf quietly instead of a numpy
            # overflow RuntimeWarning on stderr
            f = f.tolist()
            self.frames_seen += 1
            self.inp.feed(f[C_IN_PEAK], f[C_IN_MS], self.dt)
            self.out.feed(f[C_OUT_PEAK], f[C_OUT_MS], self.dt)
            self.dac.feed(f[C_DAC_PEAK], f[C_DAC_MS], self.dt)
            self.out_a.feed(f[C_OUT_PEAK_A], f[C_OUT_MS_A], self.dt)
            self.out_b.feed(f[C_OUT_PEAK_B], f[C_OUT_MS_B], self.dt)
            self.cpu_max = max(self.cpu_max, f[C_CPU])
            self.cpu_sum += f[C_CPU]
            self.limit_gr_min = min(self.limit_gr_min, f[C_LIMIT_GR])
            ss = self.session
            ss.in_peak = _max_nan(ss.in_peak, f[C_IN_PEAK])
            ss.out_peak = _max_nan(ss.out_peak, f[C_OUT_PEAK])
            ss.dac_peak = _max_nan(ss.dac_peak, f[C_DAC_PEAK])
            for c, k in ((C_IN_PEAK, "input"), (C_OUT_PEAK_A, "output"),
                         (C_OUT_PEAK_B, "output"), (C_DAC_PEAK, "device")):
                if not math.isfinite(f[c]):
                    ss.invalid_blocks[k] = ss.invalid_blocks.get(k, 0) + 1
            ss.feed_cpu(f[C_CPU])
            for v, ctl, off in ((0, self.control_a, 0),
                                (1, self.control_b, len(self.names_a))):
                if ctl is not None:
                    cur = f[C_PROBES + off + ctl[0]]
                    self.control_hist[v].append(cur)
                    ss.feed_control(v, cur)
                    if self.control_law[v] == "linear" and ctl[1] > 0 and cur > 0:
                        ss.feed_gr(v, 20.0 * math.log10(cur / ctl[1]))
            self.last = f
        return self.snapshot()

    def session_figures(self) -> dict:
        """Figures over the whole session, beside the ballistic readings:
        largest input/output peak (V and dBFS), deepest gain reduction from
        the control (dB, per block mean of the control), the control current's
        range (A), xruns and CPU load per block (median, p99, max)."""
        ss = self.session
        f = self.last
        out = {
            "input_peak_v": ss.in_peak,
            "input_peak_dbfs": to_db(ss.in_peak / self.in_fs_v),
            "output_peak_v": ss.out_peak,
            "output_peak_dbfs": to_db(ss.dac_peak),
            "xruns": 0 if f is None else int(f[C_XRUNS]),
            "cpu_load": ss.cpu_stats(),
            "invalid_blocks": dict(ss.invalid_blocks),
            "voices": {},
        }
        for v in (0, 1):
            if v == 1 and self.control_b is None:
                continue
            out["voices"]["AB"[v]] = {
                "gr_control_db_deepest": ss.gr_min[v],
                "control_a_min": ss.ctl_min[v], "control_a_max": ss.ctl_max[v],
            }
        return out

    def _gr(self, voice: int) -> tuple[float | None, float | None, float | None]:
        """(control, gain reduction from the control, measured gain
        reduction). Only a design that declares a control (``[meters]
        control``) has them: a booster has no gain reduction to show. Both
        read 0 dB at rest: the control against its resting value, the
        measured one against the small-signal gain at the resting control;
        the measured one is capped at 0 dB (a level above the resting gain
        is the signal's spectrum against the 1 kHz reference, not a gain
        reduction)."""
        ctl = self.control_a if voice == 0 else self.control_b
        if ctl is None:
            return None, None, None
        gr_ctl = None
        cur = None
        hist = self.control_hist[voice]
        if ctl is not None and hist and not math.isnan(hist[-1]):
            cur = hist[-1]
            q = ctl[1]
            if q > 0 and cur > 0 and self.control_law[voice] == "linear":
                gr_ctl = 20.0 * math.log10(cur / q)
        gr_meas = None
        g = self.small_signal_gain_db[voice]
        out = self.out_a if voice == 0 else self.out_b
        rin, rout = self.inp.rms, out.rms
        if g is not None and rin > 1e-6 and rout > 0:
            gr_meas = min(0.0, 20.0 * math.log10(rout / rin) - g)
        return cur, gr_ctl, gr_meas

    def snapshot(self) -> dict:
        """Current readings as a plain dict (SI units and dB; see module doc)."""
        s2 = math.sqrt(2.0)
        f = self.last
        snap: dict = {
            "frames": self.frames_seen, "frames_lost": self.lost,
            "peak_hold_s": PEAK_HOLD_S, "peak_fall_db_per_s": PEAK_FALL_DB_PER_S,
            "rms_window_s": self.window_frames * self.dt,
            "input": {
                "peak_v": self.inp.peak, "rms_v": self.inp.rms,
                "peak_dbfs": to_db(self.inp.peak / self.in_fs_v),
                "rms_dbfs": to_db(self.inp.rms * s2 / self.in_fs_v),
                "rms_dbu": vrms_to_dbu(self.inp.rms),
                "invalid": self.inp.invalid,
            },
            "output": {
                "peak_v": self.out.peak, "rms_v": self.out.rms,
                "rms_dbu": vrms_to_dbu(self.out.rms),
                # NaN while the circuit's output is invalid, even though the
                # device then gets silence from the guard: never a quiet floor
                "peak_dbfs": math.nan if self.out.invalid else to_db(self.dac.peak),
                "rms_dbfs": math.nan if self.out.invalid else to_db(self.dac.rms * s2),
                "limiter_gr_db": 0.0 if f is None else float(f[C_LIMIT_GR]),
                "limiter_gr_db_max": self.limit_gr_min,
                "invalid": self.out.invalid or self.out_a.invalid or self.out_b.invalid
                or self.dac.invalid,
            },
            "cpu_load": 0.0 if f is None else float(f[C_CPU]),
            "cpu_load_max": self.cpu_max,
            "cpu_load_mean": self.cpu_sum / self.frames_seen if self.frames_seen else 0.0,
            "xruns": 0 if f is None else int(f[C_XRUNS]),
            "guard": "" if f is None else GUARD_REASONS.get(int(f[C_GUARD]), "muted"),
            "ab_position": 0.0 if f is None else float(f[C_AB_POS]),
        }
        voices = {}
        for v, names, units in ((0, self.names_a, self.units_a),
                                (1, self.names_b, self.units_b)):
            if v == 1 and not names and self.control_b is None and (f is None or f[C_LOUD_B] == 0):
                continue
            off = C_PROBES + (0 if v == 0 else len(self.names_a))
            probes = {} if f is None else {
                n: (None if math.isnan(f[off + i]) else float(f[off + i]))
                for i, n in enumerate(names)}
            cur, gr_ctl, gr_meas = self._gr(v)
            loud = None if f is None else f[C_LOUD_A if v == 0 else C_LOUD_B]
            out = self.out_a if v == 0 else self.out_b
            voices["AB"[v]] = {
                "probes": probes,
                "probe_units": dict(zip(names, units)),
                "control_a": cur,
                "control_ua": None if cur is None else cur * 1e6,
                "gr_control_db": gr_ctl,
                "gr_measured_db": gr_meas,
                "small_signal_gain_db": self.small_signal_gain_db[v],
                "out_rms_v": out.rms, "out_peak_v": out.peak,
                "loudness_lkfs": (None if not loud or loud <= 1e-20
                                  else -0.691 + 10.0 * math.log10(loud)),
            }
        snap["voices"] = voices
        snap["loudness_offset_db"] = 0.0 if f is None else float(f[C_OFFSET])
        snap["session"] = self.session_figures()
        return snap
