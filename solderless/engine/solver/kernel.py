"""The compiled per-sample kernel: one numba function serves every circuit.

Per sample (nodal DK-method; Yeh, Abel & Smith, IEEE TASLP 18(4), 2010;
Holters & Zoelzer, EUSIPCO 2015):

    p  = p0 + Pz z                        linear part of the port voltages
    solve  v = p + K i(v)                 Newton, warm-started, pnjlim
    y  = y0 + Yz z + Fy i + Vy v          output (row 0) and probes
    x' = x0 + Az z + C i                  trapezoidal state update
    (z = [x; varying sources]: Pz = [Dv Ev'], Az = [A B'], Yz = [Dy Ey'])

Devices are dispatched by integer type code over one flat parameter array,
so no recompilation per design.  Constant sources are folded into offsets
(p0, x0, y0), so only z = [x; varying sources] is multiplied per sample.
The port solve starts from a predictor (previous solution plus a chord step
for the change in p plus the nonlinear part of the previous step), runs
chord iterations with the inverse of an earlier Jacobian (formed by
Gauss-Jordan elimination, or updated from the last one by the
Sherman-Morrison-Woodbury formula where a few devices moved, so every step
is one matrix-vector product) with
the stopping rule of Hairer & Wanner (error left <= th/(1-th)*|step|, th the
measured contraction rate; on a sample's first step, not yet measured, the
larger of the last one and the Jacobian's drift since its factorisation),
refactors before the next sample when the rate
was poor, and falls through to Newton-Raphson (pnjlim limiting; a fresh
Jacobian whenever the steps stop contracting fast, else the last one's
inverse is kept) when the rate exceeds 1/4.  Devices whose port voltages
moved less than BYPASS_RATIO times the tolerance are not re-evaluated
(SPICE's bypass).  Newton failures fall back to continuation in p from the
previous sample in sub-steps (4, then 16); if that fails too the previous port
solution is kept and counted.  Output is never NaN.  Loops are compiled
with reassociation allowed (dot products on several accumulators).
Circuits with one or two nonlinear ports run the lean kernel
run_block_small instead: the same predictor and fallback around plain
Newton with a closed-form 2 x 2 inverse at every iteration.

The per-sample path (solve_ports, newton, the device loops and the chord
step) is inlined into run_block (numba ``inline="always"``): numba passes
every array as an exploded struct of ~7 scalars, so a call with 20 arrays
cost ~100 ns, more than a 2-port Newton step itself.  numba's IR-level
inlining is slow to compile, so it is used sparingly: newton has a single
call site (the fallback's continuation sub-steps reuse it), each device
type's evaluate/limit is compiled once into one dispatch function (eval_one,
limit_one: one real call per device; eval_one is inlined only into the lean
two-port kernel, through a numba inline cost model), and the Jacobian inverse
(update_jacobian: a low-rank update or a factorisation) and the
refactoring Newton phase (newton_refactoring; both on a few per cent of
samples) are real calls.  The padded matrix-vector product is inlined at
the four products made once per sample (gemv_inl) and a real call inside
Newton's loops (gemv_add).  numba's builtin max() is an out-of-line call
per use, so the per-sample path compares explicitly.  Cold start (empty
cache) to the first block: ~20-26 s (bench/bench_solver.py).

Everything here runs on the audio thread: no allocation, ``nogil=True``,
``cache=True``.
"""
from __future__ import annotations

import hashlib
import math
import os
from pathlib import Path

import numpy as np
from numba import njit


def _refresh_cache_stamp():
    """numba's disk cache keys on this file's contents only, but the kernel
    compiles the device modules' code into itself: when a device module
    changes, drop this file's cached kernels so they are compiled again."""
    here = Path(__file__)
    dev = here.parent.parent / "devices"
    h = hashlib.sha1()
    for f in sorted(dev.glob("*.py")):
        h.update(f.read_bytes())
    cache = here.parent / "__pycache__"
    stamp = cache / "kernel.devices.sha1"
    try:
        cache.mkdir(exist_ok=True)
        old = stamp.read_text() if stamp.exists() else ""
        if old != h.hexdigest():
            from numba.core import config
            pattern = f"{here.stem}.*.nb[ic]"
            stale = list(cache.glob(pattern))
            if config.CACHE_DIR:       # NUMBA_CACHE_DIR relocates the cache
                stale += [f for f in Path(config.CACHE_DIR).rglob(pattern)
                          if "solver" in str(f.parent)]
            for f in stale:
                f.unlink(missing_ok=True)
            stamp.write_text(h.hexdigest())
    except OSError:  # read-only install: the cache is what it is
        pass


_refresh_cache_stamp()

from solderless.engine.devices import behav, bjt, diode, jfet, mosfet, opamp, ota, switch  # noqa: E402
from solderless.engine.devices._common import VT  # noqa: E402

#: Largest number of ports whose Jacobian blocks a low-rank update of the
#: inverse (:func:`update_jacobian`) takes on (and at most half the padded
#: ports); more, and J is refactored.
#: Timed alone at the flagship's 16 (padded) ports: an update of 2 ports
#: ~0.3 us, 4 ports ~0.55 us, 6 ports ~1.0-1.2 us, 8 ports ~1.1 us,
#: Gauss-Jordan ~1.5 us.
UPDATE_PORTS = 6
# counter slots in the int64 array ``cnt`` (C_HARD: fresh Jacobians the last
# sample's port solve needed, C_CHAIN: low-rank updates since the last
# factorisation, C_PLIST...: the devices of an update; state, not statistics)
(C_SAMPLES, C_NONCONV, C_FALLBACK, C_MAXIT, C_PHASE, C_INDEX, C_ITERS, C_LUOK,
 C_FACTOR, C_HARD, C_UPDATE, C_CHAIN, C_PLIST) = range(13)
N_COUNTERS = C_PLIST + UPDATE_PORTS
#: Rows the Jacobian scratch J needs beyond the n + 1 of :func:`gj_inverse`
#: (the low-rank update's workspace).
J_EXTRA_ROWS = 2 * UPDATE_PORTS + 1

#: Relative part of every convergence test (of |v|, the port voltage), at
#: the default tolerance; it scales with Simulator's tolerance.
RELTOL = 1e-6
MAXIT = 30
# Chord iterations converge linearly (rate <= 1/4 enforced), so their step
# tolerance is tighter: the error left is below a third of the last step.
CHORD_MAX = 6
#: Chord iterations stop when the estimated error left, th/(1-th)*|step|
#: (th: contraction rate), is below ERR_TOL (+RELTOL*|v|): SPICE's default
#: absolute voltage tolerance VNTOL, 1 uV (ngspice manual, .options), here
#: applied to the error left rather than to the last step.  1 uV at a
#: junction is 4e-5 relative in its current (-88 dB); on the built-in
#: designs' guitar phrase the output stays within -95 dB (RMS) of runs with
#: the tolerance (and RELTOL with it) at 1e-11 V (bench/bench_accuracy.py).
ERR_TOL = 1e-6  # V
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
#: is exact to about this fraction.  Counted on the built-in designs'
#: phrase the iterations are those of full factorisations to 0.03 %; a
#: looser 1e-4 or 1e-3 replaces more factorisations, but the relative score
#: understates what a high-gain device's change does to the step (the
#: feed-forward compressor's op-amp): iterations rose, and at 1e-3 samples
#: stopped converging.
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
#: rate below THETA_MAX (a step that does not is dropped).  Against 3 mV:
#: 3-5 % fewer factorisations on the built-in designs' phrase, 0.2-1 %
#: more iterations, the same error against 1e-11 V runs; at 30 mV and
#: above, samples start to need the continuation fallback.
REUSE_STEP = 1e-2
#: After a sample whose port solve needed this many fresh Jacobians or more
#: (factorisations or low-rank updates), the next one skips the chord phase and starts Newton with a fresh
#: Jacobian: counted on the built-in designs' phrase, the kept factors then
#: converge on only 10-27 % of samples (84-97 % after an easy sample), and
#: the first chord step's error estimate, which has no measured rate after a
#: fresh Newton step, is least trustworthy there.
HARD_FACTORS = 3
#: Steps below this (volts) are rounding noise: converged, and no rate is
#: measured from them.
STEP_FLOOR = 1e-11
#: Conductance placed across every device port in the linear network (and
#: taken off the device currents, so the model is exact).  It keeps the
#: linear network regular when a net touches only device ports (a Darlington
#: base, a diode string, an OTA bias pin fed by a current source).
PORT_G0 = 1e-3
#: Device bypass threshold on port-voltage change: this many times the error
#: tolerance (ERR_TOL by default: 1e-4 V).  A bypassed device's currents are
#: continued linearly from its last evaluation, so the error is the Taylor
#: remainder f''*dv**2/2.  Every device law here is exponential or smoother
#: on a voltage scale s of at least N*VT (junctions, the OTA's tanh input,
#: the op-amp's rail clamps on VSOFT; a JFET's square law is gentler still),
#: which makes the error worth at most dv**2/(2*s) volts at the port: at the
#: default tolerance 1.9e-7 V for s = VT (N = 1), 3.9e-7 V for N = 0.5, under
#: the tolerance; it shrinks with the square of a tighter one.  On the
#: built-in designs this spares re-evaluating most devices in a sample's
#: second iteration (8-20 % faster than a fixed 1 uV; bench_accuracy.py).
BYPASS_RATIO = 100.0
#: LLVM fast-math flags for the kernel loops: reassociation lets dot products
#: run on several accumulators (SIMD) instead of one serial add chain.
FM = {"reassoc", "contract"}


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM, inline="always")
def wave_value(kind, par, t):
    """SPICE-style source waveform value at time t: 1 SIN, 2 PULSE, 3 PWL,
    4 NOISE (live noise samples, :mod:`solderless.engine.solver.livenoise`).

    par holds this source's parameters only."""
    if kind == 1:  # SIN(VO VA FREQ TD THETA PHASE)
        vo, va, f, td, th, ph = par[0], par[1], par[2], par[3], par[4], par[5]
        phr = ph * math.pi / 180.0
        if t < td:
            return vo + va * math.sin(phr)
        tt = t - td
        return vo + va * math.exp(-tt * th) * math.sin(2.0 * math.pi * f * tt + phr)
    if kind == 2:  # PULSE(V1 V2 TD TR TF PW PER)
        v1, v2, td, tr, tf, pw, per = par[0], par[1], par[2], par[3], par[4], par[5], par[6]
        if t <= td:  # V1 up to and at TD, the rise starts there (as ngspice)
            return v1
        tt = t - td
        if per > 0.0 and per < 1e300:
            tt = tt - per * math.floor(tt / per)
        if tt < tr:
            return v1 + (v2 - v1) * tt / tr
        tt -= tr
        if tt < pw:
            return v2
        tt -= pw
        if tt < tf:
            return v2 + (v1 - v2) * tt / tf
        return v1
    if kind == 4:  # NOISE: samples fed per block (solver/livenoise.py),
        # par = [dt, k0, s0, s1 ...]: sample index round(t/dt) reads s[k - k0]
        if par[0] <= 0.0:
            return 0.0
        j = int(t / par[0] + 0.5) - int(par[1])
        if j < 0 or j >= par.size - 2:
            return 0.0
        return par[2 + j]
    if kind == 3:  # PWL(t0 v0 t1 v1 ...)
        n = par.size // 2
        if t <= par[0]:
            return par[1]
        for k in range(1, n):
            t1 = par[2 * k]
            if t <= t1:
                t0 = par[2 * k - 2]
                v0 = par[2 * k - 1]
                v1 = par[2 * k + 1]
                if t1 <= t0:
                    return v1
                return v0 + (v1 - v0) * (t - t0) / (t1 - t0)
        return par[2 * n - 1]
    return 0.0


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM)
def eval_devices(dcode, dpo, dpa, par, v, i, G):
    """Port currents i(v) and Jacobian blocks G of all devices."""
    for d in range(dcode.size):
        eval_one(dcode[d], par, dpa[d], v, dpo[d], i, G)


def _inline_in_small(expr, caller_ir, callee_ir):
    """numba inline cost model: inline at the IR level only into the lean
    two-port kernel (one or two devices: the call's argument passing cost
    more than a device's arithmetic there); a real call everywhere else."""
    return caller_ir.func_id.func_name == "run_block_small"


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM,
      inline=_inline_in_small)
def eval_one(c, par, pa, v, po, i, G):
    """Evaluate one device by type code."""
    if c == 2:
        bjt.evaluate(par, pa, v, po, i, G)
    elif c == 1:
        diode.evaluate(par, pa, v, po, i, G)
    elif c == 3:
        jfet.evaluate(par, pa, v, po, i, G)
    elif c == 4:
        ota.evaluate(par, pa, v, po, i, G)
    elif c == 5:
        opamp.evaluate(par, pa, v, po, i, G)
    elif c == 6:
        mosfet.evaluate(par, pa, v, po, i, G)
    elif c == 9:
        behav.evaluate(par, pa, v, po, i, G)
    elif c == 10:
        switch.evaluate(par, pa, v, po, i, G)


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM, inline="always")
def eval_ports(dcode, dpo, dnp, dpa, par, v, i, G, veval, ieval, mem):
    """Device port currents less the port offset conductance PORT_G0 that the
    linear network carries (see :data:`PORT_G0`): i - PORT_G0*v, G - PORT_G0.

    Bypass (as SPICE's BYPASS option): a device whose port voltages moved
    less than BYPASS_RATIO times the error tolerance mem[2] since its last
    evaluation (veval, ieval) is not re-evaluated; its currents are
    continued linearly with its last Jacobian block (error below the
    tolerance: see BYPASS_RATIO).
    One- and two-port devices (diode; BJT, JFET, op-amp) take straight-line
    paths: loops with a trip count of 1 or 2 cost more in overhead than in
    arithmetic.
    """
    btol = BYPASS_RATIO * mem[2]
    for d in range(dcode.size):
        po = dpo[d]
        m = dnp[d]
        if m == 2:
            d0 = v[po] - veval[po]
            d1 = v[po + 1] - veval[po + 1]
            far = not (abs(d0) < btol and abs(d1) < btol)
        elif m == 1:
            d0 = v[po] - veval[po]
            far = not abs(d0) < btol
        else:
            far = False
            for a in range(m):
                if not abs(v[po + a] - veval[po + a]) < btol:
                    far = True
        if far:
            eval_one(dcode[d], par, dpa[d], v, po, i, G)
            if m == 2:
                v0 = v[po]
                v1 = v[po + 1]
                i0 = i[po] - PORT_G0 * v0
                i1 = i[po + 1] - PORT_G0 * v1
                i[po] = i0
                i[po + 1] = i1
                G[po, po] -= PORT_G0
                G[po + 1, po + 1] -= PORT_G0
                veval[po] = v0
                veval[po + 1] = v1
                ieval[po] = i0
                ieval[po + 1] = i1
            else:
                for a in range(m):
                    r = po + a
                    i[r] -= PORT_G0 * v[r]
                    G[r, r] -= PORT_G0
                    veval[r] = v[r]
                    ieval[r] = i[r]
        elif m == 2:
            i[po] = ieval[po] + G[po, po] * d0 + G[po, po + 1] * d1
            i[po + 1] = ieval[po + 1] + G[po + 1, po] * d0 + G[po + 1, po + 1] * d1
        elif m == 1:
            i[po] = ieval[po] + G[po, po] * d0
        else:
            for a in range(m):
                s = ieval[po + a]
                for b in range(m):
                    s += G[po + a, po + b] * (v[po + b] - veval[po + b])
                i[po + a] = s


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM)
def limit_one(c, par, pa, vn, vo, po):
    """Junction limiting of one device by type code."""
    if c == 2:
        bjt.limit(par, pa, vn, vo, po)
    elif c == 1:
        diode.limit(par, pa, vn, vo, po)
    elif c == 3:
        jfet.limit(par, pa, vn, vo, po)
    elif c == 4:
        ota.limit(par, pa, vn, vo, po)
    elif c == 5:
        opamp.limit(par, pa, vn, vo, po)
    elif c == 6:
        mosfet.limit(par, pa, vn, vo, po)


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM, inline="always")
def limit_devices(dcode, dpo, dpa, par, vn, vo):
    """Junction limiting of a Newton step vo -> vn, in place on vn."""
    for d in range(dcode.size):
        limit_one(dcode[d], par, dpa[d], vn, vo, dpo[d])


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM, inline="always")
def limit_moved(dcode, dpo, dnp, dpa, par, dqs, vn, vo):
    """:func:`limit_devices` for the per-sample path: a device's limit is
    called only when one of its port voltages moved by its quiet step dqs
    or more (smaller steps it would return unchanged), which spares most
    calls once the solution tracks the signal."""
    for d in range(dcode.size):
        po = dpo[d]
        q = dqs[d]
        m = dnp[d]
        if m == 2:
            if not (abs(vn[po] - vo[po]) < q and abs(vn[po + 1] - vo[po + 1]) < q):
                limit_one(dcode[d], par, dpa[d], vn, vo, po)
        elif m == 1:
            if not abs(vn[po] - vo[po]) < q:
                limit_one(dcode[d], par, dpa[d], vn, vo, po)
        else:
            for a in range(m):
                if not abs(vn[po + a] - vo[po + a]) < q:
                    limit_one(dcode[d], par, dpa[d], vn, vo, po)
                    break


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM, inline="always")
def gj_inverse(A, Ji, n):
    """Ji <- J^-1 by Gauss-Jordan elimination with partial pivoting.

    A is (n + 1) x 2n: rows 0..n-1 hold the augmented matrix [J | I]
    (overwritten), row n is scratch for the scaled pivot row.  Each
    elimination is one full-width row update from that scratch row (n is
    padded to a multiple of 4, the columns left of the pivot are zero to
    rounding), which vectorises; ~2-3x faster than separate J and inverse
    rows for 12-16 ports.  Returns False when J is singular."""
    w = 2 * n
    for k in range(n):
        m = k
        big = abs(A[k, k])
        for r in range(k + 1, n):
            a = abs(A[r, k])
            if a > big:
                big = a
                m = r
        if not big > 1e-300:
            return False
        inv = 1.0 / A[m, k]
        for c in range(w):
            A[n, c] = A[m, c] * inv
        if m != k:
            for c in range(w):
                A[m, c] = A[k, c]
        for c in range(w):
            A[k, c] = A[n, c]
        for r in range(n):
            f = A[r, k]
            if r != k and f != 0.0:
                for c in range(w):
                    A[r, c] -= f * A[n, c]
    for r in range(n):
        for c in range(n):
            Ji[r, c] = A[r, n + c]
    return True


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM, inline="always")
def factor_jacobian(K, G, Gf, J, Ji, dcode, dpo, dnp, cnt):
    """Ji = (I - K G)^-1 (G block diagonal by device; J is the (n+1) x 2n
    scratch of :func:`gj_inverse`); G is remembered in Gf (for
    :func:`jacobian_drift`).  Sets cnt[C_LUOK] (1: Ji is valid) and returns
    it as a bool."""
    n = Ji.shape[0]
    for r in range(n):
        for c in range(2 * n):
            J[r, c] = 0.0
        J[r, r] = 1.0
        J[r, n + r] = 1.0
    for d in range(dcode.size):
        po = dpo[d]
        m = dnp[d]
        for a in range(m):
            for b in range(m):
                g = G[po + a, po + b]
                Gf[po + a, po + b] = g
                if g != 0.0:
                    for r in range(n):
                        J[r, po + b] -= K[r, po + a] * g
    cnt[C_FACTOR] += 1
    if gj_inverse(J, Ji, n):
        cnt[C_LUOK] = 1
        return True
    cnt[C_LUOK] = 0
    return False


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM, inline="always")
def drift_terms(G, Gf, po, m, kc):
    """(numerator, denominator) of one device's score in
    :func:`jacobian_drift`, any number of ports."""
    num = 0.0
    den = 1.0
    for a in range(m):
        w = kc[po + a]
        for b in range(m):
            g = G[po + a, po + b]
            gf = Gf[po + a, po + b]
            num += w * abs(g - gf)
            den += w * _absmax(g, gf)
    return num, den


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM, inline="always")
def device_moved(G, Gf, po, m, kc, lim):
    """Whether one device's score of :func:`jacobian_drift` exceeds lim
    (compared without dividing)."""
    num, den = drift_terms(G, Gf, po, m, kc)
    return num > lim * den


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM)
def update_jacobian(K, G, Gf, J, Ji, dcode, dpo, dnp, kc, cnt):
    """Make Ji the inverse of I - K G for Newton's next step, by a low-rank
    update of the kept inverse where few devices moved, else by
    factorisation.  Returns False if J is singular.

    The kept Ji inverts J_f = I - K Gf.  Devices whose blocks moved by more
    than DRIFT_UPDATE (:func:`device_moved`) since then take their new
    blocks: with P their k <= UPDATE_PORTS (and <= n/2) ports and D = G - Gf
    on them,
    J = J_f - (K[:, P] D) E_P^T, and by the Sherman-Morrison-Woodbury
    formula (Golub & Van Loan, Matrix Computations, 4th ed., sec. 2.1.4)

        J^-1 = Ji + W (I_k - W[P, :])^-1 Ji[P, :],   W = Ji K[:, P] D,

    about 2 n^2 k multiply-adds against ~2 n^3 for Gauss-Jordan.  At a
    note's attack many of Newton's fresh Jacobians differ from the last one
    in one or two transistors (the detector's rectifier switching): on the
    built-in designs' phrase 19 % of the flagship's are made this way, 20 %
    of the feed-forward compressor's.  Every UPDATE_CHAIN updates, when
    more ports moved, or when the small system is near-singular, J is
    refactored instead (:func:`factor_jacobian`).

    K has K^T stacked below it (rows n ... 2n-1, statespace.derive), so a
    column of K is read as a contiguous row.  Workspace: rows n+1 ... of J
    (J_EXTRA_ROWS of them): the k x (k + n) system [I_k - W[P, :] | Ji[P, :]],
    W transposed (k x n) and a column of K[:, P] D; the updated devices
    in cnt[C_PLIST:].
    """
    n = Ji.shape[0]
    if cnt[C_LUOK] != 1 or cnt[C_CHAIN] >= UPDATE_CHAIN:
        cnt[C_CHAIN] = 0
        return factor_jacobian(K, G, Gf, J, Ji, dcode, dpo, dnp, cnt)
    # at most half the ports: beyond that Gauss-Jordan is as cheap (timed
    # at 8 ports: 0.35 us for an update of 4, 0.56 us of 6, 0.41 us GJ)
    kmax = UPDATE_PORTS if 2 * UPDATE_PORTS <= n else n // 2
    nd = 0
    k = 0
    for d in range(dcode.size):
        po = dpo[d]
        m = dnp[d]
        if device_moved(G, Gf, po, m, kc, DRIFT_UPDATE):
            if k + m > kmax:
                cnt[C_CHAIN] = 0
                return factor_jacobian(K, G, Gf, J, Ji, dcode, dpo, dnp, cnt)
            cnt[C_PLIST + nd] = d
            nd += 1
            k += m
    if k == 0:
        return True      # every block within DRIFT_UPDATE of the factored one
    rs = n + 1                        # [I - W[P, :] | Ji[P, :]], k rows
    rw = n + 1 + UPDATE_PORTS         # W^T, k rows
    y = J[n + 1 + 2 * UPDATE_PORTS, :n]   # a column of K[:, P] D
    j = 0
    for e in range(nd):
        d = cnt[C_PLIST + e]
        po = dpo[d]
        m = dnp[d]
        for b in range(m):
            for r in range(n):
                y[r] = 0.0
            for a in range(m):
                dg = G[po + a, po + b] - Gf[po + a, po + b]
                if dg != 0.0:
                    for r in range(n):
                        y[r] += K[n + po + a, r] * dg
            w = J[rw + j, :n]
            for r in range(n):
                w[r] = 0.0
            gemv_inl(Ji, y, w, n, n)       # column j of W = Ji K[:, P] D
            j += 1
        for a in range(m):
            for b in range(m):
                Gf[po + a, po + b] = G[po + a, po + b]
    i = 0                             # row i of the small system: port pi
    for e in range(nd):
        d = cnt[C_PLIST + e]
        for pi in range(dpo[d], dpo[d] + dnp[d]):
            for jj in range(k):
                J[rs + i, jj] = (1.0 if i == jj else 0.0) - J[rw + jj, pi]
            for c in range(n):
                J[rs + i, k + c] = Ji[pi, c]
            i += 1
    # [S | Ji[P, :]] -> [I | S^-1 Ji[P, :]], partial pivoting
    wd = k + n
    for q in range(k):
        mrow = q
        big = abs(J[rs + q, q])
        for r in range(q + 1, k):
            a = abs(J[rs + r, q])
            if a > big:
                big = a
                mrow = r
        if not big > 1e-6:
            # near-singular small system: refactor (factor_jacobian sets
            # Gf = G for every device)
            cnt[C_CHAIN] = 0
            return factor_jacobian(K, G, Gf, J, Ji, dcode, dpo, dnp, cnt)
        if mrow != q:
            for c in range(wd):
                t = J[rs + q, c]
                J[rs + q, c] = J[rs + mrow, c]
                J[rs + mrow, c] = t
        inv = 1.0 / J[rs + q, q]
        for c in range(wd):
            J[rs + q, c] *= inv
        for r in range(k):
            f = J[rs + r, q]
            if r != q and f != 0.0:
                for c in range(wd):
                    J[rs + r, c] -= f * J[rs + q, c]
    # Ji += W T, T = S^-1 Ji[P, :] (rows rs.., columns k..k+n-1)
    # (four rows per pass, as gemv_inl: n is a multiple of statespace.PAD;
    # one row per pass cost 1.6x as much for 2-4 ports)
    for jj in range(k):
        t = J[rs + jj, k:k + n]
        wt = J[rw + jj, :n]
        for r in range(0, n, 4):
            f0 = wt[r]
            f1 = wt[r + 1]
            f2 = wt[r + 2]
            f3 = wt[r + 3]
            for c in range(n):
                tc = t[c]
                Ji[r, c] += f0 * tc
                Ji[r + 1, c] += f1 * tc
                Ji[r + 2, c] += f2 * tc
                Ji[r + 3, c] += f3 * tc
    cnt[C_UPDATE] += 1
    cnt[C_CHAIN] += 1
    return True


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM, inline="always")
def _absmax(a, b):
    """max(|a|, |b|) as straight-line code (numba's builtin max is an
    out-of-line call per use, ~10 % of the per-sample path when it ran in
    the residual's loop)."""
    a = abs(a)
    b = abs(b)
    return a if a > b else b


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM, inline="always")
def jacobian_drift(G, Gf, dpo, dnp, kc):
    """How far the Jacobian J = I - K G has moved since its factorisation,
    device by device, as a fraction of that device's part of J:

        sum |K[:,a]| |G - Gf|_ab  /  (1 + sum |K[:,a]| max(|G|, |Gf|)_ab)

    (kc[a] = max |K[:, a]|, the model's column scales; 0 ... 1).  A device
    whose currents barely load the network (a junction in cut-off) scores ~0
    however its conductances
    change relative to each other; one that switches between conduction and
    cut-off, or whose conductances change by a large fraction, scores near
    its relative change.  Returns the largest score."""
    worst = 0.0
    for d in range(dpo.size):
        po = dpo[d]
        m = dnp[d]
        if m == 2:
            g00, g01, g10, g11 = G[po, po], G[po, po + 1], G[po + 1, po], G[po + 1, po + 1]
            f00, f01, f10, f11 = Gf[po, po], Gf[po, po + 1], Gf[po + 1, po], Gf[po + 1, po + 1]
            w0 = kc[po]
            w1 = kc[po + 1]
            num = (w0 * (abs(g00 - f00) + abs(g01 - f01))
                   + w1 * (abs(g10 - f10) + abs(g11 - f11)))
            den = 1.0 + (w0 * (_absmax(g00, f00) + _absmax(g01, f01))
                         + w1 * (_absmax(g10, f10) + _absmax(g11, f11)))
        elif m == 1:
            g00, f00, w0 = G[po, po], Gf[po, po], kc[po]
            num = w0 * abs(g00 - f00)
            den = 1.0 + w0 * _absmax(g00, f00)
        else:
            num, den = drift_terms(G, Gf, po, m, kc)
        # den >= 1: compare without dividing, divide for a new maximum only
        if num > worst * den:
            worst = num / den
    return worst


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM, inline="always")
def gemv_inl(A, x, y, nr, nc):
    """y[:nr] += A[:nr, :nc] @ x[:nc], four rows at a time.

    The model's port and source dimensions are padded to multiples of four
    (statespace.PAD), so every inner loop runs whole SIMD vectors; four rows
    per pass share each load of x and one loop's overhead.  For the 12-16
    port designs this is ~1.6x faster than one row at a time.

    Inlined at the four products every sample makes once (p, the
    predictor, and the state update's two): a call passes each array as
    ~7 scalars on the stack, and at these sites that cost 15-20 % of the
    octave fuzz's and feed-forward compressor's time.  The products inside
    Newton's iterations call :func:`gemv_add` instead (inlining those too
    gained nothing measurable and cost ~2 s more cold compile)."""
    r = 0
    while r + 4 <= nr:
        s0 = 0.0
        s1 = 0.0
        s2 = 0.0
        s3 = 0.0
        for c in range(nc):
            xc = x[c]
            s0 += A[r, c] * xc
            s1 += A[r + 1, c] * xc
            s2 += A[r + 2, c] * xc
            s3 += A[r + 3, c] * xc
        y[r] += s0
        y[r + 1] += s1
        y[r + 2] += s2
        y[r + 3] += s3
        r += 4
    while r < nr:
        s = 0.0
        for c in range(nc):
            s += A[r, c] * x[c]
        y[r] += s
        r += 1


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM)
def gemv_add(A, x, y, nr, nc):
    """:func:`gemv_inl` as a real call (the products in Newton's loops)."""
    gemv_inl(A, x, y, nr, nc)


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM, inline="always")
def residual(p, v, K, i, F, n):
    """F = p - v + K i (the residual at v); returns max |F|."""
    for r in range(n):
        F[r] = p[r] - v[r]
    gemv_add(K, i, F, n, n)
    res = 0.0
    for r in range(n):
        a = abs(F[r])
        if a > res:
            res = a
    return res


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM, inline="always")
def take_step(Ji, F, v, vn, n, dcode, dpo, dnp, dpa, par, dqs, tol, rtol, commit):
    """vn = v + Ji F, junction-limited; then F <- vn - v, the step taken,
    and, if commit, v <- vn.  Returns (max |F|, w) with
    w = max |F[r]| / (tol + rtol*|vn[r]|): the step meets an error estimate
    eta*|F[r]| <= tol + rtol*|vn[r]| for every r exactly when eta*w <= 1
    (one pass instead of a second loop; w is infinite if F is not finite)."""
    for r in range(n):
        vn[r] = v[r]
    gemv_add(Ji, F, vn, n, n)
    limit_moved(dcode, dpo, dnp, dpa, par, dqs, vn, v)
    big = 0.0
    w = 0.0
    for r in range(n):
        a = vn[r]
        d = a - v[r]
        ad = abs(d)
        if ad > big:
            big = ad
        # w = max ad/den, dividing only for a new maximum (a division
        # per port cost more than the rest of this loop)
        den = tol + rtol * abs(a)
        if not ad <= w * den:
            w = ad / den if ad == ad else math.inf
        F[r] = d
        if commit:
            v[r] = a
    return big, w


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM, inline="always")
def newton_tol(mem):
    """Step size below which a Newton step (fresh Jacobian) has converged.
    Newton converges quadratically: near the solution the error left after
    a step d is about d**2/(2*N*VT) at a junction (emission coefficient N,
    at least 1 for the parts library's junctions), so sqrt(2*VT*tol)
    leaves at most the tolerance mem[2]: 2.3e-4 V at the default 1 uV.
    (A fixed 3e-5 V, used before, cost the one- and two-port circuits a
    second iteration on most samples for errors 100x below the tolerance.)"""
    return math.sqrt(2.0 * VT * mem[2])


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM, inline="always")
def _correct_currents(dcode, dpo, dnp, G, dv, i):
    """First-order correction of the port currents for the last step dv."""
    for d in range(dcode.size):
        po = dpo[d]
        m = dnp[d]
        if m == 2:
            d0 = dv[po]
            d1 = dv[po + 1]
            i[po] += G[po, po] * d0 + G[po, po + 1] * d1
            i[po + 1] += G[po + 1, po] * d0 + G[po + 1, po + 1] * d1
        elif m == 1:
            i[po] += G[po, po] * dv[po]
        else:
            for a in range(m):
                s = 0.0
                for b in range(m):
                    s += G[po + a, po + b] * dv[po + b]
                i[po + a] += s


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM, inline="always")
def newton(p, v, K, dcode, dpo, dnp, dpa, par, dqs, i, G, J, F, vn, maxit, cnt, veval,
           ieval, Ji, Gf, mem, kc):
    """Solve v = p + K i(v) for v (in place, warm start = v on entry).

    First up to CHORD_MAX chord iterations with the last inverse (if any),
    then Newton-Raphson that refactors whenever its steps stop contracting
    fast.  Returns the
    number of iterations, or -1 if not converged within maxit.  On success
    ``i`` holds the port currents at the returned v (first-order corrected
    for the last step).  mem: [last measured chord rate, refactor flag,
    error tolerance in volts]; kc: the model's column scales of K.
    """
    n = p.size
    done = 0
    if cnt[C_LUOK] == 1 and cnt[C_HARD] < HARD_FACTORS:
        # chord iterations with the factors of an earlier Jacobian: cheap
        # (no refactorisation) and fast while the Jacobian changes slowly.
        # Stopping rule of Hairer & Wanner (Solving ODEs II, sec. IV.8): with
        # contraction rate th, the error left after a step d is at most
        # th/(1-th)*|d|.  th is measured from successive steps; on the first
        # step it is the last measured one, floored at THETA_MIN.  Fall
        # through to Newton with refactoring when the rate exceeds THETA_MAX.
        th = mem[0]
        if not th >= THETA_MIN:
            th = THETA_MIN
        prev = 0.0
        for it in range(CHORD_MAX):
            eval_ports(dcode, dpo, dnp, dpa, par, v, i, G, veval, ieval, mem)
            res = residual(p, v, K, i, F, n)
            big, w = take_step(Ji, F, v, vn, n, dcode, dpo, dnp, dpa, par, dqs, mem[2],
                               mem[3], True)
            tiny = big <= STEP_FLOOR
            if it > 0 and not tiny:
                th = big / prev if prev > 0.0 else 0.0
                if not th < THETA_MAX:
                    done += 1
                    mem[1] = 1.0  # refactor before the next sample
                    break
            # a stale Jacobian far stiffer than the true one makes tiny steps
            # from a large residual: never trust those
            conv = res <= RES_SANE and (tiny or th / (1.0 - th) * w <= 1.0)
            if conv and it == 0:
                # The first step's rate is not measured.  The chord rate is
                # about the relative change of the Jacobian since its
                # factorisation (|J_f^-1 (J - J_f)|; Kelley 1995, sec. 5.4),
                # which jacobian_drift scores device by device: the error
                # estimate uses the larger of it and the remembered rate.
                # A step from factors of a very different Jacobian (a
                # junction that was in hard conduction and is now off) can
                # be tiny while the error is not: beyond DRIFT_MAX, always
                # measure the rate on a second step.
                dr = jacobian_drift(G, Gf, dpo, dnp, kc)
                if not dr <= DRIFT_MAX:
                    conv = False
                elif dr > th and not tiny:
                    conv = dr / (1.0 - dr) * w <= 1.0
            done += 1
            if conv:
                if it > 0:
                    mem[0] = th
                    if th > THETA_REFRESH:
                        mem[1] = 1.0
                _correct_currents(dcode, dpo, dnp, G, F, i)
                return done
            prev = big
    return newton_refactoring(p, v, K, dcode, dpo, dnp, dpa, par, dqs, i, G, J, F, vn,
                              maxit, cnt, veval, ieval, Ji, Gf, mem, kc, done)


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM)
def newton_refactoring(p, v, K, dcode, dpo, dnp, dpa, par, dqs, i, G, J, F, vn, maxit, cnt,
                       veval, ieval, Ji, Gf, mem, kc, done):
    """The second phase of :func:`newton`, a real call (it runs on a few
    per cent of samples; compiled once, outside run_block).  ``done``: the
    chord iterations already spent; returns the total, or -1.

    Newton-Raphson, keeping a fresh Jacobian's inverse for the following
    steps while they contract fast (rate below THETA_MAX, measured from
    successive steps as in the chord loop) and refactoring when they do not
    (Shamanskii's modification of Newton's method; Kelley, Iterative Methods
    for Linear and Nonlinear Equations, SIAM 1995, sec. 5.4.3); a step with
    kept factors that does not contract is dropped.  A step
    right after a refactorisation is a Newton step and stops on newton_tol
    (error ~ step**2/(2*VT)); a step with older factors stops on the
    error estimate th/(1-th)*|step| <= tolerance, as the chord loop does.
    """
    n = p.size
    fresh = True
    prev = 0.0
    th = 0.0
    for it in range(maxit):
        eval_ports_outlined(dcode, dpo, dnp, dpa, par, v, i, G, veval, ieval, mem)
        res = residual(p, v, K, i, F, n)
        if fresh:
            if not update_jacobian(K, G, Gf, J, Ji, dcode, dpo, dnp, kc, cnt):
                return -1
        big, w = take_step(Ji, F, v, vn, n, dcode, dpo, dnp, dpa, par, dqs,
                           newton_tol(mem) if fresh else mem[2], mem[3], False)
        if fresh:
            conv = w <= 1.0
        elif big > STEP_FLOOR:
            th = big / prev if prev > 0.0 else 1.0
            if not th < THETA_MAX:
                # the kept factors do not contract here: drop this step and
                # take a Newton step from where it started (keeping it can
                # undo the last Newton step, a two-cycle)
                fresh = True
                continue
            conv = res <= RES_SANE and th / (1.0 - th) * w <= 1.0
        else:
            conv = True
        for r in range(n):
            v[r] = vn[r]
        if conv:
            mem[0] = 0.0 if fresh else th
            mem[1] = 0.0
            _correct_currents(dcode, dpo, dnp, G, F, i)
            return done + it + 1
        # after a Newton step small enough that the Jacobian barely moved,
        # keep its factors (a kept one stays while it contracts fast)
        if fresh:
            fresh = big > REUSE_STEP
        prev = big
    return -1


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM)
def eval_ports_outlined(dcode, dpo, dnp, dpa, par, v, i, G, veval, ieval, mem):
    """:func:`eval_ports` as a real call (rare paths)."""
    eval_ports(dcode, dpo, dnp, dpa, par, v, i, G, veval, ieval, mem)


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM, inline="always")
def solve_ports(p, pprev, v, vprev, K, dcode, dpo, dnp, dpa, par, dqs, i, G, J, F, vn,
                ptmp, cnt, v2, veval, ieval, Ji, Gf, mem, kc, lprev):
    """Newton with bounded fallback; never leaves non-finite values in v, i.

    Predictor: the previous solution plus a chord step with the previous
    Jacobian's factors, v + J^-1 (p - pprev) (exact for a linear network),
    plus the nonlinear part of the previous sample's step (its step less
    its own linear part lprev), which the signal's smoothness makes a good
    guess of this one's: on the built-in designs this leaves 10-25 % fewer
    iterations than the linear step alone.  Not after a sample that needed
    a fresh Jacobian (cnt[C_HARD] > 0): its step was a junction switching
    (a rectifier transistor saturating at a note's attack moves its
    collector volts in one sample), and extrapolating that throws the next
    guess volts past the answer.  Counted on the built-in designs' phrase
    in 64-sample blocks, this and HARD_FACTORS together save 6-9 % of the
    factorisations of the compressors (flagship 26418 -> 24247) and 1-2 %
    of their iterations, the octave fuzz +1 %, at the same error against
    1e-11 V runs (bench_accuracy.py).
    v2 keeps the solution two samples back.
    """
    n = p.size
    if cnt[C_LUOK] == 1:
        smooth = cnt[C_HARD] == 0
        for r in range(n):
            F[r] = p[r] - pprev[r]
            vn[r] = 0.0
        gemv_inl(Ji, F, vn, n, n)
        for r in range(n):
            # linear step for the change in p (vn), plus the last sample's
            # nonlinear part of its step (its step less its linear part);
            # vprev, v2 and ptmp set in the same pass
            vr = v[r]
            lin = vn[r]
            vprev[r] = vr
            v[r] = vr + lin + ((vr - v2[r] - lprev[r]) if smooth else 0.0)
            lprev[r] = lin
            v2[r] = vr
            ptmp[r] = p[r]
        limit_moved(dcode, dpo, dnp, dpa, par, dqs, v, vprev)
        if mem[1] != 0.0:
            # the last sample's chord iterations contracted slowly: refactor
            # at this sample's predicted point (closer to its solution than
            # the last one's; the chord loop's first evaluation is then a
            # bypass)
            eval_ports_outlined(dcode, dpo, dnp, dpa, par, v, i, G, veval, ieval, mem)
            update_jacobian(K, G, Gf, J, Ji, dcode, dpo, dnp, kc, cnt)
            mem[0] = 0.0
    else:
        for r in range(n):
            vprev[r] = v[r]
            v2[r] = v[r]
            ptmp[r] = p[r]
    mem[1] = 0.0
    f0 = cnt[C_FACTOR] + cnt[C_UPDATE]
    # One call site of the (inlined) Newton solver serves the direct solve
    # and the fallback: continuation in p from the previous sample, in 4
    # then 16 sub-steps (ptmp: the p of the current (sub-)step).
    nsub = 1
    s = 1
    while True:
        it = newton(ptmp, v, K, dcode, dpo, dnp, dpa, par, dqs, i, G, J, F, vn, MAXIT, cnt,
                    veval, ieval, Ji, Gf, mem, kc)
        good = it >= 0 if nsub > 1 else it > 0
        if good and nsub > 1:
            cnt[C_ITERS] += it
            if s < nsub:
                s += 1
                f = s / nsub
                for r in range(n):
                    ptmp[r] = pprev[r] + (p[r] - pprev[r]) * f
                continue
        if good:
            for r in range(n):
                if not (math.isfinite(v[r]) and math.isfinite(i[r])):
                    good = False
        if good:
            cnt[C_HARD] = cnt[C_FACTOR] + cnt[C_UPDATE] - f0
            if nsub == 1:
                if it > cnt[C_MAXIT]:
                    cnt[C_MAXIT] = it
                cnt[C_ITERS] += it
            return True
        if nsub == 16:
            break
        if nsub == 1:
            cnt[C_FALLBACK] += 1
        nsub = 4 if nsub == 1 else 16
        s = 1
        f = s / nsub
        for r in range(n):
            v[r] = vprev[r]
            ptmp[r] = pprev[r] + (p[r] - pprev[r]) * f
    cnt[C_NONCONV] += 1
    cnt[C_HARD] = cnt[C_FACTOR] + cnt[C_UPDATE] - f0
    for r in range(n):
        v[r] = vprev[r]
    eval_ports_outlined(dcode, dpo, dnp, dpa, par, v, i, G, veval, ieval, mem)
    return False


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM, inline="always")
def load_sources(z, nx, uvar, inp, xk, skind, sptr, spar, t):
    """This sample's varying sources into z[nx:]: the input takes xk, a
    waveform source its value at time t."""
    for j in range(uvar.size):
        s = uvar[j]
        if s == inp:
            z[nx + j] = xk
        else:
            z[nx + j] = wave_value(skind[s], spar[sptr[s]:sptr[s + 1]], t)


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM, inline="always")
def finish_sample(k, yout, pbuf, frames, pcap, pdec, Az, x0, C, Yz, y0, Fy, Vy,
                  z, xp, v, i, xt, yrow, cnt):
    """After the port solve of sample k: the output into yout[k] (never
    non-finite), a probe frame into pbuf every pdec samples, and the state
    update x' = x0 + Az z + C i (kept only if finite).  Returns the frame
    count."""
    nz = z.size
    nx = xp.size
    npt = v.size
    ny = yrow.size
    nprobe = pbuf.shape[0]
    take = nprobe > 0 and cnt[C_PHASE] == 0 and frames < pcap
    for r in range(ny if take else 1):
        s = y0[r]
        for c in range(nz):
            s += Yz[r, c] * z[c]
        for c in range(npt):
            s += Fy[r, c] * i[c] + Vy[r, c] * v[c]
        yrow[r] = s
    y0v = yrow[0]
    if not math.isfinite(y0v):
        y0v = 0.0
        cnt[C_NONCONV] += 1
    yout[k] = y0v
    if nprobe > 0:
        if take:
            for r in range(nprobe):
                pbuf[r, frames] = yrow[r + 1]
            frames += 1
        cnt[C_PHASE] += 1
        if cnt[C_PHASE] >= pdec:
            cnt[C_PHASE] = 0
    nxp = x0.size
    for r in range(nxp):
        xt[r] = x0[r]
    gemv_inl(Az, z, xt, nxp, nz)
    gemv_inl(C, i, xt, nxp, npt)
    finite = True
    for r in range(nx):
        if not math.isfinite(xt[r]):
            finite = False
    if finite:
        for r in range(nx):
            xp[r] = z[r]
            z[r] = xt[r]
    cnt[C_INDEX] += 1
    cnt[C_SAMPLES] += 1
    return frames


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM)
def run_block(xin, nin, yout, pbuf, pstart, pcap, pdec,
              Pz, p0, Az, x0, C, K, Yz, y0, Fy, Vy, kc,
              dcode, dpo, dnp, dpa, par, dqs,
              uvar, skind, sptr, spar, inp, dt,
              z, xp, v, i, pprev, ws, G, Gf, J, Ji, yrow, cnt):
    """Run ``nin`` samples of input ``xin`` through the model.

    z = [x; varying source values; zeros]: the first nx (= xp.size) entries
    are the states, then the sources listed in ``uvar`` (the input ``inp``,
    which takes the samples xin, and waveform sources), then zero padding to
    a multiple of statespace.PAD; the ports are padded likewise (a padded
    port has zero rows and columns, so it stays at 0 V and 0 A).  Constant
    sources are folded into the
    offsets p0, x0, y0 (see :func:`solderless.engine.solver.statespace.derive`), so
    per sample
        p = p0 + Pz z,  y = y0 + Yz z + Fy i + Vy v,  x' = x0 + Az z + C i.
    yout[k] receives output row 0; every ``pdec`` samples a probe frame (rows
    1.. of y, computed only then) is written into pbuf (if it has rows) at
    columns pstart, pstart+1 ... below ``pcap``.  kc[c] = max |K[:, c]|
    (the model's column scales of K, for :func:`jacobian_drift`).  ws is an
    (11, max(padded ports, padded states, 4)) workspace: rows 0-5 scratch;
    rows 6-10 persist (v two samples back; the predictor's last linear step;
    bypass memory (2 rows); chord rate memory, refactor flag, absolute and
    relative error tolerance).  Returns the number of probe frames written.
    """
    nz = z.size      # states, varying sources, zero padding
    nx = xp.size
    npt = v.size     # ports, zero padding
    p = ws[0, :npt]
    vprev = ws[1, :npt]
    F = ws[2, :npt]
    vn = ws[3, :npt]
    ptmp = ws[4, :npt]
    nxp = x0.size    # states, zero padding (rows of the state update)
    xt = ws[5, :nxp]
    v2 = ws[6, :npt]
    veval = ws[8, :npt]
    ieval = ws[9, :npt]
    frames = pstart
    for k in range(nin):
        load_sources(z, nx, uvar, inp, xin[k], skind, sptr, spar, cnt[C_INDEX] * dt)
        if npt > 0:
            for r in range(npt):
                p[r] = p0[r]
            gemv_inl(Pz, z, p, npt, nz)
            solve_ports(p, pprev, v, vprev, K, dcode, dpo, dnp, dpa, par, dqs, i, G, J, F, vn,
                        ptmp, cnt, v2, veval, ieval, Ji, Gf, ws[10], kc, ws[7, :npt])
            for r in range(npt):
                pprev[r] = p[r]
        frames = finish_sample(k, yout, pbuf, frames, pcap, pdec, Az, x0, C, Yz, y0, Fy, Vy,
                               z, xp, v, i, xt, yrow, cnt)
    return frames - pstart


#: Circuits with at most this many nonlinear ports run :func:`run_block_small`.
SMALL_PORTS = 2


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM, inline="always")
def newton2(p, v, K, dcode, dpo, dnp, dpa, par, dqs, i, G, Ji, vn, veval, ieval, mem, stol,
            cnt):
    """Newton-Raphson on v = p + K i(v) for at most two ports (v[0], v[1];
    a one-port circuit has a zero second port), with a fresh Jacobian at
    every iteration inverted in closed form (cheaper at this size than
    deciding whether to keep it), pnjlim limiting and SPICE's bypass.
    Stops on a step below stol (:func:`newton_tol`, worked out once per
    block by the caller) + mem[3]*|v| (mem[3]: the relative tolerance).
    Ji keeps the last Jacobian's inverse (the next sample's predictor).
    Returns the number of iterations, or -1 (no convergence or a singular
    Jacobian)."""
    rtol = mem[3]
    k00, k01, k10, k11 = K[0, 0], K[0, 1], K[1, 0], K[1, 1]
    for it in range(MAXIT):
        eval_ports(dcode, dpo, dnp, dpa, par, v, i, G, veval, ieval, mem)
        i0 = i[0]
        i1 = i[1]
        f0 = p[0] - v[0] + k00 * i0 + k01 * i1
        f1 = p[1] - v[1] + k10 * i0 + k11 * i1
        g00, g01, g10, g11 = G[0, 0], G[0, 1], G[1, 0], G[1, 1]
        a = 1.0 - (k00 * g00 + k01 * g10)
        b = -(k00 * g01 + k01 * g11)
        c = -(k10 * g00 + k11 * g10)
        d = 1.0 - (k10 * g01 + k11 * g11)
        det = a * d - b * c
        if not abs(det) > 1e-300:
            return -1
        q = 1.0 / det
        Ji[0, 0] = d * q
        Ji[0, 1] = -b * q
        Ji[1, 0] = -c * q
        Ji[1, 1] = a * q
        vn[0] = v[0] + (d * f0 - b * f1) * q
        vn[1] = v[1] + (a * f1 - c * f0) * q
        limit_moved(dcode, dpo, dnp, dpa, par, dqs, vn, v)
        d0 = vn[0] - v[0]
        d1 = vn[1] - v[1]
        v[0] = vn[0]
        v[1] = vn[1]
        if (abs(d0) <= stol + rtol * abs(v[0])
                and abs(d1) <= stol + rtol * abs(v[1])):
            i[0] = i0 + g00 * d0 + g01 * d1
            i[1] = i1 + g10 * d0 + g11 * d1
            cnt[C_FACTOR] += it + 1
            return it + 1
    cnt[C_FACTOR] += MAXIT
    return -1


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM)
def run_block_small(xin, nin, yout, pbuf, pstart, pcap, pdec,
                    Pz, p0, Az, x0, C, K, Yz, y0, Fy, Vy, kc,
                    dcode, dpo, dnp, dpa, par, dqs,
                    uvar, skind, sptr, spar, inp, dt,
                    z, xp, v, i, pprev, ws, G, Gf, J, Ji, yrow, cnt):
    """:func:`run_block` for circuits with one or two nonlinear ports
    (SMALL_PORTS; same arguments, workspace layout and counters; Simulator
    picks one of the two at construction).

    At this size the generic path's bookkeeping (padded loops, chord
    rates, drift checks, real calls) costs more than the arithmetic, so
    each sample here runs the same predictor as :func:`solve_ports` and
    then plain Newton-Raphson with a closed-form 2 x 2 inverse
    (:func:`newton2`), with the same bounded fallback: continuation in p
    in 4, then 16 sub-steps, else the previous solution is kept and
    counted.  Output and state update are those of run_block."""
    nz = z.size
    nx = xp.size
    p = ws[0, :2]
    vprev = ws[1, :2]
    vn = ws[3, :2]
    ptmp = ws[4, :2]
    xt = ws[5, :x0.size]
    v2 = ws[6, :2]
    lprev = ws[7, :2]
    veval = ws[8, :]
    ieval = ws[9, :]
    mem = ws[10]
    stol = newton_tol(mem)   # the tolerance is fixed for the block: one sqrt
    frames = pstart
    for k in range(nin):
        load_sources(z, nx, uvar, inp, xin[k], skind, sptr, spar, cnt[C_INDEX] * dt)
        for r in range(2):
            acc = p0[r]
            for c in range(nz):
                acc += Pz[r, c] * z[c]
            p[r] = acc
            vprev[r] = v[r]
        if cnt[C_LUOK] == 1:
            e0 = p[0] - pprev[0]
            e1 = p[1] - pprev[1]
            for r in range(2):
                lin = Ji[r, 0] * e0 + Ji[r, 1] * e1
                vn[r] = v[r] + lin + (v[r] - v2[r] - lprev[r])
                lprev[r] = lin
            limit_moved(dcode, dpo, dnp, dpa, par, dqs, vn, v)
            v[0] = vn[0]
            v[1] = vn[1]
        v2[0] = vprev[0]
        v2[1] = vprev[1]
        ptmp[0] = p[0]
        ptmp[1] = p[1]
        nsub = 1
        s = 1
        while True:
            it = newton2(ptmp, v, K, dcode, dpo, dnp, dpa, par, dqs, i, G, Ji, vn, veval,
                         ieval, mem, stol, cnt)
            good = it > 0
            if good and nsub > 1 and s < nsub:
                cnt[C_ITERS] += it
                s += 1
                f = s / nsub
                for r in range(2):
                    ptmp[r] = pprev[r] + (p[r] - pprev[r]) * f
                continue
            if good:
                good = (math.isfinite(v[0]) and math.isfinite(v[1])
                        and math.isfinite(i[0]) and math.isfinite(i[1]))
            if good:
                cnt[C_LUOK] = 1
                if nsub == 1 and it > cnt[C_MAXIT]:
                    cnt[C_MAXIT] = it
                cnt[C_ITERS] += it
                break
            if nsub == 16:
                cnt[C_NONCONV] += 1
                v[0] = vprev[0]
                v[1] = vprev[1]
                eval_ports_outlined(dcode, dpo, dnp, dpa, par, v, i, G, veval, ieval, mem)
                break
            if nsub == 1:
                cnt[C_FALLBACK] += 1
            nsub = 4 if nsub == 1 else 16
            s = 1
            for r in range(2):
                v[r] = vprev[r]
                ptmp[r] = pprev[r] + (p[r] - pprev[r]) / nsub
        pprev[0] = p[0]
        pprev[1] = p[1]
        frames = finish_sample(k, yout, pbuf, frames, pcap, pdec, Az, x0, C, Yz, y0, Fy, Vy,
                               z, xp, v, i, xt, yrow, cnt)
    return frames - pstart


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, fastmath=FM)
def convert_states(x, xp, g_old, g_new, a, b):
    """Carry reactive states over a value change (capacitor voltage and
    current, inductor current and voltage stay as they were)."""
    for k in range(x.size):
        go = g_old[k]
        r = (x[k] + b[k] * xp[k]) / (a[k] * go) if go != 0.0 else 0.0
        x[k] = x[k] + (g_new[k] - go) * r
        xp[k] = (a[k] * g_new[k] * r - x[k]) / b[k] if b[k] != 0.0 else x[k]
