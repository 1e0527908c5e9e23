"""One level calibration (issue 16): ``source``, ``render``, ``demo`` and
``play`` read the same file as the same volts at the jack (before, ``play``
used +3 dBu while the others used 1 V, so a DI file hit the circuit 3.8 dB
hotter live than offline, and ``render`` wrote its output at 2 V)."""
import json
import math
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

from solderless.engine import levels
from solderless.app.cli import main

ROOT = Path(__file__).resolve().parent.parent
# +3 dBu sine: 0.775 V RMS * 10^(3/20), times sqrt(2) for the peak (dBu
# referred to 0.775 V RMS: common practice)
PLUS3_DBU_PEAK = 0.775 * 10 ** (3 / 20) * math.sqrt(2)

WIRE = "a wire\nVIN src 0 0\nR1 src out 1\nRL out 0 1meg\n.end\n"


def test_the_calibration_is_one_constant():
    assert levels.FULL_SCALE_V == pytest.approx(PLUS3_DBU_PEAK, rel=1e-12)
    from solderless.app import demo
    from solderless.engine.live import host
    assert demo.WAV_FULL_SCALE_V == levels.FULL_SCALE_V
    assert host.full_scale_peak_from_dbu(host.DEFAULT_FULL_SCALE_DBU) == \
        pytest.approx(levels.FULL_SCALE_V, rel=1e-9)
    assert "1.548 V peak" in levels.describe() and "+3.0 dBu" in levels.describe()


def test_source_and_render_agree_on_volts_at_the_jack(tmp_path, capsys):
    from solderless.engine.synth import render_phrase
    di = tmp_path / "di.wav"
    assert main(["source", "--out", str(di), "--phrase", "demo"]) == 0
    assert "1.548 V peak" in capsys.readouterr().out
    x, fs = sf.read(str(di))
    volts = render_phrase("demo", fs=float(fs))
    n = min(len(x), len(volts))
    # the file's samples times the calibration are the phrase's volts
    assert np.allclose(x[:n] * levels.FULL_SCALE_V, volts[:n], atol=1e-6)
    # render through a wire (1 ohm into 1 Mohm): the probe on the input net
    # reads those same volts, and the output file equals the input file
    cir = tmp_path / "wire.cir"
    cir.write_text(WIRE)
    out = tmp_path / "out.wav"
    csv = tmp_path / "p.csv"
    assert main(["render", str(cir), str(di), str(out), "--probe", "v(src)",
                 "--probes-csv", str(csv)]) == 0
    text = capsys.readouterr().out
    assert "calibration: input full scale = 1.548 V peak" in text
    p = np.loadtxt(csv, delimiter=",", skiprows=1)
    assert np.allclose(p[:n, 1], volts[:n], atol=1e-5)
    y, _ = sf.read(str(out))
    assert np.allclose(y[:n], x[:n], atol=1e-5)


ASOUNDRC = "pcm.!default {\n    type null\n}\n"


@pytest.mark.audio
def test_play_reads_the_file_at_the_same_volts(tmp_path):
    home = tmp_path / "home"
    home.mkdir()
    (home / ".asoundrc").write_text(ASOUNDRC)
    env = dict(os.environ, HOME=str(home), XDG_CONFIG_HOME=str(home / ".config"),
               PYTHONPATH=str(ROOT))
    env.pop("AUDIODEV", None)
    wav = tmp_path / "burst.wav"
    t = np.arange(48000) / 48000.0
    sf.write(str(wav), (0.25 * np.sin(2 * np.pi * 440 * t)).astype(np.float32), 48000,
             subtype="FLOAT")
    cir = tmp_path / "wire.cir"
    cir.write_text(WIRE)
    r = subprocess.run([sys.executable, "-m", "solderless.app.cli", "play", str(cir), "--source",
                        str(wav), "--seconds", "1.5", "--json", "--no-console"], cwd=ROOT,
                       env=env, capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr[-2000:]
    s = json.loads(r.stdout)
    assert s["input_full_scale_v_peak"] == pytest.approx(levels.FULL_SCALE_V, rel=1e-9)
    assert s["output_full_scale_v_peak"] == pytest.approx(levels.FULL_SCALE_V, rel=1e-9)
    # a 0.25 full-scale sine is 0.25 * 1.548 V at the jack, as in render
    assert s["session"]["input_peak_v"] == pytest.approx(0.25 * levels.FULL_SCALE_V, rel=1e-3)
