"""The kernel's dense linear algebra against numpy's LAPACK-backed solver.

The per-sample kernel (solderless/engine/solver/kernel/) inverts the port Jacobian
J = I - K G by Gauss-Jordan elimination with partial pivoting
(factor_jacobian; at four padded ports by cofactors, linalg.inverse4,
unless J is near-singular), or updates the last inverse by the Sherman-Morrison-
Woodbury formula when a few devices' blocks of G changed (update_jacobian;
in its partial form, for the chord refresh, only the devices that moved
most, the inverse then being exact for the blocks it kept).
Reference: numpy.linalg.inv (LAPACK getrf/getri); the matrices are random
with the kernel's structure: G block diagonal by device, one- to three-port
blocks.
"""
import numpy as np
import pytest

from solderless.engine.solver import kernel as K
from solderless.engine.solver import kernel_layout as L


def _system(n_ports, seed):
    rng = np.random.default_rng(seed)
    sizes = []
    while sum(sizes) < n_ports:
        sizes.append(int(rng.integers(1, 4)))
    sizes[-1] -= sum(sizes) - n_ports
    sizes = [s for s in sizes if s > 0]
    dpo = np.cumsum([0] + sizes[:-1]).astype(np.int64)
    dnp = np.array(sizes, dtype=np.int64)
    dcode = np.ones(len(sizes), dtype=np.int64)
    n = n_ports
    Km = rng.standard_normal((n, n)) * 0.5
    G = np.zeros((n, n))
    for po, m in zip(dpo, dnp):
        G[po:po + m, po:po + m] = rng.standard_normal((m, m)) * 10.0 ** rng.uniform(-3, 1)
    return Km, G, dcode, dpo, dnp


@pytest.mark.parametrize("n,seed", [(4, 0), (8, 1), (12, 2), (16, 3), (16, 4)])
def test_inverse_matches_lapack(n, seed):
    Km, G, dcode, dpo, dnp = _system(n, seed)
    J_true = np.eye(n) - Km @ G
    state, stats = np.zeros(L.N_STATE, dtype=np.int64), np.zeros(L.N_STATS, dtype=np.int64)
    Gf = np.zeros((n, n))
    scratch = np.zeros((n + 1, 2 * n))
    Ji = np.zeros((n, n))
    assert K.factor_jacobian(Km, G, Gf, scratch, Ji, dcode, dpo, dnp, state, stats)
    ref_inv = np.linalg.inv(J_true)
    assert np.allclose(Ji, ref_inv, rtol=1e-9, atol=1e-12 * np.abs(ref_inv).max())
    assert np.array_equal(Gf, G)


@pytest.mark.parametrize("seed", range(10, 20))
def test_four_port_cofactor_inverse_matches_lapack(seed):
    Km, G, dcode, dpo, dnp = _system(4, seed)
    J = np.zeros((5, 8))
    J[:4, :4] = np.eye(4) - Km @ G
    Ji = np.zeros((4, 4))
    assert K.inverse4(J, Ji) == 1
    ref_inv = np.linalg.inv(J[:4, :4])
    assert np.allclose(Ji, ref_inv, rtol=1e-9, atol=1e-12 * np.abs(ref_inv).max())


def test_a_near_singular_four_port_jacobian_is_pivoted():
    # J with two rows equal to 1e-12: cofactors decline it (determinant far
    # below the rows' scale) and Gauss-Jordan with pivoting inverts it
    n = 4
    rng = np.random.default_rng(3)
    Jt = rng.standard_normal((n, n))
    Jt[3] = Jt[2] + 1e-12 * rng.standard_normal(n)
    scratch = np.zeros((5, 8))
    scratch[:4, :4] = Jt
    assert K.inverse4(scratch, np.zeros((4, 4))) == -1
    # through factor_jacobian: K = I - Jt with G = I gives J = Jt
    dpo = np.arange(n, dtype=np.int64)
    dnp = np.ones(n, dtype=np.int64)
    state, stats = np.zeros(L.N_STATE, dtype=np.int64), np.zeros(L.N_STATS, dtype=np.int64)
    Ji = np.zeros((n, n))
    assert K.factor_jacobian(np.eye(n) - Jt, np.eye(n), np.zeros((n, n)),
                             np.zeros((n + 1, 2 * n)), Ji, np.ones(n, dtype=np.int64), dpo,
                             dnp, state, stats)
    # as good as LAPACK's inverse of the matrix the kernel formed (J = I - K G
    # in floating point; its condition number is about 1e12)
    Jf = np.eye(n) - (np.eye(n) - Jt)
    lapack = np.abs(np.linalg.inv(Jf) @ Jf - np.eye(n)).max()
    assert np.abs(Ji @ Jf - np.eye(n)).max() <= 10.0 * lapack + 1e-12


def test_singular_jacobian_is_refused():
    # K G = I makes J = 0: the factorisation must say so, not divide by 0
    n = 4
    dpo = np.array([0, 2], dtype=np.int64)
    dnp = np.array([2, 2], dtype=np.int64)
    dcode = np.ones(2, dtype=np.int64)
    Km = np.eye(n)
    G = np.eye(n)
    state, stats = np.zeros(L.N_STATE, dtype=np.int64), np.zeros(L.N_STATS, dtype=np.int64)
    assert not K.factor_jacobian(Km, G, np.zeros((n, n)), np.zeros((n + 1, 2 * n)),
                                 np.zeros((n, n)), dcode, dpo, dnp, state, stats)


def _factored(Km, G, dcode, dpo, dnp):
    """Kernel state after a factorisation at G: (K with K^T stacked below
    it, as statespace.derive lays it out; Gf; scratch; Ji; solver state; statistics; kc)."""
    n = G.shape[0]
    Ks = np.vstack([Km, Km.T])
    Gf = np.zeros((n, n))
    scratch = np.zeros((n + 1 + L.J_EXTRA_ROWS, 2 * n))
    Ji = np.zeros((n, n))
    state, stats = np.zeros(L.N_STATE, dtype=np.int64), np.zeros(L.N_STATS, dtype=np.int64)
    assert K.factor_jacobian(Ks, G, Gf, scratch, Ji, dcode, dpo, dnp, state, stats)
    state[L.STATE_JI_OK] = 1
    kc = np.abs(Km).max(axis=0)
    return Ks, Gf, scratch, Ji, state, stats, kc


def _move(G, dpo, dnp, devices, rng):
    G2 = G.copy()
    for d in devices:
        po, m = dpo[d], dnp[d]
        G2[po:po + m, po:po + m] *= 1.0 + rng.standard_normal((m, m))
    return G2


@pytest.mark.parametrize("n,seed", [(8, 5), (12, 6), (16, 7)])
def test_low_rank_update_matches_lapack(n, seed):
    # one device (<= 3 ports <= UPDATE_PORTS) changes: the inverse is updated,
    # not refactored, and equals LAPACK's inverse of the new Jacobian
    Km, G, dcode, dpo, dnp = _system(n, seed)
    Ks, Gf, scratch, Ji, state, stats, kc = _factored(Km, G, dcode, dpo, dnp)
    rng = np.random.default_rng(seed)
    d = int(np.argmax(dnp))
    G2 = _move(G, dpo, dnp, [d], rng)
    assert K.update_jacobian(Ks, G2, Gf, scratch, Ji, dcode, dpo, dnp, kc, state, stats,
                                   False)
    assert stats[L.STAT_UPDATE] == 1 and stats[L.STAT_FACTOR] == 1
    ref_inv = np.linalg.inv(np.eye(n) - Km @ G2)
    assert np.allclose(Ji, ref_inv, rtol=1e-9, atol=1e-10 * np.abs(ref_inv).max())
    assert np.array_equal(Gf, G2)


def test_many_moved_ports_refactor():
    # more ports than UPDATE_PORTS changed: a factorisation, still exact
    n = 16
    Km, G, dcode, dpo, dnp = _system(n, 8)
    Ks, Gf, scratch, Ji, state, stats, kc = _factored(Km, G, dcode, dpo, dnp)
    G2 = _move(G, dpo, dnp, range(len(dpo)), np.random.default_rng(8))
    assert K.update_jacobian(Ks, G2, Gf, scratch, Ji, dcode, dpo, dnp, kc, state, stats,
                                   False)
    assert stats[L.STAT_UPDATE] == 0 and stats[L.STAT_FACTOR] == 2
    ref_inv = np.linalg.inv(np.eye(n) - Km @ G2)
    assert np.allclose(Ji, ref_inv, rtol=1e-9, atol=1e-12 * np.abs(ref_inv).max())


def test_chained_updates_stay_exact():
    # many updates in a row (the kernel refactors every UPDATE_CHAIN of them)
    n = 16
    Km, G, dcode, dpo, dnp = _system(n, 9)
    Ks, Gf, scratch, Ji, state, stats, kc = _factored(Km, G, dcode, dpo, dnp)
    rng = np.random.default_rng(9)
    for step in range(3 * K.UPDATE_CHAIN):
        G = _move(G, dpo, dnp, [int(rng.integers(len(dpo)))], rng)
        assert K.update_jacobian(Ks, G, Gf, scratch, Ji, dcode, dpo, dnp, kc, state, stats,
                                   False)
        ref_inv = np.linalg.inv(np.eye(n) - Km @ G)
        assert np.allclose(Ji, ref_inv, rtol=1e-8, atol=1e-10 * np.abs(ref_inv).max()), step
    assert stats[L.STAT_UPDATE] > 2 * K.UPDATE_CHAIN
    assert stats[L.STAT_FACTOR] >= 3       # the first, then one every UPDATE_CHAIN


def _partial_case(seed, movers):
    """A factored 16-port system whose ``movers(dnp)`` devices then move by
    growing factors (the e-th of them by 0.01 * 2**e); returns what the
    partial update needs and the moved devices' scores as
    :func:`jacobian_drift`'s docstring defines them."""
    n = 16
    Km, G, dcode, dpo, dnp = _system(n, seed)
    Ks, Gf, scratch, Ji, state, stats, kc = _factored(Km, G, dcode, dpo, dnp)
    G0 = G.copy()
    rng = np.random.default_rng(seed)
    G2 = G.copy()
    moved = movers(dnp)
    for e, d in enumerate(moved):
        po, m = dpo[d], dnp[d]
        G2[po:po + m, po:po + m] *= 1.0 + 0.01 * 2.0 ** e * rng.choice([-1.0, 1.0], (m, m))

    def score(d):
        po, m = dpo[d], dnp[d]
        w = kc[po:po + m, None]
        g, f = G2[po:po + m, po:po + m], G0[po:po + m, po:po + m]
        return (w * np.abs(g - f)).sum() / (1.0 + (w * np.maximum(np.abs(g), np.abs(f))).sum())
    return (Km, G0, G2, dcode, dpo, dnp, Ks, Gf, scratch, Ji, state, stats, kc,
            {d: score(d) for d in moved})


def _check_partial(case, expect):
    """The partial update of ``case`` updates exactly the devices
    ``expect`` (one low-rank update, no factorisation) and its inverse is
    LAPACK's for that mixed G."""
    Km, G0, G2, dcode, dpo, dnp, Ks, Gf, scratch, Ji, state, stats, kc, _ = case
    n = G0.shape[0]
    assert K.update_jacobian(Ks, G2, Gf, scratch, Ji, dcode, dpo, dnp, kc, state, stats,
                             True)
    assert stats[L.STAT_UPDATE] == 1 and stats[L.STAT_FACTOR] == 1
    mixed = G0.copy()
    for e in expect:
        po, m = dpo[e], dnp[e]
        mixed[po:po + m, po:po + m] = G2[po:po + m, po:po + m]
    assert np.array_equal(Gf, mixed)
    ref_inv = np.linalg.inv(np.eye(n) - Km @ mixed)
    assert np.allclose(Ji, ref_inv, rtol=1e-9, atol=1e-10 * np.abs(ref_inv).max())


def test_partial_update_of_multi_port_devices_takes_the_most_moved():
    # only devices of two or more ports move, more ports than an update
    # takes: the partial form (the chord refresh's) updates the devices
    # that moved most, keeps the others' old blocks, and its inverse is
    # exactly LAPACK's for that mixed G
    case = _partial_case(11, lambda dnp: [d for d in range(dnp.size) if dnp[d] > 1])
    dnp, scores = case[5], case[-1]
    kmax = min(L.UPDATE_PORTS, 16 // 2)
    expect = []
    k = 0
    for e in sorted(scores, key=scores.get, reverse=True):
        if k + dnp[e] <= kmax:
            expect.append(e)
            k += dnp[e]
    assert sum(dnp[d] for d in scores) > kmax and len(expect) >= 2
    _check_partial(case, expect)


def test_partial_update_with_a_moved_one_port_device_takes_only_it():
    # every device moves: where a one-port device (a switching diode, an
    # op-amp clamp) moved, the refresh is the rank-one update of the one
    # that moved most, even where a multi-port device scores higher
    # (one-port devices first in the list, so the multi-port ones move most)
    case = _partial_case(11, lambda dnp: sorted(range(dnp.size), key=lambda d: dnp[d]))
    dnp, scores = case[5], case[-1]
    ones = [d for d in scores if dnp[d] == 1]
    assert len(ones) >= 2 and max(scores, key=scores.get) not in ones
    _check_partial(case, [max(ones, key=scores.get)])

