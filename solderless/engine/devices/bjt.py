"""Bipolar junction transistor: the Gummel-Poon DC model as SPICE2/SPICE3
define it (L. W. Nagel, ERL-M520, 1975; ngspice manual, BJT model; the
equations follow ngspice's bjtload.c/bjttemp.c).

Ports: 0 = (B', E'), current = base current Ib; 1 = (C', E'), current =
collector current Ic; with a current-dependent base resistance (RBM < RB or
IRB given) a third port 2 = (B, B') carries the base current through it.
Two more ports carry only charge when the card has it (no current at DC):
(B, C') for the external share of CJC (XCJC < 1 with a base resistance)
and (C', ground) for CJS.
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
NC).  PNP: all signs flipped.

Charge storage (ngspice bjtload.c's charge section: ``capacitances`` at an
operating point for the AC analysis; in the time domain ``evaluate``
integrates the charges across the ports, Qbe, Qbc, Qbx and Qcs, by
BDF2, kernel_layout.CHARGE_A0): depletion capacitances CJE/VJE/MJE (B'-E'),
CJC/VJC/MJC split by XCJC between the internal base (B'-C') and the
external base (B-C'), each linearised above FC*VJ, CJS/VJS/MJS from C'
to the substrate (ground; ngspice's vertical geometry, linearised above
0 V); the forward diffusion capacitance TF*gbe with TF
modulated by XTF, VTF and ITF,

    TF' = TF*(1 + XTF*(Ibe/(Ibe + ITF))**2*exp(Vbc/(1.44*VTF))),

and a transcapacitance dQbe/dVbc (B'-E' driven by Vb'c'); the reverse
diffusion capacitance TR*gbc.  CJE, VJE, CJC, VJC follow the default
temperature law (bjttemp.c, TLEVC = 0).
"""
from __future__ import annotations

import math

import numpy as np
from solderless.engine.lazyjit import njit  # numba on first need (lazyjit)

from solderless.engine.devices._common import (GMIN, DeviceLayout, circuit_temp,
                                    charge_history, depletion_cap, depletion_charge,
                                    depletion_consts, keep_charge,
                                    junction, junction_py, junction_temp,
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
            "XTI": 3.0, "TNOM": 27.0,
            # charge storage
            "CJE": 0.0, "VJE": 0.75, "MJE": 0.33, "TF": 0.0, "XTF": 0.0,
            "VTF": math.inf, "ITF": 0.0, "CJC": 0.0, "VJC": 0.75, "MJC": 0.33,
            "XCJC": 1.0, "TR": 0.0, "CJS": 0.0, "VJS": 0.75, "MJS": 0.0, "FC": 0.5}
_TEMPCO = "temperature coefficient (drift away from TNOM)"
#: standard parameters that are read but not simulated, and what they affect
IGNORED = {
    "PTF": "excess phase at high frequencies",
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
# 24 RB - RBM, 25 IRB (0: none); charge storage (``capacitances`` at an
# operating point; the kernel's nonlinear charge across the ports with slot
# 43 set): 26 CJE(T), 27 VJE(T), 28 MJE, 29 CJC(T), 30 VJC(T),
# 31 MJC, 32 XCJC, 33 CJS, 34 VJS, 35 MJS, 36 FC, 37 TF, 38 XTF,
# 39 1/(1.44*VTF) (0: none), 40 ITF, 41 TR, 42 separate external base (1/0),
# 43 a0/T (the kernel's step and rule, kernel_layout.CHARGE_A0; 0: no charge
# in ``evaluate``), 44 F1 and 45 1/F2
# of B'-E', 46 F1 and 47 1/F2 of B'-C' (depletion_consts), 48 the B'-C'
# depletion capacitance across the ports (CJC*XCJC, all of CJC without a
# separate external base); written by ``evaluate`` for ``history``: 49, 50
# the port voltages, 51, 52 a0*q/T per port, 53-56 the charges' 2 x 2
# Jacobian over T there; the charge-only ports: 57, 58 the offsets from
# port 0 of (B, C') and (C', ground) (0: no such port), 59 the external
# share of CJC, CJC*(1 - XCJC); written by ``evaluate``: 60-62 (B, C')'s
# voltage, a0*q/T and a0*C/T, 63-65 (C', ground)'s
NPAR = 66
#: par slot of the kernel's a0/T (charge storage in ``evaluate``)
CHARGE_SLOT = 43
#: par slot that is 1 when port 2 is the current-dependent base resistance
RB_PORT = 22


def params(el) -> tuple[dict, list]:
    """The card's parameters with defaults, and the ignored ones."""
    notes: list = []
    p = read_params(el, DEFAULTS, positive=("IS", "BF", "BR", "NF", "NR", "VAF", "VAR",
                                            "IKF", "IKR", "NE", "NC", "IRB"),
                    nonneg=("RB", "RC", "RE", "ISE", "ISC", "XTI", "CJE", "CJC", "CJS",
                            "TF", "TR", "XTF", "ITF", "MJE", "MJC", "MJS", "XCJC", "FC",
                            "VJE", "VJC", "VJS", "VTF"),
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
    # charge storage: the depletion law's temperature dependence (TLEVC = 0)
    tk, tnk = circuit_temp(temp), model_tnom(p)
    cje, vje = junction_temp(p["CJE"], p["VJE"], p["MJE"], tk, tnk)
    cjc, vjc = junction_temp(p["CJC"], p["VJC"], p["MJC"], tk, tnk)
    fc = min(p["FC"], 0.9999)
    ovtf = 1.0 / (1.44 * p["VTF"]) if 0.0 < p["VTF"] < math.inf else 0.0
    xcjc = min(p["XCJC"], 1.0)
    par = np.array([pol, isat, bf, br, vtf, vtr,
                    1.0 / p["VAF"], 1.0 / p["VAR"],
                    vcrit(vtf, isat), vcrit(vtr, isat),
                    1.0 / bf, 1.0 / br, 1.0 / vtf, 1.0 / vtr,
                    1.0 / p["IKF"], 1.0 / p["IKR"], ise, vte, 1.0 / vte, isc, vtc,
                    1.0 / vtc, 1.0 if nl_rb else 0.0, rbm, p["RB"] - rbm,
                    p["IRB"] if math.isfinite(p["IRB"]) else 0.0,
                    cje, vje, p["MJE"], cjc, vjc, p["MJC"], p["XCJC"], p["CJS"], p["VJS"],
                    p["MJS"], fc, p["TF"], p["XTF"], ovtf, p["ITF"], p["TR"],
                    1.0 if bi != b else 0.0, 0.0,
                    *depletion_consts(vje, p["MJE"], fc), *depletion_consts(vjc, p["MJC"], fc),
                    cjc * xcjc if bi != b else cjc, *([0.0] * 8),
                    0.0, 0.0, cjc * (1.0 - xcjc), *([0.0] * 6)])
    assert par.size == NPAR
    ports = [(bi, ei), (ci, ei)]
    if nl_rb:
        ports.append((b, bi))
    # the external B-C' share and CJS on ports of their own, which carry
    # only their charges (none when the junction is shorted)
    bx = cjc * (1.0 - xcjc) > 0 and bi != b and b != ci
    cs = p["CJS"] > 0 and ci != "0"
    if bx:
        par[57] = len(ports)
        ports.append((b, ci))
    if cs:
        par[58] = len(ports)
        ports.append((ci, "0"))
    caps = [ent for on, ent in ((cje > 0 or p["TF"] > 0, (bi, ei, bi, ei)),
                                (cjc * xcjc > 0 or p["TR"] > 0 or (cjc > 0 and bi == b),
                                 (bi, ci, bi, ci)),
                                (bx, (b, ci, b, ci)), (cs, (ci, "0", ci, "0")),
                                (p["TF"] > 0, (bi, ei, bi, ci))) if on]
    return DeviceLayout(CODE, ports, par, internal, stamps,
                        probes={"ib": ({0: 1.0}, {}), "ic": ({1: 1.0}, {}),
                                "ie": ({0: -1.0, 1: -1.0}, {}),
                                "vbe": ({}, {0: 1.0}), "vce": ({}, {1: 1.0})},
                        # Vbe moves by the step, Vbc by at most twice it;
                        # pnjlim acts only on junction steps above 2*vt
                        quiet_step=min(vtf, vtr), ignored=notes, caps=caps,
                        kernel_caps=[True] * len(caps))


def capacitances(par, v, vc) -> np.ndarray:
    """Junction capacitances (farads) at port voltages ``v`` (Vb'e', Vc'e'
    ...) in the order of the layout's ``caps``: B'-E' (depletion plus
    TF's diffusion), B'-C' (XCJC of CJC plus TR*gbc), B-C' (the rest of
    CJC, when there is a base resistance), C'-substrate (CJS), and the
    transcapacitance dQbe/dVb'c'.  ``vc`` holds each entry's own voltage
    (the B-C' and C'-substrate biases are not port voltages).  ngspice
    bjtload.c's charge section (capbe, capbc, capbx, capcs, geqcb)."""
    pol = par[0]
    vbe = pol * v[0]
    vbc = vbe - pol * v[1]
    cje, vje, mje, cjc, vjc, mjc, xcjc = par[26:33]
    cjs, vjs, mjs, fc, tf, xtf, ovtf, itf, tr, sep = par[33:43]
    xcjc = min(xcjc, 1.0)
    isat = par[1]
    cbe, gbe = junction_py(vbe, isat, par[4])
    cbc, gbc = junction_py(vbc, isat, par[5])
    # base charge qb and its derivatives, as the DC law (Gummel-Poon)
    q1 = 1.0 - vbc * par[6] - vbe * par[7]
    q1 = 1.0 / max(q1, 1e-3)
    oik, oikr = par[14], par[15]
    if oik == 0.0 and oikr == 0.0:
        qb = q1
        dqbdve = q1 * qb * par[7]
        dqbdvc = q1 * qb * par[6]
    else:
        arg = max(0.0, 1.0 + 4.0 * (oik * cbe + oikr * cbc))
        sq = math.sqrt(arg) if arg != 0.0 else 1.0
        qb = q1 * (1.0 + sq) / 2.0
        dqbdve = q1 * (qb * par[7] + oik * gbe / sq)
        dqbdvc = q1 * (qb * par[6] + oikr * gbc / sq)
    geqcb = 0.0
    if tf != 0.0 and vbe > 0.0:
        argtf = arg2 = arg3 = 0.0
        if xtf != 0.0:
            argtf = xtf
            if ovtf != 0.0:
                argtf *= math.exp(vbc * ovtf)
            arg2 = argtf
            if itf != 0.0:
                t = cbe / (cbe + itf)
                argtf *= t * t
                arg2 = argtf * (3.0 - t - t)
            arg3 = cbe * argtf * ovtf
        cbe = cbe * (1.0 + argtf) / qb
        gbe = (gbe * (1.0 + arg2) - cbe * dqbdve) / qb
        geqcb = tf * (arg3 - cbe * dqbdvc) / qb
    capbe = tf * gbe + depletion_cap(vbe, cje, vje, mje, fc)
    capbc = tr * gbc + depletion_cap(vbc, cjc * xcjc, vjc, mjc, fc)
    out = []
    k = 0
    if cje > 0 or tf > 0:
        out.append(capbe)
        k += 1
    capbx_merged = cjc > 0 and sep == 0.0
    if cjc * xcjc > 0 or tr > 0 or capbx_merged:
        if capbx_merged:  # no base resistance: B and B' are one node
            capbc += depletion_cap(vbc, cjc * (1.0 - xcjc), vjc, mjc, fc)
        out.append(capbc)
        k += 1
    if par[57] > 0:
        out.append(depletion_cap(pol * vc[k], cjc * (1.0 - xcjc), vjc, mjc, fc))
        k += 1
    if par[58] > 0:
        # ngspice's Vcs is substrate minus collector: reverse-biased when < 0
        out.append(depletion_cap(-pol * vc[k], cjs, vjs, mjs, 0.0))
        k += 1
    if tf > 0:
        out.append(geqcb)
    return np.array(out, dtype=np.float64)


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
    qb, dqbdve, dqbdvc = _base_charge(par, pa, vbe, vbc, cbe, gbe, cbc, gbc)
    rqb = 1.0 / qb
    d = cbe - cbc
    ict = d * rqb
    return (ict, (gbe - ict * dqbdve) * rqb, (-gbc - ict * dqbdvc) * rqb,
            qb, dqbdve, dqbdvc)


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def _charge(par, pa, vbe, vbc, cbe, gbe, cbc, gbc, qb, dqbdve, dqbdvc):
    """The charges across the ports and their derivatives, as ngspice
    bjtload.c's charge section: (qbe, qbc, capbe = dqbe/dVbe,
    capbc = dqbc/dVbc, geqcb = dqbe/dVbc).  Qbe is TF's diffusion charge
    TF*Ibe*(1 + XTF*(Ibe/(Ibe + ITF))**2*exp(Vbc/(1.44 VTF)))/qb (forward
    bias only) plus CJE's depletion charge, Qbc is TR*Ibc plus the B'-C'
    depletion charge (par[48])."""
    tf = par[pa + 37]
    geqcb = 0.0
    if tf != 0.0 and vbe > 0.0:
        argtf = 0.0
        arg2 = 0.0
        arg3 = 0.0
        xtf = par[pa + 38]
        if xtf != 0.0:
            ovtf = par[pa + 39]
            argtf = xtf
            if ovtf != 0.0:
                argtf *= math.exp(vbc * ovtf)
            arg2 = argtf
            itf = par[pa + 40]
            if itf != 0.0:
                t = cbe / (cbe + itf)
                argtf *= t * t
                arg2 = argtf * (3.0 - t - t)
            arg3 = cbe * argtf * ovtf
        rqb = 1.0 / qb
        cbe = cbe * (1.0 + argtf) * rqb
        gbe = (gbe * (1.0 + arg2) - cbe * dqbdve) * rqb
        geqcb = tf * (arg3 - cbe * dqbdvc) * rqb
    qe, ce = depletion_charge(vbe, par[pa + 26], par[pa + 27], par[pa + 28], par[pa + 36],
                              par[pa + 44], par[pa + 45])
    qc, cc = depletion_charge(vbc, par[pa + 48], par[pa + 30], par[pa + 31], par[pa + 36],
                              par[pa + 46], par[pa + 47])
    tr = par[pa + 41]
    return tf * cbe + qe, tr * cbc + qc, tf * gbe + ce, tr * gbc + cc, geqcb


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def history(par, pa, v, po, q):
    """-a0*q(v)/T per port into q from the charges ``evaluate`` last computed,
    continued to v with their Jacobian (``_common.charge_history``)."""
    if par[pa + 43] != 0.0:
        charge_history(par, pa + 49, v, po, q)
        for k in range(2):
            off = int(par[pa + 57 + k])
            if off > 0:
                s = pa + 60 + 3 * k
                q[po + off] = -(par[s + 1] + par[s + 2] * (v[po + off] - par[s]))


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False)
def charges(par, pa, v, po, q):
    """-a0*q/T per port into q[po], q[po + 1] (Qbe + Qbc into B', -Qbc into
    C': :func:`_charge` at port voltages v), with which the next sample's
    charge currents start; nothing when par[pa + 43] (a0/T)
    is 0."""
    it = par[pa + 43]
    if it == 0.0:
        return
    pol = par[pa + 0]
    vbe = pol * v[po]
    vbc = vbe - pol * v[po + 1]
    isat = par[pa + 1]
    cbe, gbe = junction(vbe, isat, par[pa + 4], par[pa + 12])
    cbc, gbc = junction(vbc, isat, par[pa + 5], par[pa + 13])
    qb, dqbdve, dqbdvc = _base_charge(par, pa, vbe, vbc, cbe, gbe, cbc, gbc)
    qbe, qbc, capbe, capbc, geqcb = _charge(par, pa, vbe, vbc, cbe, gbe, cbc, gbc,
                                            qb, dqbdve, dqbdvc)
    q[po] = -it * pol * (qbe + qbc)
    q[po + 1] = it * pol * qbc
    for k in range(2):
        off = int(par[pa + 57 + k])
        if off > 0:
            qx, cx = _outer_charge(par, pa, k, pol * v[po + off])
            q[po + off] = -it * pol * qx


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def _outer_charge(par, pa, k, vx):
    """The charge and capacitance of a charge-only port at its folded
    voltage vx (bjtload.c): k = 0 the external share of CJC across (B, C')
    (qbx, capbx: CJC's grading and FC linearisation), k = 1 CJS across
    (C', ground) (qsub, capsub: the substrate voltage is the negative of
    the port's, linearised above 0 V, so F1 = 0 and F2 = 1)."""
    if k == 0:
        return depletion_charge(vx, par[pa + 59], par[pa + 30], par[pa + 31], par[pa + 36],
                                par[pa + 46], par[pa + 47])
    qs, cs = depletion_charge(-vx, par[pa + 33], par[pa + 34], par[pa + 35], 0.0, 0.0, 1.0)
    return -qs, cs


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def _base_charge(par, pa, vbe, vbc, cbe, gbe, cbc, gbc):
    """qb and its derivatives w.r.t. Vbe and Vbc (Gummel-Poon, as
    :func:`_gummel_poon`)."""
    q1i = 1.0 - vbc * par[pa + 6] - vbe * par[pa + 7]
    if q1i < 1e-3:
        q1i = 1e-3
    q1 = 1.0 / q1i
    oik = par[pa + 14]
    oikr = par[pa + 15]
    arg = 1.0 + 4.0 * (oik * cbe + oikr * cbc)
    if arg < 0.0:
        arg = 0.0
    sq = math.sqrt(arg) if arg != 0.0 else 1.0
    qb = q1 * (1.0 + sq) * 0.5
    return (qb, q1 * (qb * par[pa + 7] + oik * gbe / sq),
            q1 * (qb * par[pa + 6] + oikr * gbc / sq))


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
    it = par[pa + 43]
    if it != 0.0:
        # charge storage: a0*q(v)/T per port plus the history of earlier
        # samples' charges, which the kernel takes into p (BDF2, see
        # ``charges``); Qbe + Qbc flow
        # into B', -Qbc into C'
        if not hi:
            qb, dqbdve, dqbdvc = _base_charge(par, pa, vbe, vbc, cbe, gbe, cbc, gbc)
        qbe, qbc, capbe, capbc, geqcb = _charge(par, pa, vbe, vbc, cbe, gbe, cbc, gbc,
                                                qb, dqbdve, dqbdvc)
        qn0 = pol * it * (qbe + qbc)
        qn1 = -pol * it * qbc
        c00 = it * (capbe + geqcb + capbc)
        c01 = -it * (geqcb + capbc)
        c10 = -it * capbc
        c11 = it * capbc
        i[po] += qn0
        i[po + 1] += qn1
        G[po, po] += c00
        G[po, po + 1] += c01
        G[po + 1, po] += c10
        G[po + 1, po + 1] += c11
        keep_charge(par, pa + 49, v[po], v[po + 1], qn0, qn1, c00, c01, c10, c11)
        for j in range(2):
            off = int(par[pa + 57 + j])
            if off > 0:
                # a charge-only port: its charge current and nothing else
                n = po + off
                for r in range(n - po):
                    G[n, po + r] = 0.0
                    G[po + r, n] = 0.0
                qx, cx = _outer_charge(par, pa, j, pol * v[n])
                s = pa + 60 + 3 * j
                par[s] = v[n]
                par[s + 1] = pol * it * qx
                par[s + 2] = it * cx
                i[n] = par[s + 1]
                G[n, n] = par[s + 2]
    else:
        for j in range(2):
            off = int(par[pa + 57 + j])
            if off > 0:
                # no charge at DC: the port carries nothing
                n = po + off
                for r in range(n - po + 1):
                    G[n, po + r] = 0.0
                    G[po + r, n] = 0.0
                i[n] = 0.0
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
           "EG": "eV", "TNOM": "°C", "CJE": "F", "VJE": "V", "TF": "s", "VTF": "V",
           "ITF": "A", "CJC": "F", "VJC": "V", "TR": "s", "CJS": "F", "VJS": "V"},
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
