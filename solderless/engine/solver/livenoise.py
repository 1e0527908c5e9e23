"""Live noise: the circuit's noise sources inside the time-domain simulation.

Off by default (a render without it is bit for bit what it always was).
With it on, every noise source of :mod:`solderless.engine.solver.noise`
becomes a current source between its two nets that plays a fresh random
sample at every kernel step:

* thermal and shot noise are white: a source of one-sided PSD S (A^2/Hz)
  plays independent Gaussian samples of standard deviation
  ``sqrt(S * fs_kernel / 2)``, fs_kernel the simulation's own rate (the
  outer rate times the oversampling).  That variance spreads S over the
  kernel's whole band 0 .. fs_kernel/2 (one-sided), so the audio band sees
  S; the oversampling filter removes what lies above the outer Nyquist
  frequency.
* flicker noise (KF * |I|^AF / f) is that white noise with unit PSD through
  a pink filter (:func:`pink_sos`) whose power response follows 1/f from
  2 Hz up, then scaled by sqrt(KF * |I|^AF).

Shot and flicker amplitudes come from the DC operating point current (the
small-signal picture, as ngspice's noise analysis): a junction whose
current swings with the signal keeps its resting noise.  Thermal noise of
a resistor follows its value (and the circuit temperature) when it is
edited live.

Seeded: a :class:`numpy.random.Generator` (PCG64) from ``seed`` draws the
samples in a fixed order (sample by sample, every source in turn, so the
block size does not matter), and a render with the same seed and rate
repeats exactly; :meth:`HissSimulator.reset` starts the sequence again.

Switchable while playing: :meth:`HissSimulator.set_hiss` turns the noise
off and on again without a rebuild.  The sources stay in the kernel and
only their amplitude changes (the scale array is swapped whole at the next
block), so off plays exactly zero current from every source and the output
is the noiseless circuit's, with the circuit state carried through.  The
generator keeps drawing while the noise is off, so switching does not shift
or restart the sequence: after switching back on, kernel sample k plays what
an uninterrupted noisy run of the same simulator plays at k.  A new seed
restarts the sequence from that seed's beginning at the next block.

The samples reach the compiled kernel through the source waveform kind
NOISE (4): each noise source's waveform parameters are a buffer
``[dt, k0, s0, s1, ...]`` refilled before every block (``k0`` the kernel
sample index at the block's start), so the kernel itself only reads them.
Refilling runs on the calling (audio) thread: no allocation (the
generator writes into the buffer), one vectorised draw per source and
block, and a compiled in-place filter for flicker sources.
"""
from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from solderless.engine.circuit import Circuit, Element
from solderless.engine.lazyjit import njit  # numba on first need (lazyjit)
from solderless.engine.solver import kernel_layout as KL
from solderless.engine.solver.dcop import solve_dc
from solderless.engine.solver.mna import Network
from solderless.engine.solver.noise import FLICKER, NoiseSource, noise_sources
from solderless.engine.solver.simulator import Simulator

#: A noise source whose share of the output noise power (20 Hz-20 kHz, at
#: the operating point, from the noise analysis) is below this is left out
#: of the live simulation: each source costs a kernel column and a draw per
#: sample, and in the built-in designs the sources under 1e-5 each add up
#: to under 2e-5 of the power (1e-4 dB) while being half to two thirds of
#: the sources (bench/bench_hiss.py).  ``HissSimulator(prune=False)``
#: keeps them all.
PRUNE_SHARE = 1e-5
#: Prefix of the current sources live noise adds to a circuit.
SOURCE_PREFIX = "hiss:"
#: Lowest frequency of the pink filter's 1/f range, Hz (below it flat).
PINK_FLOOR_HZ = 2.0
#: Pole-zero pairs per decade of the pink filter.
PINK_PER_DECADE = 3


def white_sigma(psd: float, fs_kernel: float) -> float:
    """Per-sample standard deviation of white noise of one-sided PSD ``psd``
    (units^2/Hz) sampled at ``fs_kernel``: sqrt(psd * fs_kernel / 2)."""
    return math.sqrt(max(psd, 0.0) * fs_kernel / 2.0)


def pink_sos(fs: float, floor_hz: float = PINK_FLOOR_HZ,
             per_decade: int = PINK_PER_DECADE) -> np.ndarray:
    """Second-order sections of a filter whose power response is 1/f (per
    Hz, so unit-PSD white noise comes out with PSD 1/f) from ``floor_hz``
    up: real poles at floor_hz * r^k and zeros sqrt(r) above each (r =
    10^(1/per_decade)), an average slope of -10 dB per decade (common
    practice), mapped to the z-plane pole by pole (z = exp(-2 pi f / fs))
    and scaled to exactly 1/f at 1 kHz.  At fs = 48 kHz it stays within
    1.4 dB of 1/f from 20 Hz to 20 kHz, at 96 kHz within 0.4 dB."""
    from scipy.signal import sosfreqz, zpk2sos
    r = 10.0 ** (1.0 / per_decade)
    z, p = [], []
    f = floor_hz
    while f < fs / 2:
        p.append(math.exp(-2.0 * math.pi * f / fs))
        z.append(math.exp(-2.0 * math.pi * f * math.sqrt(r) / fs))
        f *= r
    sos = zpk2sos(np.array(z), np.array(p), 1.0)
    _, h = sosfreqz(sos, worN=[1000.0], fs=fs)
    sos[0, :3] *= math.sqrt(1.0 / 1000.0) / abs(h[0])
    return np.ascontiguousarray(sos)


@njit(cache=True, nogil=True)
def _sos_inplace(sos, zi, x, n):  # pragma: no cover - compiled
    """Filter x[:n] in place by second-order sections (transposed direct
    form II), state zi (sections x 2) carried from block to block."""
    for k in range(n):
        v = x[k]
        for s in range(sos.shape[0]):
            b0, b1, b2 = sos[s, 0], sos[s, 1], sos[s, 2]
            a1, a2 = sos[s, 4], sos[s, 5]
            y = b0 * v + zi[s, 0]
            zi[s, 0] = b1 * v - a1 * y + zi[s, 1]
            zi[s, 1] = b2 * v - a2 * y
            v = y
        x[k] = v


@njit(cache=True, nogil=True)
def _scatter(draw, n, spar, offs, k0, sig, flick, unit, sos, zi):  # pragma: no cover
    """Copy each source's column of this block's unit draws into its
    buffer in spar (at offs[j] + 2, after dt and k0), scaled by sig[j];
    flicker sources pass through the pink filter first."""
    for j in range(offs.size):
        o = offs[j]
        spar[o + 1] = k0
        if flick[j]:
            for k in range(n):
                spar[o + 2 + k] = draw[k, j] * unit
            _sos_inplace(sos, zi[j], spar[o + 2:o + 2 + n], n)
            for k in range(n):
                spar[o + 2 + k] *= sig[j]
        else:
            sj = sig[j]
            for k in range(n):
                spar[o + 2 + k] = draw[k, j] * sj


def with_noise_sources(circuit: Circuit, sources: list[NoiseSource]) -> Circuit:
    """A copy of ``circuit`` with one NOISE current source per noise source,
    named ``hiss:<source>``, reading 0 until samples are fed."""
    extra = [Element(SOURCE_PREFIX + s.name, "I", (s.a, s.b), 0.0,
                     {"wave": ("NOISE", [])}) for s in sources]
    return replace(circuit, elements=list(circuit.elements) + extra)


class HissSimulator(Simulator):
    """A :class:`Simulator` with the circuit's noise sources playing.

    Same arguments as :class:`Simulator`, plus ``seed`` (any int; the same
    seed gives the same render), ``flicker`` (False leaves KF out) and
    ``prune`` (False keeps the sources under :data:`PRUNE_SHARE`).
    ``sources`` lists the noise sources and ``sigmas`` their per-sample
    standard deviations (white sources, amps; flicker sources: the scale
    after the pink filter)."""

    def __init__(self, circuit: Circuit, *args, seed: int = 0, flicker: bool = True,
                 prune: bool = True, **kwargs):
        from solderless.engine import lazyjit
        lazyjit.activate()      # _scatter compiled (a render without noise never gets here)
        base = Network(circuit)
        found = noise_sources(base, solve_dc(base))
        srcs = [s for s in found.sources if flicker or s.kind != FLICKER]
        #: sources left out as negligible at the output (see PRUNE_SHARE)
        self.pruned: list[str] = []
        if prune and srcs:
            from solderless.engine.analysis.noise import noise_floor
            shares = dict(noise_floor(base).result.top(len(found.sources)))
            if sum(shares.values()) > 0:
                self.pruned = [s.name for s in srcs if shares.get(s.name, 0.0) < PRUNE_SHARE]
                srcs = [s for s in srcs if s.name not in self.pruned]
        self.sources = srcs
        self.noise_notes = list(found.notes)
        self.seed = int(seed)
        super().__init__(with_noise_sources(circuit, srcs), *args, **kwargs)
        net = self.net
        self._fsk = self.fs * self.oversample
        nbuf = self.block_max * self.oversample
        self._nidx = np.array([net.source_index[SOURCE_PREFIX + s.name] for s in srcs],
                              dtype=np.int64)
        # rebuild the waveform parameter store with a buffer per noise source
        pars = [self._spar[self._sptr[k]:self._sptr[k + 1]] for k in range(len(net.sources))]
        for k in self._nidx:
            buf = np.zeros(2 + nbuf)
            buf[0] = self._T
            pars[k] = buf
        self._sptr = np.zeros(len(pars) + 1, dtype=np.int64)
        self._sptr[1:] = np.cumsum([p.size for p in pars])
        self._spar = np.ascontiguousarray(np.concatenate(pars) if pars else np.zeros(0))
        self._offs = np.array([self._sptr[k] for k in self._nidx], dtype=np.int64)
        self._flick = np.array([s.kind == FLICKER for s in srcs], dtype=np.bool_)
        self._sos = pink_sos(self._fsk) if self._flick.any() else np.zeros((0, 6))
        self._zi = np.zeros((len(srcs), self._sos.shape[0], 2))
        self.sigmas = self._amplitudes(self._values)
        #: the noise plays (False: every source plays zero, see set_hiss)
        self.on = True
        self._silent = np.zeros(len(srcs))
        self._play = self.sigmas
        self._draw = np.zeros((nbuf, len(srcs)))
        self._rng = np.random.Generator(np.random.PCG64(self.seed))

    def set_hiss(self, on: bool, seed: int | None = None) -> None:
        """Turn the noise on or off while playing (any thread; lands at the
        next block boundary, circuit state carried over): off scales every
        source by zero, so the kernel sees exactly zero noise current.  The
        draws go on while off (the sequence is not shifted).  ``seed``, if
        it differs from the present one, restarts the sequence from that
        seed (the generator is made here and swapped in whole)."""
        if seed is not None and int(seed) != self.seed:
            self.seed = int(seed)
            self._rng = np.random.Generator(np.random.PCG64(self.seed))
        self.on = bool(on)
        self._play = self.sigmas if self.on else self._silent

    def _amplitudes(self, values) -> np.ndarray:
        """Per-sample scale of each noise source at the current values."""
        net = self.net
        now = {s.name: s for s in noise_sources(net, solve_dc(net, values), values).sources}
        out = np.zeros(len(self.sources))
        for j, s in enumerate(self.sources):
            cur = now.get(s.name, s)
            if s.kind == FLICKER:
                out[j] = math.sqrt(cur.flicker)
            else:
                out[j] = white_sigma(cur.white, self._fsk)
        return out

    def reset(self) -> None:
        super().reset()
        if hasattr(self, "_rng"):
            self._rng = np.random.Generator(np.random.PCG64(self.seed))
            self._zi[:] = 0.0

    def set_values(self, changes: dict[str, float]) -> None:
        super().set_values(changes)
        # thermal noise follows a resistor's value, shot noise the new
        # operating point (the new scale array is swapped in whole)
        self.sigmas = self._amplitudes(self._values)
        self._play = self.sigmas if self.on else self._silent

    def _set_temperature(self, temp_c) -> None:
        super()._set_temperature(temp_c)
        self.net.circuit.temperature = float(temp_c)

    def _fill(self, n: int) -> None:
        """Draw this block's n kernel samples of every noise source."""
        # sample-major draws (every source's sample k, then k+1 ...), so the
        # sequence does not depend on how the input is cut into blocks
        draw = self._draw[:n]
        self._rng.standard_normal(out=draw)
        _scatter(draw, n, self._spar, self._offs, float(self._state[KL.STATE_INDEX]),
                 self._play, self._flick, math.sqrt(self._fsk / 2.0), self._sos, self._zi)

    def process_into(self, x, y, probe_buf=None, probe_start: int = 0) -> int:
        self._fill(x.shape[0] * self.oversample)
        return super().process_into(x, y, probe_buf, probe_start)


def hiss_simulator_factory(seed: int = 0):
    """A ``simulator_factory`` for the live host
    (:class:`solderless.engine.live.host.LiveHost`) that plays with noise."""
    def factory(circuit, fs, oversample, probes):
        return HissSimulator(circuit, fs=fs, oversample=oversample, probes=tuple(probes),
                             probe_decimate=1, seed=seed)
    return factory


#: Key of the design-level setting in a design file's ``[design]`` table
#: (``hiss = true``), and of its seed (``hiss_seed = 7``).
DESIGN_KEY = "hiss"
DESIGN_SEED_KEY = "hiss_seed"


def design_setting(design) -> tuple[bool, int]:
    """(on, seed) of a design: its ``hiss`` and ``hiss_seed`` as read from
    the design file's ``[design]`` table (``hiss = true`` plays the design
    with its noise by default, ``hiss_seed``, default 0, picks the random
    sequence; :func:`solderless.engine.design.model.hiss_setting` checks
    them when the file is read) and as the
    :class:`solderless.engine.design.edits.SetHiss` edit changes
    them.  An object without them (a stand-in) is (off, 0)."""
    return bool(getattr(design, "hiss", False)), int(getattr(design, "hiss_seed", 0) or 0)
