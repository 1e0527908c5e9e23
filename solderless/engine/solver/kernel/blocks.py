"""The block runners (the audio thread's entry points) and what they share
per sample: the port solve with its predictor and fallback, and the output,
probe and state update.  Their arguments: kernel_layout.RUN_BLOCK_ARGS."""
from __future__ import annotations

import math

from solderless.engine.solver.kernel.dispatch import (
    charge_history, eval_ports_outlined, limit_moved)
from solderless.engine.solver.kernel.jacobian import update_jacobian
from solderless.engine.solver.kernel.linalg import gemv_inl
from solderless.engine.solver.kernel.newton import (
    newton, newton2, newton4, newton_tol, pseudo_transient)
from solderless.engine.solver.kernel.params import MAXIT, kernel_jit
from solderless.engine.solver.kernel.sources import load_sources
from solderless.engine.solver.kernel_layout import (
    CHARGE_AFRESH, CHARGE_ON, MEM_CHARGE, MEM_REFACTOR, MEM_THETA, STAT_FACTOR,
    STAT_FALLBACK, STAT_ITERS, STAT_MAXIT, STAT_NONCONV, STAT_PSEUDO, STAT_REDUCED,
    STAT_SAMPLES, STAT_UPDATE, STATE_DONE, STATE_HANDOVER, STATE_HARD, STATE_INDEX,
    STATE_JI_OK, STATE_PHASE, STATE_QUIET, STATE_WATCH, WATCH_FULL, WATCH_HOLD, WATCH_NONE,
    WATCH_REDUCED, WS_IEVAL, WS_LPREV, WS_MEM, WS_P, WS_PTMP, WS_QN, WS_QR, WS_STEP, WS_V2,
    WS_VEVAL, WS_VNEW, WS_VPREV, WS_WATCH, WS_XT)


@kernel_jit(inline="always")
def solution_finite(v, i, n):
    """Whether the first n port voltages and currents are all finite."""
    for r in range(n):
        if not (math.isfinite(v[r]) and math.isfinite(i[r])):
            return False
    return True


@kernel_jit(inline="always")
def solve_ports(p, pprev, v, vprev, K, dcode, dpo, dnp, dpa, par, dqs, i, G, J, F, vn,
                ptmp, state, stats, v2, veval, ieval, Ji, Gf, mem, kc, lprev):
    """Newton with bounded fallback; never leaves non-finite values in v, i.

    Predictor: the previous solution plus a chord step with the previous
    Jacobian's factors, v + J^-1 (p - pprev) (exact for a linear network),
    plus the nonlinear part of the previous sample's step (its step less
    its own linear part lprev), which the signal's smoothness makes a good
    guess of this one's.  Not after a sample that needed a fresh Jacobian
    (state[STATE_HARD] > 0): its step was a junction switching (a rectifier
    transistor saturating at a note's attack moves its collector volts in
    one sample), and extrapolating that throws the next guess volts past the
    answer.  v2 keeps the solution two samples back.

    Fallback: continuation in p from the previous sample, in 4 then 16
    sub-steps; then pseudo-transient continuation from the previous
    solution (:func:`pseudo_transient`: a switching edge whose old branch
    ends in a fold); if that fails too the previous solution is kept and
    counted.
    """
    n = p.size
    if state[STATE_JI_OK] == 1:
        smooth = state[STATE_HARD] == 0
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
        if mem[MEM_REFACTOR] != 0.0:
            # the last sample's chord iterations contracted slowly: refresh
            # the inverse at this sample's predicted point (closer to its
            # solution than the last one's; the chord loop's first
            # evaluation is then a bypass), by an update of the devices
            # that moved most where more moved than an update takes
            eval_ports_outlined(dcode, dpo, dnp, dpa, par, v, i, G, veval, ieval, mem)
            update_jacobian(K, G, Gf, J, Ji, dcode, dpo, dnp, kc, state, stats, True)
            mem[MEM_THETA] = 0.0
    else:
        for r in range(n):
            vprev[r] = v[r]
            v2[r] = v[r]
            ptmp[r] = p[r]
    mem[MEM_REFACTOR] = 0.0
    f0 = stats[STAT_FACTOR] + stats[STAT_UPDATE]
    # One call site of the (inlined) Newton solver serves the direct solve
    # and the fallback: continuation in p from the previous sample, in 4
    # then 16 sub-steps (ptmp: the p of the current (sub-)step).
    nsub = 1
    s = 1
    while True:
        it = newton(ptmp, v, K, dcode, dpo, dnp, dpa, par, dqs, i, G, J, F, vn, MAXIT, state,
                    stats, veval, ieval, Ji, Gf, mem, kc)
        good = it >= 0 if nsub > 1 else it > 0
        if good and nsub > 1:
            stats[STAT_ITERS] += it
            if s < nsub:
                s += 1
                f = s / nsub
                for r in range(n):
                    ptmp[r] = pprev[r] + (p[r] - pprev[r]) * f
                continue
        if good:
            good = solution_finite(v, i, n)
        if good:
            state[STATE_HARD] = stats[STAT_FACTOR] + stats[STAT_UPDATE] - f0
            if nsub == 1:
                if it > stats[STAT_MAXIT]:
                    stats[STAT_MAXIT] = it
                stats[STAT_ITERS] += it
            return True
        if nsub == 16:
            break
        if nsub == 1:
            stats[STAT_FALLBACK] += 1
        nsub = 4 if nsub == 1 else 16
        s = 1
        f = s / nsub
        for r in range(n):
            v[r] = vprev[r]
            ptmp[r] = pprev[r] + (p[r] - pprev[r]) * f
    # last resort, from the previous solution; its inverses are not the
    # kept factors' (Gf), so the next sample refactors
    for r in range(n):
        v[r] = vprev[r]
    it = pseudo_transient(p, v, K, dcode, dpo, dnp, dpa, par, dqs, i, G, J, Ji, F, vn, veval,
                          ieval, mem)
    state[STATE_JI_OK] = 0
    state[STATE_HARD] = stats[STAT_FACTOR] + stats[STAT_UPDATE] - f0
    if it > 0 and solution_finite(v, i, n):
        stats[STAT_PSEUDO] += 1
        stats[STAT_ITERS] += it
        return True
    stats[STAT_NONCONV] += 1
    for r in range(n):
        v[r] = vprev[r]
    eval_ports_outlined(dcode, dpo, dnp, dpa, par, v, i, G, veval, ieval, mem)
    return False


@kernel_jit(inline="always")
def add_history(i, qn, n, sign):
    """i[:n] += sign*qn[:n]: the devices' port currents to the circuit's
    (with the charge currents' history, for the output and the state
    update) and back."""
    for r in range(n):
        i[r] += sign * qn[r]


@kernel_jit(inline="always")
def finish_sample(k, yout, pbuf, frames, pcap, pdec, Az, x0, C, Yz, y0, Fy, Vy,
                  z, xp, v, i, xt, yrow, state, stats):
    """After the port solve of sample k: the output into yout[k] (never
    non-finite), a probe frame into pbuf every pdec samples, and the state
    update x' = x0 + Az z + C i (kept only if finite).  Returns the frame
    count."""
    nz = z.size
    nx = xp.size
    npt = v.size
    ny = yrow.size
    nprobe = pbuf.shape[0]
    take = nprobe > 0 and state[STATE_PHASE] == 0 and frames < pcap
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
        stats[STAT_NONCONV] += 1
    yout[k] = y0v
    if nprobe > 0:
        if take:
            for r in range(nprobe):
                pbuf[r, frames] = yrow[r + 1]
            frames += 1
        state[STATE_PHASE] += 1
        if state[STATE_PHASE] >= pdec:
            state[STATE_PHASE] = 0
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
    state[STATE_INDEX] += 1
    stats[STAT_SAMPLES] += 1
    return frames


@kernel_jit(inline="always")
def watched_dead(Wz, w0, Wk, wlim, z, i, wout):
    """Whether every watched port's voltage w = w0 + Wz z + Wk i (into
    wout) lies strictly inside its dead zone wlim[r, 0] < w[r] < wlim[r, 1],
    where its device draws exactly no current (solver/dormant.py; a
    non-finite w is not dead).  The rows are padded to a multiple of four
    (padding rows: zero, with an infinite zone), so the products run as
    gemv_inl's four-row passes."""
    m = w0.size
    for r in range(m):
        wout[r] = w0[r]
    gemv_inl(Wz, z, wout, m, z.size)
    gemv_inl(Wk, i, wout, m, Wk.shape[1])
    dead = True
    for r in range(m):
        w = wout[r]
        if not (wlim[r, 0] < w and w < wlim[r, 1]):
            dead = False
    return dead


@kernel_jit()
def watch_stop(k, Wz, w0, Wk, wlim, z, i, wout, state, stats):
    """The lanes' watch after sample k's port solve (solver/dormant.py;
    the runners call it only with state[STATE_WATCH] set).  On the reduced
    lane, a watched port outside its dead zone stops the runner before
    sample k is committed (returns True, state[STATE_DONE] = k): the full
    lane takes over at sample k.  On the full lane, count the samples in a
    row with every watched port dead (state[STATE_QUIET]; :func:`watch_after`
    stops once there are WATCH_HOLD of them).

    A real call: inlined into the runners (with the mode read once before
    the loop), it made the ahead-of-time module's per-sample loop 5-11 %
    slower on circuits that never watch (the flagship, overdrive and
    feedforward, the same arrays through both builds in one process)."""
    dead = watched_dead(Wz, w0, Wk, wlim, z, i, wout)
    if state[STATE_WATCH] == WATCH_REDUCED:
        if not dead:
            state[STATE_DONE] = k
            state[STATE_HANDOVER] = 1
            return True
        stats[STAT_REDUCED] += 1
    elif dead:
        state[STATE_QUIET] += 1
    else:
        state[STATE_QUIET] = 0
    return False


@kernel_jit(inline="always")
def watch_after(k, state):
    """After sample k is committed on the full lane: stop (True,
    state[STATE_DONE] = k + 1) once WATCH_HOLD samples in a row had every
    watched port dead, so the reduced lane takes over."""
    if state[STATE_WATCH] == WATCH_FULL and state[STATE_QUIET] >= WATCH_HOLD:
        state[STATE_DONE] = k + 1
        state[STATE_HANDOVER] = 1
        return True
    return False


@kernel_jit()
def run_block(xin, nin, yout, pbuf, pstart, pcap, pdec,
              Pz, p0, Az, x0, C, K, Yz, y0, Fy, Vy, kc, Wz, w0, Wk, wlim,
              dcode, dpo, dnp, dpa, par, dqs,
              uvar, skind, sptr, spar, inp, dt,
              z, xp, v, i, pprev, ws, G, Gf, J, Ji, yrow, state, stats):
    """Run ``nin`` samples of input ``xin`` through the model.

    z = [x; varying source values; zeros]: the first nx (= xp.size) entries
    are the states, then the sources listed in ``uvar`` (the input ``inp``,
    which takes the samples xin, and waveform sources), then zero padding to
    a multiple of statespace.PAD; the ports are padded likewise (a padded
    port has zero rows and columns, so it stays at 0 V and 0 A).  Constant
    sources are folded into the offsets p0, x0, y0
    (:func:`solderless.engine.solver.statespace.derive`), so per sample
        p = p0 + Pz z,  y = y0 + Yz z + Fy i + Vy v,  x' = x0 + Az z + C i.
    yout[k] receives output row 0; every ``pdec`` samples a probe frame (rows
    1.. of y, computed only then) is written into pbuf (if it has rows) at
    columns pstart, pstart+1 ... below ``pcap``.  kc[c] = max |K[:, c]|
    (the model's column scales of K, for :func:`jacobian_drift`).  ws, state
    and stats: see :mod:`solderless.engine.solver.kernel_layout`.  Returns
    the number of probe frames written.

    Wz, w0, Wk, wlim: the watched dormant-capable ports (solver/dormant.py;
    no rows when the circuit has none).  With state[STATE_WATCH] set, the
    runner may stop early to hand over to the other lane (:func:`watch_stop`,
    :func:`watch_after`): state[STATE_DONE] is then the number of samples
    committed and state[STATE_HANDOVER] is 1; the caller runs the rest on
    the other lane.
    """
    nz = z.size      # states, varying sources, zero padding
    nx = xp.size
    npt = v.size     # ports, zero padding
    p = ws[WS_P, :npt]
    vprev = ws[WS_VPREV, :npt]
    F = ws[WS_STEP, :npt]
    vn = ws[WS_VNEW, :npt]
    ptmp = ws[WS_PTMP, :npt]
    nxp = x0.size    # states, zero padding (rows of the state update)
    xt = ws[WS_XT, :nxp]
    v2 = ws[WS_V2, :npt]
    veval = ws[WS_VEVAL, :npt]
    ieval = ws[WS_IEVAL, :npt]
    qn = ws[WS_QN, :npt]
    qr = ws[WS_QR, :npt]
    charged = ws[WS_MEM, MEM_CHARGE] != 0.0
    if ws[WS_MEM, MEM_CHARGE] == CHARGE_AFRESH:
        charge_history(dcode, dpo, dpa, par, v, qn, qr, True)
        ws[WS_MEM, MEM_CHARGE] = CHARGE_ON
    frames = pstart
    state[STATE_HANDOVER] = 0
    for k in range(nin):
        load_sources(z, nx, uvar, inp, xin[k], skind, sptr, spar, state[STATE_INDEX] * dt)
        if npt > 0:
            for r in range(npt):
                p[r] = p0[r]
            gemv_inl(Pz, z, p, npt, nz)
            if charged:
                # BDF2's charge current (3 q(v) - 4 q[n-1] + q[n-2])/(2T):
                # the devices' laws carry 3 q(v)/(2T), the history enters
                # as a known current qn, v = (p + K qn) + K i(v)
                gemv_inl(K, qn, p, npt, npt)
            solve_ports(p, pprev, v, vprev, K, dcode, dpo, dnp, dpa, par, dqs, i, G, J, F, vn,
                        ptmp, state, stats, v2, veval, ieval, Ji, Gf, ws[WS_MEM], kc,
                        ws[WS_LPREV, :npt])
            if charged:
                add_history(i, qn, npt, 1.0)
        if (state[STATE_WATCH] != WATCH_NONE
                and watch_stop(k, Wz, w0, Wk, wlim, z, i, ws[WS_WATCH], state, stats)):
            return frames - pstart
        for r in range(npt):
            pprev[r] = p[r]
        frames = finish_sample(k, yout, pbuf, frames, pcap, pdec, Az, x0, C, Yz, y0, Fy, Vy,
                               z, xp, v, i, xt, yrow, state, stats)
        if charged and npt > 0:
            add_history(i, qn, npt, -1.0)
            charge_history(dcode, dpo, dpa, par, v, qn, qr, False)
        if watch_after(k, state):
            return frames - pstart
    state[STATE_DONE] = nin
    return frames - pstart


@kernel_jit(inline="always")
def small_loop(m, io, model, watch, dev, src, work):
    """The sample loop of :func:`run_block_small` for m = 2 or 4 ports
    (a constant at each of its two call sites); its arguments grouped."""
    xin, nin, yout, pbuf, pstart, pcap, pdec = io
    Pz, p0, Az, x0, C, K, Yz, y0, Fy, Vy = model
    Wz, w0, Wk, wlim = watch
    dcode, dpo, dnp, dpa, par, dqs = dev
    uvar, skind, sptr, spar, inp, dt = src
    z, xp, v, i, pprev, ws, G, J, Ji, yrow, state, stats = work
    nz = z.size
    nx = xp.size
    p = ws[WS_P, :m]
    vprev = ws[WS_VPREV, :m]
    vn = ws[WS_VNEW, :m]
    ptmp = ws[WS_PTMP, :m]
    xt = ws[WS_XT, :x0.size]
    v2 = ws[WS_V2, :m]
    lprev = ws[WS_LPREV, :m]
    veval = ws[WS_VEVAL, :]
    ieval = ws[WS_IEVAL, :]
    mem = ws[WS_MEM]
    stol = newton_tol(mem)   # the tolerance is fixed for the block: one sqrt
    qn = ws[WS_QN, :m]
    qr = ws[WS_QR, :m]
    charged = mem[MEM_CHARGE] != 0.0
    if mem[MEM_CHARGE] == CHARGE_AFRESH:   # as run_block
        charge_history(dcode, dpo, dpa, par, v, qn, qr, True)
        mem[MEM_CHARGE] = CHARGE_ON
    frames = pstart
    state[STATE_HANDOVER] = 0
    for k in range(nin):
        load_sources(z, nx, uvar, inp, xin[k], skind, sptr, spar, state[STATE_INDEX] * dt)
        for r in range(m):
            acc = p0[r]
            for c in range(nz):
                acc += Pz[r, c] * z[c]
            if charged:   # the charge currents' history (as run_block)
                for c in range(m):
                    acc += K[r, c] * qn[c]
            p[r] = acc
            vprev[r] = v[r]
        if state[STATE_JI_OK] == 1:
            for r in range(m):
                lin = 0.0
                for c in range(m):
                    lin += Ji[r, c] * (p[c] - pprev[c])
                vn[r] = v[r] + lin + (v[r] - v2[r] - lprev[r])
                lprev[r] = lin
            limit_moved(dcode, dpo, dnp, dpa, par, dqs, vn, v)
            for r in range(m):
                v[r] = vn[r]
        for r in range(m):
            v2[r] = vprev[r]
            ptmp[r] = p[r]
        nsub = 1
        s = 1
        while True:
            if m == 2:
                it = newton2(ptmp, v, K, dcode, dpo, dnp, dpa, par, dqs, i, G, Ji, vn, veval,
                             ieval, mem, stol, stats)
            else:
                it = newton4(ptmp, v, K, dcode, dpo, dnp, dpa, par, dqs, i, G, J, Ji, vn,
                             veval, ieval, mem, stol, stats)
            good = it > 0
            if good and nsub > 1 and s < nsub:
                stats[STAT_ITERS] += it
                s += 1
                f = s / nsub
                for r in range(m):
                    ptmp[r] = pprev[r] + (p[r] - pprev[r]) * f
                continue
            if good:
                good = solution_finite(v, i, m)
            if good:
                state[STATE_JI_OK] = 1
                if nsub == 1 and it > stats[STAT_MAXIT]:
                    stats[STAT_MAXIT] = it
                stats[STAT_ITERS] += it
                break
            if nsub == 16:
                # last resort (as solve_ports): pseudo-transient continuation
                for r in range(m):
                    v[r] = vprev[r]
                it = pseudo_transient(p, v, K, dcode, dpo, dnp, dpa, par, dqs, i, G, J, Ji,
                                      ws[WS_STEP, :m], vn, veval, ieval, mem)
                if it > 0 and solution_finite(v, i, m):
                    # its last step was Newton's: Ji inverts a Jacobian
                    state[STATE_JI_OK] = 1
                    stats[STAT_PSEUDO] += 1
                    stats[STAT_ITERS] += it
                    break
                stats[STAT_NONCONV] += 1
                for r in range(m):
                    v[r] = vprev[r]
                eval_ports_outlined(dcode, dpo, dnp, dpa, par, v, i, G, veval, ieval, mem)
                break
            if nsub == 1:
                stats[STAT_FALLBACK] += 1
            nsub = 4 if nsub == 1 else 16
            s = 1
            for r in range(m):
                v[r] = vprev[r]
                ptmp[r] = pprev[r] + (p[r] - pprev[r]) / nsub
        if charged:
            add_history(i, qn, m, 1.0)
        if (state[STATE_WATCH] != WATCH_NONE
                and watch_stop(k, Wz, w0, Wk, wlim, z, i, ws[WS_WATCH], state, stats)):
            return frames - pstart
        for r in range(m):
            pprev[r] = p[r]
        frames = finish_sample(k, yout, pbuf, frames, pcap, pdec, Az, x0, C, Yz, y0, Fy, Vy,
                               z, xp, v, i, xt, yrow, state, stats)
        if charged:
            add_history(i, qn, m, -1.0)
            charge_history(dcode, dpo, dpa, par, v, qn, qr, False)
        if watch_after(k, state):
            return frames - pstart
    state[STATE_DONE] = nin
    return frames - pstart


@kernel_jit()
def run_block_small(xin, nin, yout, pbuf, pstart, pcap, pdec,
                    Pz, p0, Az, x0, C, K, Yz, y0, Fy, Vy, kc, Wz, w0, Wk, wlim,
                    dcode, dpo, dnp, dpa, par, dqs,
                    uvar, skind, sptr, spar, inp, dt,
                    z, xp, v, i, pprev, ws, G, Gf, J, Ji, yrow, state, stats):
    """:func:`run_block` for circuits with at most four nonlinear ports
    (kernel_layout.SMALL_PORTS; same arguments, workspace layout, state and
    statistics; Simulator picks one of the two at construction).

    At this size the generic path's bookkeeping (padded loops, chord
    rates, drift checks, real calls) costs more than the arithmetic, so
    each sample here runs the same predictor as :func:`solve_ports` and
    then plain Newton-Raphson with a fresh Jacobian at every iteration,
    inverted in closed form: 2 x 2 for one or two ports (:func:`newton2`),
    cofactors for three or four (:func:`newton4`), with the same bounded
    fallback: continuation in p in 4, then 16 sub-steps, then pseudo-
    transient continuation, else the previous solution is kept and
    counted.  Output and state update are those of run_block."""
    # ports in use (the device blocks'): the sample loop is compiled twice,
    # for two ports and for four, each with its sizes as constants
    m = 0
    for d in range(dnp.size):
        m += dnp[d]
    # (grouped in tuples: a call with over 30 arguments compiles as f(*args),
    # which numba cannot inline)
    io = (xin, nin, yout, pbuf, pstart, pcap, pdec)
    model = (Pz, p0, Az, x0, C, K, Yz, y0, Fy, Vy)
    watch = (Wz, w0, Wk, wlim)
    dev = (dcode, dpo, dnp, dpa, par, dqs)
    src = (uvar, skind, sptr, spar, inp, dt)
    work = (z, xp, v, i, pprev, ws, G, J, Ji, yrow, state, stats)
    if m <= 2:
        return small_loop(2, io, model, watch, dev, src, work)
    return small_loop(4, io, model, watch, dev, src, work)


@kernel_jit()
def convert_states(x, xp, g_old, g_new, a, b):
    """Carry reactive states over a value change (capacitor voltage and
    current, inductor current and voltage stay as they were)."""
    for k in range(x.size):
        go = g_old[k]
        r = (x[k] + b[k] * xp[k]) / (a[k] * go) if go != 0.0 else 0.0
        x[k] = x[k] + (g_new[k] - go) * r
        xp[k] = (a[k] * g_new[k] * r - x[k]) / b[k] if b[k] != 0.0 else x[k]
