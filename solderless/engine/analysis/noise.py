"""Small-signal noise at the DC operating point (what ngspice's ``.noise``
computes), and the noise floor figures the CLI prints.

Every noise source of :mod:`solderless.engine.solver.noise` is a current
source between two nets with a one-sided PSD S_k(f) (A^2/Hz).  With the
devices linearised at the operating point and capacitors and inductors as
admittances at s = j*2*pi*f (as :mod:`solderless.engine.solver.ac`), the
output noise PSD is

    S_out(f) = sum_k |Z_k(f)|^2 S_k(f)      (V^2/Hz)

where Z_k is the transimpedance from source k to the output.  All Z_k come
from one adjoint solve per frequency: with Y the MNA matrix and c the row
that reads the output (c.w = v_out), Y^T lam = c gives Z_k = lam[a_k] -
lam[b_k] for a current between nets a_k and b_k, and the input gain H =
lam . b_in for the input source's column b_in of the source matrix (the
adjoint network, e.g. Vlach & Singhal, "Computer Methods for Circuit
Analysis and Design", ch. on sensitivity and noise; the same as ngspice's
noise analysis, which solves the adjoint system once per frequency).

The input-referred density is the output density divided by |H|, as
ngspice's ``inoise_spectrum``.  Integrated noise is the square root of the
integral of S_out over a band (trapezoid rule on a fine log grid),
unweighted and A-weighted (IEC 61672-1:2013, Annex E, the closed form of the
A-weighting; see docs/references.md).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from solderless.engine.circuit import GROUND, Circuit, canonical_net
from solderless.engine.errors import DesignError
from solderless.engine.solver.ac import small_signal
from solderless.engine.solver.mna import Network
from solderless.engine.solver.noise import NoiseSources, noise_sources

#: Band of the integrated figures, Hz (the audio band, common practice).
BAND_HZ = (20.0, 20000.0)
#: Points per decade of the integration grid.
INTEGRATION_PER_DECADE = 200
#: dBu reference: 0.7746 V rms (1 mW in 600 ohm), common practice.
DBU_REF_V = math.sqrt(0.6)

# IEC 61672-1:2013, Annex E (E.2, E.6): pole frequencies (Hz) of the
# A-weighting and its normalisation at 1 kHz (dB).
_F1, _F2, _F3, _F4 = 20.598997, 107.65265, 737.86223, 12194.217
_A1000 = -2.000


def a_weighting(f) -> np.ndarray:
    """A-weighting as a linear amplitude factor at frequencies f (Hz):
    IEC 61672-1:2013 Annex E, A(f) = 20 lg[f4^2 f^4 / ((f^2+f1^2)
    sqrt(f^2+f2^2) sqrt(f^2+f3^2) (f^2+f4^2))] - A1000 dB."""
    f = np.asarray(f, dtype=np.float64)
    f2 = f * f
    ra = (_F4 ** 2 * f2 * f2) / ((f2 + _F1 ** 2) * np.sqrt(f2 + _F2 ** 2)
                                 * np.sqrt(f2 + _F3 ** 2) * (f2 + _F4 ** 2))
    return ra / 10.0 ** (_A1000 / 20.0)


def a_weighting_db(f) -> np.ndarray:
    """A-weighting in dB at frequencies f (Hz) (IEC 61672-1:2013 Annex E)."""
    with np.errstate(divide="ignore"):
        return 20.0 * np.log10(a_weighting(f))


def dbv(v_rms: float) -> float:
    """Level in dBV (re 1 V rms)."""
    return 20.0 * math.log10(max(v_rms, 1e-30))


def dbu(v_rms: float) -> float:
    """Level in dBu (re 0.7746 V rms)."""
    return 20.0 * math.log10(max(v_rms, 1e-30) / DBU_REF_V)


@dataclass
class NoiseResult:
    """Noise spectra at frequencies ``freqs`` (Hz).

    out_psd : output noise PSD, V^2/Hz.
    contributions : source name -> its share of out_psd, V^2/Hz.
    gain : complex gain from the input source to the output (None when the
        circuit has no input source).
    """
    freqs: np.ndarray
    out_psd: np.ndarray
    contributions: dict[str, np.ndarray]
    gain: np.ndarray | None
    sources: NoiseSources
    notes: list[str] = field(default_factory=list)

    @property
    def out_density(self) -> np.ndarray:
        """Output noise spectral density, V/sqrt(Hz)."""
        return np.sqrt(self.out_psd)

    @property
    def in_density(self) -> np.ndarray | None:
        """Input-referred density, V/sqrt(Hz): output density / |gain|."""
        if self.gain is None:
            return None
        with np.errstate(divide="ignore"):
            return self.out_density / np.abs(self.gain)

    def top(self, k: int = 5, band=BAND_HZ) -> list[tuple[str, float]]:
        """The k largest contributors over ``band`` (integrated, V^2),
        as (name, share of the total)."""
        m = (self.freqs >= band[0]) & (self.freqs <= band[1])
        if m.sum() < 2:
            m = np.ones_like(self.freqs, dtype=bool)
        tot = {n: float(np.trapezoid(c[m], self.freqs[m]))
               for n, c in self.contributions.items()}
        s = sum(tot.values()) or 1.0
        return sorted(((n, v / s) for n, v in tot.items()), key=lambda t: -t[1])[:k]


def _index(net: Network, name: str) -> int:
    n = canonical_net(name)
    return -1 if n == GROUND else net.net_index[n]


def noise_spectrum(circuit: Circuit | Network, freqs, values: dict | None = None
                   ) -> NoiseResult:
    """Output (and input-referred) noise at frequencies ``freqs`` (Hz, > 0).

    Example
    -------
    >>> r = noise_spectrum(circuit, np.geomspace(20, 20e3, 50))
    >>> r.out_density          # V/sqrt(Hz) at the design's output
    """
    net = circuit if isinstance(circuit, Network) else Network(circuit)
    values = dict(net.values if values is None else values)
    freqs = np.atleast_1d(np.asarray(freqs, dtype=np.float64))
    if freqs.size == 0 or not np.all(freqs > 0) or not np.all(np.isfinite(freqs)):
        raise DesignError("noise frequencies must be positive and finite")
    dc, Y0, Ys = small_signal(net, values)
    srcs = noise_sources(net, dc, values)
    c = np.zeros(net.nw)
    oa, ob = net.out_nodes
    if oa >= 0:
        c[oa] += 1.0
    if ob >= 0:
        c[ob] -= 1.0
    sj = 2j * np.pi * freqs
    Yt = np.transpose(Y0[None] + sj[:, None, None] * Ys[None], (0, 2, 1))
    rhs = np.broadcast_to(c.astype(complex), (freqs.size, net.nw))[..., None]
    lam = np.linalg.solve(Yt, rhs)[..., 0]
    zero = np.zeros(freqs.size, complex)

    def at(k):
        return lam[:, k] if k >= 0 else zero

    contrib: dict[str, np.ndarray] = {}
    total = np.zeros(freqs.size)
    for s in srcs.sources:
        z = at(_index(net, s.a)) - at(_index(net, s.b))
        p = np.abs(z) ** 2 * s.psd(freqs)
        contrib[s.name] = contrib.get(s.name, 0.0) + p
        total += p
    gain = None
    if net.input_index >= 0:
        gain = lam @ net._bu[:, net.input_index]
    return NoiseResult(freqs, total, contrib, gain, srcs, list(srcs.notes))


def band_grid(band=BAND_HZ, per_decade: int = INTEGRATION_PER_DECADE) -> np.ndarray:
    """Log-spaced frequencies covering ``band`` (both ends included)."""
    lo, hi = float(band[0]), float(band[1])
    if not 0 < lo < hi:
        raise DesignError(f"noise band {lo:g}-{hi:g} Hz is empty")
    n = max(2, int(math.ceil(math.log10(hi / lo) * per_decade)) + 1)
    return np.geomspace(lo, hi, n)


def integrate(freqs, psd, weighting: str | None = None) -> float:
    """RMS value (V) of a one-sided PSD (V^2/Hz) over the frequencies given,
    by the trapezoid rule; ``weighting`` "A" applies the A-weighting."""
    f = np.asarray(freqs, dtype=np.float64)
    p = np.asarray(psd, dtype=np.float64)
    if weighting == "A":
        p = p * a_weighting(f) ** 2
    elif weighting is not None:
        raise ValueError(f"unknown weighting {weighting!r}")
    return float(math.sqrt(max(np.trapezoid(p, f), 0.0)))


@dataclass
class NoiseFloor:
    """Integrated output noise over a band: V rms unweighted and A-weighted."""
    band: tuple[float, float]
    v_rms: float
    v_rms_a: float
    result: NoiseResult

    def lines(self) -> list[str]:
        lo, hi = self.band
        return [f"output noise {_band(lo, hi)}: {self.v_rms * 1e6:.3g} uV rms "
                f"({dbv(self.v_rms):.1f} dBV, {dbu(self.v_rms):.1f} dBu) unweighted; "
                f"{self.v_rms_a * 1e6:.3g} uV rms ({dbv(self.v_rms_a):.1f} dBV, "
                f"{dbu(self.v_rms_a):.1f} dBu) A-weighted"]


def _band(lo, hi) -> str:
    def f(x):
        return f"{x / 1e3:g} kHz" if x >= 1e3 else f"{x:g} Hz"
    return f"{f(lo)}-{f(hi)}"


def noise_floor(circuit: Circuit | Network, band=BAND_HZ, values: dict | None = None
                ) -> NoiseFloor:
    """Integrated output noise of a circuit over ``band`` (default 20 Hz-20 kHz),
    unweighted and A-weighted."""
    f = band_grid(band)
    r = noise_spectrum(circuit, f, values)
    return NoiseFloor((float(band[0]), float(band[1])), integrate(f, r.out_psd),
                      integrate(f, r.out_psd, "A"), r)


# ------------------------------------------------------------------ readouts

def floor_summary(circuit, seed: int) -> dict:
    """The noise floor at the output (analysis, 20 Hz-20 kHz) for a render
    or play summary and the workbench's readout: rms volts, dBV and dBu,
    unweighted and A-weighted (IEC 61672-1), the seed and the number of
    noise sources."""
    fl = noise_floor(circuit)
    return {"seed": seed, "band_hz": list(fl.band), "v_rms": fl.v_rms,
            "v_rms_a": fl.v_rms_a, "dbv": dbv(fl.v_rms), "dbu": dbu(fl.v_rms),
            "dbv_a": dbv(fl.v_rms_a), "dbu_a": dbu(fl.v_rms_a),
            "sources": len(fl.result.sources.sources)}


def floor_figures(s: dict) -> str:
    """The floor's figures from :func:`floor_summary`, unweighted and
    A-weighted: the words every readout of it uses."""
    return (f"{s['v_rms'] * 1e6:.3g} uV rms ({s['dbv']:.1f} dBV, "
            f"{s['dbu']:.1f} dBu) unweighted, {s['v_rms_a'] * 1e6:.3g} uV rms "
            f"({s['dbv_a']:.1f} dBV, {s['dbu_a']:.1f} dBu) A-weighted")


def floor_brief(s: dict) -> str:
    """The floor from :func:`floor_summary` in a few words for a readout:
    dBV unweighted, then A-weighted (the same figures as
    :func:`floor_figures`)."""
    return f"{s['dbv']:.1f} dBV, {s['dbv_a']:.1f} dBV(A)"


def floor_line(s: dict) -> str:
    """One summary line from :func:`floor_summary` (render, play, console)."""
    return (f"hiss on (seed {s['seed']}, {s['sources']} noise sources): noise floor at the "
            f"output, 20 Hz-20 kHz: " + floor_figures(s))
