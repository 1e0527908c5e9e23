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
