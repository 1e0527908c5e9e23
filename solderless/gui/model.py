"""The workbench's model: the open design, every edit with undo and redo,
snapshots, and autosave with crash recovery.

Widgets never change a :class:`solderless.engine.design.Design` themselves: they call a
:class:`Workbench` method, which applies an edit
(:mod:`solderless.engine.design.edits`, data), keeps its inverse as the undo
step and emits signals saying what changed (element values, which a running
simulator takes without a reset, or the structure, which needs a rebuild)
and the edit itself, which the window sends to a running live host. The
design layer (edits, differences) lives in :mod:`solderless.engine.design`;
its names are re-exported here. No numerics here.
"""
from __future__ import annotations

import json
import os
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from PyQt6.QtCore import QObject, pyqtSignal

from solderless.engine.design import Design, load_design
from solderless.engine.autosave import Autosaves
from solderless.engine.errors import SolderlessError

from solderless.engine.design.differences import (Difference, _link_key,  # noqa: F401
                                                  differences, same_structure, taper_text)
from solderless.engine.design.edits import (  # noqa: F401
    AddLink, AddProbe, AddStage, Applied, DuplicateStage, Edit, ImportStage, MoveStage,
    RemoveLink, RemoveStage, ReplaceDesign, RestoreModel, SetBypass, SetModel, SetPosition,
    SetRotation, SetTaper, SetTolerance, SetValue, add_link, add_stage, apply_edit,
    duplicate_stage, import_netlist_stage, insert_stage, move_stage, remove_link, remove_stage,
    set_tolerance, unique_stage_name)

UNDO_LIMIT = 500
MERGE_SECONDS = 1.5     # repeated nudges of one control within this time are one undo step

#: part edits the live host takes as new element values (``edited`` signal)
_EDITED_FIELD = {SetValue: "value", SetRotation: "rotation", SetTaper: "taper",
                 SetModel: "model"}


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

    Every change is an edit (:mod:`solderless.engine.design.edits`): applied to
    the design, its inverse kept as the undo step, and the edit itself
    announced (``applied``) so a live host applies the very same edit.

    Signals
    -------
    design_replaced : the design changed as a whole (open, undo, redo, a
        structural edit); views rebuild themselves.
    structure_changed : stages, links, bypass or a switch changed (the
        circuit is rebuilt).
    values_changed(dict) : element value changes {element: value} that a
        running simulator takes at a block boundary without a reset.
    part_changed(str) : a part's displayed state changed (qualified name).
    edited(str, str, object) : (kind, part, new setting) for each part edit
        (value, rotation, taper, model), undo and redo included.
    applied(object) : every edit as applied (an Edit dataclass), undo and
        redo included: what a live host is sent.
    history_changed : undo/redo availability or the dirty flag changed.
    """
    design_replaced = pyqtSignal()
    structure_changed = pyqtSignal()
    values_changed = pyqtSignal(dict)
    part_changed = pyqtSignal(str)
    edited = pyqtSignal(str, str, object)
    applied = pyqtSignal(object)
    history_changed = pyqtSignal()
    snapshots_changed = pyqtSignal()

    def __init__(self, design: Design | None = None):
        super().__init__()
        self.design: Design = design or Design()
        #: (label, inverse edit, merge key, time) per undo step
        self._undo: list[tuple[str, Edit, str | None, float]] = []
        #: (label, edit) per redo step
        self._redo: list[tuple[str, Edit]] = []
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

    def apply(self, edit: Edit, merge: str | None = None) -> Applied:
        """Apply an edit and record its inverse as an undo step (repeated
        edits with the same ``merge`` key within ``MERGE_SECONDS`` are one
        step). A refused edit changes nothing and raises (one line)."""
        now = time.monotonic()
        merged = bool(merge and self._undo and self._undo[-1][2] == merge
                      and now - self._undo[-1][3] < MERGE_SECONDS)
        try:
            applied = apply_edit(self.design, edit)
        except SolderlessError:
            raise
        except Exception as exc:       # a refusal the edit did not foresee
            raise EditRejected(f"{edit.label}: {exc}") from None
        if merged:
            lab, inv, key, _ = self._undo[-1]
            self._undo[-1] = (lab, inv, key, now)
        else:
            self._undo.append((edit.label, applied.inverse, merge, now))
            del self._undo[:-UNDO_LIMIT]
        self._redo.clear()
        self.generation += 1
        self.history_changed.emit()
        self._announce(applied, replaced=False)
        return applied

    def undo(self) -> bool:
        """Apply the inverse of the last edit (the design as it was, exactly)."""
        if not self._undo:
            return False
        label, inverse, _, _ = self._undo[-1]
        applied = apply_edit(self.design, inverse)     # refused: nothing changes
        self._undo.pop()
        self._redo.append((label, applied.inverse))
        self.generation -= 1
        self._announce(applied, replaced=True)
        self.history_changed.emit()
        return True

    def redo(self) -> bool:
        if not self._redo:
            return False
        label, edit = self._redo[-1]
        applied = apply_edit(self.design, edit)
        self._redo.pop()
        self._undo.append((label, applied.inverse, None, 0.0))
        self.generation += 1
        self._announce(applied, replaced=True)
        self.history_changed.emit()
        return True

    def _announce(self, a: Applied, replaced: bool) -> None:
        """Signals for an applied edit: the edit itself (for a live host),
        then what the views need."""
        self.applied.emit(a.edit)
        e = a.edit
        q = a.part
        part_edit = q is not None and not isinstance(e, ReplaceDesign)
        if replaced or (not part_edit and a.rebuild):
            self.design_replaced.emit()
        if part_edit:
            self.part_changed.emit(q)
            kind = _EDITED_FIELD.get(type(e))
            if kind is not None or isinstance(e, RestoreModel):
                kind = kind or "model"
                self.edited.emit(kind, q, getattr(self.design.part(q), kind))
            if kind is not None or a.changes:
                self.values_changed.emit(a.changes)
            if isinstance(e, SetPosition):
                self.structure_changed.emit()
        elif a.rebuild:
            self.structure_changed.emit()
        elif a.changes:
            self.values_changed.emit(a.changes)

    def mark_saved(self) -> None:
        self.saved_generation = self.generation
        self.design.dirty = False
        self.history_changed.emit()

    # ---------------------------------------------------------- part edits
    def set_value(self, qualname: str, value: float | str) -> dict[str, float]:
        return self.apply(SetValue(qualname, value), merge=f"value:{qualname}").changes

    def set_rotation(self, qualname: str, rotation: float) -> dict[str, float]:
        return self.apply(SetRotation(qualname, rotation), merge=f"rot:{qualname}").changes

    def set_taper(self, qualname: str, taper: Any) -> dict[str, float]:
        return self.apply(SetTaper(qualname, taper), merge=f"taper:{qualname}").changes

    def set_model(self, qualname: str, model: str) -> dict[str, float]:
        """Give a device part another library model (a rebuild when playing)."""
        return self.apply(SetModel(qualname, model), merge=f"model:{qualname}").changes

    def set_tolerance(self, qualname: str, tol: float | None) -> None:
        self.apply(SetTolerance(qualname, tol))

    def set_position(self, qualname: str, position: int) -> None:
        self.apply(SetPosition(qualname, position))

    # ---------------------------------------------------------- structure
    def add_probe(self, expr: str, name: str | None = None) -> str:
        """Add a probe (``v(net)``, ``i(part)``, ``ic(Q)`` ... under the names
        the operating point shows); checked against the circuit first, kept
        in the design file's ``[[probe]]`` list. Returns its name."""
        expr = expr.strip()
        label = (name or expr).strip()
        if not expr:
            raise EditRejected("a probe needs an expression, e.g. v(out) or ic(Q1)")
        if any(p.name == label or p.expr == expr for p in self.design.probes):
            raise EditRejected(f"there is already a probe '{label}'")
        return self.apply(AddProbe(expr, name)).result

    def set_bypass(self, stage: str, on: bool) -> None:
        self.apply(SetBypass(stage, on))

    def add_stage(self, template: str, index: int | None = None) -> str:
        return self.apply(AddStage(template, index)).result

    def remove_stage(self, name: str) -> None:
        self.apply(RemoveStage(name))

    def move_stage(self, name: str, delta: int) -> int:
        return self.apply(MoveStage(name, delta)).result

    def duplicate_stage(self, name: str) -> str:
        return self.apply(DuplicateStage(name)).result

    def import_stage(self, path: str, subckt: str | None = None) -> str:
        return self.apply(ImportStage(str(path), subckt)).result

    def add_link(self, a: tuple[str, str], b: tuple[str, str]) -> None:
        self.apply(AddLink(tuple(a), tuple(b)))

    def remove_link(self, index: int) -> None:
        self.apply(RemoveLink(index))

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
        applied = apply_edit(self.design, ReplaceDesign(snap))
        self._undo.append((f"recall {name}", applied.inverse, None, 0.0))
        del self._undo[:-UNDO_LIMIT]
        self._redo.clear()
        self.generation += 1
        self._announce(applied, replaced=True)
        self.history_changed.emit()


_same_structure = same_structure


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
