"""Edits of a design's structure: stages (add, insert, remove, move,
duplicate, import a netlist as a stage) and links, in the model and in the
user's TOML document (so saving keeps them). They raise DesignError for a
user mistake."""
from __future__ import annotations

import copy
import os
import re
from pathlib import Path

from solderless.engine.design.library import load_stage_template
from solderless.engine.design.model import Design, Link
from solderless.engine.errors import DesignError



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
    from solderless.engine.design.netlist import _stage_from_netlist
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
