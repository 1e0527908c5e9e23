"""Bipolar junction transistor: Ebers-Moll transport model as SPICE's
Gummel-Poon with default high-injection/leakage terms (IKF=IKR=inf, ISE=ISC=0).

Ports: 0 = (B', E'), current = base current Ib; 1 = (C', E'), current =
collector current Ic.  Optional RB/RC/RE are linear series resistors to
internal nodes.  Equations (ngspice bjtload.c):
    Ibe = IS*(exp(Vbe/(NF*VT)) - 1),  Ibc = IS*(exp(Vbc/(NR*VT)) - 1)
    qb  = 1/(1 - Vbc/VAF - Vbe/VAR)
    Ic  = (Ibe - Ibc)/qb - Ibc/BR - GMIN*Vbc
    Ib  = Ibe/BF + Ibc/BR + GMIN*(Vbe + Vbc)
with the reverse-bias approximation below -3*N*VT.  PNP: all signs flipped.
"""
from __future__ import annotations

import math

import numpy as np
from numba import njit

from engine.devices._common import (GMIN, VT, DeviceLayout, junction, limit_two_junctions,
                                    polarity, read_params, vcrit)

KIND = "Q"
CODE = 2
NPORTS = 2
DEFAULTS = {"IS": 1e-16, "BF": 100.0, "BR": 1.0, "NF": 1.0, "NR": 1.0,
            "VAF": math.inf, "VAR": math.inf, "RB": 0.0, "RC": 0.0, "RE": 0.0,
            "IKF": math.inf, "IKR": math.inf, "ISE": 0.0, "ISC": 0.0,
            "CJE": 0.0, "CJC": 0.0, "TF": 0.0, "TR": 0.0}
# par: 0 pol, 1 IS, 2 BF, 3 BR, 4 vtf, 5 vtr, 6 1/VAF, 7 1/VAR, 8 vcrit_f, 9 vcrit_r,
# 10 1/BF, 11 1/BR, 12 1/vtf, 13 1/vtr (reciprocals: the evaluation multiplies)


def layout(el) -> DeviceLayout:
    """Validate the model and describe ports, internal nodes and stamps."""
    p = read_params(el, DEFAULTS, positive=("IS", "BF", "BR", "NF", "NR", "VAF", "VAR"),
                    nonneg=("RB", "RC", "RE"))
    pol = polarity(el, ("NPN", "PNP"))
    c, b, e = el.nodes
    stamps, internal = [], []
    nodes = {}
    for key, node in (("RC", c), ("RB", b), ("RE", e)):
        if p[key] > 0:
            inn = f"{el.name}#{key[1].lower()}"
            internal.append(inn)
            stamps.append(("R", node, inn, p[key]))
            nodes[key] = inn
        else:
            nodes[key] = node
    ci, bi, ei = nodes["RC"], nodes["RB"], nodes["RE"]
    vtf, vtr = p["NF"] * VT, p["NR"] * VT
    par = np.array([pol, p["IS"], p["BF"], p["BR"], vtf, vtr,
                    1.0 / p["VAF"], 1.0 / p["VAR"],
                    vcrit(vtf, p["IS"]), vcrit(vtr, p["IS"]),
                    1.0 / p["BF"], 1.0 / p["BR"], 1.0 / vtf, 1.0 / vtr])
    return DeviceLayout(CODE, [(bi, ei), (ci, ei)], par, internal, stamps,
                        probes={"ib": ({0: 1.0}, {}), "ic": ({1: 1.0}, {}),
                                "ie": ({0: -1.0, 1: -1.0}, {}),
                                "vbe": ({}, {0: 1.0}), "vce": ({}, {1: 1.0})},
                        # Vbe moves by the step, Vbc by at most twice it;
                        # pnjlim acts only on junction steps above 2*vt
                        quiet_step=min(vtf, vtr))


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def evaluate(par, pa, v, po, i, G):
    """Ib, Ic and their 2x2 Jacobian w.r.t. (Vbe, Vce) at the ports."""
    pol = par[pa + 0]
    vbe = pol * v[po]
    vce = pol * v[po + 1]
    vbc = vbe - vce
    isat = par[pa + 1]
    cbe, gbe = junction(vbe, isat, par[pa + 4], par[pa + 12])
    cbc, gbc = junction(vbc, isat, par[pa + 5], par[pa + 13])
    rbf = par[pa + 10]
    rbr = par[pa + 11]
    q1 = 1.0 - vbc * par[pa + 6] - vbe * par[pa + 7]
    if q1 < 1e-3:
        q1 = 1e-3
    # qb = 1/q1 ; (cbe - cbc)/qb = (cbe - cbc)*q1
    ict = (cbe - cbc) * q1
    dict_dvbe = gbe * q1 - (cbe - cbc) * par[pa + 7]
    dict_dvbc = -gbc * q1 - (cbe - cbc) * par[pa + 6]
    ic = ict - cbc * rbr - GMIN * vbc
    ib = cbe * rbf + cbc * rbr + GMIN * (vbe + vbc)
    dic_dvbe = dict_dvbe
    dic_dvbc = dict_dvbc - gbc * rbr - GMIN
    dib_dvbe = gbe * rbf + GMIN
    dib_dvbc = gbc * rbr + GMIN
    # chain rule: vbc = vbe - vce
    i[po] = pol * ib
    i[po + 1] = pol * ic
    G[po, po] = dib_dvbe + dib_dvbc
    G[po, po + 1] = -dib_dvbc
    G[po + 1, po] = dic_dvbe + dic_dvbc
    G[po + 1, po + 1] = -dic_dvbc


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def limit(par, pa, vn, vo, po):
    """pnjlim on Vbe and Vbc (as SPICE), Vce follows."""
    limit_two_junctions(vn, vo, po, par[pa + 0], par[pa + 4], par[pa + 8],
                        par[pa + 5], par[pa + 9])


def region(par, v, i) -> str:
    """cut-off / active / saturated / reverse from junction biases."""
    pol = par[0]
    vbe = pol * v[0]
    vbc = vbe - pol * v[1]
    on_e = vbe > 0.5 * (par[4] / VT) or (i[1] * pol > 1e-9 and vbe > 0.4)
    on_c = vbc > 0.4 * (par[5] / VT)
    if on_e and on_c:
        return "saturated"
    if on_e:
        return "active"
    if on_c:
        return "reverse"
    return "cut-off"
