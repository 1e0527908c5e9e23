"""Live noise (solderless.engine.solver.livenoise): the circuit's noise
sources inside the time-domain simulation, seeded, off by default.

References (docs/references.md, "Noise"): the small-signal noise analysis,
itself checked against ngspice-39's noise analysis (tests/test_noise.py),
is the expectation for the live noise floor; white noise of one-sided PSD S
sampled at fs has variance S*fs/2 (common practice); the pink filter is
measured against 1/f with SciPy (``scipy.signal.sosfreqz``); the live
spectrum is estimated with SciPy's Welch method (``scipy.signal.welch``).
Render fingerprints without noise stay those of
tests/data/render_fingerprints.json (tests/test_render_fingerprints.py).
"""
from __future__ import annotations

import math

import numpy as np
import pytest

from solderless.engine.analysis.noise import noise_floor, noise_spectrum
from solderless.engine.formats.spice import parse_netlist
from solderless.engine.solver import Simulator
from solderless.engine.solver.livenoise import (HissSimulator, design_setting, pink_sos,
                                                white_sigma)

import noise_circuits as NC  # noqa: E402

DIVIDER = NC.DIVIDER + ".end\n"
CE_STAGE = NC.CE_STAGE + ".end\n"

FS = 48000.0


def _circuit(cards):
    return parse_netlist(cards, in_source="VIN", out_node="out").circuit


_band_rms = NC.band_rms     # the live floor's measurement (tests/noise_circuits.py)


def test_white_sigma_convention():
    """Variance S*fs/2: 4kTR of 5 kohm at 48 kHz (common practice)."""
    s = 4 * 1.380649e-23 * 300.15 / 5e3
    assert white_sigma(s, 48000.0) == pytest.approx(math.sqrt(s * 24000.0), rel=1e-15)


@pytest.mark.parametrize("oversample", [1, 2])
def test_live_noise_floor_of_a_divider_matches_the_analysis(oversample):
    """Four seconds of silence through a 10k/10k divider with noise on: the
    output's noise over 20 Hz-20 kHz (Welch PSD, SciPy), unweighted and
    A-weighted, within 1 dB of the analysis (measured: about 0.01 dB;
    the estimate's own spread over 3.5 s is about 0.05 dB)."""
    from solderless.engine.analysis.noise import a_weighting
    circ = _circuit(DIVIDER)
    sim = HissSimulator(circ, fs=FS, oversample=oversample, seed=11)
    y = sim.process(np.zeros(int(4 * FS)))[int(0.5 * FS):]
    fl = noise_floor(circ)
    live = _band_rms(y, FS)
    live_a = _band_rms(y, FS, weight=a_weighting)
    assert abs(20 * math.log10(live / fl.v_rms)) < 1.0
    assert abs(20 * math.log10(live_a / fl.v_rms_a)) < 1.0
    # white: the spectrum is flat (10 dB apart bins agree to about 1 dB)
    from scipy.signal import welch
    f, p = welch(y, fs=FS, nperseg=1024)
    m = (f > 100) & (f < 15e3)
    assert np.std(10 * np.log10(p[m])) < 1.0


def test_live_noise_of_a_common_emitter_stage_follows_the_analysis():
    """Shot, thermal and flicker noise of a CE stage: the live spectrum in
    three octave bands (around 100 Hz, 1 kHz, 10 kHz) within 1 dB of the
    analysis, and the 20 Hz-20 kHz floor within 1 dB."""
    from scipy.signal import welch
    circ = _circuit(CE_STAGE)
    sim = HissSimulator(circ, fs=FS, oversample=2, seed=5)
    y = sim.process(np.zeros(int(8 * FS)))[int(1.0 * FS):]
    f, p = welch(y - y.mean(), fs=FS, nperseg=8192)
    r = noise_spectrum(circ, f[1:])
    for fc in (100.0, 1000.0, 10000.0):
        m = (f[1:] >= fc / math.sqrt(2)) & (f[1:] <= fc * math.sqrt(2))
        live = np.trapezoid(p[1:][m], f[1:][m])
        want = np.trapezoid(r.out_psd[m], f[1:][m])
        assert abs(10 * math.log10(live / want)) < 1.0, fc
    assert abs(20 * math.log10(_band_rms(y, FS) / noise_floor(circ).v_rms)) < 1.0


def test_seeded_renders_repeat_and_seeds_differ():
    circ = _circuit(DIVIDER)
    x = np.zeros(5000)
    a = HissSimulator(circ, fs=FS, seed=3, block_max=1000).process(x)
    b = HissSimulator(circ, fs=FS, seed=3, block_max=512).process(x)
    c = HissSimulator(circ, fs=FS, seed=4).process(x)
    np.testing.assert_array_equal(a, b)     # the block size does not matter
    sim = HissSimulator(circ, fs=FS, seed=3, block_max=1000)
    first = sim.process(x)
    sim.reset()
    np.testing.assert_array_equal(first, sim.process(x))  # reset starts the sequence again
    np.testing.assert_array_equal(first, a)
    assert not np.array_equal(a, c)
    assert np.std(a) > 0


def test_noise_off_leaves_the_render_alone():
    """Without noise the simulator is the plain one (bit for bit), and the
    noisy one's operating point is the same."""
    circ = _circuit(CE_STAGE)
    x = 0.01 * np.sin(2 * np.pi * 1000 * np.arange(4800) / FS)
    plain = Simulator(circ, fs=FS).process(x)
    again = Simulator(_circuit(CE_STAGE), fs=FS).process(x)
    np.testing.assert_array_equal(plain, again)
    noisy = HissSimulator(circ, fs=FS, seed=1)
    assert noisy.operating_point().nets["c"] == pytest.approx(
        Simulator(circ, fs=FS).operating_point().nets["c"], abs=1e-12)
    y = noisy.process(x)
    d = y - plain
    assert 0 < np.std(d) < 1e-3    # the noise is there, and only noise


def test_thermal_noise_follows_a_live_value_change():
    """4kT/R: quadrupling both resistors doubles the output density."""
    circ = _circuit(DIVIDER)
    sim = HissSimulator(circ, fs=FS, seed=2)
    s0 = sim.sigmas.copy()
    sim.set_values({"R1": 40e3, "R2": 40e3})
    assert np.allclose(sim.sigmas, s0 / 2, rtol=1e-12)
    y = sim.process(np.zeros(int(3 * FS)))
    want = noise_floor(circ, values={**sim.values}).v_rms
    assert abs(20 * math.log10(_band_rms(y, FS) / want)) < 1.0


@pytest.mark.parametrize("fs, tol_db", [(48000.0, 1.5), (96000.0, 0.5)])
def test_pink_filter_follows_one_over_f(fs, tol_db):
    """|H|^2 * f = 1 from 20 Hz to 20 kHz within the figure stated in
    pink_sos (evaluated with SciPy's sosfreqz)."""
    from scipy.signal import sosfreqz
    sos = pink_sos(fs)
    f = np.geomspace(20, 20e3, 200)
    _, h = sosfreqz(sos, worN=f, fs=fs)
    err = 10 * np.log10(np.abs(h) ** 2 * f)
    assert np.abs(err).max() < tol_db
    assert abs(err[np.argmin(abs(f - 1000))]) < 0.05


def test_design_setting(tmp_path):
    from solderless.engine.design import load_design
    from solderless.engine.errors import DesignError
    base = (tmp_path / "d.toml")
    import shutil
    from solderless.engine.design import builtin_designs
    shutil.copy(builtin_designs()["booster"], base)
    d = load_design(str(base))
    assert design_setting(d) == (False, 0)
    text = base.read_text().replace("[design]", "[design]\nhiss = true\nhiss_seed = 9", 1)
    base.write_text(text)
    assert design_setting(load_design(str(base))) == (True, 9)
    base.write_text(text.replace("hiss = true", 'hiss = "yes"'))
    with pytest.raises(DesignError, match="hiss must be true or false"):
        design_setting(load_design(str(base)))


def test_render_with_hiss_repeats_and_reports_the_floor(tmp_path):
    """``solderless render --hiss``: the same seed writes the same file, the
    summary prints the floor in dBV and dBu, unweighted and A-weighted; a
    render without it is silent on silence."""
    import soundfile as sf
    from solderless.app.cli import main
    net = tmp_path / "div.cir"
    net.write_text(DIVIDER)
    src = tmp_path / "in.wav"
    sf.write(src, np.zeros(24000), 48000, subtype="FLOAT")
    outs = []
    for k, extra in enumerate((["--hiss"], ["--hiss"], ["--hiss", "--hiss-seed", "8"], [])):
        o = tmp_path / f"o{k}.wav"
        assert main(["render", str(net), str(src), str(o), *extra]) == 0
        outs.append(sf.read(o)[0])
    np.testing.assert_array_equal(outs[0], outs[1])
    assert not np.array_equal(outs[0], outs[2])
    assert np.std(outs[0]) > 0 and np.ptp(outs[3]) < 1e-12


def test_render_summary_line(tmp_path, capsys):
    import soundfile as sf
    from solderless.app.cli import main
    from solderless.engine.analysis.noise import dbu
    net = tmp_path / "div.cir"
    net.write_text(DIVIDER)
    src = tmp_path / "in.wav"
    sf.write(src, np.zeros(4800), 48000, subtype="FLOAT")
    assert main(["render", str(net), str(src), str(tmp_path / "o.wav"), "--hiss"]) == 0
    out = capsys.readouterr().out
    fl = noise_floor(_circuit(DIVIDER))
    assert "hiss on (seed 0" in out
    assert f"{dbu(fl.v_rms):.1f} dBu) unweighted" in out
    assert f"{dbu(fl.v_rms_a):.1f} dBu) A-weighted" in out
    assert main(["render", str(net), str(src), str(tmp_path / "p.wav")]) == 0
    assert "hiss" not in capsys.readouterr().out


@pytest.mark.audio
def test_play_with_hiss_reports_the_floor(tmp_path):
    """``solderless play --hiss`` through real PortAudio on ALSA's null
    device (DESIGN.md): the summary carries the noise floor of the design,
    as the analysis gives it."""
    import json
    import subprocess
    import sys
    from solderless.engine.design import load_design
    from nullaudio import ROOT as root, null_audio_env
    env = null_audio_env(tmp_path)
    r = subprocess.run([sys.executable, "-m", "solderless.app.cli", "play", "booster",
                        "--source", "tone:1000:0.01", "--seconds", "1", "--json",
                        "--no-console", "--hiss", "--hiss-seed", "4"],
                       cwd=root, env=env, capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr[-3000:]
    s = json.loads(r.stdout)
    want = noise_floor(load_design("booster").flatten())
    assert s["hiss"]["seed"] == 4
    assert s["hiss"]["v_rms"] == pytest.approx(want.v_rms, rel=1e-9)
    assert s["hiss"]["v_rms_a"] == pytest.approx(want.v_rms_a, rel=1e-9)


def test_noise_follows_a_live_temperature_change():
    """4kT/R: at 77 degC a resistor's noise current rises by
    sqrt(350.15/300.15) (the SI's kelvin: 0 degC = 273.15 K)."""
    from solderless.engine.solver.simulator import TEMPERATURE_KEY
    sim = HissSimulator(_circuit(DIVIDER), fs=FS, seed=2)
    s0 = sim.sigmas.copy()
    sim.set_values({TEMPERATURE_KEY: 77.0})
    assert np.allclose(sim.sigmas, s0 * math.sqrt(350.15 / 300.15), rtol=1e-12)


def test_live_floor_of_the_default_design_matches_the_analysis():
    """The default design (a compressor with an OTA gain cell, at rest on
    silence): live floor 20 Hz-20 kHz within 1 dB of the analysis,
    unweighted and A-weighted (measured: -0.17 dB and -0.07 dB)."""
    from solderless.engine.analysis.noise import a_weighting
    from solderless.engine.design import load_design
    d = load_design("flagship")
    circ = d.flatten()
    sim = HissSimulator(circ, fs=FS, oversample=d.oversample, seed=1)
    y = sim.process(np.zeros(int(4 * FS)))[int(1 * FS):]
    fl = noise_floor(circ)
    assert abs(20 * math.log10(_band_rms(y, FS) / fl.v_rms)) < 1.0
    assert abs(20 * math.log10(_band_rms(y, FS, weight=a_weighting) / fl.v_rms_a)) < 1.0
    assert sim.pruned        # its many negligible sources are left out
