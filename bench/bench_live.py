"""Live host benchmark: block processing time and edit latency.

For every built-in design and an A/B pair, at 64, 128 and 256 samples per
block and 48 kHz, runs the host's whole audio-thread path
(``LiveHost._audio_block``: source, simulator(s), output stage, meters) on
the built-in synthetic instrument and reports the distribution of the time
per block (median, p99, p99.9, max) as a fraction of the block period:
for a first pass by the wall clock and by the thread's CPU time, and for
each block's smallest CPU time over --passes fresh passes (the work per
block is deterministic, so that is the code's own cost with a shared
machine's interference taken out); and each pass's own p99.9 (min, median,
max over the passes: how much single runs vary).  Target from issue 3: p99.9 <= 25 % of
the period for the flagship at 64.  Beside the times, the solver's work in
the slowest 0.1 % of blocks (factorisations, iterations and low-rank
Jacobian updates, which do not depend on the machine) for judging solver changes on a noisy machine.

Then, with blocks paced in real time on a thread (as a sound card would),
measures the time from a part change request to the start of the first block
that uses it.

Prints a table and writes bench/results/live.json.

    python bench/bench_live.py [--seconds 5] [--designs a,b] [--quick] [--passes 3]
"""
from __future__ import annotations

import argparse
import json
import platform
import sys
import threading
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))  # the stand-in design for the host bench

from solderless.engine.design import builtin_designs, load_design  # noqa: E402
from solderless.engine.errors import SolderlessError  # noqa: E402
from solderless.engine.live.host import LiveHost  # noqa: E402
from solderless.engine.live.source import LoopSource  # noqa: E402
from solderless.engine.solver import kernel_layout as LAYOUT  # noqa: E402

FS = 48000.0
BLOCKS = (64, 128, 256)
AB_PAIR = ("flagship", "flagship-slow-release")


def _source(phrase_volts):
    return LoopSource(phrase_volts, "synthetic instrument")


def _one_pass(design, variant, block, seconds, volts):
    """(prepare seconds, wall and thread-CPU seconds of every block, meters)
    of one fresh host over ``seconds`` of audio through the host path."""
    h = LiveHost(load_design(design), variant=load_design(variant) if variant else None,
                 fs=FS, block=block, source=_source(volts), autosave=False)
    try:
        t0 = time.perf_counter()
        h.prepare()
        prep = time.perf_counter() - t0
        n = int(seconds * FS / block)
        out = np.zeros((block, 2), dtype=np.float32)
        t = np.zeros(n)
        c = np.zeros(n)
        work = np.zeros((n, 3))     # factorisations, iterations, low-rank updates
        #                             per block (all voices)
        for _ in range(int(0.2 * FS / block)):        # warm-up, not counted
            h._audio_block(None, out, block, False)
        pc, tt = time.perf_counter, time.thread_time
        cnts = [v.sim._stats for v in h.voices]
        for i in range(n):
            w0 = [sum(k[s] for k in cnts)
                  for s in (LAYOUT.STAT_FACTOR, LAYOUT.STAT_ITERS, LAYOUT.STAT_UPDATE)]
            a, ca = pc(), tt()
            h._audio_block(None, out, block, False)
            c[i] = tt() - ca
            t[i] = pc() - a
            work[i] = [sum(k[s] for k in cnts) - w
                       for s, w in zip((LAYOUT.STAT_FACTOR, LAYOUT.STAT_ITERS, LAYOUT.STAT_UPDATE), w0)]
        if h.error is not None:
            raise h.error
        return prep, t, c, h.meters(), work
    finally:
        h.close()


def _case(design, variant) -> str:
    """A case's name in the printed tables."""
    return design if variant is None else f"{design} vs {variant}"


def block_times(design, variant, block, seconds, volts, passes: int = 3) -> dict:
    """Time every block of ``seconds`` of audio through the host path.

    The first pass gives the distribution as one run meets it (wall clock
    and the thread's CPU time).  The work per block is deterministic (same
    input, a fresh host at the same operating point each pass), so the
    smallest CPU time of each block over ``passes`` passes is the cost of
    the code itself on this machine, without what a shared machine adds (a
    neighbour's load, cache and memory-bandwidth contention): both are
    reported."""
    runs = [_one_pass(design, variant, block, seconds, volts) for _ in range(max(1, passes))]
    prep, t, c, meters, work = runs[0]
    best = np.min(np.vstack([r[2] for r in runs]), axis=0)
    # the solver's work in the slowest 0.1 % of blocks (by their best time):
    # deterministic, so a change to the solver can be judged by it on a
    # machine too noisy to time the tail
    slow = best >= np.quantile(best, 0.999)
    period = block / FS
    # each pass's own p99.9 (CPU time): how much a single run varies
    pass_p999 = [float(np.quantile(r[2], 0.999) / period) for r in runs]
    q = np.quantile(t, [0.5, 0.99, 0.999])
    qc = np.quantile(c, [0.5, 0.99, 0.999])
    qb = np.quantile(best, [0.5, 0.99, 0.999])
    return {"design": design, "variant": variant, "block": block, "blocks": int(t.size),
            "period_s": period, "prepare_s": prep, "passes": len(runs),
            "median_s": float(q[0]), "p99_s": float(q[1]), "p999_s": float(q[2]),
            "max_s": float(t.max()),
            "median_frac": float(q[0] / period), "p99_frac": float(q[1] / period),
            "p999_frac": float(q[2] / period), "max_frac": float(t.max() / period),
            "cpu_median_frac": float(qc[0] / period), "cpu_p99_frac": float(qc[1] / period),
            "cpu_p999_frac": float(qc[2] / period), "cpu_max_frac": float(c.max() / period),
            "best_median_frac": float(qb[0] / period), "best_p99_frac": float(qb[1] / period),
            "best_p999_frac": float(qb[2] / period), "best_max_frac": float(best.max() / period),
            "pass_cpu_p999_frac": pass_p999,
            "pass_cpu_p999_median_frac": float(np.median(pass_p999)),
            "tail_factorizations": float(work[slow, 0].mean()),
            "tail_iterations": float(work[slow, 1].mean()),
            "tail_jacobian_updates": float(work[slow, 2].mean()),
            "max_block_factorizations": int(work[:, 0].max()),
            "nonconverged": meters["nonconverged"]}


def host_overhead(block: int, ab: bool, n: int = 5000) -> dict:
    """CPU time per block of the host path alone (stand-in circuit whose
    kernel is a few operations per sample): source, output stage, loudness,
    meters and the Python glue."""
    from solderless.engine.live.source import ToneSource
    from standin import StandInDesign, StandInSimulator
    h = LiveHost(StandInDesign(), variant=StandInDesign() if ab else None, fs=FS,
                 block=block, source=ToneSource(440.0, 0.2),
                 simulator_factory=StandInSimulator, autosave=False)
    h.prepare()
    out = np.zeros((block, 2), dtype=np.float32)
    for _ in range(500):
        h._audio_block(None, out, block, False)
    c = np.zeros(n)
    for i in range(n):
        a = time.thread_time()
        h._audio_block(None, out, block, False)
        c[i] = time.thread_time() - a
    h.close()
    return {"block": block, "ab": ab, "cpu_median_s": float(np.median(c)),
            "cpu_p99_s": float(np.quantile(c, 0.99)),
            "cpu_median_frac": float(np.median(c) / (block / FS))}


def edit_latency(design, part, block, volts, n_edits=20) -> dict:
    """Real-time paced blocks on a thread; step ``part`` up and down and
    record the time from request to the first block that uses the change."""
    h = LiveHost(load_design(design), fs=FS, block=block, source=_source(volts),
                 autosave=False)
    h.prepare()
    # the measurement run after each edit would compete for the CPU like the
    # real worker does; keep it (it is what a user gets)
    stop = threading.Event()
    out = np.zeros((block, 2), dtype=np.float32)

    def pace():
        period = block / FS
        nxt = time.perf_counter()
        while not stop.is_set():
            h._audio_block(None, out, block, False)
            nxt += period
            d = nxt - time.perf_counter()
            if d > 0:
                time.sleep(d)
            else:
                nxt = time.perf_counter()
    th = threading.Thread(target=pace, daemon=True)
    th.start()
    try:
        time.sleep(0.3)
        rederive = []
        for k in range(n_edits):
            a = time.perf_counter()
            h.step_value(part, 1 if k % 2 == 0 else -1).result(30)
            rederive.append(time.perf_counter() - a)
            time.sleep(0.3)
        time.sleep(0.05)
    finally:
        stop.set()
        th.join(5)
        h.close()
    lat = np.array(h.edit_latencies_s)
    return {"design": design, "part": part, "block": block, "edits": int(lat.size),
            "latency_median_s": float(np.median(lat)) if lat.size else None,
            "latency_max_s": float(lat.max()) if lat.size else None,
            "edit_job_median_s": float(np.median(rederive)),
            "note": "latency: request to the start of the first block using the change; "
                    "edit job: design edit + re-derive + autosave, in the worker"}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--seconds", type=float, default=5.0, help="audio per case (default 5)")
    ap.add_argument("--designs", help="comma-separated designs (default: all built-in)")
    ap.add_argument("--quick", action="store_true", help="1 s per case, 64 samples only")
    ap.add_argument("--passes", type=int, default=3,
                    help="passes per case; each block's smallest CPU time over them is "
                         "reported beside the first pass (default 3)")
    args = ap.parse_args(argv)
    from solderless.engine.synth import render_phrase
    volts = render_phrase("demo", FS)
    designs = args.designs.split(",") if args.designs else sorted(builtin_designs())
    blocks = (64,) if args.quick else BLOCKS
    secs = 1.0 if args.quick else args.seconds
    rows, errors = [], []
    cases = [(d, None) for d in designs] + [AB_PAIR]
    print("time per block as a fraction of the block period: first pass by the wall clock "
          "and by the thread's CPU time\n(which leaves out preemption by other processes); "
          f"then each block's least CPU time over {args.passes} passes (the code's own cost)")
    print(f"{'design':<34}{'block':>6}{'median':>8}{'p99':>8}{'p99.9':>8}{'max':>8}"
          f" |{'cpu med':>8}{'p99':>8}{'p99.9':>8}{'max':>8} |{'best med':>9}{'p99':>7}"
          f"{'p99.9':>7}{'max':>7}")
    for d, v in cases:
        for b in blocks:
            name = _case(d, v)
            try:
                r = block_times(d, v, b, secs, volts, args.passes)
            except SolderlessError as exc:
                errors.append({"design": name, "block": b, "error": str(exc)})
                print(f"{name:<34}{b:>6}   error: {exc}")
                break
            rows.append(r)
            print(f"{name:<34}{b:>6}{r['median_frac']:8.3f}{r['p99_frac']:8.3f}"
                  f"{r['p999_frac']:8.3f}{r['max_frac']:8.3f} |{r['cpu_median_frac']:8.3f}"
                  f"{r['cpu_p99_frac']:8.3f}{r['cpu_p999_frac']:8.3f}{r['cpu_max_frac']:8.3f} |"
                  f"{r['best_median_frac']:9.3f}{r['best_p99_frac']:7.3f}"
                  f"{r['best_p999_frac']:7.3f}{r['best_max_frac']:7.3f}")
    overhead = []
    for b in blocks:
        for ab in (False, True):
            r = host_overhead(b, ab)
            overhead.append(r)
            print(f"host path alone{' (A/B)' if ab else ''}, block {b}: CPU median "
                  f"{1e6 * r['cpu_median_s']:.1f} us ({100 * r['cpu_median_frac']:.1f} % of the "
                  f"period), p99 {1e6 * r['cpu_p99_s']:.1f} us")
    lat = []
    for d, part in (("feedforward", "detector.C1"), ("flagship", "detector.C1")):
        for b in (64, 256):
            try:
                r = edit_latency(d, part, b, volts)
            except SolderlessError as exc:
                errors.append({"design": d, "edit": part, "error": str(exc)})
                print(f"edit latency {d}: error: {exc}")
                break
            lat.append(r)
            print(f"edit latency {d} {part} block {b}: median "
                  f"{1e3 * r['latency_median_s']:.2f} ms, max {1e3 * r['latency_max_s']:.2f} ms "
                  f"(edit job {1e3 * r['edit_job_median_s']:.1f} ms)")
    target = [r for r in rows if r["design"] == "flagship" and r["variant"] is None
              and r["block"] == 64]
    print(f"p99.9 of each pass by the thread's CPU time (min / median / max over "
          f"{args.passes} passes):")
    for r in rows:
        if r["block"] == 64:
            name = _case(r["design"], r["variant"])
            pp = r["pass_cpu_p999_frac"]
            print(f"  {name:<34} 64: {min(pp):.3f} / {np.median(pp):.3f} / {max(pp):.3f}")
    print("solver work in the slowest 0.1 % of blocks (mean factorisations / iterations / "
          "low-rank Jacobian updates; most factorisations in one block):")
    for r in rows:
        if r["block"] == 64:
            name = _case(r["design"], r["variant"])
            print(f"  {name:<34} 64: {r['tail_factorizations']:6.1f} / "
                  f"{r['tail_iterations']:6.1f} / {r['tail_jacobian_updates']:5.1f}; "
                  f"{r['max_block_factorizations']}")
    import os
    res = {"fs": FS, "seconds_per_case": secs, "machine": platform.platform(),
           "cpus": os.cpu_count(), "load_average_at_end": os.getloadavg(),
           "python": platform.python_version(), "block_times": rows,
           "edit_latency": lat, "host_overhead": overhead, "errors": errors,
           "target": {"what": "flagship, 64 samples, single design: p99.9 <= 0.25 of the period",
                      "p999_frac": target[0]["p999_frac"] if target else None,
                      "cpu_p999_frac": target[0]["cpu_p999_frac"] if target else None,
                      "best_p999_frac": target[0]["best_p999_frac"] if target else None,
                      "met_wall": (target[0]["p999_frac"] <= 0.25) if target else None,
                      "met_cpu": (target[0]["cpu_p999_frac"] <= 0.25) if target else None,
                      "met_best": (target[0]["best_p999_frac"] <= 0.25) if target else None}}
    out = ROOT / "bench" / "results" / "live.json"
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps(res, indent=1))
    print(f"wrote {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
