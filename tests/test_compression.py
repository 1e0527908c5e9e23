"""Checks of solderless.engine.analysis.compression against independent expectations."""
import math

import numpy as np
import pytest
from scipy import signal

from solderless.engine.analysis import compression as cp

FS = 48000.0


def test_time_constant_fraction_is_one_minus_one_over_e():
    # Giannoulis et al., JAES 2012: time constant = 63 % (1 - 1/e) of the step.
    assert cp.TIME_CONSTANT_FRACTION == pytest.approx(0.63212, abs=1e-5)


@pytest.mark.parametrize("tau", [0.05, 0.2, 0.7])
def test_release_time_of_a_first_order_recovery_is_its_time_constant(tau):
    # First-order step response y = 1 - exp(-t/tau) reaches 1 - 1/e at t = tau
    # (definition of the time constant; IEC 60050-351-45-36 "step response
    # time" as the general term). The recovery here is produced by a one-pole
    # filter from scipy.signal.lfilter, not by the formula itself.
    a = math.exp(-1.0 / (tau * FS))
    n = int(6 * tau * FS)
    step = np.ones(n)
    y = signal.lfilter([1 - a], [1, -a], step)
    gr = -10.0 * (1.0 - y)           # -10 dB recovering to 0 dB
    gr = np.concatenate([np.full(1000, -10.0), gr])
    t = cp.release_time(gr, FS, start=1000 / FS, final=0.0)
    assert t == pytest.approx(tau, rel=2e-3)
    # without the final value it is estimated from the trace's end (6 tau
    # long: within 1 % of the true time constant)
    assert cp.release_time(gr, FS, start=1000 / FS) == pytest.approx(tau, rel=1e-2)


def test_attack_ten_to_ninety_percent_is_about_2_2_time_constants():
    # 10-90 % rise of a first-order step = tau * ln 9 = 2.197 tau
    # (docs/references.md, compressors; ln 9 from the exponential law).
    tau = 0.01
    a = math.exp(-1.0 / (tau * FS))
    y = signal.lfilter([1 - a], [1, -a], np.ones(int(0.2 * FS)))
    gr = -20.0 * y
    t10 = cp.attack_time(gr, FS, 0.0, fraction=0.1)
    t90 = cp.attack_time(gr, FS, 0.0, fraction=0.9)
    assert (t90 - t10) / tau == pytest.approx(math.log(9.0), rel=5e-3)


def test_release_time_is_nan_without_a_step():
    assert math.isnan(cp.release_time(np.zeros(1000), FS, 0.0))


def test_gain_reduction_from_control_follows_the_ota_law():
    # OTA gain is proportional to gm = Iabc / 2VT (docs/references.md, bipolar OTA;
    # Gray et al., from memory): half the control current is -6.02 dB.
    gr = cp.gain_reduction_from_control(np.array([100e-6, 50e-6, 10e-6]), 100e-6)
    assert gr == pytest.approx([0.0, -6.0206, -20.0], abs=1e-3)
    gl = cp.gain_reduction_from_control(np.array([1.0, 0.5]), 1.0, law="log", db_per_unit=-20)
    assert gl == pytest.approx([0.0, 10.0])
    with pytest.raises(ValueError):
        cp.gain_reduction_from_control(np.ones(3), 0.0)


def test_rms_of_a_sine_is_peak_over_root_two():
    # Handbook: the RMS of a sine of peak A is A / sqrt(2).
    t = np.arange(48000) / FS
    assert cp.rms(0.5 * np.sin(2 * np.pi * 100 * t)) == pytest.approx(0.5 / math.sqrt(2), rel=1e-6)


def test_stepped_tone_levels_are_rms_dbv():
    x = cp.stepped_tone(np.array([-20.0, 0.0]), FS, 500.0, hold=0.2)
    n = int(0.2 * FS)
    assert cp.db(cp.rms(x[:n])) == pytest.approx(-20.0, abs=0.01)
    assert cp.db(cp.rms(x[n:])) == pytest.approx(0.0, abs=0.01)


def test_static_curve_of_a_linear_gain_has_slope_one():
    levels = np.arange(-40.0, 1.0, 5.0)
    c = cp.static_curve(lambda x: 2.0 * x + 0.3, FS, levels, hold=0.2, measure=0.1)
    assert c.slope(-40.0) == pytest.approx(1.0, abs=1e-3)
    assert c.gain_db == pytest.approx(np.full(levels.size, 20 * math.log10(2.0)), abs=0.02)
    assert math.isnan(c.threshold_db())


def _reference_compressor(x, threshold_db, ratio, tau=0.02):
    """Feed-forward compressor with the hard-knee static curve of Giannoulis,
    Massberg & Reiss (JAES 2012): y = T + (x - T)/R above T, on a one-pole
    mean-square level detector."""
    a = math.exp(-1.0 / (tau * FS))
    ms = signal.lfilter([1 - a], [1, -a], x * x)
    lvl = 10 * np.log10(np.maximum(ms, 1e-20))
    out_lvl = np.where(lvl > threshold_db, threshold_db + (lvl - threshold_db) / ratio, lvl)
    return x * 10 ** ((out_lvl - lvl) / 20)


def test_static_curve_recovers_ratio_and_threshold_of_a_reference_compressor():
    T, R = -20.0, 4.0
    levels = np.arange(-40.0, 0.1, 2.0)
    c = cp.static_curve(lambda x: _reference_compressor(x, T, R), FS, levels,
                        hold=0.3, measure=0.15)
    # slope above threshold is 1/R (Giannoulis et al. 2012)
    assert c.slope(T + 4) == pytest.approx(1 / R, abs=0.02)
    assert c.slope(-40.0) < 1.0
    # 1 dB of reduction at x - T - (x - T)/R = 1  ->  x = T + R/(R - 1)
    assert c.threshold_db(1.0) == pytest.approx(T + R / (R - 1), abs=0.5)
    assert c.gain_reduction_db[0] == 0.0
    assert c.gain_reduction_db[-1] == pytest.approx(-20.0 * (1 - 1 / R), abs=0.5)


def test_tone_burst_timing():
    x, t0, t1 = cp.tone_burst(FS, lead=0.1, burst=0.2, tail=0.3)
    assert x.size == int(0.6 * FS)
    assert (t0, t1) == pytest.approx((0.1, 0.3))
    assert np.all(x[: int(0.1 * FS)] == 0) and np.max(np.abs(x)) == pytest.approx(0.5, abs=1e-3)


def test_gain_reduction_from_levels_of_a_fixed_gain_is_zero():
    t = np.arange(int(0.5 * FS)) / FS
    x = 0.1 * np.sin(2 * np.pi * 200 * t)
    gr = cp.gain_reduction_from_levels(x, 3.0 * x, FS, rest_gain_db=20 * math.log10(3.0))
    mid = gr[2000:-2000]
    assert np.max(np.abs(mid)) < 0.01
