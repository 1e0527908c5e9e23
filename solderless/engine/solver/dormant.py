"""Dormant ports: a smaller port solve while some devices draw nothing.

Some devices draw exactly no current, with exactly zero conductance, while
their port voltages stay inside a window (``DeviceLayout.dead``): an
op-amp's output clamps between their cut-offs, i.e. whenever the op-amp is
not near a rail.  While every such device is inside its window, its ports
contribute nothing to the port solve v = p + K i(v) but their size: every
matrix of the per-sample solve is (ports x ports), padded to a multiple of
four.  An op-amp design at a guitar's levels therefore solves a smaller
system with the op-amps' clamp ports taken out: the *reduced lane*.  The
full model stays the *full lane*; the simulator switches between them
inside a block, at a sample boundary.

The reduced model is the full one with the dormant ports' device currents
set to zero, which is exact, not an approximation.  The kernel's port
currents are i = I_dev - PORT_G0*v (kernel_layout.PORT_G0), so a dormant
port D carries i_D = -PORT_G0*v_D.  With A the remaining ports, from
v_D = p_D + K_DA i_A + K_DD i_D:

    v_D = W (p_D + K_DA i_A),   W = (I + PORT_G0 K_DD)^-1,
    i_D = -PORT_G0 W (p_D + K_DA i_A),

and substituting i_D into the rows of A, the state update and the output
gives the reduced model's matrices (a Schur complement; :func:`reduce`).
v_D itself is a linear function of the reduced solution, so after each
sample's solve the kernel checks it against the window (the *watch*,
kernel.blocks.watch_stop).  A reduced solution whose v_D is inside every
window solves the full model's equations too; if one is outside, that
sample is not committed and the full lane solves it again.  The full lane
hands back after kernel_layout.WATCH_HOLD samples in a row with every
dormant-capable port inside its window.  On either handover the lane taking
over starts from the other's solution with a fresh Jacobian.

The lanes are used only where they pay: when the reduced solve is of a
smaller size class for the kernel (:func:`solve_size`: fewer padded ports,
or a smaller loop of the lean runner; :func:`plan`).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from solderless.engine.solver import kernel_layout as KL
from solderless.engine.solver.statespace import PAD, Model, _c, _pad, _stack_transpose, padded


@dataclass
class Plan:
    """Which ports are dormant-capable, and the arrays that do not depend on
    element values: ``dormant`` and ``active`` full-model port indices,
    ``keep`` the devices of the reduced lane (indices into net.devices)."""
    dormant: np.ndarray
    active: np.ndarray
    keep: np.ndarray
    npt: int        # full model's ports (unpadded)


@dataclass
class Lane:
    """The kernel's model arrays of one lane (statespace.Model's kernel
    form) with its watch rows w = w0 + Wz z + Wk i of the dormant-capable
    ports."""
    Pz: np.ndarray
    p0: np.ndarray
    Az: np.ndarray
    x0: np.ndarray
    Ck: np.ndarray
    Kk: np.ndarray
    Yz: np.ndarray
    y0: np.ndarray
    Fyk: np.ndarray
    Vyk: np.ndarray
    kc: np.ndarray
    Wz: np.ndarray
    w0: np.ndarray
    Wk: np.ndarray
    #: reduced lane: p_A' = p_A - Rp p_D, its linear port part from the
    #: full model's (a handover carries the previous sample's p over)
    Rp: np.ndarray | None = None


def dead_zones(net) -> list[tuple[int, float, float]]:
    """[(port, lo, hi)] for every port of every device that declares dead
    zones on all its ports (DeviceLayout.dead)."""
    out = []
    for el, mod, lay, po in net.devices:
        dead = getattr(lay, "dead", None)
        if dead and len(dead) == len(lay.ports):
            out += [(po + k, lo, hi) for k, (lo, hi) in enumerate(dead)]
    return out


def solve_size(n: int) -> int:
    """The size class of the kernel's port solve for n ports, in order of
    cost: none, the lean runner's two-port loop, its four-port loop
    (kernel_layout.SMALL_PORTS), then the generic runner by padded size."""
    if n == 0:
        return 0
    if n <= 2:
        return 1
    if n <= KL.SMALL_PORTS:
        return 2
    return 2 + padded(n) // PAD


def plan(net) -> Plan | None:
    """The dormant-port plan of a network, or None where a reduced lane
    would not pay: no dormant-capable device, or the reduced solve is of
    the same size class for the kernel (:func:`solve_size`)."""
    zones = dead_zones(net)
    n = net.np_
    if not zones:
        return None
    dormant = np.array(sorted(p for p, _, _ in zones), dtype=np.int64)
    active = np.array([p for p in range(n) if p not in set(dormant.tolist())],
                      dtype=np.int64)
    na = active.size
    if not solve_size(na) < solve_size(n):
        return None
    dset = set(dormant.tolist())
    keep = np.array([d for d, (el, mod, lay, po) in enumerate(net.devices)
                     if po not in dset or not lay.ports], dtype=np.int64)
    return Plan(dormant, active, keep, n)


def limits(net, pl: Plan) -> np.ndarray:
    """(dormant ports x 2) array of the dead zones' open bounds, in the
    order of pl.dormant, its rows padded to a multiple of PAD with infinite
    zones (the kernel's watch rows are padded likewise), and the bounds
    follow the device parameters (a supply edit moves an op-amp's)."""
    z = {p: (lo, hi) for p, lo, hi in dead_zones(net)}
    out = np.empty((padded(pl.dormant.size), 2))
    out[:, 0], out[:, 1] = -np.inf, np.inf
    for r, p in enumerate(pl.dormant.tolist()):
        out[r] = z.get(p, (0.0, 0.0))   # a zone that vanished: never dead
    return out


def reduce_devices(arr, pl: Plan):
    """The reduced lane's device arrays (mna.device_arrays' form) from the
    full ones: the kept devices, their ports renumbered in order."""
    dcode, dpo, dnp, dpa, par, dqs = arr
    keep = pl.keep
    ndpo = np.zeros(keep.size, dtype=np.int64)
    if keep.size:
        ndpo[1:] = np.cumsum(dnp[keep])[:-1]
    sizes = dpa[keep + 1] - dpa[keep]
    ndpa = np.zeros(keep.size + 1, dtype=np.int64)
    ndpa[1:] = np.cumsum(sizes)
    npar = (np.concatenate([par[dpa[d]:dpa[d + 1]] for d in keep.tolist()])
            if keep.size else np.zeros(0))
    return (np.ascontiguousarray(dcode[keep]), ndpo, np.ascontiguousarray(dnp[keep]), ndpa,
            np.ascontiguousarray(npar, dtype=np.float64), np.ascontiguousarray(dqs[keep]))


def full_lane(m: Model, pl: Plan) -> Lane:
    """The full model as a lane: its own arrays, watching v_D = p_D + K_D i
    (the full model's port rows of the dormant-capable ports)."""
    D = pl.dormant
    npp = m.Kk.shape[1]
    nw = padded(D.size)
    return Lane(m.Pz, m.p0, m.Az, m.x0, m.Ck, m.Kk, m.Yz, m.y0, m.Fyk, m.Vyk, m.kc,
                Wz=_pad(m.Pz[D], nw, None), w0=_pad(m.p0[D], nw), Wk=_pad(m.K[D], nw, npp))


def reduce(m: Model, pl: Plan) -> Lane:
    """The reduced lane: the model with the dormant-capable ports' device
    currents zero (the module docstring's algebra), and its watch rows
    v_D = W (p_D + K_DA i_A)."""
    D, A, n = pl.dormant, pl.active, pl.npt
    g0 = KL.PORT_G0
    K = m.K
    KAA, KAD, KDA, KDD = K[np.ix_(A, A)], K[np.ix_(A, D)], K[np.ix_(D, A)], K[np.ix_(D, D)]
    W = np.linalg.inv(np.eye(D.size) + g0 * KDD)
    T = g0 * W                                    # i_D = -T (p_D + K_DA i_A)
    Pz, p0 = m.Pz[:n], m.p0[:n]
    PD, pD = Pz[D], p0[D]
    C = m.Ck[:, :n]
    Fy, Vy = m.Fyk[:, :n], m.Vyk[:, :n]
    Q = (Vy[:, D] - g0 * Fy[:, D]) @ W            # output: Fy_D i_D + Vy_D v_D
    Kr = KAA - KAD @ T @ KDA
    na = A.size
    npp = padded(na)
    nzp = m.Pz.shape[1]
    nw = padded(D.size)        # watch rows padded for the kernel's products
    return Lane(
        Pz=_pad(Pz[A] - KAD @ T @ PD, npp, nzp), p0=_pad(p0[A] - KAD @ T @ pD, npp),
        Az=_c(m.Az - C[:, D] @ T @ PD), x0=_c(m.x0 - C[:, D] @ T @ pD),
        Ck=_pad(C[:, A] - C[:, D] @ T @ KDA, m.Ck.shape[0], npp),
        Kk=_stack_transpose(_pad(Kr, npp, npp)),
        Yz=_c(m.Yz + Q @ PD), y0=_c(m.y0 + Q @ pD),
        Fyk=_pad(Fy[:, A] + Q @ KDA, None, npp), Vyk=_pad(Vy[:, A], None, npp),
        kc=_pad(np.abs(Kr).max(axis=0) if Kr.size else np.zeros(0), npp),
        Wz=_pad(W @ PD, nw, None), w0=_pad(W @ pD, nw), Wk=_pad(W @ KDA, nw, npp),
        Rp=_c(KAD @ T))
