"""Flattening: a design to one flat circuit (:func:`flatten`), and the
checks a flat circuit passes before it reaches the solver
(:func:`validate_circuit`)."""
from __future__ import annotations

import math
from typing import Any

from solderless.engine.circuit import GROUND, Circuit, Element, Where, canonical_net
from solderless.engine.design.model import (DEVICE_TYPES, JACK, MODEL_KIND, PART_TYPES,
                                            REST_SOURCE, Design, Part, _optional_nodes,
                                            _parts_library, _registry)
from solderless.engine.errors import DesignError, SolderlessError
from solderless.engine.unionfind import UnionFind

def flatten(d: Design) -> Circuit:
    """Flatten a design to one circuit: stage-local nets get ``stage.``
    prefixes, the chain joins each ``out`` to the next ``in``, links join
    ports, a bypassed stage joins its ``in`` to its ``out``. The instrument
    is an input source ``jack`` with the source impedance in series, and the
    output jack is loaded by ``load``. A design made from a whole netlist is
    the netlist's circuit with the edited values
    (:func:`solderless.engine.design.netlist.flatten_netlist`)."""
    if d.netlist is not None:
        from solderless.engine.design.netlist import flatten_netlist
        return flatten_netlist(d)
    return _Flattener(d).run()


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


