"""Workbench journeys and the defects found when a designer, a player and an
engineer tried it (issue 16): built-in designs are read-only, the blind
trial is blind, edits while playing re-measure the gain-reduction reference,
Stop says stopped, silent signals do not break the plots, meters are named
and only shown where they mean something.

Expectations come from Ohm's law (divider rule), the binomial distribution
(scipy.stats.binom, binomtest) and the design files themselves.
"""
import math
import random
import shutil
import time
from pathlib import Path

import numpy as np
import pytest
from PyQt6.QtWidgets import QAbstractButton, QLabel, QLineEdit, QComboBox

pytest.importorskip("engine.solver.simulator")

from engine.design import PRESETS, load_design
from gui.app import make_window

HERE = Path(__file__).resolve().parent
DIVIDER = HERE / "gui_divider.toml"


@pytest.fixture
def design_file(tmp_path):
    p = tmp_path / "divider.toml"
    shutil.copy(DIVIDER, p)
    return p


def _window(qtbot, tmp_path, design, **kw):
    w = make_window(design, config=tmp_path / "cfg", recover="no",
                    source=kw.pop("source", "tone:1000:0.1"), seconds=kw.pop("seconds", 1.0))
    w.ask = lambda _q: "discard"
    qtbot.addWidget(w)
    w.resize(1480, 940)
    w.show()
    assert w.wait_idle(240)
    return w


@pytest.fixture
def win(qtbot, tmp_path, design_file):
    w = _window(qtbot, tmp_path, load_design(design_file))
    said = []
    w.said = said
    orig = w.say
    w.say = lambda text: (said.append(text), orig(text))
    yield w
    w.ask = lambda _q: "discard"
    w.close()


def _divider_gain_db(rotation):
    """Small-signal gain of tests/gui_divider.toml at 1 kHz (Ohm's law): the
    1k source into R1 || R2 (100k || 47k) through C1 (1 µF, 159 Ω at 1 kHz),
    a unity buffer, then the linear 10k pot (a-w = 10k * rotation) loaded by
    the 1 MΩ output load."""
    rb = 100e3 * 47e3 / 147e3
    zc = 1 / (2j * math.pi * 1000 * 1e-6)
    front = abs(rb / (rb + 1e3 + zc))
    ra, rw = 10e3 * rotation, 10e3 * (1 - rotation)
    rl = rw * 1e6 / (rw + 1e6)
    return 20 * math.log10(front * rl / (ra + rl))


def _wait(qtbot, cond, timeout_s=60.0):
    t_end = time.monotonic() + timeout_s
    while time.monotonic() < t_end:
        if cond():
            return True
        qtbot.wait(30)
    return cond()


# ------------------------------------------------------------ built-ins are read-only

def test_save_on_a_builtin_design_saves_a_copy_in_the_user_folder(qtbot, tmp_path):
    builtin = PRESETS / "designs" / "booster.toml"
    before = builtin.read_bytes()
    w = _window(qtbot, tmp_path, "booster")
    try:
        asked = []
        w.ask_path = lambda suggested: (asked.append(Path(suggested)), suggested)[1]
        pot = next(p for p in w.wb.design.parts() if p.type == "pot")
        w.wb.set_rotation(pot.qualname, 0.3)
        assert w.save()                      # Ctrl+S on a built-in
        assert builtin.read_bytes() == before
        # Save became Save as, offered in the user's designs folder
        assert asked and asked[0].parent == w.user_designs_dir()
        saved = asked[0]
        assert saved.exists() and w.wb.design.path == saved and not w.wb.dirty
        assert load_design(saved).part(pot.qualname).rotation == pytest.approx(0.3)
        # an explicit path inside presets/ is refused too, nothing written
        assert not w.save(builtin)
        assert builtin.read_bytes() == before
        assert any("built-in" in t for t in w.notices.texts())
        # saving the copy again writes the copy, without asking
        asked.clear()
        w.wb.set_rotation(pot.qualname, 0.4)
        assert w.save() and not asked
        assert load_design(saved).part(pot.qualname).rotation == pytest.approx(0.4)
    finally:
        w.close()


# ------------------------------------------------------------ playing

def _play(win):
    win.live.source.setCurrentIndex(win.live.source.findData("tone:1000:0.1"))
    win.live_driver = "paced"
    assert win.start_live()
    assert win.wait_live(300)


def test_edit_while_playing_re_measures_the_gain_reference(win, qtbot):
    _play(win)
    h = win.host
    try:
        assert _wait(qtbot, lambda: h.meter.small_signal_gain_db[0] is not None)
        assert h.meter.small_signal_gain_db[0] == pytest.approx(_divider_gain_db(0.5), abs=0.05)
        win.wb.set_rotation("level.VOL", 0.2)
        # the reference follows the edit (measured again, not left stale):
        # +4.1 dB from the divider's change, here and in the host process
        assert _divider_gain_db(0.2) - _divider_gain_db(0.5) == pytest.approx(4.1, abs=0.1)
        assert _wait(qtbot, lambda: h.measurements >= 1
                     and h.meter.small_signal_gain_db[0] == pytest.approx(
                         _divider_gain_db(0.2), abs=0.05), 120)
        assert h.call("meter_setup")["small_signal_gain_db"][0] == pytest.approx(
            _divider_gain_db(0.2), abs=0.05)
        assert not [m for m in win.said if "re-measure" in m or "daemonic" in m]
    finally:
        win.stop_live()
    # after Stop: the panel says so and no reading pretends to be live
    assert win.live.state.value == "stopped"
    assert all(m.value is None for m in (win.live.m_in, win.live.m_out,
                                         win.live.m_ctl, win.live.m_gr))
    assert not win.meter_timer.isActive()
    assert not win.live.run_btn.isChecked()


def test_silent_and_degenerate_signals_draw_without_errors(win, qtbot):
    # silence, denormal values and NaN once made pyqtgraph's axis divide by a
    # zero tick spacing (ZeroDivisionError in paint, every frame)
    lp = win.live
    with qtbot.captureExceptions() as caught:
        for x in (np.zeros(500), np.full(500, 1e-310), np.array([np.nan] * 500),
                  np.concatenate([np.zeros(499), [5e-324]])):
            lp.show_scope(x, x.copy())
            lp.scope.grab()
        lp.clear_live()
        lp.hist_t.extend([0, 0, 0])
        for k in ("gain reduction", "control current", "probe"):
            lp.hist[k] = __import__("collections").deque([0.0, 0.0, 0.0])
        lp.redraw_live(0.0, 0)               # no sample rate yet
        lp.redraw_live(48000.0, 64)          # three identical instants
        lp.traces.set_x_range(1.0, 1.0)      # an empty time span
        lp.traces.grab()
        lp.traces.set_x_range(-5.0, 0.0)
        lp.traces.grab()
    assert not caught, caught
    # the axes keep at least +-1 mV (SCOPE_MIN_V)
    vr = lp.scope.getViewBox().viewRange()
    assert vr[0][1] - vr[0][0] >= 2e-3 * 0.99
