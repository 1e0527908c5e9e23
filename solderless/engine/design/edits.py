"""Edits as data.

Every change a front end makes to a design is a small frozen dataclass:
:class:`SetValue`, :class:`SetRotation`, :class:`SetTaper`,
:class:`SetTolerance`, :class:`SetModel`, :class:`SetPosition`,
:class:`SetTemperature`, :class:`SetHiss`, :class:`SetBypass`, :class:`AddStage`,
:class:`InsertStage`, :class:`DuplicateStage`, :class:`ImportStage`,
:class:`RemoveStage`, :class:`MoveStage`, :class:`RenameStage`,
:class:`AddLink`, :class:`RemoveLink`, :class:`AddProbe`,
:class:`RemoveProbe` and :class:`ReplaceDesign` (a snapshot recalled).

:func:`apply_edit` applies one to a design, in the model and in the user's
TOML document (:mod:`solderless.engine.design.document`), and returns an
:class:`Applied`: the inverse edit (undo is applying it), the element value
changes a running simulator takes without a reset, whether the circuit's
structure changed (a new simulator, crossfaded), and the edit's result.

An edit applies completely or not at all: it checks what it needs before it
changes anything, and if it is refused all the same (a user mistake, or a
failure half-way) the design is put back as it was and a one-line
:class:`DesignError` says why. Edits pickle, so the workbench sends the very
edit it applied to the live host in its own process
(:meth:`solderless.engine.live.remote.HostProcess.edit`), and the live host
applies an edit the same way whichever front end sent it
(:meth:`solderless.engine.live.host.LiveHost.edit`).

A value is parsed once, when the edit is made (``SetValue(part, "4k7")``
holds 4700.0); the host receives the number.
"""
from __future__ import annotations

import copy
import os
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from solderless.engine.design import document as doc
from solderless.engine.design.model import (DEVICE_TYPES, Design, Link, Probe, Stage,
                                            _parse_value)
from solderless.engine.errors import DesignError, SolderlessError

RECORD = "record"
"""An edit's ``entry`` by default: record the new setting in the document.
Otherwise ``entry`` is what the document recorded before (an inverse edit
puts it back exactly, see :mod:`solderless.engine.design.document`)."""


@dataclass(frozen=True)
class Applied:
    """What applying an edit did."""
    edit: "Edit"            # the edit as applied (AddStage: the InsertStage it made)
    inverse: "Edit"         # applying it undoes the edit exactly
    changes: dict = field(default_factory=dict)   # element -> value, no rebuild needed
    rebuild: bool = False   # the circuit's structure changed: build a new simulator
    result: Any = None      # what the edit reports (a stage's name, the value set ...)
    part: str | None = None  # the part whose display changed


class Edit:
    """Base of every edit: ``label`` names it for an undo menu;
    :meth:`apply` is :func:`apply_edit`."""
    #: a part edit: the design's state saved before it is one part's fields
    PART_FIELDS: tuple[str, ...] = ()
    #: the undo menu's words, the edit's fields filled in ("turn {part}");
    #: else the class name
    LABEL: str = ""

    @property
    def label(self) -> str:
        return self.LABEL.format(**vars(self)) if self.LABEL else type(self).__name__

    def apply(self, d: Design) -> Applied:
        return apply_edit(d, self)

    def _apply(self, d: Design) -> Applied:   # pragma: no cover - every edit has one
        raise NotImplementedError


def apply_edit(d: Design, edit: Edit) -> Applied:
    """Apply ``edit`` to ``d`` completely or not at all (see the module
    docstring). Raises DesignError for a refused edit."""
    if not isinstance(edit, Edit):
        raise DesignError(f"not an edit: {type(edit).__name__}")
    if not isinstance(d, Design):
        return _apply_shaped(d, edit)
    saved = _save(d, edit)
    try:
        return edit._apply(d)
    except SolderlessError:
        saved()
        raise
    except Exception as exc:        # a failure half-way: still all or nothing
        saved()
        raise DesignError(f"{edit.label}: refused ({type(exc).__name__}: {exc}); "
                          "the design is unchanged", file=d._file()) from None
    except BaseException:
        saved()
        raise


def _apply_shaped(d, edit: Edit) -> Applied:
    """Apply a value, rotation, taper or bypass edit to an object shaped
    like a design (``parts()``, ``set_value`` ... as a Design has them, e.g.
    a stand-in for tests and benches), through those methods alone; they
    check before they change anything."""
    if isinstance(edit, SetBypass):
        if hasattr(d, "stage"):
            old = bool(d.stage(edit.stage).bypass)
        else:
            old = bool(getattr(d, "bypass", {}).get(edit.stage, False))
        d.set_bypass(edit.stage, edit.on)
        return Applied(edit, SetBypass(edit.stage, old), rebuild=True)
    name = {SetValue: "value", SetRotation: "rotation", SetTaper: "taper"}.get(type(edit))
    if name is None:
        raise DesignError(f"this design cannot take a {type(edit).__name__} edit")
    info = next((p for p in d.parts() if p.qualname == edit.part), None)
    old = getattr(info, name, None)
    new = getattr(edit, name)
    if isinstance(edit, SetTaper) and not isinstance(new, str):
        new = [list(p) for p in new]
    changes = getattr(d, f"set_{name}")(edit.part, new)
    inverse = type(edit)(edit.part, old) if old is not None else edit
    return Applied(edit, inverse, changes or {}, result=new, part=edit.part)


def _save(d: Design, edit: Edit):
    """A function that puts ``d`` back as it is now: for a part edit, that
    part's fields and document entries; otherwise the whole design state."""
    part = getattr(edit, "part", None)
    if edit.PART_FIELDS and isinstance(part, str):
        try:
            obj = d.part(part)
        except SolderlessError:
            return lambda: None            # nothing to change: the edit is refused
        fields = {k: copy.deepcopy(getattr(obj, k)) for k in edit.PART_FIELDS}
        entries = {k: doc.part_entry(d, part, k) for k in edit.PART_FIELDS}
        nl = dict(d._netlist_models)
        dirty = d.dirty

        def back():
            for k, v in fields.items():
                setattr(obj, k, v)
            for k, e in entries.items():
                doc.put_part_entry(d, part, k, e)
            d._netlist_models = nl
            d.dirty = dirty
        return back
    if d._lazy_doc is not None:
        d._materialise()
    state = copy.deepcopy(d.__dict__)

    def back_all():
        d.__dict__.clear()
        d.__dict__.update(state)
    return back_all


def _file(d: Design) -> str | None:
    return d._file()


# ------------------------------------------------------------------ part edits

def _set_part_field(edit, d, field: str, change):
    """The shared step of a one-field part edit: read the field's old value
    and what the document said, run ``change()`` (the design's one-change
    method), and when replaying an inverse put the document's entry back
    exactly. Returns (old, before, changes) for the inverse edit."""
    old = getattr(d.part(edit.part), field)
    before = doc.part_entry(d, edit.part, field)
    changes = change()
    if edit.entry != RECORD:
        doc.put_part_entry(d, edit.part, field, edit.entry)
    return old, before, changes


def _one_field(edit, d, change, heard: bool = True, rebuild: bool = False) -> Applied:
    """Apply a one-field part edit (its field: ``PART_FIELDS[0]``) through
    ``change()``; the inverse is the same edit with the old value and the
    document's old entry. ``heard``: the element values it changes reach
    the running simulator; ``rebuild``: it changes the circuit's
    structure."""
    field = edit.PART_FIELDS[0]
    old, before, changes = _set_part_field(edit, d, field, change)
    return Applied(edit, type(edit)(edit.part, old, before), changes if heard else {},
                   rebuild=rebuild, result=getattr(d.part(edit.part), field), part=edit.part)


@dataclass(frozen=True)
class SetValue(Edit):
    """A part's value (a number, or text such as "4k7", read once here).
    ``part`` "temperature" sets the circuit temperature (degrees Celsius)."""
    part: str
    value: float
    entry: Any = RECORD
    PART_FIELDS = ("value",)

    def __post_init__(self):
        if isinstance(self.value, str):
            object.__setattr__(self, "value",
                               _parse_value(self.value, part=self.part))

    LABEL = "value of {part}"

    def _apply(self, d):
        if self.part == "temperature":
            return SetTemperature(self.value)._apply(d)
        return _one_field(self, d, lambda: d.set_value(self.part, float(self.value)))


@dataclass(frozen=True)
class SetRotation(Edit):
    """Turn a pot (0 = fully towards end ``a``, 1 = towards ``b``)."""
    part: str
    rotation: float
    entry: Any = RECORD
    PART_FIELDS = ("rotation",)

    LABEL = "turn {part}"

    def _apply(self, d):
        return _one_field(self, d, lambda: d.set_rotation(self.part, self.rotation))


@dataclass(frozen=True)
class SetTaper(Edit):
    """A pot's taper: "linear", "audio", "reverse-audio" or a table of
    ``[rotation, fraction]`` points."""
    part: str
    taper: Any
    entry: Any = RECORD
    PART_FIELDS = ("taper",)

    def __post_init__(self):
        if not isinstance(self.taper, str):     # a table: frozen as tuples
            try:
                object.__setattr__(self, "taper", tuple(tuple(p) for p in self.taper))
            except TypeError:
                pass                             # refused when applied

    LABEL = "taper of {part}"

    def _apply(self, d):
        taper = self.taper if isinstance(self.taper, str) else [list(p) for p in self.taper]
        return _one_field(self, d, lambda: d.set_taper(self.part, taper))


@dataclass(frozen=True)
class SetTolerance(Edit):
    """A part's tolerance (a fraction, or text such as "5%"; None removes
    it). It does not change the simulation."""
    part: str
    tolerance: Any
    entry: Any = RECORD
    PART_FIELDS = ("tolerance",)

    LABEL = "tolerance of {part}"

    def _apply(self, d):
        return _one_field(self, d, lambda: d.set_tolerance(self.part, self.tolerance),
                          heard=False)


@dataclass(frozen=True)
class SetModel(Edit):
    """Give a device part another library model (a rebuild)."""
    part: str
    model: str
    PART_FIELDS = ("model",)

    LABEL = "model of {part}"

    def _apply(self, d):
        obj = d.part(self.part)
        inverse = RestoreModel(self.part, obj.model, d._netlist_models.get(obj.name),
                               doc.part_entry(d, self.part, "model"))
        d.set_model(self.part, self.model)
        return Applied(self, inverse, rebuild=True, result=obj.model, part=self.part)


@dataclass(frozen=True)
class RestoreModel(Edit):
    """Put a device part's model back as it was (the inverse of
    :class:`SetModel`: the earlier model may be a netlist's own card, which
    the library does not hold)."""
    part: str
    model: str | None
    netlist_model: str | None = None
    entry: Any = None
    PART_FIELDS = ("model",)

    LABEL = "model of {part}"

    def _apply(self, d):
        obj = d.part(self.part)
        if obj.type not in DEVICE_TYPES:
            raise DesignError(f"a {obj.type} has no device model", part=self.part,
                              file=_file(d))
        inverse = RestoreModel(self.part, obj.model, d._netlist_models.get(obj.name),
                               doc.part_entry(d, self.part, "model"))
        obj.model = self.model
        if d.netlist is not None:
            if self.netlist_model is None:
                d._netlist_models.pop(obj.name, None)
            else:
                d._netlist_models[obj.name] = self.netlist_model
        doc.put_part_entry(d, self.part, "model", self.entry)
        d.dirty = True
        return Applied(self, inverse, rebuild=True, result=obj.model, part=self.part)


@dataclass(frozen=True)
class SetPosition(Edit):
    """Move a selector switch (a rebuild)."""
    part: str
    position: int
    entry: Any = RECORD
    PART_FIELDS = ("position",)

    LABEL = "switch {part}"

    def _apply(self, d):
        return _one_field(self, d, lambda: d.set_position(self.part, self.position),
                          heard=False, rebuild=True)


@dataclass(frozen=True)
class SetTemperature(Edit):
    """The circuit temperature, degrees Celsius (None: the SPICE default,
    27 degC); a live change, no rebuild."""
    degrees: float | None
    entry: Any = RECORD

    LABEL = "temperature"

    def _apply(self, d):
        from solderless.engine.solver.simulator import TEMPERATURE_KEY
        old = d.temperature
        head = doc.design_head(d, create=False)
        before = doc.key_entry(head, "temperature") if head is not None else \
            ((False, None, True) if d.doc is not None else None)
        if self.degrees is None:
            d.temperature = None
            changes = {TEMPERATURE_KEY: 27.0}
        else:
            changes = d.set_temperature(self.degrees)
        if self.entry != RECORD:
            doc.put_key_entry(doc.design_head(d, create=False), "temperature", self.entry)
        return Applied(self, SetTemperature(old, before), changes, result=d.temperature)


@dataclass(frozen=True)
class SetHiss(Edit):
    """Live noise on or off (the design's ``hiss`` setting), and optionally
    its seed (``hiss_seed``; None keeps the present one). No rebuild: a
    live host switches the noise sources' amplitude, or builds the noisy
    simulator the first time (:meth:`solderless.engine.live.host.LiveHost.edit`).
    The result is ``(on, seed)``."""
    on: bool
    seed: int | None = None
    entry: Any = RECORD     # or (hiss entry, hiss_seed entry) as the document had them

    def __post_init__(self):
        from solderless.engine.design.model import check_hiss_seed
        if not isinstance(self.on, bool):
            raise DesignError(f"noise is switched on or off (true or false), not {self.on!r}",
                              part="design.hiss", hint="hiss on, hiss off")
        if self.seed is not None:
            object.__setattr__(self, "seed", check_hiss_seed(self.seed))

    @property
    def label(self) -> str:
        return "noise " + ("on" if self.on else "off")

    def _apply(self, d):
        old = (bool(d.hiss), int(d.hiss_seed))
        head = doc.design_head(d, create=False)
        if head is not None:
            before = (doc.key_entry(head, "hiss"), doc.key_entry(head, "hiss_seed"))
        else:   # no [design] table yet: undo leaves both keys out
            before = ((False, None, True),) * 2 if d.doc is not None else None
        d.hiss = self.on
        if self.seed is not None:
            d.hiss_seed = self.seed
        head = doc.design_head(d, create=True)
        if self.entry == RECORD:
            if head is not None:
                head["hiss"] = self.on
                if self.seed is not None:
                    head["hiss_seed"] = self.seed
        elif self.entry is not None:
            doc.put_key_entry(head, "hiss", self.entry[0])
            doc.put_key_entry(head, "hiss_seed", self.entry[1])
        d.dirty = True
        return Applied(self, SetHiss(old[0], old[1], before), result=(d.hiss, d.hiss_seed))


# ------------------------------------------------------------------ structure

def _no_netlist(d: Design, what: str) -> None:
    """Refuse a stage edit on a design made from a whole netlist: its one
    stage is the netlist's circuit, run as the netlist says."""
    if d.netlist is not None:
        raise DesignError(f"cannot {what}: a design made from a whole netlist has one "
                          "fixed stage (the netlist's circuit)", file=_file(d),
                          hint="start a .toml design and import the netlist as a stage "
                          "(Import netlist as stage), or edit the netlist itself")


@dataclass(frozen=True)
class SetBypass(Edit):
    """Bypass a stage or bring it back (a rebuild); see
    :meth:`Design.set_bypass`."""
    stage: str
    on: bool
    entry: Any = RECORD

    @property
    def label(self) -> str:
        return f"{'bypass' if self.on else 'engage'} {self.stage}"

    def _apply(self, d):
        st = d.stage(self.stage)
        old = st.bypass
        before = doc.key_entry(doc.stage_table(d, self.stage), "bypass")
        d.set_bypass(self.stage, self.on)
        if self.entry != RECORD:
            doc.put_key_entry(doc.stage_table(d, self.stage), "bypass", self.entry)
        return Applied(self, SetBypass(self.stage, old, before), rebuild=True)


def unique_stage_name(d: Design, base: str) -> str:
    """``base`` or ``base-2``, ``base-3`` ... whichever no stage uses yet."""
    base = re.sub(r"[^A-Za-z0-9_\-]", "-", base) or "stage"
    names = {s.name for s in d.stages}
    if base not in names:
        return base
    root = re.sub(r"-\d+$", "", base)
    i = 2
    while f"{root}-{i}" in names:
        i += 1
    return f"{root}-{i}"


def _check_stage_name(d: Design, name: str) -> None:
    if not isinstance(name, str) or re.fullmatch(r"[A-Za-z0-9_\-]+", name) is None:
        raise DesignError(f"a stage needs a name of letters, digits, '_' or '-', not "
                          f"{name!r}", file=_file(d))
    if any(s.name == name for s in d.stages):
        raise DesignError(f"there is a stage named '{name}' already", file=_file(d),
                          part=name, hint="choose another name")


@dataclass(frozen=True)
class InsertStage(Edit):
    """Put a ready stage at ``index`` of the chain (default: the end), with
    its document table (a tomlkit table or plain data; None: one naming its
    template) and the links it had (``(index, a, b)``, when undoing a
    removal)."""
    stage: Stage
    index: int | None = None
    table: Any = None
    links: tuple = ()

    @property
    def label(self) -> str:
        return f"insert {self.stage.name}"

    def _apply(self, d):
        _no_netlist(d, f"insert stage '{self.stage.name}'")
        _check_stage_name(d, self.stage.name)
        st = copy.deepcopy(self.stage)
        idx = len(d.stages) if self.index is None else max(0, min(int(self.index),
                                                                 len(d.stages)))
        for k, a, b in self.links:
            for s, p in (a, b):
                if s != st.name:
                    d.stage(s)          # a link to a stage that is gone: refused
        table = copy.deepcopy(self.table)
        if table is None:
            table = {"name": st.name}
            if st.template:
                table["template"] = st.template
        d.stages.insert(idx, st)
        doc.insert_stage_table(d, idx, st.name, table)
        for k, a, b in sorted(self.links):
            d.links.insert(k, Link(tuple(a), tuple(b)))
            doc.insert_link_table(d, k, a, b)
        d.dirty = True
        return Applied(self, RemoveStage(st.name), rebuild=True, result=st.name)


@dataclass(frozen=True)
class AddStage(Edit):
    """Insert a stage from the stage library (``group/name``) at ``index``
    (default: the end), named ``name`` (default: the template's name, made
    unique). Applied, it is the :class:`InsertStage` of that stage."""
    template: str
    index: int | None = None
    name: str | None = None

    LABEL = "add {template}"

    def _apply(self, d):
        from solderless.engine.design.library import load_stage_template
        _no_netlist(d, f"add stage '{self.template}'")
        st = load_stage_template(self.template)
        st.name = unique_stage_name(d, self.name or self.template.split("/")[-1])
        st.template = self.template
        return InsertStage(st, self.index, {"name": st.name,
                                            "template": self.template})._apply(d)


@dataclass(frozen=True)
class DuplicateStage(Edit):
    """Insert a copy of a stage right after it (named ``stage-2`` ...)."""
    stage: str

    LABEL = "duplicate {stage}"

    def _apply(self, d):
        _no_netlist(d, f"duplicate stage '{self.stage}'")
        st = d.stage(self.stage)
        new = copy.deepcopy(st)
        new.name = unique_stage_name(d, self.stage)
        table = copy.deepcopy(doc.stage_table(d, self.stage))
        if table is not None:
            table["name"] = new.name
        return InsertStage(new, d.stages.index(st) + 1, table)._apply(d)


@dataclass(frozen=True)
class ImportStage(Edit):
    """Add a SPICE netlist as a stage (its ``in``/``out`` nets, or a
    .subckt's pins, are the ports). The path is stored relative to the
    design file."""
    path: str
    subckt: str | None = None
    index: int | None = None

    @property
    def label(self) -> str:
        return f"import {Path(self.path).name}"

    def _apply(self, d):
        from solderless.engine.design.netlist import _stage_from_netlist
        _no_netlist(d, f"import {Path(self.path).name} as a stage")
        np_ = Path(self.path).resolve()
        base = d.path.parent.resolve() if d.path else Path.cwd()
        try:
            rel = os.path.relpath(np_, base)
        except ValueError:
            rel = str(np_)
        raw = {"netlist": rel}
        if self.subckt:
            raw["subckt"] = self.subckt
        name = unique_stage_name(d, np_.stem)
        st = _stage_from_netlist(raw, name, base / "_",
                                 d.stages[0].where if d.stages else None)
        return InsertStage(st, self.index, {"name": name, **raw})._apply(d)


@dataclass(frozen=True)
class RemoveStage(Edit):
    """Remove a stage and every link that touches it."""
    stage: str

    LABEL = "remove {stage}"

    def _apply(self, d):
        _no_netlist(d, f"remove stage '{self.stage}'")
        st = d.stage(self.stage)
        if len(d.stages) == 1:
            raise DesignError("a design needs at least one stage", part=self.stage,
                              file=_file(d), hint="add another stage before removing this one")
        i = d.stages.index(st)
        links = tuple((k, ln.a, ln.b) for k, ln in enumerate(d.links)
                      if self.stage in (ln.a[0], ln.b[0]))
        for k, a, b in reversed(links):
            d.links.pop(k)
            doc.drop_link_table(d, a, b)
        d.stages.pop(i)
        table = doc.pop_stage_table(d, self.stage)
        d.dirty = True
        return Applied(self, InsertStage(copy.deepcopy(st), i, table, links), rebuild=True)


@dataclass(frozen=True)
class MoveStage(Edit):
    """Move a stage ``delta`` places along the chain (clamped at the ends);
    the result is its new index."""
    stage: str
    delta: int

    LABEL = "move {stage}"

    def _apply(self, d):
        st = d.stage(self.stage)
        i = d.stages.index(st)
        j = max(0, min(len(d.stages) - 1, i + int(self.delta)))
        if i == j:
            return Applied(self, MoveStage(self.stage, 0), result=i)
        _no_netlist(d, f"move stage '{self.stage}'")
        d.stages.insert(j, d.stages.pop(i))
        doc.move_stage_table(d, self.stage, j)
        d.dirty = True
        return Applied(self, MoveStage(self.stage, i - j), rebuild=True, result=j)


@dataclass(frozen=True)
class RenameStage(Edit):
    """Give a stage another name (its links follow; probes that name the old
    one are reported as dangling)."""
    stage: str
    name: str

    LABEL = "rename {stage}"

    def _apply(self, d):
        _no_netlist(d, f"rename stage '{self.stage}'")
        st = d.stage(self.stage)
        if self.name == self.stage:
            return Applied(self, RenameStage(self.name, self.stage), result=self.name)
        _check_stage_name(d, self.name)
        st.name = self.name
        d.links = [Link(*[(self.name if s == self.stage else s, p) for s, p in (ln.a, ln.b)],
                        ln.where) for ln in d.links]
        if d.doc is not None:
            t = d._stage_docs.pop(self.stage, None)
            if t is not None:
                t["name"] = self.name
                d._stage_docs[self.name] = t
            doc.rename_in_links(d, self.stage, self.name)
        d.dirty = True
        return Applied(self, RenameStage(self.name, self.stage), rebuild=True,
                       result=self.name)


@dataclass(frozen=True)
class AddLink(Edit):
    """Join port ``a`` = (stage, port) to port ``b`` (at ``index`` of the
    link list; default: the end)."""
    a: tuple
    b: tuple
    index: int | None = None

    LABEL = "link ports"

    def _apply(self, d):
        a, b = tuple(self.a), tuple(self.b)
        for s, p in (a, b):
            st = d.stage(s)
            if p not in st.ports:
                raise DesignError(f"stage '{s}' has no port '{p}'", file=_file(d), part=s,
                                  hint="its ports are " + ", ".join(st.ports))
        if a == b:
            raise DesignError("a port cannot be linked to itself", part=f"{a[0]}.{a[1]}")
        for ln in d.links:
            if {ln.a, ln.b} == {a, b}:
                raise DesignError(f"{a[0]}.{a[1]} and {b[0]}.{b[1]} are linked already",
                                  file=_file(d))
        if d.netlist is not None:
            raise DesignError("links need a .toml design", file=_file(d),
                              hint="a design made from a whole netlist has one stage")
        k = len(d.links) if self.index is None else max(0, min(int(self.index),
                                                               len(d.links)))
        d.links.insert(k, Link(a, b))
        doc.insert_link_table(d, k, a, b)
        d.dirty = True
        return Applied(self, RemoveLink(k), rebuild=True)


@dataclass(frozen=True)
class RemoveLink(Edit):
    """Remove the link at ``index`` of ``Design.links``."""
    index: int

    LABEL = "remove link"

    def _apply(self, d):
        if not 0 <= self.index < len(d.links):
            raise DesignError(f"there is no link number {self.index + 1}", file=_file(d))
        ln = d.links.pop(self.index)
        doc.drop_link_table(d, ln.a, ln.b)
        d.dirty = True
        return Applied(self, AddLink(ln.a, ln.b, self.index), rebuild=True)


@dataclass(frozen=True)
class AddProbe(Edit):
    """Add a probe (``v(net)``, ``i(part)``, ``ic(Q)`` ... under the names
    the operating point shows), checked against the circuit first and kept
    in the design file's ``[[probe]]`` list. The result is its name."""
    expr: str
    name: str | None = None
    index: int | None = None

    @property
    def label(self) -> str:
        return f"probe {(self.name or self.expr).strip()}"

    def _apply(self, d):
        from solderless.engine.solver import Simulator
        expr = self.expr.strip()
        label = (self.name or expr).strip()
        if not expr:
            raise DesignError("a probe needs an expression, e.g. v(out) or ic(Q1)")
        if any(p.name == label or p.expr == expr for p in d.probes):
            raise DesignError(f"there is already a probe '{label}'")
        flat = d.resolve_probe(expr)
        Simulator(d.flatten(), fs=48000.0, probes=(flat,))      # refuses unknown names
        k = len(d.probes) if self.index is None else max(0, min(int(self.index),
                                                                len(d.probes)))
        d.probes.insert(k, Probe(label, expr))
        doc.insert_probe_table(d, k, label, expr)
        d.dirty = True
        return Applied(self, RemoveProbe(label), rebuild=True, result=label)


@dataclass(frozen=True)
class RemoveProbe(Edit):
    """Remove the probe named ``name``."""
    name: str

    LABEL = "remove probe {name}"

    def _apply(self, d):
        for k, p in enumerate(d.probes):
            if p.name == self.name:
                break
        else:
            raise DesignError(f"no probe named '{self.name}'", file=_file(d))
        d.probes.pop(k)
        doc.drop_probe_table(d, p.name, p.expr)
        d.dirty = True
        return Applied(self, AddProbe(p.expr, p.name, k), rebuild=True)


@dataclass(frozen=True)
class ReplaceDesign(Edit):
    """Make the design a copy of ``design`` (a snapshot recalled), keeping
    its file. A rebuild unless only values differ."""
    design: Design

    @property
    def label(self) -> str:
        return f"recall {self.design.name}"

    def _apply(self, d):
        from solderless.engine.design.differences import same_structure
        old = d.copy()
        new = self.design.copy(document=d.doc is not None or self.design.doc is None)
        new.path = d.path
        same = same_structure(d, new)
        d.__dict__.clear()
        d.__dict__.update(new.__dict__)
        changes: dict = {}
        if same:            # only settings differ: the element values of those parts
            was = {p.qualname: p for p in old.parts()}
            for p in d.parts():
                q = was.get(p.qualname)
                if p.value is not None and q is not None and \
                        (q.value, q.rotation, q.taper) != (p.value, p.rotation, p.taper):
                    changes.update(d._element_values(p.qualname, d.part(p.qualname)))
        return Applied(self, ReplaceDesign(old), changes, rebuild=not same)


@dataclass(frozen=True)
class SetDocumentTable(Edit):
    """Set a top-level table of the design file that the circuit does not
    read (the workbench's ``[midi]`` knob mappings), as plain data; None
    removes it. No rebuild."""
    key: str
    value: Any
    what: str = ""

    @property
    def label(self) -> str:
        return self.what or f"[{self.key}]"

    def _apply(self, d):
        if d.doc is None:
            raise DesignError(f"this design has no file document to keep [{self.key}] in")
        old = doc.plain(d.doc[self.key]) if self.key in d.doc else None
        if self.value is None:
            if self.key in d.doc:
                del d.doc[self.key]
        else:
            d.doc[self.key] = copy.deepcopy(self.value)
        return Applied(self, SetDocumentTable(self.key, old, self.what))


# ------------------------------------------------------------------ the older calls

def add_stage(d: Design, template: str, index: int | None = None,
              name: str | None = None) -> str:
    """Insert a stage from the stage library; return its name."""
    return apply_edit(d, AddStage(template, index, name)).result


def insert_stage(d: Design, stage, doc_table, index: int) -> None:
    """Insert a ready stage and its document table."""
    apply_edit(d, InsertStage(stage, index, doc_table))


def remove_stage(d: Design, name: str) -> None:
    apply_edit(d, RemoveStage(name))


def move_stage(d: Design, name: str, delta: int) -> int:
    return apply_edit(d, MoveStage(name, delta)).result


def duplicate_stage(d: Design, name: str) -> str:
    return apply_edit(d, DuplicateStage(name)).result


def import_netlist_stage(d: Design, netlist: str | os.PathLike, index: int | None = None,
                         subckt: str | None = None) -> str:
    return apply_edit(d, ImportStage(str(netlist), subckt, index)).result


def add_link(d: Design, a: tuple[str, str], b: tuple[str, str]) -> None:
    apply_edit(d, AddLink(tuple(a), tuple(b)))


def remove_link(d: Design, index: int) -> None:
    apply_edit(d, RemoveLink(index))


def set_tolerance(d: Design, qualname: str, tol: float | None) -> None:
    apply_edit(d, SetTolerance(qualname, tol))


__all__ = ["Applied", "Edit", "apply_edit", "SetValue", "SetRotation", "SetTaper",
           "SetTolerance", "SetModel", "RestoreModel", "SetPosition", "SetTemperature",
           "SetHiss", "SetBypass", "InsertStage", "AddStage", "DuplicateStage", "ImportStage",
           "RemoveStage", "MoveStage", "RenameStage", "AddLink", "RemoveLink", "AddProbe",
           "RemoveProbe", "ReplaceDesign", "SetDocumentTable", "unique_stage_name", "RECORD"]
