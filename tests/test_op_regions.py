"""Operating-point regions and rating warnings (issue 16): one classifier
(solderless/engine/analysis/regions.py) for op, the workbench and the demo; each device
kind by its own law; a warning for every rating exceeded and for a part
within 0.5 V of saturation or cut-off where it should amplify."""
import math

import pytest

from solderless.engine.analysis import regions as R
from solderless.engine.design import load_design
from solderless.engine.solver import Simulator
from solderless.engine.analysis import measure

FS = 48000.0
VT = 0.025852   # thermal voltage at 300 K, kT/q (CODATA constants)


def _op(d):
    return Simulator(d.flatten(), fs=FS).operating_point()


def test_bjt_law_thresholds():
    # common practice for small-signal BJTs: saturated under 0.3 V, cut off
    # under 1 uA; within 0.5 V above saturation is not 'active'
    assert R.bjt_region(1, 1e-3, 0.32) == "near saturation"
    assert R.bjt_region(1, 1e-3, 0.1) == "saturated"
    assert R.bjt_region(1, 1e-3, 4.0) == "active"
    assert R.bjt_region(-1, -5e-4, -4.0) == "active"        # PNP signs folded
    assert R.bjt_region(1, 3e-7, 4.8) == "cut-off"


def test_transistor_near_saturation_is_warned(tmp_path):
    # RC chosen so that Vce is well under 0.8 V: Ic ~ (1.62-0.65)/1k ~ 0.97 mA
    # would drop 8.7 V across 9k1; the transistor ends near or in saturation
    p = tmp_path / "sat.cir"
    p.write_text("near saturation\nVCC vcc 0 9\nVIN src 0 0\nCIN src b 1u\n"
                 "RB1 vcc b 100k\nRB2 b 0 22k\nRC vcc c 8.2k\nRE e 0 1k\nQ1 c b e QN\n"
                 "RL c out 100k\nRO out 0 100k\n.model QN NPN(IS=1e-14 BF=200)\n.end\n")
    op = _op(load_design(p))
    q = op.devices["Q1"]
    assert q["vce"] < R.VCE_SAT + R.MARGIN
    assert q["region"] in ("near saturation", "saturated")
    assert any(w.startswith("Q1:") and "saturat" in w for w in op.warnings)


def test_a_diode_at_22_uA_forward_is_forward(tmp_path):
    # a germanium-like junction (IS = 1 uA, N = 1.2, our values) biased from
    # 9 V through 390k: I ~ 8.8 V / 390k = 22.6 uA at Vd = N*VT*ln(1 + I/IS)
    # = 0.1 V (Shockley), far under the 0.3 V a voltage threshold asked for
    p = tmp_path / "ge.cir"
    p.write_text("ge diode\nVCC vcc 0 9\nVIN src 0 0\nR1 src out 10k\nR2 vcc a 390k\n"
                 "D1 a 0 DGE\n.model DGE D(IS=1u N=1.2)\n.end\n")
    op = _op(load_design(p))
    d1 = op.devices["D1"]
    vd = 1.2 * VT * math.log1p(d1["id"] / 1e-6)
    assert d1["id"] == pytest.approx((9 - vd) / 390e3, rel=1e-3)
    assert 20e-6 < d1["id"] < 25e-6 and d1["vd"] < 0.3
    assert d1["region"] == "forward"


def test_ota_control_current_over_its_rating_is_warned():
    # 9 V through RSET + RCTL = 200 ohm into the control pin: tens of mA,
    # over ten times the ota-bipolar part's IABC_MAX of 2 mA (solderless/presets/parts.toml)
    d = load_design("flagship")
    d.set_value("detector.RSET", 100.0)
    d.set_value("gain.RCTL", 100.0)
    op = _op(d)
    iabc = op.devices["gain.U1"]["iabc"]
    assert iabc > 10 * 2e-3
    w = [w for w in op.warnings if w.startswith("gain.U1:") and "control current" in w]
    assert w and "exceeds its rating" in w[0] and f"{iabc / 2e-3:.1f} times" in w[0]


def test_op_demo_and_workbench_share_one_bjt_classifier():
    d = load_design("flagship")
    op = _op(d)
    rows = measure.transistor_check(d, op)
    assert rows
    for r in (r for r in rows if r["type"] in ("npn", "pnp")):
        rep = op.devices[r["part"]]["region"].split(" (")[0]
        assert r["region"] == ("off" if rep == "cut-off" else rep)
    # parts a note calls off at rest are marked so, and not warned about
    off = [r["part"] for r in rows if r["intended"]]
    for p in off:
        assert op.devices[p]["region"].endswith("(by design)")
        assert not any(w.startswith(p + ":") for w in op.warnings)


def test_mosfet_reports_gm_and_a_drain_near_the_rail():
    # Shichman-Hodges level 1 (docs/references.md, field-effect
    # transistors): Id = KP/2*(W/L)*(Vgs - VTO)^2 = 50 uA at Vgs = 2 V, VTO =
    # 1 V, KP = 100 uA/V^2, W = L; gm = KP*(W/L)*(Vgs - VTO) = 100 uS. The
    # drain then sits 50 mV under the 9 V rail: the operating-point report
    # warns, as for a BJT's collector (the MOSFET once had no gm and no
    # rail check in the report)
    from solderless.engine.formats.spice import parse_netlist
    nl = parse_netlist("cs\nVCC vcc 0 9\nVG g 0 2\nRD vcc d 1k\nM1 d g 0 0 NM W=10u L=10u\n"
                       "RO d out 1meg\nRL out 0 1meg\n"
                       ".model NM NMOS(VTO=1 KP=1e-4)\n.end\n", file="cs.cir")
    op = Simulator(nl.circuit, fs=FS).operating_point()
    q = op.devices["M1"]
    assert q["id"] == pytest.approx(50e-6, rel=1e-3)
    assert q["gm"] == pytest.approx(100e-6, rel=1e-3)
    assert q["region"] == "saturated"
    assert any(w.startswith("M1: net 'd' sits at") and "supply rail 'vcc'" in w
               for w in op.warnings)
