"""The live host: runs one design (or a baseline and a variant for A/B) on a
block stream, takes edits while playing, and feeds meters.

Threads
-------
* **Audio thread** (PortAudio's callback, or the caller of
  :meth:`LiveHost.run_offline`): :meth:`LiveHost._audio_block` only. It reads
  the source, calls each simulator's ``process_into`` (compiled, GIL
  released), runs the output stage (:mod:`solderless.engine.live.limiter`) and writes one
  meter frame into a lock-free ring. No array allocation, no files, no locks,
  no per-sample Python.
* **Edit worker** (one daemon thread owned by the host): every edit posted
  through the public methods runs here, in order: the design is changed, the
  simulator re-derives its matrices (``set_values``, lands at the next block
  boundary with the circuit state carried over) or, for a topology change, a
  new simulator is built and swapped in with a short crossfade. Value edits
  of one part are coalesced (the latest value wins). An edit the simulator
  refuses (a singular network) is undone in the design and the previous
  values keep playing. After an edit, a circuit that had gone NaN or run
  away is restarted from its operating point (the guard re-arms once the
  output stays sane). The design is written to an autosave file (atomic
  write and rename) at most every ``AUTOSAVE_MIN_S`` during a burst, and the
  last of a burst always, so no edit is lost to a crash or a stream error.
* **Ramp threads**: a pot turn ramps over several blocks so it does not
  click; a short-lived thread per turn posts one step at a time to the
  worker and waits between steps, so neither the caller nor other edits
  wait for the ramp.
* **Any other thread** (terminal, GUI): public methods; they post work and
  return a :class:`concurrent.futures.Future`, or read meters.

The GIL is shared: a long pure-Python stretch in the GUI delays the callback.
The kernels release the GIL, so what remains in the callback is a few dozen
microseconds of Python per block.
"""
from __future__ import annotations

import math
import os
import queue
import threading
import time
from concurrent.futures import Future
from pathlib import Path
from typing import Callable

import numpy as np

from solderless.engine.autosave import Autosaves
from solderless.engine.errors import AudioError, DesignError, SolderlessError
from solderless.engine.live import limiter as lim
from solderless.engine.live import meters as M
from solderless.engine.live.loudness import RunningLoudness
from solderless.engine.live.ring import FrameRing
from solderless.engine.live.source import LiveInput, Source
from solderless.engine.settings import config_dir

from solderless.engine.levels import FULL_SCALE_DBU as DEFAULT_FULL_SCALE_DBU  # noqa: E402  (solderless/engine/levels.py)
"""Default input and output calibration: a full-scale sine is +3 dBU
(1.10 V RMS, 1.55 V peak) at the jack, a typical instrument-input full
scale of an audio interface (common practice)."""

LOUDNESS_GATE_POWER = 10 ** ((-70.0 + 0.691) / 10)   # -70 LUFS absolute gate
MAX_MATCH_DB = 24.0
MAX_BLOCK = 4096
MAX_POT_STEP = 0.005
"""Largest pot rotation change per block during a ramp (0.5 % of travel)."""
MAX_POT_REL = 0.005
"""Largest change of a pot's element per block during a ramp, as a fraction
of the pot's whole resistance (so a divider's ratio moves at most 0.5 % of
full scale per block, whatever the taper): keeps the gain step per block well
under a 220 Hz sine's own sample-to-sample change (2 sin(pi 220 / 48000) =
2.9 % of its peak)."""
MAX_RAMP_STEPS = 2000
IDLE_S = 0.1
"""A ramp stops waiting for blocks when none has run for this long."""


def full_scale_peak_from_dbu(dbu: float) -> float:
    """Peak volts of a full-scale sine whose RMS is ``dbu`` dBu."""
    return M.dbu_to_vrms(dbu) * math.sqrt(2.0)


def default_simulator_factory(circuit, fs, oversample, probes):
    """Build the engine's simulator (``solderless.engine.solver.Simulator``)."""
    from solderless.engine.solver import Simulator
    return Simulator(circuit, fs=fs, oversample=oversample, probes=tuple(probes),
                     probe_decimate=1)


def hiss_of(design) -> tuple[bool, int]:
    """(on, seed) of a design's live noise (its ``hiss`` setting)."""
    from solderless.engine.solver.livenoise import design_setting
    return design_setting(design)


def _stem(design) -> str:
    """A file-name stem for a design: its file's stem, else its name."""
    p = getattr(design, "path", None)
    if p:
        return Path(p).stem
    name = str(getattr(design, "name", "design"))
    return "".join(c if c.isalnum() or c in "-_" else "-" for c in name).strip("-") or "design"


def _is_builtin(path) -> bool:
    try:
        from solderless.engine.design import PRESETS
        return Path(path).resolve().is_relative_to(PRESETS.resolve())
    except Exception:
        return False


def _probes_for(design) -> tuple[list[str], int | None]:
    """Probe list of a design (control probe first) and the control's index."""
    meters = getattr(design, "meters", None) or {}
    control = meters.get("control")
    names: list[str] = []
    if control:
        names.append(control)
    extra = list(meters.get("probes", []) or [])
    if hasattr(design, "probe_exprs"):
        extra += [p for p in design.probe_exprs()]
    for p in extra:
        if p not in names:
            names.append(p)
    return names, (0 if control else None)


def measure_small_signal(design, fs: float, oversample: int, block: int,
                         control_probe: str | None, factory: Callable):
    """Small-signal gain at 1 kHz (1 mV peak, small enough that a
    compressor's detector stays at rest, so the gain-reduction meter reads
    0 dB at rest; RMS ratio over the settled second half of 0.5 s) and the
    quiescent value of the control probe (mean
    over the last third of 0.3 s of silence), on a simulator of its own.
    Returns ``(gain_db or None, quiescent or None, problem or None)``."""
    try:
        circuit = design.flatten()
        probes = [control_probe] if control_probe else []
        sim = factory(circuit, fs, oversample, probes)
    except SolderlessError as exc:
        return None, None, str(exc)
    # A runaway circuit (a 1 MV supply) overflows the sums below; the result
    # is checked for finiteness instead of numpy printing a RuntimeWarning.
    with np.errstate(over="ignore", invalid="ignore"):
        gain_db, q = _measure(sim, fs, block, oversample, probes)
    if gain_db is not None and not math.isfinite(gain_db):
        return None, None, "the output is not finite at these values"
    if q is not None and not math.isfinite(q):
        q = None
    return gain_db, q, None


def _measure(sim, fs, block, oversample, probes):
    """The loops of :func:`measure_small_signal`."""
    n = block
    x = np.zeros(n)
    y = np.zeros(n)
    pb = np.zeros((1, n * oversample)) if probes else None
    ctl = []
    t_sil = int(0.3 * fs / n)
    for b in range(t_sil):
        k = sim.process_into(x, y, pb)
        if pb is not None and b >= t_sil * 2 // 3 and k:
            ctl.append(float(pb[0, :k].mean()))
    f, amp = 1000.0, 0.001
    nt = int(0.5 * fs / n)
    acc_in = acc_out = 0.0
    for b in range(nt):
        t = (np.arange(n) + b * n) / fs
        x[:] = amp * np.sin(2 * np.pi * f * t)
        sim.process_into(x, y, pb)
        if b >= nt // 2:
            acc_in += float(np.dot(x, x))
            acc_out += float(np.dot(y, y))
    gain_db = 10 * math.log10(acc_out / acc_in) if acc_out > 0 and acc_in > 0 and \
        math.isfinite(acc_out) else None
    return gain_db, (float(np.mean(ctl)) if ctl else None)


def scope_tail(ring: FrameRing, n: int) -> tuple[np.ndarray, np.ndarray]:
    """The last ``n`` pairs of a scope ring as (input, output) arrays."""
    n = int(n)
    frames, _, _ = ring.read_new(max(0, ring.written - n))
    frames = frames[-n:] if n > 0 else frames[:0]   # the writer may have moved on
    return frames[:, 0].copy(), frames[:, 1].copy()


class Voice:
    """One design running live: its simulator, buffers and loudness meter.
    The host owns it; the audio thread calls :meth:`process`."""

    def __init__(self, design, label: str, fs: float, oversample: int,
                 factory: Callable):
        self.design = design
        self.label = label
        self.fs = fs
        self.oversample = oversample
        self.factory = factory
        self.probes, self.control_index = _probes_for(design)
        meters = getattr(design, "meters", None) or {}
        self.control_law = str(meters.get("control_law", "linear"))
        self.sim = None
        self.incoming = None
        self.retired = None
        self.xpos = 1.0
        cap = MAX_BLOCK
        self.y = np.zeros(cap)
        self.y_old = np.zeros(cap)
        np_ = max(1, len(self.probes))
        self.probe_buf = np.zeros((np_, cap * max(1, oversample)))
        self.probe_scratch = np.zeros_like(self.probe_buf)
        self.loud = RunningLoudness(fs, tau=3.0)
        self.build_time_s = 0.0
        self.probe_units: tuple = ()
        # probe row of each simulator -> position in self.probes (a rebuilt
        # circuit may have lost a probed net, e.g. when its stage is bypassed)
        self.maps: dict[int, np.ndarray] = {}
        self.last_map = np.arange(len(self.probes), dtype=np.int64)
        self.missing: list[str] = []

    def build(self):
        """Flatten the design and build a simulator (worker thread). Returns it.
        Probes the circuit no longer has are left out (their meters read
        nothing) and listed in ``self.missing``."""
        t0 = time.perf_counter()
        circuit = self.design.flatten()
        keep = list(self.probes)
        missing = []
        on, seed = hiss_of(self.design)
        factory = self.factory
        if on:      # the design's noise plays (solver/livenoise.py)
            from solderless.engine.solver.livenoise import hiss_simulator_factory
            factory = hiss_simulator_factory(seed)
        while True:
            try:
                sim = factory(circuit, self.fs, self.oversample, keep)
                break
            except SolderlessError as exc:
                bad = exc.part if exc.part in keep else next(
                    (p for p in keep if p in str(exc)), None)
                if bad is None:
                    raise
                keep.remove(bad)
                missing.append(bad)
        self.build_time_s = time.perf_counter() - t0
        self.missing = missing
        units = dict(zip(keep, tuple(getattr(sim, "probe_units", ()) or ())))
        if not missing:
            self.probe_units = tuple(units.get(p, "") for p in self.probes)
        self.maps[id(sim)] = np.array([self.probes.index(p) for p in keep], dtype=np.int64)
        return sim

    def warm(self, sim, n: int = 64) -> None:
        """Run one silent block through ``sim`` so compiled code is loaded."""
        z = np.zeros(n)
        sim.process_into(z, self.y_old[:n], self.probe_scratch if self.probes else None)

    def process(self, x: np.ndarray, n: int) -> int:
        """Run one block (audio thread); output volts land in ``self.y``.
        Returns the number of probe frames written to ``probe_buf``."""
        pb = self.probe_buf if self.probes else None
        inc = self.incoming
        if inc is None:
            self.last_map = self.maps.get(id(self.sim), self.last_map)
            return self.sim.process_into(x[:n], self.y[:n], pb)
        ps = self.probe_scratch if self.probes else None
        self.sim.process_into(x[:n], self.y_old[:n], ps)
        self.last_map = self.maps.get(id(inc), self.last_map)
        k = inc.process_into(x[:n], self.y[:n], pb)
        self.xpos = lim.crossfade_into(self.y_old, self.y, n, self.xpos,
                                       1.0 / (lim.XFADE_S * self.fs))
        if self.xpos >= 1.0:
            self.retired = self.sim
            self.sim = inc
            self.incoming = None
        return k


class LiveHost:
    """Live playing host for one design, or two (A = baseline, B = variant).

    Parameters
    ----------
    design : a Design (``solderless.engine.design.load_design``) to play.
    variant : optional second Design for A/B.
    fs, block : sample rate (Hz) and block size (samples).
    oversample : oversampling factor (None: the design's suggestion).
    source : an :class:`solderless.engine.live.source.Source` (default: live input 1).
    in_full_scale_v, out_full_scale_v : peak volts at the jack that map to
        digital full scale (defaults: a +3 dBu full-scale sine).
    level_db : output level (dB); playback starts silent and ramps to it.
    ceiling_dbfs : safety limiter ceiling.
    loudness_match : keep A and B at the same BS.1770 loudness.
    simulator_factory : ``f(circuit, fs, oversample, probes) -> simulator``.
    autosave : path for the autosave copy of A's design (None: beside the
        config folder; False: off).
    shared : put the meter ring and the scope ring in shared memory, so
        another process can read them (:class:`solderless.engine.live.remote.HostProcess`).
    """

    def __init__(self, design, *, variant=None, fs: float = 48000.0, block: int = 128,
                 oversample: int | None = None, source: Source | None = None,
                 in_full_scale_v: float | None = None, out_full_scale_v: float | None = None,
                 level_db: float = 0.0, ceiling_dbfs: float = lim.DEFAULT_CEILING_DBFS,
                 loudness_match: bool = True, simulator_factory: Callable | None = None,
                 autosave: str | os.PathLike | bool | None = None, shared: bool = False):
        from solderless.engine.live.limits import (check_ceiling_dbfs, check_full_scale_v,
                                        check_level_db, check_rate)
        fs = check_rate(fs)
        level_db = check_level_db(level_db)
        ceiling_dbfs = check_ceiling_dbfs(ceiling_dbfs)
        if in_full_scale_v is not None:
            in_full_scale_v = check_full_scale_v(in_full_scale_v, "input")
        if out_full_scale_v is not None:
            out_full_scale_v = check_full_scale_v(out_full_scale_v, "output")
        if not 16 <= int(block) <= MAX_BLOCK:
            raise AudioError(f"block size {block} is out of range",
                             hint=f"use 16 to {MAX_BLOCK} samples (64 or more at 48 kHz)")
        if not fs > 0:
            raise AudioError(f"sample rate {fs} is not positive")
        self.fs = float(fs)
        self.block = int(block)
        os_ = int(oversample or getattr(design, "oversample", 1) or 1)
        if os_ not in (1, 2, 4, 8):
            raise AudioError(f"oversampling x{os_} is not offered", hint="use 1, 2, 4 or 8")
        self.oversample = os_
        self.source = source or LiveInput(0)
        from solderless.engine.levels import FULL_SCALE_V as dflt   # one calibration, every command
        self.in_fs_v = float(in_full_scale_v or dflt)
        self.out_fs_v = float(out_full_scale_v or dflt)
        self.level_db = float(level_db)
        self.ceiling_dbfs = float(ceiling_dbfs)
        self.loudness_match = bool(loudness_match) and variant is not None
        factory = simulator_factory or default_simulator_factory
        self.voices = [Voice(design, "A", self.fs, os_, factory)]
        if variant is not None:
            self.voices.append(Voice(variant, "B", self.fs, os_, factory))
        self.selected = 0
        self.edit_voice = 0
        # audio-thread buffers and state
        self.x = np.zeros(MAX_BLOCK)
        self.mixv = np.zeros(MAX_BLOCK)
        self.out = np.zeros(MAX_BLOCK)
        self.st = lim.make_state()
        self.prm = lim.make_params(self.fs, self.out_fs_v, self.level_db, self.ceiling_dbfs)
        na = len(self.voices[0].probes)
        nb = len(self.voices[1].probes) if len(self.voices) > 1 else 0
        mk = FrameRing.shared if shared else FrameRing
        self.ring = mk(8192, M.C_PROBES + na + nb)
        # scope capture: (input V, output V) pairs, decimated (meters.scope_write)
        self.scope = mk(M.SCOPE_FRAMES, 2)
        self._scope_phase = np.zeros(1, dtype=np.int64)
        self._clock: threading.Thread | None = None
        self._clock_stop = threading.Event()
        self.blocks = 0
        self.xruns = 0
        self.offset_db = 0.0
        self.error: BaseException | None = None
        self.stream = None
        self.stream_latency_s = (0.0, 0.0)
        self._edit_pending_t: float | None = None
        self._edit_lat = np.zeros(1024)
        self._edit_post = np.zeros(1024)
        self._meter_lock = threading.Lock()
        self._n_edit_lat = 0
        self.edits = 0
        self._last_block_t = -1e9
        self.messages: "queue.SimpleQueue[str]" = queue.SimpleQueue()
        self._guard_told = 0
        self.tap: np.ndarray | None = None
        self.tap_pos = 0
        # autosave
        self._autosave_default = autosave is None or autosave is True
        self._autosaved: set[str] = set()
        if autosave is False:
            self.autosave_path = None
        elif autosave:
            self.autosave_path = Path(autosave)
        else:
            self.autosave_path = config_dir() / "autosave"
        self._store = Autosaves(config_dir(), "console")
        self.meter = M.MeterReader(self.ring, self.fs, self.block, self.in_fs_v, self.out_fs_v,
                                   self.voices[0].probes,
                                   self.voices[1].probes if len(self.voices) > 1 else ())
        # worker
        self._jobs: "queue.Queue[tuple[Callable, Future] | None]" = queue.Queue()
        self._worker = threading.Thread(target=self._work, name="solderless-edits", daemon=True)
        self._worker.start()
        self._built = False
        self._closing = False
        self._measure_dirty: set[int] = set()
        #: re-measure small-signal gain and quiescent control after edits here;
        #: a host in a process of its own leaves that to its parent
        #: (solderless.engine.live.remote), which hands the figures over (set_measurement)
        self.measure_after_edits = True
        self._coalesce: dict = {}
        self._coalesce_lock = threading.Lock()
        self._ramp_tokens: dict = {}
        self._ramps_running: set = set()
        self._autosave_dirty: set[int] = set()
        self._autosave_lock = threading.Lock()
        self._autosave_t = -1e9
        self._recover_trips = 0
        self._auto_recover = True
        self._measure_wake = threading.Event()
        self._measurer = threading.Thread(target=self._measure_loop,
                                          name="solderless-measure", daemon=True)
        self._measurer.start()

    # ------------------------------------------------------------ set-up
    def prepare(self) -> None:
        """Build and warm the simulators, render the source and measure each
        voice's small-signal gain and quiescent control value. Called by
        :meth:`start` and :meth:`run_offline`; may be called earlier."""
        if self._built:
            return
        for v in self.voices:
            v.sim = v.build()
            v.warm(v.sim)
        self.source.prepare(self.fs, self.in_fs_v)
        self._warm_kernels()
        for i, v in enumerate(self.voices):
            if i == 0:
                self.meter.units_a = v.probe_units or self.meter.units_a
            else:
                self.meter.units_b = v.probe_units or self.meter.units_b
            self._measure_voice(i)
        self._built = True

    def _warm_kernels(self) -> None:
        """Load every compiled kernel the audio thread calls, on scratch data."""
        z = np.zeros(self.block)
        st = lim.make_state()
        lim.output_stage(z, z, self.block, st, self.prm.copy(), z.copy(), z.copy())
        lim.crossfade_into(z, z.copy(), self.block, 0.0, 0.1)
        M.peak_ms(z, self.block)
        M.probe_means_mapped(np.zeros((1, 4)), 4, np.zeros(1 + M.C_PROBES), M.C_PROBES,
                             np.zeros(1, dtype=np.int64), 1)
        M.scope_write(np.zeros((4, 2)), np.zeros(1, dtype=np.int64), z, z, self.block,
                      M.SCOPE_DECIMATE, np.zeros(1, dtype=np.int64))
        self.source.fill(None, self.block, z.copy())
        if hasattr(self.source, "pos"):
            self.source.pos = 0

    def measure_in_process(self) -> None:
        """Re-measure after edits in a helper process of its own instead of a
        thread of this one: building a simulator holds the GIL for several
        milliseconds at a stretch (longer than a block period at 128 samples),
        which would hold up the audio callback. The helper starts on first
        use; the measuring thread only waits for its answers."""
        from concurrent.futures import ProcessPoolExecutor
        import multiprocessing as mp
        if getattr(self, "_measure_pool", None) is None:
            self._measure_pool = ProcessPoolExecutor(1, mp_context=mp.get_context("spawn"))

    def _measure_voice(self, i: int) -> None:
        """Small-signal gain and quiescent control value of voice ``i``
        (:func:`measure_small_signal`), off the audio thread; in the helper
        process if :meth:`measure_in_process` was called."""
        v = self.voices[i]
        ctl = v.probes[v.control_index] if v.control_index is not None else None
        args = (v.design, self.fs, self.oversample, self.block, ctl, v.factory)
        pool = getattr(self, "_measure_pool", None)
        if pool is not None and self._built:
            gain_db, q, problem = pool.submit(measure_small_signal, *args).result(120)
        else:
            gain_db, q, problem = measure_small_signal(*args)
        if problem:
            self.messages.put(f"{v.label}: could not measure the small-signal gain: {problem}")
            return
        self.meter.small_signal_gain_db[i] = gain_db
        self.meter.control_law[i] = v.control_law
        if q is not None:
            if i == 0:
                self.meter.control_a = (v.control_index, q)
            else:
                self.meter.control_b = (v.control_index, q)

    # ------------------------------------------------------------ audio thread
    def _audio_block(self, indata, outdata, n: int, xrun: bool) -> None:
        """Process one block (audio thread). ``outdata`` (n, channels) float32
        is always filled, with silence on any failure."""
        t0 = time.perf_counter()
        try:
            if xrun:
                self.xruns += 1
            if self._edit_pending_t is not None:
                k = self._n_edit_lat % self._edit_lat.shape[0]
                self._edit_lat[k] = t0 - self._edit_pending_t
                self._edit_post[k] = self._edit_pending_t
                self._n_edit_lat += 1
                self._edit_pending_t = None
            x = self.x
            self.source.fill(indata, n, x)
            row = self.ring.next_row()
            col = M.C_PROBES
            for i, v in enumerate(self.voices):
                k = v.process(x, n)
                if v.probes:
                    M.probe_means_mapped(v.probe_buf, k, row, col, v.last_map,
                                         len(v.probes))
                col += len(v.probes)
                v.loud.process(v.y[:n])
            va = self.voices[0]
            vb = self.voices[1] if len(self.voices) > 1 else va
            if self.loudness_match:
                pa, pb = va.loud.power, vb.loud.power
                gate = LOUDNESS_GATE_POWER * self.out_fs_v ** 2
                # both finite: an infinite power (a file of inf samples) must
                # not reach log10 as inf/inf or x/inf (log of zero)
                if gate < pa < math.inf and gate < pb < math.inf:
                    off = 10.0 * math.log10(pa / pb)
                    off = max(-MAX_MATCH_DB, min(MAX_MATCH_DB, off))
                    self.offset_db = off
                    if off > 0:
                        self.prm[lim.P_GA] = 10.0 ** (-off / 20.0)
                        self.prm[lim.P_GB] = 1.0
                    else:
                        self.prm[lim.P_GA] = 1.0
                        self.prm[lim.P_GB] = 10.0 ** (off / 20.0)
            gmin = lim.output_stage(va.y, vb.y, n, self.st, self.prm, self.mixv, self.out)
            outdata[:n, :] = self.out[:n, None]
            tap = self.tap
            if tap is not None and self.tap_pos + n <= tap.shape[0]:
                tap[self.tap_pos:self.tap_pos + n] = self.out[:n]
                self.tap_pos += n
            # meter frame
            row[M.C_BLOCK] = self.blocks
            row[M.C_TIME] = self.blocks * n / self.fs
            row[M.C_IN_PEAK], row[M.C_IN_MS] = M.peak_ms(x, n)
            row[M.C_OUT_PEAK], row[M.C_OUT_MS] = M.peak_ms(self.mixv, n)
            row[M.C_DAC_PEAK], row[M.C_DAC_MS] = M.peak_ms(self.out, n)
            M.scope_write(self.scope.data, self.scope._written, x, self.mixv, n,
                          M.SCOPE_DECIMATE, self._scope_phase)
            row[M.C_OUT_PEAK_A], row[M.C_OUT_MS_A] = M.peak_ms(va.y, n)
            row[M.C_OUT_PEAK_B], row[M.C_OUT_MS_B] = M.peak_ms(vb.y, n)
            row[M.C_XRUNS] = self.xruns
            row[M.C_GUARD] = self.st[lim.S_GUARD]
            row[M.C_AB_POS] = self.st[lim.S_AB]
            sc = 1.0 / (self.out_fs_v * self.out_fs_v)
            row[M.C_LOUD_A] = va.loud.power * sc
            row[M.C_LOUD_B] = vb.loud.power * sc if len(self.voices) > 1 else 0.0
            row[M.C_OFFSET] = self.offset_db
            row[M.C_LIMIT_GR] = 20.0 * math.log10(gmin) if gmin > 0 else M.FLOOR_DB
            row[M.C_CPU] = (time.perf_counter() - t0) * self.fs / n
            self.ring.commit()
            self.blocks += 1
            self._last_block_t = t0
        except BaseException as exc:  # never let the callback die silently
            outdata[:] = 0
            if self.error is None:
                self.error = exc
            self.st[lim.S_GUARD] = lim.GUARD_CALLBACK

    # ------------------------------------------------------------ running
    def enable_tap(self, seconds: float) -> None:
        """Record the next ``seconds`` of sound-card output into ``self.tap``
        (preallocated here; the audio thread only copies into it)."""
        self.tap = np.zeros(int(seconds * self.fs) + self.block)
        self.tap_pos = 0

    def tapped(self) -> np.ndarray:
        """The recorded output so far (a copy)."""
        return np.zeros(0) if self.tap is None else self.tap[:self.tap_pos].copy()

    def run_offline(self, n_blocks: int, indata: np.ndarray | None = None,
                    channels: int = 1) -> np.ndarray:
        """Run ``n_blocks`` blocks without a sound card, on the calling thread
        (tests, benches, rendering). ``indata`` (samples, ch) feeds a
        :class:`LiveInput` source. Returns the sound-card output, mono."""
        self.prepare()
        n = self.block
        out = np.zeros((n_blocks * n, channels), dtype=np.float32)
        for b in range(n_blocks):
            ind = None if indata is None else indata[b * n:(b + 1) * n]
            self._audio_block(ind, out[b * n:(b + 1) * n], n, False)
            if self.error is not None:
                raise self.error
        return out[:, 0].astype(np.float64)

    def start(self, *, input_device=None, output_device=None, channels_out: int = 2,
              channels_in: int | None = None) -> None:
        """Build the simulators and open the PortAudio stream
        (:func:`solderless.engine.live.stream.open_stream`)."""
        from solderless.engine.live import stream
        self.prepare()
        self.stream = stream.open_stream(self, input_device=input_device,
                                         output_device=output_device,
                                         channels_out=channels_out, channels_in=channels_in)

    def start_paced(self, realtime: bool = True) -> None:
        """Run the audio path without a sound card, paced at real time by a
        thread of its own (benches and tests of the whole chain; no sound is
        heard). A block that starts more than one block period after its due
        time is counted as an xrun on the next block, the way PortAudio
        reports an underflow, and the clock then resynchronises.

        ``realtime``: ask for real-time (FIFO) scheduling of the clock thread,
        as PortAudio does for its callback thread where the system allows it
        (the clock sleeps between blocks; Linux also throttles real-time
        threads to 95 % of each second). Refused quietly if not permitted."""
        self.prepare()
        if self._clock is not None:
            return
        self._clock_stop.clear()
        n = self.block
        period = n / self.fs
        out = np.zeros((n, 1), dtype=np.float32)
        ind = np.zeros((n, 1), dtype=np.float32) if self.source.needs_input else None

        def run():
            if realtime and hasattr(os, "sched_setscheduler"):
                try:
                    os.sched_setscheduler(0, os.SCHED_FIFO, os.sched_param(
                        max(1, os.sched_get_priority_min(os.SCHED_FIFO) + 9)))
                except (OSError, AttributeError):
                    pass
            t_next = time.perf_counter()
            late = False
            while not self._clock_stop.is_set():
                self._audio_block(ind, out, n, late)
                late = False
                t_next += period
                now = time.perf_counter()
                if now > t_next + period:
                    late = True
                    t_next = now
                elif t_next > now:
                    time.sleep(t_next - now)
        self._clock = threading.Thread(target=run, name="solderless-clock", daemon=True)
        self._clock.start()

    def stop(self) -> None:
        """Close the stream (or the paced clock) and finish pending edits."""
        if self._clock is not None:
            self._clock_stop.set()
            self._clock.join(5)
            self._clock = None
        if self.stream is not None:
            try:
                self.stream.stop()
                self.stream.close()
            except Exception:  # a vanished device may refuse to close
                pass
            self.stream = None
        self.flush()

    def close(self) -> None:
        """Stop and end the edit worker."""
        self.stop()
        self._jobs.put(None)
        self._worker.join(timeout=5)
        # the last edits of a burst may still wait for the throttled autosave
        # (the measuring thread can be busy): write them before closing
        self._autosave_pending(force=True)
        self._closing = True
        self._measure_wake.set()
        for r in (self.ring, self.scope):
            r.close()
        pool = getattr(self, "_measure_pool", None)
        if pool is not None:
            pool.shutdown(wait=False, cancel_futures=True)

    @property
    def running(self) -> bool:
        """True while a stream (or the paced clock) runs without error."""
        if self._clock is not None:
            return self.error is None
        s = self.stream
        return bool(s is not None and s.active and self.error is None)

    # ------------------------------------------------------------ worker
    def _work(self) -> None:
        while True:
            job = self._jobs.get()
            if job is None:
                return
            fn, fut = job
            if not fut.set_running_or_notify_cancel():
                continue
            try:
                fut.set_result(fn())
            except BaseException as exc:
                fut.set_exception(exc)
            for v in self.voices:   # drop retired simulators off the audio thread
                if v.retired is not None:
                    v.maps.pop(id(v.retired), None)
                    v.retired = None

    def _post(self, fn: Callable) -> Future:
        fut: Future = Future()
        self._jobs.put((fn, fut))
        return fut

    def flush(self, timeout: float = 30.0) -> None:
        """Wait until every posted edit (and pot ramp) has run, and write the
        autosaves still pending."""
        t_end = time.perf_counter() + timeout
        for f in list(self._ramps_running):
            try:
                f.result(max(0.1, t_end - time.perf_counter()))
            except Exception:
                pass
        self._post(lambda: None).result(max(0.1, t_end - time.perf_counter()))
        self._autosave_pending(force=True)

    def _wait_blocks(self, k: int = 1, timeout: float = 0.25) -> None:
        """Wait (worker) until ``k`` more blocks have been processed, so a ramp
        step lands on its own block; gives up after ``timeout`` seconds."""
        start = self.blocks
        t_end = time.perf_counter() + timeout
        while self.blocks - start < k and time.perf_counter() < t_end:
            if time.perf_counter() - self._last_block_t > IDLE_S:
                return          # nothing is playing: the change lands when it starts
            time.sleep(0.0005)

    def _apply(self, voice: Voice, changes: dict, t_post: float | None = None) -> None:
        """Hand element changes to the running simulator (worker thread).
        ``t_post``: when the edit was asked for; the audio thread records the
        time from then to the start of the first block that uses it."""
        sim = voice.sim
        if sim is None:
            return
        sim.set_values(changes)
        if voice.incoming is not None:
            voice.incoming.set_values(changes)
        if t_post is not None:
            self._edit_pending_t = t_post

    def _after_edit(self, vi: int) -> None:
        self.edits += 1
        self._auto_recover = True
        self._autosave_dirty.add(vi)
        self._autosave_pending()
        self._measure_dirty.add(vi)
        self._measure_wake.set()
        self._recover_if_muted()

    def set_measurement(self, vi: int, gain_db: float | None, quiescent: float | None) -> None:
        """Take a small-signal gain and quiescent control value measured
        elsewhere (a front end's process, see solderless.engine.live.remote) for voice
        ``vi``."""
        v = self.voices[vi]
        if gain_db is not None:
            self.meter.small_signal_gain_db[vi] = gain_db
        if quiescent is not None and v.control_index is not None:
            if vi == 0:
                self.meter.control_a = (v.control_index, quiescent)
            else:
                self.meter.control_b = (v.control_index, quiescent)

    AUTOSAVE_MIN_S = 0.25
    """Autosaves are written at most this often during a burst of edits (the
    last one of the burst is written by the measuring thread or by
    :meth:`flush`); each write holds the GIL for a while."""

    def _autosave_pending(self, force: bool = False) -> None:
        """Write the autosaves of edited voices, unless one was written less
        than ``AUTOSAVE_MIN_S`` ago (``force``: write now). Worker thread,
        measuring thread or :meth:`flush`."""
        with self._autosave_lock:
            now = time.perf_counter()
            if not self._autosave_dirty or (not force and
                                            now - self._autosave_t < self.AUTOSAVE_MIN_S):
                return
            dirty, self._autosave_dirty = self._autosave_dirty, set()
            self._autosave_t = now
            for vi in sorted(dirty):
                self._autosave(vi)

    def _recover_if_muted(self) -> None:
        """Worker thread, after an edit (and after a guard trip, see
        :meth:`_measure_loop`): if the guard muted because the circuit went
        NaN or ran away, rebuild each voice whose output is not sane from its
        DC operating point at the current values and swap it in. The output
        stage re-arms once the output has stayed sane for
        ``limiter.REARM_S`` and ramps up from silence. A rebuild that fails
        (no operating point) leaves the mute on and says why."""
        if int(self.st[lim.S_GUARD]) not in lim.GUARD_REARMING or not self._built:
            return
        self._recover_trips = int(self.st[lim.S_TRIPS])
        for v in self.voices:
            y = v.y[:self.block]
            if np.all(np.isfinite(y)) and float(np.max(np.abs(y))) <= lim.RUNAWAY_V \
                    and v.incoming is None:
                continue
            try:
                sim = v.build()
                v.warm(sim)
            except SolderlessError as exc:
                self.messages.put(f"{v.label}: output stays muted; the circuit has no "
                                  f"operating point at these values ({exc})")
                continue
            if v.sim is None:
                v.sim = sim
                continue
            self._wait_xfade(v)
            v.xpos = 0.0
            v.incoming = sim
            self._wait_xfade(v)
        self.messages.put("the circuit was restarted from its operating point; the "
                          "output comes back (ramping up) once it stays sane")

    def _swap_in(self, v: Voice, sim) -> None:
        """Worker: make ``sim`` the voice's simulator, crossfading from the
        running one (a structural edit: bypass, model swap)."""
        if v.sim is None:
            v.sim = sim
            return
        v.xpos = 0.0
        v.incoming = sim
        self._wait_blocks(int(lim.XFADE_S * self.fs / self.block) + 2, timeout=1.0)

    def _wait_xfade(self, v: Voice) -> None:
        """Wait (worker) until a swap in progress on ``v`` has finished."""
        if v.incoming is None:
            return
        self._wait_blocks(int(lim.XFADE_S * self.fs / self.block) + 2, timeout=1.0)
        if v.incoming is not None and time.perf_counter() - self._last_block_t > IDLE_S:
            v.sim, v.incoming = v.incoming, None    # nothing is playing: swap now

    def _measure_loop(self) -> None:
        """Re-measure small-signal gain and quiescent control after edits, on
        its own thread so the edit queue never waits for it (debounced)."""
        while True:
            woke = self._measure_wake.wait(0.5)
            if self._closing:
                return
            if not woke:
                # a guard trip with no edit: try one restart
                # (at most once between edits, so a circuit that runs away
                # at its values is not rebuilt over and over)
                if int(self.st[lim.S_GUARD]) in lim.GUARD_REARMING and self._auto_recover and \
                        int(self.st[lim.S_TRIPS]) != self._recover_trips and self._built:
                    self._recover_trips = int(self.st[lim.S_TRIPS])
                    self._auto_recover = False
                    self._post(self._recover_if_muted)
                self._autosave_pending()
                continue
            time.sleep(0.2)                 # let a burst of edits finish
            self._measure_wake.clear()
            self._autosave_pending(force=True)
            dirty, self._measure_dirty = self._measure_dirty, set()
            if not self.measure_after_edits:
                dirty = set()
            for vi in sorted(dirty):
                try:
                    self._measure_voice(vi)
                except Exception as exc:  # a measurement must never stop playing
                    self.messages.put(f"could not re-measure the small-signal gain: {exc}")

    def _autosave_key(self, vi: int) -> tuple[str, str]:
        d = self.voices[vi].design
        stem = _stem(d) + ("-B" if vi == 1 else "")
        return Autosaves.key(getattr(d, "path", None), stem) + ("B" if vi == 1 else ""), stem

    def _autosave_target(self, vi: int) -> Path | None:
        """Autosave file of voice ``vi``: the given path for A (with ``-B``
        added for B), or this session's console autosave in
        ``config_dir()/autosave`` (:mod:`solderless.engine.autosave`)."""
        if self.autosave_path is None:
            return None
        if not self._autosave_default:
            p = self.autosave_path
            return p if vi == 0 else p.with_name(p.stem + "-B" + p.suffix)
        key, stem = self._autosave_key(vi)
        return self._store.path_for(key, stem)

    def autosaved_paths(self) -> list[str]:
        """The autosave files actually written this session."""
        return sorted(self._autosaved)

    def autosave_paths(self) -> list[str]:
        """Where each voice's edits are autosaved (empty if autosave is off)."""
        return [str(p) for p in (self._autosave_target(i) for i in range(len(self.voices)))
                if p is not None]

    def _autosave(self, vi: int) -> None:
        path = self._autosave_target(vi)
        if path is None:
            return
        d = self.voices[vi].design
        try:
            if self._autosave_default:
                key, stem = self._autosave_key(vi)
                self._store.write(d.to_toml(), key=key, name=stem,
                                  origin=getattr(d, "path", None))
                self._autosaved.add(str(path))
            else:
                from solderless.engine.design import atomic_write_text
                path.parent.mkdir(parents=True, exist_ok=True)
                atomic_write_text(path, d.to_toml())
                self._autosaved.add(str(path))
        except (SolderlessError, OSError) as exc:
            self.messages.put(f"autosave of {self.voices[vi].label} failed ({exc}); "
                              "save with 'save PATH'")

    def _voice(self, which) -> tuple[int, Voice]:
        i = self.edit_voice if which is None else (0 if which in (0, "A", "a") else 1)
        if i >= len(self.voices):
            raise AudioError("there is no variant (B) running", hint="start with --vs VARIANT")
        return i, self.voices[i]

    # ------------------------------------------------------------ edits (any thread)
    def edit(self, edit, voice=None) -> Future:
        """Apply an edit (:mod:`solderless.engine.design.edits`, the same
        data whichever front end sends it) to the edited (or given) voice's
        design, on the edit worker. New element values land at a block
        boundary with the circuit state carried over; a structural edit
        builds a new simulator and crossfades to it. A pot turn ramps (see
        :meth:`set_rotation`) and a value edit is coalesced (see
        :meth:`set_value`). If the running circuit refuses the edit, the
        inverse edit puts the design back, the previous circuit keeps
        playing and the error says why. Result: the edit's result."""
        from solderless.engine.design.edits import RECORD, SetRotation, SetValue
        if isinstance(edit, SetRotation):
            return self.set_rotation(edit.part, edit.rotation, voice)
        if isinstance(edit, SetValue) and edit.entry == RECORD and edit.part != "temperature":
            return self.set_value(edit.part, edit.value, voice)
        t_post = time.perf_counter()

        def job():
            i, v = self._voice(voice)
            return self._run_edit(i, v, edit, t_post).result
        return self._post(job)

    def _run_edit(self, i: int, v: Voice, edit, t_post: float | None):
        """Worker: apply ``edit`` to voice ``v``'s design and hand it to the
        running simulator (new values, or a new simulator swapped in with a
        crossfade). If the circuit does not take it, the design (and so a
        later save) must not keep an edit that was never heard: the inverse
        edit puts it back. Returns the :class:`Applied`."""
        from solderless.engine.design.edits import apply_edit
        dirty = getattr(v.design, "dirty", False)
        applied = apply_edit(v.design, edit)

        def back():
            apply_edit(v.design, applied.inverse)
            v.design.dirty = dirty
        # a structural edit, or noise switched on where the running
        # simulator has no noise sources: build anew and crossfade, as for
        # a bypass
        if applied.rebuild or self._hiss_needs_build(v):
            try:
                sim = v.build()
            except BaseException:
                back()
                raise
            v.warm(sim)
            if applied.rebuild and v.missing:
                self.messages.put(f"{v.label}: no longer measured after the change: "
                                  + ", ".join(v.missing))
            self._swap_in(v, sim)
        elif applied.changes:
            try:
                self._apply(v, applied.changes, t_post)
            except SolderlessError as exc:
                back()
                raise DesignError(f"this value makes the circuit unsolvable ({exc.message}); "
                                  "the previous value keeps playing",
                                  part=applied.part or exc.part,
                                  hint="choose another value") from None
            except BaseException:
                back()
                raise
        if not applied.rebuild:
            self._switch_hiss(v, t_post)
        self._after_edit(i)
        return applied

    def _hiss_needs_build(self, v: Voice) -> bool:
        """Worker: the design wants its noise on and the voice's simulator
        (the incoming one, during a crossfade) has no noise sources."""
        sim = v.incoming if v.incoming is not None else v.sim
        return sim is not None and hiss_of(v.design)[0] and not hasattr(sim, "set_hiss")

    def _switch_hiss(self, v: Voice, t_post: float | None) -> None:
        """Worker: make the running simulators' noise follow the design's
        ``hiss`` setting (any edit may change it: SetHiss, an undo, a
        recalled snapshot). A simulator with noise sources switches their
        amplitude (zero when off, kept in the kernel; lands at the next
        block boundary); one without them stays as it is while the noise is
        off (it is switched on by a build, :meth:`_run_edit`)."""
        on, seed = hiss_of(v.design)
        for sim in (v.sim, v.incoming):
            if sim is not None and hasattr(sim, "set_hiss") and (sim.on, sim.seed) != (on, seed):
                sim.set_hiss(on, seed)
                if t_post is not None:
                    self._edit_pending_t = t_post

    def set_hiss(self, on: bool, seed: int | None = None, voice=None) -> Future:
        """Turn the design's live noise on or off while playing (the
        :class:`solderless.engine.design.edits.SetHiss` edit). Result:
        ``(on, seed)``."""
        from solderless.engine.design.edits import SetHiss
        return self.edit(SetHiss(on, seed), voice)

    def hiss_state(self, voice=None) -> dict:
        """The edited (or given) voice's noise: ``on``, ``seed``, and whether
        its simulator (the incoming one during a crossfade) carries noise
        sources (``sources``: their number, 0 for a noiseless simulator)."""
        _, v = self._voice(voice)
        on, seed = hiss_of(v.design)
        sim = v.incoming if v.incoming is not None else v.sim
        return {"on": on, "seed": seed,
                "sources": len(getattr(sim, "sources", ())) if hasattr(sim, "set_hiss") else 0}

    def set_value(self, part: str, value: float, voice=None) -> Future:
        """Change a part's value (re-derive, lands at a block boundary).

        Coalesced: while an edit of the same part waits in the queue, a new
        value replaces it (the latest value wins, one re-derivation), and
        every caller's future gets the value that landed."""
        key = (self.edit_voice if voice is None else voice, part)
        fut: Future = Future()
        with self._coalesce_lock:
            ent = self._coalesce.get(key)
            if ent is not None:
                ent[0] = value
                ent[1].append(fut)
                return fut
            ent = [value, [fut]]
            self._coalesce[key] = ent
        t_post = time.perf_counter()

        def job():
            with self._coalesce_lock:
                if self._coalesce.get(key) is ent:
                    del self._coalesce[key]
                val, futs = ent[0], list(ent[1])
            try:
                from solderless.engine.design.edits import SetValue
                i, v = self._voice(voice)
                self._run_edit(i, v, SetValue(part, val), t_post)
                r = val
            except BaseException as exc:
                for f in futs:
                    if not f.done():
                        f.set_exception(exc)
                return None
            for f in futs:
                if not f.done():
                    f.set_result(r)
            return r
        self._post(job)
        return fut

    def step_value(self, part: str, steps: int = 1, series: str | None = None,
                   voice=None) -> Future:
        """Step a part's value ``steps`` places through an E-series (IEC
        60063; by default the part's own series,
        :func:`solderless.engine.values.stepping_series`). Result: the new value."""
        from solderless.engine.design.edits import SetValue
        from solderless.engine.values import step_preferred, stepping_series
        t_post = time.perf_counter()

        def job():
            i, v = self._voice(voice)
            info = self.part_info(part, voice)
            if info.value is None or not info.value > 0:
                raise DesignError("this part has no positive value to step", part=part)
            ser = series or stepping_series(info.type)
            new = step_preferred(info.value, ser, steps)
            self._run_edit(i, v, SetValue(part, new), t_post)
            return new
        return self._post(job)

    def set_rotation(self, pot: str, rotation: float, voice=None,
                     ramp_s: float = 0.030) -> Future:
        """Turn a pot to ``rotation`` (0..1), ramping over ``ramp_s`` seconds
        in block-sized steps so the move does not click.

        The ramp runs in the background: this returns at once, each step is
        a short job on the edit worker (other edits interleave), and a newer
        turn of the same pot takes over from wherever the ramp has got to.
        The future's result is the rotation reached."""
        fut: Future = Future()
        try:
            i, v = self._voice(voice)
            info = self.part_info(pot, voice)
            if not info.is_pot:
                raise DesignError("only a pot can be turned", part=pot,
                                  hint="use 'value' or 'up'/'down' for other parts")
            r1 = float(rotation)
            if not 0.0 <= r1 <= 1.0:
                raise DesignError(f"rotation must be from 0 to 1, not {rotation}", part=pot)
        except SolderlessError as exc:
            fut.set_exception(exc)
            return fut
        key = (i, pot)
        token = object()
        self._ramp_tokens[key] = token
        t_post = time.perf_counter()
        self._ramps_running.add(fut)

        def run():
            try:
                fut.set_result(self._ramp_pot_bg(v, i, pot, r1, ramp_s, t_post,
                                                 lambda: self._ramp_tokens.get(key) is token))
            except BaseException as exc:
                fut.set_exception(exc)
            finally:
                self._ramps_running.discard(fut)
        threading.Thread(target=run, name="solderless-ramp", daemon=True).start()
        return fut

    def _ramp_pot_bg(self, v: Voice, i: int, pot: str, r1: float, ramp_s: float,
                     t_post: float, current: Callable[[], bool]) -> float:
        """Ramp thread: post one step at a time to the worker, wait two
        blocks between steps (a step handed over while a block runs may
        miss it; the next one surely uses it), stop early when a newer
        turn of the pot took over. Returns the rotation reached."""
        def rot():
            r = self.part_info(pot, "AB"[i]).rotation
            return float(r if r is not None else 0.5)
        r0 = self._post(rot).result(30)
        min_steps = max(1, int(math.ceil(ramp_s * self.fs / self.block)))
        max_dr = min(MAX_POT_STEP, abs(r1 - r0) / min_steps) if r1 != r0 else 0.0
        r = r0
        for k in range(MAX_RAMP_STEPS + 1):
            if r == r1 or not current():
                break
            last = k == MAX_RAMP_STEPS      # step budget spent: land on the target
            r = self._post(lambda tp=(t_post if k == 0 else None), last=last:
                           self._ramp_step(v, pot, r1, max_dr, tp, last)).result(30)
            if r != r1:
                self._wait_blocks(2)
        self._post(lambda: self._after_edit(i)).result(30)
        return r

    def _ramp_step(self, v: Voice, pot: str, r1: float, max_dr: float,
                   t_post: float | None, last: bool) -> float:
        """Worker: one step of a pot ramp from the pot's present rotation
        towards ``r1`` (each element moves by at most ``MAX_POT_REL`` of the
        pot's total, found by halving the step). Returns the new rotation."""
        info = self.part_info(pot, v.label)
        r = float(info.rotation if info.rotation is not None else 0.5)
        prev = v.design.set_rotation(pot, r)
        if last:
            self._apply(v, v.design.set_rotation(pot, r1), t_post)
            return r1
        dr = min(max_dr, abs(r1 - r)) if max_dr > 0 else abs(r1 - r)
        while True:
            rn = r1 if dr >= abs(r1 - r) else r + math.copysign(dr, r1 - r)
            ch = v.design.set_rotation(pot, rn)
            total = sum(abs(x) for x in ch.values()) or 1.0
            worst = max((abs(ch[k] - prev[k]) / total for k in ch if k in prev),
                        default=0.0)
            if worst <= MAX_POT_REL or dr < 1e-6:
                break
            dr *= 0.5
        try:
            self._apply(v, ch, t_post)
        except SolderlessError:
            v.design.set_rotation(pot, r)
            raise
        return rn

    def set_taper(self, pot: str, taper, voice=None) -> Future:
        """Change a pot's taper ("linear", "audio", "reverse-audio" or a table
        of (rotation, fraction) points, as :meth:`Design.set_taper` takes);
        the new element values land at a block boundary with the state
        carried over. Result: the taper as stored."""
        from solderless.engine.design.edits import SetTaper
        return self.edit(SetTaper(pot, taper), voice)

    def set_bypass(self, stage: str, on: bool, voice=None) -> Future:
        """Bypass a stage (or bring it back): rebuild the simulator and swap it
        in with a short crossfade. Result: the build time in seconds."""
        from solderless.engine.design.edits import SetBypass

        def job():
            i, v = self._voice(voice)
            self._run_edit(i, v, SetBypass(stage, on), None)
            return v.build_time_s
        return self._post(job)

    def set_model(self, part: str, model: str, voice=None) -> Future:
        """Give a device part another library model (swap clipping diodes, a
        transistor ...): rebuild the simulator and crossfade to it, as a
        bypass does. Result: the model name as stored."""
        from solderless.engine.design.edits import SetModel

        def job():
            i, v = self._voice(voice)
            old = v.design.part(part).model
            self._run_edit(i, v, SetModel(part, model), None)
            return v.design.part(part).model if old is not None else model
        return self._post(job)

    def save(self, path: str | os.PathLike | None = None, voice=None) -> Future:
        """Save a design atomically (to its own file unless ``path`` is given).
        Result: the path written. Pot ramps still running finish first, so
        a turn typed before 'save' is saved at its target."""
        for f in list(self._ramps_running):
            try:
                f.result(30)
            except Exception:
                pass

        def job():
            i, v = self._voice(voice)
            target = path or getattr(v.design, "path", None)
            fallback = False
            if target is not None and not path and _is_builtin(target):
                # never overwrite a built-in design: save a copy here
                target, fallback = Path.cwd() / Path(target).name, True
            if target is None:
                target, fallback = Path.cwd() / f"{_stem(v.design)}.toml", True
            if fallback and Path(target).exists():
                # a file the user did not name is never replaced
                raise DesignError(f"a file named {Path(target).name} is already in this "
                                  "folder and was left untouched", file=str(target),
                                  hint="save under another name: save PATH")
            old = getattr(v.design, "path", None)
            if hasattr(v.design, "become_variant") and (
                    old is None or Path(target).resolve() != Path(old).resolve()):
                v.design.become_variant(target)      # its own name and notes
            return v.design.save(target)
        return self._post(job)

    # ------------------------------------------------------------ controls
    def part_info(self, part: str, voice=None):
        """PartInfo of ``part`` in the edited (or given) voice."""
        _, v = self._voice(voice)
        infos = v.design.parts()
        for p in infos:
            if p.qualname == part:
                return p
        if getattr(v.design, "netlist", None) is not None:
            # a netlist design's parts answer to any case and to 'netlist.X'
            try:
                obj = v.design.part(part)
            except SolderlessError:
                obj = None
            for p in infos:
                if obj is not None and p.name == obj.name:
                    return p
        names = [p.qualname for p in v.design.parts()]
        import difflib
        close = difflib.get_close_matches(part, names, n=3)
        raise DesignError(f"no part named '{part}'",
                          hint=("did you mean " + ", ".join(close) + "?") if close
                          else "type 'parts' to list them")

    def set_source(self, source: Source) -> None:
        """Change the input source while playing (any thread but the audio
        thread). The source is prepared here, then handed over in one
        reference swap; a source that needs the live input can only replace
        another one that does (the stream type is fixed when it opens)."""
        if self.stream is not None and bool(source.needs_input) != bool(self.source.needs_input):
            raise AudioError("this source needs a different kind of stream",
                             hint="stop and start again with --source " +
                                  ("input" if source.needs_input else "synth / tone / FILE"))
        source.prepare(self.fs, self.in_fs_v)
        self.source = source

    def select(self, which: str) -> None:
        """Hear A or B (crossfade of ``limiter.XFADE_S``); edits go to it too."""
        i = 0 if which in (0, "A", "a") else 1
        if i >= len(self.voices):
            raise AudioError("there is no variant (B) running", hint="start with --vs VARIANT")
        self.selected = i
        self.edit_voice = i
        self.prm[lim.P_AB_TARGET] = float(i)

    def set_level_db(self, db: float) -> None:
        """Output level in dB (smoothed on the audio thread). A non-finite or
        out-of-range level raises AudioError and the level stays as it was
        (:func:`solderless.engine.live.limits.check_level_db`)."""
        from solderless.engine.live.limits import check_level_db
        db = check_level_db(db)
        self.level_db = db
        self.prm[lim.P_LEVEL] = 10.0 ** (db / 20.0) / self.out_fs_v

    @property
    def edit_latencies_s(self) -> list[float]:
        """Seconds from each edit request to the start of the first block that
        used it (the most recent 1024 edits)."""
        k = min(self._n_edit_lat, self._edit_lat.shape[0])
        return [float(x) for x in self._edit_lat[:k]]

    @property
    def edit_landings(self) -> list[tuple[float, float]]:
        """``(t_asked, t_block)`` per edit (the most recent 1024), both on the
        ``time.perf_counter`` clock (system-wide monotonic on Linux, so
        another process can compare): when the edit was asked for and when
        the first block that used it started."""
        k = min(self._n_edit_lat, self._edit_lat.shape[0])
        return [(float(self._edit_post[i]), float(self._edit_post[i] + self._edit_lat[i]))
                for i in range(k)]

    def scope_spec(self) -> dict:
        """How to read the scope ring: shared-memory spec (or None), the
        decimation and the sample rate of the pairs."""
        return {"ring": self.scope.spec(), "decimate": M.SCOPE_DECIMATE,
                "rate": self.fs / M.SCOPE_DECIMATE}

    def scope_latest(self, n: int) -> tuple[np.ndarray, np.ndarray]:
        """The last ``n`` (input V, output V) pairs of the scope capture (any
        thread but the audio thread)."""
        return scope_tail(self.scope, n)

    @property
    def loudness_offset_db(self) -> float:
        """Applied A/B loudness offset: A minus B in LU (positive: A was louder
        and is turned down)."""
        return self.offset_db

    @property
    def guard_reason(self) -> str:
        """Why the output is muted ('' if it is not)."""
        g = int(self.st[lim.S_GUARD])
        if g == lim.GUARD_CALLBACK:
            return f"the audio callback failed: {self.error!r}"
        return M.GUARD_REASONS.get(g, "")

    def unmute(self) -> None:
        """Clear a guard mute; output ramps up from silence again."""
        lim.reset_guard(self.st)

    def latency(self) -> dict:
        """Latency in seconds: stream input/output buffers (as PortAudio
        reports them), one block, oversampling filters, and the total."""
        os_lat = max((getattr(v.sim, "latency_samples", 0.0) or 0.0) for v in self.voices) \
            if self._built else 0.0
        i, o = self.stream_latency_s
        d = {"stream_in_s": i, "stream_out_s": o, "block_s": self.block / self.fs,
             "oversampling_s": os_lat / self.fs}
        d["total_s"] = i + o + d["oversampling_s"] + (0.0 if (i or o) else d["block_s"])
        return d

    def meters(self) -> dict:
        """Drain the meter ring and return readings (any thread but the audio
        thread; readers take turns on a lock the audio thread never takes).
        Session figures (``snap['session']``) cover the frames drained so
        far: poll at least every ``ring.capacity`` blocks to see them all."""
        with self._meter_lock:
            snap = self.meter.poll()
        snap["latency"] = self.latency()
        snap["blocks"] = self.blocks
        snap["selected"] = "AB"[self.selected]
        snap["guard"] = self.guard_reason
        snap["guard_trips"] = int(self.st[lim.S_TRIPS])
        snap["guard_rearms"] = int(self.st[lim.S_REARMS])
        snap["nonconverged"] = sum(int((getattr(v.sim, "stats", None) or {}).get("nonconverged", 0))
                                   for v in self.voices if v.sim is not None)
        return snap
