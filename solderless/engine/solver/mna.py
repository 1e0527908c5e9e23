"""Modified nodal analysis of a flat :class:`solderless.engine.circuit.Circuit`.

Builds the network structure once per topology (net and branch indices,
reactive states, independent sources, nonlinear device ports) and, for given
element values and time step, the MNA matrix

    S w = Bx x + Bu u + Bn i

with w = [node voltages; branch currents of V, E and L elements], x the
reactive-element states, u the independent sources and i the currents drawn
by the nonlinear device ports (Ho, Ruehli & Brennan, "The modified nodal
approach to network analysis", IEEE Trans. Circuits Syst. 22(6), 1975).

Reactive elements use companion models of the trapezoidal rule (or backward
Euler where a device asks for it):
    capacitor  i = Gc*v - x,  Gc = 2C/T (trap) or C/T (BE)
    inductor   v - RL*i = -x, RL = 2L/T (trap)
and the state update x' = a*g*r - b*x with r the capacitor voltage or the
inductor current (trap: a=2, b=1; BE: a=1, b=0).  In DC mode (T=None)
capacitors are open (g=0) and inductors shorted (RL=0).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from solderless.engine.circuit import GROUND, KIND_NODES, Circuit, canonical_net
from solderless.engine.devices import REGISTRY
from solderless.engine.errors import DesignError
from solderless.engine.solver.kernel_layout import (CHARGE_A0, WAVE_DC, WAVE_NOISE, WAVE_PULSE,
                                                    WAVE_PWL, WAVE_SIN)
from solderless.engine.unionfind import UnionFind

VALUE_KINDS = {"R", "C", "L", "V", "I", "E", "G", "F", "H"}


def _where(el):
    w = getattr(el, "where", None)
    return {"file": getattr(w, "file", None), "line": getattr(w, "line", None)}


@dataclass
class State:
    """One reactive state: a capacitor or inductor (element or device stamp)."""
    name: str          # element name (device stamps: "<dev>#C<k>")
    kind: str          # "C" or "L"
    a: int             # node index or -1 (ground)
    b: int
    branch: int        # inductor branch row in w, else -1
    method: str        # "trap" or "be"
    value: float | None  # fixed value (device stamps) or None (element value)
    #: nodes whose voltage drives the current (a transcapacitance), or
    #: None: the state's own nodes a, b
    ca: int | None = None
    cb: int | None = None
    #: index into Network.junctions for a device's junction capacitance
    junction: int = -1

    @property
    def ctrl(self) -> tuple[int, int]:
        """The nodes whose voltage difference the state integrates."""
        return (self.a if self.ca is None else self.ca, self.b if self.cb is None else self.cb)


@dataclass
class Junction:
    """One junction capacitance of a device (DeviceLayout.caps): current
    C*d(v(ca) - v(cb))/dt from node a through the device to node b."""
    device: int        # index into Network.devices
    a: int
    b: int
    ca: int
    cb: int
    #: integrated by the kernel as the device's nonlinear charge across its
    #: ports (DeviceLayout.kernel_caps), not a linear state
    kernel: bool = False


#: Integration rule of the junction capacitances in the time domain (see
#: DEVELOPERS.md, "Junction charge storage").
JUNCTION_METHOD = "be"


class Network:
    """Topology of a circuit: indices, sources, states, device ports.

    Raises DesignError for unknown kinds, wrong node counts, bad values,
    missing ground, nets without a DC path to ground and loops of voltage
    sources/inductors, naming the part and where it was written.
    """

    def __init__(self, circuit: Circuit, charge: bool | None = None):
        self.circuit = circuit
        #: junction charge storage simulated in the time domain (the charges
        #: across device ports nonlinear in the kernel, the rest as linear
        #: capacitors at the operating point); None: the circuit's setting
        self.charge = bool(getattr(circuit, "junction_charge", True)
                           if charge is None else charge)
        els = list(circuit.elements)
        if not els:
            raise DesignError("the circuit has no elements", hint="add parts to the design")
        from solderless.engine import limits
        if len(els) > limits.MAX_ELEMENTS:
            # the network matrices are dense: refuse before allocating them
            w = circuit.where
            raise DesignError(f"the circuit has {len(els)} elements; the limit is "
                              f"{limits.MAX_ELEMENTS}", file=w.file if w else None)
        names = set()
        for el in els:
            if el.name in names:
                raise DesignError("two elements share this name", part=el.name, **_where(el),
                                  hint="give every part a unique name")
            names.add(el.name)
            if el.kind not in KIND_NODES:
                raise DesignError(f"unknown element kind {el.kind!r}", part=el.name, **_where(el),
                                  hint="kinds: " + " ".join(KIND_NODES))
            if len(el.nodes) != KIND_NODES[el.kind]:
                raise DesignError(f"a {el.kind} element needs {KIND_NODES[el.kind]} nodes, "
                                  f"got {len(el.nodes)}", part=el.name, **_where(el))
        self.elements = {el.name: el for el in els}
        # --- nets
        self.net_index: dict[str, int] = {}
        self.net_names: list[str] = []

        def node(n: str) -> int:
            n = canonical_net(n)
            if n == GROUND:
                return -1
            if n not in self.net_index:
                self.net_index[n] = len(self.net_names)
                self.net_names.append(n)
            return self.net_index[n]

        self._node = node
        touches_ground = False
        for el in els:
            for n in el.nodes:
                if canonical_net(n) == GROUND:
                    touches_ground = True
                node(n)
        if not touches_ground:
            raise DesignError("the circuit has no ground (net '0' / 'gnd')",
                              hint="connect the supply's negative side or the signal "
                                   "return to ground")
        self.n_user_nets = len(self.net_names)
        # --- devices (may add internal nets and linear stamps)
        self.devices = []  # (element, module, layout, port offset)
        self.ports: list[tuple[int, int]] = []
        self.dev_stamps = []  # (owner, stamp tuple)
        self.temperature = circuit.temperature
        self.input_source = circuit.input_source
        self.fixed = fixed_potentials(els, circuit.input_source)
        for el in els:
            if el.kind in REGISTRY:
                mod = REGISTRY[el.kind]
                lay = self.layout_of(mod, el)
                for n in lay.internal:
                    node(n)
                self.devices.append((el, mod, lay, len(self.ports)))
                for (pp, nn) in lay.ports:
                    self.ports.append((node(pp), node(nn)))
                for st in lay.stamps:
                    self.dev_stamps.append((el.name, st))
        self.nn = len(self.net_names)
        # --- values and validation of linear elements
        self.values: dict[str, float] = {}
        for el in els:
            if el.kind in VALUE_KINDS:
                self.values[el.name] = self.check_value(el, el.value)
        # --- branches and states
        self.branch_of: dict[str, int] = {}
        nb = 0
        for el in els:
            if el.kind in ("V", "E", "L", "H"):
                self.branch_of[el.name] = self.nn + nb
                nb += 1
        for el in els:
            if el.kind in ("F", "H"):
                ctl = str((el.params or {}).get("CONTROL", ""))
                src = self.elements.get(ctl)
                if src is None or src.kind != "V":
                    raise DesignError(f"controlling source {ctl!r} is not a voltage source "
                                      "of the circuit", part=el.name, **_where(el),
                                      hint="a current-controlled source senses the current "
                                           "of a V source (a 0 V source as an ammeter)")
        self.nw = self.nn + nb
        self.states: list[State] = []
        for el in els:
            if el.kind == "C":
                a, b = node(el.nodes[0]), node(el.nodes[1])
                self.states.append(State(el.name, "C", a, b, -1, "trap", None))
            elif el.kind == "L":
                a, b = node(el.nodes[0]), node(el.nodes[1])
                self.states.append(State(el.name, "L", a, b, self.branch_of[el.name], "trap", None))
        for k, (owner, st) in enumerate(self.dev_stamps):
            if st[0] == "C":
                self.states.append(State(f"{owner}#C{k}", "C", node(st[1]), node(st[2]), -1,
                                         st[4] if len(st) > 4 else "trap", float(st[3])))
        # junction capacitances of the devices (charge storage)
        self.junctions: list[Junction] = []
        for d, (el, _mod, lay, _po) in enumerate(self.devices):
            kern = lay.kernel_caps or [False] * len(lay.caps)
            for (pa, pb, ca, cb), kc in zip(lay.caps, kern):
                self.junctions.append(Junction(d, node(pa), node(pb), node(ca), node(cb), kc))
        if self.charge and self.junctions:
            c0 = self.junction_caps(np.zeros(self.nw), np.zeros(len(self.ports)))
            for k, j in enumerate(self.junctions):
                if j.kernel:
                    continue   # the device's own law integrates it
                el = self.devices[j.device][0]
                trans = (j.ca, j.cb) != (j.a, j.b)
                self.states.append(State(f"{el.name}#Q{k}", "C", j.a, j.b, -1,
                                         JUNCTION_METHOD, float(c0[k]),
                                         j.ca if trans else None, j.cb if trans else None,
                                         k))
        self.state_index = {s.name: k for k, s in enumerate(self.states)}
        # --- sources
        self.sources = [el for el in els if el.kind in ("V", "I")]
        self.source_index = {el.name: k for k, el in enumerate(self.sources)}
        self.input_index = -1
        if circuit.input_source is not None:
            if circuit.input_source not in self.elements or \
                    self.elements[circuit.input_source].kind != "V":
                raise DesignError(f"input source {circuit.input_source!r} is not a voltage "
                                  "source of the circuit", part=circuit.input_source,
                                  **_where(circuit))
            self.input_index = self.source_index[circuit.input_source]
        for n in circuit.output:
            if canonical_net(n) != GROUND and canonical_net(n) not in self.net_index:
                raise DesignError(f"output net {n!r} is not connected to anything",
                                  **_where(circuit), hint="check the output node name")
        self.out_nodes = tuple(self.net_index.get(canonical_net(n), -1) for n in circuit.output)
        self._check_dc_paths()
        self._bx, self._bu, self._bn = self._constant_b()

    def layout_of(self, mod, el, temp: float | None = None):
        """A device's layout in this network: at the circuit temperature (or
        ``temp``) for devices with a temperature law, and with the fixed net
        potentials (:func:`fixed_potentials`) for devices that read them
        (``RAILS``: the op-amp's output clamps)."""
        kw = {}
        if getattr(mod, "TEMPERATURE", False):
            kw["temp"] = self.temperature if temp is None else temp
        if getattr(mod, "RAILS", False):
            kw["fixed"] = self.fixed
        return mod.layout(el, **kw)

    def refresh_rails(self, values: dict[str, float]) -> bool:
        """After a change of source values: recompute the fixed net
        potentials and re-lay the devices that read them.  Returns whether
        any device's parameters changed (the kernel's arrays must then be
        rebuilt).  Ports never move: a value edit keeps the topology, so a
        fixed net stays fixed."""
        if not any(getattr(mod, "RAILS", False) for _, mod, _, _ in self.devices):
            return False
        fixed = fixed_potentials(self.elements.values(), self.input_source, values)
        if fixed == self.fixed:
            return False
        self.fixed = fixed
        devs = []
        for el, mod, lay, po in self.devices:
            if getattr(mod, "RAILS", False):
                new = self.layout_of(mod, el)
                if new.ports != lay.ports or new.par.size != lay.par.size:
                    raise DesignError("a supply change moved a device's ports", part=el.name)
                lay = new
            devs.append((el, mod, lay, po))
        self.devices = devs
        return True

    # ------------------------------------------------------------------ checks
    def check_value(self, el, value) -> float:
        """Validate a linear element value; returns it as float."""
        try:
            v = float(value)
        except (TypeError, ValueError):
            raise DesignError(f"value {value!r} is not a number", part=el.name,
                              **_where(el)) from None
        if not math.isfinite(v):
            raise DesignError(f"value {v} is not finite", part=el.name, **_where(el))
        if el.kind in ("R", "C", "L") and v <= 0:
            unit = {"R": "ohm", "C": "F", "L": "H"}[el.kind]
            raise DesignError(f"{el.kind} value must be > 0, got {v:g} {unit}", part=el.name,
                              **_where(el), hint="use a positive value; remove the part "
                                                 "or short it with a wire instead of 0")
        return v

    def _check_dc_paths(self):
        sets = UnionFind()                  # index nn = ground

        def idx(n):
            return self.nn if n < 0 else n

        def union(a, b):
            return sets.union(idx(a), idx(b))

        # loops of voltage-defining elements (V, E outputs, L shorted at DC)
        for el in self.elements.values():
            if el.kind in ("V", "E", "L", "H"):
                a, b = self._node(el.nodes[0]), self._node(el.nodes[1])
                if a == b or not union(a, b):
                    raise DesignError("this source/inductor closes a loop of voltage sources "
                                      "and inductors (a short at DC)", part=el.name, **_where(el),
                                      hint="add a series resistor or remove the duplicate source")
        for el in self.elements.values():
            if el.kind == "R":
                union(self._node(el.nodes[0]), self._node(el.nodes[1]))
        for _, st in self.dev_stamps:
            if st[0] == "R":
                union(self._node(st[1]), self._node(st[2]))
        for a, b in self.ports:
            union(a, b)
        g = sets.find(self.nn)
        for k in range(self.nn):
            if sets.find(k) != g:
                name = self.net_names[k]
                who = [e.name for e in self.elements.values()
                       if name in (canonical_net(n) for n in e.nodes)]
                raise DesignError(f"net '{name}' has no DC path to ground "
                                  f"(connected to: {', '.join(who) or 'device internals'})",
                                  part=who[0] if who else None,
                                  **_where(self.elements[who[0]] if who else None),
                                  hint="add a bias resistor (e.g. 1 Mohm) from the net to "
                                       "ground or to a bias voltage")

    # ------------------------------------------------------------------ matrices
    @property
    def nx(self):
        return len(self.states)

    @property
    def nu(self):
        return len(self.sources)

    @property
    def np_(self):
        return len(self.ports)

    def _constant_b(self):
        nw, nx, nu, npt = self.nw, self.nx, self.nu, self.np_
        Bx = np.zeros((nw, nx))
        Bu = np.zeros((nw, nu))
        Bn = np.zeros((nw, npt))
        for k, s in enumerate(self.states):
            if s.kind == "C":
                if s.a >= 0:
                    Bx[s.a, k] += 1.0
                if s.b >= 0:
                    Bx[s.b, k] -= 1.0
            else:
                Bx[s.branch, k] = -1.0
        for k, el in enumerate(self.sources):
            a, b = self._node(el.nodes[0]), self._node(el.nodes[1])
            if el.kind == "V":
                Bu[self.branch_of[el.name], k] = 1.0
            else:  # current flows a -> through source -> b
                if a >= 0:
                    Bu[a, k] -= 1.0
                if b >= 0:
                    Bu[b, k] += 1.0
        for j, (a, b) in enumerate(self.ports):
            if a >= 0:
                Bn[a, j] -= 1.0
            if b >= 0:
                Bn[b, j] += 1.0
        return Bx, Bu, Bn

    def state_g(self, values: dict[str, float], T: float | None) -> tuple[np.ndarray, ...]:
        """Companion conductances g (C: Gc, L: RL) and update coefficients a, b."""
        nx = self.nx
        g = np.zeros(nx)
        a = np.empty(nx)
        b = np.empty(nx)
        for k, s in enumerate(self.states):
            val = s.value if s.value is not None else values[s.name]
            if s.method == "be":
                a[k], b[k] = 1.0, 0.0
                g[k] = 0.0 if T is None else val / T
            else:
                a[k], b[k] = 2.0, 1.0
                g[k] = 0.0 if T is None else 2.0 * val / T
        return g, a, b

    def build_S(self, values: dict[str, float], T: float | None, gshunt: float = 0.0,
                port_g0: float = 0.0):
        """The MNA matrix for element values and step T (None: DC); port_g0
        is a conductance placed across every device port."""
        nw = self.nw
        S = np.zeros((nw, nw))
        node = self._node

        def cond(a, b, gv):
            if a >= 0:
                S[a, a] += gv
            if b >= 0:
                S[b, b] += gv
            if a >= 0 and b >= 0:
                S[a, b] -= gv
                S[b, a] -= gv

        def vccs(p, n, cp, cn, gm):
            for r, sr in ((p, 1.0), (n, -1.0)):
                if r < 0:
                    continue
                if cp >= 0:
                    S[r, cp] += sr * gm
                if cn >= 0:
                    S[r, cn] -= sr * gm

        for el in self.elements.values():
            k = el.kind
            if k == "R":
                cond(node(el.nodes[0]), node(el.nodes[1]), 1.0 / values[el.name])
            elif k == "G":
                vccs(*(node(n) for n in el.nodes), values[el.name])
            elif k == "F":
                jc = self.branch_of[el.params["CONTROL"]]
                a, b = node(el.nodes[0]), node(el.nodes[1])
                gain = values[el.name]
                if a >= 0:
                    S[a, jc] += gain
                if b >= 0:
                    S[b, jc] -= gain
            elif k in ("V", "E", "L", "H"):
                j = self.branch_of[el.name]
                a, b = node(el.nodes[0]), node(el.nodes[1])
                if a >= 0:
                    S[a, j] += 1.0
                    S[j, a] += 1.0
                if b >= 0:
                    S[b, j] -= 1.0
                    S[j, b] -= 1.0
                if k == "H":
                    S[j, self.branch_of[el.params["CONTROL"]]] -= values[el.name]
                if k == "E":
                    cp, cn = node(el.nodes[2]), node(el.nodes[3])
                    gain = values[el.name]
                    if cp >= 0:
                        S[j, cp] -= gain
                    if cn >= 0:
                        S[j, cn] += gain
        for _, st in self.dev_stamps:
            if st[0] == "R":
                cond(node(st[1]), node(st[2]), 1.0 / st[3])
            elif st[0] == "G":
                vccs(node(st[1]), node(st[2]), node(st[3]), node(st[4]), st[5])
        if T is not None:
            g, _, _ = self.state_g(values, T)
            for k, s in enumerate(self.states):
                if s.kind == "C":
                    if s.ca is None:
                        cond(s.a, s.b, g[k])
                    else:  # a transcapacitance
                        vccs(s.a, s.b, s.ca, s.cb, g[k])
                else:
                    S[s.branch, s.branch] -= g[k]
        if port_g0:
            for a, b in self.ports:
                cond(a, b, port_g0)
        if gshunt:
            for k in range(self.nn):
                S[k, k] += gshunt
        return S

    def state_read_rows(self) -> np.ndarray:
        """Rows R with r = R w: capacitor voltages and inductor currents."""
        R = np.zeros((self.nx, self.nw))
        for k, s in enumerate(self.states):
            if s.kind == "C":
                a, b = s.ctrl
                if a >= 0:
                    R[k, a] = 1.0
                if b >= 0:
                    R[k, b] = -1.0
            else:
                R[k, s.branch] = 1.0
        return R

    def junction_caps(self, w: np.ndarray, v: np.ndarray) -> np.ndarray:
        """Every junction capacitance (Network.junctions order, farads) at a
        solution: MNA vector w and device port voltages v (each device's
        ``capacitances``)."""
        out = np.zeros(len(self.junctions))
        k0 = 0
        for el, mod, lay, po in self.devices:
            n = len(lay.caps)
            if not n:
                continue
            vc = np.array([(w[j.ca] if j.ca >= 0 else 0.0) - (w[j.cb] if j.cb >= 0 else 0.0)
                           for j in self.junctions[k0:k0 + n]])
            c = mod.capacitances(lay.par, np.asarray(v[po:po + len(lay.ports)], float), vc)
            if len(c) != n:
                raise RuntimeError(f"{el.name}: {len(c)} capacitances for {n} entries")
            out[k0:k0 + n] = c
            k0 += n
        return out

    def set_junction_caps(self, caps: np.ndarray) -> None:
        """Take junction capacitances (from :meth:`junction_caps`) as the
        values of the time-domain junction states."""
        for s in self.states:
            if s.junction >= 0:
                s.value = float(caps[s.junction])

    @property
    def kernel_charge(self) -> bool:
        """Whether the kernel integrates nonlinear junction charges (junction
        charge storage on and some device has charges across its ports)."""
        return self.charge and any(j.kernel for j in self.junctions)

    @property
    def junction_states(self) -> bool:
        """Whether junction capacitances are states of the time-domain model."""
        return any(s.junction >= 0 for s in self.states)

    def port_rows(self) -> np.ndarray:
        """Rows P with port voltages v = P w."""
        P = np.zeros((self.np_, self.nw))
        for j, (a, b) in enumerate(self.ports):
            if a >= 0:
                P[j, a] = 1.0
            if b >= 0:
                P[j, b] = -1.0
        return P

    def source_values(self, t: float = 0.0, values: dict | None = None) -> np.ndarray:
        """Independent source values at time t (DC value when no waveform)."""
        from solderless.engine.solver.aot import kernels   # compiled ahead of time, or JIT
        wave_value = kernels().wave_value
        values = self.values if values is None else values
        u = np.zeros(self.nu)
        for k, el in enumerate(self.sources):
            kind, par = source_wave(el)
            # the input source plays its DC value plus the input samples
            # (its waveform is not played), so it starts from its DC value
            if kind == WAVE_DC or k == self.input_index:
                u[k] = values[el.name]
            else:
                u[k] = wave_value(kind, par, t)
        return u


def fixed_potentials(els, input_source: str | None = None,
                     values: dict[str, float] | None = None) -> dict[str, float]:
    """Nets held at a constant potential: ground, and every net tied to a
    net of known potential by an independent DC voltage source (no
    waveform; not the input), through chains of them.  Canonical net name
    -> volts.  ``values`` overrides element values (live edits).  Devices
    that read these (the op-amp's output clamps) can then refer their
    thresholds to ground and need fewer ports."""
    fixed = {GROUND: 0.0}
    links = []
    for el in els:
        if el.kind != "V" or el.name == input_source or (el.params or {}).get("wave"):
            continue
        try:
            val = float(values[el.name] if values and el.name in values else el.value)
        except (TypeError, ValueError):
            continue
        if math.isfinite(val):
            links.append((canonical_net(el.nodes[0]), canonical_net(el.nodes[1]), val))
    grew = True
    while grew:
        grew = False
        for a, b, val in links:
            if b in fixed and a not in fixed:
                fixed[a] = fixed[b] + val
                grew = True
            elif a in fixed and b not in fixed:
                fixed[b] = fixed[a] - val
                grew = True
    return fixed


#: NOISE is a live noise source (solderless/engine/solver/livenoise.py): its
#: samples are fed per block; with its default parameters it reads 0.
WAVE_CODES = {"SIN": WAVE_SIN, "PULSE": WAVE_PULSE, "PWL": WAVE_PWL, "NOISE": WAVE_NOISE}
_WAVE_DEFAULTS = {"SIN": [0.0, 0.0, 0.0, 0.0, 0.0, 0.0],
                  "PULSE": [0.0, 0.0, 0.0, 0.0, 0.0, math.inf, math.inf],
                  "NOISE": [0.0, 0.0]}


def source_wave(el, step: float | None = None) -> tuple[int, np.ndarray]:
    """Waveform code and parameter vector of a V/I element (0: DC).

    A PULSE with TR or TF of zero (or left out) rises or falls over one
    simulation ``step`` when that is given, as ngspice-39 uses its TSTEP
    there (checked: PULSE(0 1 0 0 ...) with ``tran 10u`` reads 2e-4 V at
    2 ns); at t = 0 such a pulse is at V1, so the operating point and the
    first rendered sample agree."""
    w = (el.params or {}).get("wave")
    if not w:
        return WAVE_DC, np.zeros(0)
    kind = str(w[0]).upper()
    vals = [float(v) for v in w[1]]
    if kind not in WAVE_CODES:
        raise DesignError(f"unknown source waveform {kind!r}", part=el.name, **_where(el),
                          hint="use SIN, PULSE or PWL")
    if kind == "PWL":
        if len(vals) < 2 or len(vals) % 2:
            raise DesignError("PWL needs time/value pairs", part=el.name, **_where(el))
        ts = vals[0::2]
        if any(t2 < t1 for t1, t2 in zip(ts, ts[1:])):
            raise DesignError("PWL times must not decrease", part=el.name, **_where(el))
    else:
        d = list(_WAVE_DEFAULTS[kind])
        if len(vals) > len(d):
            raise DesignError(f"too many {kind} parameters", part=el.name, **_where(el))
        d[:len(vals)] = vals
        vals = d
        if kind == "PULSE" and step is not None:
            for k in (3, 4):
                if not vals[k] > 0:
                    vals[k] = float(step)
    return WAVE_CODES[kind], np.array(vals, dtype=np.float64)


def device_arrays(net: Network, step: float | None = None):
    """Flat arrays describing the devices for the compiled kernel:
    (dcode, dpo, dnp, dpa, par, dqs) = type codes, port offsets, port counts,
    parameter offsets (n+1), the concatenated parameter vector and each
    device's quiet step (see DeviceLayout.quiet_step).  With the kernel's
    time ``step`` (seconds) and junction charge storage on, the devices
    with junction charges get CHARGE_A0/step in their CHARGE_SLOT (their
    ``evaluate`` then includes the charge current); without, the laws are
    the DC ones (the operating point's solver)."""
    dcode = np.array([lay.code for _, _, lay, _ in net.devices], dtype=np.int64)
    dpo = np.array([po for _, _, _, po in net.devices], dtype=np.int64)
    dnp = np.array([len(lay.ports) for _, _, lay, _ in net.devices], dtype=np.int64)
    sizes = [lay.par.size for _, _, lay, _ in net.devices]
    dpa = np.zeros(len(sizes) + 1, dtype=np.int64)
    dpa[1:] = np.cumsum(sizes)
    par = np.concatenate([lay.par for _, _, lay, _ in net.devices]) if sizes else np.zeros(0)
    dqs = np.array([lay.quiet_step for _, _, lay, _ in net.devices], dtype=np.float64)
    if step is not None and net.charge:
        for d, (_el, mod, lay, _po) in enumerate(net.devices):
            if any(lay.kernel_caps):
                par[dpa[d] + mod.CHARGE_SLOT] = CHARGE_A0 / step
    return dcode, dpo, dnp, dpa, np.ascontiguousarray(par, dtype=np.float64), dqs
