"""The live host's mechanics, run block by block without a sound card:
safety (limiter, guard, start ramp), edits through the mailbox, pot ramps,
A/B crossfade and loudness match, rebuilds, autosave, terminal control."""
import json
import math
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from solderless.engine.errors import AudioError, SolderlessError
from solderless.engine.live import host as H
from solderless.engine.live import limiter as lim
from solderless.app.console import Console
from solderless.engine.live.loudness import integrated_loudness
from solderless.engine.live.source import ToneSource, parse_source
from standin import StandInDesign, StandInSimulator

FS = 48000.0
ROOT = Path(__file__).resolve().parent.parent


def _host(design=None, **kw):
    kw.setdefault("simulator_factory", StandInSimulator)
    kw.setdefault("autosave", False)
    return H.LiveHost(design or StandInDesign(), **kw)


def _run_until(h, fut, max_blocks=20000):
    """Run blocks while an edit is in flight; return the output."""
    outs = []
    while not fut.done() and len(outs) < max_blocks:
        outs.append(h.run_offline(1))
    fut.result(5)
    return np.concatenate(outs) if outs else np.zeros(0)


def test_limiter_holds_the_ceiling_on_a_runaway_drive():
    # drive.GAIN = 40 puts 20 V at the output, +22 dB over full scale: the
    # sound-card samples must never exceed the -6 dBFS ceiling (default).
    d = StandInDesign()
    d.set_value("drive.GAIN", 40.0)
    h = _host(d, source=ToneSource(1000.0, 0.5), block=64, in_full_scale_v=1.0,
              out_full_scale_v=1.0)
    y = h.run_offline(int(0.9 * FS / 64))
    ceiling = 10 ** (-6 / 20)
    assert np.max(np.abs(y)) <= ceiling + 1e-12
    assert np.max(np.abs(y)) > 0.99 * ceiling          # and it does reach it
    assert h.guard_reason == ""
    # sustained full scale for longer than FULL_SCALE_HOLD_S: muted, and why
    y2 = h.run_offline(int(0.5 * FS / 64))
    assert h.guard_reason == "the output sat at full scale for too long"
    assert np.all(y2[-64:] == 0.0)
    h.close()


def test_nan_output_mutes_at_once_and_says_why():
    class NaNSim(StandInSimulator):
        def process_into(self, x, y, probe_buf=None):
            n = super().process_into(x, y, probe_buf)
            if self.values["drive.GAIN"] > 5:
                y[10:] = np.nan
            return n
    h = _host(source=ToneSource(1000.0, 0.1), simulator_factory=NaNSim, block=64)
    h.run_offline(50)
    fut = h.set_value("drive.GAIN", 10.0)
    y = _run_until(h, fut)
    y = np.concatenate([y, h.run_offline(3)])
    assert np.all(np.isfinite(y))
    assert h.guard_reason == "the circuit output became NaN or infinite"
    assert np.all(y[-128:] == 0.0)
    h.unmute()
    h.set_value("drive.GAIN", 1.0).result(5)
    y = h.run_offline(int(2 * FS / 64))
    assert h.guard_reason == "" and np.max(np.abs(y)) > 0.01
    h.close()


def test_runaway_volts_mute():
    d = StandInDesign()
    d.set_value("drive.GAIN", 1000.0)      # 500 V at the output: no pedal does that
    h = _host(d, source=ToneSource(1000.0, 0.5), block=64)
    y = h.run_offline(20)
    assert h.guard_reason == "the circuit output ran away beyond the runaway limit"
    assert np.max(np.abs(y)) <= 10 ** (-6 / 20)
    h.close()


def test_start_ramp_begins_silent_and_reaches_the_level():
    # Level moves by a one-pole smoother of LEVEL_TAU_S (0.5 s): after t the
    # gain is 1 - exp(-t/tau) of the target (first-order step response).
    h = _host(source=ToneSource(1000.0, 0.2), block=64, in_full_scale_v=1.0,
              out_full_scale_v=1.0)
    y = h.run_offline(int(3.0 * FS / 64))
    first = np.max(np.abs(y[:480]))
    assert first < 0.05 * np.max(np.abs(y[-4800:]))
    t = 0.5
    seg = y[int(t * FS) - 480:int(t * FS)]
    expect = 1 - math.exp(-t / lim.LEVEL_TAU_S)
    assert np.max(np.abs(seg)) / np.max(np.abs(y[-4800:])) == pytest.approx(expect, abs=0.03)
    h.close()


def test_part_change_lands_with_state_carried_over():
    h = _host(source=ToneSource(1000.0, 0.2), block=64, in_full_scale_v=1.0,
              out_full_scale_v=1.0)
    h.run_offline(int(2.0 * FS / 64))
    before = h.meters()["output"]["rms_v"]
    fut = h.step_value("tone.R1", +3)              # 10k -> 13k (E24, IEC 60063)
    _run_until(h, fut)
    assert fut.result() == pytest.approx(13e3)
    h.run_offline(int(0.4 * FS / 64))
    after = h.meters()["output"]["rms_v"]
    fc0, fc1 = 1 / (2 * math.pi * 10e3 * 10e-9), 1 / (2 * math.pi * 13e3 * 10e-9)
    # one-pole low-pass magnitude (handbook formula)
    ratio = math.sqrt(1 + (1000 / fc0) ** 2) / math.sqrt(1 + (1000 / fc1) ** 2)
    assert after / before == pytest.approx(ratio, rel=0.01)
    assert h.edit_latencies_s, "the edit was never seen landing at a block boundary"
    h.close()


@pytest.mark.parametrize("r0,r1", [(1.0, 0.1), (0.1, 1.0)])
def test_pot_sweep_makes_no_step_larger_than_the_signal(r0, r1):
    # Largest sample-to-sample jump while the pot is swept must not exceed the
    # unswept run's at the louder setting (issue 3's check). Block-wise steps
    # add a little to the signal's own slope (sqrt(w^2 + g'^2) against w for
    # g = A sin(wn) with gain slope g'), so allow 5 % (our own margin; with
    # 0.5 % of travel per block the sum is about 1.5 % over).
    f = 220.0
    def run(sweep):
        d = StandInDesign()
        d.set_rotation("level.VOL", max(r0, r1) if not sweep else r0)
        h = _host(d, source=ToneSource(f, 0.5), block=64, in_full_scale_v=1.0,
                  out_full_scale_v=1.0, level_db=-3.0)
        y = [h.run_offline(int(1.5 * FS / 64))]
        if sweep:
            y.append(_run_until(h, h.set_rotation("level.VOL", r1)))
        y.append(h.run_offline(int(0.3 * FS / 64)))
        h.close()
        y = np.concatenate(y)
        return y[int(1.2 * FS):]
    jump_swept = np.max(np.abs(np.diff(run(True))))
    jump_still = np.max(np.abs(np.diff(run(False))))
    assert jump_swept <= jump_still * 1.05


def test_pot_moved_in_one_jump_would_click():
    # The check above can fail: the same move without the ramp makes a step
    # well above the signal's own (this is what the ramp prevents).
    d = StandInDesign()
    d.set_rotation("level.VOL", 0.1)
    h = _host(d, source=ToneSource(220.0, 0.5), block=64, in_full_scale_v=1.0,
              out_full_scale_v=1.0, level_db=-3.0)
    h.run_offline(int(1.5 * FS / 64))
    still = np.max(np.abs(np.diff(h.run_offline(200))))
    h.voices[0].sim.set_values(d.set_rotation("level.VOL", 1.0))
    y = h.run_offline(50)
    assert np.max(np.abs(np.diff(y))) > 2 * still
    h.close()


def test_ab_loudness_match_and_click_free_switch():
    # B is the same circuit with the level pot at 0.25 (about -12 dB). With
    # matching on, what is heard from A and from B must have the same
    # BS.1770-4 integrated loudness (checked by our BS.1770 meter, itself
    # checked against pyloudnorm in test_loudness.py).
    a, b = StandInDesign("A"), StandInDesign("B")
    b.set_rotation("level.VOL", 0.25)
    h = _host(a, variant=b, source=ToneSource(500.0, 0.3), block=128,
              in_full_scale_v=1.0, out_full_scale_v=1.0, level_db=-3.0)
    h.run_offline(int(12 * FS / 128))              # running loudness settles (tau 3 s)
    expected = 20 * math.log10(1.0 / ((0.25 * 10e3 + 1) / (10e3 + 2)))
    assert h.loudness_offset_db == pytest.approx(expected, abs=0.1)
    ya = h.run_offline(int(3 * FS / 128))
    h.select("B")
    yx = h.run_offline(int(0.2 * FS / 128))
    yb = h.run_offline(int(3 * FS / 128))
    la, lb = integrated_loudness(ya, FS), integrated_loudness(yb, FS)
    assert la == pytest.approx(lb, abs=0.2)
    # the switch itself: no sample jump beyond the steady signal's own
    seam = np.concatenate([ya[-4800:], yx, yb[:4800]])
    assert np.max(np.abs(np.diff(seam))) <= 1.01 * np.max(np.abs(np.diff(ya)))
    m = h.meters()
    assert m["selected"] == "B" and m["ab_position"] == 1.0
    assert m["voices"]["B"]["loudness_lkfs"] is not None
    h.close()


def test_pot_turned_while_not_playing_lands_without_waiting_for_blocks():
    # Before the stream starts (a GUI may edit first) a ramp must not wait for
    # blocks that never come; the last value is what the simulator gets.
    h = _host(source=ToneSource(1000.0, 0.1))
    h.prepare()
    assert h.set_rotation("level.VOL", 0.0).result(60) == 0.0
    assert h.voices[0].sim.values["level.VOL.b"] == pytest.approx(1.0)
    h.close()


def test_bypass_rebuilds_and_crossfades():
    h = _host(source=ToneSource(5000.0, 0.2), block=64, in_full_scale_v=1.0,
              out_full_scale_v=1.0)
    h.run_offline(int(1.5 * FS / 64))
    low = h.meters()["output"]["rms_v"]
    fut = h.set_bypass("tone", True)
    y = _run_until(h, fut)
    assert fut.result() >= 0.0                         # build time in seconds
    assert h.voices[0].incoming is None
    h.run_offline(int(0.4 * FS / 64))
    high = h.meters()["output"]["rms_v"]
    # without the 1.59 kHz one-pole, 5 kHz passes whole (handbook formula)
    fc = 1 / (2 * math.pi * 10e3 * 10e-9)
    assert high / low == pytest.approx(math.sqrt(1 + (5000 / fc) ** 2), rel=0.02)
    assert np.all(np.isfinite(y))
    h.close()


def test_user_mistakes_raise_solderless_errors():
    h = _host(source=ToneSource(1000.0, 0.1))
    h.run_offline(2)
    with pytest.raises(SolderlessError, match="no part named"):
        h.step_value("tone.R9", 1).result(5)
    with pytest.raises(SolderlessError, match="only a pot"):
        h.set_rotation("tone.R1", 0.5).result(5)
    with pytest.raises(AudioError, match="no variant"):
        h.select("B")
    with pytest.raises(AudioError, match="block size"):
        _host(block=8)
    h.close()


def test_edits_are_autosaved_atomically(tmp_path):
    auto = tmp_path / "auto" / "standin.toml"
    h = _host(source=ToneSource(1000.0, 0.1), autosave=auto)
    h.run_offline(2)
    h.set_value("tone.R1", 4700.0).result(5)
    assert "4700.0" in auto.read_text()
    assert not list(auto.parent.glob("*.tmp*"))
    h.close()


def test_console_commands(tmp_path):
    said = []
    h = _host(source=ToneSource(1000.0, 0.1), block=64)
    h.run_offline(2)
    c = Console(h, say=said.append, timeout=5)
    c.handle("pick tone.C1")
    assert h.part_info("tone.C1").value == pytest.approx(10e-9)
    # _run_until is not needed: value edits do not wait for blocks
    c.handle("up")                      # E12 for capacitors: 10n -> 12n
    assert h.part_info("tone.C1").value == pytest.approx(12e-9)
    c.handle("down 2")                  # 12n -> 10n -> 8.2n
    assert h.part_info("tone.C1").value == pytest.approx(8.2e-9)
    c.handle("value 4n7")
    assert h.part_info("tone.C1").value == pytest.approx(4.7e-9)
    c.handle("pick nowhere.R1")
    assert said[-1].startswith("error:") and "no part named" in said[-1]
    c.handle("frobnicate")
    assert "unknown command" in said[-1]
    c.handle(f"save {tmp_path / 'mine.toml'}")
    assert (tmp_path / "mine.toml").exists()
    assert c.handle("quit") is False
    h.close()


def test_caution_is_shown_once(tmp_path, monkeypatch):
    from solderless.engine import settings
    monkeypatch.delenv("SOLDERLESS_CONFIG_DIR", raising=False)
    monkeypatch.setenv("XDG_CONFIG_HOME", str(tmp_path))
    said = []
    assert settings.caution_once(said.append) is True
    assert settings.caution_once(said.append) is False
    assert len(said) == 1 and "hearing" in said[0]
    assert json.loads((tmp_path / "solderless" / "live.json").read_text())["caution_shown"]


def test_sources(tmp_path):
    import soundfile as sf
    p = tmp_path / "loop.wav"
    sf.write(p, 0.5 * np.ones(100), 24000)
    s = parse_source(str(p))
    s.prepare(48000.0, 2.0)
    out = np.zeros(500)
    s.fill(None, 500, out)
    assert s.volts.size == 200                         # resampled 24k -> 48k
    assert np.median(out) == pytest.approx(1.0, abs=0.05)   # 0.5 FS x 2 V full scale
    with pytest.raises(AudioError, match="no such audio file"):
        parse_source(str(tmp_path / "missing.wav"))
    t = parse_source("tone:1k:100m")
    assert (t.freq, t.peak_v) == (1000.0, 0.1)


def test_missing_portaudio_gives_the_install_line(tmp_path):
    # sounddevice raises OSError when the PortAudio library cannot be loaded
    # (its import does ctypes find_library + dlopen); emulate that import.
    (tmp_path / "sounddevice.py").write_text(
        "raise OSError('PortAudio library not found')\n")
    env = dict(os.environ, PYTHONPATH=f"{tmp_path}{os.pathsep}{ROOT}")
    r = subprocess.run([sys.executable, "-m", "solderless.app.cli", "play", "flagship",
                        "--seconds", "1"], cwd=ROOT, env=env, capture_output=True,
                       text=True, timeout=120)
    assert r.returncode == 2
    assert "apt-get install libportaudio2" in r.stderr
    assert "Traceback" not in r.stderr
    r = subprocess.run([sys.executable, "-m", "solderless.app.cli", "designs"], cwd=ROOT,
                       env=env, capture_output=True, text=True, timeout=120)
    assert r.returncode == 0 and "flagship" in r.stdout


def test_a_failing_callback_goes_silent_and_reports():
    class Broken(StandInSimulator):
        def process_into(self, x, y, probe_buf=None):
            if self.values["drive.GAIN"] > 5:
                raise RuntimeError("solver fell over")
            return super().process_into(x, y, probe_buf)
    h = _host(source=ToneSource(1000.0, 0.1), simulator_factory=Broken, block=64)
    h.run_offline(10)
    h.voices[0].sim.set_values({"drive.GAIN": 10.0})
    out = np.ones((64, 2), dtype=np.float32)
    h._audio_block(None, out, 64, False)            # as PortAudio would call it
    assert np.all(out == 0.0)
    assert isinstance(h.error, RuntimeError)
    assert "the audio callback failed" in h.guard_reason
    h.close()


def test_set_source_while_running():
    h = _host(source=ToneSource(1000.0, 0.1), block=64)
    h.run_offline(10)
    h.set_source(ToneSource(500.0, 0.3))
    h.run_offline(int(0.5 * FS / 64))
    assert h.meters()["input"]["peak_v"] == pytest.approx(0.3, rel=1e-9)
    h.close()


# ------------------------------------------------------------ real designs
def _real(name, **kw):
    from solderless.engine.design import load_design
    kw.setdefault("autosave", False)
    return H.LiveHost(load_design(name), **kw)


def test_gain_reduction_from_control_agrees_with_the_measured_one():
    # Feed-forward OTA compressor on a steady 1 kHz tone: with gain
    # proportional to Iabc (gm = Iabc / 2VT, docs/references.md), the gain change
    # read from the control current must equal the change of output level
    # against the small-signal gain, measured independently from the levels.
    h = _real("feedforward", source=ToneSource(1000.0, 0.3), block=128)
    h.run_offline(int(2.0 * FS / 128))
    v = h.meters()["voices"]["A"]
    assert v["gr_control_db"] < -3.0                     # it is compressing
    assert v["gr_control_db"] == pytest.approx(v["gr_measured_db"], abs=1.0)
    h.close()


def test_real_ab_pair_is_loudness_matched():
    # Baseline compressor against a much louder booster: with matching, what
    # is heard from A and from B has the same BS.1770-4 integrated loudness.
    from solderless.engine.design import load_design
    # 50 mV peak: a single note (docs/references.md, common practice); at 200 mV the
    # re-voiced compressor sits more than MAX_MATCH_DB below the booster and
    # the match is (deliberately) capped
    h = H.LiveHost(load_design("feedforward"), variant=load_design("booster"),
                   source=ToneSource(330.0, 0.05), block=256, autosave=False, level_db=-12.0)
    h.run_offline(int(10 * FS / 256))
    assert abs(h.loudness_offset_db) < H.MAX_MATCH_DB
    ya = h.run_offline(int(2 * FS / 256))
    h.select("B")
    h.run_offline(int(0.1 * FS / 256))
    yb = h.run_offline(int(2 * FS / 256))
    assert abs(h.loudness_offset_db) > 3.0               # they did differ
    assert integrated_loudness(ya, FS) == pytest.approx(integrated_loudness(yb, FS), abs=0.3)
    h.close()


def test_scope_tail_gives_exactly_the_last_n_pairs_while_the_writer_moves_on():
    # the audio thread may write more frames between reading the count and
    # reading the frames: the scope still gets exactly n, the newest
    import numpy as np
    from solderless.engine.live.host import scope_tail

    class MovingRing:
        written = 100

        def read_new(self, start):
            self.written += 64                      # the writer moved on meanwhile
            frames = np.stack([np.arange(start, self.written, dtype=float)] * 2, axis=1)
            return frames, self.written, 0

    x, y = scope_tail(MovingRing(), 40)
    assert len(x) == 40 and x[-1] == 163.0 and x[0] == 124.0
    assert len(scope_tail(MovingRing(), 0)[0]) == 0
