"""The user's TOML document, kept in step with the model.

A design read from a file keeps the file's own ``tomlkit`` document
(``Design.doc``; one table per stage in ``Design._stage_docs``), and every
edit writes its change there too, so saving keeps the user's comments and
layout. A part's setting lives in the part's own table, or for a part of a
template stage in an override table (``[stage.values]``, ``[stage.rotations]``
...); a design made from a whole netlist keeps them under ``[netlist]``.

An *entry* is what the document records for one setting, as plain data
(picklable, so an undo edit can carry it to another process):
``(present, value, had_table)``, or None where the design has no document.
:func:`put_entry` writes one back exactly (removing a key, and an override
table the edit had created), which makes undo leave the file as it was.

A design without a document (``Design.doc is None``: a blank design, or the
live host's copy of a workbench design, see ``Design.copy(document=False)``)
takes every edit in its model alone.
"""
from __future__ import annotations

from typing import Any

from solderless.engine.design.model import NETLIST_STAGE, Design

#: override table of a template part's setting, by setting
OVERRIDE_TABLES = {"value": "values", "rotation": "rotations", "taper": "tapers",
                   "position": "positions", "tolerance": "tolerances", "model": "models"}


def plain(item: Any) -> Any:
    """A document item as plain Python data (str, float, list ...)."""
    unwrap = getattr(item, "unwrap", None)
    return unwrap() if unwrap is not None else item


# ------------------------------------------------------------------ part settings

def _locate(d: Design, qualname: str, key: str):
    """Where ``key`` of part ``qualname`` is recorded: ``(parent, name, table,
    k)``; ``parent`` and ``name`` are set for an override table (``table``
    None while it does not exist). None when the document has no place."""
    if d.doc is None:
        return None
    if d.netlist is not None:
        p = d._netlist_part(qualname)
        if p is None:
            return None
        qualname = f"{NETLIST_STAGE}.{p.name}"
    if "." in qualname:
        sname, pname = qualname.split(".", 1)
        sdoc = d._stage_docs.get(sname)
        if sdoc is None:
            return None
        if "part" in sdoc:
            for raw in sdoc["part"]:
                if raw.get("name") == pname:
                    return None, None, raw, key
        tname = OVERRIDE_TABLES[key]
        return sdoc, tname, (sdoc[tname] if tname in sdoc else None), pname
    for raw in d.doc.get("design", {}).get("part", []):
        if raw.get("name") == qualname:
            return None, None, raw, key
    return None


def part_entry_location(d: Design, qualname: str, key: str, create: bool = True):
    """``(table, k)`` where ``key`` of this part is stored, creating the
    override table for a template part (unless ``create`` is False: then
    None where it does not exist); None when the document has no place."""
    loc = _locate(d, qualname, key)
    if loc is None:
        return None
    parent, tname, table, k = loc
    if table is None:
        if not create:
            return None
        import tomlkit
        parent[tname] = tomlkit.table()
        table = parent[tname]
    return table, k


def record(d: Design, qualname: str, key: str, value: Any) -> None:
    """Write a part's new setting into the document (and mark the design
    changed)."""
    d.dirty = True
    loc = part_entry_location(d, qualname, key)
    if loc is not None:
        table, k = loc
        table[k] = value


def forget(d: Design, qualname: str, key: str) -> None:
    """Remove a part's setting from the document (tolerance None)."""
    d.dirty = True
    loc = part_entry_location(d, qualname, key, create=False)
    if loc is not None and loc[1] in loc[0]:
        del loc[0][loc[1]]


def part_entry(d: Design, qualname: str, key: str) -> tuple | None:
    """What the document records for ``key`` of this part now (an entry,
    see the module docstring)."""
    loc = _locate(d, qualname, key)
    if loc is None:
        return None
    _, _, table, k = loc
    if table is None:
        return (False, None, False)
    if k in table:
        return (True, plain(table[k]), True)
    return (False, None, True)


def put_part_entry(d: Design, qualname: str, key: str, entry: tuple | None) -> None:
    """Write an entry back exactly (see the module docstring)."""
    if entry is None:
        return
    loc = _locate(d, qualname, key)
    if loc is None:
        return
    parent, tname, table, k = loc
    present, value, had_table = entry
    if present:
        if table is None:
            import tomlkit
            parent[tname] = tomlkit.table()
            table = parent[tname]
        table[k] = value
        return
    if table is not None and k in table:
        del table[k]
    if parent is not None and table is not None and not had_table and len(table) == 0:
        del parent[tname]


# ------------------------------------------------------------------ keys of a table

def key_entry(table, key: str) -> tuple | None:
    """The entry of ``key`` in a document table (None: no table)."""
    if table is None:
        return None
    return (True, plain(table[key]), True) if key in table else (False, None, True)


def put_key_entry(table, key: str, entry: tuple | None) -> None:
    if table is None or entry is None:
        return
    if entry[0]:
        table[key] = entry[1]
    elif key in table:
        del table[key]


def design_head(d: Design, create: bool = True):
    """The document's ``[design]`` table (None without a document)."""
    if d.doc is None:
        return None
    head = d.doc.get("design")
    if head is None and create:
        import tomlkit
        head = tomlkit.table()
        d.doc["design"] = head
    return head


def stage_table(d: Design, name: str):
    """The document table of stage ``name`` (None without one)."""
    if d.doc is None:
        return None
    return d._stage_docs.get(name)


# ------------------------------------------------------------------ stages and links

def _aot(d: Design, key: str):
    if d.doc is None:
        return None
    if key not in d.doc:
        import tomlkit
        d.doc[key] = tomlkit.aot()
    return d.doc[key]


def insert_stage_table(d: Design, index: int, name: str, table) -> None:
    """Put a stage's table (a tomlkit table, or a dict of plain data) at
    ``index`` of the document's ``[[stage]]`` list."""
    aot = _aot(d, "stage")
    if aot is None:
        return
    import tomlkit
    if not isinstance(table, tomlkit.items.Table):
        t = tomlkit.table()
        for k, v in table.items():
            t[k] = v
        table = t
    aot.insert(index, table)
    d._stage_docs[name] = aot[index]


def pop_stage_table(d: Design, name: str):
    """Take stage ``name``'s table out of the document; return it (None
    without a document)."""
    aot = _aot(d, "stage")
    if aot is None:
        return None
    t = d._stage_docs.pop(name, None)
    for j, item in enumerate(aot):
        if item is t or (t is None and item.get("name") == name):
            return aot.pop(j)
    return t


def move_stage_table(d: Design, name: str, j: int) -> None:
    aot = _aot(d, "stage")
    if aot is None:
        return
    t = pop_stage_table(d, name)
    aot.insert(j, t)
    d._stage_docs[name] = aot[j]


def _link_texts(a: tuple[str, str], b: tuple[str, str]) -> set[str]:
    return {f"{a[0]}.{a[1]}", f"{b[0]}.{b[1]}"}


def insert_link_table(d: Design, index: int, a: tuple[str, str], b: tuple[str, str]) -> None:
    aot = _aot(d, "link")
    if aot is None:
        return
    import tomlkit
    t = tomlkit.table()
    t["from"] = f"{a[0]}.{a[1]}"
    t["to"] = f"{b[0]}.{b[1]}"
    if index >= len(aot):
        aot.append(t)
    else:
        aot.insert(index, t)


def drop_link_table(d: Design, a: tuple[str, str], b: tuple[str, str]) -> None:
    aot = d.doc.get("link") if d.doc is not None else None
    if aot is None:
        return
    for j, t in enumerate(aot):
        if {str(t.get("from")), str(t.get("to"))} == _link_texts(a, b):
            aot.pop(j)
            break
    if len(aot) == 0:               # an empty list would be written as `link = []`
        del d.doc["link"]


def rename_in_links(d: Design, old: str, new: str) -> None:
    """Rewrite the link tables' ends that name stage ``old``."""
    aot = d.doc.get("link") if d.doc is not None else None
    for t in aot or ():
        for k in ("from", "to"):
            s = str(t.get(k, ""))
            if s.split(".", 1)[0] == old:
                t[k] = new + s[len(old):]


def insert_probe_table(d: Design, index: int, name: str, expr: str) -> None:
    aot = _aot(d, "probe")
    if aot is None:
        return
    import tomlkit
    t = tomlkit.table()
    t["name"] = name
    t["expr"] = expr
    if index >= len(aot):
        aot.append(t)
    else:
        aot.insert(index, t)


def drop_probe_table(d: Design, name: str, expr: str) -> None:
    aot = d.doc.get("probe") if d.doc is not None else None
    if aot is None:
        return
    for j, t in enumerate(aot):
        if str(t.get("name", t.get("expr"))) == name and str(t.get("expr")) == expr:
            aot.pop(j)
            break
    if len(aot) == 0:
        del d.doc["probe"]
