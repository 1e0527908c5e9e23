"""Workbench checks (pytest-qt, offscreen): open a design, change parts, see
the operating point and the preview change; undo; A/B differences; autosave
recovery; structural edits survive a save; screenshots of the main views.

The design under test (tests/gui_divider.toml) is small enough to check by
hand: a 100k/47k divider from 9 V biases a unity buffer, then a 10k linear
level pot, a switched shunt capacitor and an output coupling capacitor into
the 1 MΩ load. Expectations come from the voltage-divider rule (Ohm's law),
IEC 60063 tables and the binomial distribution.
"""
import json
import math
from pathlib import Path

import numpy as np
import pytest
from PyQt6.QtCore import Qt

pytest.importorskip("solderless.engine.solver.simulator")

from solderless.engine.design import load_design
from gui_window import open_window
from solderless.gui.app import make_window, screenshot
from solderless.gui.model import Autosave, Difference, differences
from solderless.engine.analysis.trial import BlindTrial

HERE = Path(__file__).resolve().parent
DIVIDER = HERE / "gui_divider.toml"


@pytest.fixture
def win(qtbot, tmp_path, design_file):
    yield from open_window(qtbot, tmp_path, design_file)


def _divider(vs, r_top, r_bottom):
    """Unloaded voltage divider (Ohm's law)."""
    return vs * r_bottom / (r_top + r_bottom)


def _pot_out(rotation, total=10e3, load=1e6):
    """Linear pot as a divider, wiper loaded by ``load`` (Ohm's law)."""
    ra, rb = total * rotation, total * (1 - rotation)
    rl = rb * load / (rb + load)
    return rl / (ra + rl)


def test_edit_changes_op_table_and_preview(win, qtbot):
    # operating point of the bias divider: 9 V * 47k / 147k (Ohm's law)
    assert win.last_op is not None
    v_b = win.inspect.values[("amp.b", "V")]
    assert v_b.startswith("2.878")
    assert math.isclose(dict(((r[1], r[2]), r[3]) for r in win.last_op.rows)[("amp.b", "V")],
                        _divider(9.0, 100e3, 47e3), rel_tol=1e-6)
    out0 = win.last_preview.meters["voices"]["A"]["out_rms_v"]
    trace0 = win.last_preview.series["output level"].copy()
    # type a new value into R2's field, as a user does
    win.chain.select("amp")
    row = win.parts.rows["amp.R2"]
    row.edit.setFocus()
    row.edit.selectAll()
    qtbot.keyClicks(row.edit, "100k")
    qtbot.keyClick(row.edit, Qt.Key.Key_Return)
    assert win.wb.design.part("amp.R2").value == 100e3
    assert win.wait_idle(180)
    assert math.isclose(dict(((r[1], r[2]), r[3]) for r in win.last_op.rows)[("amp.b", "V")],
                        _divider(9.0, 100e3, 100e3), rel_tol=1e-6)
    assert win.inspect.values[("amp.b", "V")].startswith("4.5")
    # turn the level pot from 50 % to 10 %: the output rises by the ratio of
    # the two loaded pot dividers (Ohm's law); the trace follows
    win.chain.select("level")
    win.parts.rows["level.VOL"].dial.setValue(100)
    assert win.wb.design.part("level.VOL").rotation == pytest.approx(0.1)
    assert win.wait_idle(180)
    out1 = win.last_preview.meters["voices"]["A"]["out_rms_v"]
    want_db = 20 * math.log10(_pot_out(0.1) / _pot_out(0.5))
    assert 20 * math.log10(out1 / out0) == pytest.approx(want_db, abs=0.1)
    trace1 = win.last_preview.series["output level"]
    assert trace1[-1] - trace0[-1] == pytest.approx(want_db, abs=0.2)


def test_undo_restores_exact_value(win, qtbot):
    win.chain.select("amp")
    row = win.parts.rows["amp.R2"]
    # Up arrow walks E24 (IEC 60063): 47k -> 51k
    row.edit.setFocus()
    qtbot.keyClick(row.edit, Qt.Key.Key_Up)
    assert win.wb.design.part("amp.R2").value == pytest.approx(51e3)
    win.wb._undo[-1] = win.wb._undo[-1][:3] + (0.0,)     # a separate edit, not merged
    row.edit.selectAll()
    qtbot.keyClicks(row.edit, "68.1k")
    qtbot.keyClick(row.edit, Qt.Key.Key_Return)
    assert win.wb.design.part("amp.R2").value == 68.1e3
    win.wb.undo()
    assert win.wb.design.part("amp.R2").value == pytest.approx(51e3)
    win.wb.undo()
    assert win.wb.design.part("amp.R2").value == 47e3          # exactly what the file said
    assert win.parts.rows["amp.R2"].edit.text() == "47k"
    assert not win.wb.can_undo()
    win.wb.redo()
    assert win.wb.design.part("amp.R2").value == pytest.approx(51e3)
    # the tolerance and the pot taper undo as well
    win.wb.set_tolerance("amp.R2", 0.01)
    win.wb.set_taper("level.VOL", [[0, 0], [0.5, 0.2], [1, 1]])
    win.wb.undo()
    win.wb.undo()
    assert win.wb.design.part("amp.R2").tolerance == 0.05
    assert win.wb.design.part("level.VOL").taper == "linear"


def test_snap_shows_distance_to_nearest_standard_value(win, qtbot):
    win.chain.select("amp")
    win.wb.set_value("amp.R2", 50e3)
    row = win.parts.rows["amp.R2"]
    # E24 neighbours of 50k are 47k and 51k (IEC 60063); 51k is nearer: -2.0 %
    assert "51k" in row.snap.text() and "-2.0 %" in row.snap.text()
    row.snap.click()
    assert win.wb.design.part("amp.R2").value == pytest.approx(51e3)
    # a value that cannot be read turns the field red and changes nothing
    row.edit.setFocus()
    row.edit.selectAll()
    qtbot.keyClicks(row.edit, "4k7k")
    assert row.edit.property("valid") == "false"
    qtbot.keyClick(row.edit, Qt.Key.Key_Return)
    assert win.wb.design.part("amp.R2").value == pytest.approx(51e3)


def test_ab_difference_list_is_exact(win):
    wb = win.wb
    wb.take_snapshot("base", "as drawn")
    wb.set_value("amp.R2", 100e3)
    wb.set_rotation("level.VOL", 0.25)
    wb.set_position("level.SW", 1)
    wb.set_value("amp.R1", 100e3 * (1 + 1e-12))      # a change too small to print
    wb.take_snapshot("mod", "")
    got = differences(wb.snapshot("base").design, wb.snapshot("mod").design)
    assert got == [
        Difference("amp.R1", "value", repr(100e3), repr(100e3 * (1 + 1e-12))),
        Difference("amp.R2", "value", "47 kΩ", "100 kΩ"),
        Difference("level.VOL", "rotation", "50 %", "25 %"),
        Difference("level.SW", "position", "bright", "dark"),
    ]
    assert differences(wb.snapshot("mod").design, wb.design) == []
    win.compare.refresh()
    win.compare.a.setCurrentText("base")
    win.compare.b.setCurrentText("mod")
    assert win.compare.diff.rowCount() == 4
    assert win.compare.diff.item(1, 2).text() == "47 kΩ"
    # recall is an edit like any other: undo returns to where we were
    wb.recall_snapshot("base")
    assert wb.design.part("amp.R2").value == 47e3
    wb.undo()
    assert wb.design.part("amp.R2").value == 100e3


class _Clock:
    """A clock the test advances by hand (listening time without waiting)."""

    def __init__(self):
        self.t = 0.0

    def __call__(self):
        return self.t


def _listen(t, clock, seconds):
    t.listen_start()
    clock.t += seconds
    t.listen_stop()


def test_blind_trial_probability():
    # P(X >= k) for X ~ Binomial(n, 1/2): 10 of 10 -> 1/1024; 7 of 10 ->
    # (C(10,7)+C(10,8)+C(10,9)+C(10,10))/1024 = 176/1024 (binomial
    # distribution), the same as scipy.stats.binomtest(..., alternative="greater")
    from scipy.stats import binomtest
    clock = _Clock()
    t = BlindTrial(10, seed=1, min_listen_s=2.0, clock=clock)
    while not t.done:
        _listen(t, clock, 2.5)
        t.answer(t.hidden)
    assert t.score == 10
    assert t.p_value() == pytest.approx(1 / 1024, rel=1e-12)
    t = BlindTrial(10, seed=2, min_listen_s=2.0, clock=clock)
    k = 0
    while not t.done:
        _listen(t, clock, 2.0)
        guess = t.hidden if k < 7 else ("B" if t.hidden == "A" else "A")
        t.answer(guess)
        k += 1
    assert t.score == 7
    want = sum(math.comb(10, j) for j in range(7, 11)) / 2 ** 10
    assert want == 176 / 1024
    assert t.p_value() == pytest.approx(want, rel=1e-12)
    assert t.p_value() == pytest.approx(binomtest(7, 10, 0.5, alternative="greater").pvalue,
                                        rel=1e-12)


def test_blind_trial_needs_listening_and_logs_every_round():
    from solderless.engine.analysis.trial import TrialError
    clock = _Clock()
    t = BlindTrial(4, seed=3, min_listen_s=2.0, clock=clock)
    # no answer before X has been heard for the minimum time, in one or more goes
    with pytest.raises(TrialError, match="listen to X first"):
        t.answer("A")
    _listen(t, clock, 1.5)
    with pytest.raises(TrialError, match="1.5 s of the 2 s"):
        t.answer("A")
    _listen(t, clock, 0.75)
    hidden = []
    while not t.done:
        hidden.append(t.hidden)
        t.answer("A")
        _listen(t, clock, 3.0)
    assert len(t.log) == 4 and [e.round for e in t.log] == [1, 2, 3, 4]
    assert [e.hidden for e in t.log] == hidden
    assert t.log[0].listened_s == pytest.approx(2.25)
    assert all(e.answer == "A" for e in t.log)
    rows = t.csv_text("baseline", "mod").splitlines()
    assert rows[0] == "time,round,hidden,answer,correct,listened_s"
    assert rows[1].split(",")[1:] == ["1", hidden[0], "A",
                                      "yes" if hidden[0] == "A" else "no", "2.25"]
    assert f"score,{hidden.count('A')} of 4" in rows


def test_corrupted_autosave_does_not_stop_startup(qtbot, tmp_path, design_file):
    cfg = tmp_path / "cfg"
    folder = cfg / "autosave"
    folder.mkdir(parents=True)
    (folder / "0123abcd.toml").write_text("[design\nname = broken ~~~\n\x00", encoding="utf-8")
    (folder / "0123abcd.json").write_text("{not json", encoding="utf-8")
    w = make_window(load_design(design_file), config=cfg, recover="ask")
    qtbot.addWidget(w)
    w.ask = lambda _q: "discard"
    texts = " ".join(w.notices.texts())
    assert "could not be read" in texts
    assert (folder / "0123abcd.toml.unreadable").exists()
    assert w.wb.design.name == "divider bench"
    w.close()


def test_autosave_recovers_unsaved_work(qtbot, tmp_path, design_file):
    cfg = tmp_path / "cfg"
    w = make_window(load_design(design_file), config=cfg, recover="no")
    qtbot.addWidget(w)
    w.ask = lambda _q: "discard"
    w.wb.set_value("amp.R2", 82e3)
    assert w.autosave_now() is not None
    # simulate a crash: the window goes away without a clean exit
    w.autosave_timer.stop()
    w.analyser.shutdown()
    w.deleteLater()
    w2 = make_window(load_design(design_file), config=cfg, recover="yes")
    qtbot.addWidget(w2)
    w2.ask = lambda _q: "discard"
    assert w2.wb.design.part("amp.R2").value == 82e3
    assert w2.wb.dirty
    assert Path(w2.wb.design.path) == design_file.resolve()
    w2.close()


def test_discard_prompt_guards_unsaved_work(win, tmp_path):
    win.wb.set_value("amp.R2", 10e3)
    win.ask = lambda _q: "cancel"
    assert not win.open_path(DIVIDER)
    assert win.wb.design.part("amp.R2").value == 10e3
    win.ask = lambda _q: "save"
    assert win.open_path(DIVIDER)
    # the save went to the design's own file, atomically, and reads back
    assert load_design(tmp_path / "divider.toml").part("amp.R2").value == 10e3


def test_opening_an_exported_netlist_shows_its_warnings(win, tmp_path):
    net = tmp_path / "exported.cir"
    net.write_text("* exported\nV1 vcc 0 DC 9\nV2 /in 0 SIN(0 0.1 1k)\n"
                   "R1 vcc Net-(R1-Pad2) 47k\nR2 Net-(R1-Pad2) 0 10k\n"
                   "C1 /in Net-(R1-Pad2) 100n\nR3 Net-(R1-Pad2) out 1k\nR4 out 0 100k\n.end\n")
    win.ask = lambda _q: "discard"
    assert win.open_path(net)
    texts = " ".join(win.notices.texts())
    assert "V2" in texts and "only signal source" in texts


def test_structural_edits_save_and_undo(win, tmp_path):
    wb = win.wb
    before = [s.name for s in wb.design.stages]
    dup = wb.duplicate_stage("amp")
    assert [s.name for s in wb.design.stages] == ["amp", dup, "level"]
    wb.move_stage("level", -2)
    assert [s.name for s in wb.design.stages] == ["level", "amp", dup]
    wb.add_link(("amp", "env"), ("level", "ctl"))
    wb.set_bypass(dup, True)
    target = tmp_path / "edited.toml"
    assert win.save(target)
    back = load_design(target)
    assert [s.name for s in back.stages] == ["level", "amp", dup]
    assert back.stage(dup).bypass
    assert [(ln.a, ln.b) for ln in back.links] == [(("amp", "env"), ("level", "ctl"))]
    wb.remove_stage(dup)
    assert [s.name for s in wb.design.stages] == ["level", "amp"]
    for _ in range(5):
        wb.undo()
    assert [s.name for s in wb.design.stages] == before
    assert wb.design.links == []
    # a stage from the library lands after the selected one
    win.chain.select("amp")
    lib = sorted(__import__("solderless.engine.design", fromlist=["x"]).stage_library())
    win.add_stage(lib[0])
    assert len(wb.design.stages) == 3 and wb.design.stages[1].template == lib[0]


def test_screenshots_of_main_views(win, artifacts):
    win.chain.select("level")
    for i, name in enumerate(("live", "inside", "compare")):
        win.tabs.setCurrentIndex(i)
        out = screenshot(win, artifacts / f"gui_{name}.png")
        assert out.stat().st_size > 10_000
    assert win.inspect.table.rowCount() > 0


def test_flagship_screenshot(qtbot, tmp_path, artifacts):
    if "flagship" not in __import__("solderless.engine.design", fromlist=["x"]).builtin_designs():
        pytest.skip("no flagship design")
    w = make_window("flagship", config=tmp_path / "cfg", recover="no", seconds=2.0)
    qtbot.addWidget(w)
    w.ask = lambda _q: "discard"
    w.show()
    screenshot(w, artifacts / "gui_flagship.png")
    assert w.last_preview is not None and w.last_op is not None
    # the header names a built-in design, never the folder it is installed in
    assert w.file_lab.text().strip() == "built-in design: flagship"
    assert str(Path(__file__).resolve().parent.parent) not in w.file_lab.text()
    w.close()


def test_header_names_files_without_machine_paths(tmp_path):
    from solderless.gui.window import design_location
    from solderless.engine.design import builtin_designs
    assert design_location(builtin_designs()["octave-up"]) == "built-in design: octave-up"
    assert design_location(None) == "(not saved)"
    mine = Path.home() / "solderless-header-check.toml"
    assert design_location(mine) == "~/solderless-header-check.toml"
    other = tmp_path / "x.toml"
    home = Path.home().resolve()
    if other.resolve().is_relative_to(home):
        assert design_location(other) == "~/" + str(other.resolve().relative_to(home))
    else:
        assert design_location(other) == str(other)


def test_offline_ab_matches_loudness(win):
    # B is A with the level pot turned from 50 % to 10 %: B is louder by the
    # ratio of the loaded pot dividers (Ohm's law); the host's BS.1770 match
    # reports A minus B in LU, which for the same tone is that ratio in dB
    # (ITU-R BS.1770-4: loudness is a level of the K-weighted mean square).
    win.wb.take_snapshot("half", "")
    win.wb.set_rotation("level.VOL", 0.1)
    win.wb.take_snapshot("tenth", "")
    win.compare.refresh()
    win.live.run_btn.setEnabled(False)          # as on a machine without an audio device
    win.start_ab("half", "tenth")
    assert win.wait_idle(180)
    want = 20 * math.log10(_pot_out(0.5) / _pot_out(0.1))
    assert win.last_ab.offset_db == pytest.approx(want, abs=0.2)
    assert "LU" in win.compare.match.text()


def test_import_netlist_as_stage(win, tmp_path):
    # a first-order RC low-pass as a SPICE netlist whose nets in/out are the ports
    net = tmp_path / "sub" / "rc.cir"
    net.parent.mkdir()
    net.write_text("RC low-pass\nR1 in out 10k\nC1 out 0 10n\n.end\n")
    name = win.wb.import_stage(str(net))
    assert name == "rc"
    st = win.wb.design.stage("rc")
    assert [p.name for p in st.parts] == ["R1", "C1"]
    assert st.part("R1").value == 10e3
    target = tmp_path / "with-rc.toml"
    assert win.save(target)
    back = load_design(target)
    assert [s.name for s in back.stages] == ["amp", "level", "rc"]
    assert back.stage("rc").part("C1").value == pytest.approx(10e-9)
    # the netlist path is stored relative to the design file
    assert 'netlist = "sub/rc.cir"' in target.read_text()


def _play_paced(win):
    """Start the workbench's live host on a 1 kHz tone, paced by a clock
    instead of a sound card; returns the host (stop it with stop_live)."""
    win.live.source.setCurrentIndex(win.live.source.findData("tone:1000:0.1"))
    win.live_driver = "paced"
    assert win.start_live()
    assert win.wait_live(300)
    return win.host


def test_edits_and_undo_reach_a_running_host(win):
    # the live host runs in its own process, paced by a clock instead of a
    # sound card; its simulator's element values are read back from there
    h = _play_paced(win)
    try:
        win.wb.set_value("amp.R2", 100e3)
        win.wb.set_rotation("level.VOL", 0.2)
        win.wb.set_taper("level.VOL", "audio")
        h.call("flush")
        vals = h.call("element_values")
        assert vals["amp.R2"] == 100e3
        # audio taper: 10 % of the track at half rotation, exponential law
        # (docs/design-format.md); at 20 %: (81**0.2 - 1) / 80
        frac = (81 ** 0.2 - 1) / 80
        assert vals["level.VOL.a"] == pytest.approx(10e3 * frac, rel=1e-9)
        for _ in range(3):
            win.wb.undo()
        h.call("flush")
        vals = h.call("element_values")
        assert vals["amp.R2"] == 47e3
        assert vals["level.VOL.a"] == pytest.approx(5e3, rel=1e-9)
        assert next(p for p in h.parts() if p.qualname == "level.VOL").taper == "linear"
    finally:
        win.stop_live()


def test_a_structural_edit_crossfades_in_the_running_host(win):
    # a bypass, a new stage and their undo reach the running host as the
    # same edits (data) the workbench applied: the host process keeps
    # running and swaps circuits, as it does for the console's edits
    h = _play_paced(win)
    try:
        win.wb.set_bypass("level", True)
        name = win.wb.add_stage("output/volume")
        h.call("flush")
        host_design = h.call("designs")[0]
        assert win.host is h and h.proc.is_alive()
        assert host_design.doc is None            # one TOML document: the workbench's
        assert host_design.stage("level").bypass
        assert [s.name for s in host_design.stages] == [s.name for s in win.wb.design.stages]
        assert name in [s.name for s in host_design.stages]
        win.wb.undo()
        win.wb.undo()
        h.call("flush")
        host_design = h.call("designs")[0]
        assert [s.name for s in host_design.stages] == ["amp", "level"]
        assert not host_design.stage("level").bypass
        assert h.state()["error"] is None
    finally:
        win.stop_live()


def test_live_scope_meters_and_traces_show_the_running_host(win, qtbot, artifacts):
    import time
    win.live.source.setCurrentIndex(win.live.source.findData("tone:1000:0.1"))
    win.live_driver = "paced"
    assert win.start_live()
    assert win.wait_live(300)
    try:
        t_end = time.monotonic() + 2.0
        while time.monotonic() < t_end:
            qtbot.wait(50)
        x, y = win.live.scope_curve.getData()
        # the scope shows the live 1 kHz, 100 mV peak test tone at the input
        # (its shared-memory capture, 50 ms = 50 cycles)
        assert x is not None and len(x) >= 1000
        assert np.max(x) == pytest.approx(0.1, rel=0.01)
        assert np.min(x) == pytest.approx(-0.1, rel=0.01)
        # output against input of a linear chain (buffer, pot divider, RC) is
        # close to a straight line at 1 kHz: the output follows the input
        assert np.corrcoef(x, y)[0, 1] ** 2 > 0.9
        assert win.live.m_in.value is not None
        # a 100 mV peak sine against the +3 dBu full scale (1.548 V peak, AES17 RMS)
        assert win.live.m_in.value == pytest.approx(20 * math.log10(0.1 / 1.5482), abs=0.2)
        assert win.live.state.value.startswith("LIVE")
        win.live.grab().save(str(artifacts / "gui_live_playing.png"))
    finally:
        win.stop_live()


def test_caution_is_shown_once(qtbot, tmp_path, design_file):
    cfg = tmp_path / "cfg"
    seen = []
    for _ in range(2):
        w = make_window(load_design(design_file), config=cfg, recover="no")
        qtbot.addWidget(w)
        w.ask = lambda _q: "discard"
        seen.append(any("Listening levels" in t for t in w.notices.texts()))
        w.close()
    assert seen == [True, False]
    # one flag for every front end: shown by the workbench, not again by play
    from solderless.engine.settings import caution_once
    assert caution_once(seen.append, cfg) is False
    # and the other way round
    cfg2 = tmp_path / "cfg2"
    assert caution_once(seen.append, cfg2) is True
    w = make_window(load_design(design_file), config=cfg2, recover="no")
    qtbot.addWidget(w)
    w.ask = lambda _q: "discard"
    assert not any("Listening levels" in t for t in w.notices.texts())
    w.close()


def test_pot_switch_and_custom_law_controls(win, qtbot):
    win.chain.select("level")
    row = win.parts.rows["level.VOL"]
    # arrow keys on the dial turn the pot 1 % per press (common practice for
    # fine control; our own step size)
    row.dial.setFocus()
    qtbot.keyClick(row.dial, Qt.Key.Key_Up)
    assert win.wb.design.part("level.VOL").rotation == pytest.approx(0.51)
    # both resistances are shown: a-w = 10k * 0.51, w-b = the rest (linear law)
    assert row.ra.text() == "a–w 5.1 kΩ" and row.rb.text() == "w–b 4.9 kΩ"
    # choosing the custom law samples the current law at five points ...
    row.taper.setCurrentIndex(row.taper.findData("custom"))
    row.taper.activated.emit(row.taper.currentIndex())
    law = win.wb.design.part("level.VOL").taper
    assert law == [[0, 0.0], [0.25, 0.25], [0.5, 0.5], [0.75, 0.75], [1, 1.0]]
    # ... which can be dragged: moving the middle point to 0.2 makes the law
    # pass through (0.5, 0.2), interpolated linearly in between
    row = win.parts.rows["level.VOL"]
    handle = row.plot.handles[2]
    handle.setPos((0.5, 0.2))
    row.plot._dropped()
    law = win.wb.design.part("level.VOL").taper
    assert law[2] == [0.5, 0.2]
    ra, rb = win.wb.design.pot_resistances(win.wb.design.part("level.VOL"))
    # rotation 0.51 lies between (0.5, 0.2) and (0.75, 0.75): 0.2 + 0.01/0.25 * 0.55
    assert ra == pytest.approx(10e3 * (0.2 + 0.01 / 0.25 * 0.55), rel=1e-9)
    # a switch is a row of position buttons; choosing one rebuilds the circuit
    sw = win.parts.rows["level.SW"]
    with qtbot.waitSignal(win.wb.structure_changed, timeout=2000):
        sw.group.button(1).click()
    assert win.wb.design.part("level.SW").position == 1
    assert sw.group.button(1).isChecked()


def test_refused_value_is_explained_and_changes_nothing(win, qtbot):
    win.chain.select("amp")
    row = win.parts.rows["amp.R2"]
    row.edit.setFocus()
    row.edit.selectAll()
    qtbot.keyClicks(row.edit, "-1k")
    qtbot.keyClick(row.edit, Qt.Key.Key_Return)
    assert win.wb.design.part("amp.R2").value == 47e3
    msg = win.statusBar().currentMessage()
    assert "amp.R2" in msg and "positive" in msg
    assert not win.wb.can_undo()
