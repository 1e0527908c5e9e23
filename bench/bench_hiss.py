"""Cost of live noise: every built-in design rendered with noise off and on.

For each design in solderless/presets/designs: the synthetic phrase "demo"
(solderless.engine.synth) at the design's own oversampling, in 4096-sample
blocks through ``process_into`` as the live host does, once with the plain
``Simulator`` and once with ``HissSimulator`` (solderless/engine/solver/
livenoise.py: one current source per noise source, samples drawn per
block).  Kernels are warmed first; the two are timed alternately,
``--repeat`` times each, and each keeps its best CPU time
(``time.process_time``: the machine is shared).  Real-time factor = audio
seconds / CPU seconds.  Also gives the number of noise sources, the extra
states of work per sample (iterations per kernel sample, off and on) and
the share of the noisy run spent drawing the noise (``_fill``).  Then, for
the flagship and the booster, the simulator alone at 64-sample blocks:
median and p99.9 of each block's best CPU time over 3 passes, as a
fraction of the block period, noise off and on (the live host adds its
limiter, meters and stream on top).  Prints tables and writes
bench/results/hiss.json.

Run from the repository root:  python bench/bench_hiss.py [--repeat N] [--seconds S]
"""
from __future__ import annotations

import argparse
import json
import os
import platform
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from solderless.engine.design import builtin_designs, load_design  # noqa: E402
from solderless.engine.solver import Simulator  # noqa: E402
from solderless.engine.solver.livenoise import HissSimulator  # noqa: E402
from solderless.engine.synth import render_phrase  # noqa: E402

FS = 48000.0
BLOCK = 4096


def render_time(sim, x, block=BLOCK, reset=True):
    """CPU seconds to run x through sim in blocks of ``block`` samples as
    the live host does (from the operating point when ``reset``)."""
    if reset:
        sim.reset()
    y = np.empty_like(x)
    t0 = time.process_time()
    for s in range(0, x.size, block):
        e = min(s + block, x.size)
        sim.process_into(x[s:e], y[s:e])
    return time.process_time() - t0


def _fill_time(sim, n_blocks, n):
    t0 = time.process_time()
    for _ in range(n_blocks):
        sim._fill(n)
    return time.process_time() - t0


def _live_blocks(sim, x, block, passes):
    """Each block's smallest thread CPU time over ``passes`` runs from the
    operating point (the simulator alone: no limiter, meters or stream)."""
    nb = x.size // block
    best = np.full(nb, np.inf)
    y = np.empty(block)
    for _ in range(passes):
        sim.reset()
        for b in range(nb):
            t0 = time.thread_time()
            sim.process_into(x[b * block:(b + 1) * block], y)
            dt = time.thread_time() - t0
            if dt < best[b]:
                best[b] = dt
    return best


def live_table(x, designs, block=64, passes=3) -> list[dict]:
    """p99.9 of the per-block CPU time as a fraction of the block period,
    noise off and on, at ``block`` samples."""
    period = block / FS
    rows = []
    print(f"\nsimulator alone, {block}-sample blocks, each block's best of {passes} passes "
          "(fraction of the block period)")
    print(f"{'design':<28} {'p50 off':>8} {'on':>6} {'p99.9 off':>10} {'on':>6}")
    for name in designs:
        d = load_design(name)
        circ = d.flatten()
        sims = (Simulator(circ, fs=FS, oversample=d.oversample, block_max=block),
                HissSimulator(circ, fs=FS, oversample=d.oversample, block_max=block, seed=1))
        res = {}
        for tag, sim in zip(("off", "on"), sims):
            sim.process_into(np.zeros(block), np.empty(block))
            t = _live_blocks(sim, x, block, passes) / period
            res[tag] = (float(np.median(t)), float(np.quantile(t, 0.999)))
        rows.append({"design": name, "block": block, "p50_off": res["off"][0],
                     "p50_on": res["on"][0], "p999_off": res["off"][1],
                     "p999_on": res["on"][1]})
        print(f"{name:<28} {res['off'][0]:>8.3f} {res['on'][0]:>6.3f} {res['off'][1]:>10.3f} "
              f"{res['on'][1]:>6.3f}")
    return rows


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--seconds", type=float, default=4.0)
    args = ap.parse_args()
    x_all = render_phrase("demo", FS)
    x = np.ascontiguousarray(x_all[: int(args.seconds * FS)], dtype=np.float64)
    audio_s = x.size / FS
    rows = []
    print(f"{'design':<28} {'ovs':>3} {'srcs':>4} {'off x RT':>9} {'on x RT':>8} "
          f"{'cost':>7} {'it/smp off':>10} {'on':>6} {'draw %':>7}")
    for name in builtin_designs():
        d = load_design(name)
        circ = d.flatten()
        off = Simulator(circ, fs=FS, oversample=d.oversample, block_max=BLOCK)
        on = HissSimulator(circ, fs=FS, oversample=d.oversample, block_max=BLOCK, seed=1)
        for sim in (off, on):                   # warm the compiled kernels
            sim.process_into(np.zeros(BLOCK), np.empty(BLOCK))
        t_off, t_on = [], []
        for _ in range(args.repeat):
            t_off.append(render_time(off, x))
            it_off = off.stats["mean_iterations"]
            t_on.append(render_time(on, x))
            it_on = on.stats["mean_iterations"]
        n_blocks = -(-x.size // BLOCK)
        draw = _fill_time(on, n_blocks, BLOCK * d.oversample)
        b_off, b_on = min(t_off), min(t_on)
        row = {"design": name, "oversample": d.oversample, "noise_sources": len(on.sources),
               "rt_off": audio_s / b_off, "rt_on": audio_s / b_on,
               "cpu_off_s": b_off, "cpu_on_s": b_on, "cost_ratio": b_on / b_off,
               "iterations_per_sample_off": it_off, "iterations_per_sample_on": it_on,
               "draw_cpu_s": draw, "draw_share_of_on": draw / b_on,
               "cpu_off_all_s": t_off, "cpu_on_all_s": t_on}
        rows.append(row)
        print(f"{name:<28} {d.oversample:>3} {len(on.sources):>4} {row['rt_off']:>9.1f} "
              f"{row['rt_on']:>8.1f} {row['cost_ratio']:>6.2f}x {it_off:>10.2f} "
              f"{it_on:>6.2f} {100 * row['draw_share_of_on']:>6.1f}%")
    live = live_table(x[: int(min(args.seconds, 4.0) * FS)], ["flagship", "booster"])
    out = {"bench": "hiss", "fs": FS, "block": BLOCK, "audio_seconds": audio_s,
           "live_64": live,
           "repeat": args.repeat, "timer": "process_time (best of repeat)",
           "machine": {"platform": platform.platform(), "cpus": os.cpu_count(),
                       "load_avg": os.getloadavg() if hasattr(os, "getloadavg") else None},
           "when": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()), "designs": rows}
    path = ROOT / "bench" / "results" / "hiss.json"
    path.write_text(json.dumps(out, indent=1) + "\n")
    print(f"wrote {path.relative_to(ROOT)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
