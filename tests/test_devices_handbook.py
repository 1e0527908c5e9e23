"""Device models against handbook formulas and the published model equations.

Sources: Shockley diode and Ebers-Moll/Gummel-Poon equations as documented for
SPICE (see docs/references.md); Gray, Hurst, Lewis & Meyer, Analysis and Design of
Analog Integrated Circuits, 5th ed. (OTA tanh law, from memory); Shichman &
Hodges, IEEE JSSC 1968 (JFET and MOSFET square law); small-signal amplifier formulas are
common practice (any electronics handbook).
"""
import math

import numpy as np
import pytest
from scipy import constants

from solderless.engine.circuit import Circuit, Element as E
from solderless.engine.solver import Simulator, ac_response

VT = constants.k * 300.15 / constants.e  # scipy.constants
SMALL_NPN = {"TYPE": "NPN", "IS": 1e-14, "BF": 200.0}  # a typical small-signal NPN (from memory)


def test_diode_shockley_law():
    # I = IS*(exp(V/(N*VT)) - 1) + GMIN*V (Shockley; GMIN as SPICE)
    for vd in (0.3, 0.55, 0.65):
        c = Circuit([E("V1", "V", ("a", "0"), vd), E("D1", "D", ("a", "0"), 0.0,
                                                     {"IS": 1e-14, "N": 1.5})],
                    output=("a", "0"))
        op = Simulator(c).operating_point()
        expect = 1e-14 * (math.exp(vd / (1.5 * VT)) - 1) + 1e-12 * vd
        assert op.devices["D1"]["id"] == pytest.approx(expect, rel=1e-9)
        assert -op.currents["V1"] == pytest.approx(expect, rel=1e-9)


def test_diode_series_resistance():
    # with RS the junction sees V - I*RS: solve the same equation with scipy
    from scipy.optimize import brentq
    IS, RS, V = 1e-14, 10.0, 0.9
    c = Circuit([E("V1", "V", ("a", "0"), V), E("D1", "D", ("a", "0"), 0.0, {"IS": IS, "RS": RS})],
                output=("a", "0"))
    op = Simulator(c).operating_point()
    i = brentq(lambda i: IS * (math.exp((V - i * RS) / VT) - 1) + 1e-12 * (V - i * RS) - i, 0, V / RS)
    assert op.devices["D1"]["id"] == pytest.approx(i, rel=1e-7)


def _ce(re_bypass=False, rl=1e9):
    els = [E("Vcc", "V", ("vcc", "0"), 9.0), E("Vin", "V", ("in", "0"), 0.0),
           E("C1", "C", ("in", "b"), 10e-6), E("R1", "R", ("vcc", "b"), 100e3),
           E("R2", "R", ("b", "0"), 22e3), E("RC", "R", ("vcc", "c"), 4.7e3),
           E("RE", "R", ("e", "0"), 1e3), E("Q1", "Q", ("c", "b", "e"), 0.0, SMALL_NPN),
           E("C2", "C", ("c", "out"), 10e-6), E("RL", "R", ("out", "0"), rl)]
    return Circuit(els, input_source="Vin")


def test_vbe_at_milliamp_bias():
    # Vbe is 0.6-0.7 V at mA collector current (common practice)
    op = Simulator(_ce()).operating_point()
    q = op.devices["Q1"]
    assert 0.5e-3 < q["ic"] < 2e-3
    assert 0.6 < q["vbe"] < 0.7
    assert q["region"] == "active"
    # Ebers-Moll transport: Ic = IS*exp(Vbe/VT) in forward active (VAF = inf)
    assert q["ic"] == pytest.approx(1e-14 * math.exp(q["vbe"] / VT), rel=1e-3)
    assert q["ic"] / q["ib"] == pytest.approx(200.0, rel=1e-3)


def test_common_emitter_gain_unbypassed():
    # Av = -RC/(RE + re), re = VT/Ic (common practice; -RC/RE for re << RE)
    sim = Simulator(_ce())
    ic = sim.operating_point().devices["Q1"]["ic"]
    re = VT / ic
    f, H, _ = ac_response(_ce(), [1000.0])
    expect = 4.7e3 / (1e3 + re)
    # finite beta: alpha = BF/(BF+1) scales the gain (common practice)
    expect *= 200 / 201
    assert abs(H[0]) == pytest.approx(expect, rel=0.01)
    assert abs(np.angle(H[0])) > 3.0  # inverting
    # transient small signal agrees with the AC result
    t = np.arange(9600) / 48000.0
    x = 1e-3 * np.sin(2 * np.pi * 1000 * t)
    y = sim.process(x)
    amp = 0.5 * (y[-960:].max() - y[-960:].min())
    assert amp == pytest.approx(1e-3 * abs(H[0]), rel=0.01)


def _follower():
    els = [E("Vcc", "V", ("vcc", "0"), 9.0), E("Vin", "V", ("src", "0"), 0.0),
           E("Vin.rs", "R", ("src", "in"), 1e3),
           E("C1", "C", ("in", "b"), 100e-6), E("R1", "R", ("vcc", "b"), 1e6),
           E("R2", "R", ("b", "0"), 1e6), E("RE", "R", ("out", "0"), 4.7e3),
           E("Q1", "Q", ("vcc", "b", "out"), 0.0, SMALL_NPN)]
    return Circuit(els, input_source="Vin")


def test_emitter_follower_gain_and_input_resistance():
    op = Simulator(_follower()).operating_point()
    q = op.devices["Q1"]
    gm = q["ic"] / VT
    rpi = 200.0 / gm
    f, H, Z = ac_response(_follower(), [1000.0])
    # input resistance rpi + (beta+1) RE in parallel with the bias divider (common practice)
    rin_t = rpi + 201 * 4.7e3
    rin = 1 / (1 / rin_t + 1 / 1e6 + 1 / 1e6)
    assert abs(Z[0]) == pytest.approx(rin, rel=0.01)
    # gain near 1: (beta+1)RE / (rpi + (beta+1)RE), times the source divider
    gain = 201 * 4.7e3 / rin_t * rin / (rin + 1e3)
    assert abs(H[0]) == pytest.approx(gain, rel=0.01)
    assert 0.95 < abs(H[0]) < 1.0


def _ota(vd, iabc=100e-6, junctions=1, rl=1e3):
    els = [E("Vee", "V", ("vee", "0"), -9.0), E("Vd", "V", ("inp", "0"), vd),
           E("Iabc", "I", ("0", "abc"), iabc),
           E("U1", "OTA", ("inp", "0", "out", "abc", "vee"), 0.0, {"JUNCTIONS": junctions}),
           E("RL", "R", ("out", "0"), rl)]
    return Circuit(els, input_source="Vd")


@pytest.mark.parametrize("vd", [-0.05, -0.01, 0.0, 0.002, 0.025, 0.05, 0.2])
def test_ota_tanh_law(vd):
    # Iout = Iabc * tanh(Vd / (2 VT)) (Gray, Hurst, Lewis & Meyer; from memory)
    op = Simulator(_ota(vd)).operating_point()
    u = op.devices["U1"]
    assert u["iabc"] == pytest.approx(100e-6, rel=1e-6)
    # ROUT (1e8 to vee) carries a little of it: account with the node voltage
    vout = op.nets["out"]
    iout = vout / 1e3 + (vout + 9.0) / 1e8
    assert iout == pytest.approx(100e-6 * math.tanh(vd / (2 * VT)), abs=1e-12, rel=1e-6)


def test_ota_small_signal_gm():
    # gm = Iabc / (2 VT) ~ 19.3 * Iabc per volt (docs/references.md; from memory)
    for iabc in (1e-6, 10e-6, 100e-6):
        f, H, _ = ac_response(_ota(0.0, iabc, rl=100.0), [1000.0])
        rpar = 1 / (1 / 100.0 + 1 / 1e8)
        assert abs(H[0]) / rpar == pytest.approx(iabc / (2 * VT), rel=1e-6)
        assert iabc / (2 * VT) / iabc == pytest.approx(19.3, rel=0.01)


@pytest.mark.parametrize("junctions", [1, 2])
def test_ota_control_pin_junction_drops(junctions):
    # control pin ~one junction drop above vee, 0.54-0.66 V over 1-100 uA,
    # about 60 mV per decade; two drops for a two-junction mirror (docs/references.md)
    vs = []
    for iabc in (1e-6, 10e-6, 100e-6):
        op = Simulator(_ota(0.0, iabc, junctions)).operating_point()
        vs.append(op.nets["abc"] - (-9.0))
    vs = np.array(vs) / junctions
    assert np.all((vs > 0.52) & (vs < 0.68))
    assert np.diff(vs) == pytest.approx([VT * math.log(10)] * 2, rel=1e-3)


def test_jfet_square_law_saturation_and_linear():
    # Shichman-Hodges: Id = BETA*(Vgs-VTO)^2*(1+LAMBDA*Vds) in saturation,
    # BETA*Vds*(2(Vgs-VTO)-Vds)*(1+LAMBDA*Vds) in the linear region
    par = {"TYPE": "NJF", "VTO": -2.0, "BETA": 1e-3, "LAMBDA": 0.01}
    for vgs, vds in ((-1.0, 5.0), (-0.5, 0.4), (0.0, 3.0)):
        c = Circuit([E("Vg", "V", ("g", "0"), vgs), E("Vd", "V", ("d", "0"), vds),
                     E("J1", "J", ("d", "g", "0"), 0.0, par)], output=("d", "0"))
        d = Simulator(c).operating_point().devices["J1"]
        vgst = vgs + 2.0
        if vgst <= vds:
            expect = 1e-3 * vgst ** 2 * (1 + 0.01 * vds)
            assert d["region"] == "saturated"
        else:
            expect = 1e-3 * vds * (2 * vgst - vds) * (1 + 0.01 * vds)
            assert d["region"] == "linear"
        # gate-drain junction leakage (IS*(exp(Vgd/VT)-1) + GMIN*Vgd) is in Id too
        vgd = vgs - vds
        leak = 1e-14 * (math.exp(vgd / VT) - 1) if vgd > -3 * VT else -1e-14
        assert d["id"] == pytest.approx(expect - leak - 1e-12 * vgd, rel=1e-6)


def test_mosfet_square_law_saturation_and_linear():
    # Shichman-Hodges (level 1): beta = KP*W/L; Id = beta/2*(Vgs-VTO)^2*
    # (1+LAMBDA*Vds) in saturation, beta*Vds*(Vgs-VTO-Vds/2)*(1+LAMBDA*Vds) in
    # the linear region; the body diode (bulk = source, so Vbd = -Vds) takes
    # IS*(exp(Vbd/VT)-1) + GMIN*Vbd out of the drain current
    par = {"TYPE": "NMOS", "VTO": 1.5, "KP": 50e-6, "LAMBDA": 0.02, "W": 100e-6,
           "L": 2e-6}
    beta = 50e-6 * 100e-6 / 2e-6
    for vgs, vds in ((2.5, 5.0), (4.0, 0.5), (1.0, 3.0)):
        c = Circuit([E("Vg", "V", ("g", "0"), vgs), E("Vd", "V", ("d", "0"), vds),
                     E("M1", "M", ("d", "g", "0", "0"), 0.0, par)], output=("d", "0"))
        d = Simulator(c).operating_point().devices["M1"]
        vgst = vgs - 1.5
        if vgst <= 0:
            expect, region = 0.0, "cut-off"
        elif vgst <= vds:
            expect, region = beta / 2 * vgst ** 2 * (1 + 0.02 * vds), "saturated"
        else:
            expect, region = beta * vds * (vgst - vds / 2) * (1 + 0.02 * vds), "linear"
        diode = 1e-14 + 1e-12 * vds      # minus a reverse-biased body diode's current
        assert d["region"] == region
        assert d["id"] == pytest.approx(expect + diode, rel=1e-6, abs=1e-15)


def test_pnp_mirrors_npn():
    # PNP: all signs flipped (SPICE convention)
    def amp(t, vcc):
        return Circuit([E("Vcc", "V", ("vcc", "0"), vcc), E("RB", "R", ("vcc", "b"), 470e3),
                        E("RC", "R", ("c", "0"), 2.2e3),
                        E("Q1", "Q", ("c", "b", "0"), 0.0, {"TYPE": t, "IS": 1e-14})],
                       output=("c", "0"))
    n = Simulator(amp("NPN", 9.0)).operating_point()
    p = Simulator(amp("PNP", -9.0)).operating_point()
    assert p.nets["c"] == pytest.approx(-n.nets["c"], rel=1e-9)
    assert p.devices["Q1"]["ic"] == pytest.approx(-n.devices["Q1"]["ic"], rel=1e-9)


def test_opamp_noninverting_gain_and_swing():
    # non-inverting amplifier: 1 + Rf/Rg (common practice), output swing
    # limited near the rails
    els = [E("Vcc", "V", ("vcc", "0"), 9.0), E("Vee", "V", ("vee", "0"), -9.0),
           E("Vin", "V", ("in", "0"), 0.0), E("Rf", "R", ("out", "n"), 99e3),
           E("Rg", "R", ("n", "0"), 1e3),
           E("U1", "OPAMP", ("in", "n", "out", "vcc", "vee"), 0.0, {})]
    c = Circuit(els, input_source="Vin")
    f, H, _ = ac_response(c, [100.0])
    assert abs(H[0]) == pytest.approx(100.0, rel=2e-3)
    sim = Simulator(c)
    t = np.arange(4800) / 48000.0
    y = sim.process(1.0 * np.sin(2 * np.pi * 200 * t))  # 100 V wanted: clips
    assert np.all(np.isfinite(y))
    assert 6.5 < y.max() < 9.0 and -9.0 < y.min() < -6.5


def test_operating_point_warnings():
    # base tied hard to the rail through a small resistor: saturated (common practice)
    sat = Circuit([E("Vcc", "V", ("vcc", "0"), 9.0), E("RB", "R", ("vcc", "b"), 10e3),
                   E("RC", "R", ("vcc", "c"), 10e3), E("Q1", "Q", ("c", "b", "0"), 0.0, SMALL_NPN)],
                  output=("c", "0"))
    op = Simulator(sat).operating_point()
    assert op.devices["Q1"]["region"] == "saturated"
    assert any("Q1" in w and "saturated" in w for w in op.warnings)
    # no base drive: cut off, collector sits at the rail
    off = Circuit([E("Vcc", "V", ("vcc", "0"), 9.0), E("RB", "R", ("b", "0"), 10e3),
                   E("RC", "R", ("vcc", "c"), 10e3), E("Q1", "Q", ("c", "b", "0"), 0.0, SMALL_NPN)],
                  output=("c", "0"))
    op = Simulator(off).operating_point()
    assert op.devices["Q1"]["region"] == "cut-off"
    assert any("cut-off" in w for w in op.warnings)
    assert any("within 0.3 V of supply rail 'vcc'" in w for w in op.warnings)
    assert op.to_dict()["devices"]["Q1"]["region"] == "cut-off"


def test_junction_limiting_follows_spice():
    # pnjlim as in ngspice (src/spicelib/devices/devsup.c, DEVpnjlim):
    # forward steps above vcrit are compressed to vold + vt*ln(1 + dv/vt);
    # reverse steps stop at -(vold + 1) from forward bias and at 2*vold - 1
    # from reverse bias; anything else passes unchanged
    from solderless.engine.devices._common import pnjlim, vcrit
    vt = VT
    vc = vcrit(vt, 1e-14)
    assert pnjlim(2.0, 0.6, vt, vc) == pytest.approx(0.6 + vt * math.log(1 + 1.4 / vt), rel=1e-12)
    assert pnjlim(-5.0, 0.6, vt, vc) == pytest.approx(-1.6, rel=1e-12)
    assert pnjlim(-5.0, -1.0, vt, vc) == pytest.approx(-3.0, rel=1e-12)
    assert pnjlim(-2.5, -1.0, vt, vc) == -2.5
    assert pnjlim(0.3, 0.6, vt, vc) == 0.3
