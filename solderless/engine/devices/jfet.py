"""Junction FET: Shichman-Hodges square law with SPICE ``.model NJF/PJF``
parameters (VTO, BETA, LAMBDA, IS, N, RD, RS), as ngspice level 1, with
ngspice's doping-tail parameter B (Sydney University modification, A. E.
Parker and D. J. Skellern, 1989; B = 1 is the square law below; the form is
jfetload.c's: bfac = (1 - B)/(PB - VTO), saturated
Id = BETA*Vgst**2*(B + bfac*Vgst)*(1 + LAMBDA*Vds), linear
Id = BETA*Vds*(Vds*(bfac*Vds - B) + Vgst*(2B + 3bfac*(Vgst - Vds)))*(1 + LAMBDA*Vds)).

Ports: 0 = (G, S'), current = gate current; 1 = (D', S'), current = drain
current.  Channel (normal mode, Vds >= 0, Vgst = Vgs - VTO):
    cut-off   Vgst <= 0:         Id = 0
    linear    Vgst >  Vds:       Id = BETA*Vds*(2*Vgst - Vds)*(1 + LAMBDA*Vds)
    saturated Vgst <= Vds:       Id = BETA*Vgst**2*(1 + LAMBDA*Vds)
inverse mode (Vds < 0) by symmetry with Vgd.  Gate-source and gate-drain
junctions follow the diode law with GMIN.  PJF: all signs flipped.
Charge storage (as jfetload.c; ``capacitances`` at an operating point for
the AC analysis, the gate charges by BDF2 in the time domain):
gate-source CGS and gate-drain CGD depletion capacitances with grading 1/2,
CGS*(1 - Vgs/PB)**-0.5, linearised above FC*PB (FC limited to 0.95);
CGS, CGD and PB follow the default temperature law (jfettemp.c).
Reference: H. Shichman, D. A. Hodges, IEEE JSSC 3(3), 1968.
"""
from __future__ import annotations

import math

import numpy as np
from solderless.engine.lazyjit import njit  # numba on first need (lazyjit)

from solderless.engine.devices._common import (GMIN, DeviceLayout, circuit_temp,
                                    charge_history, depletion_cap, depletion_charge,
                                    depletion_consts, keep_charge as _keep_charge,
                                    junction, junction_temp,
                                    limit_two_junctions, model_tnom, polarity, read_params,
                                    temp_factors, vcrit)
from solderless.engine.errors import DesignError
from solderless.engine.analysis import regions
from solderless.engine.devices.registry import DeviceKind

KIND = "J"
CODE = 3
NPORTS = 2
#: the layout takes the circuit temperature (degrees Celsius)
TEMPERATURE = True
#: simulated parameters and their defaults (ngspice manual, JFET level 1)
DEFAULTS = {"VTO": -2.0, "BETA": 1e-4, "LAMBDA": 0.0, "IS": 1e-14, "N": 1.0,
            "RD": 0.0, "RS": 0.0, "B": 1.0, "PB": 1.0, "TNOM": 27.0,
            # charge storage
            "CGS": 0.0, "CGD": 0.0, "FC": 0.5}
_TEMPCO = "temperature coefficient (drift away from TNOM)"
#: standard parameters that are read but not simulated, and what they affect
IGNORED = {
    "KF": "flicker noise", "AF": "flicker noise", "NLEV": "noise model",
    "GDSNOI": "channel noise",
    "TCV": _TEMPCO, "VTOTC": _TEMPCO, "BEX": _TEMPCO, "BETATCE": _TEMPCO,
    "XTI": _TEMPCO, "EG": _TEMPCO,
    "ISR": "gate recombination current", "NR": "gate recombination current",
    "ALPHA": "gate impact ionisation", "VK": "gate impact ionisation",
    "M": "gate junction grading", "RG": "gate resistance", "MFG": "label only",
    "BV": "gate breakdown", "IBV": "gate breakdown",
    "VDSMAX": "rating only", "VGSMAX": "rating only", "VGDMAX": "rating only",
}
#: other spellings SPICE accepts
ALIASES = {"VT0": "VTO"}
#: every standard parameter of the model card (simulated or not)
STANDARD = set(DEFAULTS) | set(IGNORED)
# par: 0 pol, 1 VTO, 2 BETA, 3 LAMBDA, 4 IS(T), 5 vte, 6 vcrit, 7 1/vte, 8 B,
# 9 (1 - B)/(PB - VTO); charge storage (``capacitances`` at an operating
# point; the kernel's nonlinear charge with slot 14 set): 10 CGS(T),
# 11 CGD(T), 12 PB(T), 13 FC, 14 a0/T (the kernel's step and rule, kernel_layout.CHARGE_A0; 0: no charge in
# ``evaluate``), 15 F1, 16 1/F2 (depletion_consts, grading 1/2); written by
# ``evaluate`` for ``history``: 17, 18 the port voltages, 19, 20 a0*q/T per
# port and 21-24 the charges' 2 x 2 Jacobian over T there
#: par slot of the kernel's a0/T (charge storage in ``evaluate``)
CHARGE_SLOT = 14


def layout(el, temp=None) -> DeviceLayout:
    """Validate the model and describe ports, internal nodes and stamps;
    ``temp`` is the circuit temperature in degrees Celsius (None: 27)."""
    notes: list = []
    p = read_params(el, DEFAULTS, positive=("BETA", "IS", "N"),
                    nonneg=("LAMBDA", "RD", "RS", "B", "CGS", "CGD", "FC"),
                    ignored=IGNORED, aliases=ALIASES, notes=notes)
    if p["PB"] == p["VTO"]:
        w = el.where
        raise DesignError("model parameter PB must differ from VTO (B's doping tail "
                          "divides by PB - VTO)", file=getattr(w, "file", None),
                          line=getattr(w, "line", None), part=el.name)
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
    # temperature (ngspice jfettemp.c): IS(T) = IS*exp((T/TNOM - 1)*1.11/VT)
    vt, _, ratio1 = temp_factors(circuit_temp(temp), model_tnom(p))
    isat = p["IS"] * math.exp(ratio1 * 1.11 / vt)
    vte = p["N"] * vt
    bfac = (1.0 - p["B"]) / (p["PB"] - p["VTO"])
    cgs, pb = junction_temp(p["CGS"], p["PB"], 0.5, circuit_temp(temp), model_tnom(p))
    cgd, _ = junction_temp(p["CGD"], p["PB"], 0.5, circuit_temp(temp), model_tnom(p))
    if not pb > 0:
        w = el.where
        raise DesignError(f"model parameter PB={p['PB']:g} must be > 0 (gate junction "
                          "potential)", file=getattr(w, "file", None),
                          line=getattr(w, "line", None), part=el.name)
    par = np.array([pol, p["VTO"], p["BETA"], p["LAMBDA"], isat, vte, vcrit(vte, isat),
                    1.0 / vte, p["B"], bfac, cgs, cgd, pb, min(p["FC"], 0.95), 0.0,
                    *depletion_consts(pb, 0.5, min(p["FC"], 0.95)), *([0.0] * 8)])
    caps = [ent for on, ent in ((p["CGS"] > 0, (g, s, g, s)), (p["CGD"] > 0, (g, d, g, d)))
            if on]
    return DeviceLayout(CODE, [(g, s), (d, s)], par, internal, stamps,
                        probes={"ig": ({0: 1.0}, {}), "id": ({1: 1.0}, {}),
                                "vgs": ({}, {0: 1.0}), "vds": ({}, {1: 1.0})},
                        quiet_step=vte,  # as the BJT: Vgd moves by <= 2 steps
                        ignored=notes, caps=caps, kernel_caps=[True] * len(caps))


def capacitances(par, v, vc) -> np.ndarray:
    """Gate-source and gate-drain capacitances (farads) at port voltages
    (Vgs', Vd's'), for the entries the layout made (CGS, CGD given):
    jfetload.c's capgs, capgd (grading 1/2, FC linearisation)."""
    pol = par[0]
    vgs = pol * v[0]
    vgd = vgs - pol * v[1]
    out = []
    if par[10] > 0:
        out.append(depletion_cap(vgs, par[10], par[12], 0.5, par[13]))
    if par[11] > 0:
        out.append(depletion_cap(vgd, par[11], par[12], 0.5, par[13]))
    return np.array(out, dtype=np.float64)


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False)
def _channel(vgs, vds, vto, beta, lam, b, bfac):
    """Channel current for vds >= 0: (Id, dId/dVgs, dId/dVds), ngspice's
    level 1 with the doping-tail parameter B (jfetload.c; B = 1, bfac = 0
    is the square law)."""
    vgst = vgs - vto
    if vgst <= 0.0:
        return 0.0, 0.0, 0.0
    betap = beta * (1.0 + lam * vds)
    if vgst >= vds:
        apart = 2.0 * b + 3.0 * bfac * (vgst - vds)
        cpart = vds * (vds * (bfac * vds - b) + vgst * apart)
        return (betap * cpart, betap * vds * (apart + 3.0 * bfac * vgst),
                betap * (vgst - vds) * apart + beta * lam * cpart)
    bf = vgst * bfac
    cpart = vgst * vgst * (b + bf)
    return betap * cpart, betap * vgst * (2.0 * b + 3.0 * bf), lam * beta * cpart


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def _gate_charges(par, pa, vgs, vgd):
    """Gate-source and gate-drain depletion charges and capacitances
    (jfetload.c: grading 1/2, the FC linearisation)."""
    qgs, cgs = depletion_charge(vgs, par[pa + 10], par[pa + 12], 0.5, par[pa + 13],
                                par[pa + 15], par[pa + 16])
    qgd, cgd = depletion_charge(vgd, par[pa + 11], par[pa + 12], 0.5, par[pa + 13],
                                par[pa + 15], par[pa + 16])
    return qgs, cgs, qgd, cgd


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def history(par, pa, v, po, q):
    """-a0*q(v)/T per port into q from the charges ``evaluate`` last computed,
    continued to v with their Jacobian (``_common.charge_history``)."""
    if par[pa + 14] != 0.0:
        charge_history(par, pa + 17, v, po, q)


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False)
def charges(par, pa, v, po, q):
    """-a0*q/T per port into q[po], q[po + 1] (Qgs + Qgd into the gate,
    -Qgd into the drain), from which the next sample's charge currents
    start; nothing when par[pa + 14] (a0/T) is 0."""
    it = par[pa + 14]
    if it == 0.0:
        return
    pol = par[pa + 0]
    vgs = pol * v[po]
    vgd = vgs - pol * v[po + 1]
    qgs, cgs, qgd, cgd = _gate_charges(par, pa, vgs, vgd)
    q[po] = -it * pol * (qgs + qgd)
    q[po + 1] = it * pol * qgd


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
    it = par[pa + 14]
    if it != 0.0:
        # gate charge storage: a0*q(v)/T as the gate junctions' currents;
        # the history of earlier samples' charges (BDF2) the kernel takes
        # into p (see ``charges``)
        qgs, cgs, qgd, cgd = _gate_charges(par, pa, vgs, vgd)
        igs += it * qgs
        ggs += it * cgs
        igd += it * qgd
        ggd += it * cgd
        _keep_charge(par, pa + 17, v[po], v[po + 1], it * pol * (qgs + qgd), -it * pol * qgd,
                     it * (cgs + cgd), -it * cgd, -it * cgd, it * cgd)
    if vds >= 0.0:
        idc, gm, gds = _channel(vgs, vds, par[pa + 1], par[pa + 2], par[pa + 3],
                                 par[pa + 8], par[pa + 9])
        d_vgs = gm
        d_vds = gds
    else:
        f, gm, gds = _channel(vgd, -vds, par[pa + 1], par[pa + 2], par[pa + 3],
                             par[pa + 8], par[pa + 9])
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


# --------------------------------------------------------------------------
# The device's description (solderless.engine.devices.registry)

def report(q, el, par, v, i, G, region):
    """gm and the square-law region (solderless.engine.analysis.regions),
    against the folded threshold the layout holds (par[1])."""
    q["gm"] = float(G[1, 0])
    sign = -1.0 if str((el.params or {}).get("TYPE", "")).upper() == "PJF" else 1.0
    return regions.fet_region(sign, q.get("vgs", 0.0), q.get("vds", 0.0), float(par[1]))


DEVICE = DeviceKind(
    kind=KIND, terminals=("d", "g", "s"), title="JFET",
    model_types={"NJF": 1.0, "PJF": -1.0}, part_types={"njfet": "NJF", "pjfet": "PJF"},
    letter="J", params=DEFAULTS, aliases=ALIASES, ignored=IGNORED,
    units={"VTO": "V", "BETA": "A/V²", "LAMBDA": "1/V", "IS": "A", "RD": "Ω", "RS": "Ω",
           "B": "1/V", "PB": "V", "TNOM": "°C", "CGS": "F", "CGD": "F"},
    # ranges of real parts (common practice, solderless/engine/sanity.py)
    ranges={"VTO": (-50.0, 50.0), "BETA": (1e-9, 10.0), "IS": (1e-21, 1e-2),
            "N": (0.5, 4.0), "LAMBDA": (0.0, 10.0), "RS": (0.0, 1e6), "RD": (0.0, 1e6)},
    also_read=frozenset({"LEVEL", "PDMAX", "TYPE"}),
    probes={"ig": "A", "id": "A", "vgs": "V", "vds": "V"},
    report=report, report_units={"gm": "S"}, health=regions.fet_health("JFET"),
    transistor="fet", steady_region=True, headroom=regions.fet_headroom,
    ratings=("VDSMAX", "VGSMAX", "PDMAX"), output=0)
