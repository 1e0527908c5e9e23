"""Loudness per ITU-R BS.1770-4: K-weighting, gated integrated loudness,
and a running short-term loudness for level matching.

K-weighting is two biquads: a high shelf (about +4 dB above ~1.7 kHz, the
acoustic effect of the head) and a second-order high-pass (RLB weighting).
BS.1770-4 gives the coefficients only at 48 kHz. To serve any sample rate we
read the analog-prototype parameters back out of the standard's 48 kHz table
and re-discretize them with the bilinear transform, pre-warped at each
section's corner frequency (the cookbook-style parameterization):

    K = tan(pi f0 / fs),  D = 1 + K/Q + K^2
    shelf:     b = [Vh + Vb K/Q + K^2, 2 (K^2 - Vh), Vh - Vb K/Q + K^2] / D
    high-pass: b = [1, -2, 1]
    both:      a = [1, 2 (K^2 - 1) / D, (1 - K/Q + K^2) / D]

Solving these forms for the 48 kHz table values gives f0, Q, Vh and Vb in
closed form (:func:`k_weighting_parameters`); at fs = 48 kHz the result is the
table itself, to rounding.

Gated integrated loudness (BS.1770-4 Annex 1): mean square of the K-weighted
signal over 400 ms blocks with 75 % overlap, L = -0.691 + 10 log10(sum G_i z_i),
absolute gate -70 LUFS, then a relative gate 10 LU below the loudness of the
blocks that passed the absolute gate.

The running meter (:class:`RunningLoudness`) keeps K-filter state across
blocks and integrates with a one-pole average whose time constant is stated
(default 3 s, the short-term window of EBU Tech 3341 used as a time constant).
Its ``process`` method is audio-thread safe: no allocation, a compiled loop.
"""
from __future__ import annotations

import math

import numba
import numpy as np
from scipy import signal

# ITU-R BS.1770-4, Annex 1, Tables 1 and 2 (48 kHz).
TABLE_48K_SHELF_B = (1.53512485958697, -2.69169618940638, 1.19839281085285)
TABLE_48K_SHELF_A = (1.0, -1.69065929318241, 0.73248077421585)
TABLE_48K_HP_B = (1.0, -2.0, 1.0)
TABLE_48K_HP_A = (1.0, -1.99004745483398, 0.99007225036621)

ABSOLUTE_GATE_LKFS = -70.0
RELATIVE_GATE_LU = -10.0
BLOCK_S = 0.400
OVERLAP = 0.75
#: Channel weights G_i for L, R, C, Ls, Rs (BS.1770-4 Table 3).
CHANNEL_WEIGHTS = (1.0, 1.0, 1.0, 1.41, 1.41)


def _section_params(a1: float, a2: float, fs: float) -> tuple[float, float]:
    """Corner frequency and Q of a biquad denominator in the pre-warped form."""
    k2 = (1.0 + a1 + a2) / (1.0 - a1 + a2)
    k = math.sqrt(k2)
    d = 4.0 / (1.0 - a1 + a2)
    k_over_q = (1.0 - a2) * d / 2.0
    f0 = fs * math.atan(k) / math.pi
    return f0, k / k_over_q


def k_weighting_parameters() -> dict[str, float]:
    """Analog-prototype parameters recovered from the BS.1770-4 48 kHz table.

    Returns a dict with the shelf's ``shelf_f0`` (Hz), ``shelf_q``, ``shelf_vh``
    (high-frequency gain, linear), ``shelf_vb`` (band gain term), and the
    high-pass ``hp_f0`` (Hz), ``hp_q``.
    """
    fs = 48000.0
    b0, b1, b2 = TABLE_48K_SHELF_B
    _, a1, a2 = TABLE_48K_SHELF_A
    f0, q = _section_params(a1, a2, fs)
    k = math.tan(math.pi * f0 / fs)
    d = 1.0 + k / q + k * k
    vh = (b0 - b1 + b2) * d / 4.0
    vb = (b0 - b2) * d / (2.0 * k / q)
    _, h1, h2 = TABLE_48K_HP_A
    hf0, hq = _section_params(h1, h2, fs)
    return {"shelf_f0": f0, "shelf_q": q, "shelf_vh": vh, "shelf_vb": vb,
            "hp_f0": hf0, "hp_q": hq}


def k_weighting(fs: float) -> np.ndarray:
    """K-weighting filter for sample rate ``fs`` (Hz) as second-order sections.

    Returns an array of shape (2, 6) in scipy.signal ``sos`` layout
    ([b0, b1, b2, 1, a1, a2] per row): row 0 the shelf, row 1 the high-pass.
    Method: see the module docstring (BS.1770-4 table, re-discretized).

    >>> sos = k_weighting(48000.0)
    >>> round(sos[0, 0], 6)
    1.535125
    """
    if not fs > 0:
        raise ValueError("sample rate must be positive")
    p = k_weighting_parameters()
    k = math.tan(math.pi * p["shelf_f0"] / fs)
    kq = k / p["shelf_q"]
    d = 1.0 + kq + k * k
    shelf = [(p["shelf_vh"] + p["shelf_vb"] * kq + k * k) / d,
             2.0 * (k * k - p["shelf_vh"]) / d,
             (p["shelf_vh"] - p["shelf_vb"] * kq + k * k) / d,
             1.0, 2.0 * (k * k - 1.0) / d, (1.0 - kq + k * k) / d]
    k = math.tan(math.pi * p["hp_f0"] / fs)
    kq = k / p["hp_q"]
    d = 1.0 + kq + k * k
    hp = [1.0, -2.0, 1.0, 1.0, 2.0 * (k * k - 1.0) / d, (1.0 - kq + k * k) / d]
    return np.array([shelf, hp], dtype=np.float64)


def block_powers(x: np.ndarray, fs: float) -> np.ndarray:
    """Mean square of the K-weighted signal per gating block.

    x : samples, shape (n,) or (n, channels). Returns shape (blocks, channels):
    400 ms blocks stepped by 100 ms; only whole blocks are counted.
    """
    x = np.asarray(x, dtype=np.float64)
    if x.ndim == 1:
        x = x[:, None]
    y = signal.sosfilt(k_weighting(fs), x, axis=0)
    n_block = int(round(BLOCK_S * fs))
    hop = int(round(BLOCK_S * (1.0 - OVERLAP) * fs))
    if y.shape[0] < n_block:
        return np.zeros((0, y.shape[1]))
    csum = np.vstack([np.zeros((1, y.shape[1])), np.cumsum(y * y, axis=0)])
    starts = np.arange(0, y.shape[0] - n_block + 1, hop)
    return (csum[starts + n_block] - csum[starts]) / n_block


def integrated_loudness(x: np.ndarray, fs: float,
                        weights: tuple[float, ...] | None = None) -> float:
    """Gated integrated loudness in LUFS (LKFS in the standard's words) per ITU-R BS.1770-4.

    x : full-scale-relative samples, shape (n,) or (n, channels) in the
    channel order L, R, C, Ls, Rs. Returns -inf for silence or a signal
    shorter than one 400 ms block.

    >>> import numpy as np
    >>> t = np.arange(48000 * 5) / 48000
    >>> round(integrated_loudness(np.sin(2 * np.pi * 997 * t), 48000), 2)
    -3.01
    """
    z = block_powers(x, fs)
    if z.shape[0] == 0:
        return float("-inf")
    g = np.asarray(weights if weights is not None else
                   CHANNEL_WEIGHTS[: z.shape[1]], dtype=np.float64)
    power = z @ g
    with np.errstate(divide="ignore"):
        lj = -0.691 + 10.0 * np.log10(power)
    keep = lj > ABSOLUTE_GATE_LKFS
    if not keep.any():
        return float("-inf")
    gamma_r = -0.691 + 10.0 * math.log10(power[keep].mean()) + RELATIVE_GATE_LU
    keep &= lj > gamma_r
    if not keep.any():
        return float("-inf")
    return -0.691 + 10.0 * math.log10(power[keep].mean())


@numba.njit(nogil=True, cache=True)
def _k_power_block(x, sos, zi, avg, alpha):  # pragma: no cover - compiled
    """K-filter ``x`` (state ``zi`` (2,2)) and fold its power into ``avg[0]``."""
    acc = avg[0]
    for n in range(x.shape[0]):
        v = x[n]
        for s in range(2):
            b0 = sos[s, 0]; b1 = sos[s, 1]; b2 = sos[s, 2]
            a1 = sos[s, 4]; a2 = sos[s, 5]
            out = b0 * v + zi[s, 0]
            zi[s, 0] = b1 * v - a1 * out + zi[s, 1]
            zi[s, 1] = b2 * v - a2 * out
            v = out
        if not np.isfinite(v):
            v = 0.0
            zi[:, :] = 0.0
        acc += alpha * (v * v - acc)
    avg[0] = acc


class RunningLoudness:
    """Running K-weighted loudness of one mono stream (LUFS, ungated).

    ``process(block)`` runs on the audio thread (compiled, no allocation);
    ``lkfs`` may be read from any thread. The average is a one-pole integrator
    with time constant ``tau`` seconds (default 3 s).
    """

    def __init__(self, fs: float, tau: float = 3.0):
        self.fs = float(fs)
        self.tau = float(tau)
        self.sos = k_weighting(fs)
        self.zi = np.zeros((2, 2))
        self.avg = np.zeros(1)
        self.alpha = 1.0 - math.exp(-1.0 / (tau * fs))
        _k_power_block(np.zeros(1), self.sos, self.zi, self.avg, self.alpha)
        self.reset()

    def reset(self) -> None:
        """Forget the history (call while the stream is stopped)."""
        self.zi[:] = 0.0
        self.avg[0] = 0.0

    def process(self, x: np.ndarray) -> None:
        """Fold one block of full-scale-relative samples in (audio thread)."""
        _k_power_block(x, self.sos, self.zi, self.avg, self.alpha)

    @property
    def power(self) -> float:
        """Current K-weighted mean square (linear)."""
        return float(self.avg[0])

    @property
    def lkfs(self) -> float:
        """Current loudness, LUFS; -inf while silent."""
        p = self.avg[0]
        return -0.691 + 10.0 * math.log10(p) if p > 1e-20 else float("-inf")
