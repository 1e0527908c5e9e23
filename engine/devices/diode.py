"""Junction diode: Shockley law with SPICE ``.model D`` parameters.

Port 0 = (anode', cathode); with RS > 0 an internal anode node is created and
RS becomes a linear resistor.  Current law as in ngspice dioload.c: forward
IS*(exp(v/(N*VT)) - 1), reverse-bias approximation below -3*N*VT, optional
breakdown at BV (current IBV there), GMIN across the junction.
"""
from __future__ import annotations

import math

import numpy as np
from numba import njit

from engine.devices._common import (GMIN, VT, DeviceLayout, junction, lexp, pnjlim,
                                    read_params, vcrit)

KIND = "D"
CODE = 1
NPORTS = 1
DEFAULTS = {"IS": 1e-14, "N": 1.0, "RS": 0.0, "BV": math.inf, "IBV": 1e-3,
            "CJO": 0.0, "TT": 0.0, "VJ": 1.0, "M": 0.5}
# par: 0 IS, 1 vte, 2 vcrit, 3 xbv (inf: no breakdown)


def layout(el) -> DeviceLayout:
    """Validate the element's model and describe its ports and stamps."""
    p = read_params(el, DEFAULTS, positive=("IS", "N", "IBV"), nonneg=("RS",))
    a, k = el.nodes
    vte = p["N"] * VT
    xbv = math.inf
    if math.isfinite(p["BV"]):
        xbv = p["BV"] - vte * math.log(1.0 + p["IBV"] / p["IS"])
    stamps, internal = [], []
    ai = a
    if p["RS"] > 0:
        ai = f"{el.name}#a"
        internal.append(ai)
        stamps.append(("R", a, ai, p["RS"]))
    par = np.array([p["IS"], vte, vcrit(vte, p["IS"]), xbv, 1.0 / vte])
    return DeviceLayout(CODE, [(ai, k)], par, internal, stamps,
                        probes={"id": ({0: 1.0}, {}), "vd": ({}, {0: 1.0})},
                        quiet_step=2.0 * vte)


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def evaluate(par, pa, v, po, i, G):
    """Junction current and conductance at port voltage v[po]."""
    vd = v[po]
    isat = par[pa + 0]
    vte = par[pa + 1]
    xbv = par[pa + 3]
    rvte = par[pa + 4]
    if vd < -xbv:
        e, de = lexp(-(xbv + vd) * rvte)
        c = -isat * e
        g = isat * de * rvte
    else:
        c, g = junction(vd, isat, vte, rvte)
    i[po] = c + GMIN * vd
    G[po, po] = g + GMIN


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def limit(par, pa, vn, vo, po):
    """pnjlim on the junction (and on the breakdown side when BV is set)."""
    vn[po] = pnjlim(vn[po], vo[po], par[pa + 1], par[pa + 2])
    xbv = par[pa + 3]
    if vn[po] < -xbv + 0.0 and vn[po] < 0.0:
        vn[po] = -xbv - pnjlim(-(vn[po] + xbv), -(vo[po] + xbv), par[pa + 1], par[pa + 2])


def region(par, v, i) -> str:
    """Operating region for reports: forward, reverse or breakdown."""
    vd = v[0]
    if vd < -par[3]:
        return "breakdown"
    return "forward" if vd > 0.3 else "reverse" if vd < 0 else "off"
