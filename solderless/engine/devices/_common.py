"""Shared pieces of the device models: thermal voltage, junction law, limiting.

Everything numeric here is compiled with numba (``nogil=True, cache=True``)
and is called per sample from the solver kernel.

References
----------
- Junction law, reverse-bias approximation and GMIN across each junction as in
  SPICE3/ngspice (dioload.c, bjtload.c).
- Junction voltage limiting ``pnjlim``: L. W. Nagel, "SPICE2: A computer
  program to simulate semiconductor circuits", ERL-M520, UC Berkeley, 1975.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from solderless.engine.lazyjit import njit  # numba on first need (lazyjit)

from solderless.engine.errors import DesignError

#: Nominal device temperature, K (27 degC, the SPICE default TNOM and
#: circuit temperature).
TNOM = 300.15
#: 0 degC in kelvin.
KELVIN = 273.15
#: Boltzmann constant k, J/K, and elementary charge q, C: exact by definition
#: in the SI since 2019 (BIPM, The International System of Units, 9th ed.,
#: 2019), the values of scipy.constants.k and .e (CODATA 2018), written out
#: so a start-up does not import scipy.constants (~70 ms).
K_BOLTZMANN = 1.380649e-23
Q_ELEMENTARY = 1.602176634e-19
#: k/q, volts per kelvin.
K_OVER_Q = K_BOLTZMANN / Q_ELEMENTARY
#: Thermal voltage k*T/q at TNOM, volts.
VT = K_BOLTZMANN * TNOM / Q_ELEMENTARY


def circuit_temp(temp_c) -> float:
    """Circuit temperature in kelvin from degrees Celsius (None: 27 degC)."""
    return TNOM if temp_c is None else float(temp_c) + KELVIN


def model_tnom(p: dict) -> float:
    """A model card's TNOM (degrees Celsius in the card) in kelvin."""
    return float(p.get("TNOM", TNOM - KELVIN)) + KELVIN
#: Conductance SPICE places across every junction, siemens.
GMIN = 1e-12
#: Exponent beyond which exp() is continued linearly (keeps values finite).
EXPLIM = 80.0


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False)
def lexp(x):
    """exp(x) continued linearly above EXPLIM; returns (value, derivative)."""
    if x > EXPLIM:
        e = math.exp(EXPLIM)
        return e * (1.0 + x - EXPLIM), e
    e = math.exp(x)
    return e, e


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False)
def junction(v, isat, vte, rvte):
    """Shockley junction current and conductance as in ngspice (no GMIN).

    Forward and mild reverse: I = IS*(exp(v/vte) - 1).  Below -3*vte the
    reverse-bias approximation I = -IS*(1 + (3*vte/(v*e))**3) is used.
    rvte = 1/vte, kept in the device's parameters: a multiplication costs a
    fraction of a division, and the device laws run several per junction
    at every Newton iteration.
    """
    if v >= -3.0 * vte:
        e, de = lexp(v * rvte)
        return isat * (e - 1.0), isat * de * rvte
    rv = 1.0 / v
    a = (3.0 / math.e) * vte * rv
    a = a * a * a
    return -isat * (1.0 + a), isat * 3.0 * a * rv


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False)
def pnjlim(vnew, vold, vt, vcrit):
    """SPICE2 junction voltage limiting (Nagel 1975), with ngspice's
    reverse-step limit (DEVpnjlim in ngspice's src/spicelib/devices/devsup.c).

    Above ``vcrit`` a Newton step larger than 2*vt is compressed
    logarithmically.  A step into reverse bias goes no further than
    -(vold + 1) V from a forward-biased junction, or 2*vold - 1 V from a
    reverse-biased one: a junction that was conducting is not thrown volts
    into cut-off by one linearised step (at a note's attack such steps
    bounced between the two rectifier transistors of a detector for 8-30
    iterations).  The fixed point (the answer) is unchanged.
    """
    if vnew > vcrit and abs(vnew - vold) > 2.0 * vt:
        if vold > 0.0:
            arg = 1.0 + (vnew - vold) / vt
            if arg > 0.0:
                return vold + vt * math.log(arg)
            return vcrit
        return vt * math.log(vnew / vt)
    if vnew < 0.0:
        floor = -vold - 1.0 if vold > 0.0 else 2.0 * vold - 1.0
        if vnew < floor:
            return floor
    return vnew


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def limit_two_junctions(vn, vo, po, pol, vt1, vcrit1, vt2, vcrit2):
    """pnjlim on both junctions of a three-terminal device whose ports are
    (control, common) at ``po`` and (output, common) at ``po + 1``: junction 1
    is control-common (Vbe, Vgs), junction 2 control-output (Vbc, Vgd).
    ``pol`` is +1 for N-type, -1 for P-type. Updates vn in place."""
    j1_n = pol * vn[po]
    j1_o = pol * vo[po]
    j2_n = j1_n - pol * vn[po + 1]
    j2_o = j1_o - pol * vo[po + 1]
    a = pnjlim(j1_n, j1_o, vt1, vcrit1)
    b = pnjlim(j2_n, j2_o, vt2, vcrit2)
    vn[po] = pol * a
    vn[po + 1] = pol * (a - b)


def vcrit(vte: float, isat: float) -> float:
    """Critical voltage of a junction: vte*ln(vte/(sqrt(2)*IS)) (SPICE2)."""
    return vte * math.log(vte / (math.sqrt(2.0) * isat))


@dataclass
class DeviceLayout:
    """What a device contributes to the flat network.

    ports : node pairs (pos, neg); the device senses v(pos)-v(neg) and draws
        current from pos through itself into neg.
    internal : internal node names created by the device.
    stamps : linear stamps, tuples ("R", a, b, ohm) | ("C", a, b, F, method)
        | ("G", p, n, cp, cn, siemens) with method "trap" or "be".
    par : flat float64 parameter vector read by the compiled model.
    probes : probe kind -> (port-current coefficients, port-voltage
        coefficients), each a dict {port index: coefficient}.
    quiet_step : a Newton step that moves none of the port voltages by this
        much (volts) or more is left unchanged by the device's ``limit``, so
        the kernel skips the call (0: always call).
    """
    code: int
    ports: list[tuple[str, str]]
    par: np.ndarray
    internal: list[str] = field(default_factory=list)
    stamps: list[tuple] = field(default_factory=list)
    probes: dict[str, tuple[dict[int, float], dict[int, float]]] = field(default_factory=dict)
    quiet_step: float = 0.0
    #: standard model parameters given but not simulated: [(name, what it affects)]
    ignored: list[tuple[str, str]] = field(default_factory=list)
    #: junction capacitances (charge storage): node names (p, n, cp, cn) per
    #: entry; the current C*d(v(cp) - v(cn))/dt flows from p through the
    #: device to n (cp, cn = p, n: a plain capacitor; else a
    #: transcapacitance).  The module's ``capacitances(par, v, vc)`` gives
    #: the values at port voltages v and entry voltages vc = v(cp) - v(cn).
    caps: list[tuple[str, str, str, str]] = field(default_factory=list)
    #: per entry of ``caps``, whether the kernel integrates it as a
    #: nonlinear charge across the device's own ports (the module's
    #: ``evaluate`` and ``charges`` with the step in par[CHARGE_SLOT]; see
    #: "Junction charge storage" in DEVELOPERS.md); the others are linear
    #: capacitors taken at the operating point (empty: all of them)
    kernel_caps: list[bool] = field(default_factory=list)
    #: per port, the open interval (lo, hi) of port voltage inside which the
    #: device draws exactly no current and has exactly zero conductance
    #: while every other port of the device is inside its own (None: no
    #: such zone).  The port solve then drops the device's ports while
    #: they stay there (solver/dormant.py).
    dead: list[tuple[float, float]] | None = None


def read_params(el, defaults: dict[str, float], *, positive=(), nonneg=(),
                allowed_extra=("TYPE", "MODEL", "LEVEL", "OFF"), ignored=None,
                aliases=None, notes=None) -> dict[str, float]:
    """Merge element params over defaults, validating names and values.

    Unknown parameter names and out-of-range values raise DesignError naming
    the part and where it was written.  ``ignored`` maps standard parameter
    names the device does not simulate to what they affect; such a
    parameter is accepted and appended to ``notes`` as (name, effect), so
    the operating-point report can name it.  ``aliases`` maps other spellings
    SPICE accepts to the name in ``defaults``.
    """
    out = dict(defaults)
    where = el.where
    f = getattr(where, "file", None) if where else None
    ln = getattr(where, "line", None) if where else None
    ignored = ignored or {}
    aliases = aliases or {}
    for key, val in (el.params or {}).items():
        k = str(key).upper()
        k = aliases.get(k, k)
        if k in allowed_extra:
            continue
        if k not in defaults and k in ignored:
            if notes is not None:
                notes.append((k, ignored[k]))
            continue
        if k not in defaults:
            raise DesignError(f"unknown model parameter {key!r} for a {el.kind} device",
                              file=f, line=ln, part=el.name,
                              hint="known: " + ", ".join(sorted(defaults)))
        try:
            v = float(val)
        except (TypeError, ValueError):
            raise DesignError(f"model parameter {k} must be a number, got {val!r}",
                              file=f, line=ln, part=el.name) from None
        if not math.isfinite(v) and not (math.isinf(v) and v > 0):
            raise DesignError(f"model parameter {k} is not finite", file=f, line=ln,
                              part=el.name)
        out[k] = v
    for k in positive:
        if not out[k] > 0:
            raise DesignError(f"model parameter {k} must be > 0, got {out[k]:g}",
                              file=f, line=ln, part=el.name)
    for k in nonneg:
        if not out[k] >= 0:
            raise DesignError(f"model parameter {k} must be >= 0, got {out[k]:g}",
                              file=f, line=ln, part=el.name)
    return out


def polarity(el, names: tuple[str, str]) -> float:
    """+1 for the first type name (NPN/NJF), -1 for the second (PNP/PJF)."""
    t = str((el.params or {}).get("TYPE", names[0])).upper()
    if t == names[0]:
        return 1.0
    if t == names[1]:
        return -1.0
    w = el.where
    raise DesignError(f"TYPE must be {names[0]} or {names[1]}, got {t!r}",
                      file=getattr(w, "file", None), line=getattr(w, "line", None),
                      part=el.name)


#: Model parameters that act only when noise is simulated (the noise analysis
#: and renders or play with noise on), not in a plain render: flicker noise.
NOISE_ONLY = frozenset({"KF", "AF"})


def ignored_note(el, notes: list[tuple[str, str]]) -> list[tuple[str, str]]:
    """Group ignored parameters by what they affect: [(names, effect)]."""
    by: dict[str, list[str]] = {}
    for name, effect in notes:
        by.setdefault(effect, [])
        if name not in by[effect]:
            by[effect].append(name)
    return [(", ".join(v), k) for k, v in by.items()]


def temp_factors(temp_k: float, tnom_k: float):
    """(vt at temp, ln(T/TNOM), T/TNOM - 1) for the SPICE temperature laws."""
    return K_BOLTZMANN * temp_k / Q_ELEMENTARY, math.log(temp_k / tnom_k), temp_k / tnom_k - 1.0


# ---------------------------------------------------------------------------
# Junction charge storage (plain Python: evaluated at an operating point,
# not per sample).  SPICE2's depletion-capacitance law with the forward-bias
# linearisation above FC*VJ (Nagel 1975; ngspice dioload.c/bjtload.c).

def junction_py(v: float, isat: float, vte: float) -> tuple[float, float]:
    """:func:`junction` in plain Python (current and conductance), for the
    capacitance functions, which run once per operating point: calling a
    compiled function from Python would load it at start-up for nothing."""
    if v >= -3.0 * vte:
        x = v / vte
        if x > EXPLIM:
            e = math.exp(EXPLIM)
            return isat * (e * (1.0 + x - EXPLIM) - 1.0), isat * e / vte
        e = math.exp(x)
        return isat * (e - 1.0), isat * e / vte
    a = (3.0 / math.e) * vte / v
    a = a * a * a
    return -isat * (1.0 + a), isat * 3.0 * a / v


def depletion_cap(v: float, cz: float, pb: float, m: float, fc: float) -> float:
    """Depletion capacitance of a junction at bias v: cz*(1 - v/pb)**-m below
    fc*pb, continued linearly above it as SPICE does,
    cz/(1 - fc)**(1 + m)*(1 - fc*(1 + m) + m*v/pb)."""
    if cz == 0.0:
        return 0.0
    if v < fc * pb:
        return cz * (1.0 - v / pb) ** (-m)
    f2 = (1.0 - fc) ** (1.0 + m)
    return cz / f2 * (1.0 - fc * (1.0 + m) + m * v / pb)


def depletion_consts(pb: float, m: float, fc: float) -> tuple[float, float]:
    """F1 and 1/F2 of SPICE's depletion charge above FC*VJ (ngspice
    diotemp.c/bjttemp.c): F1 = VJ*(1 - (1 - FC)**(1 - M))/(1 - M),
    F2 = (1 - FC)**(1 + M)."""
    om = max(1.0 - m, 1e-9)
    return pb * (1.0 - (1.0 - fc) ** om) / om, 1.0 / (1.0 - fc) ** (1.0 + m)


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def depletion_charge(v, cz, pb, m, fc, f1, rf2):
    """Depletion charge and capacitance of a junction at bias v, as ngspice
    dioload.c and bjtload.c integrate it: below FC*VJ
    q = VJ*CJ*(1 - (1 - v/VJ)**(1 - M))/(1 - M), C = CJ*(1 - v/VJ)**-M;
    above, the charge of the linearised capacitance,
    q = CJ*F1 + CJ/F2*(F3*(v - FC*VJ) + M/(2 VJ)*(v**2 - (FC*VJ)**2)),
    C = CJ/F2*(F3 + M*v/VJ), F3 = 1 - FC*(1 + M) (f1 = F1, rf2 = 1/F2 from
    :func:`depletion_consts`)."""
    if cz == 0.0:
        return 0.0, 0.0
    fcp = fc * pb
    if v < fcp:
        arg = 1.0 - v / pb
        if m == 0.5:     # the common grading (diode default, JFET): one root
            sq = math.sqrt(arg)
            return 2.0 * pb * cz * (1.0 - sq), cz / sq
        sarg = math.exp(-m * math.log(arg))
        om = 1.0 - m
        if om < 1e-9:
            om = 1e-9
        return pb * cz * (1.0 - arg * sarg) / om, cz * sarg
    czf2 = cz * rf2
    f3 = 1.0 - fc * (1.0 + m)
    return (cz * f1 + czf2 * (f3 * (v - fcp) + m / (pb + pb) * (v * v - fcp * fcp)),
            czf2 * (f3 + m * v / pb))


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def keep_charge(par, k, v0, v1, q0, q1, c00, c01, c10, c11):
    """A two-port device's charge law at its last evaluation, kept in
    par[k:k + 8] for :func:`charge_history`: the port voltages, a0*q/T per
    port and the charges' Jacobian times a0/T (a0 = kernel_layout.CHARGE_A0)."""
    par[k] = v0
    par[k + 1] = v1
    par[k + 2] = q0
    par[k + 3] = q1
    par[k + 4] = c00
    par[k + 5] = c01
    par[k + 6] = c10
    par[k + 7] = c11


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def charge_history(par, k, v, po, q):
    """-a0*q(v)/T per port of a two-port device into q[po], q[po + 1], from
    the law kept by :func:`keep_charge`, continued to v to first order
    (the solver's own linearisation of the port currents there; the
    second-order rest is below the solver's tolerance times a0*C/T)."""
    d0 = v[po] - par[k]
    d1 = v[po + 1] - par[k + 1]
    q[po] = -(par[k + 2] + par[k + 4] * d0 + par[k + 5] * d1)
    q[po + 1] = -(par[k + 3] + par[k + 6] * d0 + par[k + 7] * d1)


def junction_temp(cj: float, vj: float, m: float, temp_k: float,
                  tnom_k: float) -> tuple[float, float]:
    """Zero-bias capacitance and built-in potential at temp_k from their
    values at tnom_k: SPICE's default law (ngspice diotemp.c, jfettemp.c,
    bjttemp.c with TLEVC = 0): the potential follows the silicon band gap
    1.16 - 7.02e-4*T**2/(T + 1108) eV, the capacitance
    1 + m*(4e-4*(T - 300.15) - (pb(T) - pbo)/pbo), with the reference
    potential pbo taken back from TNOM (ngspice-39's BJT does the same:
    checked against its AC at 0 and 60 degC in tests/test_charge_storage.py)."""
    def pbfact(t):
        eg = 1.16 - 7.02e-4 * t * t / (t + 1108.0)
        arg = -eg / (2.0 * K_BOLTZMANN * t) + 1.1150877 / (K_BOLTZMANN * 2.0 * TNOM)
        return -2.0 * K_OVER_Q * t * (1.5 * math.log(t / TNOM) + Q_ELEMENTARY * arg)
    fact1 = tnom_k / TNOM
    pbo = (vj - pbfact(tnom_k)) / fact1
    gmaold = (vj - pbo) / pbo
    c = cj / (1.0 + m * (4e-4 * (tnom_k - TNOM) - gmaold))
    pb = temp_k / TNOM * pbo + pbfact(temp_k)
    gmanew = (pb - pbo) / pbo
    return c * (1.0 + m * (4e-4 * (temp_k - TNOM) - gmanew)), pb
