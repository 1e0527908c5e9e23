"""The workbench's noise switch and noise-floor readout (pytest-qt,
offscreen): the switch makes the same SetHiss edit as the console's
'hiss' (undoable, sent to the running host), and the readout shows the
noise analysis' floor (docs/references.md, "Noise": the analysis is checked
against ngspice-39 in tests/test_noise.py; A-weighting per IEC 61672-1:2013
Annex E) in the command line's words, recomputed after edits while playing.
"""
from pathlib import Path

import pytest

pytest.importorskip("solderless.engine.solver.simulator")

from solderless.engine.analysis.noise import floor_brief, floor_figures, floor_summary
from solderless.engine.design.edits import SetHiss
from gui_window import open_window

HERE = Path(__file__).resolve().parent


@pytest.fixture
def win(qtbot, tmp_path):
    yield from open_window(qtbot, tmp_path, HERE / "gui_divider.toml")


def _floor_text(design):
    """The readout and its tooltip's last line for ``design``."""
    s = floor_summary(design.flatten(), design.hiss_seed)
    return "floor " + floor_brief(s), "noise floor at the output, 20 Hz-20 kHz: " + \
        floor_figures(s)


def _shown(win):
    lab = win.live.floor_lab
    return lab.text(), lab.toolTip().splitlines()[-1]


def test_noise_switch_and_floor_readout_follow_a_running_host(win, qtbot, artifacts):
    seen = []
    win.wb.applied.connect(seen.append)
    assert not win.live.hiss_btn.isChecked()
    assert _shown(win) == _floor_text(win.wb.design)
    win.live_driver = "paced"
    assert win.start_live()
    assert win.wait_live(300)
    h = win.host
    try:
        win.live.hiss_btn.click()                      # as a user clicks it
        assert seen and seen[-1] == SetHiss(True)      # the console's edit
        assert win.wb.design.hiss and win.wb.undo_text() == "noise on"
        assert win.live.hiss_btn.text() == "Circuit noise: on"
        h.call("flush")
        assert h.call("hiss_state")["on"] and h.call("hiss_state")["sources"] > 0
        assert h.call("designs")[0].hiss
        # an edit while playing: the readout follows the changed circuit
        old = _shown(win)
        win.wb.set_rotation("level.VOL", 0.9)
        assert win.wait_idle(180)
        assert _shown(win) == _floor_text(win.wb.design) != old
        win.grab().save(str(artifacts / "workbench_noise_on.png"))
        # undo the turn, then the switch: the host's noise goes off again
        win.wb.undo()
        win.wb.undo()
        assert not win.wb.design.hiss and not win.live.hiss_btn.isChecked()
        h.call("flush")
        assert not h.call("hiss_state")["on"]
        assert h.state()["error"] is None
    finally:
        win.stop_live()
