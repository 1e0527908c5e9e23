"""The workbench's bridge to the engine for work that is not live audio:
the offline preview, the operating point and the small-signal analyses
(:mod:`solderless.engine.analysis.preview`). Everything here runs on one
worker thread; results come back to the GUI thread through Qt signals.
This module only orders calls and collects their results.
"""
from __future__ import annotations

import traceback
from concurrent.futures import ThreadPoolExecutor
from typing import Callable

from PyQt6.QtCore import QObject, pyqtSignal

from solderless.engine.analysis.preview import (PREVIEW_SECONDS, dynamics, frequency_response,
                                                operating_point, overlay_traces,
                                                run_ab_offline, run_preview)
from solderless.engine.errors import SolderlessError


def noise_floor_of(design) -> dict:
    """The noise floor at the design's output (the analysis' summary, as
    render and play print it) with the design's seed."""
    from solderless.engine.analysis.noise import floor_summary
    return floor_summary(design.flatten(), int(getattr(design, "hiss_seed", 0) or 0))


class Analyser(QObject):
    """Runs previews and analyses on one worker thread; drops stale results.

    Signals carry ``(generation, result)``; ``failed`` carries
    ``(what, message)`` with a user-readable message.
    """
    preview_ready = pyqtSignal(int, object)
    op_ready = pyqtSignal(int, object)
    ac_ready = pyqtSignal(int, object)
    ab_ready = pyqtSignal(int, object)
    dyn_ready = pyqtSignal(int, object)
    floor_ready = pyqtSignal(int, object)
    overlay_ready = pyqtSignal(int, object)
    failed = pyqtSignal(str, str)
    busy_changed = pyqtSignal(bool)

    def __init__(self, factory: Callable | None = None):
        super().__init__()
        self.factory = factory
        self.pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="solderless-analysis")
        self.generation = 0
        self.pending = 0
        self.source = "synth:notes"
        self.seconds = PREVIEW_SECONDS
        self.closed = False

    def request(self, design, *, preview: bool = True, op: bool = True, ac: bool = True,
                dyn: bool | None = None) -> int:
        """Queue work on a copy of ``design``; returns the generation number.
        ``dyn`` (attack and release) defaults to ``ac``."""
        if self.closed:
            return 0
        self.generation += 1
        g = self.generation
        d = design.copy()
        self.pending += 1
        self.busy_changed.emit(True)
        self.pool.submit(self._job, g, d, preview, op, ac, self.source, self.seconds,
                         ac if dyn is None else dyn)
        return g

    def _submit(self, what: str, fn: Callable, signal, only_current: bool = False) -> int:
        """Run ``fn`` on the analysis thread and emit its result on
        ``signal`` with the current generation (skipped if ``only_current``
        and a newer request came first)."""
        if self.closed:
            return 0
        self.pending += 1
        self.busy_changed.emit(True)
        g = self.generation

        def job():
            try:
                if not only_current or g == self.generation:
                    self._run(what, fn, signal, g)
            finally:
                self.pending -= 1
                if self.pending == 0:
                    self.busy_changed.emit(False)
        self.pool.submit(job)
        return g

    def request_dyn(self, design) -> int:
        """Queue the attack and release readouts alone (while playing live,
        after edits have settled)."""
        d = design.copy()
        return self._submit("attack and release", lambda: dynamics(d), self.dyn_ready,
                            only_current=True)

    def request_overlay(self, a, b, names=("A", "B")) -> int:
        """Queue the A/B overlay curves of designs ``a`` and ``b``."""
        a, b = a.copy(), b.copy()
        return self._submit("overlay", lambda: (overlay_traces(a, names[0]),
                                                overlay_traces(b, names[1])),
                            self.overlay_ready)

    def request_ab(self, a, b) -> int:
        """Queue an offline A/B loudness comparison of designs ``a`` and ``b``."""
        a, b = a.copy(), b.copy()
        return self._submit("A/B", lambda: run_ab_offline(a, b, self.source, self.seconds,
                                                          factory=self.factory),
                            self.ab_ready)

    def _job(self, g, d, preview, op, ac, source, seconds, dyn=False):
        try:
            if g != self.generation:
                return
            if op:
                self._run("operating point", lambda: operating_point(d, self.factory),
                          self.op_ready, g)
            if ac and g == self.generation:
                self._run("frequency response", lambda: frequency_response(d),
                          self.ac_ready, g)
            if ac and g == self.generation:
                self._run("noise floor", lambda: noise_floor_of(d), self.floor_ready, g)
            if preview and g == self.generation:
                self._run("preview", lambda: run_preview(d, source, seconds,
                                                         factory=self.factory),
                          self.preview_ready, g)
            if dyn and g == self.generation:
                self._run("attack and release", lambda: dynamics(d), self.dyn_ready, g)
        finally:
            self.pending -= 1
            if self.pending == 0:
                self.busy_changed.emit(False)

    def _run(self, what, fn, signal, g):
        try:
            r = fn()
        except SolderlessError as exc:
            self.failed.emit(what, str(exc))
            return
        except ImportError as exc:
            self.failed.emit(what, f"not available in this build ({exc})")
            return
        except Exception as exc:  # an engine bug: report, do not crash the window
            tb = traceback.format_exc(limit=3)
            self.failed.emit(what, f"internal error ({type(exc).__name__}: {exc}); "
                             f"please report it. {tb.splitlines()[-1]}")
            return
        signal.emit(g, r)

    def shutdown(self) -> None:
        self.closed = True
        self.generation += 1
        self.pool.shutdown(wait=True, cancel_futures=True)
