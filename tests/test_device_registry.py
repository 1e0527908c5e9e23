"""The device registry (issue 20 item 1): each device module describes
itself (solderless/engine/devices/registry.py) and everything that needs
device knowledge derives from those descriptions; a toy device added
through the registry alone runs in a netlist, a design and the
operating-point report."""
import math
import re
from pathlib import Path

import pytest
from scipy.optimize import brentq

import tests.toy_device as toy
from solderless.engine import circuit, design, parts
from solderless.engine.analysis import measure
from solderless.engine.design import load_design
from solderless.engine.devices import BUILTIN, registry
from solderless.engine.devices._common import GMIN
from solderless.engine.errors import DesignError
from solderless.engine.formats import spice
from solderless.engine.solver import Simulator

FS = 48000.0


def _kernel_dispatch() -> dict[int, str]:
    """Type code -> device module name, read from the compiled kernel's
    source: ``if c == 2: bjt.evaluate(...)`` or ``if c == bjt.CODE: ...``."""
    import solderless.engine.solver.kernel as K
    path = Path(K.__file__)
    files = sorted(path.parent.glob("*.py")) if path.name == "__init__.py" else [path]
    text = "\n".join(f.read_text() for f in files)
    out: dict[int, str] = {}
    by_name = {m.__name__.rsplit(".", 1)[1]: m for m in BUILTIN}
    pat = re.compile(r"==\s*(?:(\d+)|(\w+)\.CODE)\s*:\s*\n\s*(\w+)\.evaluate\(")
    for lit, named, mod in pat.findall(text):
        code = int(lit) if lit else by_name[named].CODE
        assert out.setdefault(code, mod) == mod, f"code {code} dispatches twice"
    return out


def test_registry_codes_are_unique_and_are_the_kernel_dispatch():
    codes = [m.CODE for m in BUILTIN]
    assert len(set(codes)) == len(codes)
    assert registry.CODES == {m.KIND: m.CODE for m in BUILTIN}
    dispatch = _kernel_dispatch()
    for m in BUILTIN:
        assert dispatch.get(m.CODE) == m.__name__.rsplit(".", 1)[1], m.__name__


def test_derived_tables_match_the_tables_they_replace():
    # the hand-kept copies this refactor removed, as they stood on main
    # (circuit.py, design.py, parts.py, spice.py): derived, they are unchanged
    assert dict(circuit.KIND_NODES) == {
        "R": 2, "C": 2, "L": 2, "V": 2, "I": 2, "E": 4, "G": 4, "F": 2, "H": 2,
        "D": 2, "Q": 3, "J": 3, "M": 4, "OPAMP": 5, "OTA": 5, "BEHAV": 2, "SW": 4}
    assert list(parts.KINDS.items()) == [
        ("D", "D"), ("NPN", "Q"), ("PNP", "Q"), ("NJF", "J"), ("PJF", "J"),
        ("NMOS", "M"), ("PMOS", "M"), ("OPAMP", "OPAMP"), ("OTA", "OTA")]
    assert dict(spice.MODEL_KIND) == {"D": "D", "NPN": "Q", "PNP": "Q", "NJF": "J",
                                      "PJF": "J", "NMOS": "M", "PMOS": "M"}
    assert design.PART_TYPES["nmos"] == ("M", ("d", "g", "s"), "")
    assert design.PART_TYPES["opamp"] == ("OPAMP", ("in+", "in-", "out", "v+", "v-"), "")
    assert set(design.DEVICE_TYPES) == {"diode", "npn", "pnp", "njfet", "pjfet", "nmos",
                                        "pmos", "opamp", "ota"}
    assert tuple(measure.BJT_TYPES) == ("npn", "pnp")
    assert tuple(measure.FET_TYPES) == ("njfet", "pjfet", "nmos", "pmos")
    from solderless.engine.analysis.montecarlo import REGION_KINDS
    from solderless.engine.sanity import PARAM_RANGES
    assert set(REGION_KINDS) == {"Q", "J", "M", "OPAMP", "OTA"}
    assert set(PARAM_RANGES) == {"D", "Q", "J", "M"}


def test_every_device_describes_itself_consistently():
    for dev in registry.devices():
        mod = registry.module(dev.kind)
        assert mod.KIND == dev.kind and mod.DEVICE is dev
        assert set(dev.units) <= set(dev.params), dev.kind
        assert set(dev.ranges) <= set(dev.params), dev.kind
        assert set(dev.aliases.values()) <= set(dev.params) | set(dev.ignored), dev.kind
        assert not set(dev.params) & set(dev.ignored), dev.kind
        for p, t in dev.part_types.items():
            assert t in dev.model_types and design.PART_TYPES[p][0] == dev.kind
        assert dev.report is not None, dev.kind


def test_design_format_lists_the_device_part_types_as_declared():
    # docs/design-format.md, "Part types": every device part type with its
    # nodes in the order its device declares them
    text = (Path(__file__).parent.parent / "docs" / "design-format.md").read_text()
    rows = {}
    for line in text.splitlines():
        cells = [c.strip() for c in line.strip().strip("|").split("|")]
        if len(cells) == 4:
            for t in cells[0].split(", "):
                rows[t] = re.sub(r"\s*\([^)]*\)", "", cells[1])   # without remarks
    for ptype, (kind, nodes, _) in registry.PART_TYPES.items():
        assert rows[ptype].startswith(", ".join(nodes)), ptype
        dev = registry.DEVICES[kind]
        if dev.part_optional:     # or with the optional node: the flat terminals
            assert rows[ptype].endswith("or " + ", ".join(dev.terminals)), ptype


def test_probe_units_follow_the_devices(tmp_path):
    # a probe's unit is the one its device declares (registry), e.g. a
    # switch's control voltage in V (the table this replaced had no entry)
    sim = Simulator(load_design("flagship").flatten(), fs=FS,
                    probes=["ic(buffer.Q1)", "vbe(buffer.Q1)", "iabc(gain.U1)", "gm(gain.U1)"])
    assert sim.probe_units == ["A", "V", "A", "S"]


def test_registry_refuses_a_device_that_takes_anothers_names():
    import dataclasses
    import types
    for clash in ({"letter": "Q"}, {"model_types": {"NPN": 1.0}},
                  {"part_types": {"diode": "TOYJ"}}, {"kind": "D"}):
        fake = types.SimpleNamespace(**{k: getattr(toy, k) for k in
                                        ("KIND", "CODE", "layout", "region")},
                                     __name__="fake")
        fake.DEVICE = dataclasses.replace(toy.DEVICE, **clash)
        fake.KIND = fake.DEVICE.kind
        with pytest.raises(ValueError):
            registry.register(fake)
    assert "TOYJ" not in registry.DEVICES


# ----------------------------------------------------------------- toy device

ISAT, VSLOPE, R1, VCC, IMAX = 1e-12, 0.05, 10e3, 5.0, 1e-4


def _expected(rload=math.inf):
    """The toy's law with a 10k resistor from 5 V (and a design's output
    load across it), solved by SciPy (brentq):
    (VCC - v)/R1 - v/rload = ISAT*(exp(v/VSLOPE) - 1) + GMIN*v."""
    def f(v):
        return (VCC - v) / R1 - v / rload - ISAT * math.expm1(v / VSLOPE) - GMIN * v
    v = brentq(f, 0.0, VCC, xtol=1e-15)
    return v, (VCC - v) / R1 - v / rload


NETLIST = f"""toy junction
VCC vcc 0 DC {VCC}
R1 vcc out {R1}
Y1 out 0 TJ
.model TJ TOYJ(ISAT={ISAT} VSLOPE={VSLOPE} IMAX={IMAX})
.end
"""

DESIGN = f"""
[design]
name = "toy junction"
global_nets = ["vcc"]

[models]
cards = \"\"\"
.model tj TOYJ(ISAT={ISAT} VSLOPE={VSLOPE} IMAX={IMAX})
\"\"\"

[[design.part]]
name = "VCC"
type = "supply"
nodes = ["vcc", "0"]
value = "{VCC}"

[[stage]]
name = "s"
ports = ["in", "out"]
[[stage.part]]
name = "R1"
type = "resistor"
nodes = ["vcc", "out"]
value = "10k"
[[stage.part]]
name = "T1"
type = "toyjunction"
nodes = ["out", "0"]
model = "tj"
"""


@pytest.fixture
def toy_registered():
    with registry.registered(toy) as dev:
        yield dev
    assert "TOYJ" not in circuit.KIND_NODES and "toyjunction" not in design.PART_TYPES


def _check_op(op, name, rated, rload=math.inf):
    v, i = _expected(rload)
    q = op.devices[name]
    assert q["vj"] == pytest.approx(v, rel=1e-9)
    assert q["ij"] == pytest.approx(i, rel=1e-6)
    assert q["gj"] == pytest.approx(ISAT / VSLOPE * math.exp(v / VSLOPE) + GMIN, rel=1e-6)
    assert q["region"] == "conducting"          # 0.4 mA, from its own region()
    # its own health hook: 0.4 mA is over the model's IMAX of 0.1 mA (a
    # design carries the parts' ratings; a bare netlist none)
    warned = [w for w in op.warnings if w.startswith(f"{name}: toy junction current")]
    assert len(warned) == (1 if rated else 0)


def test_toy_device_runs_in_a_netlist(toy_registered):
    assert circuit.KIND_NODES["TOYJ"] == 2 and spice.MODEL_KIND["TOYJ"] == "TOYJ"
    nl = spice.parse_netlist(NETLIST, file="toy.cir")
    el = nl.circuit.element("Y1")
    assert el.kind == "TOYJ" and el.params == {"ISAT": ISAT, "VSLOPE": VSLOPE, "MODEL": "TJ"}
    assert any("IMAX is not simulated" in w for w in nl.warnings)
    op = Simulator(nl.circuit, fs=FS).operating_point()
    _check_op(op, "Y1", rated=False)
    # written back through its description, read again: the same circuit
    text = spice.circuit_to_netlist(nl.circuit)
    assert "Y1 out 0 M_Y1" in text and ".model M_Y1 TOYJ(ISAT=" in text
    again = spice.parse_netlist(text, file="again.cir").circuit.element("Y1")
    assert again.params["ISAT"] == ISAT and again.params["VSLOPE"] == VSLOPE
    # a probe of its own, in its own unit
    sim = Simulator(nl.circuit, fs=FS, probes=["ij(Y1)", "vj(Y1)"])
    assert sim.probe_units == ["A", "V"]


def test_toy_device_runs_in_a_design_and_its_op_report(toy_registered, tmp_path):
    p = tmp_path / "toy.toml"
    p.write_text(DESIGN)
    d = load_design(p)
    assert d.part("s.T1").type == "toyjunction"
    flat = d.flatten()
    op = Simulator(flat, fs=FS).operating_point()
    _check_op(op, "s.T1", rated=True, rload=flat.element("load").value)
    from solderless.engine.analysis.preview import _unit_of
    assert (_unit_of("ij"), _unit_of("gj")) == ("A", "S")
    # a netlist opened as a design names the part by the toy's part type
    n = tmp_path / "toy.cir"
    n.write_text(NETLIST.replace("VCC vcc", "VIN vcc"))
    nd = load_design(n)
    assert nd.part("Y1").type == "toyjunction"


def test_toy_device_mistakes_get_the_usual_one_line_errors(toy_registered, tmp_path):
    # a netlist's unknown model parameter is reported and left out, as for
    # every device; a parts-library model refuses it
    nl = spice.parse_netlist(NETLIST.replace("IMAX=", "XYZ=1 IMAX="), file="t.cir")
    assert any("model TJ: unknown parameter XYZ is ignored" in w for w in nl.warnings)
    p = tmp_path / "toy.toml"
    p.write_text(DESIGN.replace("IMAX=", "XYZ=1 IMAX="))
    with pytest.raises(DesignError, match="unknown parameter XYZ for a TOYJ model"):
        load_design(p).flatten()
    p.write_text(DESIGN.replace('nodes = ["out", "0"]', 'nodes = ["out"]'))
    with pytest.raises(DesignError, match=r"a toyjunction has 2 nodes \(anode, cathode\)"):
        load_design(p)
    with pytest.raises(DesignError, match="model type TOYJ is not supported"):
        registry.unregister("TOYJ")
        try:
            parts.load_library().add_model_card(".model tj TOYJ(ISAT=1e-12)")
        finally:
            registry.register(toy)
