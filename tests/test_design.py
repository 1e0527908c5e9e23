"""The design layer: loading, validation errors, flattening, edits and saving."""
import math
import textwrap

import pytest

from solderless.engine.design import (AUDIO_TAPER_BASE, load_design, taper_fraction,
                           validate_circuit)
from solderless.engine.circuit import Circuit, Element
from solderless.engine.errors import DesignError, SolderlessError

RC = textwrap.dedent("""\
    # a comment the user wrote
    [design]
    name = "RC test"
    source_impedance = "1k"
    global_nets = ["vcc"]

    [[design.part]]
    name = "VCC"
    type = "supply"
    nodes = ["vcc", "0"]
    value = "9"

    [[stage]]
    name = "lp"
    [[stage.part]]
    name = "R1"
    type = "resistor"
    nodes = ["in", "out"]
    value = "10k"   # keep this comment
    [[stage.part]]
    name = "C1"
    type = "capacitor"
    nodes = ["out", "0"]
    value = "10n"
    [[stage.part]]
    name = "RB"
    type = "resistor"
    nodes = ["out", "vcc"]
    value = "1M"

    [[stage]]
    name = "vol"
    [[stage.part]]
    name = "VOL"
    type = "pot"
    nodes = ["in", "out", "0"]
    value = "100k"
    taper = "audio"
    rotation = 0.5

    [[probe]]
    name = "filter out"
    expr = "v(lp.out)"
""")


def write(tmp_path, text, name="d.toml"):
    p = tmp_path / name
    p.write_text(text)
    return p


def test_flatten_joins_chain_and_adds_jack_and_load(tmp_path):
    d = load_design(write(tmp_path, RC))
    c = d.flatten()
    els = {e.name: e for e in c.elements}
    # chain: lp.out is the same net as vol.in
    assert els["vol.VOL.a"].nodes[0] == els["lp.R1"].nodes[1]
    # the instrument: a source with the design's source impedance in series
    assert c.input_source == "jack"
    assert els["jack.rs"].value == pytest.approx(1e3)
    assert els["jack.rs"].nodes[1] == els["lp.R1"].nodes[0]
    # output is the last stage's out, loaded by the default 1 Mohm
    assert c.output[0] == els["vol.VOL.a"].nodes[1]
    assert els["load"].value == pytest.approx(1e6)
    # globals are shared, not prefixed
    assert els["lp.RB"].nodes[1] == "vcc"


def test_audio_taper_is_ten_percent_at_half_rotation():
    # common practice: an "audio" pot has about 10 % of its track at mid rotation
    assert taper_fraction("audio", 0.5) == pytest.approx(0.10)
    assert taper_fraction("audio", 0.0) == 0.0 and taper_fraction("audio", 1.0) == 1.0
    assert taper_fraction("reverse-audio", 0.5) == pytest.approx(0.90)
    assert taper_fraction([[0, 0], [0.5, 0.2], [1, 1]], 0.25) == pytest.approx(0.1)
    # the law is exponential: equal rotation steps give equal ratios (+1 offset)
    r = [taper_fraction("audio", x) * (AUDIO_TAPER_BASE - 1) + 1 for x in (0.2, 0.4, 0.6)]
    assert r[1] / r[0] == pytest.approx(r[2] / r[1])


def test_edits_return_element_changes_and_save_keeps_comments(tmp_path):
    path = write(tmp_path, RC)
    d = load_design(path)
    assert d.set_value("lp.R1", "4k7") == {"lp.R1": 4700.0}
    ch = d.set_rotation("vol.VOL", 0.25)
    # audio law at 1/4 rotation: (81**0.25 - 1)/80 = 0.025 of 100k
    assert ch["vol.VOL.a"] == pytest.approx(2500.0)
    assert ch["vol.VOL.b"] == pytest.approx(97500.0)
    d.save()
    text = path.read_text()
    assert "# a comment the user wrote" in text and "# keep this comment" in text
    d2 = load_design(path)
    assert d2.part("lp.R1").value == pytest.approx(4700.0)
    assert d2.part("vol.VOL").rotation == pytest.approx(0.25)
    assert not list(tmp_path.glob(".*.tmp")), "temporary file left behind"


def test_bypass_joins_in_and_out(tmp_path):
    d = load_design(write(tmp_path, RC))
    d.set_bypass("lp", True)
    c = d.flatten()
    names = {e.name for e in c.elements}
    assert "lp.R1" not in names
    els = {e.name: e for e in c.elements}
    assert els["jack.rs"].nodes[1] == els["vol.VOL.a"].nodes[0]


def test_probe_names_resolve_through_chain(tmp_path):
    d = load_design(write(tmp_path, RC))
    assert d.resolve_probe("v(vol.in)") == d.resolve_probe("v(lp.out)")
    assert d.resolve_probe("v(vcc)") == "v(vcc)"


@pytest.mark.parametrize("change, needle", [
    (('value = "10k"   # keep this comment', 'value = "ten k"'), "lp.R1"),
    (('value = "10n"', 'value = "-10n"'), "must be positive"),
    (('type = "capacitor"', 'type = "capacitr"'), "did you mean capacitor"),
    (('nodes = ["out", "0"]', 'nodes = ["out"]'), "has 2 nodes"),
    (('name = "RB"', 'name = "R1"'), "two parts are named 'R1'"),
    (('rotation = 0.5', 'rotation = 1.5'), "rotation"),
    (('taper = "audio"', 'taper = "logarithmic"'), "unknown taper"),
    (('name = "vol"', 'name = "lp"'), "two stages"),
    (('nodes = ["in", "out"]', 'nodes = ["in", "out" "x"]'), "not valid TOML"),
])
def test_bad_input_names_file_line_and_part(tmp_path, change, needle):
    text = RC.replace(*change)
    assert text != RC
    path = write(tmp_path, text)
    with pytest.raises(SolderlessError) as ei:
        load_design(path).flatten()
    msg = str(ei.value)
    assert needle in msg
    assert str(path) in msg
    assert ei.value.line is not None


def test_floating_net_and_missing_ground_and_source_loop(tmp_path):
    # a net reached only through a capacitor has no DC path (SPICE would find
    # its matrix singular at the operating point)
    floating = RC.replace('nodes = ["out", "vcc"]', 'nodes = ["x", "vcc"]') + textwrap.dedent("""\
        [[stage.part]]
        name = "CX"
        type = "capacitor"
        nodes = ["x", "0"]
        value = "1n"
    """)
    with pytest.raises(DesignError, match="no DC path") as ei:
        load_design(write(tmp_path, floating)).flatten()
    assert "vol.x" in str(ei.value)
    c = Circuit([Element("V1", "V", ("a", "b"), 1.0), Element("R1", "R", ("a", "b"), 1.0)])
    with pytest.raises(DesignError, match="no ground"):
        validate_circuit(c)
    c = Circuit([Element("V1", "V", ("a", "0"), 1.0), Element("V2", "V", ("a", "0"), 2.0)])
    with pytest.raises(DesignError, match="loop"):
        validate_circuit(c)


def test_unknown_design_name_suggests(tmp_path):
    with pytest.raises(DesignError, match="no design file or built-in design"):
        load_design("no-such-design-xyz")
    with pytest.raises(DesignError, match="file not found|no design"):
        load_design(tmp_path / "missing.toml")


def test_switch_selects_parts(tmp_path):
    text = RC + textwrap.dedent("""\
        [[stage]]
        name = "tone"
        [[stage.part]]
        name = "R1"
        type = "resistor"
        nodes = ["in", "out"]
        value = "1k"
        [[stage.part]]
        name = "CB"
        type = "capacitor"
        nodes = ["out", "0"]
        value = "1n"
        [[stage.part]]
        name = "CD"
        type = "capacitor"
        nodes = ["out", "0"]
        value = "10n"
        [[stage.part]]
        name = "S1"
        type = "switch"
        labels = ["bright", "dark"]
        positions = [["CB"], ["CD"]]
        position = 0
    """)
    d = load_design(write(tmp_path, text))
    names = {e.name for e in d.flatten().elements}
    assert "tone.CB" in names and "tone.CD" not in names
    d.set_position("tone.S1", 1)
    names = {e.name for e in d.flatten().elements}
    assert "tone.CD" in names and "tone.CB" not in names


def test_cli_reports_user_mistake_without_traceback(tmp_path, capsys):
    from solderless.app.cli import main
    bad = write(tmp_path, RC.replace('value = "10n"', 'value = "lots"'))
    rc = main(["op", str(bad)])
    err = capsys.readouterr().err
    assert rc == 2
    assert "Traceback" not in err and "error:" in err and "lp.C1" in err


TEMPLATED = textwrap.dedent("""\
    [design]
    name = "templated"
    global_nets = ["vcc", "vref"]
    [[design.part]]
    name = "VCC"
    type = "supply"
    nodes = ["vcc", "0"]
    value = "9"
    [[design.part]]
    name = "VREF"
    type = "supply"
    nodes = ["vref", "0"]
    value = "4.5"

    [[stage]]
    name = "buffer"
    template = "buffers/emitter-follower"
""")


def test_template_edits_are_saved_as_overrides(tmp_path):
    path = write(tmp_path, TEMPLATED)
    d = load_design(path)
    d.set_value("buffer.RE", "4k7")
    d.set_tolerance("buffer.RE", "1%")
    d.save()
    text = path.read_text()
    # the library file is untouched; the design carries the overrides
    assert "[stage.values]" in text and "[stage.tolerances]" in text
    d2 = load_design(path)
    assert d2.part("buffer.RE").value == pytest.approx(4700.0)
    assert d2.part("buffer.RE").tolerance == pytest.approx(0.01)
    assert load_design(write(tmp_path, TEMPLATED, "fresh.toml")).part("buffer.RE").value \
        == pytest.approx(10e3)
    with pytest.raises(DesignError, match="no part 'NOPE'"):
        load_design(write(tmp_path, TEMPLATED + '[stage.values]\nNOPE = "1k"\n', "bad.toml"))


def test_netlist_design_saves_as_toml_that_uses_it(tmp_path):
    net = tmp_path / "nets" / "rc.cir"
    net.parent.mkdir()
    original = "rc from a netlist\nVIN src 0 0\nR1 src out 10k\nC1 out 0 10n\n.end\n"
    net.write_text(original)
    d = load_design(net)
    d.set_value("netlist.R1", "22k")
    with pytest.raises(DesignError, match=r"\.toml"):
        d.save()                      # never overwrite the netlist with TOML
    assert net.read_text() == original
    out = tmp_path / "work" / "rc-mod.toml"
    with pytest.raises(DesignError, match="does not exist"):
        d.save(out)                   # a missing folder is never created silently
    out.parent.mkdir()
    d.save(out)
    assert net.read_text() == original
    d2 = load_design(out)
    assert d2.part("netlist.R1").value == pytest.approx(22e3)
    els = {e.name: e for e in d2.flatten().elements}
    assert els["R1"].value == pytest.approx(22e3) and els["C1"].value == pytest.approx(10e-9)
    assert "../nets/rc.cir" in out.read_text()


def one_stage(name: str, stage: str, parts: list[tuple]) -> str:
    """A design file: a global 9 V supply VCC and one stage of ``parts``,
    each (name, type, nodes, {other keys})."""
    out = [f'[design]\nname = "{name}"\nglobal_nets = ["vcc"]\n',
           '[[design.part]]\nname = "VCC"\ntype = "supply"\nnodes = ["vcc", "0"]\n'
           'value = "9"\n', f'[[stage]]\nname = "{stage}"']
    for pname, ptype, nodes, extra in parts:
        keys = "".join(f'{k} = "{v}"\n' for k, v in extra.items())
        out.append(f'[[stage.part]]\nname = "{pname}"\ntype = "{ptype}"\n'
                   f'nodes = {list(nodes)!r}\n{keys}'.replace("'", '"'))
    return "\n".join(out)


CONTROLLED = one_stage("current-controlled parts", "sense", [
    ("R1", "resistor", ("vcc", "s"), {"value": "10k"}),
    ("AMM", "supply", ("s", "0"), {"value": "0"}),
    ("MIR", "cccs", ("0", "m"), {"value": "2", "control": "AMM"}),
    ("RM", "resistor", ("m", "0"), {"value": "1k"}),
    ("TR", "ccvs", ("t", "0"), {"value": "1k", "control": "AMM"}),
    ("RT", "resistor", ("t", "out"), {"value": "1k"}),
    ("RIN", "resistor", ("in", "0"), {"value": "100k"}),
])


def test_current_controlled_parts(tmp_path):
    # a 0 V supply as an ammeter: i = 9 V / 10 k = 0.9 mA (Ohm's law);
    # cccs (F): 2 x 0.9 mA flows 0 -> through it -> m, into RM: 1.8 V;
    # ccvs (H): v = 1 k x 0.9 mA = 0.9 V (the SPICE F and H definitions)
    from solderless.engine.solver import Simulator
    d = load_design(write(tmp_path, CONTROLLED))
    circ = d.flatten()
    assert circ.element("sense.MIR").params["CONTROL"] == "sense.AMM"
    op = Simulator(circ, 48000.0).operating_point()
    assert op.nets["sense.m"] == pytest.approx(1.8, rel=1e-9)
    assert op.nets["sense.t"] == pytest.approx(0.9, rel=1e-9)
    bad = CONTROLLED.replace('value = "2"\ncontrol = "AMM"', 'value = "2"\ncontrol = "R1"')
    assert bad != CONTROLLED
    with pytest.raises(DesignError) as ei:
        Simulator(load_design(write(tmp_path, bad, "bad.toml")).flatten(), 48000.0)
    assert "sense.MIR" in str(ei.value) and "voltage source" in str(ei.value)
    missing = CONTROLLED.replace('control = "AMM"\n', "", 1)
    with pytest.raises(DesignError) as ei:
        load_design(write(tmp_path, missing, "missing.toml"))
    assert "control" in str(ei.value) and "MIR" in str(ei.value)


MOS_BOOST = one_stage("mosfet booster", "boost", [
    ("C1", "capacitor", ("in", "g"), {"value": "100n"}),
    ("R1", "resistor", ("vcc", "g"), {"value": "1M"}),
    ("R2", "resistor", ("g", "0"), {"value": "470k"}),
    ("Q1", "nmos", ("d", "g", "s"), {"model": "nmos-small-signal"}),
    ("RD", "resistor", ("vcc", "d"), {"value": "10k"}),
    ("RS", "resistor", ("s", "0"), {"value": "2.2k"}),
    ("C2", "capacitor", ("d", "out"), {"value": "1u"}),
])


def test_mosfet_part_bias_point(tmp_path):
    # gate at the divider 9*470k/1.47M; square law in saturation with the
    # source resistor: Id = beta/2*(Vg - Id*RS - VTO)^2*(1 + LAMBDA*Vds),
    # beta = KP*W/L (Shichman-Hodges), solved by scipy
    from scipy.optimize import brentq
    from solderless.engine.solver import Simulator
    d = load_design(write(tmp_path, MOS_BOOST))
    circ = d.flatten()
    m = circ.element("boost.Q1")
    assert m.kind == "M" and m.nodes[3] == m.nodes[2]      # bulk on the source
    op = Simulator(circ, 48000.0).operating_point()
    vg = 9 * 470e3 / 1.47e6
    beta = 60e-6 * 2e-3 / 2e-6

    def f(i):
        vgst = vg - i * 2.2e3 - 2.0
        vds = 9 - i * (10e3 + 2.2e3)
        return beta / 2 * max(vgst, 0.0) ** 2 * (1 + 0.02 * vds) - i

    i_d = brentq(f, 0.0, 9 / 12.2e3)
    assert op.nets["boost.s"] == pytest.approx(i_d * 2.2e3, rel=1e-6)
    # saturation (the amplifying region), reported as near cut-off when the
    # gate overdrive is under 0.5 V (solderless/engine/analysis/regions.py)
    vgst = vg - i_d * 2.2e3 - 2.0
    assert op.devices["boost.Q1"]["region"] == ("near cut-off" if vgst < 0.5 else "saturated")


def test_netlist_stage_keeps_its_current_controlled_sources(tmp_path):
    # an op-amp macromodel subcircuit (POLY, F and H inside) as a stage: its
    # F/H parts still name their controlling sources, so the stage runs; as a
    # unity-gain follower (out tied to the inverting input) the output follows
    # a 1 V input to within the macromodel's offset (common practice)
    import shutil
    from pathlib import Path
    from solderless.engine.solver import Simulator
    src = Path(__file__).parent / "netlists" / "opamp_macromodel.cir"
    shutil.copy(src, tmp_path / "op.cir")
    text = one_stage("follower", "bias", [
        ("VEE", "supply", ("vee", "0"), {"value": "-9"}),
        ("VREF", "supply", ("out", "0"), {"value": "1"}),
        ("RIN", "resistor", ("in", "0"), {"value": "100k"}),
    ]).replace('global_nets = ["vcc"]', 'global_nets = ["vcc", "vee"]')
    text += ('\n[[stage]]\nname = "amp"\nnetlist = "op.cir"\nsubckt = "OPMACRO"\n'
             'ports = ["in", "out", "vcc", "vee", "out"]\n')
    circ = load_design(write(tmp_path, text)).flatten()
    f = [e for e in circ.elements if e.kind == "F"]
    assert f and all(e.params["CONTROL"].startswith("amp.V") for e in f)
    op = Simulator(circ, 48000.0).operating_point()
    assert op.nets["amp.out"] == pytest.approx(1.0, abs=5e-3)
