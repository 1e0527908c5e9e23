"""Netlist syntax and source semantics against ngspice-39 (issue 18, items 6-7).

References (docs/references.md, "Netlist syntax and behavioural sources"
and "Reference simulator"): ngspice-39 in batch mode, ``op`` and ``tran``
at the same step (tests/spice_ref.py), its ``show`` for R/C model values;
the aliasing limit is the sampling theorem (Nyquist frequency fs/2, common
practice).
"""
from __future__ import annotations

import numpy as np
import pytest
import soundfile as sf

import spice_ref as S
from solderless.app.cli import main
from solderless.engine.formats.spice import parse_netlist
from solderless.engine.solver import Simulator
from solderless.engine.solver.dcop import operating_point

FS = 48000.0

SYNTAX = """name=value, sine( and R/C models
V1 1 0 dc=2 ac=1
R1 1 2 RM L=20u W=2u
R2 2 0 RM L=10u
R3 1 3 2k RM
R4 3 0 RM2
R5 1 4 r=3.3k
R6 4 0 1k m=2
V2 5 0 DC 0.25 sine(1 1 1k)
R7 5 6 1k
R8 6 0 2.2k
I1 0 7 dc=1m
R9 7 0 1.5k
C1 2 0 CM L=10u
C2 3 0 CM3 L=10u W=5u
C3 4 0 10n CM
.model RM R(RSH=100 NARROW=0.5u SHORT=1u TC1=0.01)
.model RM2 R(R=3k)
.model CM C(CJ=1e-4 CJSW=1e-10 NARROW=0.1u SHORT=0.2u)
.model CM3 C(DI=3.9 THICK=1e-8)
"""


@pytest.fixture(scope="module")
def version():
    return S.require_ngspice()


def test_name_value_sine_and_rc_models_match_ngspice_op(version):
    """Against ngspice's transient start (its solution at t = 0, where V2
    sits at its sine's t = 0 value, 1 V); ngspice's ``op`` alone takes V2's
    DC value 0.25 V instead, and says so in a note.  The engine's operating
    point is where a render starts, so it is the t = 0 solution."""
    ref = S.run_tran(SYNTAX, 1 / FS, 1e-4)
    op = S.run_op(SYNTAX)
    assert op["5"] == pytest.approx(0.25) and ref.v["5"][0] == pytest.approx(1.0)
    nl = parse_netlist(SYNTAX, file="syntax.cir", out_node="2")
    ours = {k.lower(): v for k, v in operating_point(nl.circuit).nets.items()}
    for node, v in ref.v.items():
        if not node.startswith("i("):
            assert ours[node] == pytest.approx(v[0], abs=1e-6), f"{node} [{version}]"
    for node in ("1", "2", "3", "4", "7"):  # and ngspice's op where no wave acts
        assert ours[node] == pytest.approx(op[node], abs=1e-6), f"{node} [{version}]"
    el = {e.name: e for e in nl.circuit.elements}
    assert el["V2"].params["wave"] == ("SIN", [1.0, 1.0, 1000.0])
    assert el["V1"].params["AC"] == 1.0
    # what the R/C models leave out is named, with its reason
    w = " ".join(nl.warnings)
    assert "TC1 is ignored (temperature coefficient" in w


def test_rc_model_values_match_ngspice_show(version):
    ctl = ("op\nlet r1 = @r1[resistance]\nlet r2 = @r2[resistance]\n"
           "let c1 = @c1[capacitance]\nlet c2 = @c2[capacitance]\n"
           "write out.raw r1 r2 c1 c2")
    ref = S.run_ngspice(SYNTAX, ctl).plots[0].vectors
    nl = parse_netlist(SYNTAX, file="syntax.cir", out_node="2")
    el = {e.name: e for e in nl.circuit.elements}
    for name in ("R1", "R2", "C1", "C2"):
        assert el[name].value == pytest.approx(float(ref[name.lower()][0]), rel=1e-6), \
            f"{name} [{version}]"


def test_pulse_without_rise_time_matches_ngspice(version):
    """PULSE with TR = TF = 0: ngspice ramps over TSTEP (here the sample
    period), and so does the engine; transient at the same step."""
    cards = ("pulse\nV1 src 0 PULSE(0 1 0.25m 0 0 0.5m 1m)\nR1 src out 1k\n"
             "C1 out 0 100n\n")
    ref = S.run_tran(cards, 1 / FS, 0.004, nodes=("out",))
    nl = parse_netlist(cards, file="pulse.cir", in_source=None)
    sim = Simulator(nl.circuit, FS)
    y = sim.process(np.zeros(ref.t.size))
    err, lag = S.nrmse(ref.v["out"], y, max_lag=0)
    assert err < 0.01, f"NRMSE {err:.4f} [{version}]"
    # measured: 0.16 %; with instant edges (TR = TF = 1 ns) 6.7 %
    assert lag == 0


def test_operating_point_is_where_the_render_starts(version):
    """A pulse at t = 0 sits at V1 (ngspice's first transient point) in the
    operating point and in the first rendered sample; the input source
    starts from its DC value in both."""
    cards = ("start\nVIN in 0 DC 0.5 PULSE(0 2 0 1m 1m 5m 10m)\nR1 in out 1k\n"
             "V2 b 0 PULSE(1 3 0 0 0 1m 2m)\nR2 b out 1k\nR3 out 0 1k\n")
    ref = S.run_tran(cards.replace("DC 0.5 ", ""), 1 / FS, 7.5 / FS, nodes=("out",))
    nl = parse_netlist(cards, file="start.cir")
    sim = Simulator(nl.circuit, FS)
    op = sim.operating_point().nets["out"]
    y = sim.process(np.zeros(8))
    # out = (0.5 + 1) / 3 at rest, with the input at its DC value 0.5 V
    assert op == pytest.approx(1.5 / 3, abs=1e-9)
    assert y[0] == pytest.approx(op, abs=1e-9)
    # V2's ramp over one step: ngspice's transient from the same start,
    # with the input at the value the engine gives it (0 V + its DC ...)
    ref2 = S.run_tran(cards.replace("DC 0.5 PULSE(0 2 0 1m 1m 5m 10m)", "DC 0.5"),
                      1 / FS, 7.5 / FS, nodes=("out",))
    # (ngspice's points between the grid are resampled with a spline, which
    # rings by up to 0.5 mV after the corner: 1 mV after the first two)
    assert np.allclose(y[:2], ref2.v["out"][:2], atol=1e-6), (y, ref2.v["out"][:8])
    assert np.allclose(y, ref2.v["out"][:8], atol=1e-3), (y, ref2.v["out"][:8])
    assert ref.v["out"][0] == pytest.approx(1.0 / 3, abs=1e-9)  # ngspice: V1 at t = 0


def test_source_above_nyquist_is_named():
    cards = ("alias\nVIN in 0 DC 0\nR1 in out 1k\nV2 b 0 SIN(0 1 30k)\nR2 b out 1k\n"
             "R3 out 0 1k\n")
    nl = parse_netlist(cards, file="alias.cir")
    w = Simulator(nl.circuit, FS).warnings
    assert len(w) == 1 and "alias.cir:4" in w[0] and "V2" in w[0] and "24000" in w[0]
    assert Simulator(nl.circuit, FS, oversample=2).warnings == []


def _delay(a, b, f, fs):
    """Delay of b behind a in samples, from the phase of one sine."""
    n = np.arange(a.size)
    e = np.exp(-2j * np.pi * f / fs * n)
    return float(np.angle(np.sum(a * e) / np.sum(b * e)) / (2 * np.pi * f / fs))


@pytest.mark.parametrize("keep", [False, True])
def test_probe_csv_rows_line_up_with_the_audio(tmp_path, capsys, keep):
    """A divider read twice: the rendered audio and the probe of the same
    node.  At x4 oversampling the audio passes both resampling filters and
    the probe only the first (known delay: half the round trip, 28.5
    samples at 48 kHz, taken at the kernel sample that makes it 28); the
    CSV rows must line up with the audio, with or without --keep-latency."""
    net = tmp_path / "div.toml"
    net.write_text('[design]\nname = "divider"\nsource_impedance = 1\nload = "1G"\n'
                   '[[stage]]\nname = "d"\n'
                   '[[stage.part]]\nname = "R1"\ntype = "resistor"\nnodes = ["in", "out"]\n'
                   'value = 1000\n'
                   '[[stage.part]]\nname = "R2"\ntype = "resistor"\nnodes = ["out", "0"]\n'
                   'value = 1000\n')
    f = 375.0
    n = 128 * 60
    x = 0.4 * np.sin(2 * np.pi * f / FS * np.arange(n))
    wi, wo, csv = tmp_path / "in.wav", tmp_path / "out.wav", tmp_path / "p.csv"
    sf.write(wi, x.astype(np.float32), int(FS), subtype="FLOAT")
    args = ["render", str(net), str(wi), str(wo), "--oversample", "4", "--probe", "v(d.out)",
            "--probes-csv", str(csv), "--output-fs-volts", "1"]
    assert main(args + (["--keep-latency"] if keep else [])) == 0, capsys.readouterr().err
    y, _ = sf.read(wo)
    p = np.loadtxt(csv, delimiter=",", skiprows=1)[:, 1]
    seg = slice(128 * 10, 128 * 50)
    d = _delay(y[seg], p[seg], f, FS)
    print(f"keep={keep}: delay {d:+.4f} samples, "
          f"largest difference {np.max(np.abs(p[seg] - y[seg])):.2e} V")
    assert abs(d) <= 0.02, f"probe rows off the audio by {d:.2f} samples"
    # the round trip's passband ripple (+/-0.01 dB, solderless/engine/solver/oversample.py)
    # on the 0.2 V output: 2.3e-4 V
    assert np.max(np.abs(p[seg] - y[seg])) < 5e-4
