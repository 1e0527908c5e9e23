"""Cost of oversampling round trips (up_into + down_into) per base-rate sample.

Prints a table and writes bench/results/oversample.json. Run from the
repository root:  python bench/bench_oversample.py
"""
from __future__ import annotations

import json
import platform
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from solderless.engine.solver.oversample import Resampler  # noqa: E402


def bench(factor: int, block: int = 256, seconds: float = 10.0, fs: float = 48000.0):
    """Time ``seconds`` of audio through up_into/down_into in ``block``-sample blocks."""
    rs = Resampler(factor, block_max=block, fs=fs)
    x = np.random.default_rng(0).standard_normal(block)
    hi = np.empty(block * factor)
    lo = np.empty(block)
    rs.up_into(x, hi)  # compile / warm
    rs.down_into(hi, lo)
    nblocks = int(seconds * fs / block)
    t_up = t_down = 0.0
    for _ in range(nblocks):
        t0 = time.perf_counter()
        rs.up_into(x, hi)
        t1 = time.perf_counter()
        rs.down_into(hi, lo)
        t2 = time.perf_counter()
        t_up += t1 - t0
        t_down += t2 - t1
    n = nblocks * block
    total = t_up + t_down
    return {
        "factor": factor,
        "taps": int(rs.taps.size),
        "latency_samples": rs.latency,
        "latency_ms": 1e3 * rs.latency / fs,
        "up_ns_per_sample": 1e9 * t_up / n,
        "down_ns_per_sample": 1e9 * t_down / n,
        "total_ns_per_sample": 1e9 * total / n,
        "realtime_load_percent": 100.0 * total / (n / fs),
    }


def main() -> None:
    rows = [bench(f) for f in (1, 2, 4, 8)]
    hdr = f"{'factor':>6} {'taps':>5} {'lat smp':>8} {'lat ms':>7} {'up ns':>8} {'down ns':>8} {'total ns':>9} {'load %':>7}"
    print("round trip per base-rate sample, 48 kHz, 256-sample blocks")
    print(hdr)
    for r in rows:
        print(f"{r['factor']:>6} {r['taps']:>5} {r['latency_samples']:>8.0f} {r['latency_ms']:>7.3f} "
              f"{r['up_ns_per_sample']:>8.1f} {r['down_ns_per_sample']:>8.1f} "
              f"{r['total_ns_per_sample']:>9.1f} {r['realtime_load_percent']:>7.2f}")
    out = ROOT / "bench" / "results" / "oversample.json"
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps({"machine": platform.machine(), "python": platform.python_version(),
                               "fs": 48000.0, "block": 256, "rows": rows}, indent=2))
    print(f"wrote {out.relative_to(ROOT)}")


if __name__ == "__main__":
    main()
