"""The design model: an ordered chain of stages, their parts, links, probes
and meters, and the tables of part types.

A :class:`Design` is what the user edits (in a TOML file, on the command line,
in the workbench or through the live host). Edits are data
(:mod:`solderless.engine.design.edits`); the design's own methods
(:meth:`Design.set_value`, :meth:`Design.set_rotation` ...) check one change
and make it, in the model and in the user's TOML document
(:mod:`solderless.engine.design.document`). :func:`solderless.engine.design.flatten.flatten`
turns a design into the flat :class:`solderless.engine.circuit.Circuit` the
solver runs.
"""
from __future__ import annotations

import copy
import difflib
import math
import os
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from solderless.engine.circuit import GROUND, Circuit, Where, canonical_net
from solderless.engine.derived import LiveMapping, LiveSet
from solderless.engine.errors import DesignError, SolderlessError
from solderless.engine.probes import parse_probe

PRESETS = Path(__file__).resolve().parent.parent.parent / "presets"

# design-level part type -> (flat kind, node names, value unit); the device
# part types (diode, npn ... ota) come from the device registry
# (solderless.engine.devices.registry), read when used
_FIXED_PART_TYPES: dict[str, tuple[str, tuple[str, ...], str]] = {
    "resistor": ("R", ("a", "b"), "Ω"),
    "capacitor": ("C", ("a", "b"), "F"),
    "inductor": ("L", ("a", "b"), "H"),
    "supply": ("V", ("p", "n"), "V"),
    "input": ("V", ("p", "n"), "V"),
    "current": ("I", ("p", "n"), "A"),
    "vcvs": ("E", ("p", "n", "cp", "cn"), ""),
    "vccs": ("G", ("p", "n", "cp", "cn"), "A/V"),
    "cccs": ("F", ("p", "n"), "A/A"),
    "ccvs": ("H", ("p", "n"), "V/A"),
    "pot": ("R", ("a", "wiper", "b"), "Ω"),
    "switch": ("", (), ""),
}
KIND_TO_TYPE = {"R": "resistor", "C": "capacitor", "L": "inductor", "V": "supply",
                "I": "current", "E": "vcvs", "G": "vccs", "F": "cccs", "H": "ccvs"}
VALUE_TYPES = {"resistor", "capacitor", "inductor", "supply", "input", "current",
               "vcvs", "vccs", "cccs", "ccvs", "pot"}
POSITIVE_TYPES = {"resistor", "capacitor", "inductor", "pot"}


def _registry():
    from solderless.engine.devices import registry
    return registry


def _part_types() -> dict:
    devices = _registry().PART_TYPES
    taken = set(devices) & set(_FIXED_PART_TYPES)
    if taken:   # a programming error in a device's description, not the user's
        raise ValueError(f"device part types {sorted(taken)} are the design's own")
    return {**_FIXED_PART_TYPES, **devices}


PART_TYPES = LiveMapping(_part_types)
#: part types that take a device model: every device part type
DEVICE_TYPES = LiveSet(lambda: _registry().PART_MODEL)
#: device part type -> the model type it takes
MODEL_KIND = LiveMapping(lambda: dict(_registry().PART_MODEL))
TAPERS = ("linear", "audio", "reverse-audio")
AUDIO_TAPER_BASE = 81.0  # (B**0.5 - 1)/(B - 1) = 0.1: 10 % at mid rotation
POT_END_FRACTION = 1e-4  # residual end resistance (fraction of the track)
POT_END_MIN = 1.0        # ohm
JACK = "jack"
REST_SOURCE = "rest"        # holds a bypassed side branch's input at its DC level
NETLIST_STAGE = "netlist"   # the one stage of a design made from a whole netlist


# --------------------------------------------------------------------- values

def _parse_value(text: Any, *, file=None, line=None, part=None) -> float:
    from solderless.engine.values import parse_value
    return parse_value(text, file=file, line=line, part=part)


def _format_value(x: float, unit: str = "") -> str:
    from solderless.engine.values import format_value
    return format_value(x, unit=unit)


def taper_fraction(taper: Any, rotation: float) -> float:
    """Fraction of a pot's track between end ``a`` and the wiper.

    taper : "linear", "audio" (exponential law, 10 % at half rotation; common
        practice), "reverse-audio" (mirror image), or a table of
        ``[rotation, fraction]`` points, interpolated linearly.
    """
    r = min(max(float(rotation), 0.0), 1.0)
    if isinstance(taper, str):
        if taper == "linear":
            return r
        if taper == "audio":
            return (AUDIO_TAPER_BASE ** r - 1.0) / (AUDIO_TAPER_BASE - 1.0)
        if taper == "reverse-audio":
            return 1.0 - (AUDIO_TAPER_BASE ** (1.0 - r) - 1.0) / (AUDIO_TAPER_BASE - 1.0)
        raise ValueError(taper)
    pts = np.asarray(taper, dtype=float)
    return float(np.interp(r, pts[:, 0], pts[:, 1]))


def _check_taper(taper: Any, where: Where, part: str) -> Any:
    if taper is None:
        return "linear"
    if isinstance(taper, str):
        if taper not in TAPERS:
            raise DesignError(f"unknown taper '{taper}'", file=where.file, line=where.line,
                              part=part, hint="use linear, audio, reverse-audio, or a table "
                              "of [rotation, fraction] points")
        return taper
    try:
        pts = [(float(a), float(b)) for a, b in taper]
    except (TypeError, ValueError):
        raise DesignError("a custom taper must be a list of [rotation, fraction] pairs",
                          file=where.file, line=where.line, part=part) from None
    if len(pts) < 2 or any(b[0] <= a[0] for a, b in zip(pts, pts[1:])):
        raise DesignError("a custom taper needs two or more points with rising rotation",
                          file=where.file, line=where.line, part=part)
    if not all(0.0 <= r <= 1.0 and 0.0 <= f <= 1.0 for r, f in pts):
        raise DesignError("custom taper points must lie between 0 and 1",
                          file=where.file, line=where.line, part=part)
    return [list(p) for p in pts]


def _optional_nodes(ptype: str) -> dict[str, str]:
    """Trailing nodes a device part may add -> the node each is tied to
    when left out (the device's description in the registry)."""
    if ptype not in MODEL_KIND:
        return {}
    return dict(_registry().DEVICES[PART_TYPES[ptype][0]].part_optional)


# ---------------------------------------------------------------- data model

@dataclass
class Part:
    """One part of a stage, in the user's terms."""
    name: str
    type: str
    nodes: list[str]
    value: float | None = None
    model: str | None = None
    params: dict[str, Any] = field(default_factory=dict)
    tolerance: float | None = None
    taper: Any = "linear"
    rotation: float = 0.5
    impedance: float | None = None
    labels: list[str] = field(default_factory=list)
    positions: list[list[str]] = field(default_factory=list)
    position: int = 0
    note: str = ""
    where: Where = field(default_factory=Where)
    control: str | None = None   # cccs/ccvs: the supply part whose current controls it


@dataclass
class Stage:
    name: str
    ports: list[str]
    parts: list[Part]
    kind: str = ""
    notes: str = ""
    template: str | None = None
    bypass: bool = False
    where: Where = field(default_factory=Where)

    def part(self, name: str) -> Part:
        for p in self.parts:
            if p.name == name:
                return p
        raise KeyError(name)


@dataclass
class Link:
    a: tuple[str, str]
    b: tuple[str, str]
    where: Where = field(default_factory=Where)


@dataclass
class Probe:
    name: str
    expr: str
    where: Where = field(default_factory=Where)


@dataclass
class PartInfo:
    """What a user interface needs to show and edit one part."""
    qualname: str
    stage: str
    name: str
    type: str
    value: float | None
    unit: str
    tolerance: float | None
    is_pot: bool
    rotation: float | None
    taper: Any
    model: str | None
    note: str
    labels: list[str]
    position: int | None


def _cut(text: str, n: int = 80) -> str:
    """``text`` shortened to ``n`` characters for an error message."""
    text = str(text)
    return text if len(text) <= n else text[:n - 3] + "..."


def _expect(cond: bool, msg: str, where: Where, part: str | None = None, hint=None):
    if not cond:
        raise DesignError(msg, file=where.file, line=where.line, part=part, hint=hint)


def _table(raw: Any, key: str, where: Where, part: str | None = None) -> dict:
    """``raw[key]`` as a table (an empty one when missing), or a DesignError
    saying it must be a table."""
    v = raw.get(key, {}) if isinstance(raw, dict) else {}
    _expect(isinstance(v, dict), f"'{key}' must be a table (key = value pairs), not "
            f"{type(v).__name__} {_cut(repr(v), 40)}", where, part,
            hint="see docs/design-format.md")
    return v


def _tables(raw: Any, key: str, where: Where, part: str | None = None) -> list[dict]:
    """``raw[key]`` as a list of tables ([[key]] entries), empty when missing."""
    v = raw.get(key, []) if isinstance(raw, dict) else []
    _expect(isinstance(v, list) and all(isinstance(x, dict) for x in v),
            f"'{key}' must be a list of tables ([[{key}]] entries), not "
            f"{_cut(repr(v), 40)}", where, part, hint="see docs/design-format.md")
    return v

def _temperature(value, file, where) -> float:
    """A circuit temperature in degrees Celsius (-100 to 250)."""
    try:
        t = float(value)
    except (TypeError, ValueError):
        raise DesignError(f"temperature must be a number of degrees Celsius, not {value!r}",
                          file=file, line=getattr(where, "line", None),
                          part="design.temperature", hint="temperature = 45") from None
    if not -100.0 <= t <= 250.0:
        raise DesignError(f"temperature {t:g} degC is out of range (-100 to 250)",
                          file=file, line=getattr(where, "line", None),
                          part="design.temperature")
    return t


HISS_SEED_MAX = 2 ** 63
"""Seeds of the live noise are whole numbers 0 <= seed < 2**63 (PCG64)."""


def hiss_setting(head, file=None, where=None) -> tuple[bool, int]:
    """``(hiss, hiss_seed)`` from a design file's ``[design]`` table: live
    noise on or off (default off) and its seed (default 0), as
    :mod:`solderless.engine.solver.livenoise` plays them. A wrong type is a
    one-line DesignError naming the file and key."""
    on = head.get("hiss", False)
    seed = head.get("hiss_seed", 0)
    line = getattr(where, "line", None)
    if not isinstance(on, bool):
        raise DesignError(f"hiss must be true or false, not {on!r}", file=file, line=line,
                          part="design.hiss", hint="hiss = true")
    return on, check_hiss_seed(seed, file, line)


def check_hiss_seed(seed, file=None, line=None) -> int:
    """A live-noise seed: a whole number from 0 to 2**63 - 1."""
    if isinstance(seed, bool) or not isinstance(seed, int) or not 0 <= seed < HISS_SEED_MAX:
        raise DesignError(f"hiss_seed must be a whole number from 0 to 2**63 - 1, not "
                          f"{seed!r}", file=file, line=line, part="design.hiss_seed",
                          hint="hiss_seed = 7")
    return int(seed)


# ----------------------------------------------------------------- the design

class Design:
    """A design: chain of stages, global parts, links, probes and meters.

    Build one with :func:`load_design`. The object keeps the user's own TOML
    document (``self.doc``) and writes every edit into it, so :meth:`save`
    keeps comments and layout.
    """

    def __init__(self):
        self.name = "untitled"
        self.notes = ""
        self.oversample = 1
        self.source_impedance = 1e3
        self.load = 1e6
        #: circuit temperature, degrees Celsius (None: 27, the SPICE default)
        self.temperature: float | None = None
        #: live noise on (solderless.engine.solver.livenoise) and its seed
        self.hiss = False
        self.hiss_seed = 0
        self.global_nets: list[str] = []
        self.parts_global: list[Part] = []
        self.stages: list[Stage] = []
        self.links: list[Link] = []
        self.probes: list[Probe] = []
        self.meters: dict[str, Any] = {}
        self.models: dict[str, Any] = {}
        self.path: Path | None = None
        self.doc = None          # tomlkit document, or None for netlist designs
        self.netlist = None      # solderless.engine.formats.spice.Netlist for whole-netlist designs
        self._stage_docs: dict[str, Any] = {}
        self._netlist_models: dict[str, str] = {}   # netlist part -> library model
        self.dirty = False
        self.check_warnings: list[str] = []   # the last flatten's circuit check

    # The tomlkit document is parsed on first use (an edit, a save): tomlkit
    # reads about 1 MB a second, ten times slower than tomllib, so a large
    # design that is only rendered never pays for it.
    _lazy_doc: tuple[str, list[str]] | None = None

    def _materialise(self) -> None:
        lazy, self._lazy_doc = self._lazy_doc, None
        if lazy is None:
            return
        import tomlkit
        text, names = lazy
        self.__dict__["doc"] = doc = tomlkit.parse(text)
        sdocs = doc.get("stage", [])
        for i, name in enumerate(names):
            self.__dict__["_stage_docs"].setdefault(name, sdocs[i])

    @property
    def doc(self):
        if self._lazy_doc is not None:
            self._materialise()
        return self.__dict__.get("doc")

    @doc.setter
    def doc(self, value) -> None:
        self._lazy_doc = None
        self.__dict__["doc"] = value

    @property
    def _stage_docs(self) -> dict[str, Any]:
        if self._lazy_doc is not None:
            self._materialise()
        return self.__dict__["_stage_docs"]

    @_stage_docs.setter
    def _stage_docs(self, value) -> None:
        self.__dict__["_stage_docs"] = value

    # ------------------------------------------------------------ queries
    def stage(self, name: str) -> Stage:
        for s in self.stages:
            if s.name == name:
                return s
        close = difflib.get_close_matches(name, [s.name for s in self.stages], n=3)
        raise DesignError(f"no stage named '{name}'", file=self._file(),
                          hint=("did you mean " + ", ".join(close) + "?") if close else
                          "stages: " + ", ".join(s.name for s in self.stages))

    def _file(self) -> str | None:
        return str(self.path) if self.path else None

    def _netlist_part(self, qualname: str) -> Part | None:
        """A whole-netlist design's part by the name ``op`` prints (the
        netlist's own element name, any case), or by the older
        ``netlist.NAME`` spelling."""
        name = qualname[len(NETLIST_STAGE) + 1:] if qualname.lower().startswith(
            NETLIST_STAGE + ".") else qualname
        for p in self.stages[0].parts if self.stages else []:
            if p.name.upper() == name.upper():
                return p
        return None

    def part(self, qualname: str) -> Part:
        """Find a part by ``stage.part`` (or a global part by its name). A
        design made from a whole netlist names its parts as the netlist (and
        ``op``) does: ``RC``, ``Q1``."""
        if self.netlist is not None:
            p = self._netlist_part(qualname)
            if p is not None:
                return p
        elif "." in qualname:
            sname, pname = qualname.split(".", 1)
            try:
                st = self.stage(sname)
                return st.part(pname)
            except (KeyError, DesignError):
                pass
        else:
            for p in self.parts_global:
                if p.name == qualname:
                    return p
        names = [i.qualname for i in self.parts()]
        close = difflib.get_close_matches(qualname, names, n=3)
        raise DesignError(f"no part named '{qualname}'", file=self._file(),
                          hint=("did you mean " + ", ".join(close) + "?") if close else
                          "parts are named stage.part, e.g. " + (names[0] if names else "buffer.R1"))

    def parts(self) -> list[PartInfo]:
        out = []
        groups = [("", self.parts_global)] + [(s.name, s.parts) for s in self.stages]
        for sname, parts in groups:
            for p in parts:
                q = f"{sname}.{p.name}" if sname and self.netlist is None else p.name
                out.append(PartInfo(
                    qualname=q, stage=sname, name=p.name, type=p.type, value=p.value,
                    unit=PART_TYPES[p.type][2], tolerance=p.tolerance,
                    is_pot=p.type == "pot", rotation=p.rotation if p.type == "pot" else None,
                    taper=p.taper if p.type == "pot" else None, model=p.model, note=p.note,
                    labels=list(p.labels), position=p.position if p.type == "switch" else None))
        return out

    def control_probe(self) -> str | None:
        return self.meters.get("control")

    def probe_exprs(self) -> list[str]:
        return [p.expr for p in self.probes]

    def dangling_probes(self) -> list[str]:
        """Warnings for declared probes (``[[probe]]`` and ``[meters]
        control``) that the circuit as it stands can no longer measure, e.g.
        after a stage was bypassed, removed or renamed."""
        return [w for _, w in self.dangling_probe_list()]

    def dangling_probe_list(self) -> list[tuple[str, str]]:
        """``(expression, warning)`` of each dangling declared probe."""
        out = []
        exprs = [(p.name, p.expr) for p in self.probes]
        if self.control_probe():
            exprs.append(("meters.control", self.control_probe()))
        try:
            circ = self.flatten()
        except SolderlessError:
            return out
        names = {e.name for e in circ.elements}
        nets = set(circ.nets())
        for label, expr in exprs:
            try:
                flat = self.resolve_probe(expr)
            except SolderlessError as exc:
                out.append((expr, f"probe '{label}' ({expr}) is left dangling: "
                                  f"{exc.message}"))
                continue
            m = re.fullmatch(r"([a-z]+)\((.*)\)", flat)
            if not m:
                continue
            q, args = m.group(1), [a for a in m.group(2).split(",") if a]
            gone = [a for a in args if (a not in nets and a.lower() not in
                                        {n.lower() for n in nets} and a != GROUND)] \
                if q == "v" else [a for a in args if a not in names]
            if gone:
                out.append((expr, f"probe '{label}' ({expr}) is left dangling: the circuit "
                                  f"has no {'net' if q == 'v' else 'part'} {', '.join(gone)} "
                                  "now"))
        return out

    def copy(self, document: bool = True) -> "Design":
        """A deep copy; ``document=False`` leaves the TOML document out (the
        copy takes edits in its model alone, e.g. the live host's copy of
        a workbench design: the workbench keeps the one document)."""
        if document:
            return copy.deepcopy(self)
        lazy, doc, sdocs = self._lazy_doc, self.__dict__.get("doc"), \
            self.__dict__.get("_stage_docs", {})
        try:
            self._lazy_doc = None
            self.__dict__["doc"], self.__dict__["_stage_docs"] = None, {}
            return copy.deepcopy(self)
        finally:
            self.__dict__["doc"], self.__dict__["_stage_docs"] = doc, sdocs
            self.__dict__["_lazy_doc"] = lazy

    # ------------------------------------------------------------ edits
    def _part_doc(self, qualname: str, key: str, create: bool = True):
        """``(table, key)`` where ``key`` of this part is stored in the
        document (:func:`solderless.engine.design.document.part_entry_location`)."""
        from solderless.engine.design.document import part_entry_location
        return part_entry_location(self, qualname, key, create)

    def _record(self, qualname: str, key: str, value: Any) -> None:
        from solderless.engine.design.document import record
        record(self, qualname, key, value)

    def pot_resistances(self, part: Part) -> tuple[float, float]:
        frac = taper_fraction(part.taper, part.rotation)
        end = max(part.value * POT_END_FRACTION, POT_END_MIN)
        ra = max(part.value * frac, end)
        rb = max(part.value * (1.0 - frac), end)
        return ra, rb

    def _element_values(self, qualname: str, part: Part) -> dict[str, float]:
        if self.netlist is not None:
            qualname = part.name         # the netlist's element, as op prints it
        if part.type == "pot":
            ra, rb = self.pot_resistances(part)
            return {f"{qualname}.a": ra, f"{qualname}.b": rb}
        return {qualname: part.value}

    def set_value(self, qualname: str, value: float | str) -> dict[str, float]:
        """Change a part's value; return the element value changes for the solver.
        ``temperature`` (the design's circuit temperature, degrees Celsius)
        is changed the same way."""
        if qualname == "temperature":
            return self.set_temperature(value)
        part = self.part(qualname)
        if part.type not in VALUE_TYPES:
            raise DesignError(f"a {part.type} has no value to change", part=qualname,
                              file=self._file(), hint="change its model in the design file")
        v = _parse_value(value, part=qualname) if isinstance(value, str) else float(value)
        if part.type in POSITIVE_TYPES and not (v > 0 and math.isfinite(v)):
            shown = value if isinstance(value, str) else _format_value(v, "")
            raise DesignError(f"a {part.type} value must be positive, not {shown}",
                              part=qualname, file=self._file())
        part.value = v
        self._record(qualname, "value", _format_value(v, ""))
        return self._element_values(qualname, part)

    def set_temperature(self, value: float | str) -> dict[str, float]:
        """Change the circuit temperature (degrees Celsius); return the live
        change for the solver (it re-derives the device parameters)."""
        from solderless.engine.solver.simulator import TEMPERATURE_KEY
        from solderless.engine.design.document import design_head
        t = _temperature(value, self._file(), None)
        self.temperature = t
        head = design_head(self)
        if head is not None:
            head["temperature"] = t
        return {TEMPERATURE_KEY: t}

    def set_rotation(self, qualname: str, rotation: float) -> dict[str, float]:
        """Turn a pot (0 = fully towards end ``a``, 1 = towards ``b``)."""
        part = self.part(qualname)
        if part.type != "pot":
            raise DesignError("only a pot can be turned", part=qualname, file=self._file())
        r = float(rotation)
        if not 0.0 <= r <= 1.0:
            raise DesignError(f"rotation must be from 0 to 1, not {rotation}", part=qualname)
        part.rotation = r
        self._record(qualname, "rotation", round(r, 6))
        return self._element_values(qualname, part)

    def set_taper(self, qualname: str, taper: Any) -> dict[str, float]:
        part = self.part(qualname)
        if part.type != "pot":
            raise DesignError("only a pot has a taper", part=qualname, file=self._file())
        part.taper = _check_taper(taper, Where(self._file()), qualname)
        self._record(qualname, "taper", part.taper)
        return self._element_values(qualname, part)

    def set_tolerance(self, qualname: str, tolerance: float | str | None) -> None:
        """Set a part's tolerance (a fraction, or text such as "5%" or "J");
        None removes it. Tolerance does not change the simulation."""
        part = self.part(qualname)
        if tolerance is None:
            from solderless.engine.design.document import forget
            part.tolerance = None
            forget(self, qualname, "tolerance")
            return
        if isinstance(tolerance, str):
            from solderless.engine.values import parse_tolerance
            tol = parse_tolerance(tolerance, part=qualname)
        else:
            tol = float(tolerance)
        if not 0.0 < tol < 1.0:
            raise DesignError(f"tolerance must lie between 0 and 100 %, not {tolerance!r}",
                              part=qualname, file=self._file())
        part.tolerance = tol
        self._record(qualname, "tolerance", f"{tol * 100:g}%")

    def set_model(self, qualname: str, model: str) -> None:
        """Give a device part another model from the parts library (or the
        design's [models]), e.g. swap clipping diodes or a transistor. A
        change of device parameters: rebuild the simulator. The design file
        records it as the part's ``model`` (a ``[stage.models]`` override for
        a template stage, ``[netlist.models]`` for a netlist design)."""
        part = self.part(qualname)
        if part.type not in DEVICE_TYPES:
            raise DesignError(f"a {part.type} has no device model", part=qualname,
                              file=self._file(), hint="use 'value' for passive parts")
        lib = _parts_library(self)
        try:
            m = lib.get(model)
        except SolderlessError as exc:
            raise DesignError(exc.message, part=qualname, file=self._file(),
                              hint=exc.hint) from None
        want = MODEL_KIND[part.type]
        if str(m.kind).upper() != want:
            raise DesignError(f"model '{m.name}' is a {m.kind} model, but this part is a "
                              f"{part.type}", part=qualname, file=self._file(),
                              hint="models of this kind: " + ", ".join(models_of_kind(self, want)))
        part.model = m.name
        if self.netlist is not None:
            self._netlist_models[part.name] = m.name
        self._record(qualname, "model", m.name)

    def set_position(self, qualname: str, position: int) -> None:
        """Move a selector switch (a topology change: rebuild the simulator)."""
        part = self.part(qualname)
        if part.type != "switch":
            raise DesignError("only a switch has positions", part=qualname, file=self._file())
        if not 0 <= int(position) < len(part.positions):
            raise DesignError(f"position must be 0..{len(part.positions) - 1}", part=qualname)
        part.position = int(position)
        self._record(qualname, "position", int(position))

    def bypass_effect(self, stage: str) -> str:
        """What bypassing ``stage`` does, in a designer's words."""
        st = self.stage(stage)
        if "out" in st.ports:
            return "signal passes from its in to its out; its parts are left out"
        if "in" in st.ports:
            return ("side branch: it hears no signal (its input is held at the DC level "
                    "it has at rest), so what it drives sits at rest"
                    + (" - the gain cell at its resting gain"
                       if "detector" in (st.kind or "").lower() else ""))
        return "carries no signal; it cannot be bypassed"

    def set_bypass(self, stage: str, on: bool) -> None:
        """Bypass a stage (a topology change: rebuild the simulator). A series
        stage (in and out ports) has its ``in`` and ``out`` joined and its
        parts removed; a side branch (an ``in`` port but no ``out``, such as
        a detector) keeps its parts but hears no signal: its input is held at
        its resting DC level, so what it drives (a gain cell's control) sits
        at rest. A stage with neither port carries no signal and is refused."""
        st = self.stage(stage)
        if on and "in" not in st.ports and "out" not in st.ports:
            raise DesignError(f"stage '{stage}' carries no signal (no in or out port), so "
                              "it cannot be bypassed", file=self._file(), part=stage,
                              hint="a supply or bias stage stays in the circuit")
        st.bypass = bool(on)
        self.dirty = True
        from solderless.engine.design.document import stage_table
        table = stage_table(self, stage)
        if table is not None:
            table["bypass"] = bool(on)

    # ------------------------------------------------------------ save
    def differences_from(self, base: "Design") -> list[str]:
        """What differs from ``base``, in a builder's words
        (:func:`solderless.engine.design.differences.change_lines`)."""
        from solderless.engine.design.differences import change_lines
        return change_lines(base, self)

    def become_variant(self, target: str | os.PathLike) -> None:
        """Before saving as a new file: give the design its own name (the
        base's name with the new file's name) and notes that say what it is
        a variant of and what differs, so an A/B of base and variant never
        shows the same name twice and the builder reads the changes."""
        target = Path(target)
        base_name = self.name
        base_file = self.path.name if self.path else "an unsaved design"
        diffs: list[str] = []
        if self.path is not None:
            try:
                kw = {}
                if self.netlist is not None:
                    kw = {"in_source": str(self.doc["netlist"].get("in_source", "VIN")),
                          "out_node": str(self.doc["netlist"].get("out_node", "out"))}
                from solderless.engine.design.reading import load_design
                diffs = self.differences_from(load_design(self.path, **kw))
            except SolderlessError:
                diffs = []
        self.name = f"{base_name} ({target.stem})"
        self.notes = (f"Variant of {base_name} ({base_file}), saved as {target.name}. "
                      + ("Changes: " + "; ".join(diffs) + "." if diffs else
                         "No part changed from the base."))
        if self.doc is not None:
            import tomlkit
            if "design" not in self.doc:
                self.doc["design"] = tomlkit.table()
            self.doc["design"]["name"] = self.name
            self.doc["design"]["notes"] = self.notes
        self.dirty = True

    def to_toml(self, target: Path | None = None) -> str:
        """The design file's text. A design made from a whole netlist is
        written as a small design file that names the netlist (relative to
        ``target``'s folder) and carries the edited values."""
        if self.doc is None:
            raise DesignError("this design has no document to save", file=self._file())
        import tomlkit
        if self.netlist is not None and target is not None:
            src = Path(self.doc["netlist"]["file"])
            if not src.is_absolute() and self.path is not None:
                src = (self.path.parent / src).resolve()
            self.doc["netlist"]["file"] = os.path.relpath(src, Path(target).resolve().parent)
        return tomlkit.dumps(self.doc)

    def save(self, path: str | os.PathLike | None = None) -> Path:
        """Write the design atomically (temporary file in the same folder, then
        rename), so a crash never leaves a half-written file. A design made
        from a netlist is saved as a .toml design that uses the netlist; the
        netlist itself is never overwritten."""
        target = Path(path) if path else self.path
        if target is None:
            raise DesignError("no file name to save to", hint="give a path")
        if self.netlist is not None and target.suffix.lower() != ".toml":
            raise DesignError("a design made from a netlist is saved as a .toml design "
                              "file that uses the netlist (the netlist stays untouched)",
                              file=str(target), hint="save under a name ending in .toml")
        text = self.to_toml(target)
        atomic_write_text(target, text)
        self.path = target
        self.dirty = False
        return target

    # ------------------------------------------------------------ flatten
    def flatten(self) -> Circuit:
        """The flat circuit (:func:`solderless.engine.design.flatten.flatten`)."""
        from solderless.engine.design.flatten import flatten
        return flatten(self)

    def resolve_probe(self, expr: str) -> str:
        """Rewrite a probe expression's net names to flat names. A design's
        own probe name (``[[probe]] name``) stands for its expression."""
        for pr in self.probes:
            if expr.strip().lower() == pr.name.strip().lower():
                expr = pr.expr
                break
        parsed = parse_probe(expr)
        if parsed is None:
            raise DesignError(f"probe '{expr}' is not of the form quantity(name) or "
                              f"quantity(a,b)", file=self._file(),
                              hint="e.g. v(gain.out) or iabc(gain.U1)")
        q, args = parsed[0].lower(), parsed[1]
        if self.netlist is not None:
            # names as op prints them; the older 'netlist.' prefix is read too
            args = [a[len(NETLIST_STAGE) + 1:] if a.lower().startswith(NETLIST_STAGE + ".")
                    else a for a in args]
        if q == "v":
            if self.netlist is not None:
                args = [canonical_net(a) for a in args]
            else:
                from solderless.engine.design.flatten import _Flattener
                flat = _Flattener(self)
                args = [flat.run(resolve=a) for a in args]
        elif self.netlist is not None:
            args = [a.upper() for a in args]
        return f"{q}({','.join(args)})"


def file_mode_for(target: str | os.PathLike) -> int:
    """Permission bits for a file written to ``target`` (solderless.engine.fileio)."""
    from solderless.engine.fileio import file_mode_for as mode_for
    return mode_for(target)


def atomic_write_text(target: str | os.PathLike, text: str, **kw) -> Path:
    """Write ``text`` to ``target`` atomically (see
    :func:`solderless.engine.fileio.atomic_write`: temporary file beside the target,
    synced, renamed; mode and links kept; missing folders are an error)."""
    from solderless.engine.fileio import atomic_write
    return atomic_write(target, text, **kw)



def models_of_kind(d: Design, kind: str) -> list[str]:
    """Names of the library models of one kind (D, NPN, PNP, NJF ...)."""
    return sorted(_parts_library(d).names(kind))


def _parts_library(d: Design):
    from solderless.engine.parts import load_library
    lib = load_library()
    for card, where in d.models.get("_cards", []):
        lib.add_model_card(card, file=where.file, line=where.line)
    return lib


