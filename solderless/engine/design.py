"""Designs: an ordered chain of stages, their parts, links and meters.

A :class:`Design` is what the user edits (in a TOML file, on the command line
or in the workbench). :meth:`Design.flatten` turns it into the flat
:class:`solderless.engine.circuit.Circuit` that the solver runs. Edits of part values and
pot rotations map to element value changes (:meth:`Design.set_value`,
:meth:`Design.set_rotation`) that a running simulator takes without a reset;
structural edits (bypass, switch position, stage order) need a rebuild.

The file format is described in ``docs/design-format.md``. Saving rewrites the
user's own TOML document in place with ``tomlkit`` (comments and layout kept)
and replaces the file atomically (write to a temporary file, then rename).
"""
from __future__ import annotations

import copy
import difflib
import math
import os
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from solderless.engine.circuit import GROUND, LINEAR_KINDS, Circuit, Element, Where, canonical_net
from solderless.engine.derived import LiveMapping, LiveSet
from solderless.engine.errors import DesignError, SolderlessError
from solderless.engine.probes import parse_probe
from solderless.engine.unionfind import UnionFind

PRESETS = Path(__file__).resolve().parent.parent / "presets"
STAGE_LIBRARY = PRESETS / "stages"
DESIGN_LIBRARY = PRESETS / "designs"

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


# -------------------------------------------------------------- file reading

def _line_finder(text: str):
    """Return f(name, after=0) -> 1-based line of the first ``name = "<name>"``
    below line ``after``.  The text is indexed once, so finding every part of
    a design is linear in the file's size (rescanning the file for each part
    made a 10 MB design take minutes)."""
    import bisect
    index: dict[str, list[int]] = {}
    pat = re.compile(r'^[ \t]*name[ \t]*=[ \t]*(?:"([^"\n]*)"|\'([^\'\n]*)\')', re.M)
    starts = [0]
    for m in re.finditer(r"\n", text):
        starts.append(m.end())
    for m in pat.finditer(text):
        nm = m.group(1) if m.group(1) is not None else m.group(2)
        index.setdefault(nm, []).append(bisect.bisect_right(starts, m.start()))

    def find(name: str, after: int = 0) -> int | None:
        lines = index.get(name)
        if not lines:
            return None
        k = bisect.bisect_right(lines, after)
        return lines[k] if k < len(lines) else None
    return find


def _toml_load(path: Path) -> tuple[dict, str]:
    from solderless.engine.fileio import read_text
    text = read_text(path, what="design file")
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        m = re.search(r"line (\d+)", str(exc))
        raise DesignError(f"not valid TOML: {_cut(str(exc))}", file=str(path),
                          line=int(m.group(1)) if m else None,
                          hint="check quotes, brackets and '=' on that line") from None
    except RecursionError:
        raise DesignError("not a design: arrays or tables nest too deeply", file=str(path),
                          hint="a design file nests tables a few levels at most") from None
    return data, text


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


def _read_part(raw: Any, where: Where, stage: str) -> Part:
    _expect(isinstance(raw, dict), "a part must be a table with name, type and nodes", where)
    name = raw.get("name")
    _expect(isinstance(name, str) and name.strip() != "", "a part has no name", where,
            hint='add name = "R1"')
    qual = f"{stage}.{name}" if stage else name
    _expect(re.fullmatch(r"[A-Za-z0-9_+\-]+", name) is not None,
            "part names may hold letters, digits, '_', '-' and '+' only", where, qual)
    ptype = raw.get("type")
    if ptype not in PART_TYPES:
        close = difflib.get_close_matches(str(ptype), PART_TYPES, n=3)
        raise DesignError(f"unknown part type '{ptype}'", file=where.file, line=where.line,
                          part=qual, hint=("did you mean " + ", ".join(close) + "?") if close
                          else "known types: " + ", ".join(PART_TYPES))
    p = Part(name=name, type=ptype, nodes=[], where=where, note=str(raw.get("note", "")))
    if ptype == "switch":
        labels = raw.get("labels", [])
        positions = raw.get("positions")
        _expect(isinstance(positions, list) and len(positions) >= 2
                and all(isinstance(x, list) for x in positions),
                "a switch needs positions = [[parts in position 0], [parts in position 1], ...]",
                where, qual)
        p.positions = [[str(n) for n in pos] for pos in positions]
        p.labels = [str(x) for x in labels] or [str(i + 1) for i in range(len(positions))]
        _expect(len(p.labels) == len(p.positions), "a switch needs one label per position",
                where, qual)
        pos = raw.get("position", 0)
        _expect(isinstance(pos, int) and 0 <= pos < len(p.positions),
                f"switch position must be a whole number from 0 to {len(p.positions) - 1}",
                where, qual)
        p.position = pos
        return p
    want = PART_TYPES[ptype][1]
    nodes = raw.get("nodes")
    _expect(isinstance(nodes, list) and all(isinstance(n, (str, int)) for n in nodes),
            f"nodes must be a list of net names ({', '.join(want)})", where, qual)
    extra = _optional_nodes(ptype)     # a MOSFET's bulk node
    _expect(len(nodes) == len(want) or (extra and len(nodes) == len(want) + len(extra)),
            f"a {ptype} has {len(want)} nodes ({', '.join(want)}"
            + (f", or a {len(want) + 1}th for the {', '.join(extra)}" if extra else "")
            + f"), not {len(nodes)}", where, qual)
    p.nodes = [canonical_net(str(n)) for n in nodes]
    if ptype in VALUE_TYPES:
        _expect("value" in raw, f"a {ptype} needs a value", where, qual,
                hint='for example value = "4k7"')
        p.value = _parse_value(raw["value"], file=where.file, line=where.line, part=qual)
        if ptype in POSITIVE_TYPES:
            _expect(p.value > 0 and math.isfinite(p.value),
                    f"a {ptype} value must be positive, not {raw['value']!r}", where, qual)
        elif not math.isfinite(p.value):
            raise DesignError(f"value {raw['value']!r} is not finite", file=where.file,
                              line=where.line, part=qual)
    if "tolerance" in raw:
        from solderless.engine.values import parse_tolerance
        try:
            p.tolerance = parse_tolerance(raw["tolerance"])
        except SolderlessError as exc:
            raise DesignError(exc.message, file=where.file, line=where.line, part=qual) from None
    if ptype in ("cccs", "ccvs"):
        ctl = raw.get("control")
        _expect(isinstance(ctl, str) and ctl.strip() != "",
                f"a {ptype} needs control = \"NAME\": the supply or input part whose "
                "current it follows", where, qual, hint='for example control = "SENSE" '
                "(a 0 V supply in series with the branch)")
        p.control = ctl.strip()
    if ptype == "input":
        p.impedance = _parse_value(raw.get("impedance", 0), file=where.file,
                                   line=where.line, part=qual)
        _expect(p.impedance >= 0, "input impedance cannot be negative", where, qual)
    if ptype == "pot":
        p.taper = _check_taper(raw.get("taper", "linear"), where, qual)
        rot = raw.get("rotation", 0.5)
        _expect(isinstance(rot, (int, float)) and 0.0 <= float(rot) <= 1.0,
                "pot rotation must be a number from 0 to 1", where, qual)
        p.rotation = float(rot)
    if ptype in DEVICE_TYPES:
        model = raw.get("model")
        _expect(isinstance(model, str), f"a {ptype} needs a model", where, qual,
                hint='for example model = "npn-general"; see solderless/presets/parts.toml')
        p.model = model
        params = raw.get("params", {})
        _expect(isinstance(params, dict), "params must be a table, e.g. { BF = 250 }", where, qual)
        p.params = {}
        for k, v in params.items():
            p.params[k.upper()] = _parse_value(v, file=where.file, line=where.line, part=qual)
    return p


def _optional_nodes(ptype: str) -> dict[str, str]:
    """Trailing nodes a device part may add -> the node each is tied to
    when left out (the device's description in the registry)."""
    if ptype not in MODEL_KIND:
        return {}
    return dict(_registry().DEVICES[PART_TYPES[ptype][0]].part_optional)


def _read_stage_body(body: dict, name: str, where: Where, finder) -> Stage:
    ports = body.get("ports", ["in", "out"])
    _expect(isinstance(ports, list) and all(isinstance(p, str) for p in ports),
            "ports must be a list of net names", where, name)
    parts_raw = body.get("part", [])
    _expect(isinstance(parts_raw, list), "[[stage.part]] entries must be tables", where, name)
    parts = []
    seen = set()
    line = where.line or 0
    for raw in parts_raw:
        pname = raw.get("name") if isinstance(raw, dict) else None
        pline = finder(pname, line) if isinstance(pname, str) and finder else None
        pw = Where(where.file, pline or where.line)
        part = _read_part(raw, pw, name)
        _expect(part.name not in seen, f"two parts are named '{part.name}'", pw,
                f"{name}.{part.name}", hint="give each part of a stage its own name")
        seen.add(part.name)
        parts.append(part)
    return Stage(name=name, ports=[canonical_net(p) for p in ports], parts=parts,
                 kind=str(body.get("kind", "")), notes=str(body.get("notes", "")), where=where)


def stage_library() -> dict[str, Path]:
    """Names (``group/name``) and files of the stage templates under solderless/presets/stages."""
    out = {}
    if STAGE_LIBRARY.is_dir():
        for f in sorted(STAGE_LIBRARY.rglob("*.toml")):
            out[f.relative_to(STAGE_LIBRARY).with_suffix("").as_posix()] = f
    return out


def builtin_designs() -> dict[str, Path]:
    """Names and files of the built-in designs under solderless/presets/designs."""
    if not DESIGN_LIBRARY.is_dir():
        return {}
    return {f.stem: f for f in sorted(DESIGN_LIBRARY.glob("*.toml"))}


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


def load_stage_template(name: str, where: Where | None = None) -> Stage:
    """Load a stage template from the stage library by ``group/name``."""
    lib = stage_library()
    where = where or Where()
    if name not in lib:
        close = difflib.get_close_matches(name, lib, n=3)
        raise DesignError(f"no stage template '{name}' in solderless/presets/stages",
                          file=where.file, line=where.line,
                          hint=("did you mean " + ", ".join(close) + "?") if close else
                          "see `solderless designs` for the stage library")
    path = lib[name]
    data, text = _toml_load(path)
    body = data.get("stage")
    _expect(isinstance(body, dict), "a stage template needs a [stage] table",
            Where(str(path), 1))
    return _read_stage_body(body, name.split("/")[-1], Where(str(path), 1),
                            _line_finder(text))


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

    def copy(self) -> "Design":
        return copy.deepcopy(self)

    # ------------------------------------------------------------ edits
    def _part_doc(self, qualname: str, key: str, create: bool = True):
        """Return the tomlkit table where ``key`` of this part is stored, creating
        a [stage.values] / [stage.rotations] override for template stages
        (unless ``create`` is False: then None where it does not exist)."""
        if self.doc is None:
            return None
        if self.netlist is not None:
            p = self._netlist_part(qualname)
            if p is None:
                return None
            qualname = f"{NETLIST_STAGE}.{p.name}"
        if "." in qualname:
            sname, pname = qualname.split(".", 1)
            sdoc = self._stage_docs.get(sname)
            if sdoc is None:
                return None
            if "part" in sdoc:
                for raw in sdoc["part"]:
                    if raw.get("name") == pname:
                        return raw, key
            table = {"value": "values", "rotation": "rotations", "taper": "tapers",
                     "position": "positions", "tolerance": "tolerances",
                     "model": "models"}[key]
            import tomlkit
            if table not in sdoc:
                if not create:
                    return None
                sdoc[table] = tomlkit.table()
            return sdoc[table], pname
        for raw in self.doc.get("design", {}).get("part", []):
            if raw.get("name") == qualname:
                return raw, key
        return None

    def _record(self, qualname: str, key: str, value: Any) -> None:
        self.dirty = True
        loc = self._part_doc(qualname, key)
        if loc is not None:
            table, k = loc
            table[k] = value

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
            raise DesignError(f"a {part.type} value must be positive, not {value!r}",
                              part=qualname, file=self._file())
        part.value = v
        self._record(qualname, "value", _format_value(v, ""))
        return self._element_values(qualname, part)

    def set_temperature(self, value: float | str) -> dict[str, float]:
        """Change the circuit temperature (degrees Celsius); return the live
        change for the solver (it re-derives the device parameters)."""
        from solderless.engine.solver.simulator import TEMPERATURE_KEY
        t = _temperature(value, self._file(), None)
        self.temperature = t
        if self.doc is not None:
            head = self.doc.get("design")
            if head is None:
                import tomlkit
                head = tomlkit.table()
                self.doc["design"] = head
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
            part.tolerance = None
            loc = self._part_doc(qualname, "tolerance")
            if loc is not None and loc[1] in loc[0]:
                del loc[0][loc[1]]
            self.dirty = True
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
        if self.doc is not None and stage in self._stage_docs:
            self._stage_docs[stage]["bypass"] = bool(on)

    # ------------------------------------------------------------ save
    def differences_from(self, base: "Design") -> list[str]:
        """What differs from ``base``, part by part, in a builder's words:
        values, pot rotations and tapers, device models, bypassed stages."""
        out = []
        mine = {p.qualname: p for p in self.parts()}
        for p in base.parts():
            q = mine.get(p.qualname)
            if q is None:
                out.append(f"{p.qualname} removed")
                continue
            if p.value != q.value and q.value is not None:
                out.append(f"{p.qualname} {_format_value(p.value or 0.0, p.unit)} -> "
                           f"{_format_value(q.value, q.unit)}")
            if p.is_pot and p.rotation != q.rotation:
                out.append(f"{p.qualname} rotation {p.rotation:.2f} -> {q.rotation:.2f}")
            if p.is_pot and p.taper != q.taper:
                out.append(f"{p.qualname} taper {p.taper} -> {q.taper}")
            if p.model != q.model:
                out.append(f"{p.qualname} model {p.model} -> {q.model}")
        for s in self.stages:
            try:
                b = base.stage(s.name).bypass
            except DesignError:
                continue
            if b != s.bypass:
                out.append(f"stage {s.name} {'bypassed' if s.bypass else 'back in'}")
        return out

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
        """Flatten to one circuit: stage-local nets get ``stage.`` prefixes, the
        chain joins each ``out`` to the next ``in``, links join ports, a
        bypassed stage joins its ``in`` to its ``out``. The instrument is an
        input source ``jack`` with the source impedance in series, and the
        output jack is loaded by ``load``."""
        if self.netlist is not None:
            return self._flatten_netlist()
        return _Flattener(self).run()

    def _flatten_netlist(self) -> Circuit:
        circ = self.netlist.circuit.copy()
        vals = {}
        for st in self.stages:
            for p in st.parts:
                vals.update(self._element_values(p.name, p))
        lib = _parts_library(self) if self._netlist_models else None
        for e in circ.elements:
            if e.name in vals and vals[e.name] is not None:
                e.value = vals[e.name]
            if e.name in self._netlist_models:
                m = lib.get(self._netlist_models[e.name])
                params = dict(m.element_params())
                dev = _registry().DEVICES.get(e.kind)
                if dev is not None and dev.typed:
                    params["TYPE"] = str(m.kind).upper()
                e.params = params
                from solderless.engine.analysis.regions import ratings_of
                if ratings_of(m):
                    circ.ratings[e.name] = ratings_of(m)
        if self.temperature is not None:
            circ.temperature = self.temperature
        return circ

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


class _UnionFind(UnionFind):
    """Net sets of a design: ground names its set, then the name seen first."""

    def __init__(self):
        super().__init__(keep=GROUND)


class _Flattener:
    def __init__(self, d: Design):
        self.d = d
        self.file = d._file()
        self.glob = set(d.global_nets) | {GROUND}
        self.ratings: dict[str, dict[str, float]] = {}
        self.off_by_design: set[str] = set()

    def local(self, stage: str, net: str) -> str:
        return net if net in self.glob else f"{stage}.{net}"

    def run(self, resolve: str | None = None):
        d = self.d
        uf = _UnionFind()
        for st in d.stages:
            if st.bypass and "in" not in st.ports and "out" not in st.ports:
                raise DesignError(f"stage '{st.name}' carries no signal (no in or out "
                                  "port), so it cannot be bypassed", file=self.file,
                                  line=st.where.line, hint="take bypass off this stage")
        # a bypassed side branch (an in port, no out port, e.g. a detector)
        # keeps its parts but hears no signal: its input is held at the DC
        # level the signal net has, so its effect sits at rest
        resting = [s for s in d.stages if s.bypass and "out" not in s.ports]
        active = [s for s in d.stages if not s.bypass or s in resting]
        # chain: out of each stage joins in of the next; a bypassed series
        # stage joins in and out
        prev_out = None
        rest_of: dict[str, str] = {}
        for st in d.stages:
            in_net, out_net = self.local(st.name, "in"), self.local(st.name, "out")
            uf.add(in_net)
            if prev_out is not None and "in" in st.ports:
                if st in resting:
                    rest_of[st.name] = prev_out
                else:
                    uf.union(prev_out, in_net)
            if st.bypass and st not in resting:
                uf.union(in_net, out_net)
            if "out" in st.ports:
                prev_out = out_net
        for ln in d.links:
            for s, port in (ln.a, ln.b):
                st = d.stage(s)
                if port not in st.ports:
                    raise DesignError(f"stage '{s}' has no port '{port}'", file=self.file,
                                      line=ln.where.line,
                                      hint="its ports are " + ", ".join(st.ports))
            # a bypassed side branch's input listens to nothing: held at rest
            rest_end = [(e, o) for e, o in ((ln.a, ln.b), (ln.b, ln.a))
                        if e[1] == "in" and any(r.name == e[0] for r in resting)]
            if rest_end:
                (s, _), other = rest_end[0]
                rest_of[s] = self.local(other[0], other[1])
                continue
            uf.union(self.local(ln.a[0], ln.a[1]), self.local(ln.b[0], ln.b[1]))
        if resolve is not None:
            name = canonical_net(resolve)
            if name in self.glob:
                return uf.find(name)
            if "." not in name:
                raise DesignError(f"net '{resolve}' must be written stage.net or be a "
                                  "global net", file=self.file)
            s, n = name.split(".", 1)
            d.stage(s)
            return uf.find(self.local(s, canonical_net(n)))

        if not d.stages:
            raise DesignError("the design has no stages", file=self.file,
                              hint="add a [[stage]] table")
        # the jack feeds the first stage with an `in` port; the output is the
        # last stage with an `out` port (side branches such as a detector have
        # no `out`; a bias stage has no ports at all)
        with_in = [s for s in d.stages if "in" in s.ports]
        with_out = [s for s in d.stages if "out" in s.ports]
        if not with_in or not with_out:
            raise DesignError("the chain needs a stage with an 'in' port and one with an "
                              "'out' port", file=self.file)
        first_in = uf.find(self.local(with_in[0].name, "in"))
        last_out = uf.find(self.local(with_out[-1].name, "out"))
        elements: list[Element] = []
        names: set[str] = set()

        def add(e: Element):
            if e.name in names:
                raise DesignError(f"two parts flatten to the name '{e.name}'", file=self.file,
                                  line=e.where.line if e.where else None, part=e.name)
            names.add(e.name)
            elements.append(e)

        lib = None
        for p in d.parts_global:
            lib = self.emit(p, "", uf, add, lib)
        for st in active:
            switched: set[str] = set()
            chosen: set[str] = set()
            for p in st.parts:
                if p.type == "switch":
                    for pos in p.positions:
                        for n in pos:
                            try:
                                st.part(n)
                            except KeyError:
                                raise DesignError(f"switch position names part '{n}', which "
                                                  f"stage '{st.name}' does not have",
                                                  file=p.where.file, line=p.where.line,
                                                  part=f"{st.name}.{p.name}") from None
                        switched.update(pos)
                    chosen.update(p.positions[p.position])
            for p in st.parts:
                if p.type == "switch" or (p.name in switched and p.name not in chosen):
                    continue
                lib = self.emit(p, st.name, uf, add, lib)
        has_input = any(e.params.get("_input") for e in elements)
        input_name = None
        if not has_input:
            src = f"{JACK}.src"
            add(Element(JACK, "V", (src, GROUND), 0.0, {"_input": True}, Where(self.file)))
            add(Element(f"{JACK}.rs", "R", (src, first_in),
                        max(d.source_impedance, 1e-3), {}, Where(self.file)))
            input_name = JACK
        else:
            input_name = next(e.name for e in elements if e.params.get("_input"))
        if rest_of:
            levels = self.resting_levels(rest_of)
            for sname, vdc in levels.items():
                st = d.stage(sname)
                add(Element(f"{sname}.{REST_SOURCE}", "V",
                            (uf.find(self.local(sname, "in")), GROUND), vdc, {},
                            st.where))
        if d.load and d.load > 0:
            add(Element("load", "R", (last_out, GROUND), d.load, {}, Where(self.file)))
        circ = Circuit(elements=elements, input_source=input_name, output=(last_out, GROUND),
                       title=d.name, where=Where(self.file), ratings=dict(self.ratings),
                       off_by_design=set(self.off_by_design),
                       temperature=d.temperature)
        from solderless.engine import limits
        if len(elements) > limits.MAX_ELEMENTS:
            raise DesignError(f"the design has {len(elements)} parts; the limit is "
                              f"{limits.MAX_ELEMENTS}", file=self.file)
        # the check's warnings (a net with one connection) are kept for the
        # front ends to show
        d.check_warnings = validate_circuit(circ, self.file)
        return circ

    def resting_levels(self, rest_of: dict[str, str]) -> dict[str, float]:
        """DC volts of the signal net each bypassed side branch listens to,
        from the operating point of the design with those branches in."""
        from solderless.engine.solver.dcop import operating_point
        d = self.d
        flags = {s.name: s.bypass for s in d.stages}
        try:
            for s in d.stages:
                if s.name in rest_of:
                    s.bypass = False
            op = operating_point(_Flattener(d).run())
            flat = _Flattener(d)
            out = {}
            for sname, net in rest_of.items():
                rep = flat.run(resolve=net)
                out[sname] = 0.0 if rep == GROUND else float(op.nets.get(rep, 0.0))
            return out
        finally:
            for s in d.stages:
                s.bypass = flags[s.name]

    def supply_span(self) -> float:
        """The largest DC supply in the design (V): an OTA's output compliance
        window is set inside it. 9 V when the design has no supply part."""
        vals = [abs(p.value) for p in self.d.parts_global if p.type == "supply"]
        vals += [abs(p.value) for st in self.d.stages for p in st.parts if p.type == "supply"]
        return max(vals) if vals else 9.0

    def emit(self, p: Part, stage: str, uf: _UnionFind, add, lib):
        q = f"{stage}.{p.name}" if stage else p.name
        kind, _, _ = PART_TYPES[p.type]
        nodes = tuple(uf.find(self.local(stage, n)) if stage else uf.find(n) for n in p.nodes)
        w = p.where
        if p.type == "pot":
            ra, rb = self.d.pot_resistances(p)
            add(Element(f"{q}.a", "R", (nodes[0], nodes[1]), ra, {}, w))
            add(Element(f"{q}.b", "R", (nodes[1], nodes[2]), rb, {}, w))
            return lib
        if p.type in ("cccs", "ccvs"):
            ctl = p.control or ""
            if stage and any(o.name == ctl for o in self.d.stage(stage).parts):
                ctl = f"{stage}.{ctl}"
            add(Element(q, kind, nodes, p.value, {"CONTROL": ctl}, w))
            return lib
        if p.type == "input":
            if p.impedance and p.impedance > 0:
                mid = f"{q}.src"
                add(Element(q, "V", (mid, nodes[1]), p.value, {"_input": True}, w))
                add(Element(f"{q}.rs", "R", (mid, nodes[0]), p.impedance, {}, w))
            else:
                add(Element(q, "V", nodes, p.value, {"_input": True}, w))
            return lib
        params: dict[str, Any] = {}
        if p.type in DEVICE_TYPES and p.model == "_inline":
            params = dict(p.params)  # from an imported netlist's .model card
        elif p.type in DEVICE_TYPES:
            lib = lib or _parts_library(self.d)
            try:
                model = lib.get(p.model)
            except SolderlessError as exc:
                raise DesignError(exc.message, file=w.file, line=w.line, part=q,
                                  hint=exc.hint) from None
            want = MODEL_KIND[p.type]
            mkind = str(model.kind).upper()
            if mkind != want:
                raise DesignError(f"model '{p.model}' is a {mkind} model, but this part is "
                                  f"a {p.type}", file=w.file, line=w.line, part=q,
                                  hint=f"choose a {want} model")
            params = dict(model.element_params(supply=self.supply_span()))
            params.update(p.params)
            from solderless.engine.analysis.regions import OFF_BY_DESIGN, ratings_of
            if ratings_of(model):
                self.ratings[q] = ratings_of(model)
            if OFF_BY_DESIGN in (p.note or "").lower():
                self.off_by_design.add(q)
            if _registry().DEVICES[kind].typed:
                params["TYPE"] = want
        if p.type in DEVICE_TYPES:
            want_nodes = PART_TYPES[p.type][1]
            ties = list(_optional_nodes(p.type).values())
            for tie in ties[len(nodes) - len(want_nodes):]:
                # left out: tied as a discrete part's (a MOSFET's bulk on its source)
                nodes = nodes + (nodes[want_nodes.index(tie)],)
        add(Element(q, kind, nodes, p.value if p.value is not None else 0.0, params, w))
        return lib


def models_of_kind(d: Design, kind: str) -> list[str]:
    """Names of the library models of one kind (D, NPN, PNP, NJF ...)."""
    return sorted(_parts_library(d).names(kind))


def _parts_library(d: Design):
    from solderless.engine.parts import load_library
    lib = load_library()
    for card, where in d.models.get("_cards", []):
        lib.add_model_card(card, file=where.file, line=where.line)
    return lib


# ------------------------------------------------------------- validation

def validate_circuit(circ: Circuit, file: str | None = None) -> list[str]:
    """Check a flat circuit before it reaches the solver.

    Raises DesignError for: no ground, non-positive R/C/L, a net with no DC
    path to ground, a loop of voltage sources (and inductors). Returns
    warnings (nets with only one connection).
    """
    from solderless.engine.circuit import KIND_NODES
    warnings = []
    touches_ground = False
    count: dict[str, list[str]] = {}
    for e in circ.elements:
        w = e.where or Where(file)
        if e.kind not in KIND_NODES:
            raise DesignError(f"unknown element kind '{e.kind}'", file=w.file, line=w.line,
                              part=e.name)
        if len(e.nodes) != KIND_NODES[e.kind]:
            raise DesignError(f"{e.kind} needs {KIND_NODES[e.kind]} nodes, has {len(e.nodes)}",
                              file=w.file, line=w.line, part=e.name)
        if e.kind in ("R", "C", "L") and not (e.value > 0 and math.isfinite(e.value)):
            raise DesignError(f"value must be positive, not {e.value!r}", file=w.file,
                              line=w.line, part=e.name)
        if not math.isfinite(float(e.value)):
            raise DesignError("value is not a finite number", file=w.file, line=w.line,
                              part=e.name)
        for n in e.nodes:
            if n == GROUND:
                touches_ground = True
            count.setdefault(n, []).append(e.name)
    if not touches_ground:
        raise DesignError("the circuit has no ground (net 0 or gnd)", file=file,
                          hint="connect the supply's negative side and the signal "
                          "return to 0")
    # DC paths: everything but capacitors and current sources conducts at DC
    # (device terminals conduct through their junctions).
    uf = _UnionFind()
    uf.add(GROUND)
    for e in circ.elements:
        for n in e.nodes:
            uf.add(n)
        if e.kind in ("C", "I", "F"):
            continue
        if e.kind in ("E", "G", "H"):
            uf.union(e.nodes[0], e.nodes[1]) if e.kind in ("E", "H") else None
            continue
        for n in e.nodes[1:]:
            uf.union(e.nodes[0], n)
    # an E or H output is a path; a G's or F's output pair is not (ideal
    # current source)
    for n, who in count.items():
        if n != GROUND and uf.find(n) != uf.find(GROUND):
            raise DesignError(f"net '{n}' has no DC path to ground (it connects only "
                              f"through capacitors or current sources: {', '.join(who)})",
                              file=file, part=who[0],
                              hint="add a bias resistor to ground or a reference")
        if n != GROUND and len(who) == 1:
            warnings.append(f"net '{n}' connects to only one terminal ({who[0]})")
    # loops of voltage sources and inductors
    vl = _UnionFind()
    for e in circ.elements:
        if e.kind in ("V", "L", "E", "H"):
            a, b = e.nodes[0], e.nodes[1]
            if not vl.union(a, b):
                w = e.where or Where(file)
                raise DesignError("voltage sources (or inductors) form a loop", file=w.file,
                                  line=w.line, part=e.name,
                                  hint="add a series resistance or remove one source")
    return warnings


# ----------------------------------------------------------------- loading

def load_design(source: str | os.PathLike, *, in_source: str = "VIN",
                out_node: str = "out") -> Design:
    """Load a design from a TOML file, a built-in design's name, or a SPICE
    netlist (``.cir``, ``.sp``, ``.spice``, ``.net``, ``.ckt``)."""
    text_src = str(source)
    path = Path(text_src)
    if not path.exists():
        designs = builtin_designs()
        if text_src in designs:
            path = designs[text_src]
        else:
            close = difflib.get_close_matches(text_src, designs, n=3)
            raise DesignError(f"no design file or built-in design named '{text_src}'",
                              hint=("did you mean " + ", ".join(close) + "?") if close else
                              "built-in designs: " + (", ".join(designs) or "none"))
    if path.is_dir():
        raise DesignError("is a folder, not a design file", file=str(path))
    if path.suffix.lower() in (".cir", ".sp", ".spice", ".net", ".ckt", ".txt"):
        return _design_from_netlist(path, in_source, out_node)
    try:
        return _design_from_toml(path)
    except (TypeError, AttributeError, KeyError, ValueError, IndexError) as exc:
        # a value of a type the reader did not check for: still the user's
        # file, so a one-line answer, not a traceback
        if isinstance(exc, SolderlessError):
            raise
        raise DesignError(f"a value in the design has the wrong type or form "
                          f"({type(exc).__name__}: {_cut(str(exc), 80)})", file=str(path),
                          hint="compare the file with docs/design-format.md") from None
    except RecursionError:
        raise DesignError("the design nests too deeply to read", file=str(path)) from None


def _part_type(e: Element) -> str:
    """The design part type of a flat element (a BJT, JFET or MOSFET by its
    TYPE)."""
    return _registry().part_type_of(e.kind, e.params) or KIND_TO_TYPE.get(e.kind, "resistor")


def _design_from_netlist(path: Path, in_source: str, out_node: str) -> Design:
    from solderless.engine.formats.spice import load_netlist
    nl = load_netlist(path, in_source=in_source, out_node=out_node)
    circ = nl.circuit
    if circ.input_source is None:
        # an exported netlist names its signal source as the editor numbered
        # it (V2, V3 ...): with the default name absent, take the one source
        # that has a waveform, and say so
        signal = [e.name for e in circ.elements
                  if e.kind == "V" and (e.params or {}).get("wave")]
        if in_source.upper() == "VIN" and len(signal) == 1:
            circ.input_source = in_source = signal[0]
            nl.warnings.append(f"{path}: no source named VIN; the input drives "
                               f"{signal[0]}, the netlist's only signal source "
                               "(--in-source NAME chooses another)")
        else:
            raise DesignError(f"the netlist has no voltage source named '{in_source}' for "
                              "the input", file=str(path),
                              hint="name the input source VIN or pass --in-source NAME"
                              + (f" (its signal sources: {', '.join(signal)})"
                                 if signal else ""))
    if out_node.lower() not in {n.lower() for n in circ.nets()}:
        raise DesignError(f"the netlist has no node '{out_node}' for the output",
                          file=str(path), hint="pass --out-node NAME")
    d = Design()
    d.path = path
    d.name = nl.title or path.stem
    d.netlist = nl
    d.temperature = circ.temperature  # .temp / .options temp=
    parts = []
    for e in circ.elements:
        parts.append(Part(name=e.name, type=_part_type(e), nodes=list(e.nodes),
                          value=e.value if e.kind in LINEAR_KINDS else None,
                          model=nl.element_models.get(e.name),
                          control=(e.params or {}).get("CONTROL"),
                          where=e.where or Where(str(path))))
    d.stages = [Stage(name="netlist", ports=["in", "out"], parts=parts, kind="netlist",
                      where=Where(str(path)))]
    import tomlkit
    d.doc = tomlkit.document()
    head = tomlkit.table()
    head["name"] = d.name
    d.doc["design"] = head
    table = tomlkit.table()
    table["file"] = str(path.resolve())
    table["in_source"] = in_source
    table["out_node"] = out_node
    d.doc["netlist"] = table
    d._stage_docs["netlist"] = table
    return d


def _design_from_netlist_toml(path: Path, data: dict, doc) -> Design:
    """A design file whose [netlist] table names a whole netlist, with the
    user's edited values ([netlist.values], [netlist.rotations] ...)."""
    table = data["netlist"]
    w = Where(str(path))
    _expect(isinstance(table, dict) and isinstance(table.get("file"), str),
            "[netlist] needs file = \"name.cir\"", w)
    npath = Path(table["file"])
    if not npath.is_absolute():
        npath = path.parent / npath
    d = _design_from_netlist(npath, str(table.get("in_source", "VIN")),
                             str(table.get("out_node", "out")))
    d.path = path
    d.doc = doc
    d._stage_docs["netlist"] = doc["netlist"]
    head = _table(data, "design", w)
    d.name = str(head.get("name", d.name))
    d.notes = str(head.get("notes", ""))
    st = d.stages[0]
    for pname, val in _table(table, "values", w).items():
        try:
            part = st.part(pname)
        except KeyError:
            raise DesignError(f"the netlist has no part '{pname}'", file=str(path),
                              part=pname) from None
        part.value = _parse_value(val, file=str(path), part=pname)
        if part.type in POSITIVE_TYPES and not part.value > 0:
            raise DesignError("value must be positive", file=str(path), part=pname)
    for pname, mname in table.get("models", {}).items():
        try:
            st.part(pname)
        except KeyError:
            raise DesignError(f"the netlist has no part '{pname}'", file=str(path),
                              part=pname) from None
        try:
            d.set_model(pname, str(mname))
        except DesignError as exc:
            raise DesignError(exc.message, file=str(path), part=pname, hint=exc.hint) from None
    d.dirty = False
    return d


def _template_part(st: Stage, pname: str, w: Where, stage: str) -> Part:
    try:
        return st.part(pname)
    except KeyError:
        raise DesignError(f"template '{st.template}' has no part '{pname}'", file=w.file,
                          line=w.line, part=f"{stage}.{pname}",
                          hint="parts: " + ", ".join(p.name for p in st.parts)) from None


def _read_link_end(text: Any, where: Where) -> tuple[str, str]:
    _expect(isinstance(text, str) and text.count(".") == 1,
            f"a link end must be written stage.port, not {text!r}", where)
    s, p = text.split(".")
    return s, canonical_net(p)


def _design_from_toml(path: Path) -> Design:
    import tomlkit
    data, text = _toml_load(path)
    finder = _line_finder(text)
    file = str(path)
    if "netlist" in data:
        return _design_from_netlist_toml(path, data, tomlkit.parse(text))
    d = Design()
    d.path = path
    head = _table(data, "design", Where(file, 1))
    d.name = str(head.get("name", path.stem))
    d.notes = str(head.get("notes", ""))
    ov = head.get("oversample", 1)
    _expect(ov in (1, 2, 4, 8), f"oversample must be 1, 2, 4 or 8, not {ov!r}", Where(file))
    d.oversample = int(ov)
    if "source_impedance" in head:
        d.source_impedance = _parse_value(head["source_impedance"], file=file,
                                          part="design.source_impedance")
    if "load" in head:
        d.load = _parse_value(head["load"], file=file, part="design.load")
    if "temperature" in head:
        d.temperature = _temperature(head["temperature"], file, Where(file))
    gn = head.get("global_nets", [])
    _expect(isinstance(gn, list), "global_nets must be a list of net names", Where(file))
    d.global_nets = [canonical_net(str(n)) for n in gn]
    # user model cards
    cards = _table(data, "models", Where(file)).get("cards", "")
    _expect(isinstance(cards, str), "[models] cards must be text (a multi-line string of "
            ".model cards)", Where(file))
    if cards:
        base = None
        for i, line in enumerate(text.splitlines(), 1):
            if line.strip().startswith("[models]"):
                base = i
        for j, line in enumerate(str(cards).splitlines()):
            if line.strip().lower().startswith(".model"):
                d.models.setdefault("_cards", []).append(
                    (line.strip(), Where(file, (base or 0) + 2 + j if base else None)))
    for raw in _tables(head, "part", Where(file)):
        nm = raw.get("name") if isinstance(raw, dict) else None
        w = Where(file, finder(nm) if isinstance(nm, str) else None)
        d.parts_global.append(_read_part(raw, w, ""))
    stages_raw = data.get("stage", [])
    _expect(isinstance(stages_raw, list) and stages_raw
            and all(isinstance(x, dict) for x in stages_raw),
            "the design needs [[stage]] tables", Where(file), hint="see docs/design-format.md")
    seen = set()
    line = 0
    stage_names: list[str] = []
    for i, raw in enumerate(stages_raw):
        name = raw.get("name")
        sline = finder(name, line) if isinstance(name, str) else None
        w = Where(file, sline)
        line = sline or line
        _expect(isinstance(name, str) and re.fullmatch(r"[A-Za-z0-9_\-]+", name or "") is not None,
                "a stage needs a name of letters, digits, '_' or '-'", w)
        _expect(name not in seen, f"two stages are named '{name}'", w, name)
        seen.add(name)
        if "template" in raw:
            st = load_stage_template(str(raw["template"]), w)
            st.name, st.template = name, str(raw["template"])
            st.where = w
            for pname, val in _table(raw, "values", w, name).items():
                try:
                    part = st.part(pname)
                except KeyError:
                    raise DesignError(f"template '{st.template}' has no part '{pname}'",
                                      file=file, line=sline, part=f"{name}.{pname}",
                                      hint="parts: " + ", ".join(p.name for p in st.parts)) from None
                part.value = _parse_value(val, file=file, line=sline, part=f"{name}.{pname}")
                if part.type in POSITIVE_TYPES and part.value <= 0:
                    raise DesignError("value must be positive", file=file, line=sline,
                                      part=f"{name}.{pname}")
            for pname, rot in _table(raw, "rotations", w, name).items():
                try:
                    part = st.part(pname)
                except KeyError:
                    raise DesignError(f"template '{st.template}' has no pot '{pname}'",
                                      file=file, line=sline, part=f"{name}.{pname}") from None
                _expect(part.type == "pot" and isinstance(rot, (int, float)) and 0 <= rot <= 1,
                        "rotations must be numbers from 0 to 1 for pots", w, f"{name}.{pname}")
                part.rotation = float(rot)
            for pname, tap in _table(raw, "tapers", w, name).items():
                part = _template_part(st, pname, w, name)
                part.taper = _check_taper(tap, w, f"{name}.{pname}")
            for pname, pos in _table(raw, "positions", w, name).items():
                part = _template_part(st, pname, w, name)
                _expect(part.type == "switch" and isinstance(pos, int)
                        and not isinstance(pos, bool) and 0 <= pos < len(part.positions),
                        "positions are whole numbers that pick a switch position",
                        w, f"{name}.{pname}")
                part.position = pos
            for pname, mname in _table(raw, "models", w, name).items():
                part = _template_part(st, pname, w, name)
                _expect(part.type in DEVICE_TYPES and isinstance(mname, str),
                        f"[stage.models] {pname}: only a device part takes a model name",
                        Where(file, sline), f"{name}.{pname}")
                part.model = str(mname)
            for pname, tol in _table(raw, "tolerances", w, name).items():
                from solderless.engine.values import parse_tolerance
                try:
                    st.part(pname).tolerance = parse_tolerance(
                        tol, file=file, line=sline, part=f"{name}.{pname}")
                except KeyError:
                    raise DesignError(f"template '{st.template}' has no part '{pname}'",
                                      file=file, line=sline, part=f"{name}.{pname}") from None
            for prt in _tables(raw, "part", w, name):  # extra parts added to a template
                pw = Where(file, finder(prt.get("name", ""), line) or sline)
                st.parts.append(_read_part(prt, pw, name))
            if "kind" in raw:
                st.kind = str(raw["kind"])
            if "notes" in raw:
                st.notes = str(raw["notes"])
        elif "netlist" in raw:
            st = _stage_from_netlist(raw, name, path, w)
        else:
            st = _read_stage_body(raw, name, w, finder)
        st.bypass = bool(raw.get("bypass", False))
        d.stages.append(st)
        stage_names.append(name)
    for raw in _tables(data, "link", Where(file)):
        w = Where(file, None)
        _expect(isinstance(raw, dict) and "from" in raw and "to" in raw,
                "a [[link]] needs from = \"stage.port\" and to = \"stage.port\"", w)
        d.links.append(Link(_read_link_end(raw["from"], w), _read_link_end(raw["to"], w), w))
    for raw in _tables(data, "probe", Where(file)):
        _expect(isinstance(raw, dict) and "expr" in raw,
                "a [[probe]] needs expr = \"v(stage.net)\" or similar", Where(file))
        d.probes.append(Probe(str(raw.get("name", raw["expr"])), str(raw["expr"]), Where(file)))
    d.meters = dict(_table(data, "meters", Where(file)))
    d._lazy_doc = (text, stage_names)
    return d


def _stage_from_netlist(raw: dict, name: str, design_path: Path, w: Where) -> Stage:
    from solderless.engine.formats.spice import load_netlist
    npath = (design_path.parent / str(raw["netlist"])).resolve()
    nl = load_netlist(npath)
    sub = raw.get("subckt")
    if sub:
        subs = {k.upper(): v for k, v in nl.subckts.items()}
        if str(sub).upper() not in subs:
            raise DesignError(f"netlist has no .subckt '{sub}'", file=str(npath),
                              hint="subcircuits: " + ", ".join(nl.subckts))
        from solderless.engine.formats.spice import parse_netlist
        sc = subs[str(sub).upper()]
        pins = [p.lower() for p in sc.ports]
        ports = [str(p).lower() for p in raw.get("ports", pins)]
        _expect(len(ports) == len(pins), "ports must name each pin of the subcircuit", w, name)
        call = "X__STAGE " + " ".join(ports) + f" {sc.name}\n"
        from solderless.engine.fileio import read_text
        nl2 = parse_netlist(read_text(npath, what="netlist") + "\n" + call, file=str(npath))
        elems = [e for e in nl2.circuit.elements if e.name.upper().startswith("X__STAGE.")]
        for e in elems:
            e.name = e.name.split(".", 1)[1]
            e.nodes = tuple(n.split(".", 1)[1] if n.startswith("x__stage.") else n
                            for n in e.nodes)
            ctl = e.params.get("CONTROL", "")
            if ctl.upper().startswith("X__STAGE."):
                e.params["CONTROL"] = ctl.split(".", 1)[1]
    else:
        elems = nl.circuit.elements
        ports = [str(p).lower() for p in raw.get("ports", ["in", "out"])]
    parts = []
    for e in elems:
        if _registry().part_type_of(e.kind, e.params) is not None:   # a device part
            p = Part(name=e.name, type=_part_type(e), nodes=list(e.nodes), model="_inline",
                     params=dict(e.params), where=e.where or w)
        else:
            p = Part(name=e.name, type=_part_type(e), nodes=list(e.nodes),
                     value=e.value, control=e.params.get("CONTROL"), where=e.where or w)
            if e.kind == "V" and "wave" in e.params:
                raise DesignError("a netlist used as a stage cannot hold a signal source "
                                  "(SIN/PULSE/PWL)", file=str(npath),
                                  line=e.where.line if e.where else None, part=e.name,
                                  hint="remove the stimulus or use the netlist as a whole design")
        parts.append(p)
    return Stage(name=name, ports=ports, parts=parts, kind="imported netlist",
                 template=None, where=w)
