"""Bipolar junction transistor: the Gummel-Poon DC model as SPICE2/SPICE3
define it (L. W. Nagel, ERL-M520, 1975; ngspice manual, BJT model; the
equations follow ngspice's bjtload.c/bjttemp.c).

Ports: 0 = (B', E'), current = base current Ib; 1 = (C', E'), current =
collector current Ic; with a current-dependent base resistance (RBM < RB or
IRB given) a third port 2 = (B, B') carries the base current through it.
RC and RE, and a constant RB, are linear series resistors to internal nodes
(as ngspice's internal collector, base and emitter nodes).

    Ibe = IS*(exp(Vbe/(NF*VT)) - 1),  Ibc = IS*(exp(Vbc/(NR*VT)) - 1)
    Ile = ISE*(exp(Vbe/(NE*VT)) - 1), Ilc = ISC*(exp(Vbc/(NC*VT)) - 1)
    q1  = 1/(1 - Vbc/VAF - Vbe/VAR),  q2 = Ibe/IKF + Ibc/IKR
    qb  = q1*(1 + sqrt(1 + 4*q2))/2
    Ic  = (Ibe - Ibc)/qb - Ibc/BR - Ilc - GMIN*Vbc
    Ib  = Ibe/BF + Ile + Ibc/BR + Ilc + GMIN*(Vbe + Vbc)
    rbb = RBM + (RB - RBM)/qb, or with IRB
        = RBM + 3*(RB - RBM)*(tan z - z)/(z*tan(z)**2),
          z = (-1 + sqrt(1 + 144*Ib/(pi**2*IRB)))/(24/pi**2*sqrt(Ib/IRB))

with the reverse-bias approximation below -3*N*VT.  Temperature (ngspice's
default TLEV=0 laws): VT = kT/q at the circuit temperature T,
IS(T) = IS*exp((T/TNOM - 1)*EG/VT + XTI*ln(T/TNOM)), BF and BR times
(T/TNOM)**XTB, ISE(T) = ISE*exp(that exponent/NE)/(T/TNOM)**XTB (ISC with
NC).  PNP: all signs flipped.  Charge storage (CJE, CJC, TF ...) is not
simulated: those parameters are accepted and named in the operating-point
warnings.
"""
from __future__ import annotations

import math

import numpy as np
from numba import njit

from solderless.engine.devices._common import (GMIN, DeviceLayout, circuit_temp, junction,
                                    limit_two_junctions, model_tnom, polarity, read_params,
                                    temp_factors, vcrit)
from solderless.engine.analysis import regions
from solderless.engine.devices.registry import DeviceKind

KIND = "Q"
CODE = 2
NPORTS = 2  # 3 with a current-dependent base resistance
#: the layout takes the circuit temperature (degrees Celsius)
TEMPERATURE = True
#: simulated parameters and their defaults (ngspice manual, BJT model table)
DEFAULTS = {"IS": 1e-16, "BF": 100.0, "NF": 1.0, "VAF": math.inf, "IKF": math.inf,
            "ISE": 0.0, "NE": 1.5, "BR": 1.0, "NR": 1.0, "VAR": math.inf,
            "IKR": math.inf, "ISC": 0.0, "NC": 2.0, "RB": 0.0, "IRB": math.inf,
            "RBM": math.nan, "RE": 0.0, "RC": 0.0, "XTB": 0.0, "EG": 1.11,
            "XTI": 3.0, "TNOM": 27.0}
_CAP_BE = "base-emitter depletion capacitance (high-frequency roll-off, switching speed)"
_CAP_BC = "base-collector capacitance (Miller roll-off at high frequencies)"
_CAP_CS = "collector-substrate capacitance (high-frequency roll-off)"
_TF = "forward transit time (diffusion capacitance: high-frequency gain, turn-off speed)"
_TEMPCO = "temperature coefficient (drift away from TNOM)"
#: standard parameters that are read but not simulated, and what they affect
IGNORED = {
    "CJE": _CAP_BE, "VJE": _CAP_BE, "MJE": _CAP_BE,
    "CJC": _CAP_BC, "VJC": _CAP_BC, "MJC": _CAP_BC, "XCJC": _CAP_BC,
    "CJS": _CAP_CS, "VJS": _CAP_CS, "MJS": _CAP_CS,
    "FC": "forward-bias depletion-capacitance linearisation",
    "TF": _TF, "XTF": _TF, "VTF": _TF, "ITF": _TF,
    "PTF": "excess phase at high frequencies",
    "TR": "reverse transit time (storage time when leaving saturation)",
    "KF": "flicker noise", "AF": "flicker noise",
    "NKF": "high-injection roll-off exponent (taken as 0.5)",
    "ISS": "substrate junction current", "NS": "substrate junction current",
    "SUBS": "substrate connection geometry",
    "RCO": "quasi-saturation", "VO": "quasi-saturation", "GAMMA": "quasi-saturation",
    "QCO": "quasi-saturation", "VG": "quasi-saturation",
    "TLEV": "temperature law selection (the default law is simulated)",
    "TLEVC": "temperature law of the capacitances",
    **{k: _TEMPCO for k in (
        "TRE1", "TRE2", "TRC1", "TRC2", "TRB1", "TRB2", "TRM1", "TRM2", "TBF1", "TBF2",
        "TBR1", "TBR2", "TIKF1", "TIKF2", "TIKR1", "TIKR2", "TIRB1", "TIRB2", "TNC1",
        "TNC2", "TNE1", "TNE2", "TNF1", "TNF2", "TNR1", "TNR2", "TVAF1", "TVAF2",
        "TVAR1", "TVAR2", "TITF1", "TITF2", "TTF1", "TTF2", "TTR1", "TTR2", "TMJE1",
        "TMJE2", "TMJC1", "TMJC2", "TMJS1", "TMJS2", "TIS1", "TIS2", "TISE1", "TISE2",
        "TISC1", "TISC2", "CTC", "CTE", "CTS", "TVJE", "TVJC", "TVJS")},
    "VCEO": "rating only", "ICRATING": "rating only", "BVCBO": "rating only",
    "BVCEO": "rating only", "BVEBO": "rating only", "MFG": "label only",
}
#: other spellings SPICE accepts
ALIASES = {"VA": "VAF", "VB": "VAR", "IK": "IKF", "PE": "VJE", "ME": "MJE",
           "PC": "VJC", "MC": "MJC", "PS": "VJS", "MS": "MJS", "CCS": "CJS"}
#: every standard parameter of the model card (simulated or not)
STANDARD = set(DEFAULTS) | set(IGNORED)
# par: 0 pol, 1 IS(T), 2 BF(T), 3 BR(T), 4 vtf, 5 vtr, 6 1/VAF, 7 1/VAR, 8 vcrit_f,
# 9 vcrit_r, 10 1/BF, 11 1/BR, 12 1/vtf, 13 1/vtr (reciprocals: the evaluation
# multiplies), 14 1/IKF, 15 1/IKR, 16 ISE(T), 17 NE*vt, 18 1/(NE*vt), 19 ISC(T),
# 20 NC*vt, 21 1/(NC*vt), 22 base-resistance port (1) or none (0), 23 RBM,
# 24 RB - RBM, 25 IRB (0: none)
NPAR = 26


def params(el) -> tuple[dict, list]:
    """The card's parameters with defaults, and the ignored ones."""
    notes: list = []
    p = read_params(el, DEFAULTS, positive=("IS", "BF", "BR", "NF", "NR", "VAF", "VAR",
                                            "IKF", "IKR", "NE", "NC", "IRB"),
                    nonneg=("RB", "RC", "RE", "ISE", "ISC", "XTI"),
                    ignored=IGNORED, aliases=ALIASES, notes=notes)
    return p, notes


def layout(el, temp=None) -> DeviceLayout:
    """Validate the model and describe ports, internal nodes and stamps;
    ``temp`` is the circuit temperature in degrees Celsius (None: 27)."""
    p, notes = params(el)
    pol = polarity(el, ("NPN", "PNP"))
    rbm = p["RB"] if math.isnan(p["RBM"]) else p["RBM"]
    if not 0.0 <= rbm <= p["RB"] and p["RB"] > 0:
        w = el.where
        from solderless.engine.errors import DesignError
        raise DesignError(f"model parameter RBM={rbm:g} must lie between 0 and RB={p['RB']:g}",
                          file=getattr(w, "file", None), line=getattr(w, "line", None),
                          part=el.name)
    nl_rb = p["RB"] > 0 and (rbm < p["RB"] or math.isfinite(p["IRB"]))
    c, b, e = el.nodes
    stamps, internal = [], []
    nodes = {}
    for key, node in (("RC", c), ("RB", b), ("RE", e)):
        if p[key] > 0:
            inn = f"{el.name}#{key[1].lower()}"
            internal.append(inn)
            if not (key == "RB" and nl_rb):
                stamps.append(("R", node, inn, p[key]))
            nodes[key] = inn
        else:
            nodes[key] = node
    ci, bi, ei = nodes["RC"], nodes["RB"], nodes["RE"]
    # temperature (ngspice bjttemp.c, TLEV=0)
    vt, ratlog, ratio1 = temp_factors(circuit_temp(temp), model_tnom(p))
    factlog = ratio1 * p["EG"] / vt + p["XTI"] * ratlog
    factor = math.exp(factlog)
    bfactor = math.exp(ratlog * p["XTB"])
    isat = p["IS"] * factor
    bf, br = p["BF"] * bfactor, p["BR"] * bfactor
    ise = p["ISE"] * math.exp(factlog / p["NE"]) / bfactor
    isc = p["ISC"] * math.exp(factlog / p["NC"]) / bfactor
    vtf, vtr = p["NF"] * vt, p["NR"] * vt
    vte, vtc = p["NE"] * vt, p["NC"] * vt
    par = np.array([pol, isat, bf, br, vtf, vtr,
                    1.0 / p["VAF"], 1.0 / p["VAR"],
                    vcrit(vtf, isat), vcrit(vtr, isat),
                    1.0 / bf, 1.0 / br, 1.0 / vtf, 1.0 / vtr,
                    1.0 / p["IKF"], 1.0 / p["IKR"], ise, vte, 1.0 / vte, isc, vtc,
                    1.0 / vtc, 1.0 if nl_rb else 0.0, rbm, p["RB"] - rbm,
                    p["IRB"] if math.isfinite(p["IRB"]) else 0.0])
    ports = [(bi, ei), (ci, ei)]
    if nl_rb:
        ports.append((b, bi))
    return DeviceLayout(CODE, ports, par, internal, stamps,
                        probes={"ib": ({0: 1.0}, {}), "ic": ({1: 1.0}, {}),
                                "ie": ({0: -1.0, 1: -1.0}, {}),
                                "vbe": ({}, {0: 1.0}), "vce": ({}, {1: 1.0})},
                        # Vbe moves by the step, Vbc by at most twice it;
                        # pnjlim acts only on junction steps above 2*vt
                        quiet_step=min(vtf, vtr), ignored=notes)


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False)
def _rbb_irb(ib, rbm, rbpi, irb):
    """Base resistance with IRB (ngspice bjtload.c) at base current ib."""
    a = ib / irb
    if a < 1e-9:
        a = 1e-9
    z = (-1.0 + math.sqrt(1.0 + 14.59025 * a)) / 2.4317 / math.sqrt(a)
    t = math.tan(z)
    return rbm + 3.0 * rbpi * (t - z) / z / t / t


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False)
def _gummel_poon(par, pa, vbe, vbc, cbe, gbe, cbc, gbc):
    """Collector transport current (Ibe - Ibc)/qb, its derivatives w.r.t.
    Vbe and Vbc, qb and qb's derivatives (high injection IKF/IKR)."""
    q1i = 1.0 - vbc * par[pa + 6] - vbe * par[pa + 7]
    if q1i < 1e-3:
        q1i = 1e-3
    q1 = 1.0 / q1i
    oik = par[pa + 14]
    oikr = par[pa + 15]
    q2 = oik * cbe + oikr * cbc
    arg = 1.0 + 4.0 * q2
    if arg < 0.0:
        arg = 0.0
    sq = math.sqrt(arg) if arg != 0.0 else 1.0
    qb = q1 * (1.0 + sq) * 0.5
    dqbdve = q1 * (qb * par[pa + 7] + oik * gbe / sq)
    dqbdvc = q1 * (qb * par[pa + 6] + oikr * gbc / sq)
    rqb = 1.0 / qb
    d = cbe - cbc
    ict = d * rqb
    return (ict, (gbe - ict * dqbdve) * rqb, (-gbc - ict * dqbdvc) * rqb,
            qb, dqbdve, dqbdvc)


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def evaluate(par, pa, v, po, i, G):
    """Ib, Ic (and the base-resistance current) and their Jacobian w.r.t.
    (Vbe, Vce[, Vbb']) at the ports."""
    pol = par[pa + 0]
    vbe = pol * v[po]
    vce = pol * v[po + 1]
    vbc = vbe - vce
    isat = par[pa + 1]
    cbe, gbe = junction(vbe, isat, par[pa + 4], par[pa + 12])
    cbc, gbc = junction(vbc, isat, par[pa + 5], par[pa + 13])
    rbf = par[pa + 10]
    rbr = par[pa + 11]
    hi = par[pa + 14] != 0.0 or par[pa + 15] != 0.0
    q1 = 1.0
    if hi:
        ict, dict_dvbe, dict_dvbc, qb, dqbdve, dqbdvc = _gummel_poon(
            par, pa, vbe, vbc, cbe, gbe, cbc, gbc)
    else:
        q1 = 1.0 - vbc * par[pa + 6] - vbe * par[pa + 7]
        if q1 < 1e-3:
            q1 = 1e-3
        # qb = 1/q1 ; (cbe - cbc)/qb = (cbe - cbc)*q1
        ict = (cbe - cbc) * q1
        dict_dvbe = gbe * q1 - (cbe - cbc) * par[pa + 7]
        dict_dvbc = -gbc * q1 - (cbe - cbc) * par[pa + 6]
        qb = dqbdve = dqbdvc = 0.0  # only the base-resistance port needs them
    # leakage (recombination) currents ISE/NE, ISC/NC, with GMIN
    cben = GMIN * vbe
    gben = GMIN
    if par[pa + 16] > 0.0:
        c2, g2 = junction(vbe, par[pa + 16], par[pa + 17], par[pa + 18])
        cben += c2
        gben += g2
    cbcn = GMIN * vbc
    gbcn = GMIN
    if par[pa + 19] > 0.0:
        c4, g4 = junction(vbc, par[pa + 19], par[pa + 20], par[pa + 21])
        cbcn += c4
        gbcn += g4
    ic = ict - cbc * rbr - cbcn
    ib = cbe * rbf + cben + cbc * rbr + cbcn
    dic_dvbe = dict_dvbe
    dic_dvbc = dict_dvbc - gbc * rbr - gbcn
    dib_dvbe = gbe * rbf + gben
    dib_dvbc = gbc * rbr + gbcn
    # chain rule: vbc = vbe - vce
    i[po] = pol * ib
    i[po + 1] = pol * ic
    G[po, po] = dib_dvbe + dib_dvbc
    G[po, po + 1] = -dib_dvbc
    G[po + 1, po] = dic_dvbe + dic_dvbc
    G[po + 1, po + 1] = -dic_dvbc
    if par[pa + 22] > 0.0:
        # current-dependent base resistance between B and B'
        vbb = pol * v[po + 2]
        rbm = par[pa + 23]
        rbpi = par[pa + 24]
        irb = par[pa + 25]
        if irb > 0.0:
            rbb = _rbb_irb(ib, rbm, rbpi, irb)
            h = 1e-6 * abs(ib) + 1e-15
            drb = (_rbb_irb(ib + h, rbm, rbpi, irb) - rbb) / h
            drb_dvbe = drb * dib_dvbe
            drb_dvbc = drb * dib_dvbc
        else:
            if not hi:
                qb = 1.0 / q1
                dqbdve = qb * qb * par[pa + 7]
                dqbdvc = qb * qb * par[pa + 6]
            rqb = 1.0 / qb
            rbb = rbm + rbpi * rqb
            drb_dvbe = -rbpi * rqb * rqb * dqbdve
            drb_dvbc = -rbpi * rqb * rqb * dqbdvc
        gx = 1.0 / rbb
        ix = vbb * gx
        k = -ix * gx
        i[po + 2] = pol * ix
        G[po, po + 2] = 0.0
        G[po + 1, po + 2] = 0.0
        G[po + 2, po] = k * (drb_dvbe + drb_dvbc)
        G[po + 2, po + 1] = -k * drb_dvbc
        G[po + 2, po + 2] = gx


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def limit(par, pa, vn, vo, po):
    """pnjlim on Vbe and Vbc (as SPICE), Vce follows."""
    limit_two_junctions(vn, vo, po, par[pa + 0], par[pa + 4], par[pa + 8],
                        par[pa + 5], par[pa + 9])


def region(par, v, i) -> str:
    """The region by the one BJT classifier (solderless.engine.analysis.regions)
    from the collector current (port 1) and the internal Vce; ``par[0]`` is
    the polarity, +1 for NPN, -1 for PNP."""
    return regions.bjt_region(float(par[0]), float(i[1]), float(v[1]))


# --------------------------------------------------------------------------
# The device's description (solderless.engine.devices.registry)

def report(q, el, par, v, i, G, region):
    """gm, beta and the region (solderless.engine.analysis.regions: the
    small-signal thresholds, signs folded by type)."""
    q["gm"] = float(G[1, 0])
    q["beta"] = q["ic"] / q["ib"] if q["ib"] != 0 else float("nan")
    sign = -1.0 if str((el.params or {}).get("TYPE", "")).upper() == "PNP" else 1.0
    return regions.bjt_region(sign, q.get("ic", 0.0), q.get("vce", 0.0))


DEVICE = DeviceKind(
    kind=KIND, terminals=("c", "b", "e"), title="BJT",
    model_types={"NPN": 1.0, "PNP": -1.0}, part_types={"npn": "NPN", "pnp": "PNP"},
    letter="Q", params=DEFAULTS, aliases=ALIASES, ignored=IGNORED,
    units={"IS": "A", "VAF": "V", "IKF": "A", "ISE": "A", "VAR": "V", "IKR": "A",
           "ISC": "A", "RB": "Ω", "IRB": "A", "RBM": "Ω", "RE": "Ω", "RC": "Ω",
           "EG": "eV", "TNOM": "°C"},
    # ranges of real parts (common practice, solderless/engine/sanity.py)
    ranges={"IS": (1e-21, 1e-2), "BF": (1.0, 1e4), "BR": (1e-3, 1e4), "NF": (0.5, 4.0),
            "NR": (0.5, 4.0), "VAF": (1.0, None), "VAR": (0.1, None),
            "RB": (0.0, 1e6), "RC": (0.0, 1e6), "RE": (0.0, 1e6)},
    also_read=frozenset({"AREA", "AREAB", "AREAC", "IBMAX", "ICMAX", "LEVEL", "MCONFIG",
                         "NK", "PDMAX", "QUASI", "TYPE", "VBCMAX", "VBEMAX", "VCEMAX"}),
    probes={"ib": "A", "ic": "A", "ie": "A", "vbe": "V", "vce": "V"},
    report=report, report_units={"gm": "S", "beta": ""}, health=regions.bjt_health,
    transistor="bjt", steady_region=True, headroom=regions.bjt_headroom,
    ratings=("ICMAX", "VCEMAX", "PDMAX"), output=0)
