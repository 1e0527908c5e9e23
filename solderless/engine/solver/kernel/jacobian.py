"""The inverse port Jacobian Ji = (I - K G)^-1: factorisation, low-rank
update, and how far the Jacobian has drifted since."""
from __future__ import annotations

from solderless.engine.solver.kernel.linalg import absmax, gemv_inl, gj_inverse, inverse4
from solderless.engine.solver.kernel.params import DRIFT_UPDATE, UPDATE_CHAIN, kernel_jit
from solderless.engine.solver.kernel_layout import (
    STAT_FACTOR, STAT_UPDATE, STATE_CHAIN, STATE_JI_OK, STATE_PLIST, UPDATE_PORTS)

#: Smallest pivot of the low-rank update's small system; below it the
#: update is near-singular and the Jacobian is refactored instead.
SMALL_PIVOT = 1e-6


@kernel_jit(inline="always")
def factor_jacobian(K, G, Gf, J, Ji, dcode, dpo, dnp, state, stats):
    """Ji = (I - K G)^-1 (G block diagonal by device; J is the (n+1) x 2n
    scratch of :func:`gj_inverse`); G is remembered in Gf (for
    :func:`jacobian_drift`).  Sets state[STATE_JI_OK] (1: Ji is valid) and
    returns it as a bool."""
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
    stats[STAT_FACTOR] += 1
    if n == 4:
        # four padded ports: cofactors, unless J is too near singular
        ok = inverse4(J, Ji)
        if ok >= 0:
            state[STATE_JI_OK] = ok
            return ok == 1
    if gj_inverse(J, Ji, n):
        state[STATE_JI_OK] = 1
        return True
    state[STATE_JI_OK] = 0
    return False


@kernel_jit(inline="always")
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
            den += w * absmax(g, gf)
    return num, den


@kernel_jit(inline="always")
def device_moved(G, Gf, po, m, kc, lim):
    """Whether one device's score of :func:`jacobian_drift` exceeds lim
    (compared without dividing)."""
    num, den = drift_terms(G, Gf, po, m, kc)
    return num > lim * den


@kernel_jit()
def update_jacobian(K, G, Gf, J, Ji, dcode, dpo, dnp, kc, state, stats, partial):
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
    in one or two transistors (a detector's rectifier switching).  Every
    UPDATE_CHAIN updates, when more ports moved, or when the small system
    is near-singular, J is refactored instead (:func:`factor_jacobian`).

    ``partial``: the chord iterations' refresh at a sample's start
    (solve_ports), not Newton's steps, whose stopping rule needs the exact
    Jacobian.  It updates some of the moved devices and keeps the others'
    old blocks instead of refactoring; Ji is then the exact inverse of
    I - K Gf for the mixed Gf, and the drift and contraction checks measure
    against that.  Which devices: when one-port devices moved (junction
    diodes, op-amp output clamps: the parts that switch, whose one
    conductance changes by orders of magnitude where a transistor's blocks
    in its active region change by a fraction), only the one that moved
    most, a rank-one update (Sherman-Morrison: about 2 n^2 multiply-adds,
    one chord step's linear algebra); otherwise the devices that moved most
    (by their scores, largest first) up to the update's size.
    Measured on the demo phrase against taking every moved device up to
    the update's size (the two kernels' runs interleaved, best of each):
    feedforward (two transistors, the OTA and three detector diodes move
    with the signal) the same iterations per sample (1.86 against 1.83)
    in 7-20 % less CPU time, the flagship 5-15 % less, overdrive about
    5 %; circuits where only transistors move (the fuzz, MOSFET and
    discrete amplifier netlists) take the same path as before.  Refreshing the
    transistors too on feedforward cost more than it saved (their blocks,
    taken at a predicted point, made no fewer iterations); before partial
    refreshes existed this refresh was a full factorisation on 0.24 of
    feedforward's samples.

    K has K^T stacked below it (rows n ... 2n-1, statespace.derive), so a
    column of K is read as a contiguous row.  Workspace: rows n+1 ... of J
    (kernel_layout.J_EXTRA_ROWS of them): the k x (k + n) system
    [I_k - W[P, :] | Ji[P, :]], W transposed (k x n) and a column of
    K[:, P] D; the updated devices in state[STATE_PLIST:].
    """
    n = Ji.shape[0]
    # at four padded ports a cofactor inverse (factor_jacobian) costs less
    # than the low-rank update's bookkeeping
    if state[STATE_JI_OK] != 1 or state[STATE_CHAIN] >= UPDATE_CHAIN or n == 4:
        state[STATE_CHAIN] = 0
        return factor_jacobian(K, G, Gf, J, Ji, dcode, dpo, dnp, state, stats)
    # at most half the ports: beyond that Gauss-Jordan is as cheap
    kmax = UPDATE_PORTS if 2 * UPDATE_PORTS <= n else n // 2
    nd = 0
    k = 0
    if partial:
        # scores of the moved devices (-1: not moved) in the free second
        # half of the scratch's last row (devices <= ports); then the
        # largest that still fit, one at a time (one port in all when a
        # one-port device moved)
        sc = J[n + 1 + 2 * UPDATE_PORTS, n:]
        ones = False
        for d in range(dcode.size):
            num, den = drift_terms(G, Gf, dpo[d], dnp[d], kc)
            if num > DRIFT_UPDATE * den:
                sc[d] = num / den
                if dnp[d] == 1:
                    ones = True
            else:
                sc[d] = -1.0
        if ones:
            kmax = 1     # the one-port device that moved most, alone
        while True:
            best = -1
            top = 0.0
            for d in range(dcode.size):
                if sc[d] > top and k + dnp[d] <= kmax:
                    top = sc[d]
                    best = d
            if best < 0:
                break
            sc[best] = -1.0
            state[STATE_PLIST + nd] = best
            nd += 1
            k += dnp[best]
    else:
        for d in range(dcode.size):
            po = dpo[d]
            m = dnp[d]
            if device_moved(G, Gf, po, m, kc, DRIFT_UPDATE):
                if k + m > kmax:
                    state[STATE_CHAIN] = 0
                    return factor_jacobian(K, G, Gf, J, Ji, dcode, dpo, dnp, state, stats)
                state[STATE_PLIST + nd] = d
                nd += 1
                k += m
    if k == 0:
        return True      # every block within DRIFT_UPDATE of the factored one
    rs = n + 1                        # [I - W[P, :] | Ji[P, :]], k rows
    rw = n + 1 + UPDATE_PORTS         # W^T, k rows
    y = J[n + 1 + 2 * UPDATE_PORTS, :n]   # a column of K[:, P] D
    j = 0
    for e in range(nd):
        d = state[STATE_PLIST + e]
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
        d = state[STATE_PLIST + e]
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
        if not big > SMALL_PIVOT:
            # near-singular small system: refactor (factor_jacobian sets
            # Gf = G for every device)
            state[STATE_CHAIN] = 0
            return factor_jacobian(K, G, Gf, J, Ji, dcode, dpo, dnp, state, stats)
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
    # Ji += W T, T = S^-1 Ji[P, :] (rows rs.., columns k..k+n-1), four rows
    # per pass as gemv_inl (n is a multiple of statespace.PAD)
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
    stats[STAT_UPDATE] += 1
    state[STATE_CHAIN] += 1
    return True


@kernel_jit(inline="always")
def jacobian_drift(G, Gf, dpo, dnp, kc):
    """How far the Jacobian J = I - K G has moved since its factorisation,
    device by device, as a fraction of that device's part of J:

        sum |K[:,a]| |G - Gf|_ab  /  (1 + sum |K[:,a]| max(|G|, |Gf|)_ab)

    (kc[a] = max |K[:, a]|, the model's column scales; 0 ... 1).  A device
    whose currents barely load the network (a junction in cut-off) scores ~0
    however its conductances change relative to each other; one that
    switches between conduction and cut-off, or whose conductances change
    by a large fraction, scores near its relative change.  Returns the
    largest score."""
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
            den = 1.0 + (w0 * (absmax(g00, f00) + absmax(g01, f01))
                         + w1 * (absmax(g10, f10) + absmax(g11, f11)))
        elif m == 1:
            g00, f00, w0 = G[po, po], Gf[po, po], kc[po]
            num = w0 * abs(g00 - f00)
            den = 1.0 + w0 * absmax(g00, f00)
        else:
            num, den = drift_terms(G, Gf, po, m, kc)
        # den >= 1: compare without dividing, divide for a new maximum only
        if num > worst * den:
            worst = num / den
    return worst
