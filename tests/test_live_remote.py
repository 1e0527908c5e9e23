"""The live host in its own process, through real PortAudio on ALSA null."""
import os
import time

import numpy as np
import pytest

from solderless.engine.errors import DesignError, SolderlessError
from solderless.engine.live.remote import HostProcess

pytestmark = pytest.mark.audio


@pytest.fixture
def null_home(tmp_path, monkeypatch):
    # the child is spawned fresh, so PortAudio there reads this HOME's .asoundrc
    home = tmp_path / "home"
    home.mkdir()
    (home / ".asoundrc").write_text("pcm.!default {\n    type null\n}\n")
    monkeypatch.setenv("HOME", str(home))
    monkeypatch.setenv("XDG_CONFIG_HOME", str(home / ".config"))
    return home


def test_host_process_streams_takes_edits_and_reports_meters(null_home):
    with HostProcess("booster", source="tone:440:100m", block=128, start=True) as hp:
        s0 = hp.state()
        assert s0["running"] and s0["error"] is None
        m = hp.meters()          # read here from the child's shared-memory ring
        t_end = time.monotonic() + 60    # the first metered block may still be on its way
        while m["blocks"] == 0 and time.monotonic() < t_end:
            time.sleep(0.01)
            m = hp.meters()
        # sampled 440 Hz sine: the largest sample is within 1 - cos(pi f / fs)
        # = 4.3e-4 of the crest (a sample falls within half a sample step of it)
        assert m["input"]["peak_v"] == pytest.approx(0.1, rel=4.3e-4)
        assert m["input"]["peak_v"] <= 0.1 * (1 + 1e-9)
        new = hp.step_value("boost.C1", 1)           # E12 for capacitors: 100n -> 120n
        assert new == pytest.approx(120e-9)
        assert any(p.qualname == "boost.C1" and p.value == pytest.approx(120e-9)
                   for p in hp.parts())
        frames, lost = hp.frames()
        assert frames.shape[0] > 0
        # the scope capture: input column is the tone, 100 mV peak, kept at
        # 24 kHz (every 2nd sample): within 1 - cos(pi 440 / 24000) = 1.7e-3
        t_end = time.monotonic() + 60
        while hp.scope.written < 2400 and time.monotonic() < t_end:
            time.sleep(0.01)
        x, y = hp.scope_latest(2400)
        assert len(x) == 2400 and np.max(np.abs(x)) == pytest.approx(0.1, rel=1.7e-3)
        # an edit posted without waiting is answered later
        fut = hp.post("set_value", "boost.C1", 100e-9)
        assert fut.result(60) == pytest.approx(100e-9)
        with pytest.raises(DesignError, match="no part named"):
            hp.set_value("boost.R99", 1e3)
        assert hp.state()["blocks"] > s0["blocks"]


def test_host_process_reports_a_bad_design_as_a_user_error(null_home):
    with pytest.raises(SolderlessError, match="no design file or built-in design"):
        HostProcess("no-such-design", source="tone")
