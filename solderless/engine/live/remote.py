"""The live host in its own process, for a GUI whose Python work must not
delay the audio callback.

Python's GIL is shared by every thread of a process: a long pure-Python
stretch in a GUI thread holds up the PortAudio callback of a host in the same
process and causes dropouts. :class:`HostProcess` runs a
:class:`~solderless.engine.live.host.LiveHost` in a child process (``spawn``):

* **Edits in** through a pipe, as data: each edit
  (:mod:`solderless.engine.design.edits`, a small frozen dataclass that
  pickles) goes to :meth:`LiveHost.edit <solderless.engine.live.host.LiveHost.edit>`,
  tagged with a request number (:meth:`HostProcess.edit`); the child applies
  it as it applies an edit from the console, and answers when its Future is
  done (from the child's edit worker), so the caller never waits for an edit
  unless it asks to. Other commands (start, select, level ...) are host
  methods named in an allow-list (:meth:`HostProcess.call` waits,
  :meth:`HostProcess.post` does not).
* **Meters and scope out** through shared memory: the child's meter ring and
  scope ring (:meth:`solderless.engine.live.ring.FrameRing.shared`) are attached in this
  process, and :meth:`HostProcess.meters` turns frames into readings here
  (:class:`solderless.engine.live.meters.MeterReader`), without a round trip. What the
  readings need besides frames (small-signal gain, quiescent control, latency)
  is fetched from the child now and then.

The child's audio callback then competes only with the child's edit worker
and its command loop, which sleep while nothing is asked.
"""
from __future__ import annotations

import itertools
import multiprocessing as mp
import queue
import threading
import time
import traceback
from concurrent.futures import Future
from typing import Any

from solderless.engine.errors import AudioError, SolderlessError

#: Methods of LiveHost a HostProcess may call; those returning a Future are
#: answered when the Future is done (edits land through the child's mailbox).
ALLOWED = {"start", "start_paced", "stop", "edit", "set_value", "step_value",
           "set_rotation",
           "set_taper", "set_bypass", "set_model", "save", "select", "set_level_db", "unmute",
           "latency", "part_info", "prepare", "flush", "set_hiss", "hiss_state"}
#: Requests served by the child loop itself.
EXTRA = {"parts", "state", "meter_setup", "set_source", "edit_landings", "host_meters",
         "element_values", "designs", "set_measurement"}
#: Edits after which the parent re-measures the small-signal gain.
EDITS = {"edit", "set_value", "step_value", "set_rotation", "set_taper", "set_bypass", "set_model",
         "set_hiss"}
MEASURE_SETTLE_S = 0.2
"""Quiet time after the last edit before the parent re-measures."""
SWITCH_INTERVAL_S = 0.0002
"""Interpreter switch interval in the host process (measured with
bench/bench_gui.py: late blocks during edits)."""
SETUP_EVERY_S = 0.5
"""How often the meter set-up (small-signal gain, quiescent control) is
refreshed from the child; it changes only after edits."""


def _meter_setup(host) -> dict:
    m = host.meter
    return {"control_a": m.control_a, "control_b": m.control_b,
            "small_signal_gain_db": list(m.small_signal_gain_db),
            "control_law": list(m.control_law), "units_a": m.units_a, "units_b": m.units_b,
            "latency": host.latency(),
            "nonconverged": sum(int((getattr(v.sim, "stats", None) or {}).get("nonconverged", 0))
                                for v in host.voices if v.sim is not None)}


def _load(d):
    from solderless.engine.design import load_design
    if d is None or not isinstance(d, (str, bytes)) and not hasattr(d, "__fspath__"):
        return d
    return load_design(d)


def _child_main(conn, design, variant, kwargs: dict, start_kwargs: dict | None,
                paced: bool) -> None:  # pragma: no cover - child process
    from concurrent.futures import Future

    from solderless.engine.live.host import LiveHost
    from solderless.engine.live.source import parse_source
    import sys
    # The audio thread hands the GIL back and forth around each compiled call
    # (about ten per block); while the edit worker or the gain measurement
    # runs Python, each hand-back may wait up to the switch interval.
    sys.setswitchinterval(SWITCH_INTERVAL_S)
    lock = threading.Lock()

    def send(msg):
        with lock:
            try:
                conn.send(msg)
            except (OSError, ValueError):
                pass

    host = None
    try:
        src = kwargs.pop("source", None)
        ch = kwargs.pop("input_channel", 0)
        if src is None or isinstance(src, str):
            src = parse_source(src, ch)
        host = LiveHost(_load(design), variant=_load(variant), source=src, shared=True,
                        **kwargs)
        host.prepare()
        # re-measuring after edits builds a simulator (milliseconds of held
        # GIL): the parent does it (HostProcess._measure_loop) and hands the
        # result over; a daemonic process may not start a helper of its own
        host.measure_after_edits = False
        if start_kwargs is not None:
            host.start(**start_kwargs)
        elif paced:
            host.start_paced()
        send(("ready", 0, True, {
            "fs": host.fs, "block": host.block, "oversample": host.oversample,
            "in_fs_v": host.in_fs_v, "out_fs_v": host.out_fs_v,
            "level_db": host.level_db, "ceiling_dbfs": host.ceiling_dbfs,
            "probes": [v.probes for v in host.voices],
            "designs": [getattr(v.design, "name", "?") for v in host.voices],
            "source": host.source.label, "ring": host.ring.spec(),
            "scope": host.scope_spec(), "setup": _meter_setup(host),
            "controls": [v.probes[v.control_index] if v.control_index is not None else None
                         for v in host.voices],
            "autosave": host.autosave_paths()}))
    except BaseException as exc:
        send(("ready", 0, False, _portable(exc)))
        if host is not None:
            host.close()
        return

    def answer(rid, fut):
        exc = fut.exception()
        send(("done", rid, exc is None, fut.result() if exc is None else _portable(exc)))

    while True:
        try:
            msg = conn.recv()
        except (EOFError, OSError):
            break
        if msg[0] == "quit":
            break
        _, rid, name, args, kw = msg
        try:
            if name in ALLOWED:
                r = getattr(host, name)(*args, **kw)
            elif name == "parts":
                r = host.voices[host.edit_voice].design.parts()
            elif name == "state":
                r = {"blocks": host.blocks, "xruns": host.xruns, "guard": host.guard_reason,
                     "running": host.running, "edits": host.edits,
                     "error": None if host.error is None else repr(host.error),
                     "offset_db": host.loudness_offset_db, "selected": "AB"[host.selected],
                     "messages": _drain(host.messages)}
            elif name == "meter_setup":
                r = _meter_setup(host)
            elif name == "set_source":
                s = args[0]
                r = host.set_source(parse_source(s) if isinstance(s, str) else s)
            elif name == "designs":
                r = [v.design for v in host.voices]
            elif name == "set_measurement":
                r = host.set_measurement(*args)
            elif name == "edit_landings":
                r = host.edit_landings
            elif name == "host_meters":
                r = host.meters()
            elif name == "element_values":
                # what the running simulator of voice args[0] was handed last
                sim = host.voices[args[0] if args else host.edit_voice].sim
                r = dict(getattr(sim, "values", {}) or {})
            else:
                raise AudioError(f"'{name}' cannot be called on the host process")
        except BaseException as exc:
            send(("done", rid, False, _portable(exc)))
            continue
        if isinstance(r, Future):
            r.add_done_callback(lambda f, rid=rid: answer(rid, f))
        else:
            send(("done", rid, True, r))
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
    design, variant : Design objects (pickled to the child) or design file
        paths / built-in names (loaded in the child).
    start : open the sound card stream at once (``start_kwargs`` passed to
        :meth:`LiveHost.start`).
    paced : instead of a sound card, run the audio path on a real-time
        paced clock (:meth:`LiveHost.start_paced`; benches and tests).
    wait : wait here until the child is ready (else see :meth:`wait_ready`;
        requests posted before then are served once it is).
    **kwargs : LiveHost arguments (``fs``, ``block``, ``level_db``,
        ``simulator_factory`` (picklable) ...); ``source`` is a ``--source``
        string ("synth", "tone:1k:100m", a path, "input") or a Source.

    Example
    -------
    >>> with HostProcess("booster", source="tone:440:100m", start=True) as hp:  # doctest: +SKIP
    ...     hp.edit(SetValue("boost.R1", 4.7e3))
    ...     level = hp.meters()["input"]["peak_v"]
    """

    def __init__(self, design, variant=None, *, start: bool = False,
                 start_kwargs: dict | None = None, paced: bool = False, wait: bool = True,
                 timeout: float = 300.0, **kwargs):
        ctx = mp.get_context("spawn")
        self._conn, child = ctx.Pipe()
        self._send_lock = threading.Lock()
        self._pending: dict[int, Future] = {}
        self._ids = itertools.count(1)
        self._ready = threading.Event()
        self._ready_error: BaseException | None = None
        self.info: dict = {}
        self.messages: "queue.SimpleQueue[str]" = queue.SimpleQueue()
        self.error: str | None = None
        self.ended = False
        self.selected = "A"
        self.meter = None
        self.ring = None
        self.scope = None
        self._setup_t = 0.0
        self._setup_fut: Future | None = None
        self._state: dict = {}
        self._state_fut: Future | None = None
        self._factory = kwargs.get("simulator_factory")
        self._measure_wake = threading.Event()
        self._measure_dirty = False
        self.measurements = 0           # re-measurements done after edits
        self.proc = ctx.Process(target=_child_main, name="solderless-live",
                                args=(child, design, variant, kwargs,
                                      (start_kwargs or {}) if start else None, paced),
                                daemon=True)
        self.proc.start()
        child.close()
        self._reader = threading.Thread(target=self._read_loop, name="solderless-remote",
                                        daemon=True)
        self._reader.start()
        self._measurer = threading.Thread(target=self._measure_loop,
                                          name="solderless-remeasure", daemon=True)
        self._measurer.start()
        if wait:
            self.wait_ready(timeout)

    def _measure_loop(self) -> None:
        """Re-measure the small-signal gain and quiescent control value of
        every voice after edits (this process, own thread, debounced): the
        child's audio callback never waits for a simulator being built, and
        the gain-reduction reference follows the edited circuit."""
        from solderless.engine.live.host import default_simulator_factory, measure_small_signal
        while True:
            self._measure_wake.wait()
            self._measure_wake.clear()
            if self.ended:
                return
            while True:                          # let a burst of edits finish
                self._measure_dirty = False
                time.sleep(MEASURE_SETTLE_S)
                if not self._measure_dirty:
                    break
            if self.ended:
                return
            try:
                designs = self.call("designs")
                info = self.info
                factory = self._factory or default_simulator_factory
                for i, d in enumerate(designs):
                    ctl = info.get("controls", [None] * len(designs))[i]
                    gain_db, q, problem = measure_small_signal(
                        d, info["fs"], info["oversample"], info["block"], ctl, factory)
                    if problem:
                        self.messages.put(f"could not re-measure the small-signal gain: "
                                          f"{problem}")
                        continue
                    # the child's meter set-up, fetched every SETUP_EVERY_S, carries it here
                    self.call("set_measurement", i, gain_db, q)
                self._setup_t = 0.0              # fetch the new set-up at the next read
                self.measurements += 1
            except SolderlessError as exc:
                if not self.ended:
                    self.messages.put(f"could not re-measure the small-signal gain: {exc}")
            except Exception as exc:  # a measurement must never stop playing
                self.messages.put(f"could not re-measure the small-signal gain: {exc!r}")

    # ------------------------------------------------------------ plumbing
    def _read_loop(self) -> None:
        """Receive answers (own thread): resolve the Future of each request."""
        while True:
            try:
                kind, rid, ok, value = self._conn.recv()
            except (EOFError, OSError, TypeError, ValueError):
                break
            if kind == "ready":
                if ok:
                    self._attach(value)
                else:
                    self._ready_error = value.inner
                self._ready.set()
                continue
            fut = self._pending.pop(rid, None)
            if fut is None:
                continue
            if ok:
                fut.set_result(value)
            else:
                fut.set_exception(value.inner)
        self.ended = True
        if not self._ready.is_set():
            self._ready_error = AudioError("the live host process ended while starting")
            self._ready.set()
        gone = AudioError("the live host process has ended",
                          hint="start it again; the design's edits were autosaved")
        for rid in list(self._pending):
            fut = self._pending.pop(rid, None)
            if fut is not None and not fut.done():
                fut.set_exception(gone)

    def _attach(self, info: dict) -> None:
        from solderless.engine.live import meters as M
        from solderless.engine.live.ring import FrameRing
        self.info = info
        self.ring = FrameRing.attach(*info["ring"])
        self.scope = FrameRing.attach(*info["scope"]["ring"])
        pa = info["probes"][0]
        pb = info["probes"][1] if len(info["probes"]) > 1 else ()
        self.meter = M.MeterReader(self.ring, info["fs"], info["block"], info["in_fs_v"],
                                   info["out_fs_v"], pa, pb)
        self._apply_setup(info["setup"])
        self._setup_t = time.perf_counter()

    def wait_ready(self, timeout: float = 300.0) -> None:
        """Wait until the child has built and warmed the design (and opened
        the stream when asked to); raise the child's error if it could not."""
        if not self._ready.wait(timeout):
            self.close()
            raise AudioError("the live host process did not start in time")
        if self._ready_error is not None:
            err = self._ready_error
            self.close()
            raise err

    @property
    def start_error(self) -> BaseException | None:
        """Why the child could not start (None while starting or once running)."""
        return self._ready_error if self._ready.is_set() else None

    @property
    def ready(self) -> bool:
        """True once the child is running (and has not failed to start)."""
        return self._ready.is_set() and self._ready_error is None

    def post(self, name: str, *args, **kw) -> Future:
        """Ask the child to call LiveHost method ``name`` (or one of the
        child's own requests); returns at once with a Future of the answer.
        A user error comes back as its own SolderlessError class."""
        if name not in ALLOWED and name not in EXTRA:
            raise AudioError(f"'{name}' cannot be called on the host process")
        fut: Future = Future()
        if name in EDITS:
            def edited(f):
                if f.exception() is None:
                    self._measure_dirty = True
                    self._measure_wake.set()
            fut.add_done_callback(edited)
        if self.ended or not self.proc.is_alive():
            fut.set_exception(AudioError("the live host process has ended",
                                         hint="start it again; the design's edits were "
                                              "autosaved"))
            return fut
        rid = next(self._ids)
        self._pending[rid] = fut
        try:
            with self._send_lock:
                self._conn.send(("call", rid, name, args, kw))
        except (OSError, ValueError) as exc:
            self._pending.pop(rid, None)
            fut.set_exception(AudioError(f"the live host process cannot be reached ({exc})"))
        return fut

    def edit(self, edit, reported: bool = False) -> Future:
        """Send an edit (an Edit dataclass) to the host; returns at once with
        a Future of its result. ``reported``: a failure is also put into
        :attr:`messages`."""
        return (self.post_reported if reported else self.post)("edit", edit)

    def post_reported(self, name: str, *args, **kw) -> Future:
        """Like :meth:`post`; a failure is also put into :attr:`messages`
        (for a front end that does not wait for the answer)."""
        fut = self.post(name, *args, **kw)

        def told(f):
            e = f.exception()
            if e is not None:
                self.messages.put(str(e))
        fut.add_done_callback(told)
        return fut

    def call(self, name: str, *args, timeout: float = 120.0, **kw) -> Any:
        """Call a LiveHost method in the child and wait for its answer (an
        edit is answered once it has been handed to the audio thread)."""
        fut = self.post(name, *args, **kw)
        try:
            return fut.result(timeout)
        except TimeoutError:
            raise AudioError("the live host process did not answer") from None

    def __getattr__(self, name: str):
        if name in ALLOWED:
            return lambda *a, **k: self.call(name, *a, **k)
        raise AttributeError(name)

    # ------------------------------------------------------------ front-end API
    @property
    def fs(self) -> float:
        return float(self.info.get("fs", 0.0))

    @property
    def block(self) -> int:
        return int(self.info.get("block", 0))

    @property
    def n_voices(self) -> int:
        """1, or 2 when a variant (B) runs."""
        return len(self.info.get("probes", [[]]))

    def parts(self):
        """PartInfo list of the design being edited."""
        return self.call("parts")

    def select(self, which: str) -> None:
        """Hear A or B (waits for the child's answer; raises for no B)."""
        self.call("select", which)
        self.selected = "A" if which in (0, "A", "a") else "B"

    def set_source(self, source) -> Future:
        """Change the input source: a ``--source`` string or a Source."""
        return self.post_reported("set_source", source)

    def frames(self):
        """New meter frames since the last call: ``(array, frames_lost)``
        (columns as in :mod:`solderless.engine.live.meters`), read from shared memory."""
        self.wait_ready()
        since = getattr(self, "_frames_since", 0)
        frames, self._frames_since, lost = self.ring.read_new(since)
        return frames, lost

    def _apply_setup(self, s: dict) -> None:
        m = self.meter
        m.control_a, m.control_b = s["control_a"], s["control_b"]
        m.small_signal_gain_db = list(s["small_signal_gain_db"])
        m.control_law = list(s["control_law"])
        m.units_a = tuple(s["units_a"]) or m.units_a
        m.units_b = tuple(s["units_b"]) or m.units_b
        self._setup = s

    def meters(self) -> dict:
        """Meter readings, as :meth:`LiveHost.meters`, computed here from the
        shared meter ring (no round trip; the set-up is refreshed every
        ``SETUP_EVERY_S`` in the background). One reader at a time."""
        from solderless.engine.live import meters as M
        from solderless.engine.live.limiter import GUARD_CALLBACK
        self.wait_ready()
        now = time.perf_counter()
        f = self._setup_fut
        if f is not None and f.done():
            if f.exception() is None:
                self._apply_setup(f.result())
            self._setup_fut = None
        if self._setup_fut is None and now - self._setup_t > SETUP_EVERY_S and not self.ended:
            self._setup_t = now
            self._setup_fut = self.post("meter_setup")
        snap = self.meter.poll()
        last = self.meter.last
        snap["latency"] = self._setup["latency"]
        snap["blocks"] = 0 if last is None else int(last[M.C_BLOCK]) + 1
        snap["selected"] = self.selected
        g = "" if last is None else M.GUARD_REASONS.get(int(last[M.C_GUARD]), "")
        if last is not None and int(last[M.C_GUARD]) == GUARD_CALLBACK:
            g = "the audio callback failed"
        snap["guard"] = g
        snap["nonconverged"] = self._setup.get("nonconverged", 0)
        return snap

    def scope_latest(self, n: int):
        """The last ``n`` (input V, output V) pairs of the scope capture,
        read from shared memory (``info['scope']['rate']`` pairs per second)."""
        from solderless.engine.live.host import scope_tail
        self.wait_ready()
        return scope_tail(self.scope, n)

    def state(self) -> dict:
        """Blocks, xruns, guard reason, running, error, loudness offset and
        pending messages of the child host (waits for the answer)."""
        return self.call("state")

    def poll_state(self) -> dict:
        """The latest state without waiting: asks for a new one in the
        background and returns the last answer (``{}`` at first). Messages
        from the child go to :attr:`messages`; a stream error sets
        :attr:`error`; an ended child sets it too."""
        f = self._state_fut
        if f is not None and f.done():
            self._state_fut = None
            if f.exception() is None:
                self._state = f.result()
                for m in self._state.get("messages", ()):
                    self.messages.put(m)
                if self._state.get("error"):
                    self.error = self._state["error"]
            elif self.ended:
                self.error = str(f.exception())
        if self.ended and self.error is None:
            self.error = "the live host process has ended"
        if self._state_fut is None and self.ready and not self.ended:
            self._state_fut = self.post("state")
        return self._state

    def close(self) -> None:
        """Stop the stream and end the child process; release shared memory."""
        self.ended = True
        self._measure_wake.set()
        try:
            if self.proc.is_alive():
                with self._send_lock:
                    self._conn.send(("quit",))
                self.proc.join(10)
        except (OSError, BrokenPipeError, ValueError):
            pass
        if self.proc.is_alive():
            self.proc.terminate()
            self.proc.join(5)
        crashed = self.proc.exitcode not in (0, None)
        for r in (self.ring, self.scope):
            if r is not None:
                r.owner = crashed        # the child unlinks its own, unless it crashed
                r.close()
        try:
            self._conn.close()
        except OSError:
            pass

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
