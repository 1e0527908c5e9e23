"""The workbench as the GUI tests open it (pytest-qt, offscreen)."""
from solderless.engine.design import load_design
from solderless.gui.app import make_window


def open_window(qtbot, tmp_path, design_file):
    """A workbench on design_file, idle and shown at 1480 x 940, its own
    config folder, closed (discarding edits) when the test ends."""
    w = make_window(load_design(design_file), config=tmp_path / "cfg", recover="no",
                    source="tone:1000:0.1", seconds=1.5)
    w.ask = lambda _q: "discard"
    qtbot.addWidget(w)
    w.resize(1480, 940)
    w.show()
    assert w.wait_idle(180)
    yield w
    w.ask = lambda _q: "discard"
    w.close()
