"""``solderless hiss``: the noise a design makes at its output, from the
small-signal noise analysis at the operating point
(:mod:`solderless.engine.analysis.noise`): the spectral density at a few
frequencies (output and input-referred), the largest contributors, and
the integrated noise over 20 Hz-20 kHz unweighted and A-weighted
(IEC 61672-1), in volts, dBV and dBu.
"""
from __future__ import annotations

import argparse

from solderless.engine.errors import DesignError

#: Frequencies the table prints, Hz.
TABLE_HZ = (20.0, 100.0, 1000.0, 10000.0, 20000.0)


def add_hiss_arguments(p: argparse.ArgumentParser) -> None:
    from solderless.app.cli import _add_design_arg, number_in
    _add_design_arg(p, nargs="?")
    p.add_argument("--fmin", type=number_in(0, 1e6, "Hz", open_low=True), default=20.0,
                   metavar="HZ", help="low end of the integrated band, Hz (default 20)")
    p.add_argument("--fmax", type=number_in(0, 1e6, "Hz", open_low=True), default=20000.0,
                   metavar="HZ", help="high end of the integrated band, Hz (default 20000)")
    p.add_argument("--at", type=number_in(0, 1e6, "Hz", open_low=True), action="append",
                   default=None, metavar="HZ",
                   help="print the density at this frequency (repeatable; default "
                        + ", ".join(f"{f:g}" for f in TABLE_HZ) + " Hz)")
    p.add_argument("--csv", metavar="FILE", help="write the spectrum over the band as CSV "
                   "(freq_hz, out_v_per_rthz, in_v_per_rthz)")


def run_hiss(args) -> int:
    import numpy as np
    from solderless.app.cli import _flatten, _load, _write_csv
    from solderless.engine.analysis.noise import (band_grid, dbu, dbv, integrate,
                                                  noise_spectrum)
    if args.fmax <= args.fmin:
        raise DesignError(f"--fmax ({args.fmax:g} Hz) must be above --fmin ({args.fmin:g} Hz)")
    if args.csv:
        from solderless.engine.fileio import write_target
        write_target(args.csv)
    d = _load(args)
    circ = _flatten(d)
    band = band_grid((args.fmin, args.fmax))
    at = np.array(sorted(set(args.at or TABLE_HZ)), dtype=float)
    r = noise_spectrum(circ, np.concatenate([band, at]))
    nb = band.size
    out_psd = r.out_psd[:nb]
    v = integrate(band, out_psd)
    va = integrate(band, out_psd, "A")
    dens = r.out_density
    ind = r.in_density
    if args.csv:
        cols = [band, dens[:nb], ind[:nb] if ind is not None else np.full(nb, np.nan)]
        _write_csv(args.csv, "freq_hz,out_v_per_rthz,in_v_per_rthz", np.column_stack(cols),
                   inputs=[args.design])
        print(f"wrote {args.csv}: {nb} points")
    temp = r.sources.temperature_k - 273.15
    print(f"Noise of {d.name} at its output (small-signal, at the operating point, "
          f"{temp:g} degC; nV/rtHz)")
    print(f"{'freq':>10} {'output':>12} {'input-ref':>12}")
    for k in range(nb, nb + at.size):
        f = r.freqs[k]
        fi = f"{ind[k] * 1e9:12.3f}" if ind is not None and np.isfinite(ind[k]) else \
            f"{'-':>12}"
        print(f"{_hz(f):>10} {dens[k] * 1e9:12.3f} {fi}")
    lo, hi = args.fmin, args.fmax
    print(f"\nIntegrated {_hz(lo)}-{_hz(hi)}:")
    print(f"  unweighted  {v * 1e6:10.3f} uV rms  {dbv(v):7.1f} dBV  {dbu(v):7.1f} dBu")
    print(f"  A-weighted  {va * 1e6:10.3f} uV rms  {dbv(va):7.1f} dBV  {dbu(va):7.1f} dBu "
          "(IEC 61672-1)")
    top = r.top(5, (lo, hi))
    if top:
        print("\nLargest contributors (share of the unweighted power):")
        for name, share in top:
            print(f"  {name:<24} {100 * share:5.1f} %")
    for note in r.notes:
        print(f"note: {note}")
    return 0


def _hz(f: float) -> str:
    return f"{f / 1e3:g} kHz" if f >= 1e3 else f"{f:g} Hz"
