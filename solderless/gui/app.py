"""``solderless gui [DESIGN]``: start the desktop workbench.

``--screenshot FILE.png`` opens the design, runs the offline preview and the
analyses, saves a picture of the whole window and exits (for the README and
for checks; works with ``QT_QPA_PLATFORM=offscreen``).
"""
from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

from solderless.engine.errors import SolderlessError


def add_gui_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the ``gui`` subcommand's arguments to ``parser``."""
    parser.add_argument("design", nargs="?", default=None,
                        help="design file (.toml), built-in design name, or SPICE netlist "
                             "(default: the flagship design)")
    parser.add_argument("--screenshot", metavar="FILE.png", default=None,
                        help="open, run the offline preview, save a picture of the whole "
                             "window to FILE.png and exit")
    parser.add_argument("--source", default="synth:notes",
                        help="preview source: synth:notes, synth:chords, synth:mutes, "
                             "synth:demo, tone:HZ:VOLTS or a WAV file (default synth:notes)")
    parser.add_argument("--seconds", type=float, default=3.0,
                        help="length of the offline preview in seconds (default 3)")
    parser.add_argument("--tab", choices=("live", "inside", "compare"), default="live",
                        help="tab to show (useful with --screenshot)")
    parser.add_argument("--config-dir", default=None, metavar="DIR",
                        help="folder for settings and autosaves (default: $SOLDERLESS_CONFIG_DIR, "
                             "else $XDG_CONFIG_HOME/solderless, else ~/.config/solderless)")


_APP = None
SWITCH_INTERVAL_S = 0.001


def tune_interpreter() -> None:
    """Shorten Python's thread switch interval (default 5 ms) to 1 ms. The GUI
    thread and the audio callback share the GIL; with a shorter interval the
    callback waits less for the GUI thread to let go of it (measured in
    bench/bench_gui.py)."""
    if sys.getswitchinterval() > SWITCH_INTERVAL_S:
        sys.setswitchinterval(SWITCH_INTERVAL_S)


def _app():
    """The QApplication (created once and kept alive) with the workbench style."""
    global _APP
    from PyQt6.QtWidgets import QApplication
    from solderless.gui import theme
    app = QApplication.instance() or QApplication(sys.argv[:1])
    _APP = app
    app.setApplicationName("Solderless")
    theme.apply(app)
    return app


def make_window(design=None, **kw):
    """Create the application (if needed) and a workbench window; ``design``
    is a Design or anything :func:`solderless.engine.design.load_design` accepts."""
    from solderless.engine.design import load_design
    from solderless.gui.window import MainWindow
    _app()
    d = design
    if d is not None and not hasattr(d, "stages"):
        d = load_design(d)
    return MainWindow(d, **kw)


def screenshot(win, path: str | os.PathLike, timeout_s: float = 180.0) -> Path:
    """Run the analyses and the preview, wait for them, save the window."""
    win.refresh_analysis()
    win.wait_idle(timeout_s)
    target = Path(path)
    target.parent.mkdir(parents=True, exist_ok=True)
    if not win.grab().save(str(target)):
        raise SolderlessError(f"could not write the picture {target}",
                              hint="check the folder exists and is writable; use .png")
    return target


def collect_on_gui_thread(app, every_ms: int = 500) -> None:
    """Run Python's cyclic garbage collector on the GUI thread only.

    The collector otherwise runs in whichever thread happens to allocate
    (the analyser's worker, the live host's reader), and a Qt widget caught
    in a reference cycle would then be destroyed off the thread that owns
    it, which can crash the event loop later. So automatic collection is
    switched off and a timer on the GUI thread collects instead (a common
    pattern for PyQt programs)."""
    import gc
    from PyQt6.QtCore import QTimer
    gc.disable()
    timer = QTimer(app)
    timer.timeout.connect(lambda: gc.collect())
    timer.start(every_ms)
    app._solderless_gc_timer = timer


def run_gui(args) -> int:
    """Entry point for ``solderless gui``; returns the exit status."""
    from solderless.engine.design import load_design
    if args.screenshot and not os.environ.get("DISPLAY") and \
            not os.environ.get("WAYLAND_DISPLAY"):
        os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    app = _app()
    tune_interpreter()
    collect_on_gui_thread(app)
    name = args.design
    if name is None:
        from solderless.engine.design import builtin_designs
        name = "flagship" if "flagship" in builtin_designs() else None
    design = None
    problem = None
    if name is not None:
        try:
            design = load_design(name)
        except SolderlessError as exc:
            if args.screenshot:
                raise
            problem = str(exc)
    from solderless.gui.window import MainWindow
    win = MainWindow(design, config=Path(args.config_dir) if args.config_dir else None,
                     recover="no" if args.screenshot else "ask", source=args.source,
                     seconds=args.seconds)
    win.tabs.setCurrentIndex({"live": 0, "inside": 1, "compare": 2}[args.tab])
    if problem:
        win.notices.add(f"Could not open {name}: {problem}", "bad")
    if args.screenshot:
        win.show()
        out = screenshot(win, args.screenshot)
        for what, msg in win.problems:
            print(f"note: {what}: {msg}", file=sys.stderr)
        print(f"wrote {out}")
        win.ask = lambda _q: "discard"
        win.close()
        return 0
    win.show()
    return int(app.exec())
