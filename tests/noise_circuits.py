"""Netlists of our own (typical values) shared by the noise analysis checks
(tests/test_noise.py) and the live noise checks (tests/test_live_noise.py,
tests/test_hiss_switch.py), and the one measurement of a live noise floor
they compare with the analysis (:func:`band_rms`).
Without ``.end``: a test adds it, or further cards first."""
import math

import numpy as np


def band_rms(y, fs, band=(20.0, 20e3), weight=None):
    """RMS of ``y`` over a band from SciPy's Welch estimate of its PSD
    (``scipy.signal.welch``, mean removed), optionally weighted by an
    amplitude factor ``weight(f)`` (e.g. the A-weighting)."""
    from scipy.signal import welch
    f, p = welch(y - y.mean(), fs=fs, nperseg=8192)
    m = (f >= band[0]) & (f <= band[1])
    if weight is not None:
        p = p * weight(f) ** 2
    return math.sqrt(np.trapezoid(p[m], f[m]))


DIVIDER = """divider for the noise checks (our own values)
VIN in 0 DC 0 AC 1
R1 in out 10k
R2 out 0 10k
"""

# a common-emitter stage with a 600 ohm source, base, emitter and collector
# resistances and flicker noise on the card (our own typical values)
CE_STAGE = """common-emitter stage for the noise checks
VCC vcc 0 9
VIN src 0 DC 0 AC 1
RS src in 600
CIN in b 10u
RB1 vcc b 100k
RB2 b 0 22k
RC vcc c 4.7k
RE e 0 1k
CE e 0 100u
Q1 c b e QN
COUT c out 10u
RL out 0 100k
.model QN NPN(IS=1e-14 BF=200 VAF=80 RB=100 RE=1 RC=10 KF=2e-15 AF=1)
"""
