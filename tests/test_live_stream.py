"""The callback path through real PortAudio, on ALSA's null device.

Each check runs in a subprocess whose HOME holds an ``.asoundrc`` that points
ALSA's default playback and capture at the ``null`` plugin (PortAudio reads
ALSA's configuration when it initialises, so a fresh process is the reliable
way; DESIGN.md). The null device is unpaced: the callback runs faster than
real time, so the checks count blocks, never wall-clock time.
"""
import json
import os
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parent.parent
pytestmark = pytest.mark.audio

ASOUNDRC = """pcm.!default {
    type null
}
"""


@pytest.fixture
def null_home(tmp_path):
    home = tmp_path / "home"
    home.mkdir()
    (home / ".asoundrc").write_text(ASOUNDRC)
    env = dict(os.environ, HOME=str(home), XDG_CONFIG_HOME=str(home / ".config"),
               PYTHONPATH=str(ROOT))
    env.pop("AUDIODEV", None)
    # the stand-in design lives beside the tests
    env["PYTHONPATH"] = os.pathsep.join(
        p for p in (str(ROOT / "tests"), env.get("PYTHONPATH", "")) if p)
    return home, env


def _run(env, code: str, timeout=600) -> dict:
    r = subprocess.run([sys.executable, "-c", textwrap.dedent(code)], cwd=ROOT, env=env,
                       capture_output=True, text=True, timeout=timeout)
    assert r.returncode == 0, r.stderr[-3000:]
    return json.loads(r.stdout.strip().splitlines()[-1])


PRELUDE = """
import json, time, numpy as np
from solderless.engine.design import load_design
from solderless.engine.live.host import LiveHost
from solderless.engine.live.source import ToneSource
from standin import StandInDesign, StandInSimulator

def wait_blocks(h, k, timeout=120):
    start = h.blocks; t = time.time()
    while h.blocks - start < k and time.time() - t < timeout and h.error is None:
        time.sleep(0.005)
"""


def test_a_design_streams_an_edit_lands_and_meters_update(null_home):
    _, env = null_home
    out = _run(env, PRELUDE + """
d = load_design("feedforward")
h = LiveHost(d, source=ToneSource(440.0, 0.2), block=64, autosave=False)
h.start()
wait_blocks(h, int(2.0 * 48000 / 64))
m1 = h.meters()
lvl0 = h.part_info("output.VOLUME").rotation
h.set_rotation("output.VOLUME", 0.3).result(120)
wait_blocks(h, int(1.0 * 48000 / 64))
m2 = h.meters()
active = h.stream.active
h.stop()
print(json.dumps({"active": active, "b1": m1["blocks"], "b2": m2["blocks"],
    "frames1": m1["frames"], "frames2": m2["frames"],
    "out1": m1["output"]["rms_v"], "out2": m2["output"]["rms_v"],
    "in1": m1["input"]["rms_v"], "ctl": m2["voices"]["A"]["control_ua"],
    "probe": m2["voices"]["A"]["probes"]["iabc(gain.U1)"],
    "lat": h.latency(), "edits": len(h.edit_latencies_s), "error": repr(h.error),
    "lvl0": lvl0, "guard": m2["guard"]}))
""")
    assert out["active"] and out["error"] == "None" and out["guard"] == ""
    assert out["b2"] > out["b1"] > 0 and out["frames2"] > out["frames1"] > 0
    # a 0.2 V peak sine reads 0.2/sqrt(2) V RMS at the input (handbook formula)
    assert out["in1"] == pytest.approx(0.2 / np.sqrt(2), rel=1e-6)
    # the level pot turned down from 0.7 to 0.3 (audio taper) lowers the output
    assert out["lvl0"] == pytest.approx(0.7)
    assert out["out2"] < 0.8 * out["out1"]
    assert out["edits"] >= 1
    # the control-current meter is the engine's probe, shown in microamps
    assert out["ctl"] == pytest.approx(out["probe"] * 1e6, rel=1e-12)
    assert out["lat"]["stream_out_s"] > 0 and out["lat"]["total_s"] >= out["lat"]["stream_out_s"]


def test_limiter_holds_its_ceiling_on_a_runaway_circuit(null_home):
    # The booster driven with 2 V peak and +30 dB output level: far beyond
    # full scale. Every sample PortAudio was handed stays under -6 dBFS.
    _, env = null_home
    out = _run(env, PRELUDE + """
d = load_design("booster")
h = LiveHost(d, source=ToneSource(440.0, 2.0), block=64, level_db=30.0, autosave=False)
h.enable_tap(0.8)
h.start()
while h.tap_pos + 64 <= h.tap.shape[0] and h.error is None:
    time.sleep(0.01)
h.stop()
y = h.tapped()
m = h.meters()
print(json.dumps({"peak": float(np.max(np.abs(y))), "n": int(y.size),
    "gr": m["output"]["limiter_gr_db_max"], "error": repr(h.error),
    "guard": h.guard_reason}))
""")
    assert out["error"] == "None"
    assert out["n"] >= int(0.8 * 48000)
    assert out["peak"] <= 10 ** (-6 / 20) + 1e-7       # float32 rounding
    assert out["peak"] > 0.9 * 10 ** (-6 / 20)
    assert out["gr"] < -10.0


def test_pot_swept_while_streaming_makes_no_click(null_home):
    # Largest sample-to-sample jump during a sweep of the level pot against the
    # unswept run at the louder setting (issue 3's check; 5 % margin, see
    # test_live_host.py for why a block-stepped ramp needs a little).
    _, env = null_home
    out = _run(env, PRELUDE + """
def run(sweep):
    d = load_design("booster")
    h = LiveHost(d, source=ToneSource(220.0, 0.1), block=64, level_db=-6.0, autosave=False)
    h.enable_tap(4.0)
    h.start()
    wait_blocks(h, int(2.0 * 48000 / 64))
    if sweep:
        h.set_rotation("output.VOLUME", 0.4).result(120)
    while h.tap_pos + 64 <= h.tap.shape[0] and h.error is None:
        time.sleep(0.01)
    h.stop()
    y = h.tapped()[int(1.5 * 48000):]
    return float(np.max(np.abs(np.diff(y)))), float(np.max(np.abs(y)))
swept = run(True)
still = run(False)
print(json.dumps({"swept": swept, "still": still}))
""")
    assert out["still"][0] > 0
    assert out["swept"][0] <= 1.05 * out["still"][0]


def test_cli_play_seconds_json(null_home):
    home, env = null_home
    r = subprocess.run([sys.executable, "-m", "solderless.app.cli", "play", "booster",
                        "--source", "tone:1k:100m", "--seconds", "2", "--json",
                        "--block", "64"], cwd=ROOT, env=env, capture_output=True,
                       text=True, timeout=600)
    assert r.returncode == 0, r.stderr[-2000:]
    s = json.loads(r.stdout)
    assert s["blocks"] > 0 and s["error"] is None
    assert s["meters"]["input"]["peak_v"] == pytest.approx(0.1, rel=1e-6)
    # +3 dBu full-scale sine by default: 0.775 * 10^(3/20) * sqrt(2) V peak
    assert s["input_full_scale_v_peak"] == pytest.approx(0.775 * 10 ** 0.15 * 2 ** 0.5)
    assert "hearing" in r.stderr                       # first-use caution
    assert (home / ".config" / "solderless" / "live.json").exists()
    r2 = subprocess.run([sys.executable, "-m", "solderless.app.cli", "play", "booster",
                         "--source", "tone", "--seconds", "0.5"], cwd=ROOT, env=env,
                        capture_output=True, text=True, timeout=600)
    assert r2.returncode == 0 and "hearing" not in r2.stderr      # only once
    assert "latency" in r2.stdout


def test_cli_missing_device_stops_cleanly(null_home):
    _, env = null_home
    r = subprocess.run([sys.executable, "-m", "solderless.app.cli", "play", "booster",
                        "--source", "tone", "--seconds", "1",
                        "--output-device", "no-such-device-here"], cwd=ROOT, env=env,
                       capture_output=True, text=True, timeout=600)
    assert r.returncode == 2
    assert "no output device" in r.stderr or "could not open the audio stream" in r.stderr
    assert "Traceback" not in r.stderr


def test_devices_lists_what_portaudio_sees(null_home):
    _, env = null_home
    r = subprocess.run([sys.executable, "-m", "solderless.app.cli", "devices", "--json"], cwd=ROOT,
                       env=env, capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr
    devs = json.loads(r.stdout)
    assert any(d["name"] == "default" and d["outputs"] > 0 for d in devs)


def test_cli_terminal_commands_edit_and_save(null_home, tmp_path):
    home, env = null_home
    target = tmp_path / "mine.toml"
    cmds = f"pick boost.C1\nup\npick output.VOLUME\nturn 0.5\nbypass boost\nsave {target}\n"
    r = subprocess.run([sys.executable, "-m", "solderless.app.cli", "play", "booster",
                        "--source", "tone:1k:50m", "--seconds", "4", "--json"],
                       cwd=ROOT, env=env, input=cmds, capture_output=True, text=True,
                       timeout=600)
    assert r.returncode == 0, r.stderr[-2000:]
    assert "error" not in r.stderr.lower().replace('"error": null', "")
    assert f"saved {target}" in r.stderr
    from solderless.engine.design import load_design
    d = load_design(target)
    parts = {p.qualname: p for p in d.parts()}
    # 100n stepped up once through E12 (IEC 60063) is 120n
    assert parts["boost.C1"].value == pytest.approx(120e-9)
    assert parts["output.VOLUME"].rotation == pytest.approx(0.5)
    assert d.stage("boost").bypass is True
    # every edit was also autosaved under the config folder
    # (this session's console autosave, told apart from the workbench's)
    # (the key follows the design's file: after 'save mine.toml' the edits
    # are autosaved under 'mine', the copy before it under 'booster')
    folder = home / ".config" / "solderless" / "autosave"
    autos = list(folder.glob("console-booster-*.toml"))
    assert len(autos) == 1
    meta = json.loads(autos[0].with_suffix(".json").read_text())
    assert meta["front_end"] == "console" and meta["name"] == "booster"
    latest = max(folder.glob("console-*.toml"), key=lambda p: p.stat().st_mtime_ns)
    assert "bypass = true" in latest.read_text()


def test_cli_live_input_duplex(null_home):
    # ALSA's null capture hands over whatever is in its buffer (observed: values
    # near 3e37): the duplex stream runs, the input is clamped to full scale
    # (a converter cannot deliver more), nothing non-finite reaches the meters;
    # a channel the device lacks is a user error.
    _, env = null_home
    r = subprocess.run([sys.executable, "-m", "solderless.app.cli", "play", "booster",
                        "--source", "input", "--input-channel", "2", "--seconds", "1",
                        "--json"], cwd=ROOT, env=env, capture_output=True, text=True,
                       timeout=600)
    assert r.returncode == 0, r.stderr[-2000:]
    s = json.loads(r.stdout)
    assert s["blocks"] > 0 and s["source"] == "input channel 2"
    assert 0.0 <= s["meters"]["input"]["peak_v"] <= s["input_full_scale_v_peak"]
    assert s["meters"]["output"]["peak_dbfs"] <= -6.0 + 1e-6
    assert s["latency"]["stream_in_s"] > 0
    r = subprocess.run([sys.executable, "-m", "solderless.app.cli", "play", "booster",
                        "--source", "input", "--input-channel", "999", "--seconds", "1"],
                       cwd=ROOT, env=env, capture_output=True, text=True, timeout=600)
    assert r.returncode == 2 and "input channel 999 does not exist" in r.stderr
    assert "Traceback" not in r.stderr
