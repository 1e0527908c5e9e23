"""``solderless play --seconds N`` summary: session figures beside the last
meter values, checked against a known signal (a tone burst in a WAV loop),
through real PortAudio on ALSA's null device (DESIGN.md; unpaced, so the
check counts what was played, not wall time)."""
import json
import math
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import soundfile

ROOT = Path(__file__).resolve().parent.parent
pytestmark = pytest.mark.audio

BURST_FS = 0.25          # burst peak, full-scale units (-12.04 dBFS)


@pytest.fixture
def null_env(tmp_path):
    home = tmp_path / "home"
    home.mkdir()
    (home / ".asoundrc").write_text("pcm.!default {\n    type null\n}\n")
    env = dict(os.environ, HOME=str(home), XDG_CONFIG_HOME=str(home / ".config"),
               PYTHONPATH=str(ROOT))
    env.pop("AUDIODEV", None)
    return env


@pytest.fixture
def burst_wav(tmp_path):
    """0.2 s of 1 kHz at 0.25 of full scale, then 3.8 s of silence, 48 kHz.
    1 kHz at 48 kHz has a sample on every crest (48 samples per cycle), so the
    sample peak is the sine's peak."""
    fs = 48000
    t = np.arange(int(0.2 * fs)) / fs
    x = np.zeros(4 * fs)
    x[:t.size] = BURST_FS * np.sin(2 * np.pi * 1000.0 * t + np.pi / 2)
    p = tmp_path / "burst.wav"
    soundfile.write(p, x, fs, subtype="DOUBLE")
    return p


def _play(env, *args):
    r = subprocess.run([sys.executable, "-m", "solderless.app.cli", "play", *args],
                       cwd=ROOT, env=env, capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr[-3000:]
    return r.stdout


def test_session_peak_equals_the_burst_peak(null_env, burst_wav):
    out = _play(null_env, "booster", "--source", str(burst_wav), "--seconds", "3",
                "--json", "--no-console")
    s = json.loads(out)
    ss = s["session"]
    # calibration: a +3 dBu full-scale sine, 0.775 V RMS * 10^(3/20) * sqrt(2) peak
    # (dBu reference 0.775 V RMS: common practice; AES17 full-scale sine)
    fs_v = 0.775 * 10 ** (3 / 20) * math.sqrt(2)
    assert s["input_full_scale_v_peak"] == pytest.approx(fs_v, rel=1e-9)
    assert ss["input_peak_v"] == pytest.approx(BURST_FS * fs_v, rel=1e-6)
    assert ss["input_peak_dbfs"] == pytest.approx(20 * math.log10(BURST_FS), abs=0.01)
    # the ballistic meter can never read above the session's largest block peak
    assert s["meters"]["input"]["peak_v"] <= ss["input_peak_v"] * (1 + 1e-9)
    assert ss["output_peak_v"] > 0
    c = ss["cpu_load"]
    assert c["blocks"] == s["blocks"] and s["meters"]["frames_lost"] == 0
    assert 0 < c["median"] <= c["p99"] <= c["max"]
    assert ss["xruns"] == s["xruns"]


def test_text_summary_prints_session_and_last_values(null_env, burst_wav):
    out = _play(null_env, "booster", "--source", str(burst_wav), "--seconds", "2",
                "--no-console")
    fs_v = 0.775 * 10 ** (3 / 20) * math.sqrt(2)
    line = next(l for l in out.splitlines() if l.startswith("session:"))
    assert f"input peak max {BURST_FS * fs_v:.4g} V" in line
    assert "(-12.0 dBFS)" in line            # 20 log10(0.25) = -12.04
    assert any(l.strip().startswith("CPU per block") for l in out.splitlines())
    assert any(l.startswith("at the end") for l in out.splitlines())
    assert any(l.startswith("input : peak") for l in out.splitlines())
