"""What the solver's per-sample tolerance costs in accuracy, per design.

Each built-in design renders the synthetic guitar phrase "demo"
(solderless.engine.synth) at its oversampling twice: with the default tolerance
(solderless.engine.solver.kernel_layout.ERR_TOL, SPICE's VNTOL of 1 uV applied to the error
left in the port voltages) and with a tolerance of 1e-11 V as the
reference.  Reported: the RMS difference relative to the reference's RMS
(dB), the largest difference (V), and the mean Newton/chord iterations per
sample of each run.  Prints a table and writes bench/results/accuracy.json.

Run from the repository root:  python bench/bench_accuracy.py
"""
from __future__ import annotations

import json
import platform
import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from solderless.engine.design import builtin_designs, load_design  # noqa: E402
from solderless.engine.solver import Simulator  # noqa: E402
from solderless.engine.solver.kernel_layout import ERR_TOL  # noqa: E402
from solderless.engine.synth import render_phrase  # noqa: E402

FS = 48000.0
REF_TOL = 1e-11


def run(name: str, x: np.ndarray, tol: float | None):
    d = load_design(name)
    sim = Simulator(d.flatten(), fs=FS, oversample=d.oversample, tolerance=tol)
    y = sim.process(x)
    return y, sim.stats


def main() -> int:
    x = render_phrase("demo", fs=FS)
    rows = []
    for name in sorted(builtin_designs()):
        y, st = run(name, x, None)
        ref, st_ref = run(name, x, REF_TOL)
        rms_ref = float(np.sqrt(np.mean(ref ** 2)))
        err = float(np.sqrt(np.mean((y - ref) ** 2)))
        rows.append({"design": name, "tolerance_v": ERR_TOL, "reference_tolerance_v": REF_TOL,
                     "rms_error_db": 20 * np.log10(err / rms_ref) if err > 0 else -400.0,
                     "max_error_v": float(np.abs(y - ref).max()), "out_rms_v": rms_ref,
                     "iterations": st["mean_iterations"],
                     "iterations_reference": st_ref["mean_iterations"],
                     "factorizations_per_sample": st["factorizations"] / st["samples"],
                     "nonconverged": st["nonconverged"]})
    hdr = f"{'design':<26}{'err dB':>8}{'max err V':>11}{'it/sample':>10}{'ref it':>8}{'fact':>7}"
    print(hdr)
    print("-" * len(hdr))
    for r in rows:
        print(f"{r['design']:<26}{r['rms_error_db']:>8.1f}{r['max_error_v']:>11.1e}"
              f"{r['iterations']:>10.2f}{r['iterations_reference']:>8.2f}"
              f"{r['factorizations_per_sample']:>7.3f}")
    out = ROOT / "bench" / "results" / "accuracy.json"
    out.parent.mkdir(exist_ok=True)
    out.write_text(json.dumps({"fs": FS, "phrase_s": x.size / FS, "machine": platform.machine(),
                               "python": platform.python_version(), "designs": rows},
                              indent=2) + "\n")
    print(f"\nwrote {out.relative_to(ROOT)}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
