"""Device model cards: every standard parameter is simulated or named in a
warning; Gummel-Poon DC, temperature and start-up state against ngspice.

References: ngspice-39 (``ngspice -b``, tests/spice_ref.py), its manual's
model parameter tables (BJT, diode, JFET, MOSFET level 1) and its default
temperature laws; the SPICE2 Gummel-Poon model (Nagel 1975; see
docs/references.md).  Netlists: tests/netlists/gp_ce40, gp_fuzz, jfet_clip,
ge_stage, diode_temp, schmitt_off (our own typical values; also run by
test_ngspice_dc/tran/roundtrip).
"""
from __future__ import annotations

import math
import re

import numpy as np
import pytest

import spice_ref as S
from solderless.engine.devices._common import NOISE_ONLY
from solderless.engine.circuit import Circuit, Element
from solderless.engine.devices import REGISTRY
from solderless.engine.formats.spice import parse_netlist
from solderless.engine.solver.dcop import operating_point

TOL_V = 1e-3   # project requirement: 1 mV on every node

# a card with every simulated term active, per device (our own values), and
# the temperature at which the temperature parameters matter
ACTIVE = {
    "Q": ({"IS": 1e-14, "BF": 150, "ISE": 1e-14, "ISC": 1e-13, "RB": 100, "RBM": 20,
           "IRB": 1e-4, "RE": 1, "RC": 5, "VAF": 80, "VAR": 20, "IKF": 0.05,
           "IKR": 0.01, "XTB": 1.5, "TNOM": 25, "TYPE": "NPN"}, 60.0),
    "D": ({"IS": 1e-14, "RS": 1, "BV": 20, "NBV": 1.5, "TNOM": 25}, 60.0),
    "J": ({"B": 0.8, "RD": 10, "RS": 10, "TNOM": 25, "TYPE": "NJF"}, 60.0),
    "M": ({"GAMMA": 0.4, "RD": 10, "RS": 10, "LD": 1e-6, "TYPE": "NMOS",
           "AD": 1e-9, "AS": 1e-9, "PD": 1e-4, "PS": 1e-4}, 27.0),
}
NODES = {"Q": ("c", "b", "e"), "D": ("a", "0"), "J": ("d", "g", "s"), "M": ("d", "g", "s", "b")}


def _layout(kind, params, temp):
    mod = REGISTRY[kind]
    el = Element("X1", kind, NODES[kind], 0.0, dict(params))
    return mod.layout(el, temp=temp)


def _changed(kind, name, base, temp):
    """Does setting ``name`` to another value change what is simulated?"""
    a = _layout(kind, base, temp)
    p = dict(base)
    v = float(p.get(name, REGISTRY[kind].DEFAULTS[name]))
    if math.isnan(v):
        v = 1.0
    p[name] = (v * 1.3 if v not in (0.0, math.inf) else (0.3 if v == 0.0 else 5.0))
    if name == "TNOM":
        p[name] = 40.0
    b = _layout(kind, p, temp)
    same = (a.ports == b.ports and a.stamps == b.stamps and a.par.size == b.par.size
            and np.array_equal(a.par, b.par))
    return not same


@pytest.mark.parametrize("kind", ["Q", "D", "J", "M"])
def test_every_standard_parameter_is_simulated_or_named(kind):
    """Walk the device's full standard list (ngspice manual): a simulated
    parameter changes the device's parameters or stamps; any other is
    accepted, and the operating-point report and the SPICE importer name it
    with what it affects."""
    mod = REGISTRY[kind]
    base, temp = ACTIVE[kind]
    assert set(mod.STANDARD) == set(mod.DEFAULTS) | set(mod.IGNORED)
    for name in sorted(mod.STANDARD):
        if name in mod.DEFAULTS:
            if kind == "M" and name in ("W", "L", "M", "AD", "AS", "PD", "PS"):
                continue  # instance parameters, checked by test_mosfet_reference
                #           (AD ... PD by test_charge_storage)
            assert _changed(kind, name, base, temp), f"{kind} {name} has no effect"
        else:
            params = dict(base, **{name: 1.0})
            lay = _layout(kind, params, temp)
            assert name in [n for n, _ in lay.ignored], f"{kind} {name} ignored silently"
    # the report names them: one card with every ignored parameter
    ign = sorted(mod.IGNORED)
    params = dict(base, **{n: 1.0 for n in ign})
    circ = Circuit([Element("V1", "V", ("vcc", "0"), 5.0),
                    Element("R1", "R", ("vcc", "a"), 1e3),
                    Element("R2", "R", ("a", "0"), 1e3),
                    Element("X1", kind, tuple("a" if n != "0" else "0" for n in NODES[kind]),
                            0.0, params)], output=("a", "0"))
    op = operating_point(circ)
    text = "\n".join(op.warnings)
    for n in ign:
        assert re.search(rf"\b{n}\b", text), f"{kind} {n} not named in the report"
    assert "not simulated" in text
    # the SPICE importer names them too, with what they affect
    mtype = {"Q": "NPN", "D": "D", "J": "NJF", "M": "NMOS"}[kind]
    nodes = " ".join("a" if n != "0" else "0" for n in NODES[kind])
    card = " ".join(f"{n}=1" for n in ign)
    nl = parse_netlist(f"walk\nV1 vcc 0 5\nR1 vcc a 1k\nX{kind} {nodes} MX\n"
                       f".model MX {mtype}({card})\n".replace(f"X{kind} ", f"{kind}1 "),
                       in_source=None, out_node="a")
    w = "\n".join(nl.warnings)
    for n in ign:
        if n == "MFG":
            continue  # a label: read without a word, as LEVEL and TYPE
        if n in NOISE_ONLY:     # flicker noise: simulated only with noise on
            assert re.search(rf"\b{n} \(flicker noise\) acts only with noise on", w), n
            continue
        assert re.search(rf"\b{n} is not simulated and is ignored; it affects", w), n


def _ours(cards, *, in_source=None):
    nl = parse_netlist(cards, file="ref", in_source=in_source)
    c = nl.circuit
    if c.output[0] not in c.nets():
        c.output = (c.nets()[0], "0")
    return operating_point(c)


def _compare(cards, label):
    ref = S.run_op(cards)
    op = _ours(cards)
    bad = {k: (op.nets[k], ref[k.lower()]) for k in op.nets
           if k.lower() in ref and abs(op.nets[k] - ref[k.lower()]) > TOL_V}
    assert not bad, f"{label}: nodes off by more than 1 mV vs ngspice: {bad}"
    return op, ref


@pytest.fixture(scope="module")
def version():
    return S.require_ngspice()


def test_gummel_poon_terms_move_the_bias_as_ngspice(version):
    """Each Gummel-Poon DC term moves the 40 dB stage's bias (so a card
    that drops it is visibly wrong), and our bias follows ngspice's."""
    cards = S.load_netlist("gp_ce40")
    full, _ = _compare(cards, "gp_ce40")
    plain = re.sub(r"IKF=\S+|ISE=\S+|IKR=\S+|ISC=\S+|IRB=\S+|RBM=\S+", "", cards)
    bare, _ = _compare(plain, "gp_ce40 without high-injection/leakage")
    assert abs(full.nets["c"] - bare.nets["c"]) > 5e-3  # the terms matter


@pytest.mark.parametrize("temp", [-10.0, 27.0, 60.0])
def test_diode_forward_voltage_drift(version, temp):
    """Diode forward voltage at three temperatures (IS(T) with EG, XTI,
    TNOM) within 1 mV of ngspice; it falls with temperature (silicon:
    about -2 mV/K, common practice)."""
    base = S.load_netlist("diode_temp")
    cards = re.sub(r"^\.temp .*$", f".temp {temp:g}", base, flags=re.M)
    op, _ = _compare(cards, f"diode_temp at {temp} degC")
    cold = _ours(re.sub(r"^\.temp .*$", ".temp -20", base, flags=re.M))
    drift = (op.nets["out"] - cold.nets["out"]) / (temp + 20.0)
    assert -3e-3 < drift < -1e-3


@pytest.mark.parametrize("temp", [0.0, 25.0, 50.0])
def test_germanium_stage_three_temperatures(version, temp):
    """Germanium stage (EG 0.67, XTB, TNOM 25) at three temperatures."""
    cards = re.sub(r"^\.temp .*$", f".temp {temp:g}", S.load_netlist("ge_stage"), flags=re.M)
    _compare(cards, f"ge_stage at {temp} degC")


def test_options_temp_and_tnom(version):
    """``.options temp=`` and ``tnom=`` as ngspice reads them."""
    cards = re.sub(r"^\.temp .*$", "", S.load_netlist("diode_temp"), flags=re.M)
    cards = cards.replace("TNOM=25", "")
    ref_cards = cards.replace(".end", ".options temp=45 tnom=35\n.end")
    nl = parse_netlist(ref_cards, in_source=None)
    assert nl.circuit.temperature == 45.0
    # ngspice takes .options from our runner too: run with the card's own
    text = ref_cards.replace(".options temp=45 tnom=35", ".temp 45") \
        .replace("N=1.75", "N=1.75 TNOM=35").replace("XTI=2.5", "XTI=2.5 TNOM=35")
    ref = S.run_op(text)
    op = operating_point(_with_out(nl.circuit))
    assert op.nets["out"] == pytest.approx(ref["out"], abs=TOL_V)


def _with_out(c):
    if c.output[0] not in c.nets():
        c.output = (c.nets()[0], "0")
    return c


def test_schmitt_trigger_starts_where_ngspice_starts(version):
    """With Q1 OFF both simulators start in the state with Q1 cut off;
    without OFF both land on the middle balance, which our report flags
    as unstable (and does not flag the OFF state)."""
    cards = S.load_netlist("schmitt_off")
    op, ref = _compare(cards, "schmitt_off")
    assert op.devices["Q1"]["region"] == "cut-off"
    assert not any("unstable" in w for w in op.warnings)
    mid, _ = _compare(cards.replace(" OFF", ""), "schmitt without OFF")
    assert abs(mid.nets["c2"] - op.nets["c2"]) > 1.0
    assert any("unstable balance" in w for w in mid.warnings)


def test_nodeset_picks_the_state_as_ngspice(version):
    """``.nodeset`` holds nets for the first solution, then releases them."""
    cards = S.load_netlist("schmitt_off").replace(" OFF", "")
    cards = cards.replace(".end", ".nodeset v(c1)=3 v(c2)=8.9\n.end")
    op, _ = _compare(cards, "schmitt with .nodeset")
    assert op.devices["Q2"]["region"] == "cut-off"
    assert not any("unstable" in w for w in op.warnings)


def test_symmetric_flip_flop_is_flagged_unstable():
    """Two cross-coupled transistors, identical: Newton from zero lands on
    the symmetric middle point (as ngspice does); the report flags it."""
    cards = """flip-flop
VCC vcc 0 DC 9
RC1 vcc c1 2.2k
RC2 vcc c2 2.2k
RB1 c2 b1 22k
RB2 c1 b2 22k
Q1 c1 b1 0 QX
Q2 c2 b2 0 QX
.model QX NPN(IS=1e-14 BF=100)
.end
"""
    op = _ours(cards)
    assert op.nets["c1"] == pytest.approx(op.nets["c2"], abs=1e-6)
    assert any("unstable balance" in w for w in op.warnings)
    off = _ours(cards.replace("Q1 c1 b1 0 QX", "Q1 c1 b1 0 QX OFF"))
    assert off.devices["Q1"]["region"] == "cut-off"
    assert not any("unstable" in w for w in off.warnings)


def test_ic_sets_the_render_start_as_ngspice(version):
    """``.ic`` holds a net while the transient's starting point is solved
    (ngspice without UIC), so the bistable starts in the state it names;
    ``op`` itself ignores .ic, as ngspice's op does."""
    cards = S.load_netlist("schmitt_off").replace(" OFF", "")
    cards = cards.replace(".end", ".ic v(c2)=8.9 v(c1)=3\n.end")
    from solderless.engine.solver import Simulator
    fs, dur = 48000.0, 0.01
    circ = parse_netlist(cards, file="ic", in_source="VIN").circuit
    circ.element("VIN").params.pop("wave", None)
    dc, kind, nums = S.source_wave(cards, "VIN")
    n = int(dur * fs) + 1
    t = np.arange(n) / fs
    x = S.wave_samples(kind, nums, t, dc) - dc
    sim = Simulator(circ, fs)
    y = sim.process(x)
    ref = S.run_tran(cards, 1 / fs, dur, nodes=("out",))
    err, _ = S.nrmse(ref.v["out"], y, max_lag=0)
    assert ref.v["out"][0] > 7.5 and y[0] > 7.5      # started with Q2 off
    assert err < 0.01


def test_temperature_live_change_matches_a_fresh_circuit():
    """Changing the temperature while running lands at a block boundary and
    gives the same output as a simulator built at that temperature."""
    from solderless.engine.solver import Simulator
    from solderless.engine.solver.simulator import TEMPERATURE_KEY
    fs = 48000.0
    base = S.load_netlist("ge_stage")
    hot = parse_netlist(re.sub(r"^\.temp .*$", ".temp 60", base, flags=re.M),
                        in_source="VIN").circuit
    cold = parse_netlist(base, in_source="VIN").circuit
    x = 0.01 * np.sin(2 * np.pi * 1000 * np.arange(4800) / fs)
    a = Simulator(cold, fs)
    a.set_values({TEMPERATURE_KEY: 60.0})
    a.reset()
    b = Simulator(hot, fs)
    assert a.operating_point().nets["c"] == pytest.approx(b.operating_point().nets["c"],
                                                          abs=1e-9)
    ya, yb = a.process(x), b.process(x)
    assert np.max(np.abs(ya - yb)) < 1e-9
    assert a.temperature == 60.0 and cold.temperature == 45.0  # the circuit is not edited
    assert abs(b.operating_point().nets["c"]
               - Simulator(cold, fs).operating_point().nets["c"]) > 0.1


def test_design_temperature_field(tmp_path):
    """``temperature`` in [design]: read, flattened, changed like a value."""
    from solderless.engine.design import load_design
    from solderless.engine.errors import DesignError
    from solderless.engine.solver.simulator import TEMPERATURE_KEY
    src = tmp_path / "d.toml"
    src.write_text('[design]\nname = "t"\ntemperature = 40\n'
                   '[[stage]]\nname = "s"\nports = ["in", "out"]\n'
                   '[[stage.part]]\nname = "R1"\ntype = "resistor"\nnodes = ["in", "out"]\n'
                   'value = "1k"\n'
                   '[[stage.part]]\nname = "D1"\ntype = "diode"\nnodes = ["out", "0"]\n'
                   'model = "diode-germanium"\n')
    d = load_design(src)
    assert d.temperature == 40.0
    assert d.flatten().temperature == 40.0
    assert d.set_value("temperature", 55) == {TEMPERATURE_KEY: 55.0}
    d.save()
    assert "temperature = 55" in src.read_text()
    bad = tmp_path / "bad.toml"
    bad.write_text(src.read_text().replace("temperature = 55", "temperature = 900"))
    with pytest.raises(DesignError, match="out of range"):
        load_design(bad)


def test_live_host_changes_the_temperature_like_a_part_value():
    """The live edit path: ``set_value("temperature", t)`` on a playing
    host re-derives the devices; the operating point is then the one of
    the design saved at that temperature."""
    from solderless.engine.design import load_design
    from solderless.engine.live import host as H
    h = H.LiveHost(load_design("booster"), autosave=False, block=128)
    h.run_offline(4)
    h.set_value("temperature", 60.0).result(10)
    h.run_offline(4)
    sim = h.voices[0].sim
    assert sim.temperature == 60.0
    hot = load_design("booster")
    hot.temperature = 60.0
    from solderless.engine.solver import Simulator
    ref = Simulator(hot.flatten(), 48000.0).operating_point().nets
    cold = Simulator(load_design("booster").flatten(), 48000.0).operating_point().nets
    ours = sim.operating_point().nets
    moved = max(abs(ref[k] - cold[k]) for k in ref)
    assert moved > 1e-3                                   # the bias does move
    assert max(abs(ours[k] - ref[k]) for k in ref) < 1e-6
    h.close()


def test_netlist_design_keeps_and_changes_its_temperature():
    """A whole netlist opened as a design keeps its ``.temp`` and can be
    changed like a part value."""
    from solderless.engine.design import load_design
    d = load_design(str(S.NETLIST_DIR / "ge_stage.cir"))
    assert d.temperature == 45.0 and d.flatten().temperature == 45.0
    d.set_value("temperature", 10)
    assert d.flatten().temperature == 10.0
