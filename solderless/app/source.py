"""`solderless source`: write a synthetic guitar phrase (solderless.engine.synth)
as a WAV file at the jack's calibrated level."""
from __future__ import annotations

import argparse
import os

import numpy as np

from solderless.engine.errors import SolderlessError
from solderless.engine.synth import PHRASES, PICKUPS, _pickup, render_phrase, write_wav


def add_source_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the ``source`` command's options to ``parser``."""
    parser.add_argument("--out", required=True, help="WAV file to write (float32, mono)")
    parser.add_argument("--phrase", default="demo", choices=sorted(PHRASES),
                        help="what to play (default: demo)")
    parser.add_argument("--pickup", default="single-coil", choices=sorted(PICKUPS),
                        help="pickup model (default: single-coil)")
    from solderless.app.cli import add_rate_option, number_in
    add_rate_option(parser, 48000.0, "sample rate, Hz (default 48000)")
    from solderless.engine.levels import FULL_SCALE_V
    parser.add_argument("--fs-volts", dest="fs_volts", type=number_in(0, 1e4, "V", open_low=True),
                        default=FULL_SCALE_V,
                        help="peak volts at the jack that map to digital full scale "
                             f"(default {FULL_SCALE_V:.4g}, the calibration every command "
                             "uses)")
    parser.add_argument("--seed", type=int, default=0, help="take number (variation)")
    parser.add_argument("--force", action="store_true",
                        help="overwrite --out if it exists")


def cli_source(args: argparse.Namespace) -> int:
    """Render a phrase to a WAV file; returns the exit status.

    User mistakes (unknown phrase, existing file without ``--force``,
    unwritable folder) raise :class:`SolderlessError` for the CLI to print.
    """
    out = args.out
    if os.path.exists(out) and not getattr(args, "force", False):
        raise SolderlessError("file exists and was left untouched", file=out,
                              hint="choose another --out name or add --force")
    pickup = _pickup(args.pickup)
    from solderless.app.cli import resolve_aliases
    resolve_aliases(args)
    fs = args.rate
    x = render_phrase(args.phrase, fs=fs, pickup=args.pickup,
                      seed=getattr(args, "seed", 0))
    clipped = write_wav(out, x, fs, args.fs_volts)
    peak = float(np.max(np.abs(x)))
    print(f"wrote {out}: phrase '{args.phrase}', {x.size / fs:.2f} s at {fs:g} Hz, "
          f"peak {peak * 1e3:.0f} mV ({20 * np.log10(max(peak, 1e-12) / args.fs_volts):.1f} dBFS)")
    from solderless.engine.levels import describe
    print(f"calibration: {describe(args.fs_volts)}")
    print(f"pickup '{args.pickup}': set the design's input series resistance to "
          f"{pickup.series_resistance / 1e3:g}k (resonance {pickup.resonance / 1e3:.2f} kHz)")
    if clipped:
        print(f"warning: {clipped} samples clipped; raise --fs-volts above {peak:.2f}")
    return 0
