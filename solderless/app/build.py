"""Command-line front ends: ``solderless build``, ``montecarlo`` and ``sweep``.

Results are written as they are: on Ctrl-C the trials finished so far are
written out (CSV, JSON, report) and the command exits with status 130.
"""
from __future__ import annotations

import argparse
import csv
import io
import math
import sys
from pathlib import Path

from solderless.engine.analysis.montecarlo_report import csv_cell, write_montecarlo, write_text
from solderless.engine.errors import DesignError


def _design_arg(p):
    from solderless.app.cli import _add_design_arg
    _add_design_arg(p)


def _load(args):
    from solderless.app.cli import _load as load
    return load(args)


def _outdir(path: str) -> Path:
    from solderless.engine.fileio import output_folder
    return output_folder(path)


# ------------------------------------------------------------------ build

def add_build_arguments(p: argparse.ArgumentParser) -> None:
    _design_arg(p)
    p.add_argument("--out", default="build-out", metavar="DIR",
                   help="folder for sheet.html, parts.csv, design.cir, connections.txt "
                        "(default build-out)")
    p.add_argument("--seconds", type=float, default=6.0, metavar="S",
                   help="seconds of the synthetic phrase rendered for the ratings (default 6)")
    p.add_argument("--input-peak", type=float, default=1.0, metavar="V",
                   help="peak volts at the jack of the phrase used for the ratings "
                        "(default 1.0: a hot pickup's loudest strum)")
    p.add_argument("--no-timing", action="store_true",
                   help="skip attack/release in the snapped-value comparison")


def run_build(args) -> int:
    from solderless.engine.analysis.build import build_report, write_build
    if not (args.seconds > 0 and math.isfinite(args.seconds)):
        raise DesignError(f"--seconds must be positive, not {args.seconds!r}")
    if not (args.input_peak > 0 and math.isfinite(args.input_peak)):
        raise DesignError(f"--input-peak must be positive volts, not {args.input_peak!r}")
    d = _load(args)
    rep = build_report(d, seconds=args.seconds, timing=not args.no_timing,
                       peak=args.input_peak)
    files = write_build(rep, Path(args.out))
    for e in rep.errors:
        print(f"error (sheet): {e}", file=sys.stderr)
    for w in rep.warnings:
        print(f"warning: {w}", file=sys.stderr)
    n = sum(g["quantity"] for g in rep.groups)
    print(f"build sheet for {d.name}: {n} parts in {len(rep.groups)} lines")
    for k, f in files.items():
        print(f"  wrote {f}")
    if rep.netlist_note:
        print(f"  note: {rep.netlist_note}")
    return 0


# ------------------------------------------------------------------ common

def _parallel_args(p):
    p.add_argument("--workers", type=int, default=None, metavar="N",
                   help="local worker processes (default: every core; 1 runs in this process)")
    p.add_argument("--cluster", metavar="ADDRESS",
                   help="run on a Dask distributed scheduler, e.g. tcp://host:8786")
    p.add_argument("--quick", action="store_true",
                   help="operating point and 1 kHz figures only (no renders)")


def _progress(label: str, total: int):
    """The CLI's progress bar on stderr (shown on a terminal only)."""
    from solderless.app.cli import Progress
    pr = Progress(total, label, min_seconds=0.5)
    return pr, (lambda done, tot: pr.update(done))


def _run(spec, indices, args, label, job=None):
    from solderless.engine.analysis.montecarlo import run_trials
    if args.workers is not None and args.workers < 1:
        raise DesignError(f"--workers must be 1 or more, not {args.workers}")
    pr, tick = _progress(label, len(indices))
    try:
        rr = run_trials(spec, indices, workers=args.workers, cluster=args.cluster,
                        progress=tick, job=job, mp_context="fork")
    finally:
        pr.close()
    return rr


# ------------------------------------------------------------------ montecarlo

def add_montecarlo_arguments(p: argparse.ArgumentParser) -> None:
    _design_arg(p)
    p.add_argument("--trials", type=int, default=200, metavar="N", help="number of trials "
                   "(default 200)")
    p.add_argument("--seed", type=int, default=0, metavar="S", help="random seed (default 0)")
    p.add_argument("--dist", choices=("uniform", "normal"), default="uniform",
                   help="distribution within each tolerance: uniform (default) or normal "
                        "with sigma = tolerance/3")
    p.add_argument("--tolerance", action="append", default=[], metavar="PART=TOL",
                   help="set a part's tolerance for this run, e.g. gain.RCTL=1%% (repeatable)")
    p.add_argument("--gain-limit", type=float, default=1.0, metavar="DB",
                   help="yield: gain at 1 kHz within this many dB of nominal (default 1)")
    p.add_argument("--limit", action="append", default=[], metavar="METRIC=LO:HI",
                   help="extra yield limit, e.g. release=0.1:0.2 (repeatable)")
    p.add_argument("--no-device-spread", action="store_true",
                   help="keep transistor and diode parameters at their typical values")
    p.add_argument("--out", default="montecarlo-out", metavar="DIR",
                   help="folder for trials.csv, summary.json, report.html")
    p.add_argument("--netlists", type=int, default=0, metavar="K",
                   help="also write SPICE netlists of the first K trials with their drawn "
                        "values (trial-<k>.cir), to check them in another simulator")
    _parallel_args(p)


def _parse_limits(items, gain_limit):
    from solderless.engine.analysis.montecarlo import METRICS, Limits
    extra = {}
    for it in items:
        if "=" not in it or ":" not in it.split("=", 1)[1]:
            raise DesignError(f"cannot read limit '{it}'", hint="write METRIC=LO:HI, e.g. "
                              "release=0.1:0.2")
        m, rng = it.split("=", 1)
        if m not in METRICS:
            raise DesignError(f"unknown metric '{m}' in --limit",
                              hint="metrics: " + ", ".join(METRICS))
        try:
            lo, hi = (float(x) for x in rng.split(":", 1))
        except ValueError:
            raise DesignError(f"cannot read limit '{it}'", hint="LO and HI are numbers") from None
        extra[m] = (lo, hi)
    if not (gain_limit > 0 and math.isfinite(gain_limit)):
        raise DesignError(f"--gain-limit must be positive, not {gain_limit!r}")
    return Limits(gain_db=gain_limit, extra=extra)


def run_montecarlo(args) -> int:
    from solderless.engine.analysis.montecarlo import TrialSpec
    if args.trials < 1:
        raise DesignError(f"--trials must be 1 or more, not {args.trials}")
    if args.seed < 0:
        raise DesignError(f"--seed must be 0 or more, not {args.seed}")
    limits = _parse_limits(args.limit, args.gain_limit)
    d = _load(args)
    for it in args.tolerance:
        if "=" not in it:
            raise DesignError(f"cannot read '{it}'", hint="write PART=TOL, e.g. gain.RCTL=1%")
        q, tol = it.split("=", 1)
        d.set_tolerance(q.strip(), tol.strip())
    out = _outdir(args.out)
    spec = TrialSpec(d, seed=args.seed, dist=args.dist, control=not args.quick,
                     device_spread=not args.no_device_spread)
    from solderless.engine.analysis.montecarlo import TrialRunner
    nominal = TrialRunner(spec)          # checks tolerances before any worker starts
    rr = _run(spec, range(args.trials), args, f"montecarlo {d.name}")
    rep = write_montecarlo(out, d, spec, nominal, rr, limits)
    if args.netlists > 0:
        from solderless.engine.formats.spice import circuit_to_netlist
        for r in rr.results[:args.netlists]:
            circ = nominal.circuit_for(r["draws"])
            write_text(out / f"trial-{r['index']}.cir",
                   circuit_to_netlist(circ, title=f"{d.name}, trial {r['index']}"))
    s = rep["summary"]
    print(f"Monte Carlo of {d.name}: {len(rr.results)} of {args.trials} trials "
          f"({rr.where}, seed {args.seed}, {args.dist})")
    if not rr.results:
        print("  no trial finished")
    else:
        print(f"  yield {s['passed']}/{s['trials']} = {100 * s['yield']:.1f} % "
              f"(gain within {limits.gain_db:g} dB, every device in its nominal region"
              + "".join(f", {m} in [{lo:g}, {hi:g}]" for m, (lo, hi) in limits.extra.items())
              + ")")
    for m, st in s["stats"].items():
        print(f"  {m:<13} nominal {st['nominal']:.4g}  mean {st['mean']:.4g}  "
              f"sd {st['std']:.3g}  5..95 % {st['p05']:.4g}..{st['p95']:.4g}")
    sens = s["sensitivity"].get("gain_db") or []
    if sens:
        print("  gain spread driven most by: " + ", ".join(
            f"{x['part']} ({100 * x['share']:.0f} %)" for x in sens[:5]))
    print(f"  wrote {out / 'report.html'}, trials.csv, summary.json")
    if rr.interrupted:
        print(f"stopped after {len(rr.results)} of {args.trials} trials; the partial "
              f"results are written", file=sys.stderr)
        return 130
    return 0


# ------------------------------------------------------------------ sweep

def add_sweep_arguments(p: argparse.ArgumentParser) -> None:
    from solderless.engine.analysis.montecarlo import METRICS
    _design_arg(p)
    p.add_argument("--part", required=True, metavar="STAGE.PART", help="part whose value is "
                   "swept, e.g. detector.CS")
    p.add_argument("--values", required=True, metavar="RANGE",
                   help="E12:1u..47u (an IEC 60063 series between two values) or 1u,2u2,4u7")
    p.add_argument("--pot", metavar="STAGE.POT=START:STOP:COUNT",
                   help="also turn a pot, e.g. detector.THRESHOLD=0:1:5")
    p.add_argument("--metric", default="gain_db", choices=list(METRICS),
                   help="figure to tabulate and plot (default gain_db)")
    p.add_argument("--out", default="sweep-out", metavar="DIR",
                   help="folder for sweep.csv and sweep.png")
    _parallel_args(p)


def run_sweep(args) -> int:
    from solderless.engine.analysis.montecarlo import METRICS, TrialSpec
    from solderless.engine.analysis.sweep import SweepJob, make_grid, plot, table
    d = _load(args)
    grid = make_grid(d, args.part, args.values, args.pot)
    needs_control = args.metric in ("threshold_db", "gr_ref_db", "attack", "release")
    if needs_control and not d.control_probe():
        raise DesignError(f"metric '{args.metric}' needs a design with a control "
                          "([meters] control)", file=str(d.path) if d.path else None)
    if needs_control and args.quick:
        raise DesignError(f"metric '{args.metric}' needs renders; drop --quick")
    out = _outdir(args.out)
    spec = TrialSpec(d, control=needs_control, threshold=args.metric == "threshold_db",
                     device_spread=False)
    rr = _run(spec, range(len(grid)), args, f"sweep {args.part}", job=SweepJob(grid))
    unit = METRICS[args.metric]
    rows = table(grid, rr.results, args.metric)
    head = ["value"] + (["rotation"] if grid.pot else []) + [f"{args.metric} ({unit})"]
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    # the chosen metric first, then every other figure the grid point measured
    cols = [args.metric] + [m for m in METRICS if m != args.metric
                            and any(m in r for r in rr.results)]
    w.writerow(["value_si"] + (["rotation"] if grid.pot else []) + cols)
    for r in rr.results:
        w.writerow([f"{r['value']:.6g}"] + ([f"{r['rotation']:.6g}"] if grid.pot else [])
                   + [csv_cell(r.get(m, float("nan"))) for m in cols])
    write_text(out / "sweep.csv", buf.getvalue())
    if rr.results:
        plot(grid, rr.results, args.metric, unit, out / "sweep.png")
    print(f"Sweep of {args.part} on {d.name} ({rr.where}): {args.metric}")
    print("  " + "  ".join(f"{h:>14}" for h in head))
    for r in rows:
        print("  " + "  ".join(f"{c:>14.4g}" if isinstance(c, float) else f"{c:>14}"
                               for c in r))
    print(f"  wrote {out / 'sweep.csv'}" + (f", {out / 'sweep.png'}" if rr.results else ""))
    if rr.interrupted:
        print(f"stopped after {len(rr.results)} of {len(grid)} points; the partial "
              "results are written", file=sys.stderr)
        return 130
    return 0
