"""`solderless demo`: it runs, writes the WAVs, the plots and the report."""
import argparse
import json
import re
from types import SimpleNamespace

import numpy as np
import pytest
import soundfile as sf

from solderless.app import demo
from solderless.engine.errors import SolderlessError

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"   # PNG signature (ISO/IEC 15948, 5.2)


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    path = demo.run_demo(out, seconds=2.0, verbose=False)
    return out, path


def test_report_exists_with_every_picture(demo_run):
    out, path = demo_run
    assert path == out / "report.html" and path.is_file()
    text = path.read_text(encoding="utf-8")
    imgs = re.findall(r"<img src='([^']+)'", text)
    assert set(imgs) == {"waveforms.png", "control.png", "static_curve.png", "release.png"}
    for name in imgs:
        data = (out / name).read_bytes()
        assert data[:8] == PNG_MAGIC and len(data) > 5000
    for word in ("Operating point", "LUFS", "63 %", "solderless play flagship",
                 "solderless gui flagship", "full scale"):
        assert word in text
    # the operating point table lists the detector's transistor and its pump
    # diodes; the summary has the attack and release times and the bypass level
    assert "detector.Q2" in text and "detector.D2" in text
    for word in ("attack time", "release time", "level vs bypass", "hard notes"):
        assert word in text


def test_wavs_hold_the_rendered_signals(demo_run):
    out, _ = demo_run
    names = ["input.wav", "flagship.wav", "flagship-slow-release.wav",
             "flagship-linear-threshold.wav"]
    for n in names:
        x, fs = sf.read(out / n)
        assert fs == 48000 and x.size == 96000
        assert np.all(np.abs(x) <= 1.0) and np.max(np.abs(x)) > 1e-3
    x, _ = sf.read(out / "input.wav")
    from solderless.engine.synth import render_phrase
    ref = render_phrase("demo", fs=48000.0)[:96000] / demo.WAV_FULL_SCALE_V
    assert np.max(np.abs(x - ref)) < 1e-6     # float WAV: the input as rendered


def test_summary_numbers(demo_run):
    out, _ = demo_run
    s = json.loads((out / "summary.json").read_text())
    assert [d["name"] for d in s["designs"]] == ["flagship", "flagship-slow-release",
                                                  "flagship-linear-threshold"]
    for d in s["designs"]:
        assert d["nonconverged"] == 0
        assert np.isfinite(d["integrated_loudness_lufs"])
    base, slow, lin = s["designs"]
    assert base["level_vs_baseline_lu"] == 0.0
    # loudness difference is the difference of BS.1770 integrated loudness
    assert lin["level_vs_baseline_lu"] == pytest.approx(
        lin["integrated_loudness_lufs"] - base["integrated_loudness_lufs"])
    assert lin["level_vs_bypass_lu"] == pytest.approx(
        lin["integrated_loudness_lufs"] - s["bypass_loudness_lufs"])
    # time-constant convention (63 %): the slow variant recovers later, and
    # its bigger capacitor also fills later (a slower attack)
    assert slow["release_time_s"] > 2.0 * base["release_time_s"]
    assert slow["attack_time_s"] > base["attack_time_s"] > 0.0
    # the linear-threshold variant compresses less: a higher threshold and
    # less reduction on the hard notes (the phrase's first 2 s hold them)
    assert lin["threshold_dbv"] > base["threshold_dbv"] + 5.0
    assert max(lin["phrase_gain_reduction_db"]["hard notes"]) < \
        min(base["phrase_gain_reduction_db"]["hard notes"])
    # static curve shows compression: somewhere above the threshold the
    # output rises by under half a dB per dB (a parallel compressor keeps
    # part of the dry signal, so the curve as a whole stays steeper)
    x, y = np.array(base["static_input_dbv"]), np.array(base["static_output_dbv"])
    assert np.min(np.diff(y) / np.diff(x)) < 0.5
    assert y[-1] - y[0] < 0.85 * (x[-1] - x[0])


def test_loudness_uses_bs1770():
    # ITU-R BS.1770-4 Annex 1: a 0 dBFS 997 Hz sine in one channel reads -3.01 LKFS
    fs = 48000.0
    t = np.arange(int(5 * fs)) / fs
    x = demo.WAV_FULL_SCALE_V * np.sin(2 * np.pi * 997 * t)
    assert demo.loudness(x, fs) == pytest.approx(-3.01, abs=0.02)


def test_transistor_check_classifies_regions():
    # thresholds: Vce < 0.3 V with Vbe forward = saturated; Ic < 1 uA = off
    # (common practice for small-signal transistors)
    # FETs: the device's own region (saturation = the amplifier's region,
    # here "active"; linear = "triode"; cut-off = "off"), Shichman-Hodges
    parts = [SimpleNamespace(qualname="s.QA", type="npn", note=""),
             SimpleNamespace(qualname="s.QB", type="npn", note="rectifier (off at rest)"),
             SimpleNamespace(qualname="s.QC", type="pnp", note=""),
             SimpleNamespace(qualname="s.QD", type="npn", note=""),
             SimpleNamespace(qualname="s.JA", type="njfet", note=""),
             SimpleNamespace(qualname="s.JB", type="pjfet", note=""),
             SimpleNamespace(qualname="s.MA", type="nmos", note=""),
             SimpleNamespace(qualname="s.MB", type="pmos", note="switch, off at rest")]
    design = SimpleNamespace(parts=lambda: parts)
    op = SimpleNamespace(devices={
        "s.QA": {"ic": 1e-3, "vbe": 0.65, "vce": 0.1},
        "s.QB": {"ic": 1e-9, "vbe": 0.3, "vce": 5.0},
        "s.QC": {"ic": -5e-4, "vbe": -0.62, "vce": -4.0},
        "s.QD": {"ic": 1e-8, "vbe": 0.2, "vce": 9.0},
        "s.JA": {"id": 5e-4, "vgs": -0.4, "vds": 4.0, "region": "saturated"},
        "s.JB": {"id": -2e-3, "vgs": 0.5, "vds": -0.1, "region": "linear"},
        "s.MA": {"id": 1e-3, "vgs": 3.0, "vds": 0.2, "region": "linear"},
        "s.MB": {"id": 0.0, "vgs": 0.0, "vds": -9.0, "region": "cut-off"}})
    regions = {r["part"]: (r["region"], r["intended"]) for r in demo.transistor_check(design, op)}
    assert regions == {"s.QA": ("saturated", False), "s.QB": ("off", True),
                       "s.QC": ("active", False), "s.QD": ("off", False),
                       "s.JA": ("active", False), "s.JB": ("triode", False),
                       "s.MA": ("triode", False), "s.MB": ("off", True)}
    probs = demo.transistor_problems(design, op)
    assert len(probs) == 4
    assert [p.split()[0] for p in probs] == ["s.QA", "s.QD", "s.JB", "s.MA"]
    assert "Vds" in probs[2] and "Vce" in probs[0]


def test_cli_arguments_and_user_mistakes(tmp_path):
    p = argparse.ArgumentParser()
    demo.add_demo_arguments(p)
    a = p.parse_args(["--out", str(tmp_path / "x"), "--seconds", "1.5"])
    assert a.out == str(tmp_path / "x") and a.seconds == 1.5
    with pytest.raises(SolderlessError, match="--seconds"):
        demo.run_demo(tmp_path / "y", seconds=-1.0, verbose=False)
    blocker = tmp_path / "file"
    blocker.write_text("keep me")
    with pytest.raises(SolderlessError, match="output folder"):
        demo.run_demo(blocker / "sub", seconds=1.0, verbose=False)
    assert blocker.read_text() == "keep me"
