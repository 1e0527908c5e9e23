"""The live host in its own process, for a GUI whose Python work must not
delay the audio callback.

Python's GIL is shared by every thread of a process: a long pure-Python
stretch in a GUI thread holds up the PortAudio callback of a host in the same
process and causes dropouts. :class:`HostProcess` runs a
:class:`~engine.live.host.LiveHost` in a child process (``spawn``) and talks
to it through a pipe: commands in (the same edit methods), meter snapshots
and meter frames out. The child's own audio callback then only competes with
the child's edit worker.

Every call is a short request/answer round trip (well under a millisecond on
a local pipe); the GUI polls :meth:`HostProcess.meters` at its frame rate.
The audio thread is never involved in a round trip.
"""
from __future__ import annotations

import multiprocessing as mp
import threading
import traceback
from typing import Any

from engine.errors import AudioError, SolderlessError

#: Methods of LiveHost a HostProcess may call; those returning a Future are
#: waited for in the child (edits land through the child's mailbox).
ALLOWED = {"start", "stop", "set_value", "step_value", "set_rotation", "set_bypass",
           "save", "select", "set_level_db", "unmute", "latency", "meters",
           "part_info", "prepare"}


def _child_main(conn, design: str, variant: str | None, kwargs: dict,
                start_kwargs: dict | None) -> None:  # pragma: no cover - child process
    from concurrent.futures import Future

    from engine.design import load_design
    from engine.live.host import LiveHost
    from engine.live.source import parse_source
    try:
        src = kwargs.pop("source", None)
        ch = kwargs.pop("input_channel", 0)
        host = LiveHost(load_design(design),
                        variant=load_design(variant) if variant else None,
                        source=parse_source(src, ch), **kwargs)
        host.prepare()
        if start_kwargs is not None:
            host.start(**start_kwargs)
        conn.send(("ready", {"fs": host.fs, "block": host.block,
                             "probes": [v.probes for v in host.voices],
                             "designs": [getattr(v.design, "name", "?") for v in host.voices]}))
    except BaseException as exc:
        conn.send(("err", _portable(exc)))
        return
    since = 0
    while True:
        try:
            msg = conn.recv()
        except (EOFError, OSError):
            break
        kind = msg[0]
        if kind == "quit":
            break
        try:
            if kind == "call":
                _, name, args, kw = msg
                if name not in ALLOWED:
                    raise AudioError(f"'{name}' cannot be called on the host process")
                r = getattr(host, name)(*args, **kw)
                if isinstance(r, Future):
                    r = r.result(60)
                conn.send(("ok", r))
            elif kind == "parts":
                conn.send(("ok", host.voices[host.edit_voice].design.parts()))
            elif kind == "frames":
                frames, since, lost = host.ring.read_new(since)
                conn.send(("ok", (frames, lost)))
            elif kind == "state":
                conn.send(("ok", {"blocks": host.blocks, "xruns": host.xruns,
                                  "guard": host.guard_reason, "running": host.running,
                                  "error": None if host.error is None else repr(host.error),
                                  "offset_db": host.loudness_offset_db,
                                  "messages": _drain(host.messages)}))
            else:
                raise AudioError(f"unknown request {kind!r}")
        except BaseException as exc:
            conn.send(("err", _portable(exc)))
    try:
        host.close()
    except Exception:
        pass


def _drain(q) -> list[str]:
    out = []
    while not q.empty():
        out.append(q.get())
    return out


def _portable(exc: BaseException) -> BaseException:
    """An exception that survives pickling: user errors keep their class and
    text; anything else becomes an AudioError carrying the child's traceback."""
    if isinstance(exc, SolderlessError):
        e = type(exc)(exc.message, file=exc.file, line=exc.line, part=exc.part, hint=exc.hint)
        return _Carry(e)
    return _Carry(AudioError(f"the host process failed: {exc!r}",
                             hint="".join(traceback.format_exception(exc))[-2000:]))


class _Carry(Exception):
    """Wraps an exception so pickling keeps its keyword fields."""

    def __init__(self, inner):
        super().__init__(inner)
        self.inner = inner

    def __reduce__(self):
        e = self.inner
        return (_rebuild, (type(e), e.message, e.file, e.line, e.part, e.hint))


def _rebuild(cls, message, file, line, part, hint):
    return _Carry(cls(message, file=file, line=line, part=part, hint=hint))


class HostProcess:
    """A LiveHost running in a child process (see module docstring).

    Parameters
    ----------
    design, variant : design file paths or built-in names (loaded in the child).
    start : open the sound card stream at once (``start_kwargs`` passed to
        :meth:`LiveHost.start`); otherwise call :meth:`start` later.
    **kwargs : LiveHost arguments (``fs``, ``block``, ``level_db`` ...);
        ``source`` is a ``--source`` string ("synth", "tone:1k:100m", a path).
    """

    def __init__(self, design: str, variant: str | None = None, *, start: bool = False,
                 start_kwargs: dict | None = None, timeout: float = 300.0, **kwargs):
        ctx = mp.get_context("spawn")
        self._conn, child = ctx.Pipe()
        self._lock = threading.Lock()
        self.proc = ctx.Process(target=_child_main, name="solderless-live",
                                args=(child, str(design), variant and str(variant), kwargs,
                                      (start_kwargs or {}) if start else None),
                                daemon=True)
        self.proc.start()
        child.close()
        if not self._conn.poll(timeout):
            self.close()
            raise AudioError("the live host process did not start in time")
        kind, info = self._conn.recv()
        if kind == "err":
            self.close()
            raise info.inner
        self.info = info

    def _ask(self, *msg, timeout: float = 120.0) -> Any:
        with self._lock:
            if not self.proc.is_alive():
                raise AudioError("the live host process has ended",
                                 hint="start it again; the design's edits were autosaved")
            self._conn.send(msg)
            if not self._conn.poll(timeout):
                raise AudioError("the live host process did not answer")
            kind, value = self._conn.recv()
        if kind == "err":
            raise value.inner
        return value

    def call(self, name: str, *args, **kw) -> Any:
        """Call a LiveHost method in the child and return its result (an edit's
        Future is waited for in the child)."""
        return self._ask("call", name, args, kw)

    def __getattr__(self, name: str):
        if name in ALLOWED:
            return lambda *a, **k: self.call(name, *a, **k)
        raise AttributeError(name)

    def parts(self):
        """PartInfo list of the design being edited."""
        return self._ask("parts")

    def frames(self):
        """New meter frames since the last call: ``(array, frames_lost)``
        (columns as in :mod:`engine.live.meters`)."""
        return self._ask("frames")

    def state(self) -> dict:
        """Blocks, xruns, guard reason, running, error, loudness offset and
        pending messages of the child host."""
        return self._ask("state")

    def close(self) -> None:
        """Stop the stream and end the child process."""
        try:
            if self.proc.is_alive():
                with self._lock:
                    self._conn.send(("quit",))
                self.proc.join(10)
        except (OSError, BrokenPipeError):
            pass
        if self.proc.is_alive():
            self.proc.terminate()
            self.proc.join(5)
        self._conn.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
