"""The netlist adapter: a design made from a whole SPICE netlist (its parts
and nets named as the netlist names them), a design file that names such a
netlist with the user's edited values, and a netlist (or one of its
.subckt) used as one stage of a design."""
from __future__ import annotations

from pathlib import Path

from solderless.engine.circuit import LINEAR_KINDS, Circuit, Element, Where
from solderless.engine.design.model import (KIND_TO_TYPE, POSITIVE_TYPES, Design,
                                            Part, Stage, _expect, _parse_value, _parts_library,
                                            _registry, _table)
from solderless.engine.errors import DesignError

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
    from solderless.engine.design.model import hiss_setting
    d.hiss, d.hiss_seed = hiss_setting(head, str(path))
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


def flatten_netlist(d: Design) -> Circuit:
    """The flat circuit of a whole-netlist design: the netlist's own circuit
    with the user's edited values and models."""
    circ = d.netlist.circuit.copy()
    vals = {}
    for st in d.stages:
        for p in st.parts:
            vals.update(d._element_values(p.name, p))
    lib = _parts_library(d) if d._netlist_models else None
    for e in circ.elements:
        if e.name in vals and vals[e.name] is not None:
            e.value = vals[e.name]
        if e.name in d._netlist_models:
            m = lib.get(d._netlist_models[e.name])
            params = dict(m.element_params())
            dev = _registry().DEVICES.get(e.kind)
            if dev is not None and dev.typed:
                params["TYPE"] = str(m.kind).upper()
            e.params = params
            from solderless.engine.analysis.regions import ratings_of
            if ratings_of(m):
                circ.ratings[e.name] = ratings_of(m)
    if d.temperature is not None:
        circ.temperature = d.temperature
    return circ
