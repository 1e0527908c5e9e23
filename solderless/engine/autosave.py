"""One autosave scheme for every front end.

Files live in ``autosave/`` of the config folder
(:func:`solderless.engine.settings.config_dir`). Each autosave is a design file
``<front end>-<design>-<key>-<session>.toml`` and a sidecar ``.json`` with
the front end (``"workbench"``, ``"console"``), the design's own file
(``origin``), its name, the time, and the writing session (process id and
boot id). So:

* each front end's autosaves are told apart (name and metadata): the
  workbench offers only its own for recovery, never the console's copies;
* a running session's autosaves are never offered to another one, and a new
  session never overwrites an older session's autosave of the same design
  (the session is in the name);
* reading an autosave never moves, renames or deletes it: it stays on offer
  until the user decides (:meth:`Autosaves.discard`, or
  :meth:`Autosaves.adopted` once its content is safe in the new session).
  A scripted run (the workbench's ``--screenshot``) does not look at them.

An autosave named ``<key>.toml`` (no front end in its name) is read too:
with a sidecar it is the workbench's, without one the console's.
"""
from __future__ import annotations

import hashlib
import json
import os
import time
from dataclasses import dataclass
from pathlib import Path

from solderless.engine.settings import config_dir

FRONT_ENDS = ("workbench", "console")


def _boot_id() -> str:
    try:
        return Path("/proc/sys/kernel/random/boot_id").read_text().strip()
    except OSError:
        return ""


def _alive(pid: int, boot: str) -> bool:
    """Whether the process that wrote an autosave still runs."""
    if boot and boot != _boot_id():
        return False
    try:
        os.kill(int(pid), 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OSError):
        return True
    except (TypeError, ValueError):
        return False
    return True


def _safe(text: str) -> str:
    s = "".join(c if c.isalnum() or c in "-_" else "-" for c in str(text)).strip("-")
    return s[:40] or "design"


@dataclass
class Entry:
    """One autosave found on disk."""
    path: Path
    front_end: str
    origin: str | None
    name: str | None
    time: float
    meta: dict


class Autosaves:
    """The autosaves of one front end in one session.

    ``folder``: the config folder (the files go in its ``autosave``
    subfolder). ``front_end``: one of ``FRONT_ENDS``.
    """

    def __init__(self, folder: str | os.PathLike | None = None, front_end: str = "workbench"):
        if front_end not in FRONT_ENDS:
            raise ValueError(f"unknown front end {front_end!r}")
        self.folder = Path(folder if folder is not None else config_dir()) / "autosave"
        self.front_end = front_end
        self.pid = os.getpid()
        self.boot = _boot_id()
        self.session = f"{self.pid}x{int(time.time() * 1000) % 10**9}"

    @staticmethod
    def key(origin: str | os.PathLike | None, fallback: str) -> str:
        """A short key for a design: its file's path, else ``fallback``."""
        src = str(Path(origin).resolve()) if origin else fallback
        return hashlib.sha1(src.encode()).hexdigest()[:12]

    def path_for(self, key: str, name: str) -> Path:
        """This session's autosave file for the design with ``key``."""
        return self.folder / f"{self.front_end}-{_safe(name)}-{key}-{self.session}.toml"

    def write(self, text: str, *, key: str, name: str, origin=None) -> Path:
        """Write one autosave (design text) and its sidecar, atomically."""
        from solderless.engine.design import atomic_write_text
        self.folder.mkdir(parents=True, exist_ok=True)
        target = self.path_for(key, name)
        atomic_write_text(target, text)
        for p in self._mine(key):       # the design was renamed: one file per design
            if p != target:
                self.remove(p)
        meta = {"front_end": self.front_end,
                "origin": str(Path(origin).resolve()) if origin else None,
                "name": str(name), "time": time.time(), "pid": self.pid,
                "boot": self.boot, "session": self.session}
        atomic_write_text(target.with_suffix(".json"), json.dumps(meta))
        return target

    def _mine(self, key: str) -> list[Path]:
        """This session's files for ``key``, whatever name they were written under."""
        if not self.folder.is_dir():
            return []
        return [p for p in self.folder.glob(f"{self.front_end}-*-{key}-{self.session}.toml")]

    def clear(self, key: str, name: str | None = None) -> None:
        """Remove this session's autosave of a design (after a save, or a
        clean exit), also one written before the design was renamed."""
        for p in self._mine(key):
            self.remove(p)

    @staticmethod
    def remove(path: Path) -> None:
        for p in (Path(path), Path(path).with_suffix(".json")):
            try:
                p.unlink()
            except OSError:
                pass

    def entries(self) -> list[Entry]:
        """Every autosave in the folder, newest first, whatever its front end."""
        if not self.folder.is_dir():
            return []
        out = []
        for p in self.folder.glob("*.toml"):
            meta: dict = {}
            side = p.with_suffix(".json")
            has_side = side.exists()
            try:
                meta = json.loads(side.read_text(encoding="utf-8")) if has_side else {}
                if not isinstance(meta, dict):
                    meta = {}
            except (OSError, ValueError):
                meta = {}
            fe = meta.get("front_end")
            if fe not in FRONT_ENDS:
                fe = next((f for f in FRONT_ENDS if p.name.startswith(f + "-")), None) \
                    or ("workbench" if has_side else "console")
            try:
                t = float(meta.get("time") or p.stat().st_mtime)
            except (OSError, TypeError, ValueError):
                t = 0.0
            out.append(Entry(p, fe, meta.get("origin"), meta.get("name"), t, meta))
        return sorted(out, key=lambda e: e.time, reverse=True)

    def pending(self) -> list[Entry]:
        """Autosaves of this front end left by sessions that no longer run:
        the ones to offer for recovery. Never changes anything on disk."""
        out = []
        for e in self.entries():
            if e.front_end != self.front_end:
                continue
            if e.meta.get("session") == self.session:
                continue
            pid = e.meta.get("pid")
            # another process that still runs is still working on it; an
            # older session of this very process is over
            if pid is not None and pid != self.pid and \
                    _alive(pid, str(e.meta.get("boot") or "")):
                continue
            out.append(e)
        return out

    def discard(self, path: Path) -> Path | None:
        """The user declined an autosave: keep it aside as ``.discarded``
        (not offered again). Returns the new name, or None if it could not
        be moved."""
        p = Path(path)
        aside = p.with_name(p.name + ".discarded")
        try:
            os.replace(p, aside)
        except OSError:
            return None
        try:
            p.with_suffix(".json").unlink()
        except OSError:
            pass
        return aside

    def adopted(self, path: Path) -> None:
        """The user took an autosave into this session and it has been
        autosaved again here: the old file is no longer needed."""
        self.remove(Path(path))
