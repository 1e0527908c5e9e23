"""Behavioural sources (B V=/I=, E/G VALUE= and TABLE) against ngspice.

References (docs/references.md, "Netlist syntax and behavioural sources"
and "Reference simulator"): ngspice-39 in batch mode, ``op``, ``dc`` and
``ac`` analyses (tests/spice_ref.py); the Jacobian against central finite
differences (common practice).  The op-amp macromodel of our own
(tests/netlists/opamp_behavioural.cir) is also run through the generic
operating-point, transient and export checks of every reference netlist.
"""
from __future__ import annotations

import math

import numpy as np
import pytest

import spice_ref as S
from solderless.engine.errors import DesignError
from solderless.engine.formats.spice import parse_netlist
from solderless.engine.solver.ac import ac_response
from solderless.engine.solver.dcop import operating_point

# every operator and function of the expression language once, at a point
# where each is away from its kinks (ngspice manual, B source chapter)
FUNCS = """behavioural functions
V1 1 0 0.3
V2 2 0 -0.7
R1 1 0 1k
.param k=3
B1 3 0 V = u(v(1)) + uramp(v(2)) + sgn(v(2)) + uramp(v(1))
B2 4 0 V = pwr(v(2), 2) + pow(2, v(1)) + min(v(1), v(2)) + max(v(1),v(2)) + (v(1) > 0.2 ? 1 : 0) + tanh(v(1)) + ln(2) + log(10)
B3 5 0 V = exp(v(1)) + sqrt(abs(v(2))) + log10(100) + sin(v(1)) + cos(v(2)) + atan(v(1)) + sinh(v(2)) + cosh(v(1))
E1 6 0 VALUE = {k*v(1,2) - v(2)/4}
E2 7 0 TABLE {v(1)} = (0,0) (0.2,1) (1,2)
G1 8 0 VALUE = {v(1)*1m}
R8 8 0 1k
B4 9 0 I = -v(1)*1m + 1m*(v(1) >= 0.25 && v(2) < 0) + 1m*(v(1) < 0 || v(2) < -0.5) + 1m*(v(1) == v(1))
R9 9 0 1k
B5 10 0 V = 2^0.5 + 2**2 + -v(2)^2 + (-2)^3 + v(1)*v(2)/(1 + v(1))
B6 11 0 V = atan(1) + v(1) != 0.3 + !(v(1)>1) + (v(1) <= 0.35) + (v(2) <= -1)
B7 12 0 V = pwl(-5*v(1), 0,0, 0.2,1, 1,2) + pwl(v(1), 0,0, 1,2)
B8 13 0 V = 1 ? 2 : 3 ? 4 : 5
G2 0 14 VALUE = {1m*tanh(v(14)/0.1) + 2m*v(1)}
R14 14 0 1k
B9 15 0 V = {tan(v(1))*v(3,1)}
B10 16 0 V = {k}*v(1) + {k*2}
"""


@pytest.fixture(scope="module")
def version():
    return S.require_ngspice()


def _op(text, out="3"):
    nl = parse_netlist(text, file="t.cir", out_node=out)
    return {k.lower(): v for k, v in operating_point(nl.circuit).nets.items()}


def test_every_function_matches_ngspice_op(version):
    ref = S.run_op(FUNCS)
    ours = _op(FUNCS)
    assert len(ref) > 14
    for node, v in ref.items():
        if node.startswith("i("):
            continue
        # ngspice-39 op, node by node: 1 uV (the values are exact arithmetic)
        assert ours[node] == pytest.approx(v, abs=1e-6), f"{node} [{version}]"


def test_limit_and_if_are_the_clamp_and_the_ternary():
    """ngspice-39 cannot be the reference here: its B source reads
    limit(3, -1, 1) as 4 and limit(3, 0, 2) as -1, and it has no if();
    they are checked against min/max and the ternary, which ngspice reads
    as the manual says (test_every_function_matches_ngspice_op)."""
    base = "t\nV1 1 0 {x}\nR1 1 0 1k\n"
    for x in (-3.0, -0.5, 0.2, 2.5):
        a = _op(base.replace("{x}", repr(x)) +
                "B1 3 0 V = limit(v(1)*2, -1, 1.5) + if(v(1) > 0.1, 7, -7)\n")
        b = _op(base.replace("{x}", repr(x)) +
                "B1 3 0 V = min(max(v(1)*2, -1), 1.5) + (v(1) > 0.1 ? 7 : -7)\n")
        want = min(max(2 * x, -1.0), 1.5) + (7.0 if x > 0.1 else -7.0)
        assert a["3"] == pytest.approx(want, abs=1e-9)
        assert b["3"] == pytest.approx(want, abs=1e-9)


def test_table_matches_ngspice_away_from_its_rounded_corners(version):
    """E TABLE: linear between points, held beyond the ends (ngspice manual).
    ngspice-39 rounds each corner (within 0.5 of it here, by its XSPICE
    translation; measured): compared at least 0.6 away from the corners."""
    cards = ("table\nV1 1 0 0\nR1 1 0 1k\n"
             "E2 2 0 TABLE {v(1)} = (-12, -10) (-6, -6) (6, 6) (12, 10)\nR2 2 0 1k\n")
    xs = [-20.0, -13.0, -11.0, -9.0, -5.0, 0.0, 2.5, 5.3, 6.7, 11.3, 12.6, 30.0]
    for x in xs:
        ref = S.run_op(cards.replace("V1 1 0 0", f"V1 1 0 {x}"))
        ours = _op(cards.replace("V1 1 0 0", f"V1 1 0 {x}"), out="2")
        assert ours["2"] == pytest.approx(ref["2"], abs=1e-6), f"x={x} [{version}]"


def test_opamp_macromodel_clipping_dc_matches_ngspice(version):
    """The macromodel biased into clipping (VIN at 0.9 V: the output wants
    9.9 V and sits at the rail less 1.2 V): every node within 1 mV."""
    cards = S.load_netlist("opamp_behavioural").replace(
        "VIN src 0 DC 0 SIN(0 1 500)", "VIN src 0 DC 0.9")
    ref = S.run_op(cards)
    nl = parse_netlist(cards, file="opamp_behavioural.cir")
    ours = {k.lower(): v for k, v in operating_point(nl.circuit).nets.items()}
    assert ref["out"] > 7.0  # clipping: the limit and the clamp are active
    bad = {n: (ours[n], v) for n, v in ref.items()
           if not n.startswith("i(") and abs(ours[n] - v) > 1e-3}
    assert not bad, f"nodes off by more than 1 mV vs {version}: {bad}"


def test_opamp_macromodel_ac_matches_ngspice(version):
    """AC from 20 Hz to 20 kHz at the operating point: 0.1 dB and 1 degree
    (issue 18's bound) against ngspice's ``ac``."""
    cards = S.load_netlist("opamp_behavioural").replace(
        "VIN src 0 DC 0 SIN(0 1 500)", "VIN src 0 DC 0 AC 1")
    f, ref = S.run_ac(cards, "out", 20.0, 20e3, 10)
    circ = S.engine_circuit("opamp_behavioural")
    _, H, _ = ac_response(circ, f)
    db = 20 * np.log10(np.abs(H)) - 20 * np.log10(np.abs(ref))
    ph = np.degrees(np.angle(H / ref))
    assert np.max(np.abs(db)) < 0.1, f"worst {np.max(np.abs(db)):.3f} dB [{version}]"
    assert np.max(np.abs(ph)) < 1.0, f"worst {np.max(np.abs(ph)):.3f} deg [{version}]"
    # the loop gain falls with frequency: the closed-loop gain of 11 (20.8 dB)
    # holds at 20 Hz and the phase lag grows towards 20 kHz
    assert 20 * math.log10(abs(ref[0])) == pytest.approx(20.83, abs=0.05)
    assert np.degrees(np.angle(ref[-1])) < -1.0


def test_jacobian_matches_finite_differences():
    """The kernel's derivatives (forward-mode) against central differences
    (common practice) for expressions through every kind of opcode."""
    from solderless.engine.circuit import Element
    from solderless.engine.devices import behav
    from solderless.engine.devices._common import DeviceLayout  # noqa: F401
    exprs = ["v(a)*v(b)/(1 + v(a)^2)", "tanh(v(a,b)/0.1)*exp(v(b))",
             "pwr(v(a), 1.5) + pow(v(b), 3) + sqrt(v(a)) + ln(v(b)) + log10(v(a))",
             "min(v(a), v(b)) + max(v(a)*2, v(b)) + abs(v(a)-v(b)) + uramp(v(a))",
             "limit(v(a)*3, -1, 2) + (v(a) > v(b) ? v(a)^2 : v(b)*3)",
             "table(v(a), 0, 0, 1, 2, 2, 2.5) + pwl(v(b), 0, 1, 1, 3)",
             "sin(v(a))*cos(v(b)) + atan(v(a)) + sinh(v(b)) + cosh(v(a)) + tan(v(b))",
             "-v(p) * 2 + v(b,a)"]
    rng = np.random.default_rng(7)
    for text in exprs:
        el = Element("B1", "BEHAV", ("p", "0"), 0.0, {"EXPR": text, "SIGN": 1.0})
        lay = behav.layout(el)
        m = len(lay.ports)
        for _ in range(6):
            v = np.concatenate([rng.uniform(0.3, 1.7, m), np.zeros(2)])
            par = lay.par.copy()
            i = np.zeros(m + 2)
            G = np.zeros((m + 2, m + 2))
            behav.evaluate(par, 0, v, 0, i, G)
            for k in range(m):
                h = 1e-6
                vp, vm = v.copy(), v.copy()
                vp[k] += h
                vm[k] -= h
                ip, im = np.zeros(m + 2), np.zeros(m + 2)
                behav.evaluate(par, 0, vp, 0, ip, np.zeros_like(G))
                behav.evaluate(par, 0, vm, 0, im, np.zeros_like(G))
                fd = (ip[0] - im[0]) / (2 * h)
                assert G[0, k] == pytest.approx(fd, rel=1e-5, abs=1e-6), (text, k)
            assert np.all(i[1:m] == 0.0) and np.all(G[1:m] == 0.0)


def test_expression_errors_name_the_line():
    for card, what in [("B1 a 0 V = v(b) +", "unexpected"),
                       ("B1 a 0 V = foo(v(b))", "unknown function 'foo'"),
                       ("B1 a 0 V = v(b)*time", "'time'"),
                       ("B1 a 0 V = min(v(b))", "takes 2 argument"),
                       ("B1 a 0 X = v(b)", "needs V= or I="),
                       ("E1 a 0 TABLE {v(b)} = (0, 1) (1)", "TABLE needs (x, y) pairs"),
                       ("B1 a 0 V = table(v(b), 1, 0, 0, 1)", "must not decrease"),
                       ("B1 a 0 V = nope*v(b)", "unknown name 'nope'")]:
        with pytest.raises(DesignError) as ei:
            parse_netlist(f"t\nR1 b 0 1k\n{card}\nR2 a 0 1k\n", file="amp.cir")
        msg = str(ei.value)
        assert "amp.cir:3" in msg and what in msg, msg


def test_written_netlist_keeps_the_expressions(version):
    """circuit_to_netlist writes B, E TABLE and G VALUE back so that ngspice
    runs the same circuit (operating point within 1 uV)."""
    from solderless.engine.formats.spice import circuit_to_netlist
    cards = S.load_netlist("opamp_behavioural").replace(
        "VIN src 0 DC 0 SIN(0 1 500)", "VIN src 0 DC 0.3")
    nl = parse_netlist(cards, file="opamp_behavioural.cir")
    text = circuit_to_netlist(nl.circuit)
    assert "TABLE" in text and " V = " in text and " I = " in text
    a, b = S.run_op(cards), S.run_op(text)
    for node in ("out", "fb", "in"):
        assert b[node] == pytest.approx(a[node], abs=1e-6)
