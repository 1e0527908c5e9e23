"""The workbench's model: the open design, every edit with undo and redo,
structural edits the design layer does not offer yet, snapshots and their
part-by-part difference, autosave with crash recovery, and small settings.

Widgets never change a :class:`solderless.engine.design.Design` themselves: they call a
:class:`Workbench` method, which records an undo step, applies the edit through
the design layer and emits a signal saying what changed (element values, which
a running simulator takes without a reset, or the structure, which needs a
rebuild). No numerics here.
"""
from __future__ import annotations

import copy
import json
import os
import re
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from PyQt6.QtCore import QObject, pyqtSignal

from solderless.engine.design import Design, Link, load_design, load_stage_template
from solderless.engine.autosave import Autosaves
from solderless.engine.errors import DesignError, SolderlessError
from solderless.engine.values import format_value

UNDO_LIMIT = 500
MERGE_SECONDS = 1.5     # repeated nudges of one control within this time are one undo step


# ------------------------------------------------------------ structural edits
# Functions on a Design and its tomlkit document (design.doc, design._stage_docs),
# so that saving keeps them. They raise DesignError for a user mistake.

def _stage_aot(d: Design):
    import tomlkit
    if d.doc is None:
        raise DesignError("a design imported from a netlist has one fixed stage",
                          file=d._file(), hint="save it as a .toml design first "
                          "(File > Save as) and edit that")
    if "stage" not in d.doc:
        d.doc["stage"] = tomlkit.aot()
    return d.doc["stage"]


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


def add_stage(d: Design, template: str, index: int | None = None,
              name: str | None = None) -> str:
    """Insert a stage from the stage library (``group/name``) at ``index``
    (default: the end); return its name."""
    import tomlkit
    aot = _stage_aot(d)
    st = load_stage_template(template)
    st.name = unique_stage_name(d, name or template.split("/")[-1])
    st.template = template
    idx = len(d.stages) if index is None else max(0, min(index, len(d.stages)))
    t = tomlkit.table()
    t["name"] = st.name
    t["template"] = template
    d.stages.insert(idx, st)
    aot.insert(idx, t)
    d._stage_docs[st.name] = aot[idx]
    d.dirty = True
    return st.name


def insert_stage(d: Design, stage, doc_table, index: int) -> None:
    """Insert a ready stage and its document table (used by import and duplicate)."""
    aot = _stage_aot(d)
    idx = max(0, min(index, len(d.stages)))
    d.stages.insert(idx, stage)
    aot.insert(idx, doc_table)
    d._stage_docs[stage.name] = aot[idx]
    d.dirty = True


def remove_stage(d: Design, name: str) -> None:
    """Remove a stage and every link that touches it."""
    st = d.stage(name)
    if len(d.stages) == 1:
        raise DesignError("a design needs at least one stage", part=name, file=d._file(),
                          hint="add another stage before removing this one")
    aot = _stage_aot(d)
    i = d.stages.index(st)
    d.stages.pop(i)
    aot.pop(i)
    d._stage_docs.pop(name, None)
    keep = [k for k, ln in enumerate(d.links) if name not in (ln.a[0], ln.b[0])]
    _drop_links(d, [k for k in range(len(d.links)) if k not in keep])
    d.dirty = True


def move_stage(d: Design, name: str, delta: int) -> int:
    """Move a stage ``delta`` places along the chain; return its new index."""
    st = d.stage(name)
    aot = _stage_aot(d)
    i = d.stages.index(st)
    j = max(0, min(len(d.stages) - 1, i + int(delta)))
    if i == j:
        return i
    d.stages.insert(j, d.stages.pop(i))
    t = aot.pop(i)
    aot.insert(j, t)
    d._stage_docs[name] = aot[j]
    d.dirty = True
    return j


def duplicate_stage(d: Design, name: str) -> str:
    """Insert a copy of a stage right after it; return the copy's name."""
    st = d.stage(name)
    new = copy.deepcopy(st)
    new.name = unique_stage_name(d, name)
    t = copy.deepcopy(d._stage_docs[name])
    t["name"] = new.name
    insert_stage(d, new, t, d.stages.index(st) + 1)
    return new.name


def import_netlist_stage(d: Design, netlist: str | os.PathLike, index: int | None = None,
                         subckt: str | None = None) -> str:
    """Add a SPICE netlist as a stage (its ``in``/``out`` nets, or a .subckt's
    pins, are the ports). The path is stored relative to the design file."""
    import tomlkit
    from solderless.engine.design import _stage_from_netlist
    np_ = Path(netlist).resolve()
    base = d.path.parent.resolve() if d.path else Path.cwd()
    try:
        rel = os.path.relpath(np_, base)
    except ValueError:
        rel = str(np_)
    raw = {"netlist": rel}
    if subckt:
        raw["subckt"] = subckt
    name = unique_stage_name(d, np_.stem)
    fake = base / "_"
    st = _stage_from_netlist(raw, name, fake, d.stage(d.stages[0].name).where
                             if d.stages else None)
    t = tomlkit.table()
    t["name"] = name
    for k, v in raw.items():
        t[k] = v
    insert_stage(d, st, t, len(d.stages) if index is None else index)
    return name


def _link_aot(d: Design):
    import tomlkit
    if d.doc is None:
        raise DesignError("links need a .toml design", file=d._file(),
                          hint="save the design as a .toml file first")
    if "link" not in d.doc:
        d.doc["link"] = tomlkit.aot()
    return d.doc["link"]


def add_link(d: Design, a: tuple[str, str], b: tuple[str, str]) -> None:
    """Join port ``a`` = (stage, port) to port ``b``."""
    import tomlkit
    for s, p in (a, b):
        st = d.stage(s)
        if p not in st.ports:
            raise DesignError(f"stage '{s}' has no port '{p}'", file=d._file(), part=s,
                              hint="its ports are " + ", ".join(st.ports))
    if a == b:
        raise DesignError("a port cannot be linked to itself", part=f"{a[0]}.{a[1]}")
    for ln in d.links:
        if {ln.a, ln.b} == {a, b}:
            raise DesignError(f"{a[0]}.{a[1]} and {b[0]}.{b[1]} are linked already",
                              file=d._file())
    aot = _link_aot(d)
    t = tomlkit.table()
    t["from"] = f"{a[0]}.{a[1]}"
    t["to"] = f"{b[0]}.{b[1]}"
    aot.append(t)
    d.links.append(Link(a, b))
    d.dirty = True


def _drop_links(d: Design, indices: list[int]) -> None:
    aot = d.doc.get("link") if d.doc is not None else None
    for k in sorted(indices, reverse=True):
        ln = d.links.pop(k)
        if aot is not None:
            for j, t in enumerate(aot):
                if {str(t.get("from")), str(t.get("to"))} == {f"{ln.a[0]}.{ln.a[1]}",
                                                              f"{ln.b[0]}.{ln.b[1]}"}:
                    aot.pop(j)
                    break


def remove_link(d: Design, index: int) -> None:
    """Remove the link at ``index`` of ``d.links``."""
    if not 0 <= index < len(d.links):
        raise DesignError(f"there is no link number {index + 1}", file=d._file())
    _drop_links(d, [index])
    d.dirty = True


def set_tolerance(d: Design, qualname: str, tol: float | None) -> None:
    """Set a part's tolerance (a fraction, or None to remove it); saved in the
    part's own table, or as a [stage.tolerances] override for template parts."""
    d.set_tolerance(qualname, tol)


# ------------------------------------------------------------ differences

@dataclass(frozen=True)
class Difference:
    """One thing that differs between two designs."""
    what: str       # "R1 (gain)", "stage gain", "link a.env - b.ctl"
    field: str      # value, rotation, taper, position, tolerance, model, bypass, present, order
    a: str
    b: str


def _exact(x: float | None, unit: str) -> str:
    if x is None:
        return "-"
    return format_value(x, unit, style="eng", digits=6)


def _text_pair(x, y, unit):
    """Readable texts for two different numbers, with enough digits to differ."""
    sa, sb = _exact(x, unit), _exact(y, unit)
    if sa == sb:
        sa, sb = repr(x), repr(y)
    return sa, sb


def differences(a: Design, b: Design) -> list[Difference]:
    """Exactly what differs between designs ``a`` and ``b``, part by part:
    values, pot rotations and tapers, switch positions, tolerances, models,
    stage presence, order and bypass, and links. Equal floats compare equal;
    any other change is listed."""
    out: list[Difference] = []
    sa = [s.name for s in a.stages]
    sb = [s.name for s in b.stages]
    for n in sa:
        if n not in sb:
            out.append(Difference(f"stage {n}", "present", "yes", "no"))
    for n in sb:
        if n not in sa:
            out.append(Difference(f"stage {n}", "present", "no", "yes"))
    common_a = [n for n in sa if n in sb]
    common_b = [n for n in sb if n in sa]
    if common_a != common_b:
        out.append(Difference("chain", "order", " > ".join(common_a), " > ".join(common_b)))
    for n in common_a:
        if a.stage(n).bypass != b.stage(n).bypass:
            out.append(Difference(f"stage {n}", "bypass", _onoff(a.stage(n).bypass),
                                  _onoff(b.stage(n).bypass)))
    pa = {p.qualname: p for p in a.parts()}
    pb = {p.qualname: p for p in b.parts()}
    for q in list(pa) + [q for q in pb if q not in pa]:
        x, y = pa.get(q), pb.get(q)
        label = q
        if x is None or y is None:
            if (x or y).stage in common_a or not (x or y).stage:
                out.append(Difference(label, "present", "yes" if x else "no",
                                      "yes" if y else "no"))
            continue
        if x.type != y.type:
            out.append(Difference(label, "type", x.type, y.type))
            continue
        if x.value != y.value:
            out.append(Difference(label, "value", *_text_pair(x.value, y.value, x.unit)))
        if x.is_pot and x.rotation != y.rotation:
            ta, tb = (f"{100 * x.rotation:.4g} %", f"{100 * y.rotation:.4g} %")
            if ta == tb:
                ta, tb = repr(x.rotation), repr(y.rotation)
            out.append(Difference(label, "rotation", ta, tb))
        if x.is_pot and x.taper != y.taper:
            out.append(Difference(label, "taper", taper_text(x.taper), taper_text(y.taper)))
        if x.position != y.position:
            la = x.labels[x.position] if x.labels and x.position is not None else str(x.position)
            lb = y.labels[y.position] if y.labels and y.position is not None else str(y.position)
            out.append(Difference(label, "position", la, lb))
        if x.tolerance != y.tolerance:
            out.append(Difference(label, "tolerance", _tol(x.tolerance), _tol(y.tolerance)))
        if x.model != y.model:
            out.append(Difference(label, "model", str(x.model), str(y.model)))
        if x.stage or "." in q:
            try:
                px, py = a.part(q).params, b.part(q).params
            except SolderlessError:
                px = py = {}
            for k in sorted(set(px) | set(py)):
                if px.get(k) != py.get(k):
                    out.append(Difference(label, f"param {k}", str(px.get(k, "-")),
                                          str(py.get(k, "-"))))
    la = {_link_key(ln) for ln in a.links}
    lb = {_link_key(ln) for ln in b.links}
    for k in sorted(la - lb):
        out.append(Difference(f"link {k}", "present", "yes", "no"))
    for k in sorted(lb - la):
        out.append(Difference(f"link {k}", "present", "no", "yes"))
    return out


def _onoff(v: bool) -> str:
    return "bypassed" if v else "in circuit"


def _tol(t):
    return "-" if t is None else f"{t * 100:g} %"


def _link_key(ln: Link) -> str:
    ends = sorted([f"{ln.a[0]}.{ln.a[1]}", f"{ln.b[0]}.{ln.b[1]}"])
    return f"{ends[0]} - {ends[1]}"


def taper_text(taper: Any) -> str:
    if isinstance(taper, str):
        return taper
    return "custom " + " ".join(f"({r:g},{f:g})" for r, f in taper)


# ------------------------------------------------------------ the workbench

@dataclass
class Snapshot:
    """A kept version of the design."""
    name: str
    note: str
    design: Design
    taken: float = field(default_factory=time.time)


class EditRejected(SolderlessError):
    """An edit the design layer refused (message says why)."""


class Workbench(QObject):
    """The open design, its undo history, snapshots, and change signals.

    Signals
    -------
    design_replaced : a different design object is current (open, undo of a
        structural edit); views rebuild themselves.
    structure_changed : stages, links, bypass or a switch changed (rebuild the
        simulator, crossfade).
    values_changed(dict) : element value changes {element: value} that a
        running simulator takes at a block boundary without a reset.
    part_changed(str) : a part's displayed state changed (qualified name).
    edited(str, str, object) : (kind, part, new setting) for each part edit
        that a running simulator can take without a rebuild; kind is
        "value", "rotation" or "taper". Emitted for undo and redo too, so a
        live host can follow every change through its own edit methods.
    history_changed : undo/redo availability or the dirty flag changed.
    """
    design_replaced = pyqtSignal()
    structure_changed = pyqtSignal()
    values_changed = pyqtSignal(dict)
    part_changed = pyqtSignal(str)
    edited = pyqtSignal(str, str, object)
    history_changed = pyqtSignal()
    snapshots_changed = pyqtSignal()

    def __init__(self, design: Design | None = None):
        super().__init__()
        self.design: Design = design or Design()
        self._undo: list[tuple[str, Design, str | None, float]] = []
        self._redo: list[tuple[str, Design]] = []
        self.snapshots: list[Snapshot] = []
        self.saved_generation = 0
        self.generation = 0

    # ---------------------------------------------------------- history
    def set_design(self, d: Design) -> None:
        """Make ``d`` the current design and forget the edit history."""
        self.design = d
        self._undo.clear()
        self._redo.clear()
        self.generation = self.saved_generation = 0
        self.design_replaced.emit()
        self.history_changed.emit()

    @property
    def dirty(self) -> bool:
        return self.generation != self.saved_generation

    def can_undo(self) -> bool:
        return bool(self._undo)

    def can_redo(self) -> bool:
        return bool(self._redo)

    def undo_text(self) -> str:
        return self._undo[-1][0] if self._undo else ""

    def redo_text(self) -> str:
        return self._redo[-1][0] if self._redo else ""

    def _apply(self, label: str, fn: Callable[[Design], Any], merge: str | None = None):
        """Record an undo step, run ``fn(design)``; on a user mistake restore
        the design exactly and raise."""
        now = time.monotonic()
        merged = bool(merge and self._undo and self._undo[-1][2] == merge
                      and now - self._undo[-1][3] < MERGE_SECONDS)
        before = None if merged else self.design.copy()
        # the design layer checks an edit before it changes anything, so a
        # refused edit leaves the design as it was; a whole-design copy is kept
        # anyway for edits that are not merged, and put back on any refusal
        try:
            result = fn(self.design)
        except SolderlessError:
            if before is not None:
                self.design = before
            raise
        except (KeyError, ValueError, TypeError) as exc:
            if before is not None:
                self.design = before
            raise EditRejected(f"{label}: {exc}") from None
        if merged:
            lab, snap, key, _ = self._undo[-1]
            self._undo[-1] = (lab, snap, key, now)
        else:
            self._undo.append((label, before, merge, now))
            del self._undo[:-UNDO_LIMIT]
        self._redo.clear()
        self.generation += 1
        self.history_changed.emit()
        return result

    def undo(self) -> bool:
        """Return to the design before the last edit (exactly)."""
        if not self._undo:
            return False
        label, before, _, _ = self._undo.pop()
        self._redo.append((label, self.design))
        self._swap_to(before)
        self.generation -= 1
        self.history_changed.emit()
        return True

    def redo(self) -> bool:
        if not self._redo:
            return False
        label, after = self._redo.pop()
        self._undo.append((label, self.design, None, 0.0))
        self._swap_to(after)
        self.generation += 1
        self.history_changed.emit()
        return True

    def _swap_to(self, new: Design) -> None:
        old = self.design
        self.design = new
        if _same_structure(old, new):
            changes: dict[str, float] = {}
            pa = {p.qualname: p for p in old.parts()}
            edits = []
            for p in new.parts():
                q = pa.get(p.qualname)
                if q is not None and (q.value, q.rotation, q.taper, q.tolerance) != \
                        (p.value, p.rotation, p.taper, p.tolerance):
                    if p.value is not None:
                        changes.update(new._element_values(p.qualname, new.part(p.qualname)))
                    if q.value != p.value:
                        edits.append(("value", p.qualname, p.value))
                    if q.taper != p.taper:
                        edits.append(("taper", p.qualname, p.taper))
                    if q.rotation != p.rotation:
                        edits.append(("rotation", p.qualname, p.rotation))
                    self.part_changed.emit(p.qualname)
            for e in edits:
                self.edited.emit(*e)
            self.design_replaced.emit()
            if changes:
                self.values_changed.emit(changes)
        else:
            self.design_replaced.emit()
            self.structure_changed.emit()

    def mark_saved(self) -> None:
        self.saved_generation = self.generation
        self.design.dirty = False
        self.history_changed.emit()

    # ---------------------------------------------------------- part edits
    def _part_edit(self, label: str, merge: str, field: str, qualname: str,
                   fn) -> dict[str, float]:
        """Apply an undoable edit of one part's ``field`` and announce it."""
        ch = self._apply(label, fn, merge=merge)
        self.part_changed.emit(qualname)
        self.edited.emit(field, qualname, getattr(self.design.part(qualname), field))
        self.values_changed.emit(ch)
        return ch

    def set_value(self, qualname: str, value: float | str) -> dict[str, float]:
        return self._part_edit(f"value of {qualname}", f"value:{qualname}", "value",
                               qualname, lambda d: d.set_value(qualname, value))

    def set_rotation(self, qualname: str, rotation: float) -> dict[str, float]:
        return self._part_edit(f"turn {qualname}", f"rot:{qualname}", "rotation",
                               qualname, lambda d: d.set_rotation(qualname, rotation))

    def set_taper(self, qualname: str, taper: Any) -> dict[str, float]:
        return self._part_edit(f"taper of {qualname}", f"taper:{qualname}", "taper",
                               qualname, lambda d: d.set_taper(qualname, taper))

    def set_model(self, qualname: str, model: str) -> dict[str, float]:
        """Give a device part another library model (a rebuild when playing)."""
        def fn(d):
            if not hasattr(d, "set_model"):
                raise EditRejected("changing a part's model is not available in this build")
            d.set_model(qualname, model)
            return {}
        return self._part_edit(f"model of {qualname}", f"model:{qualname}", "model",
                               qualname, fn)

    def set_tolerance(self, qualname: str, tol: float | None) -> None:
        self._apply(f"tolerance of {qualname}", lambda d: set_tolerance(d, qualname, tol))
        self.part_changed.emit(qualname)

    def set_position(self, qualname: str, position: int) -> None:
        self._apply(f"switch {qualname}", lambda d: d.set_position(qualname, position))
        self.part_changed.emit(qualname)
        self.structure_changed.emit()

    # ---------------------------------------------------------- structure
    def _structural(self, label, fn):
        r = self._apply(label, fn)
        self.design_replaced.emit()
        self.structure_changed.emit()
        return r

    def add_probe(self, expr: str, name: str | None = None) -> str:
        """Add a probe (``v(net)``, ``i(part)``, ``ic(Q)`` ... under the names
        the operating point shows); checked against the circuit first, kept
        in the design file's ``[[probe]]`` list. Returns its name."""
        import tomlkit
        from solderless.engine.design import Probe
        from solderless.engine.solver import Simulator
        expr = expr.strip()
        label = (name or expr).strip()
        if not expr:
            raise EditRejected("a probe needs an expression, e.g. v(out) or ic(Q1)")
        if any(p.name == label or p.expr == expr for p in self.design.probes):
            raise EditRejected(f"there is already a probe '{label}'")

        def fn(d):
            flat = d.resolve_probe(expr)
            Simulator(d.flatten(), fs=48000.0, probes=(flat,))      # refuses unknown names
            d.probes.append(Probe(label, expr))
            if d.doc is not None:
                aot = d.doc.get("probe")
                if aot is None:
                    aot = tomlkit.aot()
                t = tomlkit.table()
                t["name"] = label
                t["expr"] = expr
                aot.append(t)
                d.doc["probe"] = aot
        self._structural(f"probe {label}", fn)
        return label

    def set_bypass(self, stage: str, on: bool) -> None:
        self._structural(f"{'bypass' if on else 'engage'} {stage}",
                         lambda d: d.set_bypass(stage, on))

    def add_stage(self, template: str, index: int | None = None) -> str:
        return self._structural(f"add {template}", lambda d: add_stage(d, template, index))

    def remove_stage(self, name: str) -> None:
        self._structural(f"remove {name}", lambda d: remove_stage(d, name))

    def move_stage(self, name: str, delta: int) -> int:
        return self._structural(f"move {name}", lambda d: move_stage(d, name, delta))

    def duplicate_stage(self, name: str) -> str:
        return self._structural(f"duplicate {name}", lambda d: duplicate_stage(d, name))

    def import_stage(self, path: str, subckt: str | None = None) -> str:
        return self._structural(f"import {Path(path).name}",
                                lambda d: import_netlist_stage(d, path, subckt=subckt))

    def add_link(self, a: tuple[str, str], b: tuple[str, str]) -> None:
        self._structural("link ports", lambda d: add_link(d, a, b))

    def remove_link(self, index: int) -> None:
        self._structural("remove link", lambda d: remove_link(d, index))

    # ---------------------------------------------------------- snapshots
    def take_snapshot(self, name: str, note: str = "") -> Snapshot:
        name = name.strip() or f"snapshot {len(self.snapshots) + 1}"
        if any(s.name == name for s in self.snapshots):
            raise EditRejected(f"a snapshot named '{name}' exists already",
                               hint="choose another name")
        s = Snapshot(name, note, self.design.copy())
        self.snapshots.append(s)
        self.snapshots_changed.emit()
        return s

    def delete_snapshot(self, name: str) -> None:
        self.snapshots = [s for s in self.snapshots if s.name != name]
        self.snapshots_changed.emit()

    def snapshot(self, name: str) -> Snapshot:
        for s in self.snapshots:
            if s.name == name:
                return s
        raise EditRejected(f"no snapshot named '{name}'")

    def recall_snapshot(self, name: str) -> None:
        """Make a snapshot the current design (an undoable edit)."""
        snap = self.snapshot(name).design
        before = self.design.copy()
        self._undo.append((f"recall {name}", before, None, 0.0))
        self._redo.clear()
        self.generation += 1
        new = snap.copy()
        new.path = self.design.path
        self._swap_to(new)
        self.history_changed.emit()


def _same_structure(a: Design, b: Design) -> bool:
    if [(s.name, s.bypass, s.template, tuple(s.ports), tuple(p.name for p in s.parts))
            for s in a.stages] != [(s.name, s.bypass, s.template, tuple(s.ports),
                                    tuple(p.name for p in s.parts)) for s in b.stages]:
        return False
    if [_link_key(x) for x in a.links] != [_link_key(x) for x in b.links]:
        return False
    pa = [(p.qualname, p.position, p.model) for p in a.parts()]
    pb = [(p.qualname, p.position, p.model) for p in b.parts()]
    return pa == pb


# ------------------------------------------------------------ autosave

@dataclass
class Recovered:
    """Outcome of looking for autosaves at start-up."""
    design: Design | None
    origin: str | None
    message: str
    path: Path | None = None


class Autosave:
    """Periodic copies of unsaved work, for recovery after a crash, in the
    one autosave scheme of :mod:`solderless.engine.autosave` (front end "workbench").

    A clean exit or a save removes this session's copy. At start-up the
    copies left by sessions that no longer run are offered; reading one
    changes nothing on disk, so it stays on offer until the user opens it
    (:meth:`adopted`, once it is autosaved again in this session) or
    discards it (:meth:`discard`). A file that cannot be read is moved aside
    to ``<name>.unreadable`` and reported, never a reason not to start.
    """

    def __init__(self, folder: Path):
        self.store = Autosaves(folder, "workbench")
        self.folder = self.store.folder

    def _key(self, d: Design) -> str:
        return self.store.key(d.path, f"untitled-{id(d)}")

    def write(self, d: Design) -> Path | None:
        """Write the design's current text; return the file (None if the
        design cannot be written as TOML, e.g. a whole-netlist design)."""
        if d.doc is None:
            return None
        return self.store.write(d.to_toml(), key=self._key(d), name=d.name, origin=d.path)

    def clear(self, d: Design) -> None:
        self.store.clear(self._key(d), d.name)

    def pending(self) -> list[Path]:
        """Workbench autosaves of sessions that no longer run, newest first
        (the console's copies and running sessions' files are left out)."""
        return [e.path for e in self.store.pending()]

    def discard(self, path: Path) -> Path | None:
        """The user declined: keep the file aside as ``.discarded``."""
        return self.store.discard(path)

    def adopted(self, path: Path) -> None:
        """The recovered design is autosaved in this session: drop the old file."""
        self.store.adopted(path)

    def recover(self, path: Path) -> Recovered:
        """Load one autosave without consuming it. Never raises for a
        damaged file: it is moved aside and the message says what happened."""
        meta_path = path.with_suffix(".json")
        origin = None
        try:
            meta = json.loads(meta_path.read_text(encoding="utf-8"))
            origin = meta.get("origin") if isinstance(meta, dict) else None
        except (OSError, ValueError):
            pass
        try:
            d = load_design(path)
        except SolderlessError as exc:
            aside = path.with_name(path.name + ".unreadable")
            try:
                os.replace(path, aside)
                meta_path.unlink(missing_ok=True)
            except OSError:
                aside = path
            return Recovered(None, origin,
                             f"An autosave from an earlier session could not be read and "
                             f"was not restored: {exc}. The file was kept as {aside}.")
        except Exception as exc:  # a damaged file must never stop start-up
            aside = path.with_name(path.name + ".unreadable")
            try:
                os.replace(path, aside)
            except OSError:
                aside = path
            return Recovered(None, origin,
                             f"An autosave could not be read ({type(exc).__name__}: {exc}); "
                             f"it was kept as {aside}.")
        if origin:
            d.path = Path(origin)
        d.dirty = True
        return Recovered(d, origin, f"Recovered unsaved work on '{d.name}'"
                         + (f" (from {origin})" if origin else "")
                         + ". Save it to keep it.", path)
