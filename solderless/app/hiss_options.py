"""Live noise options of ``solderless render`` and ``play`` (``--hiss``,
``--hiss-seed``, the design's ``hiss`` setting) and the noise-floor line
of their summaries.  Kept apart from the ``hiss`` command's module so that
a render's parser imports no other command (tests/test_cli_startup.py).
"""
from __future__ import annotations

import argparse


# ------------------------------------------------------------------ live noise options

def add_hiss_options(p: argparse.ArgumentParser) -> None:
    """``--hiss/--no-hiss`` and ``--hiss-seed`` for render and play."""
    from solderless.app.cli import whole_in
    p.add_argument("--hiss", action=argparse.BooleanOptionalAction, default=None,
                   help="play the circuit's own noise (thermal, shot, flicker) inside the "
                        "simulation (default: the design's 'hiss' setting, else off)")
    p.add_argument("--hiss-seed", type=whole_in(0, 2 ** 62, "seed"), default=None,
                   metavar="N", help="random sequence of the noise (default: the design's "
                                     "'hiss_seed', else 0); the same seed repeats exactly")


def hiss_choice(args, design) -> tuple[bool, int]:
    """(on, seed): the command line over the design's setting."""
    from solderless.engine.solver.livenoise import design_setting
    on, seed = design_setting(design)
    if getattr(args, "hiss", None) is not None:
        on = bool(args.hiss)
    if getattr(args, "hiss_seed", None) is not None:
        seed = int(args.hiss_seed)
    return on, seed


# the noise-floor figures and their line live with the analysis, so the
# console and the workbench show the same readout
# (solderless/engine/analysis/noise.py); imported when used, so a render's
# parser stays light (tests/test_cli_startup.py)

def floor_summary(circuit, seed: int) -> dict:
    """:func:`solderless.engine.analysis.noise.floor_summary`."""
    from solderless.engine.analysis.noise import floor_summary as summary
    return summary(circuit, seed)


def floor_line(s: dict) -> str:
    """:func:`solderless.engine.analysis.noise.floor_line`."""
    from solderless.engine.analysis.noise import floor_line as line
    return line(s)
