"""The port solve's parameters and the compile options every kernel function
shares.  Constants the Python side needs too (tolerances, PORT_G0, slots)
live in :mod:`solderless.engine.solver.kernel_layout`."""
from __future__ import annotations

from solderless.engine.lazyjit import njit  # numba on first need (lazyjit)

#: Most iterations of one port solve (chord and Newton together).
MAXIT = 30
#: Most chord iterations with an earlier Jacobian before Newton takes over.
CHORD_MAX = 6
#: Floor of the rate assumed on the first chord step of a sample.
THETA_MIN = 0.01
#: Rates above this fall through to Newton with refactoring (newton_refactoring).
THETA_MAX = 0.25
#: After a sample whose measured rate exceeded this, the Jacobian is
#: refactored at its solution before the next sample.
THETA_REFRESH = 0.05
#: A fresh Jacobian for Newton's method is made by a low-rank update of the
#: kept inverse when only a few devices' blocks moved by more than this
#: (jacobian_drift's score); the others' blocks are kept, so the Jacobian
#: is exact to about this fraction.  The relative score understates what a
#: high-gain device's change does to the step (an op-amp), so looser values
#: cost iterations, and at 1e-3 samples stop converging.
DRIFT_UPDATE = 1e-6
#: Low-rank updates in a row before the inverse is refactored from scratch
#: (bounds the rounding the updates accumulate).
UPDATE_CHAIN = 16
#: A first chord step is accepted only while no device Jacobian block has
#: moved by more than this fraction since the factorisation.
DRIFT_MAX = 0.5
#: Largest residual |p + K i(v) - v| (volts) at which a chord step may be
#: accepted (guards the same failure from far outside the Jacobian's range).
RES_SANE = 1e-3
#: After a Newton step no larger than this (volts) the next step of the
#: Newton fallback tries its Jacobian's inverse again: a junction's
#: conductance moves by up to exp(10 mV/VT) - 1, about 47 %, over such a
#: step, and the kept inverse is used only while its steps contract at a
#: rate below THETA_MAX (a step that does not is dropped).  From about
#: 30 mV up, samples start to need the continuation fallback.
REUSE_STEP = 1e-2
#: After a sample whose port solve needed this many fresh Jacobians or more
#: (factorisations or low-rank updates), the next one skips the chord phase
#: and starts Newton with a fresh Jacobian: after such a sample the kept
#: factors rarely converge, and the first chord step's error estimate, which
#: has no measured rate after a fresh Newton step, is least trustworthy there.
HARD_FACTORS = 3
#: Pseudo-transient continuation (the port solve's last resort, after
#: Newton and continuation in p have failed): its first pseudo-time
#: shift s (the matrix solved is I - K G + s I, dimensionless), below
#: which s is dropped and the iteration is Newton's, and most iterations.
#: s = 0.1 rescued every failing sample of the Schmitt trigger netlist in
#: 16-34 iterations (0.03-0.3 all did in at most 50; 0.003 and 10 did not).
PTC_S0 = 0.1
PTC_SEND = 1e-3
PTC_MAXIT = 100
#: Steps below this (volts) are rounding noise: converged, and no rate is
#: measured from them.
STEP_FLOOR = 1e-11
#: Device bypass threshold on port-voltage change: this many times the error
#: tolerance (ERR_TOL by default: 1e-4 V).  A bypassed device's currents are
#: continued linearly from its last evaluation, so the error is the Taylor
#: remainder f''*dv**2/2.  Every device law here is exponential or smoother
#: on a voltage scale s of at least N*VT (junctions, the OTA's tanh input,
#: the op-amp's rail clamps on VSOFT; a JFET's square law is gentler still),
#: which makes the error worth at most dv**2/(2*s) volts at the port: at the
#: default tolerance 1.9e-7 V for s = VT (N = 1), 3.9e-7 V for N = 0.5, under
#: the tolerance; it shrinks with the square of a tighter one.
BYPASS_RATIO = 100.0
#: Largest pivot magnitude treated as zero by the factorisations.
PIVOT_TINY = 1e-300
#: LLVM fast-math flags for the kernel loops: reassociation lets dot products
#: run on several accumulators (SIMD) instead of one serial add chain.
FM = {"reassoc", "contract"}


def kernel_jit(**options):
    """numba's njit with the options every kernel function shares: disk
    cache, GIL released, numpy error model (no exceptions from division),
    no runtime (so no allocation), fast-math FM.  ``options`` adds
    ``inline=`` where wanted.  Applied lazily (solderless/engine/lazyjit.py):
    numba wraps the function when the kernel package is imported."""
    return njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM,
                **options)
