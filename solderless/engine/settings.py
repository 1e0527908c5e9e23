"""Settings every front end shares: the config folder, small JSON settings
files in it, and the listening caution with its one "already shown" flag.

The config folder (:func:`config_dir`) holds:

* ``live.json``: ``caution_shown``, set once the listening caution has been
  shown by any front end (the workbench, ``play``, the console); it is
  shown once per config folder, whichever front end comes first;
* ``workbench.json``: the workbench's recent files;
* ``autosave/``: every front end's autosaves, in the one scheme of
  :mod:`solderless.engine.autosave`.

A front end that takes a config folder of its own (the workbench's
``--config-dir``) passes it as ``folder``; everything else uses
:func:`config_dir`.
"""
from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any, Callable

CONFIG_ENV = "SOLDERLESS_CONFIG_DIR"
"""Environment variable naming the config folder outright."""

CAUTION = ("Listening levels: a circuit can oscillate or jump in level. Start with "
           "the monitor volume low and raise it slowly; output passes a safety "
           "limiter, but protect your hearing and your speakers. Long sessions: "
           "keep the average level moderate (WHO–ITU H.870 suggests 80 dBA for "
           "40 hours a week).")
"""The hearing and speaker caution every front end shows before the first
sound (WHO–ITU H.870: docs/references.md)."""

CAUTION_FILE = "live.json"
CAUTION_KEY = "caution_shown"


def config_dir() -> Path:
    """The config folder, by one rule for every front end:
    ``$SOLDERLESS_CONFIG_DIR`` if set and not empty, else
    ``$XDG_CONFIG_HOME/solderless`` if that is set and not empty, else
    ``~/.config/solderless`` (the XDG base directory default)."""
    env = os.environ.get(CONFIG_ENV)
    if env:
        return Path(env)
    base = os.environ.get("XDG_CONFIG_HOME") or os.path.join(os.path.expanduser("~"), ".config")
    return Path(base) / "solderless"


CACHE_ENV = "SOLDERLESS_CACHE_DIR"


def cache_dir() -> Path:
    """The cache folder (things made again when missing, such as the
    ahead-of-time kernel module), by the same rule as :func:`config_dir`:
    ``$SOLDERLESS_CACHE_DIR`` if set and not empty, else
    ``$XDG_CACHE_HOME/solderless``, else ``~/.cache/solderless``."""
    env = os.environ.get(CACHE_ENV)
    if env:
        return Path(env)
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return Path(base) / "solderless"


class SettingsFile:
    """A small JSON settings file in a config folder.

    ``data`` starts from ``defaults`` updated with what the file holds; a
    file that cannot be read leaves the defaults and says why in
    ``problem`` (never an exception: settings must not stop a start-up).
    :meth:`save` writes atomically and creates the folder."""

    def __init__(self, name: str, defaults: dict[str, Any] | None = None,
                 folder: str | os.PathLike | None = None):
        self.path = Path(folder if folder is not None else config_dir()) / name
        self.data: dict[str, Any] = dict(defaults or {})
        self.problem = ""
        try:
            if self.path.exists():
                loaded = json.loads(self.path.read_text(encoding="utf-8"))
                if isinstance(loaded, dict):
                    self.data.update(loaded)
        except (OSError, ValueError) as exc:
            self.problem = f"settings file {self.path} could not be read ({exc}); defaults used"

    def save(self, indent: int | None = None) -> bool:
        """Write the file; False (and ``problem`` set) if it could not be."""
        from solderless.engine.fileio import atomic_write
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            atomic_write(self.path, json.dumps(self.data, indent=indent))
        except OSError as exc:
            self.problem = f"settings not saved: {exc}"
            return False
        return True


class Settings(SettingsFile):
    """The workbench's settings (``workbench.json``): recent files."""

    def __init__(self, folder: str | os.PathLike | None = None):
        super().__init__("workbench.json", {"recent": []}, folder)

    def save(self, indent: int | None = 2) -> bool:
        return super().save(indent)

    def add_recent(self, path: str | os.PathLike) -> None:
        p = str(Path(path).resolve())
        rec = [r for r in self.data.get("recent", []) if r != p]
        self.data["recent"] = [p] + rec[:9]
        self.save()


def caution_once(say: Callable[[str], None] = print,
                 folder: str | os.PathLike | None = None) -> bool:
    """Show :data:`CAUTION` through ``say`` the first time only, remembering
    it in ``live.json`` of ``folder`` (default :func:`config_dir`). Returns
    True if it was shown now."""
    state = SettingsFile(CAUTION_FILE, folder=folder)
    if state.data.get(CAUTION_KEY):
        return False
    say(CAUTION)
    state.data[CAUTION_KEY] = True
    state.save()
    return True
