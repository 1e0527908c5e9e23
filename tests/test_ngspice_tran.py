"""Transient output of Solderless against ngspice at the same time step.

Reference: ngspice (version printed with ``-s``), ``tran`` from the operating
point with the trapezoidal rule at a fixed internal step h = 1/fs ("same
step" mode of tests/spice_ref.py: tmax = h, trtol=1e6, reltol=1e-6), resampled
onto the sample grid with a cubic spline. Solderless runs at fs = 1/h, fed
with input samples computed from the netlist's SIN/PWL card (ngspice manual
definitions, checked against ngspice in test_ngspice_runner.py).

Metric: normalized RMS error = rms(ours - ngspice) / rms(ngspice) on node
``out``, after aligning a fixed integer latency by cross-correlation.
Tolerance: 1 % (project requirement).
"""
from __future__ import annotations

import numpy as np
import pytest

import spice_ref as S

pytest.importorskip("solderless.engine.formats.spice")

FS = 48000.0
DURATION = 0.02          # s: 20 periods of 1 kHz, the full PWL of rlc_ring
TOL = 0.01


@pytest.fixture(scope="module")
def version():
    v = S.require_ngspice()
    print(f"reference simulator: {v}")
    return v


@pytest.mark.parametrize("name", S.audio_netlists())
def test_transient_matches_ngspice(name, version):
    cards = S.load_netlist(name)
    ref = S.run_tran(cards, 1.0 / FS, DURATION, fixed_step=True, nodes=("out",))
    Simulator = S.engine_simulator()
    circ = S.engine_circuit(name)
    sim = Simulator(circ, FS)
    t, x = S.engine_input(name, FS, DURATION)
    y = np.asarray(sim.process(x), float)
    assert y.shape == x.shape
    assert np.all(np.isfinite(y))
    err, lag = S.nrmse(ref.v["out"], y)
    print(f"{name}: NRMSE {err*100:.3f} % at lag {lag} samples, "
          f"rms(ngspice) {np.sqrt(np.mean(ref.v['out']**2)):.4f} V [{version}]")
    assert err < TOL, (f"{name}: NRMSE {err*100:.2f} % vs {version} "
                       f"(lag {lag}); limit {TOL*100:.0f} %")
    assert abs(lag) <= 1, f"{name}: unexpected latency of {lag} samples"
