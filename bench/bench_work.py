"""Where a design's solver work goes, sample by sample (no timings).

bench_designs.py gives each design's mean work per kernel sample (Newton
iterations, Jacobian factorisations and low-rank updates).  A mean hides
whether the work is spread evenly (every sample takes two or three chord
iterations) or sits in a few hard samples (a junction switching, where one
sample can take ten or more).  This script renders the synthetic phrase
"demo" (solderless.engine.synth) through each design one host sample at a
time and reads the solver statistics after every sample, then prints, per
design:

* the share of host samples and of all iterations in samples that took
  1-2, 3-4, 5-9 and 10 or more iterations (a host sample holds
  ``oversample`` kernel samples);
* the same work split by the input's level (|x| in decades), which says
  whether quiet passages or loud notes cost the most.

The counts are deterministic (the same on any machine and under any load),
so unlike the timings they can be compared between two trees directly.
Prints a table and writes bench/results/work.json.

Run from the repository root:  python bench/bench_work.py [--seconds S] [--designs ...]
"""
from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from solderless.engine.design import builtin_designs, load_design  # noqa: E402
from solderless.engine.solver import Simulator  # noqa: E402
from solderless.engine.synth import render_phrase  # noqa: E402

FS = 48000.0
#: Iteration classes per host sample: [lo, hi) (hi None: no upper bound).
CLASSES = ((1, 3), (3, 5), (5, 10), (10, None))
#: Input-level classes, |x| in volts: [lo, hi).
LEVELS = ((0.0, 1e-3), (1e-3, 1e-2), (1e-2, 1e-1), (1e-1, np.inf))


def per_sample_work(name: str, x: np.ndarray) -> dict[str, np.ndarray]:
    """Iterations and fresh Jacobians (factorisations plus low-rank updates)
    of every host sample of ``x`` through design ``name``, from its
    operating point."""
    d = load_design(name)
    sim = Simulator(d.flatten(), fs=FS, oversample=d.oversample, block_max=1)
    sim.operating_point()
    sim.reset()
    out = np.empty(1)
    its = np.empty(x.size, np.int64)
    jac = np.empty(x.size, np.int64)
    st = sim.stats
    prev_it = round(st["mean_iterations"] * st["samples"])
    prev_j = st["factorizations"] + st["jacobian_updates"]
    for k in range(x.size):
        sim.process_into(x[k:k + 1], out)
        st = sim.stats
        tot_it = round(st["mean_iterations"] * st["samples"])
        tot_j = st["factorizations"] + st["jacobian_updates"]
        its[k] = tot_it - prev_it
        jac[k] = tot_j - prev_j
        prev_it, prev_j = tot_it, tot_j
    return {"iterations": its, "jacobians": jac, "oversample": d.oversample}


def summarise(name: str, x: np.ndarray) -> dict:
    w = per_sample_work(name, x)
    its, jac, os_ = w["iterations"], w["jacobians"], w["oversample"]
    total = max(1, int(its.sum()))
    classes = []
    for lo, hi in CLASSES:
        sel = (its >= lo) & ((its < hi) if hi is not None else True)
        classes.append({"iterations_from": lo, "iterations_below": hi,
                        "share_of_samples": float(sel.mean()),
                        "share_of_iterations": float(its[sel].sum() / total),
                        "share_of_jacobians": float(jac[sel].sum() / max(1, jac.sum()))})
    levels = []
    a = np.abs(x)
    for lo, hi in LEVELS:
        sel = (a >= lo) & (a < hi)
        n = int(sel.sum())
        levels.append({"level_from_v": lo, "level_below_v": None if np.isinf(hi) else hi,
                       "samples": n,
                       "iterations_per_kernel_sample": float(its[sel].mean() / os_) if n else None,
                       "jacobians_per_kernel_sample": float(jac[sel].mean() / os_) if n else None})
    return {"design": name, "oversample": os_, "host_samples": int(x.size),
            "iterations_per_kernel_sample": float(its.mean() / os_),
            "jacobians_per_kernel_sample": float(jac.mean() / os_),
            "most_iterations_in_a_host_sample": int(its.max()),
            "by_iterations": classes, "by_input_level": levels}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=3.0,
                    help="length of the phrase rendered (from its start)")
    ap.add_argument("--designs", nargs="*", default=None, help="names (default: all built-in)")
    args = ap.parse_args(argv)
    x = render_phrase("demo", fs=FS)[: int(args.seconds * FS)]
    rows = [summarise(n, x) for n in (args.designs or sorted(builtin_designs()))]
    print(f"{'design':<26}{'os':>3}{'it/smp':>8}{'jac/smp':>8}{'max':>5}   "
          + "".join(f"{f'{lo}-' + (str(hi - 1) if hi else ''):>14}" for lo, hi in CLASSES)
          + "   (host samples / iterations, %)")
    for r in rows:
        cells = "".join(f"{100 * c['share_of_samples']:>6.1f}/{100 * c['share_of_iterations']:<6.1f}  "
                        for c in r["by_iterations"])
        print(f"{r['design']:<26}{r['oversample']:>3}{r['iterations_per_kernel_sample']:>8.3f}"
              f"{r['jacobians_per_kernel_sample']:>8.3f}{r['most_iterations_in_a_host_sample']:>5}   "
              + cells)
    print(f"\n{'design':<26}" + "".join(f"{f'|x|<{hi:g} V' if hi else f'|x|>={lo:g} V':>18}"
                                        for lo, hi in ((lo, None if np.isinf(hi) else hi)
                                                       for lo, hi in LEVELS))
          + "   (iterations / jacobians per kernel sample)")
    for r in rows:
        cells = "".join(
            f"{lv['iterations_per_kernel_sample']:>10.2f}/{lv['jacobians_per_kernel_sample']:<7.3f}"
            if lv["samples"] else f"{'-':>18}" for lv in r["by_input_level"])
        print(f"{r['design']:<26}" + cells)
    out = ROOT / "bench" / "results" / "work.json"
    out.write_text(json.dumps({"fs": FS, "phrase": "demo", "seconds": x.size / FS,
                               "designs": rows}, indent=1) + "\n")
    print(f"\nwrote {out.relative_to(ROOT)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
