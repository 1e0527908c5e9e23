"""Linear networks through the engine against SciPy (independent reference).

The trapezoidal rule is the bilinear transform, so a linear circuit run by the
Simulator must equal scipy.signal.bilinear of its analog transfer function
applied with scipy.signal.lfilter; ac_response must equal scipy.signal.freqs.
"""
import numpy as np
import pytest
from scipy import constants, signal

from solderless.engine.circuit import Circuit, Element as E
from solderless.engine.devices import VT
from solderless.engine.solver import Simulator, ac_response

FS = 48000.0


def rc_lowpass(R=10e3, C=10e-9):
    return Circuit([E("Vin", "V", ("in", "0"), 0.0), E("R1", "R", ("in", "out"), R),
                    E("C1", "C", ("out", "0"), C)], input_source="Vin")


def rlc(R=220.0, L=0.1, C=1e-6):
    return Circuit([E("Vin", "V", ("in", "0"), 0.0), E("R1", "R", ("in", "a"), R),
                    E("L1", "L", ("a", "out"), L), E("C1", "C", ("out", "0"), C)],
                   input_source="Vin")


def _signal(n=4000, seed=1):
    rng = np.random.default_rng(seed)
    return rng.standard_normal(n) * 0.5


@pytest.mark.parametrize("fs_os", [(FS, 1)])
def test_rc_equals_bilinear_lfilter(fs_os):
    fs, _ = fs_os
    R, C = 10e3, 10e-9
    x = _signal()
    y = Simulator(rc_lowpass(R, C), fs=fs).process(x)
    # scipy.signal.bilinear of H(s) = 1 / (1 + sRC)
    b, a = signal.bilinear([1.0], [R * C, 1.0], fs)
    ref = signal.lfilter(b, a, x)
    assert np.max(np.abs(y - ref)) <= 1e-9 * np.max(np.abs(ref))


def test_rlc_equals_bilinear_lfilter():
    R, L, C = 220.0, 0.1, 1e-6
    x = _signal(seed=2)
    y = Simulator(rlc(R, L, C)).process(x)
    # series R-L-C, output across C: H(s) = 1 / (LC s^2 + RC s + 1)
    b, a = signal.bilinear([1.0], [L * C, R * C, 1.0], FS)
    ref = signal.lfilter(b, a, x)
    assert np.max(np.abs(y - ref)) <= 1e-9 * np.max(np.abs(ref))


def test_current_probe_of_capacitor_matches_bilinear():
    R, C = 10e3, 10e-9
    x = _signal(seed=3)
    sim = Simulator(rc_lowpass(R, C), probes=("i(C1)", "i(R1)", "v(in,out)"))
    y, pr = sim.run(x)
    # i(C) = C dv/dt: H(s) = sC / (1 + sRC) (scipy.signal.bilinear)
    b, a = signal.bilinear([C, 0.0], [R * C, 1.0], FS)
    ref = signal.lfilter(b, a, x)
    assert np.max(np.abs(pr[0] - ref)) <= 1e-9 * np.max(np.abs(ref))
    # KCL: the resistor current equals the capacitor current; v(in,out) = R i
    assert np.max(np.abs(pr[1] - pr[0])) <= 1e-9 * np.max(np.abs(ref))
    assert np.max(np.abs(pr[2] - R * pr[1])) <= 1e-9 * np.max(np.abs(pr[2]))


def test_ac_response_equals_freqs():
    R, L, C = 220.0, 0.1, 1e-6
    f = np.geomspace(10, 20000, 60)
    _, H, _ = ac_response(rlc(R, L, C), f)
    _, ref = signal.freqs([1.0], [L * C, R * C, 1.0], worN=2 * np.pi * f)
    assert np.max(np.abs(H - ref) / np.abs(ref)) < 1e-9


def test_input_impedance_excludes_source_resistor():
    # flattened input: V + "<input>.rs"; jack at "in"; circuit is R1 + C1 to ground
    R, C, Rs = 10e3, 10e-9, 600.0
    c = Circuit([E("Vin", "V", ("src", "0"), 0.0), E("Vin.rs", "R", ("src", "in"), Rs),
                 E("R1", "R", ("in", "out"), R), E("C1", "C", ("out", "0"), C)],
                input_source="Vin")
    f = np.array([100.0, 1000.0, 10000.0])
    _, H, Z = ac_response(c, f)
    s = 2j * np.pi * f
    # series R-C: Z = R + 1/(sC) (circuit theory); H = Zc / (Rs + R + Zc)
    assert np.allclose(Z, R + 1 / (s * C), rtol=1e-10)
    assert np.allclose(H, (1 / (s * C)) / (Rs + R + 1 / (s * C)), rtol=1e-10)


def test_thermal_voltage_from_scipy_constants():
    # VT = k T / q at 300.15 K (scipy.constants, CODATA 2018) ~ 25.86 mV
    assert VT == pytest.approx(constants.k * 300.15 / constants.e, rel=1e-15)
    assert VT == pytest.approx(0.025864, abs=2e-6)


def test_waveform_source_sin_matches_formula():
    # SPICE SIN(VO VA FREQ): a source through a resistor divider (linear)
    c = Circuit([E("V1", "V", ("a", "0"), 0.0, {"wave": ("SIN", [0.5, 1.0, 1000.0])}),
                 E("R1", "R", ("a", "out"), 1e3), E("R2", "R", ("out", "0"), 1e3)])
    y = Simulator(c).process(np.zeros(480))
    t = np.arange(480) / FS
    assert np.allclose(y, 0.5 * (0.5 + np.sin(2 * np.pi * 1000 * t)), atol=1e-12)


def test_divider_bias_common_practice():
    # handbook divider: V*R2/(R1+R2) (common practice)
    c = Circuit([E("V1", "V", ("vcc", "0"), 9.0), E("R1", "R", ("vcc", "out"), 100e3),
                 E("R2", "R", ("out", "0"), 22e3)])
    op = Simulator(c).operating_point()
    assert op.nets["out"] == pytest.approx(9.0 * 22e3 / 122e3, rel=1e-12)
    assert op.currents["R1"] == pytest.approx(9.0 / 122e3, rel=1e-12)
