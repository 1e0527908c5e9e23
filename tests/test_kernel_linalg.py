"""The kernel's dense linear algebra against numpy's LAPACK-backed solver.

The per-sample kernel (engine/solver/kernel.py) inverts the port Jacobian
J = I - K G by Gauss-Jordan elimination with partial pivoting
(factor_jacobian).  Reference: numpy.linalg.inv (LAPACK getrf/getri); the
matrices are random with the kernel's structure: G block diagonal by
device, one- to three-port blocks.
"""
import numpy as np
import pytest

from engine.solver import kernel as K


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
    cnt = np.zeros(K.N_COUNTERS, dtype=np.int64)
    Gf = np.zeros((n, n))
    scratch = np.zeros((n + 1, 2 * n))
    Ji = np.zeros((n, n))
    assert K.factor_jacobian_outlined(Km, G, Gf, scratch, Ji, dcode, dpo, dnp, cnt)
    ref_inv = np.linalg.inv(J_true)
    assert np.allclose(Ji, ref_inv, rtol=1e-9, atol=1e-12 * np.abs(ref_inv).max())
    assert np.array_equal(Gf, G)


def test_singular_jacobian_is_refused():
    # K G = I makes J = 0: the factorisation must say so, not divide by 0
    n = 4
    dpo = np.array([0, 2], dtype=np.int64)
    dnp = np.array([2, 2], dtype=np.int64)
    dcode = np.ones(2, dtype=np.int64)
    Km = np.eye(n)
    G = np.eye(n)
    cnt = np.zeros(K.N_COUNTERS, dtype=np.int64)
    assert not K.factor_jacobian_outlined(Km, G, np.zeros((n, n)), np.zeros((n + 1, 2 * n)),
                                          np.zeros((n, n)), dcode, dpo, dnp, cnt)
