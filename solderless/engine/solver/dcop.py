"""DC operating point: Newton on the full MNA system, SPICE practice.

Capacitors open, inductors shorted, sources at their t=0 values.  Devices
are linearised at junction-limited voltages each iteration (companion
model, as SPICE does; limiting by pnjlim, Nagel 1975).  If plain Newton
fails: gmin stepping (a shunt conductance from every net to ground, reduced
a decade at a time to zero), then source stepping (all sources ramped from
0 to full value).  Returns node voltages, device port voltages/currents,
device regions and warnings.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from solderless.engine.circuit import GROUND, canonical_net
from solderless.engine.devices._common import NOISE_ONLY, ignored_note
from solderless.engine.errors import SolveError
from solderless.engine.solver.mna import Network, device_arrays
from solderless.engine.solver.statespace import solve_mna

RAIL_MARGIN = 0.3  # V: closer than this to a supply rail is reported


@dataclass
class DCSolution:
    """Raw DC solution: MNA vector w, port voltages v and currents i, Jacobian G."""
    w: np.ndarray
    v: np.ndarray
    i: np.ndarray
    G: np.ndarray
    iterations: int
    method: str


def _newton(net, S, Bu, Bn, P, u, arrays, v0, maxit=150, off=None, extra=None):
    """Newton from port voltages v0.  ``off``: boolean mask of ports whose
    device is held at zero bias (SPICE's OFF during its first, "fixed"
    phase); ``extra``: a right-hand side added to the MNA system (the
    hold of .nodeset/.ic nets, whose conductance is already in S)."""
    dcode, dpo, dnp, dpa, par, _ = arrays
    npt = net.np_
    from solderless.engine.solver.aot import kernels   # compiled ahead of time, or JIT
    kern = kernels()
    eval_devices, limit_devices = kern.eval_devices, kern.limit_devices
    v = v0.copy()
    i = np.zeros(npt)
    G = np.zeros((npt, npt))
    w_old = None
    for it in range(1, maxit + 1):
        if off is not None:
            v[off] = 0.0
        eval_devices(dcode, dpo, dpa, par, v, i, G)
        J = S - Bn @ G @ P
        rhs = Bu @ u + Bn @ (i - G @ v)
        if extra is not None:
            rhs = rhs + extra
        try:
            w = np.linalg.solve(J, rhs)
        except np.linalg.LinAlgError:
            return None
        if not np.all(np.isfinite(w)):
            return None
        vn = P @ w
        vl = vn.copy()
        limit_devices(dcode, dpo, dpa, par, vl, v)
        dv = np.abs(vn - v)
        if off is not None:
            dv[off] = 0.0
        conv = np.all(dv <= 1e-9 + 1e-6 * np.abs(vn))
        if w_old is not None:
            conv = conv and np.all(np.abs(w - w_old) <= 1e-12 + 1e-6 * np.abs(w))
        else:
            conv = conv and npt == 0
        v = vl
        w_old = w
        if conv:
            if off is not None:
                v = vn  # the held devices' actual port voltages
            eval_devices(dcode, dpo, dpa, par, v, i, G)
            return DCSolution(w, v, i.copy(), G.copy(), it, "newton")
    return None


#: Conductance that holds a .nodeset/.ic net at its value, siemens (ngspice
#: uses the same 1e10 on the matrix diagonal).
HOLD_G = 1e10


def _held(net, S, table):
    """S with HOLD_G from each net of ``table`` to ground, and the matching
    right-hand side."""
    extra = np.zeros(S.shape[0])
    S = S.copy()
    for n, val in table.items():
        k = net.net_index.get(n)
        if k is None:
            continue
        S[k, k] += HOLD_G
        extra[k] += HOLD_G * float(val)
    return S, extra


def off_ports(net) -> np.ndarray | None:
    """Boolean mask of the ports of devices marked OFF, or None."""
    mask = np.zeros(net.np_, dtype=bool)
    for el, _mod, lay, po in net.devices:
        if (el.params or {}).get("OFF"):
            mask[po:po + len(lay.ports)] = True
    return mask if mask.any() else None


def solve_dc(net: Network, values: dict[str, float] | None = None,
             u: np.ndarray | None = None, v0: np.ndarray | None = None,
             initial: bool = False) -> DCSolution:
    """DC solution as ngspice finds it: devices marked OFF held at zero
    bias and .nodeset nets held at their values until a first solution
    converges, then released and solved again from there (ngspice's
    INITFIX then INITFLOAT phases).  ``initial``: the starting point of a
    render (ngspice's transient operating point), which also holds the
    .ic nets at their values throughout."""
    values = dict(net.values if values is None else values)
    circ = net.circuit
    off = off_ports(net) if v0 is None else None
    nodeset = dict(getattr(circ, "nodeset", {}) or {}) if v0 is None else {}
    ic = dict(getattr(circ, "ic", {}) or {}) if initial else {}
    if off is None and not nodeset and not ic:
        return _solve(net, values, u, v0)
    if off is not None or nodeset:
        first = _solve(net, values, u, v0, off=off, hold={**nodeset, **ic})
        v0 = first.v
    return _solve(net, values, u, v0, hold=ic)


def _solve(net: Network, values: dict[str, float] | None = None,
           u: np.ndarray | None = None, v0: np.ndarray | None = None,
           off=None, hold=None) -> DCSolution:
    """One DC solve (Newton, then gmin and source stepping)."""
    values = dict(net.values if values is None else values)
    if u is None:
        u = net.source_values(0.0, values)
    arrays = device_arrays(net)
    Bu, Bn = net._bu, net._bn
    P = net.port_rows()
    S = net.build_S(values, None)
    extra = None
    if hold:
        S, extra = _held(net, S, hold)
    if net.np_ == 0:
        rhs = (Bu @ u)[:, None]
        if extra is not None:
            rhs = rhs + extra[:, None]
        w = solve_mna(net, S, rhs, "DC operating point")[:, 0]
        return DCSolution(w, np.zeros(0), np.zeros(0), np.zeros((0, 0)), 1, "linear")
    start = np.zeros(net.np_) if v0 is None else v0
    sol = _newton(net, S, Bu, Bn, P, u, arrays, start, off=off, extra=extra)
    if sol is not None:
        return sol
    # gmin stepping
    v = start.copy()
    ok = True
    for gs in [1e-2 / 10 ** k for k in range(11)] + [0.0]:
        Sg = net.build_S(values, None, gshunt=gs)
        if hold:
            Sg, _ = _held(net, Sg, hold)
        sol = _newton(net, Sg, Bu, Bn, P, u, arrays, v, off=off, extra=extra)
        if sol is None:
            ok = False
            break
        v = sol.v
    if ok:
        sol.method = "gmin stepping"
        return sol
    # source stepping
    v = np.zeros(net.np_)
    for lam in np.linspace(0.0, 1.0, 41)[1:]:
        sol = _newton(net, S, Bu, Bn, P, u * lam, arrays, v, maxit=300, off=off,
                      extra=None if extra is None else extra * lam)
        if sol is None:
            break
        v = sol.v
    else:
        sol.method = "source stepping"
        return sol
    # the circuit's title is not a part: name the file, not a culprit
    where = net.circuit.where
    raise SolveError("no DC operating point found (Newton, gmin stepping and source "
                     "stepping all failed)", file=where.file if where else None,
                     hint="check supply polarity, transistor types (NPN/PNP) and bias "
                          "resistor values")


@dataclass
class OperatingPoint:
    """DC operating point report.

    nets : {net: volts} for every user net (ground excluded).
    currents : {element: amps} through V, L, R elements (SPICE sign: into
        the first node).
    devices : {device: {quantity: value, "region": str}}.
    warnings : human-readable warnings (saturated/cut-off transistors,
        device outputs within 0.3 V of a supply rail, ratings exceeded).
    """
    nets: dict[str, float]
    devices: dict[str, dict]
    warnings: list[str]
    currents: dict[str, float] = field(default_factory=dict)
    method: str = "newton"

    def to_dict(self) -> dict:
        return {"nets": dict(self.nets), "currents": dict(self.currents),
                "devices": {k: dict(v) for k, v in self.devices.items()},
                "warnings": list(self.warnings), "method": self.method}


def report(net: Network, sol: DCSolution, values: dict[str, float]) -> OperatingPoint:
    """Turn a DC solution into an :class:`OperatingPoint` report."""
    w = sol.w
    nets = {net.net_names[k]: float(w[k]) for k in range(net.n_user_nets)}

    def vnet(n):
        n = canonical_net(n)
        return 0.0 if n == GROUND else float(w[net.net_index[n]])

    currents = {}
    for el in net.elements.values():
        if el.kind in ("V", "E", "L", "H"):
            currents[el.name] = float(w[net.branch_of[el.name]])
        elif el.kind == "F":
            currents[el.name] = values[el.name] * float(w[net.branch_of[el.params["CONTROL"]]])
        elif el.kind == "R":
            currents[el.name] = (vnet(el.nodes[0]) - vnet(el.nodes[1])) / values[el.name]
        elif el.kind == "C":
            currents[el.name] = 0.0
        elif el.kind == "I":
            currents[el.name] = values[el.name]
    rails = {}
    for el in net.elements.values():
        if el.kind == "V" and el.name != net.circuit.input_source:
            a, b = canonical_net(el.nodes[0]), canonical_net(el.nodes[1])
            if b == GROUND and a != GROUND:
                rails[a] = vnet(a)
            elif a == GROUND and b != GROUND:
                rails[b] = vnet(b)
    from solderless.engine.analysis import regions as R
    from solderless.engine.devices.registry import DEVICES
    ratings = getattr(net.circuit, "ratings", None) or {}
    devices, warnings = {}, []
    for el, mod, lay, po in net.devices:
        n = len(lay.ports)
        v = sol.v[po:po + n]
        i = sol.i[po:po + n]
        d = {}
        for q, (ci, cv) in lay.probes.items():
            d[q] = float(sum(c * i[k] for k, c in ci.items()) + sum(c * v[k] for k, c in cv.items()))
        Gb = sol.G[po:po + n, po:po + n]
        # the device's own report hook (its description in the registry):
        # derived quantities (gm, beta) and its region, by the one
        # classifier op, the workbench and the demo read (regions.py)
        dev = DEVICES[el.kind]
        base = mod.region(lay.par, v, i)
        d["region"] = dev.report(d, el, lay.par, v, i, Gb, base) if dev.report else base
        out_net = el.nodes[dev.output] if dev.output is not None else None
        off = el.name in (getattr(net.circuit, "off_by_design", None) or ())
        if off and d["region"] in ("cut-off", "off"):
            d["region"] += " (by design)"
        warnings += R.warnings_for(el.name, el.kind, d, d["region"].split(" (")[0],
                                   ratings.get(el.name), off)
        devices[el.name] = d
        noise_only = [(n, e) for n, e in lay.ignored if n in NOISE_ONLY]
        for names, effect in ignored_note(el, [ne for ne in lay.ignored
                                               if ne not in noise_only]):
            warnings.append(f"{el.name}: model parameter{'s' if ',' in names else ''} "
                            f"{names} not simulated (ignored): {effect}")
        if noise_only:
            names = ", ".join(dict.fromkeys(n for n, _ in noise_only))
            warnings.append(f"{el.name}: {names} (flicker noise) act only with noise on: "
                            "solderless hiss, or render/play --hiss")
        if out_net is not None and canonical_net(out_net) not in rails \
                and canonical_net(out_net) != GROUND:
            vo = vnet(out_net)
            for rn, rv in rails.items():
                if abs(vo - rv) < RAIL_MARGIN:
                    warnings.append(f"{el.name}: net '{out_net}' sits at {vo:.3f} V, within "
                                    f"{RAIL_MARGIN} V of supply rail '{rn}' ({rv:.3f} V)")
    note = charge_note(net)
    if note:
        warnings.append(note)
    bal = balance(net, sol, values)
    if bal is not None:
        warnings.append(bal)
    return OperatingPoint(nets, devices, warnings, currents, sol.method)


def charge_note(net: Network) -> str | None:
    """What the simulation does with the devices' junction capacitances
    (CJE, CJC, TF, CJO, TT, CGS, CGD, CGSO, CBD ...), or None when no
    device has any: the charges across a diode's, a BJT's, a JFET's ports
    and a MOSFET's bulk junctions are integrated nonlinearly, as SPICE
    does; the others (DeviceLayout.kernel_caps False: a MOSFET's constant
    gate overlaps, or a device that gives only ``capacitances``) are
    linear capacitors at their operating-point values; or, with junction
    charge storage off, all are left out of renders (the AC analysis has
    them either way)."""
    who = [el.name for el, _mod, lay, _po in net.devices if lay.caps]
    if not who:
        return None

    def listed(names):
        return ", ".join(names[:8]) + (f" and {len(names) - 8} more" if len(names) > 8 else "")
    if not net.charge:
        return (f"junction charge storage is off ({listed(who)}): junction capacitances are "
                "left out of renders and live play; the AC analysis includes them")
    nonlin = [el.name for el, _mod, lay, _po in net.devices if any(lay.kernel_caps)]
    linear = [el.name for el, _mod, lay, _po in net.devices
              if lay.caps and not all(lay.kernel_caps or [False])]
    parts = []
    if nonlin:
        parts.append(f"the charges across the junctions of {listed(nonlin)} follow the "
                     "signal (nonlinear, as SPICE integrates them)")
    if linear:
        parts.append(f"the other capacitances of {listed(linear)} are linear capacitors at "
                     "their operating-point values in renders and live play (recomputed "
                     "after each edit): exact where they do not depend on the bias, as a "
                     "MOSFET's gate overlaps; otherwise their change with signal swing is "
                     "not simulated")
    return "junction charge storage: " + "; ".join(parts)


#: Step at which the stability of the operating point is judged (seconds);
#: the trapezoidal rule maps every growing continuous-time mode (Re s > 0)
#: to |z| > 1 at any step, so the answer does not depend on it.
BALANCE_STEP = 1.0 / 96000.0


def balance(net: Network, sol: DCSolution, values: dict[str, float],
            T: float = BALANCE_STEP) -> str | None:
    """A warning when the operating point is an unstable balance, or None.

    The circuit is linearised at the operating point: device currents
    i = i0 + Gd*(v - v0) (Gd: the devices' Jacobian) in the discrete
    state-space model at step T (trapezoidal rule), so
    dv = (I - K Gd)^-1 Dv dx and dx' = (A + C Gd (I - K Gd)^-1 Dv) dx.
    The point is unstable when that matrix has an eigenvalue outside the
    unit circle (a mode that grows through the capacitors and inductors),
    or when det(I - K Gd) < 0: the port system's determinant is 1 with the
    devices replaced by their passive port conductance, so a negative sign
    means an odd number of real modes with negative resistance in the
    device loop (the middle point of a bistable circuit, which any stray
    capacitance makes grow: the classical index argument for equilibria of
    resistive circuits).  Linear circuits and circuits without devices are
    not judged.
    """
    if net.np_ == 0:
        return None
    from solderless.engine.solver.kernel_layout import PORT_G0
    from solderless.engine.solver.statespace import derive
    try:
        m = derive(net, values, T, [])
    except Exception:  # noqa: BLE001 - a model that cannot be built is reported elsewhere
        return None
    npt = net.np_
    Gd = sol.G - PORT_G0 * np.eye(npt)
    M = np.eye(npt) - m.K @ Gd
    det = np.linalg.det(M)
    why = None
    if not np.isfinite(det) or det < 0:
        why = "the devices' loop gain exceeds one (a negative-resistance balance)"
    elif net.nx and abs(det) > 1e-300:
        Al = m.A + m.C @ Gd @ np.linalg.solve(M, m.Dv)
        rho = float(np.max(np.abs(np.linalg.eigvals(Al)))) if Al.size else 0.0
        if rho > 1.0 + 1e-9:
            why = f"a mode grows by a factor {rho:.4g} per {T * 1e6:.3g} us step"
    if why is None:
        return None
    return ("the operating point is an unstable balance: " + why + "; the circuit "
            "will leave it on the slightest disturbance (a bistable circuit starts "
            "where its OFF devices, .nodeset or .ic put it)")


def operating_point(circuit_or_net, values=None) -> OperatingPoint:
    """DC operating point report of a circuit (or a prepared Network)."""
    net = circuit_or_net if isinstance(circuit_or_net, Network) else Network(circuit_or_net)
    values = dict(net.values if values is None else values)
    return report(net, solve_dc(net, values), values)
