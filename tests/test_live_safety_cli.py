"""``solderless play --level/--ceiling/--rate`` and the console's ``level``
with values of every kind, through real PortAudio on ALSA's null device
(see test_live_stream.py for the fixture's reasoning). Each run records the
buffers the stream callback filled, exactly as PortAudio received them:
nothing non-finite or above the ceiling may be there, and a bad value is a
one-line error with exit status 2, never a traceback.

Expectations: the safety rules in README "Cautions" and DEVELOPERS.md
"Output safety" (limiter ceiling, guard; common practice) and the ranges of
solderless/engine/live/limits.py (common practice).
"""
import json
import math
import os
import subprocess
import sys
from pathlib import Path

import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from solderless.engine.live import limits as L

ROOT = Path(__file__).resolve().parent.parent
pytestmark = pytest.mark.audio

ASOUNDRC = """pcm.!default {
    type null
}
"""

# the CLI's main(), with the callback wrapped so every buffer it filled is
# checked; the findings go to the file named by $REC_OUT
RUNNER = r"""
import json, os, sys
import numpy as np
from solderless.engine.live import host as H
rec = {"samples": 0, "nonfinite": 0, "peak": 0.0}
orig = H.LiveHost._audio_block
def recorded(self, indata, outdata, n, xrun):
    orig(self, indata, outdata, n, xrun)
    a = np.asarray(outdata[:n], dtype=np.float64)
    ok = np.isfinite(a)
    rec["samples"] += int(a.size)
    rec["nonfinite"] += int(a.size - ok.sum())
    if ok.any():
        rec["peak"] = max(rec["peak"], float(np.max(np.abs(a[ok]))))
H.LiveHost._audio_block = recorded
from solderless.app.cli import main
try:
    rc = main(sys.argv[1:])
finally:
    with open(os.environ["REC_OUT"], "w") as f:
        json.dump(rec, f)
sys.exit(rc)
"""


@pytest.fixture(scope="module")
def null_env(tmp_path_factory):
    home = tmp_path_factory.mktemp("home")
    (home / ".asoundrc").write_text(ASOUNDRC)
    env = dict(os.environ, HOME=str(home), XDG_CONFIG_HOME=str(home / ".config"),
               PYTHONPATH=str(ROOT))
    env.pop("AUDIODEV", None)
    return home, env


def _play(env, tmp: Path, args, stdin=""):
    rec = tmp / "rec.json"
    rec.unlink(missing_ok=True)
    e = dict(env, REC_OUT=str(rec))
    r = subprocess.run([sys.executable, "-c", RUNNER, "play", "booster", "--no-console"
                        if not stdin else "--json", *args], cwd=ROOT, env=e,
                       input=stdin, capture_output=True, text=True, timeout=600)
    return r, json.loads(rec.read_text()) if rec.exists() else None


def _arg(name, x):
    return f"--{name}={x!r}" if isinstance(x, float) else f"--{name}={x}"


numbers = st.one_of(st.floats(allow_nan=True, allow_infinity=True),
                    st.sampled_from([math.nan, math.inf, -math.inf, 1e9, -1e9, 18.7, 0.0]))
SUB = settings(max_examples=4, deadline=None, derandomize=True,
               suppress_health_check=[HealthCheck.too_slow,
                                      HealthCheck.function_scoped_fixture])


def _check(r, rec, ok, ceiling_dbfs):
    assert "Traceback" not in r.stderr, r.stderr[-2000:]
    if not ok:
        assert r.returncode == 2, r.stderr[-2000:]
        assert rec is None or rec["samples"] == 0     # refused before any sound
        last = [ln for ln in r.stderr.strip().splitlines() if ln.strip()][-1]
        assert "error" in last.lower() or "out of range" in last or "finite" in last
        return
    assert r.returncode in (0, 2), r.stderr[-2000:]
    if r.returncode == 2:        # PortAudio refused the rate: one line, no sound
        assert "could not open the audio stream" in r.stderr
        return
    assert rec["samples"] > 0 and rec["nonfinite"] == 0
    assert rec["peak"] <= 10 ** (ceiling_dbfs / 20) + 1e-6


@SUB
@given(level=numbers)
@example(level=math.nan)
@example(level=math.inf)
@example(level=30.0)
def test_cli_level(null_env, tmp_path, level):
    _, env = null_env
    r, rec = _play(env, tmp_path, ["--source", "tone:1k:1", "--seconds", "0.5",
                                   _arg("level", level)])
    _check(r, rec, math.isfinite(level) and L.LEVEL_DB_MIN <= level <= L.LEVEL_DB_MAX, -6.0)


@SUB
@given(ceiling=numbers)
@example(ceiling=math.nan)
@example(ceiling=18.7)
@example(ceiling=-1.0)
def test_cli_ceiling(null_env, tmp_path, ceiling):
    _, env = null_env
    r, rec = _play(env, tmp_path, ["--source", "tone:1k:1", "--seconds", "0.5",
                                   "--level=30", _arg("ceiling", ceiling)])
    ok = math.isfinite(ceiling) and L.CEILING_DBFS_MIN <= ceiling <= L.CEILING_DBFS_MAX
    _check(r, rec, ok, ceiling if ok else -6.0)


@SUB
@given(rate=st.one_of(numbers, st.sampled_from([44100.0, 96000.0, 1e9, 7999.0])))
@example(rate=1e9)
@example(rate=math.nan)
def test_cli_rate(null_env, tmp_path, rate):
    _, env = null_env
    r, rec = _play(env, tmp_path, ["--source", "tone:1k:100m", "--seconds", "0.5",
                                   _arg("rate", rate)])
    _check(r, rec, math.isfinite(rate) and L.RATE_MIN_HZ <= rate <= L.RATE_MAX_HZ, -6.0)


@settings(max_examples=4, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(st.lists(st.one_of(numbers.map(repr), st.sampled_from(["nan", "inf", "1e400", "x"])),
                min_size=1, max_size=4))
@example(["nan", "inf", "-inf", "1e400"])
def test_console_level_in_a_real_session(null_env, tmp_path, levels):
    # The console's 'level' with anything while playing a loud drive: bad
    # values are one error line each, the session goes on and answers
    # 'meters', and the device never gets a non-finite or over-ceiling sample.
    _, env = null_env
    cmds = "".join(f"level {x}\n" for x in levels) + "meters\n"
    r, rec = _play(env, tmp_path, ["--source", "tone:1k:1", "--seconds", "1.5",
                                   "--level=20"], stdin=cmds)
    assert r.returncode == 0, r.stderr[-2000:]
    assert "Traceback" not in r.stderr
    n_bad = 0
    for x in levels:
        try:
            v = float(x)
        except ValueError:
            v = math.nan
        n_bad += not (math.isfinite(v) and L.LEVEL_DB_MIN <= v <= L.LEVEL_DB_MAX)
    assert r.stderr.count("error:") == n_bad
    assert "out " in r.stderr and "dBFS" in r.stderr          # the meters line
    assert rec["samples"] > 0 and rec["nonfinite"] == 0
    assert rec["peak"] <= 10 ** (-6 / 20) + 1e-6
