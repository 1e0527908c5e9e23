"""Discrete nonlinear state-space model from the MNA system (nodal DK-method).

With M = S^-1 [Bx Bu Bn] (S from :mod:`solderless.engine.solver.mna`), every linear
quantity c^T w is a row c^T M over (x, u, i).  The model is

    v  = Dv x + Ev u + K i          nonlinear port voltages
                                    (i: device currents less PORT_G0*v)
    x' = A x + B u + C i            state update (trapezoidal / BE companions)
    y  = Dy x + Ey u + Fy i + Vy v  output row 0, then probe rows

(D. T. Yeh, J. S. Abel, J. O. Smith, "Automated physical modeling of
nonlinear audio circuits for real-time audio effects -- Part I", IEEE TASLP
18(4), 2010; M. Holters, U. Zoelzer, "A generalized method for the derivation
of non-linear state-space models from circuit schematics", EUSIPCO 2015.)
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from solderless.engine.errors import SolveError
from solderless.engine.solver.kernel_layout import WAVE_DC
from solderless.engine.solver.mna import Network, source_wave


@dataclass
class ProbeRow:
    """A linear probe: y = cw.w + cx.x + cu.u + ci.i + cv.v (values may
    depend on element values, so rows are rebuilt by a callable)."""
    name: str
    unit: str
    build: object  # callable(values, g) -> (cw, cx, cu, ci, cv)


@dataclass
class Model:
    """All arrays the kernel needs for one set of element values."""
    A: np.ndarray
    B: np.ndarray
    C: np.ndarray
    Dv: np.ndarray
    Ev: np.ndarray
    K: np.ndarray
    Dy: np.ndarray
    Ey: np.ndarray
    Fy: np.ndarray
    Vy: np.ndarray
    g: np.ndarray
    a: np.ndarray
    b: np.ndarray
    udc: np.ndarray
    values: dict
    # kernel form: z = [x; u[uvar]; 0...] with the constant sources folded
    # in; z, the ports and the state update's rows are zero-padded to
    # multiples of PAD
    Pz: np.ndarray = None   # [Dv Ev[:, uvar]]          (ports x z, padded)
    p0: np.ndarray = None   # Ev ud  (ud: udc with the waveform sources zeroed)
    Az: np.ndarray = None   # [A B[:, uvar]]            (states x z, padded)
    x0: np.ndarray = None   # B ud
    Yz: np.ndarray = None   # [Dy Ey[:, uvar]]          (probes x z, padded)
    y0: np.ndarray = None   # Ey ud
    uvar: np.ndarray = None  # varying sources: the input, then waveform sources
    Kk: np.ndarray = None   # K, C, Fy, Vy with the port dimension padded
    #                         (Kk: 2 npp x npp, K^T stacked below K so the
    #                         kernel reads K's columns as rows)
    Ck: np.ndarray = None
    Fyk: np.ndarray = None
    Vyk: np.ndarray = None
    kc: np.ndarray = None   # column scales max |K[:, c]| (padded)
    lanes: tuple = None     # (full, reduced) dormant.Lane, where ports can go dormant


#: The kernel's port and z dimensions are zero-padded to multiples of this,
#: so its matrix-vector loops run whole SIMD vectors (kernel.gemv_add).
PAD = 4


def padded(n: int) -> int:
    """n rounded up to a multiple of PAD."""
    return -(-n // PAD) * PAD


def _c(a):
    return np.ascontiguousarray(a, dtype=np.float64)


def _pad(a, rows: int | None = None, cols: int | None = None):
    """a zero-padded to (rows, cols) (None: unchanged), C-contiguous."""
    a = np.asarray(a, dtype=np.float64)
    if a.ndim == 1:
        out = np.zeros(rows)
        out[:a.shape[0]] = a
        return out
    out = np.zeros((a.shape[0] if rows is None else rows, a.shape[1] if cols is None else cols))
    out[:a.shape[0], :a.shape[1]] = a
    return out


def _stack_transpose(a):
    """[a; a^T] for a square a, C-contiguous."""
    return np.ascontiguousarray(np.vstack([a, a.T]))


def solve_mna(net: Network, S: np.ndarray, rhs: np.ndarray, what: str) -> np.ndarray:
    """S^-1 rhs, raising SolveError (naming likely culprits) if S is singular."""
    try:
        if S.shape[0] == 0:
            return np.zeros((0, rhs.shape[1]))
        cond = np.linalg.cond(S)
        if not np.isfinite(cond) or cond > 1e17:
            raise np.linalg.LinAlgError
        return np.linalg.solve(S, rhs)
    except np.linalg.LinAlgError:
        # find near-null directions: the rows/nets with most weight
        _, sv, vt = np.linalg.svd(S)
        vec = np.abs(vt[-1])
        k = int(np.argmax(vec))
        who = net.net_names[k] if k < net.nn else \
            next((n for n, j in net.branch_of.items() if j == k), "?")
        # a value far outside real parts' range (1e300 F) is the usual
        # cause: name that part; else the parts on the net found
        from solderless.engine.sanity import check_values
        import re as _re
        odd = [m.group(1) for w in check_values(net.circuit)
               for m in [_re.search(r"part '([^']*)'", w)] if m]
        on_net = [e.name for e in net.circuit.elements if who in e.nodes]
        if odd:
            raise SolveError(f"the network matrix is singular ({what}); "
                             f"{', '.join(odd[:4])} ha{'s' if len(odd) == 1 else 've'} a "
                             "value outside the range of real parts", part=odd[0],
                             hint="check the value (see the warnings above)") from None
        where = (f"near '{who}'" + (f" (parts: {', '.join(on_net[:6])})" if on_net else ""))
        raise SolveError(f"the network matrix is singular ({what}); the problem is {where}",
                         part=on_net[0] if who in net.net_names and on_net else
                         (who if who in {e.name for e in net.circuit.elements} else None),
                         hint="look for a floating net, a loop of voltage sources, or a "
                              "controlled source without a defined output") from None


def derive(net: Network, values: dict[str, float], T: float,
           probes: list[ProbeRow]) -> Model:
    """Build the discrete model for element values and step T (seconds)."""
    from solderless.engine.solver.kernel_layout import PORT_G0
    S = net.build_S(values, T, port_g0=PORT_G0)
    Bx, Bu, Bn = net._bx, net._bu, net._bn
    nx, nu = net.nx, net.nu
    M = solve_mna(net, S, np.hstack([Bx, Bu, Bn]), "transient")
    Mx, Mu, Mn = M[:, :nx], M[:, nx:nx + nu], M[:, nx + nu:]
    P = net.port_rows()
    R = net.state_read_rows()
    g, a, b = net.state_g(values, T)
    ag = (a * g)[:, None]
    A = ag * (R @ Mx) - np.diag(b)
    Bm = ag * (R @ Mu)
    Cm = ag * (R @ Mn)
    npt = net.np_
    ny = len(probes)
    Dy = np.zeros((ny, nx))
    Ey = np.zeros((ny, nu))
    Fy = np.zeros((ny, npt))
    Vy = np.zeros((ny, npt))
    for r, pr in enumerate(probes):
        cw, cx, cu, ci, cv = pr.build(values, g)
        Dy[r] = cw @ Mx + cx
        Ey[r] = cw @ Mu + cu
        Fy[r] = cw @ Mn + ci
        Vy[r] = cv
    udc = np.array([values[el.name] for el in net.sources], dtype=np.float64)
    Dv, Ev = P @ Mx, P @ Mu
    # Only the input and waveform sources change per sample; the input adds
    # its samples to its DC value, a waveform source replaces it.
    wave = [k for k, el in enumerate(net.sources)
            if k != net.input_index and source_wave(el)[0] != WAVE_DC]
    uvar = ([net.input_index] if net.input_index >= 0 else []) + wave
    ud = udc.copy()
    ud[wave] = 0.0
    K = P @ Mn
    nzp, npp, nxp = padded(nx + len(uvar)), padded(npt), padded(nx)
    return Model(_c(A), _c(Bm), _c(Cm), _c(Dv), _c(Ev), _c(K),
                 _c(Dy), _c(Ey), _c(Fy), _c(Vy), _c(g), _c(a), _c(b), _c(udc), dict(values),
                 Pz=_pad(np.hstack([Dv, Ev[:, uvar]]), npp, nzp), p0=_pad(Ev @ ud, npp),
                 Az=_pad(np.hstack([A, Bm[:, uvar]]), nxp, nzp), x0=_pad(Bm @ ud, nxp),
                 Yz=_pad(np.hstack([Dy, Ey[:, uvar]]), None, nzp), y0=_c(Ey @ ud),
                 uvar=np.array(uvar, dtype=np.int64),
                 Kk=_stack_transpose(_pad(K, npp, npp)), Ck=_pad(Cm, nxp, npp), Fyk=_pad(Fy, None, npp),
                 Vyk=_pad(Vy, None, npp),
                 kc=_pad(np.abs(K).max(axis=0) if K.size else np.zeros(0), npp))
