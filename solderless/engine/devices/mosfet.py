"""MOSFET: Shichman-Hodges square law, SPICE ``.model NMOS/PMOS`` level 1
(VTO, KP, LAMBDA, GAMMA, PHI, IS, LD, RD, RS; instance W, L), as ngspice's
level 1.

Element nodes (d, g, s, b).  Ports: 0 = (G, S'), no current (the gate draws
none at DC; its overlap capacitances are linear capacitors); 1 = (D', S'), current = drain
current; 2 = (B, S'), current = bulk current, only when the bulk is not the
source (a discrete part's bulk is its source: then two ports).  Channel
(normal mode, Vds >= 0), beta = KP*W/(L - 2*LD):

    Vth   = VTO + GAMMA*(sqrt(PHI - Vbs) - sqrt(PHI))     (body effect)
    cut-off    Vgs - Vth <= 0:    Id = 0
    linear     Vgs - Vth >  Vds:  Id = beta*Vds*(Vgst - Vds/2)*(1 + LAMBDA*Vds)
    saturated  Vgs - Vth <= Vds:  Id = beta/2*Vgst**2*(1 + LAMBDA*Vds)

For Vbs > 0 the square root is continued by its tangent at Vbs = 0 (as
SPICE3 does).  Inverse mode (Vds < 0) by symmetry with Vgd and Vbd.  The
bulk-drain and bulk-source junctions (the body diode of a discrete part)
follow the diode law with IS and GMIN.  PMOS: all signs flipped (VTO as
written, negative for an enhancement PMOS).
Charge storage, as ngspice's level 1 with no TOX (mos1load.c,
mos1temp.c): the overlap capacitances CGSO*W, CGDO*W (gate to S', D') and
CGBO*(L - 2*LD) (gate to bulk) are constant, so linear capacitors carry
them exactly; the bulk-drain and bulk-source junctions, CBD and CBS or
else CJ*AD, CJ*AS with the sidewalls CJSW*PD, CJSW*PS (grading MJ, MJSW,
potential PB, linearised above FC*PB), each times the multiplier M, are
charges across the ports that ``evaluate`` integrates by BDF2
(``capacitances`` gives their values at an operating point for the AC
analysis).  With the bulk on the source, the bulk-source junction is
shorted and the bulk-drain junction lies across (D', S').  The intrinsic
(Meyer) gate capacitance needs TOX, which is not simulated (named in the
warnings).
Reference: H. Shichman, D. A. Hodges, IEEE JSSC 3(3), 1968; the level-1
equations of SPICE2 (L. W. Nagel, ERL-M520, 1975).
"""
from __future__ import annotations

import math

import numpy as np
from solderless.engine.lazyjit import njit  # numba on first need (lazyjit)

from solderless.engine.devices._common import (GMIN, VT, DeviceLayout, charge_history,
                                    depletion_cap, depletion_charge, depletion_consts,
                                    junction, keep_charge, pnjlim, polarity, read_params,
                                    vcrit)
from solderless.engine.errors import DesignError
from solderless.engine.analysis import regions
from solderless.engine.devices.registry import DeviceKind

KIND = "M"
CODE = 6
NPORTS = 2  # 3 when the bulk is not the source
#: W and L default to 100 um as ngspice's (DEFW, DEFL).
DEFAULTS = {"VTO": 0.0, "KP": 2e-5, "LAMBDA": 0.0, "GAMMA": 0.0, "PHI": 0.6,
            "IS": 1e-14, "LD": 0.0, "RD": 0.0, "RS": 0.0, "W": 100e-6, "L": 100e-6,
            "M": 1.0,
            # charge storage (CBD, CBS: NaN = not given, then CJ*AD, CJ*AS)
            "CGSO": 0.0, "CGDO": 0.0, "CGBO": 0.0, "CBD": math.nan, "CBS": math.nan,
            "PB": 0.8, "CJ": 0.0, "MJ": 0.5, "CJSW": 0.0, "MJSW": 0.5, "FC": 0.5,
            # instance geometry of the drain and source junctions
            "AD": 0.0, "AS": 0.0, "PD": 0.0, "PS": 0.0}
#: instance parameters (the element card's, not the model's)
INSTANCE = ("W", "L", "M", "AD", "AS", "PD", "PS")
#: the layout takes the circuit temperature (degrees Celsius)
TEMPERATURE = True
_CAP = "intrinsic gate capacitance (needs the oxide thickness; high-frequency roll-off)"
_PROC = ("process parameter (ngspice derives KP, VTO, GAMMA or PHI from it when "
         "they are not given: give them directly)")
#: standard level-1 parameters that are read but not simulated, and what they affect
IGNORED = {
    "RSH": "drain and source sheet resistance (give RD and RS)",
    "JS": "bulk junction current density (give IS)",
    "TOX": _PROC + "; " + _CAP, "NSUB": _PROC, "NSS": _PROC, "TPG": _PROC, "UO": _PROC,
    "NFS": "subthreshold conduction (level 2/3)", "XJ": "level 2/3 geometry",
    "UCRIT": "mobility degradation (level 2)", "UEXP": "mobility degradation (level 2)",
    "UTRA": "mobility degradation (level 2)", "VMAX": "velocity saturation (level 2/3)",
    "NEFF": "level 2 channel charge", "DELTA": "narrow-width effect (level 2/3)",
    "THETA": "mobility modulation (level 3)", "ETA": "drain-induced barrier lowering (level 3)",
    "KAPPA": "saturation field (level 3)",
    "KF": "flicker noise", "AF": "flicker noise", "TNOM": "temperature law (not simulated "
    "for the MOSFET: parameters are taken as given)", "MFG": "label only",
    "WD": "width reduction", "RG": "gate resistance", "RB": "bulk resistance",
    "BEX": "temperature coefficient", "TCV": "temperature coefficient",
    "XTI": "temperature coefficient", "EG": "temperature coefficient",
    "N": "subthreshold slope", "BV": "drain breakdown", "IBV": "drain breakdown",
    "TT": "body diode transit time", "VDS": "rating only", "VGS": "rating only",
    "RON": "rating only", "QG": "rating only",
}
#: other spellings SPICE accepts
ALIASES = {"VT0": "VTO", "U0": "UO"}
#: every standard parameter of the model card (simulated or not)
STANDARD = set(DEFAULTS) | set(IGNORED)
# par: 0 pol, 1 pol*VTO, 2 beta, 3 LAMBDA, 4 GAMMA, 5 PHI, 6 sqrt(PHI), 7 IS,
# 8 VT, 9 vcrit, 10 1/VT, 11 bulk port (1) or bulk = source (0); charge
# storage: 12 CGSO*W*M, 13 CGDO*W*M, 14 CGBO*Leff*M (constant, linear
# capacitors), 15 bulk-drain bottom, 16 bulk-source bottom, 17 PB, 18 MJ,
# 19 bulk-drain sidewall, 20 bulk-source sidewall, 21 MJSW, 22 FC, 23 gate-bulk
# entry (1/0), 24 bulk-source entry (1/0); the kernel's bulk charges with
# slot 25 set: 25 a0/T (the kernel's step and rule, kernel_layout.CHARGE_A0;
# 0: no charge in ``evaluate``),
# 26, 27 F1, 1/F2 of the bottom grading MJ, 28, 29 of the sidewall grading
# MJSW (depletion_consts); written by ``evaluate`` for ``history``: 30-37
# the two charge ports' voltages, a0*q/T and 2 x 2 Jacobian times a0/T (ports
# (G, S'), (D', S') with the bulk on the source, else (D', S'), (B, S'))
#: par slot of the kernel's a0/T (charge storage in ``evaluate``)
CHARGE_SLOT = 25
#: length of the parameter vector
NPAR = 38


def layout(el, temp=None) -> DeviceLayout:
    """Validate the model and describe ports, internal nodes and stamps.
    The level-1 temperature laws are not simulated: at a circuit
    temperature ``temp`` other than 27 degC the layout notes that."""
    notes: list = []
    p = read_params(el, DEFAULTS, positive=("KP", "PHI", "IS", "W", "L", "M"),
                    nonneg=("LAMBDA", "GAMMA", "LD", "RD", "RS", "CGSO", "CGDO", "CGBO",
                            "CJ", "MJ", "CJSW", "MJSW", "FC", "AD", "AS", "PD", "PS"),
                    ignored=IGNORED, aliases=ALIASES, notes=notes)
    if temp is not None and float(temp) != 27.0:
        notes.append(("temperature", "circuit temperature (the MOSFET's parameters are "
                                     "taken at their nominal temperature)"))
    pol = polarity(el, ("NMOS", "PMOS"))
    d, g, s, b = el.nodes
    leff = p["L"] - 2.0 * p["LD"]
    if not leff > 0:
        w = el.where
        raise DesignError(f"channel length L - 2*LD = {leff:g} m is not positive",
                          file=getattr(w, "file", None), line=getattr(w, "line", None),
                          part=el.name, hint="check L and LD")
    stamps, internal = [], []
    bulk_is_source = b == s
    if p["RD"] > 0:
        internal.append(f"{el.name}#d")
        stamps.append(("R", d, internal[-1], p["RD"] / p["M"]))
        d = internal[-1]
    if p["RS"] > 0:
        internal.append(f"{el.name}#s")
        stamps.append(("R", s, internal[-1], p["RS"] / p["M"]))
        s = internal[-1]
    ports = [(g, s), (d, s)]
    if not bulk_is_source:
        ports.append((b, s))
    beta = p["KP"] * p["W"] / leff * p["M"]
    isat = p["IS"] * p["M"]
    m = p["M"]
    for k in ("CBD", "CBS", "PB"):
        if not (math.isnan(p[k]) or p[k] >= (0 if k != "PB" else 1e-300)):
            w = el.where
            raise DesignError(f"model parameter {k}={p[k]:g} must be "
                              f"{'>= 0' if k != 'PB' else '> 0'}",
                              file=getattr(w, "file", None), line=getattr(w, "line", None),
                              part=el.name)
    czbd = (p["CBD"] if not math.isnan(p["CBD"]) else p["CJ"] * p["AD"]) * m
    czbs = (p["CBS"] if not math.isnan(p["CBS"]) else p["CJ"] * p["AS"]) * m
    par = np.array([pol, pol * p["VTO"], beta, p["LAMBDA"], p["GAMMA"], p["PHI"],
                    math.sqrt(p["PHI"]), isat, VT, vcrit(VT, isat), 1.0 / VT,
                    0.0 if bulk_is_source else 1.0,
                    p["CGSO"] * p["W"] * m, p["CGDO"] * p["W"] * m, p["CGBO"] * leff * m,
                    czbd, czbs, p["PB"], p["MJ"], p["CJSW"] * p["PD"] * m,
                    p["CJSW"] * p["PS"] * m, p["MJSW"], min(p["FC"], 0.95), 0.0, 0.0, 0.0,
                    *depletion_consts(p["PB"], p["MJ"], min(p["FC"], 0.95)),
                    *depletion_consts(p["PB"], p["MJSW"], min(p["FC"], 0.95)),
                    *([0.0] * 8)])
    assert par.size == NPAR
    par[23] = 1.0 if par[14] > 0 and g != b else 0.0   # gate-bulk entry
    par[24] = 1.0 if par[16] + par[20] > 0 and b != s else 0.0  # bulk-source entry
    # the constant overlaps are linear capacitors, the bulk junctions the
    # kernel's charges across the ports
    entries = [(on, ent, kern) for on, ent, kern in (
        (par[12] > 0, (g, s, g, s), False), (par[13] > 0, (g, d, g, d), False),
        (par[23] > 0, (g, b, g, b), False),
        (par[15] + par[19] > 0, (b, d, b, d), True),
        (par[24] > 0, (b, s, b, s), True)) if on]
    probes = {"id": ({1: 1.0}, {}), "vgs": ({}, {0: 1.0}), "vds": ({}, {1: 1.0})}
    return DeviceLayout(CODE, ports, par, internal, stamps, probes=probes,
                        quiet_step=VT, ignored=notes, caps=[e[1] for e in entries],
                        kernel_caps=[e[2] for e in entries])


def capacitances(par, v, vc) -> np.ndarray:
    """Overlap and bulk-junction capacitances (farads) for the layout's
    entries: gate-source, gate-drain, gate-bulk overlaps (constant), and
    the bulk-drain and bulk-source junctions at their biases ``vc``
    (mos1load.c's capbd, capbs: bottom and sidewall parts, FC
    linearisation)."""
    pol = par[0]
    pb, mj, mjsw, fc = par[17], par[18], par[21], par[22]
    out = [par[12]] if par[12] > 0 else []
    if par[13] > 0:
        out.append(par[13])
    if par[23] > 0:
        out.append(par[14])
    for bottom, side, on in ((15, 19, par[15] + par[19] > 0), (16, 20, par[24] > 0)):
        if on:
            vj = pol * vc[len(out)]
            out.append(depletion_cap(vj, par[bottom], pb, mj, fc)
                       + depletion_cap(vj, par[side], pb, mjsw, fc))
    return np.array(out, dtype=np.float64)


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False)
def _threshold(vbs, vto, gamma, phi, sphi):
    """Threshold with the body effect and its derivative w.r.t. Vbs."""
    if gamma == 0.0:
        return vto, 0.0
    if vbs <= 0.0:
        sarg = math.sqrt(phi - vbs)
        dsarg = -0.5 / sarg
    else:
        sarg = sphi - vbs / (2.0 * sphi)
        dsarg = -0.5 / sphi
        if sarg < 0.0:
            sarg = 0.0
            dsarg = 0.0
    return vto + gamma * (sarg - sphi), gamma * dsarg


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False)
def _channel(vgs, vds, vbs, vto, beta, lam, gamma, phi, sphi):
    """Channel current for vds >= 0: (Id, dId/dVgs, dId/dVds, dId/dVbs)."""
    von, dvon = _threshold(vbs, vto, gamma, phi, sphi)
    vgst = vgs - von
    if vgst <= 0.0:
        return 0.0, 0.0, 0.0, 0.0
    betap = beta * (1.0 + lam * vds)
    if vgst <= vds:
        cd = 0.5 * betap * vgst * vgst
        gm = betap * vgst
        gds = 0.5 * lam * beta * vgst * vgst
    else:
        cd = betap * vds * (vgst - 0.5 * vds)
        gm = betap * vds
        gds = betap * (vgst - vds) + lam * beta * vds * (vgst - 0.5 * vds)
    return cd, gm, gds, -gm * dvon


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def evaluate(par, pa, v, po, i, G):
    """Drain (and bulk) currents and their Jacobian w.r.t. (Vgs, Vds[, Vbs])."""
    pol = par[pa + 0]
    three = par[pa + 11] > 0.0
    vgs = pol * v[po]
    vds = pol * v[po + 1]
    vbs = pol * v[po + 2] if three else 0.0
    vbd = vbs - vds
    vto, beta, lam = par[pa + 1], par[pa + 2], par[pa + 3]
    gamma, phi, sphi = par[pa + 4], par[pa + 5], par[pa + 6]
    if vds >= 0.0:
        cd, gm, gds, gmbs = _channel(vgs, vds, vbs, vto, beta, lam, gamma, phi, sphi)
        d_vgs, d_vds, d_vbs = gm, gds, gmbs
    else:
        f, gm, gds, gmbs = _channel(vgs - vds, -vds, vbd, vto, beta, lam, gamma, phi, sphi)
        cd = -f
        d_vgs, d_vds, d_vbs = -gm, gm + gds + gmbs, -gmbs
    cbd, gbd = junction(vbd, par[pa + 7], par[pa + 8], par[pa + 10])
    cbd += GMIN * vbd
    gbd += GMIN
    i[po] = 0.0
    i[po + 1] = pol * (cd - cbd)
    G[po, po] = 0.0
    G[po, po + 1] = 0.0
    G[po + 1, po] = d_vgs
    G[po + 1, po + 1] = d_vds + gbd
    if three:
        cbs, gbs = junction(vbs, par[pa + 7], par[pa + 8], par[pa + 10])
        cbs += GMIN * vbs
        gbs += GMIN
        i[po + 2] = pol * (cbd + cbs)
        G[po, po + 2] = 0.0
        G[po + 1, po + 2] = d_vbs - gbd
        G[po + 2, po] = 0.0
        G[po + 2, po + 1] = -gbd
        G[po + 2, po + 2] = gbd + gbs
    it = par[pa + 25]
    if it != 0.0:
        # bulk junction charges: a0*q(v)/T per port; the history of earlier
        # samples' charges (BDF2) the kernel takes into p (see ``charges``);
        # Qbd flows
        # from the bulk into the drain, Qbs from the bulk into the source
        qbd, capbd, qbs, capbs = _bulk_charges(par, pa, vbs, vbd, three)
        qd = -pol * it * qbd
        cbdt = it * capbd
        i[po + 1] += qd
        G[po + 1, po + 1] += cbdt
        if three:
            qb = pol * it * (qbd + qbs)
            cbst = it * capbs
            i[po + 2] += qb
            G[po + 1, po + 2] -= cbdt
            G[po + 2, po + 1] -= cbdt
            G[po + 2, po + 2] += cbdt + cbst
            keep_charge(par, pa + 30, v[po + 1], v[po + 2], qd, qb, cbdt, -cbdt, -cbdt,
                        cbdt + cbst)
        else:
            keep_charge(par, pa + 30, v[po], v[po + 1], 0.0, qd, 0.0, 0.0, 0.0, cbdt)


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def _bulk_charges(par, pa, vbs, vbd, three):
    """Bulk-drain and bulk-source depletion charges and capacitances,
    bottom plus sidewall (mos1load.c's qbd, capbd, qbs, capbs: the FC
    linearisation with mos1temp.c's f2, f3, f4, which is the diode's
    form); the bulk-source pair is 0 with the bulk on the source."""
    pb, fc = par[pa + 17], par[pa + 22]
    mj, mjsw = par[pa + 18], par[pa + 21]
    q1, c1 = depletion_charge(vbd, par[pa + 15], pb, mj, fc, par[pa + 26], par[pa + 27])
    q2, c2 = depletion_charge(vbd, par[pa + 19], pb, mjsw, fc, par[pa + 28], par[pa + 29])
    if not three:
        return q1 + q2, c1 + c2, 0.0, 0.0
    q3, c3 = depletion_charge(vbs, par[pa + 16], pb, mj, fc, par[pa + 26], par[pa + 27])
    q4, c4 = depletion_charge(vbs, par[pa + 20], pb, mjsw, fc, par[pa + 28], par[pa + 29])
    return q1 + q2, c1 + c2, q3 + q4, c3 + c4


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def history(par, pa, v, po, q):
    """-a0*q(v)/T per port into q from the bulk charges ``evaluate`` last
    computed, continued to v with their Jacobian
    (``_common.charge_history``)."""
    if par[pa + 25] != 0.0:
        charge_history(par, pa + 30, v, po + 1 if par[pa + 11] > 0.0 else po, q)


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False)
def charges(par, pa, v, po, q):
    """-a0*q/T per port into q (-Qbd into D', Qbd + Qbs into the bulk) at
    port voltages v, from which the next sample's charge currents start;
    nothing when par[pa + 25] (a0/T) is 0."""
    it = par[pa + 25]
    if it == 0.0:
        return
    pol = par[pa + 0]
    three = par[pa + 11] > 0.0
    vds = pol * v[po + 1]
    vbs = pol * v[po + 2] if three else 0.0
    qbd, capbd, qbs, capbs = _bulk_charges(par, pa, vbs, vbs - vds, three)
    q[po + 1] = it * pol * qbd
    if three:
        q[po + 2] = -it * pol * (qbd + qbs)


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def limit(par, pa, vn, vo, po):
    """pnjlim on the bulk-drain junction (Vds follows) and, with a bulk
    port, on the bulk-source junction; the channel needs none."""
    pol = par[pa + 0]
    three = par[pa + 11] > 0.0
    vt = par[pa + 8]
    vc = par[pa + 9]
    vbs_n = pol * vn[po + 2] if three else 0.0
    vbs_o = pol * vo[po + 2] if three else 0.0
    if three:
        vbs_n = pnjlim(vbs_n, vbs_o, vt, vc)
        vn[po + 2] = pol * vbs_n
    vbd = pnjlim(vbs_n - pol * vn[po + 1], vbs_o - pol * vo[po + 1], vt, vc)
    vn[po + 1] = pol * (vbs_n - vbd)


def region(par, v, i) -> str:
    """cut-off / linear / saturated (normal or inverse mode), body effect
    included."""
    pol = par[0]
    vgs, vds = pol * v[0], pol * v[1]
    vbs = pol * v[2] if par[11] > 0 and len(v) > 2 else 0.0
    if vds < 0:
        vgs, vds, vbs = vgs - vds, -vds, vbs - vds
    von, _ = _threshold(vbs, par[1], par[4], par[5], par[6])
    if vgs - von <= 0:
        return "cut-off"
    return "linear" if vgs - von > vds else "saturated"


# --------------------------------------------------------------------------
# The device's description (solderless.engine.devices.registry)

def report(q, el, par, v, i, G, region):
    """gm and the square-law region (solderless.engine.analysis.regions),
    against the folded threshold the layout holds (par[1])."""
    q["gm"] = float(G[1, 0])
    sign = -1.0 if str((el.params or {}).get("TYPE", "")).upper() == "PMOS" else 1.0
    return regions.fet_region(sign, q.get("vgs", 0.0), q.get("vds", 0.0), float(par[1]))


DEVICE = DeviceKind(
    kind=KIND, terminals=("d", "g", "s", "b"), title="MOSFET",
    model_types={"NMOS": 1.0, "PMOS": -1.0}, part_types={"nmos": "NMOS", "pmos": "PMOS"},
    part_nodes=("d", "g", "s"), part_optional={"bulk": "s"},
    letter="M", params=DEFAULTS, aliases=ALIASES, ignored=IGNORED,
    units={"VTO": "V", "KP": "A/V²", "LAMBDA": "1/V", "GAMMA": "√V", "PHI": "V",
           "IS": "A", "LD": "m", "RD": "Ω", "RS": "Ω", "W": "m", "L": "m",
           "CGSO": "F/m", "CGDO": "F/m", "CGBO": "F/m", "CBD": "F", "CBS": "F", "PB": "V",
           "CJ": "F/m²", "CJSW": "F/m", "AD": "m²", "AS": "m²", "PD": "m", "PS": "m"},
    # ranges of real parts (common practice, solderless/engine/sanity.py)
    ranges={"VTO": (-50.0, 50.0), "KP": (1e-9, 10.0), "LAMBDA": (0.0, 10.0),
            "W": (1e-8, 1.0), "L": (1e-8, 1.0)},
    also_read=frozenset({"IDMAX", "KSUBTHRES", "LEVEL", "MTRIODE", "PDMAX", "TYPE",
                         "VDSMAX"}),
    instance=INSTANCE, card_prefix="LEVEL=1", takes_off=False,
    probes={"id": "A", "vgs": "V", "vds": "V"},
    report=report, report_units={"gm": "S"}, health=regions.fet_health("MOSFET"),
    transistor="fet", steady_region=True, headroom=regions.fet_headroom,
    ratings=("VDSMAX", "IDMAX", "PDMAX"), output=0)
