"""The three users' jobs, end to end in the terminal (issue 16).

Each journey runs ``solderless play ... --source synth`` in a subprocess on
ALSA's null device (a temporary HOME with an ``.asoundrc``, as
tests/test_live_stream.py does) and drives the live console through its
stdin; the null device is unpaced, so ``wait`` counts audio blocks, not
wall-clock time. The checks are on what a user hears and reads: levels,
control current and gain reduction, attack/release, output changes after an
edit, saved files that reopen as they were saved.
"""
import json
import math
import os
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from solderless.app.cli import main
from solderless.engine.design import load_design

ROOT = Path(__file__).resolve().parent.parent
pytestmark = pytest.mark.audio

# names in the built-in designs (TEAM.md lists the new compressor's names)
DETECTOR_CAP = "detector.CT"       # the detector's time-constant capacitor
SENSITIVITY = "detector.THRESHOLD"  # the detector's threshold pot
LEVEL_POT = "output.VOLUME"        # the output volume pot

ASOUNDRC = "pcm.!default {\n    type null\n}\n"
METER = re.compile(r"out\s+(-?[\d.]+|-inf) pk\s+(-?[\d.]+|-inf) rms dBFS")
IN_METER = re.compile(r"in\s+(-?[\d.]+|-inf) pk\s+(-?[\d.]+|-inf) rms dBFS")


@pytest.fixture
def null_env(tmp_path):
    home = tmp_path / "home"
    home.mkdir()
    (home / ".asoundrc").write_text(ASOUNDRC)
    env = dict(os.environ, HOME=str(home), XDG_CONFIG_HOME=str(home / ".config"),
               PYTHONPATH=str(ROOT))
    env.pop("AUDIODEV", None)
    return env


def _play(env, args, script, timeout=600):
    """Run ``solderless play ARGS`` with ``script`` on its stdin; returns
    (stdout, stderr). The script ends with 'quit' (``--seconds`` only
    bounds a session whose console stopped answering)."""
    r = subprocess.run([sys.executable, "-m", "solderless.app.cli", "play", *args, "--json",
                        "--seconds", "300"],
                       input="\n".join(script + ["quit"]) + "\n", cwd=ROOT, env=env,
                       capture_output=True, text=True, timeout=timeout)
    assert r.returncode == 0, r.stderr[-3000:]
    return r.stdout, r.stderr


def _meter_lines(err):
    return [ln for ln in err.splitlines() if METER.search(ln)]


def _out_rms(line):
    v = METER.search(line).group(2)
    return -math.inf if v == "-inf" else float(v)


def _gain_db(line):
    """Output RMS less input RMS of one meter line (dB): what the circuit
    did to the signal, whichever part of the phrase the window caught."""
    v = IN_METER.search(line).group(2)
    return _out_rms(line) - (-math.inf if v == "-inf" else float(v))


def _field(line, label, unit):
    m = re.search(rf"{label}\s+(-?[\d.]+) {unit}", line)
    return None if m is None else float(m.group(1))


def _times(err):
    """(attack ms, release ms) of each answer to 'times', in order (the
    refreshes after edits print 'times: ...' whenever they finish)."""
    return [(float(a), float(r)) for a, r in
            re.findall(r"^attack (\d+) ms, release (\d+) ms", err, re.M)]


# ---------------------------------------------------------------- designer

def test_designer_auditions_detector_and_taper_on_the_compressor(null_env, tmp_path, capsys):
    assert main(["designs"]) == 0
    listing = capsys.readouterr().out
    assert "flagship" in listing
    assert main(["op", "flagship"]) == 0
    op_text = capsys.readouterr().out
    iabc_rest = float(re.search(r"gain\.U1\s+iabc=([\d.]+) µA", op_text).group(1))
    assert 10 < iabc_rest < 500                            # a gain cell biased on
    d0 = load_design("flagship")
    c0 = d0.part(DETECTOR_CAP).value
    saved = tmp_path / "my-comp.toml"
    script = [
        "wait 2", "meters", "times",
        f"pick {DETECTOR_CAP}", "up", "up", "up",          # E12: three steps up
        "times",
        f"pick {SENSITIVITY}", "taper linear", "turn 0.9",
        "wait 2", "meters",
        f"pick {LEVEL_POT}", "wait 2", "meters", "turn 0.05", "wait 2", "meters",
        f"save {saved}",
    ]
    out, err = _play(null_env, ["flagship", "--source", "synth"], script)
    # stepping the capacitor went through the E12 series (IEC 60063)
    e12 = [1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2]
    exp = c0
    for _ in range(3):
        m = exp / 10 ** math.floor(math.log10(exp) + 1e-9)
        nxt = next((x for x in e12 if x > m * (1 + 1e-9)), None)
        exp = (nxt if nxt else 10.0) * 10 ** math.floor(math.log10(exp) + 1e-9)
    assert exp > c0
    # control current and gain reduction are read while playing
    lines = _meter_lines(err)
    assert len(lines) == 4
    for ln in lines[:2]:
        ctl, gr = _field(ln, "ctl", "uA"), _field(ln, "GR", "dB")
        assert ctl is not None and 0 < ctl <= iabc_rest * 1.01
        assert gr is not None and gr <= 0.05
    assert "GR: gain reduction from the control" in err     # explained once
    # attack and release follow the capacitor: a bigger CS, a slower release
    t = _times(err)
    assert len(t) == 2
    assert re.search(r"^times: attack \d+ ms", err, re.M)   # refreshed after the edits
    (a0, r0), (a1, r1) = t[0], t[1]
    assert r1 > 1.2 * r0
    # the taper changed the wiper position, and the level pot is heard
    assert "taper linear" in err
    # (the meters' windows catch different parts of the phrase, 5 dB apart
    # in input level on a loaded machine: compare what the circuit did)
    assert _gain_db(lines[3]) < _gain_db(lines[2]) - 12.0
    # saved as a new design of its own, with the edits, reopening the same
    d = load_design(saved)
    assert d.part(DETECTOR_CAP).value == pytest.approx(exp, rel=1e-6)
    assert d.part(SENSITIVITY).taper == "linear"
    assert d.part(SENSITIVITY).rotation == pytest.approx(0.9)
    assert d.name != d0.name and "my-comp" in d.name
    assert "Variant of" in d.notes and DETECTOR_CAP in d.notes
    s = json.loads(out)
    assert s["blocks"] > 0 and s["error"] is None


# ---------------------------------------------------------------- player

def test_player_swaps_models_ab_matches_and_saves_both(null_env, tmp_path):
    mine_a = tmp_path / "overdrive-mine.toml"
    mine_b = tmp_path / "booster-mine.toml"
    script = [
        "wait 1",
        "a", "pick clip.D1", "model", "model diode-germanium",
        "pick clip.D2", "model diode-germanium", "pick clip.D3", "model diode-germanium",
        "pick tone.TILT", "turn 0.8",
        "b", "pick boost.Q1", "model npn-low-noise-hi-gain",
        "wait 4", "meters",
        f"save {mine_b}",
        "a", f"save {mine_a}",
    ]
    out, err = _play(null_env, ["overdrive", "--vs", "booster", "--source", "synth"], script)
    assert "models of its kind: diode-germanium" in err
    assert "clip.D1 model diode-germanium (rebuilt)" in err
    assert "boost.Q1 model npn-low-noise-hi-gain (rebuilt)" in err
    s = json.loads(out)
    la, lb = (s["meters"]["voices"][k]["loudness_lkfs"] for k in "AB")
    # loudness matched (BS.1770-4): the applied offset is the difference of
    # the two sides' loudness, and the two sides differ audibly
    assert abs(la - lb) > 1.0
    assert s["meters"]["loudness_offset_db"] == pytest.approx(la - lb, abs=1.0)
    # both saved, complete, named apart, and reopen as they were saved
    a, b = load_design(mine_a), load_design(mine_b)
    assert a.name != b.name and a.name != load_design("overdrive").name
    assert {a.part(f"clip.D{k}").model for k in (1, 2, 3)} == {"diode-germanium"}
    assert a.part("tone.TILT").rotation == pytest.approx(0.8)
    assert b.part("boost.Q1").model == "npn-low-noise-hi-gain"
    for d, p in ((a, mine_a), (b, mine_b)):
        again = tmp_path / f"again-{p.name}"
        d.save(again)
        assert again.read_text() == p.read_text()
    # the diode swap is heard: germanium diodes clip at a lower level, so the
    # clipper's output over the same phrase is lower (offline, same input)
    from solderless.engine.synth import render_phrase
    from solderless.engine.analysis.measure import simulate
    x = render_phrase("demo", fs=48000.0)[:48000]
    y0, pr0, _ = simulate(load_design("overdrive"), x, probes=("v(clip.out, vref)",))
    y1, pr1, _ = simulate(a, x, probes=("v(clip.out, vref)",))
    p0 = float(np.max(np.abs(pr0["v(clip.out, vref)"][24000:])))
    p1 = float(np.max(np.abs(pr1["v(clip.out, vref)"][24000:])))
    assert p1 < 0.8 * p0


# ---------------------------------------------------------------- engineer

AMP = (Path(__file__).resolve().parent / "ce_amp.cir").read_text()


def test_engineer_imports_a_netlist_probes_edits_and_makes_a_variant(null_env, tmp_path,
                                                                     capsys):
    cir = tmp_path / "amp.cir"
    cir.write_text(AMP)
    assert main(["op", str(cir)]) == 0
    op_text = capsys.readouterr().out
    assert re.search(r"^\s+c\s+[\d.]+ V", op_text, re.M)
    assert re.search(r"^\s+Q1\s+ib=", op_text, re.M)
    # probe a net and a device current by the names op prints
    wav = tmp_path / "in.wav"
    assert main(["source", "--out", str(wav), "--phrase", "demo"]) == 0
    csv = tmp_path / "p.csv"
    assert main(["render", str(cir), str(wav), str(tmp_path / "o.wav"), "--probe", "v(c)",
                 "--probe", "ic(Q1)", "--probes-csv", str(csv)]) == 0
    capsys.readouterr()
    p = np.loadtxt(csv, delimiter=",", skiprows=1)
    vc = float(re.search(r"^\s+c\s+([\d.]+) V", op_text, re.M).group(1))
    assert abs(np.median(p[:, 1]) - vc) < 0.2            # the collector swings about its bias
    assert 0.5e-3 < np.median(p[:, 2]) < 1.5e-3          # Ic near 0.9 mA (hand bias)
    # change a part live by the name op prints; the output drops by about
    # 20 log10(2.2/4.7) = -6.6 dB (gain ~ RC / re, common practice)
    variant = tmp_path / "amp-rc2k2.toml"
    script = ["wait 3", "meters", "pick RC", "value 2.2k", "wait 3", "meters",
              f"save {variant}"]
    out, err = _play(null_env, [str(cir), "--source", "synth"], script)
    assert "picked RC = 4.7 kΩ" in err
    lines = _meter_lines(err)
    assert len(lines) == 2
    assert "GR" not in lines[0]                           # no control declared
    # the variant: its own file and name, the netlist untouched, and its
    # frequency response against the baseline's is 6-7 dB lower mid-band
    assert cir.read_text() == AMP
    v = load_design(variant)
    assert v.part("RC").value == pytest.approx(2.2e3) and "amp-rc2k2" in v.name
    for path, name in ((cir, "base.csv"), (variant, "var.csv")):
        assert main(["ac", str(path), "--csv", str(tmp_path / name)]) == 0
    base = np.loadtxt(tmp_path / "base.csv", delimiter=",", skiprows=1)
    var = np.loadtxt(tmp_path / "var.csv", delimiter=",", skiprows=1)
    k = int(np.argmin(np.abs(base[:, 0] - 1000.0)))
    assert -7.5 < var[k, 1] - base[k, 1] < -5.5
