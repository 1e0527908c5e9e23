"""Shared test setup: Qt offscreen, an artifacts folder for screenshots and plots."""
import os
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
