"""Checks of the reference-simulator runner itself (tests/spice_ref.py).

Before ngspice is used as the reference for Solderless, make sure the runner
reads its results correctly and that its two transient modes mean what
spice_ref.py says: "same step" = trapezoidal rule at exactly h (so it matches
the bilinear transform of the circuit), "accurate" = the continuous-time
answer. Sources are named beside each check.
"""
from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

import spice_ref as S


@pytest.fixture(scope="module")
def version():
    v = S.require_ngspice()
    print(f"reference simulator: {v}")
    return v


def test_divider_operating_point(version):
    # Ohm's law / voltage divider: 9 V * 20k / (10k + 20k) = 6 V.
    op = S.run_op("* divider\nV1 top 0 DC 9\nR1 top mid 10k\nR2 mid 0 20k\n")
    assert op["mid"] == pytest.approx(6.0, abs=1e-9)
    assert op["top"] == pytest.approx(9.0, abs=1e-12)
    # source current: ngspice's sign convention, current into the + terminal
    # through the source is positive, so a source delivering 0.3 mA reads -0.3 mA
    # (ngspice manual, "Independent sources", from memory).
    assert op["i(v1)"] == pytest.approx(-9.0 / 30e3, rel=1e-9)


def test_diode_forward_voltage_matches_shockley(version):
    # Shockley diode equation I = IS*(exp(V/(N*VT)) - 1), VT = k*T/q at 300.15 K
    # (scipy.constants; SPICE's nominal temperature 27 C).
    from scipy.constants import k, e
    vt = k * 300.15 / e
    op = S.run_op("* diode\nI1 0 a DC 1m\nD1 a 0 DX\n.model DX D(IS=1e-14 N=1.5)\n")
    i = 1e-3 - 1e-12 * op["a"]             # ngspice's GMIN=1e-12 S in parallel
    v_expected = 1.5 * vt * np.log(i / 1e-14 + 1)
    assert op["a"] == pytest.approx(v_expected, abs=1e-6)


H = 1.0 / 48000.0
R = 1e3
C = 1.0 / (2 * np.pi * 8000.0 * R)          # RC low-pass corner at 8 kHz
RC_CARDS = f"* rc\nVIN src 0 DC 0 SIN(0 1 6k)\nR1 src out {R}\nC1 out 0 {C:.12g}\n"


def _continuous_rc(t):
    """Continuous-time RC response to sin(2*pi*6k*t), by scipy.signal.lsim on
    a 40x finer grid (SciPy)."""
    tt = np.linspace(0.0, t[-1], 40 * (len(t) - 1) + 1)
    _, y, _ = signal.lsim(([1.0], [R * C, 1.0]), np.sin(2 * np.pi * 6000 * tt), tt)
    return np.interp(t, tt, y)


def test_same_step_mode_is_trapezoidal_at_h(version):
    res = S.run_tran(RC_CARDS, H, 0.005, fixed_step=True)
    steps = np.diff(res.raw_t)
    # after the start-up ramp ngspice steps at exactly h (the mode's claim)
    assert np.median(steps) == pytest.approx(H, rel=1e-9)
    # Trapezoidal rule at step h == bilinear transform of 1/(sRC+1)
    # (scipy.signal.bilinear; trapezoidal/bilinear equivalence: common practice).
    x = np.sin(2 * np.pi * 6000 * res.t)
    bz, az = signal.bilinear([1.0], [R * C, 1.0], fs=1 / H)
    y_trap = signal.lfilter(bz, az, x)
    e_trap, _ = S.nrmse(y_trap, res.v["out"], max_lag=0)
    e_cont, _ = S.nrmse(_continuous_rc(res.t), res.v["out"], max_lag=0)
    assert e_trap < 0.01
    # at 6 kHz / 48 kHz the trapezoidal warping is a few %: the mode must be
    # measurably closer to the discrete answer than to the continuous one
    assert e_cont > 3 * e_trap


def test_accurate_mode_is_continuous(version):
    res = S.run_tran(RC_CARDS, H, 0.005, fixed_step=False)
    e_cont, _ = S.nrmse(_continuous_rc(res.t), res.v["out"], max_lag=0)
    assert e_cont < 1e-3


def test_nrmse_aligns_integer_latency():
    # Independent expectation: a copy delayed by 3 samples has zero error once
    # aligned, and a 1 % scaled copy has 1 % error (definition of NRMSE).
    rng = np.random.default_rng(1)
    x = signal.lfilter([1.0], [1.0, -0.9], rng.standard_normal(4000))
    y = np.concatenate([np.zeros(3), x[:-3]])
    e, lag = S.nrmse(x, y)
    assert lag == 3 and e < 1e-12
    e, lag = S.nrmse(x, 1.01 * x)
    assert lag == 0 and e == pytest.approx(0.01, rel=1e-9)


def test_raw_parser_reads_all_nodes_of_every_netlist(version):
    # every reference netlist must run in ngspice and expose its output node
    for name in S.netlist_names():
        op = S.run_op(S.load_netlist(name))
        assert all(np.isfinite(v) for v in op.values()), name
        if name != "bjt_diffpair":
            assert "out" in op, name


def test_ngspice_failure_raises_with_log(version):
    with pytest.raises(S.NgspiceError, match="ngspice"):
        S.run_op("* broken\nR1 a 0 1k\nQ1 a b\n")


def test_wave_evaluator_matches_ngspice_sources(version):
    # The input samples fed to Solderless are computed by spice_ref.wave_samples;
    # check them against the source voltage ngspice itself applied (ngspice).
    for name in S.netlist_names():
        cards = S.load_netlist(name)
        try:
            dc, kind, nums = S.source_wave(cards, "VIN")
        except KeyError:
            continue
        res = S.run_tran(cards, 1 / 48000, 0.01, fixed_step=True)
        expect = S.wave_samples(kind, nums, res.raw_t, dc)
        got = res.raw["src"]
        assert np.max(np.abs(got - expect)) < 1e-9 + 1e-6 * np.max(np.abs(expect)), name
