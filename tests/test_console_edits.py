"""Console and design-file edits for issue 16: taper (linear / audio /
reverse / custom), per-part model override in design files, pot stepping
through the values pots are made in, saved files with the user's umask,
designs listing whole sentences, ac options explained."""
import os
import stat

import pytest

from solderless.app.cli import build_parser, main
from solderless.engine.design import load_design, taper_fraction
from solderless.engine.live import host as H
from solderless.app.console import Console
from solderless.engine.live.source import ToneSource


@pytest.fixture
def booster_host():
    h = H.LiveHost(load_design("booster"), source=ToneSource(440.0, 0.01), block=256,
                   autosave=False)
    h.prepare()
    yield h
    h.close()


def _console(h):
    """A console on host h and the list of what it says."""
    said = []
    return Console(h, say=said.append), said


def test_taper_command_sets_each_law(booster_host):
    h = booster_host
    con, said = _console(h)
    con.handle("pick output.VOLUME")
    con.handle("turn 0.5")
    h.flush()               # the pot ramps in the background; let it arrive
    for word, law in (("linear", "linear"), ("audio", "audio"), ("reverse", "reverse-audio")):
        con.handle(f"taper {word}")
        assert h.part_info("output.VOLUME").taper == law
    # linear: half the track at half rotation; audio: 10 % (the audio taper's
    # definition in docs/design-format.md, common practice); reverse: 90 %
    assert taper_fraction("linear", 0.5) == pytest.approx(0.5)
    assert taper_fraction("audio", 0.5) == pytest.approx(0.1, abs=1e-9)
    assert "wiper sits at 90.0 % of the track" in said[-1]
    con.handle("taper custom 0:0,0.5:0.3,1:1")
    assert h.part_info("output.VOLUME").taper == [[0.0, 0.0], [0.5, 0.3], [1.0, 1.0]]
    assert "wiper sits at 30.0 % of the track" in said[-1]
    con.handle("taper sideways")
    assert said[-1].startswith("error: unknown taper")
    con.handle("pick boost.C1")
    con.handle("taper linear")
    assert said[-1].startswith("error:") and "only a pot has a taper" in said[-1]


def test_pots_step_through_the_values_pots_are_made_in(booster_host):
    # 1-2-2.5-5 per decade (docs/references.md, "Building from a simulation"),
    # the same table the build sheet snaps a pot to
    from solderless.engine.analysis.build import snap_pot
    h = booster_host
    con, said = _console(h)
    con.handle("pick output.VOLUME")            # 100k
    con.handle("up")
    assert h.part_info("output.VOLUME").value == pytest.approx(200e3)
    con.handle("up")
    assert h.part_info("output.VOLUME").value == pytest.approx(250e3)
    con.handle("down 3")
    assert h.part_info("output.VOLUME").value == pytest.approx(50e3)
    assert snap_pot(h.part_info("output.VOLUME").value) == pytest.approx(50e3)


def test_model_override_in_the_design_file(tmp_path):
    d = load_design("overdrive")
    d.set_model("clip.D1", "led-red")
    target = tmp_path / "led.toml"
    d.save(target)
    text = target.read_text()
    assert "[stage.models]" in text and 'D1 = "led-red"' in text
    d2 = load_design(target)
    assert d2.part("clip.D1").model == "led-red"
    assert d2.flatten().element("clip.D1").params["MODEL"] == "led-red"
    # a model of the wrong kind is refused with the file and the part named
    bad = tmp_path / "bad.toml"
    bad.write_text(text.replace('D1 = "led-red"', 'D1 = "npn-general"'))
    with pytest.raises(Exception, match="npn-general"):
        load_design(bad).flatten()


def test_saved_files_follow_the_umask(tmp_path):
    old = os.umask(0o022)
    try:
        p = load_design("booster").save(tmp_path / "b.toml")
        assert stat.S_IMODE(os.stat(p).st_mode) == 0o644
        os.umask(0o027)
        p2 = load_design("booster").save(tmp_path / "c.toml")
        assert stat.S_IMODE(os.stat(p2).st_mode) == 0o640
    finally:
        os.umask(old)


def test_designs_lists_whole_sentences_and_variants_say_what_they_change(capsys):
    assert main(["designs"]) == 0
    out = capsys.readouterr().out
    block = out.split("Stage library:")[0]
    import re
    entries = [e.strip() for e in re.split(r"\n(?=  \S)", block)
               if e.strip() and not e.startswith("Built-in")]
    for e in entries:
        assert " ".join(e.split()).rstrip().endswith((".", ")", "!")), e
    variants = [e for e in entries if "variant of" in e]
    assert variants
    for v in variants:
        base = v.split("variant of ")[1].split(".")[0]
        base_text = next(e for e in entries if e.split()[0] == base)
        first = base_text.split(": ", 1)[1].split(".")[0]
        assert first not in v                    # the base's description is not repeated


def test_ac_options_have_help_units_and_the_workbench_range():
    from solderless.engine.solver.ac import DEFAULT_FMAX_HZ, DEFAULT_FMIN_HZ, default_frequencies
    ap = build_parser()
    sub = ap._subparsers._group_actions[0].choices["ac"]
    helps = {a.dest: a.help for a in sub._actions}
    assert "Hz" in helps["fmin"] and "Hz" in helps["fmax"] and helps["points"]
    a = ap.parse_args(["ac"])
    f = default_frequencies()
    assert (a.fmin, a.fmax) == (DEFAULT_FMIN_HZ, DEFAULT_FMAX_HZ) == (f[0], f[-1])


def test_the_autosave_message_names_the_files_really_written(tmp_path):
    # only B is edited: only B's autosave file is written and named
    h = H.LiveHost(load_design("booster"), variant=load_design("booster"),
                   source=ToneSource(440.0, 0.01), block=256,
                   autosave=tmp_path / "auto" / "mine.toml")
    h.prepare()
    h.select("B")
    h.set_value("boost.C1", 220e-9).result(30)
    assert h.autosaved_paths() == [str(tmp_path / "auto" / "mine-B.toml")]
    assert (tmp_path / "auto" / "mine-B.toml").exists()
    assert not (tmp_path / "auto" / "mine.toml").exists()
    h.close()


def test_a_typed_value_is_echoed_and_an_unreal_one_is_named(booster_host):
    # a refused value is quoted as typed; one outside the range of real parts
    # (solderless/engine/sanity.py VALUE_RANGES, common practice) is kept but
    # named, as a design file with that value would be
    h = booster_host
    con, said = _console(h)
    con.handle("pick boost.RC")
    con.handle("value -1k")
    assert said[-1].startswith("error:") and said[-1].endswith("not -1k")
    assert h.part_info("boost.RC").value == pytest.approx(10e3)
    con.handle("value 1e15")
    assert said[-1].startswith("warning: part 'boost.RC': resistance 1e+15 ohm is outside")
    con.handle("value 2k2")
    assert not said[-1].startswith("warning")
