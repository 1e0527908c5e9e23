"""Shared test setup: Qt offscreen, an artifacts folder for screenshots and plots."""
import os
import shutil
from pathlib import Path

import pytest

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

ARTIFACTS = Path(__file__).resolve().parent / "_artifacts"


@pytest.fixture
def artifacts() -> Path:
    """A folder for pictures and files a person may want to look at after a run
    (not committed)."""
    ARTIFACTS.mkdir(exist_ok=True)
    return ARTIFACTS


@pytest.fixture
def design_file(tmp_path) -> Path:
    """A writable copy of the small divider design (tests/gui_divider.toml)."""
    p = tmp_path / "divider.toml"
    shutil.copy(Path(__file__).resolve().parent / "gui_divider.toml", p)
    return p


# Qt widgets must be destroyed on the GUI thread. Python's cyclic collector
# runs in whichever thread allocates (the workbench's analyser worker, the
# live host's reader), so during a test that drives Qt it is switched off and
# run on the main thread after pytest-qt has closed and deleted the test's
# widgets, as the workbench itself does (solderless.gui.app.collect_on_gui_thread).
@pytest.hookimpl(hookwrapper=True)
def pytest_runtest_setup(item):
    if "qtbot" in getattr(item, "fixturenames", ()):
        import gc
        gc.collect()
        gc.disable()
    yield


@pytest.hookimpl(hookwrapper=True)
def pytest_runtest_teardown(item):
    yield
    if "qtbot" in getattr(item, "fixturenames", ()):
        import gc
        gc.collect()
        gc.enable()
