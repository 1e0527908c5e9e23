"""The compiled per-sample kernel: one numba function serves every circuit.

Per sample (nodal DK-method; Yeh, Abel & Smith, IEEE TASLP 18(4), 2010;
Holters & Zoelzer, EUSIPCO 2015):

    p  = p0 + Pz z                        linear part of the port voltages
    solve  v = p + K i(v)                 Newton, warm-started, pnjlim
    y  = y0 + Yz z + Fy i + Vy v          output (row 0) and probes
    x' = x0 + Az z + C i                  trapezoidal state update
    (z = [x; varying sources]: Pz = [Dv Ev'], Az = [A B'], Yz = [Dy Ey'])

Devices are dispatched by their module's integer ``CODE`` over one flat
parameter array, so no recompilation per design.  Constant sources are
folded into offsets (p0, x0, y0), so only z = [x; varying sources] is
multiplied per sample.  The port solve starts from a predictor (previous
solution plus a chord step for the change in p plus the nonlinear part of
the previous step), runs chord iterations with the inverse of an earlier
Jacobian (formed by Gauss-Jordan elimination, or updated from the last one
by the Sherman-Morrison-Woodbury formula where a few devices moved, so
every step is one matrix-vector product) with the stopping rule of Hairer &
Wanner (error left <= th/(1-th)*|step|, th the measured contraction rate;
on a sample's first step, not yet measured, the larger of the last one and
the Jacobian's drift since its factorisation), refactors before the next
sample when the rate was poor, and falls through to Newton-Raphson (pnjlim
limiting; a fresh Jacobian whenever the steps stop contracting fast, else
the last one's inverse is kept) when the rate exceeds 1/4.  Devices whose
port voltages moved less than BYPASS_RATIO times the tolerance are not
re-evaluated (SPICE's bypass).  Newton failures fall back to continuation
in p from the previous sample in sub-steps (4, then 16); if that fails too
the previous port solution is kept and counted.  Output is never NaN.
Loops are compiled with reassociation allowed (dot products on several
accumulators).  Circuits with at most four nonlinear ports run the lean
runner run_block_small instead: the same predictor and fallback around
plain Newton with a fresh Jacobian inverted in closed form at every
iteration (2 x 2 for one or two ports, cofactors for three or four).  Both
runners watch dormant-capable ports (op-amp clamps away from the rails) and
stop early where the simulator must switch between the full port solve and
the reduced one without them (solver/dormant.py).

Modules, one responsibility each:

    params     solver parameters and the shared compile options (kernel_jit)
    sources    waveform sources and the input, per sample
    dispatch   device evaluation and limiting by type code, bypass
    linalg     padded matrix-vector product, Gauss-Jordan inverse
    jacobian   factorisation, low-rank update and drift of the inverse Jacobian
    newton     chord iterations, Newton with refactoring, lean Newton (2 or 4 ports)
    blocks     the block runners, the per-sample port solve, output and state
    cache      disk-cache check over every module compiled into the kernel

Array layouts, slots and shared constants: solderless.engine.solver.kernel_layout.

How the per-sample path is compiled: numba passes every array as an
exploded struct of ~7 scalars, so a call with 20 arrays costs ~100 ns, more
than a 2-port Newton step itself.  The per-sample path (solve_ports,
newton, the device loops and the chord step) is therefore inlined into
run_block (numba ``inline="always"``).  numba's IR-level inlining is slow to
compile, so it is used sparingly: newton has a single call site (the
fallback's continuation sub-steps reuse it), the common devices' laws
are inlined into the per-sample device loops (eval_common, limit_common)
and the rarer ones are one real call (eval_rare, limit_rare; eval_one and
limit_one are the whole dispatch as one call, for the operating point),
and the Jacobian
inverse (update_jacobian) and the refactoring Newton phase
(newton_refactoring; both on a few per cent of samples) are real calls, as
is the last-resort pseudo-transient continuation (pseudo_transient; a few
samples per switching edge of a circuit with hysteresis, at most).
The padded matrix-vector product is inlined at the four products made once
per sample and inside the chord loop (gemv_inl); gemv_add is the same as a real call.
numba's builtin max() is an out-of-line call per use, so the per-sample
path compares explicitly.

Everything here runs on the audio thread: no allocation, ``nogil=True``,
``cache=True``.
"""
from __future__ import annotations

from solderless.engine.solver.kernel.cache import refresh_cache_stamp

refresh_cache_stamp()   # before any compiled function loads from the cache

from solderless.engine.solver.kernel.blocks import (  # noqa: E402
    convert_states, finish_sample, run_block, run_block_small, solve_ports)
from solderless.engine.solver.kernel.dispatch import (  # noqa: E402
    eval_devices, eval_one, eval_ports, limit_devices, limit_one)
from solderless.engine.solver.kernel.jacobian import (  # noqa: E402
    factor_jacobian, jacobian_drift, update_jacobian)
from solderless.engine.solver.kernel.linalg import (  # noqa: E402
    gemv_add, gemv_inl, gj_inverse, inverse4)
from solderless.engine.solver.kernel.newton import (  # noqa: E402
    newton, newton2, newton4, newton_tol, pseudo_transient)
from solderless.engine.solver.kernel.params import (  # noqa: E402
    BYPASS_RATIO, CHORD_MAX, DRIFT_MAX, DRIFT_UPDATE, FM, HARD_FACTORS, MAXIT, PIVOT_TINY,
    RES_SANE, REUSE_STEP, STEP_FLOOR, THETA_MAX, THETA_MIN, THETA_REFRESH, UPDATE_CHAIN,
    kernel_jit)
from solderless.engine.solver.kernel.sources import load_sources, wave_value  # noqa: E402
from solderless.engine.solver.kernel_layout import (  # noqa: E402
    ERR_TOL, J_EXTRA_ROWS, PORT_G0, RELTOL, SMALL_PORTS, UPDATE_PORTS)
from solderless.engine import lazyjit  # noqa: E402

# Importing the kernel package means the JIT kernel is wanted: wrap every
# kernel and device function with numba now (solderless/engine/lazyjit.py;
# a render with the ahead-of-time module, solver/aot.py, never imports this).
lazyjit.activate()

__all__ = [
    "convert_states", "finish_sample", "run_block", "run_block_small", "solve_ports",
    "eval_devices", "eval_one", "eval_ports", "limit_devices", "limit_one",
    "factor_jacobian", "jacobian_drift", "update_jacobian",
    "gemv_add", "gemv_inl", "gj_inverse", "inverse4", "newton", "newton2", "newton4", "newton_tol",
    "pseudo_transient",
    "load_sources", "wave_value",
    "BYPASS_RATIO", "CHORD_MAX", "DRIFT_MAX", "DRIFT_UPDATE", "FM", "HARD_FACTORS", "MAXIT",
    "PIVOT_TINY", "RES_SANE", "REUSE_STEP", "STEP_FLOOR", "THETA_MAX", "THETA_MIN",
    "THETA_REFRESH", "UPDATE_CHAIN", "kernel_jit",
    "ERR_TOL", "J_EXTRA_ROWS", "PORT_G0", "RELTOL", "SMALL_PORTS", "UPDATE_PORTS",
]
