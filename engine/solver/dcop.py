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

from engine.circuit import GROUND, canonical_net
from engine.errors import SolveError
from engine.solver.kernel import eval_devices, limit_devices
from engine.solver.mna import Network, device_arrays
from engine.solver.statespace import solve_mna

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


def _newton(net, S, Bu, Bn, P, u, arrays, v0, maxit=150):
    dcode, dpo, dnp, dpa, par, _ = arrays
    npt = net.np_
    v = v0.copy()
    i = np.zeros(npt)
    G = np.zeros((npt, npt))
    w_old = None
    for it in range(1, maxit + 1):
        eval_devices(dcode, dpo, dpa, par, v, i, G)
        J = S - Bn @ G @ P
        rhs = Bu @ u + Bn @ (i - G @ v)
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
        conv = np.all(dv <= 1e-9 + 1e-6 * np.abs(vn))
        if w_old is not None:
            conv = conv and np.all(np.abs(w - w_old) <= 1e-12 + 1e-6 * np.abs(w))
        else:
            conv = conv and npt == 0
        v = vl
        w_old = w
        if conv:
            eval_devices(dcode, dpo, dpa, par, v, i, G)
            return DCSolution(w, v, i.copy(), G.copy(), it, "newton")
    return None


def solve_dc(net: Network, values: dict[str, float] | None = None,
             u: np.ndarray | None = None, v0: np.ndarray | None = None) -> DCSolution:
    """DC solution of the network; raises SolveError if no method converges."""
    values = dict(net.values if values is None else values)
    if u is None:
        u = net.source_values(0.0, values)
    arrays = device_arrays(net)
    Bu, Bn = net._bu, net._bn
    P = net.port_rows()
    S = net.build_S(values, None)
    if net.np_ == 0:
        w = solve_mna(net, S, (Bu @ u)[:, None], "DC operating point")[:, 0]
        return DCSolution(w, np.zeros(0), np.zeros(0), np.zeros((0, 0)), 1, "linear")
    start = np.zeros(net.np_) if v0 is None else v0
    sol = _newton(net, S, Bu, Bn, P, u, arrays, start)
    if sol is not None:
        return sol
    # gmin stepping
    v = start.copy()
    ok = True
    for gs in [1e-2 / 10 ** k for k in range(11)] + [0.0]:
        sol = _newton(net, net.build_S(values, None, gshunt=gs), Bu, Bn, P, u, arrays, v)
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
        sol = _newton(net, S, Bu, Bn, P, u * lam, arrays, v, maxit=300)
        if sol is None:
            break
        v = sol.v
    else:
        sol.method = "source stepping"
        return sol
    raise SolveError("no DC operating point found (Newton, gmin stepping and source "
                     "stepping all failed)", part=net.circuit.title or None,
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
    from engine.analysis import regions as R
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
        if el.kind == "Q":
            d["gm"] = float(Gb[1, 0])
            d["beta"] = d["ic"] / d["ib"] if d["ib"] != 0 else float("nan")
            out_net = el.nodes[0]
        elif el.kind == "J":
            d["gm"] = float(Gb[1, 0])
            out_net = el.nodes[0]
        elif el.kind in ("OPAMP", "OTA"):
            out_net = el.nodes[2]
        else:
            out_net = None
        # one classifier for op, the workbench and the demo (regions.py)
        d["region"] = R.classify(el.kind, d, el.params or {}, mod.region(lay.par, v, i),
                                 float(lay.par[1]) if el.kind in ("J", "M") else None)
        off = el.name in (getattr(net.circuit, "off_by_design", None) or ())
        if off and d["region"] in ("cut-off", "off"):
            d["region"] += " (by design)"
        warnings += R.warnings_for(el.name, el.kind, d, d["region"].split(" (")[0],
                                   ratings.get(el.name), off)
        devices[el.name] = d
        if out_net is not None and canonical_net(out_net) not in rails \
                and canonical_net(out_net) != GROUND:
            vo = vnet(out_net)
            for rn, rv in rails.items():
                if abs(vo - rv) < RAIL_MARGIN:
                    warnings.append(f"{el.name}: net '{out_net}' sits at {vo:.3f} V, within "
                                    f"{RAIL_MARGIN} V of supply rail '{rn}' ({rv:.3f} V)")
    return OperatingPoint(nets, devices, warnings, currents, sol.method)


def operating_point(circuit_or_net, values=None) -> OperatingPoint:
    """DC operating point report of a circuit (or a prepared Network)."""
    net = circuit_or_net if isinstance(circuit_or_net, Network) else Network(circuit_or_net)
    values = dict(net.values if values is None else values)
    return report(net, solve_dc(net, values), values)
