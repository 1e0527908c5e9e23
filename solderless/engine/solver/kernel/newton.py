"""The port solve v = p + K i(v): chord iterations with a kept inverse
Jacobian, Newton-Raphson with refactoring, and the lean runner's Newton
(two ports, four ports)."""
from __future__ import annotations

import math

from solderless.engine.devices._common import VT
from solderless.engine.solver.kernel.dispatch import (
    correct_currents, eval_ports, eval_ports_outlined, limit_moved)
from solderless.engine.solver.kernel.jacobian import jacobian_drift, update_jacobian
from solderless.engine.solver.kernel.linalg import gemv_inl, gj_inverse, inverse4
from solderless.engine.solver.kernel.params import (
    CHORD_MAX, DRIFT_MAX, HARD_FACTORS, MAXIT, PIVOT_TINY, PTC_MAXIT, PTC_S0, PTC_SEND,
    RES_SANE, REUSE_STEP, STEP_FLOOR, THETA_MAX, THETA_MIN, THETA_REFRESH, kernel_jit)
from solderless.engine.solver.kernel_layout import (
    MEM_ATOL, MEM_REFACTOR, MEM_RTOL, MEM_THETA, STAT_FACTOR, STATE_HARD, STATE_JI_OK)


@kernel_jit(inline="always")
def residual(p, v, K, i, F, n):
    """F = p - v + K i (the residual at v); returns max |F|."""
    for r in range(n):
        F[r] = p[r] - v[r]
    gemv_inl(K, i, F, n, n)
    res = 0.0
    for r in range(n):
        a = abs(F[r])
        if a > res:
            res = a
    return res


@kernel_jit(inline="always")
def take_step(Ji, F, v, vn, n, dcode, dpo, dnp, dpa, par, dqs, tol, rtol, commit):
    """vn = v + Ji F, junction-limited; then F <- vn - v, the step taken,
    and, if commit, v <- vn.  Returns (max |F|, w) with
    w = max |F[r]| / (tol + rtol*|vn[r]|): the step meets an error estimate
    eta*|F[r]| <= tol + rtol*|vn[r]| for every r exactly when eta*w <= 1
    (one pass instead of a second loop; w is infinite if F is not finite)."""
    for r in range(n):
        vn[r] = v[r]
    gemv_inl(Ji, F, vn, n, n)
    limit_moved(dcode, dpo, dnp, dpa, par, dqs, vn, v)
    big = 0.0
    w = 0.0
    for r in range(n):
        a = vn[r]
        d = a - v[r]
        ad = abs(d)
        if ad > big:
            big = ad
        # w = max ad/den, dividing only for a new maximum
        den = tol + rtol * abs(a)
        if not ad <= w * den:
            w = ad / den if ad == ad else math.inf
        F[r] = d
        if commit:
            v[r] = a
    return big, w


@kernel_jit(inline="always")
def newton_tol(mem):
    """Step size below which a Newton step (fresh Jacobian) has converged.
    Newton converges quadratically: near the solution the error left after
    a step d is about d**2/(2*N*VT) at a junction (emission coefficient N,
    at least 1 for the parts library's junctions), so sqrt(2*VT*tol)
    leaves at most the tolerance mem[MEM_ATOL]: 2.3e-4 V at the default
    1 uV."""
    return math.sqrt(2.0 * VT * mem[MEM_ATOL])


@kernel_jit(inline="always")
def newton(p, v, K, dcode, dpo, dnp, dpa, par, dqs, i, G, J, F, vn, maxit, state, stats,
           veval, ieval, Ji, Gf, mem, kc):
    """Solve v = p + K i(v) for v (in place, warm start = v on entry).

    First up to CHORD_MAX chord iterations with the last inverse (if any),
    then Newton-Raphson that refactors whenever its steps stop contracting
    fast.  Returns the number of iterations, or -1 if not converged within
    maxit.  On success ``i`` holds the port currents at the returned v
    (first-order corrected for the last step).  mem: the row ws[WS_MEM]
    (MEM_* slots); kc: the model's column scales of K.
    """
    n = p.size
    done = 0
    if state[STATE_JI_OK] == 1 and state[STATE_HARD] < HARD_FACTORS:
        # chord iterations with the factors of an earlier Jacobian: cheap
        # (no refactorisation) and fast while the Jacobian changes slowly.
        # Stopping rule of Hairer & Wanner (Solving ODEs II, sec. IV.8): with
        # contraction rate th, the error left after a step d is at most
        # th/(1-th)*|d|.  th is measured from successive steps; on the first
        # step it is the last measured one, floored at THETA_MIN.  Fall
        # through to Newton with refactoring when the rate exceeds THETA_MAX.
        th = mem[MEM_THETA]
        if not th >= THETA_MIN:
            th = THETA_MIN
        prev = 0.0
        for it in range(CHORD_MAX):
            eval_ports(dcode, dpo, dnp, dpa, par, v, i, G, veval, ieval, mem)
            res = residual(p, v, K, i, F, n)
            big, w = take_step(Ji, F, v, vn, n, dcode, dpo, dnp, dpa, par, dqs, mem[MEM_ATOL],
                               mem[MEM_RTOL], True)
            tiny = big <= STEP_FLOOR
            if it > 0 and not tiny:
                th = big / prev if prev > 0.0 else 0.0
                if not th < THETA_MAX:
                    done += 1
                    mem[MEM_REFACTOR] = 1.0  # refactor before the next sample
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
                    mem[MEM_THETA] = th
                    if th > THETA_REFRESH:
                        mem[MEM_REFACTOR] = 1.0
                correct_currents(dcode, dpo, dnp, G, F, i)
                return done
            prev = big
    return newton_refactoring(p, v, K, dcode, dpo, dnp, dpa, par, dqs, i, G, J, F, vn,
                              maxit, state, stats, veval, ieval, Ji, Gf, mem, kc, done)


@kernel_jit()
def newton_refactoring(p, v, K, dcode, dpo, dnp, dpa, par, dqs, i, G, J, F, vn, maxit,
                       state, stats, veval, ieval, Ji, Gf, mem, kc, done):
    """The second phase of :func:`newton`, a real call (it runs on a few
    per cent of samples; compiled once, outside run_block).  ``done``: the
    chord iterations already spent; returns the total, or -1.

    Newton-Raphson, keeping a fresh Jacobian's inverse for the following
    steps while they contract fast (rate below THETA_MAX, measured from
    successive steps as in the chord loop) and refactoring when they do not
    (Shamanskii's modification of Newton's method; Kelley, Iterative Methods
    for Linear and Nonlinear Equations, SIAM 1995, sec. 5.4.3); a step with
    kept factors that does not contract is dropped.  A step right after a
    refactorisation is a Newton step and stops on newton_tol (error
    ~ step**2/(2*VT)); a step with older factors stops on the error estimate
    th/(1-th)*|step| <= tolerance, as the chord loop does.
    """
    n = p.size
    fresh = True
    prev = 0.0
    th = 0.0
    for it in range(maxit):
        eval_ports_outlined(dcode, dpo, dnp, dpa, par, v, i, G, veval, ieval, mem)
        res = residual(p, v, K, i, F, n)
        if fresh:
            if not update_jacobian(K, G, Gf, J, Ji, dcode, dpo, dnp, kc, state, stats,
                                   False):
                return -1
        big, w = take_step(Ji, F, v, vn, n, dcode, dpo, dnp, dpa, par, dqs,
                           newton_tol(mem) if fresh else mem[MEM_ATOL], mem[MEM_RTOL], False)
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
            mem[MEM_THETA] = 0.0 if fresh else th
            mem[MEM_REFACTOR] = 0.0
            correct_currents(dcode, dpo, dnp, G, F, i)
            return done + it + 1
        # after a Newton step small enough that the Jacobian barely moved,
        # keep its factors (a kept one stays while it contracts fast)
        if fresh:
            fresh = big > REUSE_STEP
        prev = big
    return -1


@kernel_jit()
def pseudo_transient(p, v, K, dcode, dpo, dnp, dpa, par, dqs, i, G, J, Ji, F, vn, veval,
                     ieval, mem):
    """The port solve's last resort: pseudo-transient continuation from v
    (in place).  Returns the iterations taken, or -1.

    Where the solution the sample asks for is not on the branch of the last
    one (a Schmitt trigger at its switching threshold, where that branch
    ends in a fold) Newton's steps circle the fold, where the residual
    has a minimum that is not a zero, and continuation in p cannot pass
    the fold either.  Pseudo-transient continuation follows the flow
    dv/dtau = F(v) = p - v + K i(v), which keeps moving where F is not zero
    and so crosses the fold to the other branch: each step solves
    (I - K G + s I) dv = F, with the shift s = 1/dtau updated by switched
    evolution relaxation, s <- s |F|/|F_prev| (Mulder & van Leer 1985;
    convergence: Kelley & Keyes, SIAM J. Numer. Anal. 35 (1998) 508-523),
    so the steps grow into Newton's as the residual falls.  Below PTC_SEND
    the shift is dropped and the iteration is Newton's, which stops on
    :func:`newton_tol` as Newton's other loops do.  Junction-limited
    (pnjlim) like every step here.  Dense and unhurried (the Jacobian
    rebuilt from K and G, Gauss-Jordan at every step): it runs on a
    handful of samples per switching edge at most.  J: the (n + 1) x 2n
    scratch of gj_inverse; Ji is overwritten (the caller's kept factors
    are no longer valid); on success i, G are the devices' at v."""
    n = p.size
    tol = newton_tol(mem)
    rtol = mem[MEM_RTOL]
    s = PTC_S0
    fprev = 0.0
    for it in range(PTC_MAXIT):
        eval_ports_outlined(dcode, dpo, dnp, dpa, par, v, i, G, veval, ieval, mem)
        fn = residual(p, v, K, i, F, n)
        if not fn < math.inf:
            return -1
        if it > 0 and s > 0.0:
            s = s * fn / fprev if fprev > 0.0 else 0.0
            if s < PTC_SEND:
                s = 0.0
        fprev = fn
        for r in range(n):
            for c in range(n):
                a = 1.0 + s if r == c else 0.0
                for b in range(n):
                    a -= K[r, b] * G[b, c]
                J[r, c] = a
                J[r, n + c] = 1.0 if r == c else 0.0
        if not gj_inverse(J, Ji, n):
            return -1
        big, w = take_step(Ji, F, v, vn, n, dcode, dpo, dnp, dpa, par, dqs, tol, rtol, True)
        if s == 0.0 and w <= 1.0:
            eval_ports_outlined(dcode, dpo, dnp, dpa, par, v, i, G, veval, ieval, mem)
            return it + 1
    return -1


@kernel_jit(inline="always")
def newton2(p, v, K, dcode, dpo, dnp, dpa, par, dqs, i, G, Ji, vn, veval, ieval, mem, stol,
            stats):
    """Newton-Raphson on v = p + K i(v) for at most two ports (v[0], v[1];
    a one-port circuit has a zero second port), with a fresh Jacobian at
    every iteration inverted in closed form (cheaper at this size than
    deciding whether to keep it), pnjlim limiting and SPICE's bypass.
    Stops on a step below stol (:func:`newton_tol`, worked out once per
    block by the caller) + mem[MEM_RTOL]*|v|.  Ji keeps the last Jacobian's
    inverse (the next sample's predictor).  Returns the number of
    iterations, or -1 (no convergence or a singular Jacobian)."""
    rtol = mem[MEM_RTOL]
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
        if not abs(det) > PIVOT_TINY:
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
            stats[STAT_FACTOR] += it + 1
            return it + 1
    stats[STAT_FACTOR] += MAXIT
    return -1


@kernel_jit(inline="always")
def newton4(p, v, K, dcode, dpo, dnp, dpa, par, dqs, i, G, J, Ji, vn, veval, ieval, mem,
            stol, stats):
    """:func:`newton2` for three or four ports (padded to four): Newton-
    Raphson with a fresh Jacobian I - K G at every iteration, inverted by
    cofactors (:func:`inverse4`; Gauss-Jordan with pivoting in the scratch
    J when it is too near singular for them), the same limiting, bypass
    and stopping rule.  At this size a fresh inverse (about 50 cycles, and
    64 multiply-adds for K G) costs less than the chord loop's bookkeeping
    (drift scores, contraction rates, refactoring decisions) that would
    decide to keep an old one.  G is zero off its device blocks, so the
    dense product K G is the Jacobian's.  Returns the number of
    iterations, or -1."""
    rtol = mem[MEM_RTOL]
    for it in range(MAXIT):
        eval_ports(dcode, dpo, dnp, dpa, par, v, i, G, veval, ieval, mem)
        for r in range(4):
            f = p[r] - v[r]
            for c in range(4):
                f += K[r, c] * i[c]
                a = 1.0 if r == c else 0.0
                for b in range(4):
                    a -= K[r, b] * G[b, c]
                J[r, c] = a
            vn[r] = f       # the residual, for now
        ok = inverse4(J, Ji)
        if ok < 0:
            for r in range(4):
                for c in range(4):
                    J[r, 4 + c] = 1.0 if r == c else 0.0
            ok = 1 if gj_inverse(J, Ji, 4) else 0
        if ok == 0:
            return -1
        f0, f1, f2, f3 = vn[0], vn[1], vn[2], vn[3]
        for r in range(4):
            vn[r] = v[r] + Ji[r, 0] * f0 + Ji[r, 1] * f1 + Ji[r, 2] * f2 + Ji[r, 3] * f3
        limit_moved(dcode, dpo, dnp, dpa, par, dqs, vn, v)
        d0 = vn[0] - v[0]
        d1 = vn[1] - v[1]
        d2 = vn[2] - v[2]
        d3 = vn[3] - v[3]
        v[0] = vn[0]
        v[1] = vn[1]
        v[2] = vn[2]
        v[3] = vn[3]
        if (abs(d0) <= stol + rtol * abs(v[0]) and abs(d1) <= stol + rtol * abs(v[1])
                and abs(d2) <= stol + rtol * abs(v[2])
                and abs(d3) <= stol + rtol * abs(v[3])):
            for r in range(4):
                i[r] += G[r, 0] * d0 + G[r, 1] * d1 + G[r, 2] * d2 + G[r, 3] * d3
            stats[STAT_FACTOR] += it + 1
            return it + 1
    stats[STAT_FACTOR] += MAXIT
    return -1
