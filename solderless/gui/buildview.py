"""The Build view: the build sheet and a tolerance Monte Carlo of the open
design, run in a worker thread (solderless.engine.analysis.build, .montecarlo); the
widget only shows the HTML and the yield.  The live host plays in its own
process, so the worker's Python work does not reach the audio callback."""
from __future__ import annotations

import tempfile
import threading
from pathlib import Path
from typing import Callable

from PyQt6.QtCore import QObject, QUrl, pyqtSignal
from PyQt6.QtWidgets import (QHBoxLayout, QLabel, QProgressBar, QPushButton, QSpinBox,
                             QTextBrowser, QVBoxLayout, QWidget)

from solderless.engine.errors import SolderlessError


class _Signals(QObject):
    progress = pyqtSignal(int, int)
    sheet = pyqtSignal(str, str)          # html, folder
    montecarlo = pyqtSignal(str, str, float)   # html, folder, yield
    failed = pyqtSignal(str)


class BuildPanel(QWidget):
    """Buttons for the build sheet and the Monte Carlo, a progress bar, and
    the result as HTML. ``get_design`` returns a copy of the open design."""

    def __init__(self, get_design: Callable, parent=None):
        super().__init__(parent)
        self.get_design = get_design
        self.sig = _Signals()
        self._thread: threading.Thread | None = None
        self._stop = threading.Event()
        self.last_yield: float | None = None
        # removed with the panel
        self._tmp = tempfile.TemporaryDirectory(prefix="solderless-build-")
        self.folder = Path(self._tmp.name)
        lay = QVBoxLayout(self)
        row = QHBoxLayout()
        self.sheet_btn = QPushButton("Build sheet")
        self.sheet_btn.setToolTip("parts list with standard values, ratings, supply and "
                                  "battery life, connections")
        self.mc_btn = QPushButton("Monte Carlo")
        self.mc_btn.setToolTip("every part drawn within its tolerance: yield, spreads, "
                               "which parts matter")
        self.trials = QSpinBox()
        self.trials.setRange(2, 100000)
        self.trials.setValue(50)
        self.trials.setSuffix(" trials")
        self.stop_btn = QPushButton("Stop")
        self.stop_btn.setEnabled(False)
        self.progress = QProgressBar()
        self.status = QLabel("")
        self.status.setProperty("role", "read")
        for w in (self.sheet_btn, self.mc_btn, self.trials, self.stop_btn):
            row.addWidget(w)
        row.addWidget(self.progress, 1)
        lay.addLayout(row)
        lay.addWidget(self.status)
        self.view = QTextBrowser()
        self.view.setOpenExternalLinks(False)
        lay.addWidget(self.view, 1)
        self.sheet_btn.clicked.connect(self.make_sheet)
        self.mc_btn.clicked.connect(self.run_montecarlo)
        self.stop_btn.clicked.connect(self._stop.set)
        self.sig.progress.connect(self._progress)
        self.sig.sheet.connect(self._show)
        self.sig.montecarlo.connect(self._show_mc)
        self.sig.failed.connect(self._failed)

    # ------------------------------------------------------------ running
    def busy(self) -> bool:
        return self._thread is not None and self._thread.is_alive()

    def _start(self, fn, label: str) -> bool:
        if self.busy():
            return False
        self._stop.clear()
        self.sheet_btn.setEnabled(False)
        self.mc_btn.setEnabled(False)
        self.stop_btn.setEnabled(True)
        self.status.setText(label)
        self.progress.setRange(0, 0)
        self._thread = threading.Thread(target=self._guarded, args=(fn,), daemon=True,
                                        name="build-view")
        self._thread.start()
        return True

    def _guarded(self, fn) -> None:
        try:
            fn()
        except SolderlessError as exc:
            self.sig.failed.emit(str(exc))
        except Exception as exc:  # noqa: BLE001 - shown, not swallowed
            self.sig.failed.emit(f"internal error: {type(exc).__name__}: {exc}")

    def make_sheet(self) -> bool:
        d = self.get_design()

        def work():
            from solderless.engine.analysis.build import build_report, write_build
            rep = build_report(d, seconds=3.0)
            out = self.folder / "sheet"
            write_build(rep, out)
            self.sig.sheet.emit((out / "sheet.html").read_text(encoding="utf-8"), str(out))
        return self._start(work, "building the sheet ...")

    def run_montecarlo(self, trials: int | None = None, quick: bool = False) -> bool:
        d = self.get_design()
        n = int(trials or self.trials.value())

        def work():
            from solderless.engine.analysis import montecarlo as MC
            from solderless.engine.analysis.montecarlo_report import write_montecarlo
            spec = MC.TrialSpec(d, seed=0, control=not quick)
            runner = MC.runner_for(spec)
            rr = MC.run_trials(spec, range(n), workers=1, stop=self._stop,
                               progress=lambda done, tot: self.sig.progress.emit(done, tot))
            out = self.folder / "montecarlo"
            out.mkdir(parents=True, exist_ok=True)
            rep = write_montecarlo(out, d, spec, runner, rr, MC.Limits())
            self.sig.montecarlo.emit((out / "report.html").read_text(encoding="utf-8"),
                                     str(out), float(rep["summary"]["yield"]))
        return self._start(work, f"Monte Carlo: {n} trials ...")

    # ------------------------------------------------------------ results
    def _done(self) -> None:
        self.sheet_btn.setEnabled(True)
        self.mc_btn.setEnabled(True)
        self.stop_btn.setEnabled(False)
        self.progress.setRange(0, 1)
        self.progress.setValue(1)

    def _progress(self, done: int, total: int) -> None:
        self.progress.setRange(0, total)
        self.progress.setValue(done)

    def _load(self, html: str, folder: str) -> None:
        self.view.setSearchPaths([folder])
        self.view.document().setBaseUrl(QUrl.fromLocalFile(folder + "/"))
        self.view.setHtml(html)

    def _show(self, html: str, folder: str) -> None:
        self._done()
        self._load(html, folder)
        self.status.setText(f"build sheet written to {folder}")

    def _show_mc(self, html: str, folder: str, yld: float) -> None:
        self._done()
        self.last_yield = yld
        self._load(html, folder)
        stopped = " (stopped early: partial results)" if self._stop.is_set() else ""
        self.status.setText(f"yield {100 * yld:.1f} %{stopped}; files in {folder}")

    def _failed(self, msg: str) -> None:
        self._done()
        self.status.setText(f"error: {msg}")

    def wait(self, timeout_s: float = 300.0) -> bool:
        """Tests: wait for the worker thread (signals still need the event loop)."""
        if self._thread is not None:
            self._thread.join(timeout_s)
        return not self.busy()
