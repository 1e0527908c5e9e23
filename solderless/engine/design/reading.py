"""Reading design files: TOML designs (templates, overrides, extra parts,
links, probes, meters) and :func:`load_design`, which also opens built-in
designs by name and SPICE netlists (:mod:`solderless.engine.design.netlist`).
Every mistake in the user's file is a one-line :class:`DesignError` naming
the file, line and part."""
from __future__ import annotations

import difflib
import math
import os
import re
import tomllib
from pathlib import Path
from typing import Any

from solderless.engine.circuit import Where, canonical_net
from solderless.engine.design.model import (DEVICE_TYPES, PART_TYPES, POSITIVE_TYPES, VALUE_TYPES,
                                            Design, Link, Part, Probe, Stage, _check_taper, _cut,
                                            _expect, _optional_nodes, _parse_value, _table,
                                            _tables, _temperature, hiss_setting)
from solderless.engine.errors import DesignError, SolderlessError

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



# ----------------------------------------------------------------- loading

def load_design(source: str | os.PathLike, *, in_source: str = "VIN",
                out_node: str = "out") -> Design:
    """Load a design from a TOML file, a built-in design's name, or a SPICE
    netlist (``.cir``, ``.sp``, ``.spice``, ``.net``, ``.ckt``)."""
    text_src = str(source)
    path = Path(text_src)
    if not path.exists():
        from solderless.engine.design.library import builtin_designs
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
        from solderless.engine.design.netlist import _design_from_netlist
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
        from solderless.engine.design.netlist import _design_from_netlist_toml
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
    d.hiss, d.hiss_seed = hiss_setting(head, file)
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
            from solderless.engine.design.library import load_stage_template
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
            from solderless.engine.design.netlist import _stage_from_netlist
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


