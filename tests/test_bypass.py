"""Bypass means what a designer expects for each kind of stage (issue 16):
a series stage passes in to out; a side branch such as the compressor's
detector hears no signal, so the gain cell sits at its resting gain (its
parts and the control current stay, so the effect is not silenced); a
stage that carries no signal is refused. Expectations from the design's own
resting gain (common practice: a bypassed detector leaves the gain cell at
rest)."""
import numpy as np
import pytest

from solderless.engine.design import load_design
from solderless.engine.errors import DesignError
from solderless.engine.solver import Simulator

FS = 48000.0
CTL = "iabc(gain.U1)"


def _run(d, amp, seconds=0.5):
    t = np.arange(int(seconds * FS)) / FS
    x = amp * np.sin(2 * np.pi * 220.0 * t)
    sim = Simulator(d.flatten(), fs=FS, probes=(CTL,))
    y, p = sim.run(x)
    h = len(x) // 2
    gain_db = 20 * np.log10(np.sqrt(np.mean(y[h:] ** 2)) / (amp / np.sqrt(2)))
    return gain_db, p[0, h:], sim


def test_bypassed_detector_leaves_the_gain_cell_at_its_resting_gain():
    d = load_design("flagship")
    rest = Simulator(d.flatten(), fs=FS).operating_point().devices["gain.U1"]["iabc"]
    g_small, _, _ = _run(d, 0.001)          # 1 mV: the detector is barely awake
    g_loud, ctl_loud, _ = _run(d, 0.1)
    assert np.min(ctl_loud) < 0.5 * rest      # in circuit, the detector pulls it down
    d.set_bypass("detector", True)
    gb_small, ctl_b, _ = _run(d, 0.001)
    gb_loud, ctl_bl, _ = _run(d, 0.1)
    # control current stays at its resting value whatever the level
    assert np.allclose(ctl_bl, rest, rtol=1e-3)
    # not silent: the small-signal gain is the resting one, and a loud note
    # is no longer turned down by the detector.  Within 0.5 dB, not exactly:
    # the stage it listened to no longer drives the detector's input, so it
    # sees a lighter load (0.01 dB on this design)
    assert 0.0 <= gb_small - g_small < 0.5
    assert gb_loud > g_loud + 10.0
    assert "resting gain" in d.bypass_effect("detector")


def test_bypassed_series_stage_passes_in_to_out_and_a_bias_stage_is_refused():
    d = load_design("flagship")
    d.set_bypass("makeup", True)
    names = {e.name for e in d.flatten().elements}
    assert not any(n.startswith("makeup.") for n in names)
    assert "in to its out" in d.bypass_effect("makeup")
    with pytest.raises(DesignError, match="cannot be bypassed"):
        d.set_bypass("bias", True)
