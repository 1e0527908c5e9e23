"""Junction diode: Shockley law with SPICE ``.model D`` parameters.

Port 0 = (anode', cathode); with RS > 0 an internal anode node is created and
RS becomes a linear resistor.  Current law as in ngspice dioload.c: forward
IS*(exp(v/(N*VT)) - 1), reverse-bias approximation below -3*N*VT, optional
breakdown at BV (current IBV there, emission coefficient NBV, default N),
GMIN across the junction.  Temperature (ngspice diotemp.c, default law):
VT = kT/q at the circuit temperature, IS(T) = IS*exp((T/TNOM - 1)*EG/(N*VT)
+ XTI/N*ln(T/TNOM)).  Charge storage (as dioload.c; ``capacitances`` at an
operating point for the AC analysis, the charge itself by BDF2 in
the time domain, see ``evaluate`` and ``charges``): depletion capacitance
CJO*(1 - v/VJ)**-M below FC*VJ, continued linearly above it, plus the
diffusion charge TT*Id; CJO and VJ follow the default temperature law
(diotemp.c, TLEVC = 0).
"""
from __future__ import annotations

import math

import numpy as np
from solderless.engine.lazyjit import njit  # numba on first need (lazyjit)

from solderless.engine.devices._common import (EXPLIM, GMIN, DeviceLayout, circuit_temp,
                                    depletion_cap, depletion_charge, depletion_consts,
                                    junction, junction_py, junction_temp,
                                    lexp, model_tnom, pnjlim, read_params, temp_factors,
                                    vcrit)
from solderless.engine.analysis import regions
from solderless.engine.devices.registry import DeviceKind

KIND = "D"
CODE = 1
NPORTS = 1
#: par slot of the kernel's a0/T (charge storage in ``evaluate``)
CHARGE_SLOT = 12
#: the layout takes the circuit temperature (degrees Celsius)
TEMPERATURE = True
#: simulated parameters and their defaults (ngspice manual, diode model table)
DEFAULTS = {"IS": 1e-14, "N": 1.0, "RS": 0.0, "BV": math.inf, "IBV": 1e-3,
            "NBV": math.nan, "EG": 1.11, "XTI": 3.0, "TNOM": 27.0,
            # charge storage
            "CJO": 0.0, "VJ": 1.0, "M": 0.5, "FC": 0.5, "TT": 0.0}
_TEMPCO = "temperature coefficient (drift away from TNOM)"
#: standard parameters that are read but not simulated, and what they affect
IGNORED = {
    "CJP": "sidewall capacitance", "PHP": "sidewall capacitance",
    "MJSW": "sidewall capacitance", "FCS": "sidewall capacitance",
    "JSW": "sidewall saturation current", "NS": "sidewall saturation current",
    "IKF": "forward high-injection knee (current at large forward bias)",
    "IKR": "reverse high-injection knee",
    "ISR": "recombination current at low forward bias",
    "NR": "recombination current at low forward bias",
    "IBVL": "low-level breakdown current", "NBVL": "low-level breakdown current",
    "KF": "flicker noise", "AF": "flicker noise",
    "TLEV": "temperature law selection (the default law is simulated)",
    "TLEVC": "temperature law of the capacitances",
    "LM": "geometry scaling", "LP": "geometry scaling", "WM": "geometry scaling",
    "WP": "geometry scaling", "XOM": "geometry scaling", "XOI": "geometry scaling",
    "XM": "geometry scaling", "XP": "geometry scaling", "XW": "geometry scaling",
    "AREA": "area scaling", "PJ": "perimeter scaling",
    **{k: _TEMPCO for k in ("TCV", "TRS", "TRS1", "TRS2", "TM1", "TM2", "TTT1", "TTT2",
                            "CTA", "CTP", "TPB", "TPHP", "TBV1", "TBV2", "TIKF")},
    "BV_MAX": "rating only", "FV_MAX": "rating only", "ID_MAX": "rating only",
    "PD_MAX": "rating only", "TE_MAX": "rating only", "MFG": "label only",
    "IAVE": "rating only", "VPK": "rating only", "IPK": "rating only",
}
#: other spellings SPICE accepts
ALIASES = {"CJ0": "CJO", "CJ": "CJO", "JS": "IS", "CJSW": "CJP"}
#: every standard parameter of the model card (simulated or not)
STANDARD = set(DEFAULTS) | set(IGNORED)
# par: 0 IS(T), 1 vte, 2 vcrit, 3 xbv (inf: no breakdown), 4 1/vte, 5 NBV*vt,
# 6 1/(NBV*vt); charge storage (``capacitances`` at an operating point; the
# kernel's nonlinear charge with slot 12 set): 7 CJO(T), 8 VJ(T), 9 M, 10 FC,
# 11 TT, 12 a0/T (the kernel's step and rule, kernel_layout.CHARGE_A0; 0: no
# charge in ``evaluate``, as in the
# operating point's solver), 13 F1, 14 1/F2 (depletion_consts); written by
# ``evaluate`` for ``history``: 15 the port voltage, 16 a0*q/T and 17 a0*C/T there
NPAR = 18


def breakdown_knee(bv: float, ibv: float, isat: float, vt: float, nbv: float) -> float:
    """The junction voltage xbv where the breakdown exponential takes over, so
    that the current at -BV is IBV (ngspice diotemp.c: its fixed-point
    iteration, run to convergence)."""
    cbv = ibv
    if cbv < isat * bv / vt:
        return bv
    xbv = bv - nbv * vt * math.log(1.0 + cbv / isat)
    for _ in range(50):
        xbv = bv - nbv * vt * math.log(cbv / isat + 1.0 - xbv / vt)
        xcbv = isat * (math.exp((bv - xbv) / (nbv * vt)) - 1.0 + xbv / vt)
        if abs(xcbv - cbv) <= 1e-9 * cbv:
            break
    return xbv


def layout(el, temp=None) -> DeviceLayout:
    """Validate the element's model and describe its ports and stamps;
    ``temp`` is the circuit temperature in degrees Celsius (None: 27)."""
    notes: list = []
    p = read_params(el, DEFAULTS, positive=("IS", "N", "IBV", "VJ"),
                    nonneg=("RS", "XTI", "CJO", "M", "FC", "TT"),
                    ignored=IGNORED, aliases=ALIASES, notes=notes)
    a, k = el.nodes
    # temperature (ngspice diotemp.c, TLEV=0)
    vt, ratlog, ratio1 = temp_factors(circuit_temp(temp), model_tnom(p))
    vte = p["N"] * vt
    isat = p["IS"] * math.exp(ratio1 * p["EG"] / vte + p["XTI"] / p["N"] * ratlog)
    nbv = p["N"] if math.isnan(p["NBV"]) else p["NBV"]
    xbv = math.inf
    if math.isfinite(p["BV"]):
        xbv = breakdown_knee(p["BV"], p["IBV"], isat, vt, nbv)
    stamps, internal = [], []
    ai = a
    if p["RS"] > 0:
        ai = f"{el.name}#a"
        internal.append(ai)
        stamps.append(("R", a, ai, p["RS"]))
    # charge storage (diotemp.c): M limited to 0.9, FC*VJ to 1
    mj = min(p["M"], 0.9)
    fc = min(p["FC"], 0.95)
    cjo, vj = junction_temp(p["CJO"], p["VJ"], mj, circuit_temp(temp), model_tnom(p))
    if fc * vj > 1.0:
        vj = 1.0 / fc
    par = np.array([isat, vte, vcrit(vte, isat), xbv, 1.0 / vte, nbv * vt,
                    1.0 / (nbv * vt), cjo, vj, mj, fc, p["TT"], 0.0,
                    *depletion_consts(vj, mj, fc), 0.0, 0.0, 0.0])
    caps = [(ai, k, ai, k)] if (p["CJO"] > 0 or p["TT"] > 0) else []
    return DeviceLayout(CODE, [(ai, k)], par, internal, stamps,
                        probes={"id": ({0: 1.0}, {}), "vd": ({}, {0: 1.0})},
                        quiet_step=2.0 * vte, ignored=notes, caps=caps,
                        kernel_caps=[True] * len(caps))


def capacitances(par, v, vc) -> np.ndarray:
    """Junction capacitance (farads) at port voltage v[0]: depletion (with
    the FC linearisation) plus TT times the junction's conductance
    (dioload.c's capd)."""
    vd = float(v[0])
    if vd < -par[3]:   # breakdown: the law of ``evaluate``
        x = -(par[3] + vd) * par[6]
        gd = par[0] * math.exp(min(x, EXPLIM)) * par[6]
    else:
        gd = junction_py(vd, par[0], par[1])[1]
    return np.array([par[11] * (gd + GMIN) + depletion_cap(vd, par[7], par[8], par[9],
                                                           par[10])])


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def evaluate(par, pa, v, po, i, G):
    """Junction current and conductance at port voltage v[po]."""
    vd = v[po]
    isat = par[pa + 0]
    vte = par[pa + 1]
    xbv = par[pa + 3]
    rvte = par[pa + 4]
    if vd < -xbv:
        rvb = par[pa + 6]
        e, de = lexp(-(xbv + vd) * rvb)
        c = -isat * e
        g = isat * de * rvb
    else:
        c, g = junction(vd, isat, vte, rvte)
    c += GMIN * vd
    g += GMIN
    it = par[pa + 12]
    if it != 0.0:
        # charge storage: a0*q(v)/T; the history of earlier samples'
        # charges (BDF2) the kernel takes into p (see ``charges``)
        qd, cd = depletion_charge(vd, par[pa + 7], par[pa + 8], par[pa + 9], par[pa + 10],
                                  par[pa + 13], par[pa + 14])
        tt = par[pa + 11]
        qt = it * (qd + tt * c)
        ct = it * (cd + tt * g)
        par[pa + 15] = vd
        par[pa + 16] = qt
        par[pa + 17] = ct
        c += qt
        g += ct
    i[po] = c
    G[po, po] = g


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def history(par, pa, v, po, q):
    """-a0*q(v)/T into q[po] from the charge ``evaluate`` last computed,
    continued to v with its capacitance (the solver's own linearisation
    of the port current there): the kernel's per-sample form of
    :func:`charges`, without a second evaluation."""
    if par[pa + 12] != 0.0:
        q[po] = -(par[pa + 16] + par[pa + 17] * (v[po] - par[pa + 15]))


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False)
def charges(par, pa, v, po, q):
    """-a0*q(v)/T into q[po]: the junction's charge (depletion plus TT
    times its current, dioload.c) over the kernel's step, from which the next
    sample's charge current starts; nothing when par[pa + 12] (a0/T) is 0."""
    it = par[pa + 12]
    if it == 0.0:
        return
    vd = v[po]
    xbv = par[pa + 3]
    if vd < -xbv:
        e, de = lexp(-(xbv + vd) * par[pa + 6])
        c = -par[pa + 0] * e
    else:
        c, g = junction(vd, par[pa + 0], par[pa + 1], par[pa + 4])
    qd, cd = depletion_charge(vd, par[pa + 7], par[pa + 8], par[pa + 9], par[pa + 10],
                              par[pa + 13], par[pa + 14])
    q[po] = -it * (qd + par[pa + 11] * (c + GMIN * vd))


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


# --------------------------------------------------------------------------
# The device's description (solderless.engine.devices.registry)

def report(q, el, par, v, i, G, region):
    """Operating-point region (solderless.engine.analysis.regions): forward
    from DIODE_ON, breakdown past BV, else reverse or off."""
    bv = (el.params or {}).get("BV")
    return regions.diode_region(q.get("vd", 0.0), q.get("id", 0.0),
                                float(bv) if bv not in (None, 0) else None)


DEVICE = DeviceKind(
    kind=KIND, terminals=("a", "k"), title="diode",
    model_types={"D": 1.0}, part_types={"diode": "D"}, part_nodes=("anode", "cathode"),
    letter="D", params=DEFAULTS, aliases=ALIASES, ignored=IGNORED,
    units={"IS": "A", "RS": "Ω", "BV": "V", "IBV": "A", "EG": "eV", "TNOM": "°C",
           "CJO": "F", "VJ": "V", "TT": "s"},
    # ranges of real parts (common practice, solderless/engine/sanity.py)
    ranges={"IS": (1e-21, 1e-2), "N": (0.5, 4.0), "RS": (0.0, 1e6), "BV": (0.1, None)},
    also_read=frozenset({"BVJ", "DSKIP", "EGAP", "GAP1", "GAP2", "IK", "LEVEL", "PDMAX",
                         "TT1", "TT2", "TYPE", "VP"}),
    probes={"id": "A", "vd": "V"}, report=report, health=regions.diode_health,
    ratings=("IAVE", "VPK", "PDMAX"))
