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


def floor_summary(circuit, seed: int) -> dict:
    """The noise floor at the output (analysis, 20 Hz-20 kHz) for a render
    or play summary."""
    from solderless.engine.analysis.noise import dbu, dbv, noise_floor
    fl = noise_floor(circuit)
    return {"seed": seed, "band_hz": list(fl.band), "v_rms": fl.v_rms,
            "v_rms_a": fl.v_rms_a, "dbv": dbv(fl.v_rms), "dbu": dbu(fl.v_rms),
            "dbv_a": dbv(fl.v_rms_a), "dbu_a": dbu(fl.v_rms_a),
            "sources": len(fl.result.sources.sources)}


def floor_line(s: dict) -> str:
    """One summary line from :func:`floor_summary`."""
    return (f"hiss on (seed {s['seed']}, {s['sources']} noise sources): noise floor at the "
            f"output, 20 Hz-20 kHz: {s['v_rms'] * 1e6:.3g} uV rms ({s['dbv']:.1f} dBV, "
            f"{s['dbu']:.1f} dBu) unweighted, {s['v_rms_a'] * 1e6:.3g} uV rms "
            f"({s['dbv_a']:.1f} dBV, {s['dbu_a']:.1f} dBu) A-weighted")
