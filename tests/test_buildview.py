"""The workbench's Build view runs the build sheet and the Monte Carlo in a
worker thread and shows the result (issue 19)."""
from __future__ import annotations

import pytest

pytest.importorskip("PyQt6")
pytestmark = pytest.mark.gui

from pathlib import Path  # noqa: E402

BOOSTER = Path(__file__).resolve().parent / "build_booster.toml"


def test_build_view_sheet_and_yield(qtbot, artifacts):
    from solderless.engine.design import load_design
    from solderless.gui.buildview import BuildPanel
    d = load_design(BOOSTER)
    w = BuildPanel(lambda: d.copy())
    qtbot.addWidget(w)
    w.resize(900, 700)
    assert w.make_sheet()
    qtbot.waitUntil(lambda: not w.busy() and w.sheet_btn.isEnabled(), timeout=120000)
    text = w.view.toPlainText()
    assert "Build sheet" in text and "boost.Q1" in text, w.status.text()
    assert "not the hardware" in text
    assert w.run_montecarlo(trials=6, quick=True)
    qtbot.waitUntil(lambda: w.last_yield is not None and w.mc_btn.isEnabled(), timeout=120000)
    assert 0.0 <= w.last_yield <= 1.0
    assert "yield" in w.status.text() and "Yield" in w.view.toPlainText()
    w.grab().save(str(artifacts / "build_view.png"))


def test_workbench_has_build_tab(qtbot, tmp_path):
    from solderless.engine.design import load_design
    from solderless.gui.app import make_window
    w = make_window(load_design(BOOSTER), config=tmp_path / "cfg", recover="no")
    w.ask = lambda _q: "discard"
    qtbot.addWidget(w)
    names = [w.tabs.tabText(i) for i in range(w.tabs.count())]
    assert "Build" in names
    assert w.build_view.get_design().name == w.wb.design.name
    w.close()
