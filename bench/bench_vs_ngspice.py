"""Speed and agreement of Solderless' simulator against ngspice, same netlists.

For every reference netlist with an audio input (tests/netlists), at the same
internal time step h = 1/fs:

* ngspice: batch transient (``ngspice -b``, trapezoidal rule, tmax = h,
  truncation control off: the "same step" mode of tests/spice_ref.py), whole
  process wall time (median of ``--repeat`` runs that write no waveform), and
  the same minus ngspice's start-up (an empty netlist's run, measured here).
* Solderless: ``Simulator(circuit, fs).process(x)`` on the same input samples,
  after a warm-up run (numba compilation / cache load excluded); best of
  ``--repeat`` runs, each from a fresh simulator at its operating point.
* Difference: NRMSE of our output against ngspice's (tests/spice_ref.nrmse),
  against the same-step run and against an accurate run (tmax = h/16, normal
  error control) over the first 50 ms.

Prints a table and writes bench/results/vs_ngspice.json.

    python bench/bench_vs_ngspice.py [--fs 48000] [--seconds 1.0] [--repeat 3]
"""
from __future__ import annotations

import argparse
import json
import platform
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

import spice_ref as S  # noqa: E402


def ngspice_tran_out(cards: str, fs: float, seconds: float) -> tuple[np.ndarray, float]:
    """Run the same-step transient writing only v(out); return (out on the
    sample grid, whole-process wall time)."""
    from scipy.interpolate import CubicSpline
    h = 1.0 / fs
    ctl, opts = S.tran_control(h, seconds, fixed_step=True)
    ctl = ctl.replace("write out.raw all", "write out.raw v(out)")
    res = S.run_ngspice(cards, ctl, opts)
    vec = res.plots[0].vectors
    rt, y = vec["time"], vec["v(out)"]
    keep = np.concatenate([np.diff(rt) > 0, [True]])
    n = int(np.floor(seconds * fs + 1e-9)) + 1
    return CubicSpline(rt[keep], y[keep])(np.arange(n) / fs), res.wall_time


def ngspice_tran_time(cards: str, fs: float, seconds: float, repeat: int) -> float:
    """Median whole-process wall time of the same-step transient with no
    result written (pure simulation plus start-up)."""
    ctl, opts = S.tran_control(1.0 / fs, seconds, fixed_step=True)
    # write only a one-point operating point afterwards, so the runner's
    # success check holds while the transient's waveform is never written
    ctl = ctl.replace("write out.raw all", "op\nwrite out.raw all")
    times = [S.run_ngspice(cards, ctl, opts).wall_time for _ in range(repeat)]
    return float(np.median(times))


def run_ours(name: str, fs: float, x: np.ndarray, repeat: int):
    """(output, best wall time of process(x)) or (None, None, reason)."""
    try:
        from solderless.engine.solver import Simulator
        circ = S.engine_circuit(name)
        warm = Simulator(circ, fs)
    except Exception as exc:          # engine not built yet, or refuses the circuit
        return None, None, f"{type(exc).__name__}: {exc}"
    warm.process(x[: min(len(x), 2048)].copy())   # compile / load the kernel cache
    best, y = np.inf, None
    for _ in range(repeat):
        sim = Simulator(circ, fs)
        t0 = time.perf_counter()
        y = np.asarray(sim.process(x), float)
        best = min(best, time.perf_counter() - t0)
    return y, best, ""


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--fs", type=float, default=48000.0, help="sample rate, Hz")
    ap.add_argument("--seconds", type=float, default=1.0, help="simulated time, s")
    ap.add_argument("--repeat", type=int, default=3, help="timed runs of ours")
    ap.add_argument("--out", default=str(ROOT / "bench" / "results" / "vs_ngspice.json"))
    a = ap.parse_args(argv)
    if S.ngspice_path() is None:
        print("ngspice not installed: apt-get install ngspice")
        return 1
    version = S.ngspice_version()
    startup = S.startup_time(7)
    rows = []
    hdr = (f"{'netlist':16s} {'samples':>8s} {'ngspice s':>10s} {'ng-start s':>10s} "
           f"{'ours s':>9s} {'x faster':>9s} {'x realtime':>10s} {'NRMSE same':>10s} "
           f"{'NRMSE acc':>9s}")
    print(f"reference: {version}; ngspice start-up (empty netlist, median of 7): "
          f"{startup*1e3:.1f} ms; fs {a.fs:g} Hz; {a.seconds:g} s per run")
    print(hdr)
    print("-" * len(hdr))
    for name in S.audio_netlists():
        cards = S.load_netlist(name)
        ref, _ = ngspice_tran_out(cards, a.fs, a.seconds)
        ng_wall = ngspice_tran_time(cards, a.fs, a.seconds, a.repeat)
        ng_net = max(ng_wall - startup, 1e-9)
        t, x = S.engine_input(name, a.fs, a.seconds)
        y, ours, why = run_ours(name, a.fs, x, a.repeat)
        row = {"netlist": name, "samples": int(len(x)), "ngspice_wall_s": ng_wall,
               "ngspice_minus_startup_s": ng_net, "ours_s": ours}
        if y is not None:
            e_same, lag = S.nrmse(ref, y)
            n_acc = min(len(x), int(0.05 * a.fs) + 1)
            acc = S.run_tran(cards, 1.0 / a.fs, (n_acc - 1) / a.fs, fixed_step=False,
                             nodes=("out",))
            e_acc, _ = S.nrmse(acc.v["out"], y[:n_acc])
            row.update(speedup_vs_ngspice=ng_net / ours,
                       speedup_vs_ngspice_with_startup=ng_wall / ours,
                       realtime_factor=a.seconds / ours, nrmse_same_step=e_same,
                       lag_samples=lag, nrmse_accurate_50ms=e_acc)
            print(f"{name:16s} {len(x):8d} {ng_wall:10.4f} {ng_net:10.4f} {ours:9.4f} "
                  f"{ng_net/ours:9.1f} {a.seconds/ours:10.1f} {e_same*100:9.3f}% "
                  f"{e_acc*100:8.3f}%")
        else:
            row["ours_error"] = why
            print(f"{name:16s} {len(x):8d} {ng_wall:10.4f} {ng_net:10.4f} "
                  f"{'n/a':>9s}  ({why})")
        rows.append(row)
    done = [r for r in rows if r.get("ours_s")]
    summary = {}
    if done:
        summary = {
            "min_speedup_vs_ngspice": min(r["speedup_vs_ngspice"] for r in done),
            "max_nrmse_same_step": max(r["nrmse_same_step"] for r in done),
            "target": ">= 25x faster at <= 1 % NRMSE",
        }
        summary["target_met"] = bool(summary["min_speedup_vs_ngspice"] >= 25
                                     and summary["max_nrmse_same_step"] <= 0.01)
        print(f"\nslowest speed-up {summary['min_speedup_vs_ngspice']:.1f}x, worst NRMSE "
              f"{summary['max_nrmse_same_step']*100:.3f} %; target (>= 25x at <= 1 %) "
              f"{'met' if summary['target_met'] else 'NOT met'}")
    out = {"ngspice_version": version, "ngspice_startup_s": startup, "fs": a.fs,
           "seconds": a.seconds, "repeat": a.repeat, "python": platform.python_version(),
           "machine": platform.machine(), "rows": rows, "summary": summary}
    Path(a.out).parent.mkdir(parents=True, exist_ok=True)
    Path(a.out).write_text(json.dumps(out, indent=2))
    print(f"wrote {a.out}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
