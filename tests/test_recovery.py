"""Autosave and recovery (issue 17): one scheme for every front end
(solderless/engine/autosave.py). An autosave stays on offer until the user decides;
a scripted run does not consume it; the workbench offers only its own
autosaves, never the console's copies; a running session's files are not
offered to another process; one config-folder function serves everyone.
"""
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from solderless.engine.autosave import Autosaves
from solderless.engine.settings import config_dir

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent


def _snapshot(folder: Path) -> dict:
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir())} if folder.is_dir() else {}


# ------------------------------------------------------------ the scheme itself
def test_one_config_folder_for_every_front_end(monkeypatch, tmp_path):
    from solderless.engine import autosave
    from solderless.engine.live import host
    monkeypatch.delenv("SOLDERLESS_CONFIG_DIR", raising=False)
    monkeypatch.setenv("XDG_CONFIG_HOME", str(tmp_path / "x"))
    assert config_dir() == tmp_path / "x" / "solderless"
    assert host.config_dir is config_dir and autosave.config_dir is config_dir
    monkeypatch.setenv("SOLDERLESS_CONFIG_DIR", str(tmp_path / "mine"))
    assert host.config_dir() == autosave.config_dir() == tmp_path / "mine"
    assert Autosaves().folder == tmp_path / "mine" / "autosave"
    # no second config-folder function anywhere in the package
    defs = [p for p in (ROOT / "solderless").rglob("*.py")
            if "def config_dir(" in p.read_text(encoding="utf-8")]
    assert defs == [ROOT / "solderless" / "engine" / "settings.py"]


def test_front_ends_and_sessions_are_told_apart(tmp_path, design_file):
    wb_old = Autosaves(tmp_path, "workbench")
    con = Autosaves(tmp_path, "console")
    text = design_file.read_text()
    a = wb_old.write(text, key=wb_old.key(design_file, "x"), name="divider", origin=design_file)
    c = con.write(text, key=con.key(design_file, "x"), name="divider", origin=design_file)
    assert a.name.startswith("workbench-") and c.name.startswith("console-")
    assert json.loads(a.with_suffix(".json").read_text())["front_end"] == "workbench"
    # a later workbench session (same design) neither sees the console's copy
    # nor overwrites the earlier session's file
    wb_new = Autosaves(tmp_path, "workbench")
    wb_new.session += "-later"
    assert [e.path for e in wb_new.pending()] == [a]
    b = wb_new.write(text + "\n# newer\n", key=wb_new.key(design_file, "x"), name="divider",
                     origin=design_file)
    assert b != a and a.read_text() == text
    # the console's own view: its copy only, never the workbench's
    con_new = Autosaves(tmp_path, "console")
    con_new.session += "-later"
    assert [e.path for e in con_new.pending()] == [c]


def test_reading_an_autosave_changes_nothing_on_disk(tmp_path, design_file):
    old = Autosaves(tmp_path, "workbench")
    old.write(design_file.read_text(), key="k", name="divider", origin=design_file)
    before = _snapshot(old.folder)
    new = Autosaves(tmp_path, "workbench")
    new.session += "-later"
    for _ in range(3):
        assert len(new.pending()) == 1
    assert _snapshot(old.folder) == before


def test_a_running_process_keeps_its_autosaves(tmp_path, design_file):
    # Another workbench process that still runs: its autosave is not a crash
    # and is not offered; once the process has ended it is.
    code = ("import sys, time; from solderless.engine.autosave import Autosaves; "
            "a = Autosaves(sys.argv[1], 'workbench'); "
            "a.write('x = 1', key='k', name='d'); print('ready', flush=True); "
            "sys.stdin.readline()")
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    p = subprocess.Popen([sys.executable, "-c", code, str(tmp_path)], env=env,
                         stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    try:
        assert p.stdout.readline().strip() == "ready"
        assert Autosaves(tmp_path, "workbench").pending() == []
    finally:
        p.communicate("\n", timeout=60)
    assert len(Autosaves(tmp_path, "workbench").pending()) == 1


def test_a_renamed_design_keeps_one_autosave_and_a_save_clears_it(tmp_path):
    a = Autosaves(tmp_path, "workbench")
    a.write("x = 1", key="k", name="old name")
    a.write("x = 2", key="k", name="new name")
    files = list(a.folder.glob("*.toml"))
    assert len(files) == 1 and files[0].read_text() == "x = 2"
    a.clear("k", "new name")
    assert list(a.folder.iterdir()) == []


def test_discard_sets_aside_and_is_not_offered_again(tmp_path):
    old = Autosaves(tmp_path, "workbench")
    f = old.write("x = 1", key="k", name="d")
    new = Autosaves(tmp_path, "workbench")
    new.session += "-later"
    aside = new.discard(new.pending()[0].path)
    assert aside.exists() and not f.exists() and aside.read_text() == "x = 1"
    assert new.pending() == []


def test_console_session_autosaves_as_console(tmp_path, monkeypatch):
    from solderless.engine.live.host import LiveHost
    from solderless.engine.live.source import ToneSource
    from standin import StandInDesign, StandInSimulator
    monkeypatch.setenv("SOLDERLESS_CONFIG_DIR", str(tmp_path))
    h = LiveHost(StandInDesign(), simulator_factory=StandInSimulator,
                 source=ToneSource(1000.0, 0.1), block=64)
    try:
        h.run_offline(2)
        h.set_value("tone.R1", 4700.0).result(10)
        h.flush()
        paths = [Path(p) for p in h.autosave_paths()]
    finally:
        h.close()
    assert len(paths) == 1 and paths[0].exists() and "4700" in paths[0].read_text()
    assert paths[0].name.startswith("console-standin-")
    wb = Autosaves(tmp_path, "workbench")
    assert wb.pending() == []               # never a crash to the workbench


# ------------------------------------------------------------ the workbench
qt = pytest.importorskip("PyQt6")


@pytest.fixture
def make(qtbot):
    pytest.importorskip("solderless.engine.solver.simulator")
    from solderless.engine.design import load_design
    from solderless.gui.app import make_window
    made = []

    def mk(design_file, cfg, recover):
        w = make_window(load_design(design_file), config=cfg, recover=recover)
        qtbot.addWidget(w)
        w.ask = lambda _q: "discard"
        made.append(w)
        return w
    yield mk
    for w in made:
        try:
            w.close()
        except RuntimeError:
            pass


def _crash(w):
    """A workbench that goes away without a clean exit."""
    w.autosave_timer.stop()
    w.analyser.shutdown()
    w.autosave.store.session += "-crashed"    # its files now belong to an ended session


def _offered(w) -> list[str]:
    return [t for t in w.notices.texts() if "Recovered unsaved work" in t]


def test_ignoring_the_offer_keeps_it(make, tmp_path, design_file):
    cfg = tmp_path / "cfg"
    w = make(design_file, cfg, "no")
    w.wb.set_value("amp.R2", 82e3)
    saved = w.autosave_now()
    assert saved is not None
    _crash(w)
    before = _snapshot(cfg / "autosave")
    w2 = make(design_file, cfg, "ask")
    assert len(_offered(w2)) == 1
    w2.close()                              # the user ignored the notice
    assert _snapshot(cfg / "autosave") == before
    w3 = make(design_file, cfg, "ask")
    assert len(_offered(w3)) == 1           # still offered
    w3.close()


def test_a_scripted_run_does_not_consume_autosaves(make, tmp_path, design_file):
    # solderless.gui.app passes recover="no" for --screenshot; the autosave folder,
    # including another front end's file and a damaged one, stays as it was
    cfg = tmp_path / "cfg"
    w = make(design_file, cfg, "no")
    w.wb.set_value("amp.R2", 82e3)
    w.autosave_now()
    _crash(w)
    (cfg / "autosave" / "0123abcd.toml").write_text("[broken", encoding="utf-8")
    (cfg / "autosave" / "0123abcd.json").write_text("{}", encoding="utf-8")
    before = _snapshot(cfg / "autosave")
    w2 = make(design_file, cfg, "no")
    w2.close()
    assert _snapshot(cfg / "autosave") == before
    import solderless.gui.app as app
    src = Path(app.__file__).read_text()
    assert 'recover="no" if args.screenshot' in src


def test_the_console_autosave_is_not_a_crash_to_the_workbench(make, tmp_path, design_file):
    cfg = tmp_path / "cfg"
    con = Autosaves(cfg, "console")
    con.session += "-ended"
    con.write(design_file.read_text(), key="k", name="divider", origin=design_file)
    # and one written by an earlier console (no sidecar, plain name)
    (cfg / "autosave" / "booster.toml").write_text(design_file.read_text())
    before = _snapshot(cfg / "autosave")
    w = make(design_file, cfg, "ask")
    assert _offered(w) == []
    w.close()
    assert _snapshot(cfg / "autosave") == before


def test_open_and_discard_are_the_decisions(make, tmp_path, design_file):
    cfg = tmp_path / "cfg"
    w = make(design_file, cfg, "no")
    w.wb.set_value("amp.R2", 82e3)
    old = w.autosave_now()
    _crash(w)
    # opening: the work is autosaved in the new session, then the old file goes
    w2 = make(design_file, cfg, "yes")
    assert w2.wb.design.part("amp.R2").value == 82e3 and w2.wb.dirty
    assert not old.exists()
    mine = list((cfg / "autosave").glob("workbench-*.toml"))
    assert len(mine) == 1 and "82" in mine[0].read_text()
    _crash(w2)
    # discarding: set aside, never offered again
    w3 = make(design_file, cfg, "ask")
    assert len(_offered(w3)) == 1
    w3._discard(w3.autosave.recover(w3.autosave.pending()[0]))
    assert w3.autosave.pending() == []
    assert list((cfg / "autosave").glob("*.discarded"))
