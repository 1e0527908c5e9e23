"""Junction FET: Shichman-Hodges square law with SPICE ``.model NJF/PJF``
parameters (VTO, BETA, LAMBDA, IS, N, RD, RS), as ngspice level 1 with B=1.

Ports: 0 = (G, S'), current = gate current; 1 = (D', S'), current = drain
current.  Channel (normal mode, Vds >= 0, Vgst = Vgs - VTO):
    cut-off   Vgst <= 0:         Id = 0
    linear    Vgst >  Vds:       Id = BETA*Vds*(2*Vgst - Vds)*(1 + LAMBDA*Vds)
    saturated Vgst <= Vds:       Id = BETA*Vgst**2*(1 + LAMBDA*Vds)
inverse mode (Vds < 0) by symmetry with Vgd.  Gate-source and gate-drain
junctions follow the diode law with GMIN.  PJF: all signs flipped.
Reference: H. Shichman, D. A. Hodges, IEEE JSSC 3(3), 1968.
"""
from __future__ import annotations

import numpy as np
from numba import njit

from engine.devices._common import (GMIN, VT, DeviceLayout, junction, limit_two_junctions,
                                    polarity, read_params, vcrit)

KIND = "J"
CODE = 3
NPORTS = 2
DEFAULTS = {"VTO": -2.0, "BETA": 1e-4, "LAMBDA": 0.0, "IS": 1e-14, "N": 1.0,
            "RD": 0.0, "RS": 0.0, "B": 1.0, "CGS": 0.0, "CGD": 0.0, "PB": 1.0}
# par: 0 pol, 1 VTO, 2 BETA, 3 LAMBDA, 4 IS, 5 vte, 6 vcrit


def layout(el) -> DeviceLayout:
    """Validate the model and describe ports, internal nodes and stamps."""
    p = read_params(el, DEFAULTS, positive=("BETA", "IS", "N"), nonneg=("LAMBDA", "RD", "RS"))
    pol = polarity(el, ("NJF", "PJF"))
    d, g, s = el.nodes
    stamps, internal = [], []
    if p["RD"] > 0:
        internal.append(f"{el.name}#d")
        stamps.append(("R", d, internal[-1], p["RD"]))
        d = internal[-1]
    if p["RS"] > 0:
        internal.append(f"{el.name}#s")
        stamps.append(("R", s, internal[-1], p["RS"]))
        s = internal[-1]
    vte = p["N"] * VT
    par = np.array([pol, p["VTO"], p["BETA"], p["LAMBDA"], p["IS"], vte, vcrit(vte, p["IS"]),
                    1.0 / vte])
    return DeviceLayout(CODE, [(g, s), (d, s)], par, internal, stamps,
                        probes={"ig": ({0: 1.0}, {}), "id": ({1: 1.0}, {}),
                                "vgs": ({}, {0: 1.0}), "vds": ({}, {1: 1.0})},
                        quiet_step=vte)  # as the BJT: Vgd moves by <= 2 steps


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False)
def _channel(vgs, vds, vto, beta, lam):
    """Square-law channel current for vds >= 0: (Id, dId/dVgs, dId/dVds)."""
    vgst = vgs - vto
    if vgst <= 0.0:
        return 0.0, 0.0, 0.0
    lf = 1.0 + lam * vds
    if vgst > vds:
        base = vds * (2.0 * vgst - vds)
        return beta * base * lf, beta * 2.0 * vds * lf, beta * (2.0 * vgst - 2.0 * vds) * lf + beta * base * lam
    base = vgst * vgst
    return beta * base * lf, beta * 2.0 * vgst * lf, beta * base * lam


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def evaluate(par, pa, v, po, i, G):
    """Gate and drain currents and their 2x2 Jacobian w.r.t. (Vgs, Vds)."""
    pol = par[pa + 0]
    vgs = pol * v[po]
    vds = pol * v[po + 1]
    vgd = vgs - vds
    igs, ggs = junction(vgs, par[pa + 4], par[pa + 5], par[pa + 7])
    igd, ggd = junction(vgd, par[pa + 4], par[pa + 5], par[pa + 7])
    igs += GMIN * vgs
    ggs += GMIN
    igd += GMIN * vgd
    ggd += GMIN
    if vds >= 0.0:
        idc, gm, gds = _channel(vgs, vds, par[pa + 1], par[pa + 2], par[pa + 3])
        d_vgs = gm
        d_vds = gds
    else:
        f, gm, gds = _channel(vgd, -vds, par[pa + 1], par[pa + 2], par[pa + 3])
        idc = -f
        d_vgs = -gm
        d_vds = gm + gds
    i[po] = pol * (igs + igd)
    i[po + 1] = pol * (idc - igd)
    G[po, po] = ggs + ggd
    G[po, po + 1] = -ggd
    G[po + 1, po] = d_vgs - ggd
    G[po + 1, po + 1] = d_vds + ggd


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def limit(par, pa, vn, vo, po):
    """pnjlim on the gate junctions Vgs and Vgd."""
    limit_two_junctions(vn, vo, po, par[pa + 0], par[pa + 5], par[pa + 6],
                        par[pa + 5], par[pa + 6])


def region(par, v, i) -> str:
    """cut-off / linear / saturated (normal or inverse mode)."""
    pol = par[0]
    vgs, vds = pol * v[0], pol * v[1]
    if vds < 0:
        vgs, vds = vgs - vds, -vds
    vgst = vgs - par[1]
    if vgst <= 0:
        return "cut-off"
    return "linear" if vgst > vds else "saturated"
