"""The flat circuit: the one representation the solver accepts.

A design (stages, parts, links) or a SPICE netlist is flattened to a
:class:`Circuit`: a list of :class:`Element` joined by named nets. Composite
parts are expanded before this point: a potentiometer becomes two resistors
``<pot>.a`` (end ``a`` to wiper) and ``<pot>.b`` (wiper to end ``b``); a signal
input becomes a voltage source plus its series source resistor. The solver
never sees stages, pots or switches; live edits arrive as new element values.

Units are SI throughout (V, A, ohm, F, H, s).

Element kinds, their node order, and what ``value`` means:

====== ============================== =========================================
kind   nodes                          value / params
====== ============================== =========================================
R      (a, b)                         resistance, ohm
C      (a, b)                         capacitance, F  (params: IC optional)
L      (a, b)                         inductance, H   (params: IC optional)
V      (p, n)                         DC volts; params['wave'] optional
                                      (('SIN', [...]) / ('PULSE', [...]) /
                                      ('PWL', [t0, v0, t1, v1 ...]))
I      (p, n)                         DC amps, flowing p -> through source -> n
E      (p, n, cp, cn)                 voltage gain  v(p,n) = value * v(cp,cn)
G      (p, n, cp, cn)                 transconductance, A/V, p -> n
F      (p, n)                         current gain: value * i(params['CONTROL'])
                                      flows p -> through the source -> n
H      (p, n)                         transresistance, ohm:
                                      v(p,n) = value * i(params['CONTROL'])
D      (a, k)                         params: diode model (IS, N, RS ...)
Q      (c, b, e)                      params: BJT model, params['TYPE'] NPN|PNP
J      (d, g, s)                      params: JFET model, params['TYPE'] NJF|PJF
M      (d, g, s, b)                   params: MOSFET model (level 1) with W, L,
                                      params['TYPE'] NMOS|PMOS
OPAMP  (inp, inn, out, vcc, vee)      params: macromodel (A0, GBW, ...)
OTA    (inp, inn, out, abc, vee)      params: macromodel (JUNCTIONS, IS, ...)
BEHAV  (p, n)                         current SIGN*f flows p -> through it -> n;
                                      params EXPR (f of v(a,b) ...), SIGN
SW     (p, n, cp, cn)                 switch: params RON, ROFF, VT, VH, STATE
====== ============================== =========================================

The device kinds (D to SW) are the device registry's
(:mod:`solderless.engine.devices.registry`): each device module declares its
terminals there, and :data:`KIND_NODES` reads them.

The ground net is ``"0"``; :func:`canonical_net` maps ``gnd``/``GND`` to it.
"""
from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Any

from solderless.engine.derived import LiveMapping

GROUND = "0"
GROUND_ALIASES = {"0", "gnd", "ground"}

LINEAR_NODES: dict[str, int] = {
    "R": 2, "C": 2, "L": 2, "V": 2, "I": 2, "E": 4, "G": 4, "F": 2, "H": 2,
}
LINEAR_KINDS = set(LINEAR_NODES)


def _kind_nodes() -> dict[str, int]:
    from solderless.engine.devices.registry import NODE_COUNTS
    return {**LINEAR_NODES, **NODE_COUNTS}


#: element kind -> number of nodes: the linear kinds above and every device
#: in the registry (solderless.engine.devices.registry: each device module
#: declares its terminals)
KIND_NODES = LiveMapping(_kind_nodes)


def canonical_net(name: str) -> str:
    """Return the canonical name of a net (ground aliases become ``"0"``)."""
    return GROUND if name.lower() in GROUND_ALIASES else name


@dataclass(frozen=True)
class Where:
    """Where something was written: file and 1-based line (either may be None)."""
    file: str | None = None
    line: int | None = None


@dataclass
class Element:
    """One flat circuit element; see the module docstring for kinds."""
    name: str
    kind: str
    nodes: tuple[str, ...]
    value: float = 0.0
    params: dict[str, Any] = field(default_factory=dict)
    where: Where | None = None

    def copy(self) -> "Element":
        return replace(self, params=dict(self.params))


@dataclass
class Circuit:
    """A flat circuit ready for the solver.

    input_source : name of the V element that the audio input drives (its
        value is replaced by the input signal, its DC value is the bias it
        adds), or None for a circuit without audio input.
    output : (node, reference node) whose voltage difference is the output.
    """
    elements: list[Element]
    input_source: str | None = None
    output: tuple[str, str] = ("out", GROUND)
    title: str = ""
    where: Where | None = None
    #: {device element: {rating name: limit}} from the parts library
    #: (each device's DeviceKind.ratings); for reports only
    ratings: dict = field(default_factory=dict)
    #: devices whose design note says they are off at rest by design (reports)
    off_by_design: set = field(default_factory=set)
    #: circuit temperature in degrees Celsius (None: 27, the SPICE default);
    #: device models derive IS, BF ... at it from their TNOM
    temperature: float | None = None
    #: start-up state as SPICE's ``.nodeset`` (net -> volts: a first guess
    #: held while the operating point is first solved, then released) and
    #: ``.ic`` (net -> volts: held while the render's starting point is
    #: solved, released when it starts); devices with params['OFF'] start
    #: with their junctions off
    nodeset: dict[str, float] = field(default_factory=dict)
    ic: dict[str, float] = field(default_factory=dict)
    #: junction charge storage in the time domain (the devices' junction
    #: charges integrated as SPICE does, constant capacitances as linear
    #: capacitors; DEVELOPERS.md, "Junction charge storage"); False leaves them
    #: out of renders and live play (the AC analysis always has them)
    junction_charge: bool = True

    def element(self, name: str) -> Element:
        for e in self.elements:
            if e.name == name:
                return e
        raise KeyError(name)

    def nets(self) -> list[str]:
        """All nets but ground, in order of first appearance."""
        seen: dict[str, None] = {}
        for e in self.elements:
            for n in e.nodes:
                if n != GROUND:
                    seen.setdefault(n, None)
        return list(seen)

    def copy(self) -> "Circuit":
        return replace(self, elements=[e.copy() for e in self.elements],
                       nodeset=dict(self.nodeset), ic=dict(self.ic))

