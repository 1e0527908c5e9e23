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

import json
import os
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from PyQt6.QtCore import QObject, pyqtSignal

from solderless.engine.design import Design, atomic_write_text, load_design
from solderless.engine.autosave import Autosaves, config_dir  # noqa: F401  one scheme, one folder
from solderless.engine.errors import SolderlessError

UNDO_LIMIT = 500
MERGE_SECONDS = 1.5     # repeated nudges of one control within this time are one undo step


from solderless.engine.design.differences import (Difference, _link_key,  # noqa: F401
                                                  differences, same_structure, taper_text)
from solderless.engine.design.edits import (add_link, add_stage, duplicate_stage,  # noqa: F401
                                            import_netlist_stage, insert_stage, move_stage,
                                            remove_link, remove_stage, set_tolerance,
                                            unique_stage_name)


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

        def fn(d):
            return None
        before = self.design.copy()
        self._undo.append((f"recall {name}", before, None, 0.0))
        self._redo.clear()
        self.generation += 1
        new = snap.copy()
        new.path = self.design.path
        self._swap_to(new)
        self.history_changed.emit()


_same_structure = same_structure


# ------------------------------------------------------------ files and settings

class Settings:
    """A small JSON settings file (recent files, first-use caution shown)."""

    def __init__(self, folder: Path):
        self.path = Path(folder) / "workbench.json"
        self.data: dict[str, Any] = {"recent": [], "caution_shown": False}
        self.problem = ""
        try:
            if self.path.exists():
                loaded = json.loads(self.path.read_text(encoding="utf-8"))
                if isinstance(loaded, dict):
                    self.data.update(loaded)
        except (OSError, ValueError) as exc:
            self.problem = f"settings file {self.path} could not be read ({exc}); defaults used"

    def save(self) -> None:
        try:
            # the workbench's own config folder (the writer creates no folders)
            self.path.parent.mkdir(parents=True, exist_ok=True)
            atomic_write_text(self.path, json.dumps(self.data, indent=2))
        except OSError as exc:
            self.problem = f"settings not saved: {exc}"

    def add_recent(self, path: str | os.PathLike) -> None:
        p = str(Path(path).resolve())
        rec = [r for r in self.data.get("recent", []) if r != p]
        self.data["recent"] = [p] + rec[:9]
        self.save()


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
