"""The device registry: every device kind describes itself, once.

Each module under :mod:`solderless.engine.devices` ends with one plain data
description of its device, ``DEVICE = DeviceKind(...)`` (the way SPICE3 keeps
a device's public table beside the device): its flat-circuit terminals,
model types and their polarity, design part types, SPICE letter, parameter
names with aliases, units and defaults, the standard parameters it reads but
does not simulate (and what they affect), its probes with their units, and
its operating-point report hook. The module's ``CODE`` is its branch in the
compiled kernel's dispatch.

Everything that needs to know about devices asks this registry instead of
keeping its own copy: the flat circuit's node counts
(:data:`solderless.engine.circuit.KIND_NODES`), the design's part types
(:data:`solderless.engine.design.PART_TYPES`), the parts library's model
kinds (:data:`solderless.engine.parts.KINDS`), the SPICE reader's and
writer's card and model tables (:mod:`solderless.engine.formats.spice`), the
operating-point report (:mod:`solderless.engine.solver.dcop`), the probe
units (:mod:`solderless.engine.solver.simulator`), the transistor check
(:mod:`solderless.engine.analysis.measure`), the plausible parameter ranges
(:mod:`solderless.engine.sanity`) and Monte Carlo's region and headroom
figures (:mod:`solderless.engine.analysis.montecarlo`).

Those tables are *live* (:mod:`solderless.engine.derived`): they read the
registry when used, so a device registered later (``register(module)``, see
DEVELOPERS.md "How to add a device") is known everywhere at once.
"""
from __future__ import annotations

import contextlib
from collections.abc import Mapping
from dataclasses import dataclass, field
from types import ModuleType
from typing import Callable

from solderless.engine.derived import LiveMapping, LiveSet  # noqa: F401 (re-exported)

#: kind -> (module, DeviceKind), in registration order
_DEVICES: dict[str, tuple[ModuleType, "DeviceKind"]] = {}
#: bumped on every change, so derived tables know when to rebuild
_VERSION = [0]


@dataclass(frozen=True, eq=False)
class DeviceKind:
    """What a device kind is, as data.

    kind : flat-circuit element kind (``"Q"``); the key of the registry.
    terminals : the flat element's node names, in order.
    title : what reports call one of them ("BJT", "op-amp").
    model_types : model type -> polarity (+1 N-type, -1 P-type), in the
        order messages list them; a device with two types carries its type
        in the element's ``params['TYPE']``.
    part_types : design part type -> model type.
    part_nodes : the design part's node names (default: ``terminals``);
        ``part_optional`` names a trailing node a part may add -> the part
        node it is tied to when left out (a MOSFET's bulk to its source).
    letter : SPICE element letter of a ``.model`` device card (None: no
        card of that form; the B and S/W readers are the SPICE reader's own).
    params : simulated parameters and their defaults (SPICE names, SI).
    units : unit of each parameter that has one.
    ranges : parameter -> (low, high) of real devices (None: no bound); a
        value outside is warned about (solderless.engine.sanity).
    aliases : other spellings SPICE accepts -> the name in ``params``.
    ignored : standard parameters read but not simulated -> what they affect.
    also_read : further names a ``.model`` card may carry (ratings, labels,
        selectors) that the reader takes without comment on their effect.
    instance : instance parameters written on the element card (W, L, M).
    card_prefix : text the writer puts first in the ``.model`` card.
    takes_off : the card's OFF keyword starts the device's junctions off.
    probes : probe quantity -> unit.
    report : operating-point hook ``report(q, el, par, v, i, G, region)``:
        adds derived quantities to ``q`` (volts, amps) and returns the
        device's region; ``region`` is the module's own ``region()``.
    health : ``health(name, q, region, ratings) -> [warning]``.
    report_units : units of the quantities ``report`` adds.
    transistor : "bjt" or "fet" for the transistor check, else None.
    steady_region : its region at rest belongs to the design (a Monte Carlo
        trial that moves it fails; diodes switch by design).
    headroom : ``headroom(q) -> volts or None``: how far the device sits
        from the edge of its amplifying region at the operating point
        (Monte Carlo's headroom figure).
    ratings : rating names a parts-library model may carry for reports.
    output : index of the terminal the rail-proximity check watches.
    library : parts-library parameter names of a macromodel (None: the
        SPICE names), ``library_required`` the ones a model must give and
        ``library_aliases`` the library names the module reads otherwise.
    """
    kind: str
    terminals: tuple[str, ...]
    title: str
    params: Mapping[str, float] = field(default_factory=dict)
    probes: Mapping[str, str] = field(default_factory=dict)
    report: Callable | None = None
    health: Callable | None = None
    model_types: Mapping[str, float] = field(default_factory=dict)
    part_types: Mapping[str, str] = field(default_factory=dict)
    part_nodes: tuple[str, ...] | None = None
    part_optional: Mapping[str, str] = field(default_factory=dict)
    letter: str | None = None
    units: Mapping[str, str] = field(default_factory=dict)
    ranges: Mapping[str, tuple] = field(default_factory=dict)
    aliases: Mapping[str, str] = field(default_factory=dict)
    ignored: Mapping[str, str] = field(default_factory=dict)
    also_read: frozenset = frozenset()
    instance: tuple[str, ...] = ()
    card_prefix: str = ""
    takes_off: bool = True
    report_units: Mapping[str, str] = field(default_factory=dict)
    transistor: str | None = None
    steady_region: bool = False
    headroom: Callable | None = None
    ratings: tuple[str, ...] = ()
    output: int | None = None
    library: frozenset | None = None
    library_required: tuple[str, ...] = ()
    library_aliases: Mapping[str, str] = field(default_factory=dict)

    @property
    def typed(self) -> bool:
        """Whether the element carries its model type in params['TYPE']."""
        return len(self.model_types) > 1

    @property
    def standard(self) -> frozenset:
        """Every parameter name a SPICE ``.model`` card of this kind may
        carry: simulated, ignored, also read, and their other spellings."""
        return frozenset(self.params) | frozenset(self.ignored) | \
            frozenset(self.also_read) | frozenset(self.aliases)

    @property
    def design_nodes(self) -> tuple[str, ...]:
        return self.part_nodes if self.part_nodes is not None else self.terminals


# --------------------------------------------------------------------------
# Registration

def register(module: ModuleType) -> "DeviceKind":
    """Add a device module (it has ``DEVICE`` and ``CODE``); return its
    description. A kind, SPICE letter, model type or part type already
    taken is refused (ValueError: a programming error, not a user's)."""
    dev = module.DEVICE
    if not isinstance(getattr(module, "CODE", None), int):
        raise ValueError(f"device module {module.__name__} has no integer CODE")
    for fn in ("layout", "region"):
        if not callable(getattr(module, fn, None)):
            raise ValueError(f"device module {module.__name__} has no {fn}()")
    if getattr(module, "KIND", dev.kind) != dev.kind:
        raise ValueError(f"device module {module.__name__}: KIND {module.KIND!r} is not "
                         f"its DEVICE's kind {dev.kind!r}")
    if dev.kind in _DEVICES:
        raise ValueError(f"device kind {dev.kind!r} is registered already")
    for other in devices():
        clash = (set(dev.model_types) & set(other.model_types)) or \
            (set(dev.part_types) & set(other.part_types)) or \
            ({dev.letter} & {other.letter} - {None})
        if clash:
            raise ValueError(f"device {dev.kind!r}: {sorted(clash)} belongs to {other.kind!r}")
    for name, unit in (*dev.probes.items(), *dev.report_units.items()):
        u = quantity_units().get(name)
        if u is not None and u != unit:
            raise ValueError(f"device {dev.kind!r}: quantity {name!r} in {unit!r}, "
                             f"elsewhere in {u!r}")
    _DEVICES[dev.kind] = (module, dev)
    _VERSION[0] += 1
    return dev


def unregister(kind: str) -> None:
    """Remove a device kind (tests register a toy device and take it away)."""
    _DEVICES.pop(kind, None)
    _VERSION[0] += 1


@contextlib.contextmanager
def registered(module: ModuleType):
    """``with registered(toy):`` the device is known inside the block."""
    dev = register(module)
    try:
        yield dev
    finally:
        unregister(dev.kind)


def _ensure() -> None:
    """The built-in devices register when the devices package is imported."""
    import solderless.engine.devices  # noqa: F401


def devices() -> list[DeviceKind]:
    """Every registered device description, in registration order."""
    return [d for _, d in _DEVICES.values()]


def device(kind: str) -> DeviceKind:
    _ensure()
    return _DEVICES[kind][1]


def module(kind: str) -> ModuleType:
    _ensure()
    return _DEVICES[kind][0]


# --------------------------------------------------------------------------
# Live derived tables

#: element kind -> device module
MODULES = LiveMapping(lambda: {k: m for k, (m, _) in _DEVICES.items()})
#: element kind -> DeviceKind
DEVICES = LiveMapping(lambda: {d.kind: d for d in devices()})
#: element kind -> kernel dispatch code (the module's ``CODE``)
CODES = LiveMapping(lambda: {k: m.CODE for k, (m, _) in _DEVICES.items()})
#: kernel dispatch code -> device module (the first registered with it)
BY_CODE = LiveMapping(lambda: {c: m for c, m in reversed(
    [(m.CODE, m) for m, _ in _DEVICES.values()])})
#: element kind -> number of flat nodes
NODE_COUNTS = LiveMapping(lambda: {d.kind: len(d.terminals) for d in devices()})
#: model type (``NPN``) -> element kind (``Q``), every device with a model
MODEL_TYPES = LiveMapping(lambda: {t: d.kind for d in devices() for t in d.model_types})
#: model type -> element kind, devices read from SPICE ``.model`` cards
CARD_MODEL_TYPES = LiveMapping(lambda: {t: d.kind for d in devices() if d.letter
                                        for t in d.model_types})
#: SPICE letter -> element kind, devices read from ``.model`` device cards
LETTERS = LiveMapping(lambda: {d.letter: d.kind for d in devices() if d.letter})
#: design part type -> (element kind, node names, value unit)
PART_TYPES = LiveMapping(lambda: {p: (d.kind, d.design_nodes, "") for d in devices()
                                  for p in d.part_types})
#: design part type -> model type
PART_MODEL = LiveMapping(lambda: {p: t for d in devices() for p, t in d.part_types.items()})
#: SPICE standard parameter names per element kind (cards read from ``.model``)
STANDARD = LiveMapping(lambda: {d.kind: set(d.standard) for d in devices() if d.letter})
#: SPICE aliases per element kind
ALIASES = LiveMapping(lambda: {d.kind: dict(d.aliases) for d in devices() if d.letter})
#: rating names per element kind
RATINGS = LiveMapping(lambda: {d.kind: d.ratings for d in devices() if d.ratings})


def quantity_units() -> dict[str, str]:
    """Unit of every device quantity (probes and operating-point report)."""
    out: dict[str, str] = {}
    for d in devices():
        out.update(d.probes)
        out.update(d.report_units)
    return out


#: device quantity (``ic``, ``vgs``, ``gm``) -> unit
QUANTITY_UNITS = LiveMapping(quantity_units)


def transistor_part_types(family: str | None = None) -> tuple[str, ...]:
    """Design part types of the transistors (``family`` "bjt" or "fet": of
    that family only), in registration order."""
    _ensure()
    return tuple(p for d in devices() if d.transistor and (family is None or
                                                           d.transistor == family)
                 for p in d.part_types)


def part_type_of(kind: str, params: Mapping | None) -> str | None:
    """The design part type of a flat element of a device kind: the one
    whose model type its params['TYPE'] names, else the first (None for a
    device without part types or a kind that is not a device's)."""
    _ensure()
    if kind not in _DEVICES:
        return None
    d = _DEVICES[kind][1]
    if not d.part_types:
        return None
    t = str((params or {}).get("TYPE", "")).upper()
    for p, mt in d.part_types.items():
        if mt == t:
            return p
    return next(iter(d.part_types))


def card_letters() -> str:
    """The letters of ``.model`` device cards, in registration order."""
    _ensure()
    return "".join(d.letter for d in devices() if d.letter)
