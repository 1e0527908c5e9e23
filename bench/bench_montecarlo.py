"""Tolerance Monte Carlo throughput on the built-in compressor.

1. Trials with the operating point, the 1 kHz gain and input impedance and
   a 1 s tone-burst render (attack, release, gain reduction at the
   reference level; the threshold's stepped tone is left out) on 1 worker
   (this process, runner built and warmed before the clock starts) and on 2
   worker processes (a fresh pool: its start-up and the workers' runner
   builds are inside the timing).  Speed-up = 2-worker rate / 1-worker rate
   (target 1.7x or more, issue 19).
2. 1000 operating-point-only trials (no renders) on every core (target
   under 10 s, pool start-up included) and on 1 worker.

Results are checked identical between the runs (same seed).  Wall times on
a shared machine vary; the load average is recorded, and so is the CPU time
of the runs (this process and its pool workers): when the pool's CPU time
is no more than one worker's, the pool adds no work of its own and the
wall speed-up is limited by the cores other programs leave free.  Prints a table and
writes bench/results/montecarlo.json.

Run from the repository root:  python bench/bench_montecarlo.py [--trials N]
"""
from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from solderless.engine.analysis import montecarlo as MC  # noqa: E402
from solderless.engine.design import load_design  # noqa: E402

DESIGN = "flagship"


def _cpu():
    """CPU seconds of this process plus its finished children."""
    me = resource.getrusage(resource.RUSAGE_SELF)
    ch = resource.getrusage(resource.RUSAGE_CHILDREN)
    return me.ru_utime + me.ru_stime + ch.ru_utime + ch.ru_stime


def timed(spec, n, workers):
    if workers == 1:
        MC.runner_for(spec).run(0)            # build and warm outside the clock
    c0 = _cpu()
    t0 = time.perf_counter()
    rr = MC.run_trials(spec, range(n), workers=workers, mp_context="fork")
    wall = time.perf_counter() - t0
    cpu = _cpu() - c0
    assert len(rr.results) == n and not rr.interrupted
    return wall, rr, cpu


def same(a, b):
    key = lambda rr: [(r["index"], r.get("gain_db"), r.get("release")) for r in rr.results]  # noqa: E731
    return key(a) == key(b)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials", type=int, default=300,
                    help="trials with renders (default 300: enough to amortise the pool's start)")
    ap.add_argument("--op-trials", type=int, default=1000)
    args = ap.parse_args()
    d = load_design(DESIGN)
    load0 = os.getloadavg()
    spec = MC.TrialSpec(d, seed=1, control=True, threshold=False, render_seconds=1.0)
    w1, r1, c1 = timed(spec, args.trials, 1)
    w2, r2, c2 = timed(spec, args.trials, 2)
    ops = MC.TrialSpec(d, seed=1, control=False)
    o1, q1, _ = timed(ops, args.op_trials, 1)
    cores = os.cpu_count() or 1
    oN, qN, _ = timed(ops, args.op_trials, cores)
    res = {
        "design": DESIGN, "machine": platform.machine(), "cpus": cores,
        "python": platform.python_version(), "loadavg_start": load0,
        "loadavg_end": os.getloadavg(),
        "render_trials": args.trials,
        "render_1_worker_s": w1, "render_1_worker_trials_per_s": args.trials / w1,
        "render_2_workers_s": w2, "render_2_workers_trials_per_s": args.trials / w2,
        "speedup_2_workers": w1 / w2, "speedup_target": 1.7,
        "render_1_worker_cpu_s": c1, "render_2_workers_cpu_s": c2,
        # CPU work of the pool (parent and workers) relative to one worker
        # for the same trials: near or below 1 means the pool adds no work
        # of its own; the wall speed-up then depends on free cores
        "cpu_ratio_2_workers_to_1": c2 / c1,
        "render_results_identical": same(r1, r2),
        "op_trials": args.op_trials, "op_1_worker_s": o1,
        f"op_{cores}_workers_s": oN, "op_target_s": 10.0,
        "op_results_identical": same(q1, qN),
    }
    print(f"Monte Carlo on {DESIGN} ({cores} cpus, load {load0[0]:.2f})")
    print(f"{'run':<44} {'wall s':>8} {'trials/s':>9}")
    print(f"{'op + 1 s render, 1 worker':<44} {w1:8.2f} {args.trials / w1:9.2f}")
    print(f"{'op + 1 s render, 2 workers (pool start incl.)':<44} {w2:8.2f} "
          f"{args.trials / w2:9.2f}")
    print(f"  speed-up {w1 / w2:.2f}x wall (target 1.7x); CPU seconds {c1:.2f} (1 worker) vs "
          f"{c2:.2f} (pool): the pool adds {100 * (c2 / c1 - 1):+.0f} % work")
    print(f"{f'{args.op_trials} op-only trials, 1 worker':<44} {o1:8.2f} "
          f"{args.op_trials / o1:9.1f}")
    print(f"{f'{args.op_trials} op-only trials, {cores} workers':<44} {oN:8.2f} "
          f"{args.op_trials / oN:9.1f}  (target < 10 s)")
    print(f"identical results: renders {res['render_results_identical']}, "
          f"op {res['op_results_identical']}")
    out = ROOT / "bench" / "results" / "montecarlo.json"
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps(res, indent=2) + "\n")
    print(f"wrote {out.relative_to(ROOT)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
