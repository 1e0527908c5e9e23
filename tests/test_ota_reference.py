"""The bipolar OTA model (element kind OTA) against its published law and
against a discrete BJT differential pair simulated in ngspice.

Sources:
- Iout = Iabc*tanh(Vd/(2*VT)), gm = Iabc/(2*VT): emitter-coupled pair, Gray,
  Hurst, Lewis & Meyer, Analysis and Design of Analog Integrated Circuits,
  5th ed. (from memory).
- VT = k*T/q at 300.15 K (scipy.constants; SPICE's nominal 27 degC).
- ngspice (version printed with ``-s``): tests/netlists/bjt_diffpair.cir, an
  NPN pair with an ideal tail current source = Iabc, DC sweep of the
  differential input; Iout = Ic(Q1) - Ic(Q2).
- Shockley junction law for the bias pin: V = N*VT*ln(I/IS + 1), i.e. about
  59.5 mV per decade of Iabc at 300.15 K (VT*ln 10).
"""
from __future__ import annotations

import numpy as np
import pytest
from scipy.constants import e as Q_E, k as K_B

import spice_ref as S

VT = K_B * 300.15 / Q_E
IABCS = (10e-6, 100e-6, 500e-6)
RL = 1e3                         # load of the OTA output, ohm
VEE = -5.0
SWEEP = np.round(np.arange(-0.1, 0.1 + 1e-12, 0.001), 6)   # V, differential input
IS_PAIR = 1e-15                  # the pair's and the OTA bias junction's IS


@pytest.fixture(scope="module")
def version():
    v = S.require_ngspice()
    print(f"reference simulator: {v}")
    return v


def _pair_cards(iabc: float) -> str:
    cards = S.load_netlist("bjt_diffpair")
    assert "ITAIL tail vee DC 100u" in cards
    return cards.replace("ITAIL tail vee DC 100u", f"ITAIL tail vee DC {iabc:.9g}")


def _ngspice_pair(iabc: float) -> tuple[np.ndarray, np.ndarray]:
    """(vd, Iout) of the discrete pair in ngspice; Iout = Ic1 - Ic2 with
    ngspice's source-current sign (current into the + terminal) undone."""
    r = S.run_dc_sweep(_pair_cards(iabc), "VP", SWEEP[0], SWEEP[-1], 0.001)
    vd = r["inp"] - r["inn"]
    iout = r["i(vc2)"] - r["i(vc1)"]
    return vd, iout


def _gm(vd: np.ndarray, i: np.ndarray, span: float = 0.002) -> float:
    """Slope of a straight-line fit over |vd| <= span (small-signal gm)."""
    m = np.abs(vd) <= span + 1e-9
    return float(np.polyfit(vd[m], i[m], 1)[0])


@pytest.mark.parametrize("iabc", IABCS)
def test_ngspice_pair_follows_tanh_law(iabc, version):
    # Gray et al. (from memory): Ic1 - Ic2 = alpha*Iee*tanh(Vd/2VT); BF=1e6 so
    # alpha = BF/(BF+1) is 1 to 1e-6. Checks the reference before using it.
    vd, iout = _ngspice_pair(iabc)
    law = iabc * np.tanh(vd / (2 * VT))
    assert np.max(np.abs(iout - law)) < 0.005 * iabc
    assert _gm(vd, iout) == pytest.approx(iabc / (2 * VT), rel=0.01)


# --------------------------------------------------------------------------
# Solderless' OTA element

def _ota_circuit(iabc: float, **params):
    from solderless.engine.circuit import Circuit, Element
    els = [
        Element("VP", "V", ("inp", "0"), 0.0),
        Element("VEE", "V", ("vee", "0"), VEE),
        Element("IABC", "I", ("0", "abc"), iabc),      # pushes iabc into the pin
        Element("U1", "OTA", ("inp", "0", "out", "abc", "vee"),
                params={"IS": IS_PAIR, **params}),
        Element("RL", "R", ("out", "0"), RL),
        # 1 Tohm across the bias junction: ngspice's GMIN (1e-12 S). Without
        # it the pin is joined only by a current source and a junction and the
        # solver's linear network is singular (reported to the solver owner;
        # tests/test_ngspice_dc.py::bjt_diffpair covers that case).
        Element("RGMIN", "R", ("abc", "vee"), 1e12),
    ]
    return Circuit(els, input_source="VP", output=("out", "0"), title="OTA sweep")


def _ours(iabc: float, **params) -> np.ndarray:
    """Iout of our OTA over SWEEP: the static sweep is fed as input samples
    (the circuit has no reactive parts, so each sample is a DC point)."""
    Simulator = S.engine_simulator()
    sim = Simulator(_ota_circuit(iabc, **params), 48000.0)
    v = np.asarray(sim.process(SWEEP.astype(float)), float)
    return v / RL


@pytest.mark.parametrize("iabc", IABCS)
def test_ota_model_follows_tanh_law(iabc):
    iout = _ours(iabc)
    law = iabc * np.tanh(SWEEP / (2 * VT))              # Gray et al. (from memory)
    # loading: v(out) = Iout*RL is at most 0.5 V, far inside the compliance
    assert np.max(np.abs(iout - law)) < 0.01 * iabc
    assert _gm(SWEEP, iout) == pytest.approx(iabc / (2 * VT), rel=0.02)


@pytest.mark.parametrize("iabc", IABCS)
def test_ota_model_matches_discrete_pair_in_ngspice(iabc, version):
    vd, ref = _ngspice_pair(iabc)
    assert np.allclose(vd, SWEEP, atol=1e-9)
    ours = _ours(iabc)
    # small-signal range |vd| <= 10 mV: transconductance within 3 % (ngspice)
    g_ref, g_ours = _gm(vd, ref), _gm(vd, ours)
    print(f"Iabc {iabc*1e6:g} uA: gm ngspice {g_ref*1e3:.4f} mS, "
          f"ours {g_ours*1e3:.4f} mS, Iabc/2VT {iabc/(2*VT)*1e3:.4f} mS [{version}]")
    assert g_ours == pytest.approx(g_ref, rel=0.03)
    small = np.abs(vd) <= 0.010 + 1e-9
    assert np.max(np.abs(ours[small] - ref[small])) < 0.02 * iabc
    # whole +-100 mV sweep (large-signal tanh): within 2 % of Iabc (ngspice)
    assert np.max(np.abs(ours - ref)) < 0.02 * iabc


def test_ota_bias_pin_sits_one_junction_above_vee(version):
    # Shockley law: one junction, 59.5 mV per decade at 300.15 K; ngspice: a
    # diode-connected NPN with the same IS fed with Iabc (within 1 mV).
    Simulator = S.engine_simulator()
    pins = []
    for iabc in (1e-6, 10e-6, 100e-6):
        sim = Simulator(_ota_circuit(iabc), 48000.0)
        nets = sim.operating_point().nets
        v_pin = nets["abc"] - nets["vee"]
        ref = S.run_op(f"* diode-connected NPN\nI1 0 abc DC {iabc:.9g}\n"
                       f"Q1 abc abc vee QD\nVEE vee 0 DC {VEE}\n"
                       f".model QD NPN(IS={IS_PAIR:g} BF=1e6)\n")
        assert v_pin == pytest.approx(ref["abc"] - ref["vee"], abs=1e-3)
        assert v_pin == pytest.approx(VT * np.log(iabc / IS_PAIR + 1), abs=1e-3)
        pins.append(v_pin)
    assert np.diff(pins) == pytest.approx([VT * np.log(10)] * 2, abs=1e-3)


def test_ota_two_junction_bias_pin(version):
    # a two-junction mirror sits two drops above vee (Shockley law per junction)
    Simulator = S.engine_simulator()
    sim = Simulator(_ota_circuit(100e-6, JUNCTIONS=2), 48000.0)
    nets = sim.operating_point().nets
    assert nets["abc"] - nets["vee"] == pytest.approx(
        2 * VT * np.log(100e-6 / IS_PAIR + 1), abs=2e-3)
