"""SPICE-subset import and export.

Card syntax follows the ngspice user manual (chapters "Circuit description",
"Device models"); flattening is checked against ngspice's own subcircuit
expansion by running both netlists in ngspice (Debian package, batch mode).
"""
import re
import shutil
import subprocess

import pytest

from solderless.engine.circuit import Circuit, Element
from solderless.engine.errors import DesignError, SolderlessError
from solderless.engine.formats.spice import (circuit_to_netlist, evaluate_expression,
                                  load_netlist, netlist_subckt_as_stage,
                                  parse_netlist)
from solderless.engine.parts import load_library

NGSPICE = shutil.which("ngspice")

DEMO = """Demo stage with every card type
* a comment line
.param rl=10k half={rl/2}
VIN in 0 DC 0 AC 1 SIN(0 0.1 1k)
VCC vcc 0 9 ; end-of-line comment
IB 0 bias 1u
R1 in b {half}
R2 vcc
+ b 100k
C1 b 0 100n IC=1
L1 vcc lx 2.5 IC=0
RL lx c 4k7
Q1 c b e QGEN 2
RE e 0 1k $ another comment
D1 c out DGE
J1 c bias e JN
E1 ebuf 0 c 0 0.5
G1 0 gout c e 1m
RG gout 0 1k
X1 out mid filt rr=22k
RM mid 0 1meg
.model QGEN NPN(IS=1e-14 BF=200 VAF=80 ISE=1e-13)
.model DGE D(IS=1u N=1.5
+ XTI=3 FOO=2)
.model JN NJF VTO=-1 BETA=1m
.subckt filt a b params: rr=1k
R1 a m {rr}
C1 m 0 10n
X2 m b inner
.subckt inner p q
R9 p q 220k
.ends inner
.ends filt
.tran 1u 10m
.control
run
.endc
.backanno
.end
R99 x y 1
"""


def test_every_card_type():
    nl = parse_netlist(DEMO)
    c = nl.circuit
    byname = {e.name: e for e in c.elements}
    assert nl.title == "Demo stage with every card type"
    assert c.input_source == "VIN" and c.output == ("out", "0")
    vin = byname["VIN"]
    assert vin.kind == "V" and vin.value == 0.0
    assert vin.params["wave"] == ("SIN", [0.0, 0.1, 1000.0])
    assert vin.params["AC"] == 1.0
    assert byname["VCC"].value == 9.0
    assert byname["IB"].kind == "I" and byname["IB"].nodes == ("0", "bias")
    assert byname["R1"].value == 5000.0                     # {rl/2}
    assert byname["R2"].nodes == ("vcc", "b") and byname["R2"].value == 1e5
    assert byname["C1"].params == {"IC": 1.0} and byname["C1"].value == 1e-7
    assert byname["L1"].kind == "L" and byname["L1"].value == 2.5
    assert byname["RL"].value == 4700.0
    q = byname["Q1"]
    assert q.nodes == ("c", "b", "e") and q.params["TYPE"] == "NPN"
    assert q.params["BF"] == 200.0 and q.params["VAF"] == 80.0
    d = byname["D1"]
    assert d.params["IS"] == 1e-6 and d.params["N"] == 1.5
    # XTI is simulated (temperature law); an unknown name is not
    assert d.params["XTI"] == 3.0 and "FOO" not in d.params
    assert nl.models["DGE"].params["XTI"] == 3.0          # kept, not lost
    j = byname["J1"]
    assert j.params["TYPE"] == "NJF" and j.params["VTO"] == -1.0
    assert byname["E1"].nodes == ("ebuf", "0", "c", "0") and byname["E1"].value == 0.5
    assert byname["G1"].value == 1e-3
    # subcircuit flattening, nested, with a parameter override
    assert byname["X1.R1"].nodes == ("out", "x1.m") and byname["X1.R1"].value == 22e3
    assert byname["X1.C1"].nodes == ("x1.m", "0")
    assert byname["X1.X2.R9"].nodes == ("x1.m", "mid")
    assert "R99" not in byname                              # after .end
    assert [e.name for e in c.elements][:3] == ["VIN", "VCC", "IB"]
    # ignored cards are collected with their lines
    ignored = [t for _, t in nl.ignored]
    assert ".tran 1u 10m" in ignored and ".backanno" in ignored and "run" in ignored
    assert [ln for ln, _ in nl.ignored] == sorted(ln for ln, _ in nl.ignored)
    w = "\n".join(nl.warnings)
    assert "area factor 2" in w and "FOO" in w
    assert "'4k7' is read as 4700" in w
    assert nl.params == {"rl": 10e3, "half": 5e3}
    assert set(nl.subckts) == {"FILT"}


def test_case_insensitive_and_ground_aliases():
    nl = parse_netlist("t\nvin IN gnd dc 1\nr1 IN Out 1K\nR2 out GND 1k\n")
    assert [e.name for e in nl.circuit.elements] == ["VIN", "R1", "R2"]
    assert nl.circuit.elements[1].nodes == ("in", "out")
    assert nl.circuit.elements[2].nodes == ("out", "0")
    assert nl.circuit.input_source == "VIN"


@pytest.mark.parametrize("card, kind, vals, dc", [
    # ngspice manual, "Independent sources": value at t=0 when no DC given
    ("V1 a 0 PULSE(0 5 1m 1u 1u 5m 10m)", "PULSE",
     [0, 5, 1e-3, 1e-6, 1e-6, 5e-3, 10e-3], 0.0),
    ("V1 a 0 PWL(0 1 1m 2 2m 0)", "PWL", [0, 1, 1e-3, 2, 2e-3, 0], 1.0),
    ("V1 a 0 DC 2 SIN(0.5 1 440 0 0)", "SIN", [0.5, 1, 440, 0, 0], 2.0),
    ("I1 a 0 sin(0 1m 1k)", "SIN", [0, 1e-3, 1e3], 0.0),
])
def test_source_functions(card, kind, vals, dc):
    el = parse_netlist("t\n" + card + "\nR1 a 0 1k\n").circuit.elements[0]
    assert el.params["wave"][0] == kind
    assert el.params["wave"][1] == pytest.approx(vals)
    assert el.value == dc


def test_expressions():
    p = {"rl": 10e3, "g": 2.0}
    assert evaluate_expression("{2*rl + 4.7k}", p) == 24700.0
    assert evaluate_expression("rl^2", p) == 1e8
    assert evaluate_expression("sqrt(g*8)", p) == 4.0
    assert evaluate_expression("-(1meg)/RL", p) == -100.0
    assert evaluate_expression("max(1, 2) + pi", p) == pytest.approx(5.14159265)
    for bad in ["__import__('os').system('true')", "rl.real", "[1][0]",
                "unknown*2", "1/0", "(lambda: 1)()"]:
        with pytest.raises(ValueError):
            evaluate_expression(bad, p)


def test_func_cards_and_list_valued_instance_parameters():
    # .func name(args) {expr} defines a function for expressions (ngspice
    # manual, ".func"); TC=tc1,tc2 is a list (ignored, with a warning: at the
    # nominal 27 degC it changes nothing)
    nl = parse_netlist("t\n.func twice(x) {2*x}\n.func par(a,b) {a*b/(a+b)}\n"
                       ".param rp={par(twice(5k), 10k)}\nV1 a 0 1\n"
                       "R1 a 0 {twice(2.2k)} TC=0.001,0\nR2 a 0 {rp}\n")
    assert nl.circuit.element("R1").value == pytest.approx(4.4e3)
    assert nl.circuit.element("R2").value == pytest.approx(5e3)
    assert any("TC" in w for w in nl.warnings)
    for bad, why in (("R3 a 0 {twice(1, 2)}", "takes 1 argument"),
                     (".func loop(x) {loop(x)}\nR3 a 0 {loop(1)}", "32 deep")):
        with pytest.raises(DesignError, match=why):
            parse_netlist("t\n.func twice(x) {2*x}\nV1 a 0 1\n" + bad + "\n")


def test_param_order_and_subckt_defaults():
    nl = parse_netlist("""t
.param a=2 b={a*3}
.subckt div in out params: top={b*1k} bot=1k
RT in out {top}
RB out 0 {bot}
.ends
X1 n1 n2 div
X2 n1 n3 div bot={a*500}
VIN n1 0 1
""")
    v = {e.name: e.value for e in nl.circuit.elements}
    assert v["X1.RT"] == 6000.0 and v["X1.RB"] == 1000.0
    assert v["X2.RB"] == 1000.0 and v["X2.RT"] == 6000.0


def _err(text, **kw):
    with pytest.raises(DesignError) as ei:
        parse_netlist(text, file="pedal.cir", **kw)
    assert isinstance(ei.value, SolderlessError)
    return str(ei.value)


def test_errors_name_file_line_card_and_reason():
    m = _err("t\nR1 a 0 1k\nS1 a 0 c 0 SMOD\n")
    assert "pedal.cir:3" in m and "S1 a 0 c 0 SMOD" in m and "model 'SMOD' is not defined" in m
    m = _err("t\nR1 a 0 1k\nK1 L1 L2 0.9\n")
    assert "pedal.cir:3" in m and "coupled inductors (K) are not supported" in m
    m = _err("t\nR1 a 0 1k\nM1 d g s b NOPE\n")
    assert "pedal.cir:3" in m and "model 'NOPE' is not defined" in m
    m = _err("t\nR1 a 0 1k\nM1 d g s b QX\n.model QX NPN(IS=1e-14)\n")
    assert "NMOS or PMOS" in m
    m = _err("t\nR1 a 0 1k\nD1 a 0 NOPE\n")
    assert "pedal.cir:3" in m and "model 'NOPE' is not defined" in m
    m = _err("t\nX1 a b nosuch\n")
    assert "pedal.cir:2" in m and "subcircuit 'nosuch'" in m
    m = _err("t\n.subckt s a b\nR1 a b 1\n.ends\nX1 a s\n")
    assert "pedal.cir:5" in m and "2 ports" in m
    m = _err("t\nV1 a 0 EXP(0 1 1m 1m 2m 2m)\n")
    assert "EXP" in m and "pedal.cir:2" in m
    m = _err("t\nE1 a 0 POLY(1) b 0 0 1 0.5\n")
    assert "above the first degree" in m
    m = _err("t\nE1 a 0 LAPLACE {v(b)} = {1/(1+s)}\n")
    assert "linear POLY" in m and "pedal.cir:2" in m
    m = _err("t\nE1 a 0 VALUE={v(b)*nope(2)}\n")
    assert "pedal.cir:2" in m and "unknown function 'nope'" in m
    m = _err("t\nB1 a 0 V=i(V1)*2\n")
    assert "pedal.cir:2" in m and "branch current" in m
    m = _err("t\nR1 a 0 4x7y\n")
    assert "pedal.cir:2" in m and "R1" in m
    m = _err("t\nR1 a 0 {rx*2}\n")
    assert "unknown parameter 'rx'" in m
    m = _err("t\nR1 a 0 1k\nR1 b 0 1k\n")
    assert "defined twice" in m and "pedal.cir:3" in m
    m = _err("t\n.subckt s a\nR1 a 0 1\n")
    assert ".ends" in m and "pedal.cir:2" in m
    m = _err("t\nQ1 c b e DX\n.model DX D(IS=1e-14)\n")
    assert "type D" in m and "NPN or PNP" in m
    m = _err("t\n.weird 1 2\n")
    assert ".weird" in m and "pedal.cir:2" in m
    m = _err("t\n+ R1 a b 1\n")
    assert "continuation" in m


def test_include_relative_to_file(tmp_path):
    (tmp_path / "lib").mkdir()
    (tmp_path / "lib" / "models.inc").write_text(
        "* models\n.model DX D(IS=1e-12 N=2)\n.include more.inc\n")
    (tmp_path / "lib" / "more.inc").write_text(".subckt two a b\nR1 a b 2k\n.ends\n")
    top = tmp_path / "top.cir"
    top.write_text("top\n.include lib/models.inc\nD1 a 0 DX\nX1 a 0 two\nVIN a 0 1\n.end\n")
    nl = load_netlist(top)
    assert nl.circuit.element("D1").params["N"] == 2.0
    assert nl.circuit.element("X1.R1").value == 2000.0
    assert nl.circuit.element("X1.R1").where.file.endswith("more.inc")
    top.write_text("top\n.include lib/missing.inc\n")
    with pytest.raises(DesignError, match=r"top.cir:2"):
        load_netlist(top)


def test_lib_section_and_whole_file(tmp_path):
    # '.lib FILE SECTION' takes the cards between '.lib SECTION' and '.endl'
    # of FILE; '.lib FILE' the whole file (ngspice manual, ".lib")
    (tmp_path / "m").mkdir()
    (tmp_path / "m" / "parts.lib").write_text(
        "* a model library\n.lib bjts\n.model QX NPN(IS=1e-14 BF=150)\n.endl bjts\n"
        ".lib diodes\n.model DX D(IS=1n N=1.8)\n.endl\n")
    (tmp_path / "m" / "plain.lib").write_text(".model QY PNP(IS=2e-14 BF=90)\n")
    net = tmp_path / "amp.cir"
    net.write_text("amp\n.lib m/parts.lib BJTS\n.lib \"m/plain.lib\"\nV1 vcc 0 9\n"
                   "Q1 c b 0 QX\nQ2 0 b c QY\nR1 vcc c 1k\nR2 vcc b 100k\n.end\n")
    nl = load_netlist(net)
    assert nl.circuit.element("Q1").params["BF"] == 150
    assert nl.circuit.element("Q2").params["TYPE"] == "PNP"
    assert "DX" not in nl.models          # only the section asked for
    net.write_text(net.read_text().replace("BJTS", "mosfets"))
    with pytest.raises(DesignError) as ei:
        load_netlist(net)
    msg = str(ei.value)
    assert "amp.cir" in msg and ":2" in msg and "mosfets" in msg and "bjts" in msg


def test_missing_file_is_a_user_error(tmp_path):
    with pytest.raises(DesignError, match="cannot read"):
        load_netlist(tmp_path / "nope.cir")


def test_substrate_node_and_library_models():
    lib = load_library()
    nl = parse_netlist("t\nVCC vcc 0 9\nQ1 c b e sub npn-general\n"
                       "XU1 b e out vcc 0 opamp-general\n", library=lib)
    q = nl.circuit.element("Q1")
    assert q.nodes == ("c", "b", "e") and q.params["TYPE"] == "NPN"
    assert any("substrate" in w for w in nl.warnings)
    u = nl.circuit.element("XU1")
    assert u.kind == "OPAMP" and u.nodes == ("b", "e", "out", "vcc", "0")
    # written back as an instance of a subcircuit of the op-amp's law
    # (checked against ngspice in tests/test_spice_macromodels.py), which
    # reads back without the library
    text = circuit_to_netlist(nl.circuit)
    assert "\nXU1 b e out vcc 0 opamp_general\n" in text
    assert ".subckt opamp_general inp inn out vcc vee" in text
    back = parse_netlist(text).circuit
    assert not any(e.kind == "OPAMP" for e in back.elements)
    assert any(e.name.upper() == "XU1.C1" for e in back.elements), \
        [e.name for e in back.elements]


def test_exported_schematic_style_netlist():
    # shape of netlists exported by schematic editors: title comment line,
    # braces, .backanno/.end, '0' ground (common practice)
    text = """* C:\\designs\\boost.asc
V1 N001 0 9
R1 N001 N002 {R}
R2 N002 0 10k
C1 N002 0 {C}
.param R=10k C=100n
.backanno
.end
"""
    nl = parse_netlist(text, out_node="N002")
    assert nl.circuit.element("R1").value == 10e3
    assert nl.circuit.element("C1").value == 100e-9
    assert nl.circuit.output == ("n002", "0")
    assert nl.circuit.input_source is None


def test_parenthesised_net_names_and_title_card():
    # schematic editors name unlabelled nets like "Net-(R1-Pad2)"; ngspice
    # reads such a name as one node (common practice).  '.title' replaces
    # the first line as the title (ngspice manual, "Title line").
    text = """* /home/user/pedal.sch
.title bias divider
V1 vcc 0 DC 9
VIN /in 0 SIN(0 0.1 1k)
R1 vcc Net-(Q1-B) 47k
R2 Net-(Q1-B) 0 10k
C1 /in Net-(Q1-B) 100n
Q1 Net-(Q1-C) Net-(Q1-B) 0 QN
R3 vcc Net-(Q1-C) 4.7k
.model QN NPN(IS=1e-14 BF=200)
.end
"""
    nl = parse_netlist(text)
    assert nl.title == "bias divider"
    q = nl.circuit.element("Q1")
    assert q.nodes == ("net-(q1-c)", "net-(q1-b)", "0")
    assert nl.circuit.element("R1").nodes == ("vcc", "net-(q1-b)")
    assert nl.circuit.element("R1").value == 47e3
    assert nl.circuit.element("VIN").params["wave"][0] == "SIN"
    # a keyword's parenthesis (SIN(, NPN() still separates
    assert nl.models["QN"].params["BF"] == 200


def test_current_controlled_sources_and_their_errors():
    # F and H name the V source whose current controls them (ngspice manual,
    # "Linear Current-Controlled Current Sources" / "... Voltage Sources");
    # inside a subcircuit the name is the instance's own source
    text = """cc
VCC vcc 0 9
X1 vcc o1 mir
X2 vcc o2 mir
.subckt mir a o
VS a s 0
R1 s 0 10k
F1 o 0 VS 2
H1 h 0 VS 1k
RH h 0 1k
.ends
RL1 o1 0 1k
RL2 o2 0 1k
.end
"""
    nl = parse_netlist(text)
    f1 = nl.circuit.element("X1.F1")
    assert f1.kind == "F" and f1.value == 2 and f1.params["CONTROL"] == "X1.VS"
    assert nl.circuit.element("X2.H1").params["CONTROL"] == "X2.VS"
    assert "X1.VS F1" not in circuit_to_netlist(nl.circuit)
    assert re.search(r"^F\.X1\.F1 o1 0 V\.X1\.VS 2$", circuit_to_netlist(nl.circuit),
                     flags=re.M)
    for card, why in (("F1 o 0 POLY(1) VS 0 2 1", "above the first degree"),
                      ("F1 o 0 R1 2", "not a voltage source"),
                      ("H1 o 0 VS", "controlling V source and a value")):
        with pytest.raises(DesignError) as ei:
            parse_netlist(f"t\nVS a 0 0\nR1 a 0 1k\nRO o 0 1k\n{card}\n")
        assert why in str(ei.value) and ":5" in str(ei.value)


def test_linear_poly_sources_become_sums_of_plain_ones():
    # POLY(n): out = p0 + p1*x1 + ... + pn*xn (SPICE2); E and H in series,
    # G and F in parallel, p0 as a V or I source
    nl = parse_netlist("t\nV1 a 0 1\nV2 b 0 2\nVS b s 0\nRS s 0 1k\n"
                       "EG m 0 POLY(2) (a,0) (b,0) 0.1 0.5 0.25\nRM m 0 1k\n"
                       "GX 0 g POLY(2) a 0 b 0 0 1m 0\nRG g 0 1k\n"
                       "H1 h 0 POLY(1) VS 2k\nRH h 0 1k\n")
    els = {e.name: e for e in nl.circuit.elements}
    assert (els["EG.P1"].kind, els["EG.P1"].value, els["EG.P1"].nodes[2:]) == \
        ("E", 0.5, ("a", "0"))
    assert els["EG.P2"].nodes[:2] == (els["EG.P1"].nodes[1], els["EG.P0"].nodes[0])
    assert (els["EG.P0"].kind, els["EG.P0"].value) == ("V", 0.1)
    assert "GX.P2" not in els and els["GX.P1"].nodes == ("0", "g", "a", "0")
    # one coefficient of a one-dimensional POLY is p1 (SPICE2 user's guide,
    # from memory)
    assert (els["H1.P1"].value, els["H1.P1"].params["CONTROL"]) == (2e3, "VS")
    from solderless.engine.solver import Simulator
    nl.circuit.output = ("m", "0")
    op = Simulator(nl.circuit, 48000.0).operating_point()
    assert op.nets["m"] == pytest.approx(0.1 + 0.5 * 1 + 0.25 * 2, rel=1e-9)
    assert op.nets["g"] == pytest.approx(1e-3 * 1 * 1e3, rel=1e-9)
    assert op.nets["h"] == pytest.approx(2e3 * 2e-3, rel=1e-9)


def test_writer_round_trip():
    nl = parse_netlist(DEMO)
    text = circuit_to_netlist(nl.circuit, title="again")
    back = parse_netlist(text).circuit
    assert back.title == "again"

    def key(c):
        return [(e.name, e.kind, e.nodes, e.value,
                 {k: v for k, v in e.params.items() if k != "MODEL"})
                for e in c.elements]
    assert key(back) == key(nl.circuit)
    assert back.input_source == "VIN"


def test_writer_renames_and_rejects():
    c = Circuit([Element("drive.a", "R", ("in", "w"), 1e3),
                 Element("VIN", "V", ("in", "0"), 0.0)])
    text = circuit_to_netlist(c)
    assert "R.DRIVE.A in w 1000" in text
    assert parse_netlist(text).circuit.elements[0].name == "DRIVE.A"
    with pytest.raises(DesignError, match="TYPE"):
        circuit_to_netlist(Circuit([Element("Q1", "Q", ("c", "b", "0"), 0.0, {})]))
    with pytest.raises(DesignError, match="case"):
        circuit_to_netlist(Circuit([Element("R1", "R", ("A", "a"), 1.0)]))


def test_subckt_as_stage():
    nl = parse_netlist(DEMO)
    st = netlist_subckt_as_stage(nl, "filt")
    assert st.ports == ["a", "b"] and "rr" in st.defaults
    els = st.instantiate("XF", {"a": "in", "b": "o2"}, {"rr": 5e3})
    assert [(e.name, e.nodes) for e in els] == [
        ("XF.R1", ("in", "xf.m")), ("XF.C1", ("xf.m", "0")),
        ("XF.X2.R9", ("xf.m", "o2"))]
    assert els[0].value == 5e3
    with pytest.raises(DesignError, match="FILT"):
        netlist_subckt_as_stage(nl, "flit")
    with pytest.raises(DesignError, match="not connected"):
        st.instantiate("XF", {"a": "in"})


def _ngspice_op(text: str, tmp_path, name: str) -> dict[str, float]:
    body = re.sub(r"(?im)^\.(end|tran.*|control[\s\S]*?endc)\s*$", "", text)
    body += "\n.control\nop\nprint all\n.endc\n.end\n"
    path = tmp_path / name
    path.write_text(body)
    out = subprocess.run([NGSPICE, "-b", str(path)], capture_output=True,
                         text=True, timeout=60).stdout
    vals = {}
    for m in re.finditer(r"^\s*(\S+) = ([-+0-9.eE]+)\s*$", out, re.M):
        vals[m.group(1).lower()] = float(m.group(2))
    return vals


@pytest.mark.skipif(NGSPICE is None, reason="ngspice not installed")
def test_written_netlist_runs_like_the_original_in_ngspice(tmp_path):
    # Reference: ngspice flattens the original's subcircuits itself; our
    # flattened export must give the same operating point (ngspice -b).
    # (area factor removed: we ignore it, ngspice scales by it; .backanno is
    # refused by ngspice 'unimplemented control card')
    original = (DEMO.replace("IB 0 bias 1u", "IB 0 bias 1u\nRB bias 0 100k")
                .replace("QGEN 2", "QGEN").replace(".backanno\n", "")
                .split(".end\n")[0]
                # ngspice reads '4k7' as 4k (it stops at the letter), we read
                # the marking as 4.7k and warn: compare on plain notation
                .replace("4k7", "4.7k"))
    ours = circuit_to_netlist(parse_netlist(original).circuit)
    a = _ngspice_op(original, tmp_path, "orig.cir")
    b = _ngspice_op(ours, tmp_path, "ours.cir")
    nodes = ["b", "c", "e", "out", "mid", "x1.m", "ebuf", "gout", "bias"]
    for n in nodes:
        assert n in a and n in b, n
        assert b[n] == pytest.approx(a[n], rel=1e-6, abs=1e-9), n
