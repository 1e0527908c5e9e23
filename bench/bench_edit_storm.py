"""Edit storm benchmark: a design plays paced at real time (a thread as the
sound card, ``LiveHost.start_paced``) while a storm of part-value edits is
posted without waiting, as a GUI slider or a script would, with the
small-signal re-measurement after edits on a thread of the host's process
and in a helper process (``LiveHost.measure_in_process``). Reports the time
per block as a fraction of the block period (median, p99, max, from the
host's own per-block meter), the xruns (blocks that started more than one
period late), how many edits were asked for and how many re-derivations
actually ran (coalescing: the latest value per part wins), and the time to
drain the storm.

Prints a table and writes bench/results/edit_storm.json.

    python bench/bench_edit_storm.py [--designs booster,flagship] [--edits 400]
        [--block 128] [--root PATH]

``--root`` runs another checkout's engine (e.g. to compare with main).
"""
from __future__ import annotations

import argparse
import json
import platform
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def run(design: str, edits: int, block: int, helper: bool = False) -> dict:
    import numpy as np
    from solderless.engine.design import load_design
    from solderless.engine.live.host import LiveHost
    from solderless.engine.live.source import ToneSource
    h = LiveHost(load_design(design), source=ToneSource(440.0, 0.1), block=block,
                 autosave=False)
    if helper and hasattr(h, "measure_in_process"):
        h.prepare()
        h.measure_in_process()      # re-measure gain after edits in a helper process
    h.start_paced()
    t = time.time()
    while h.blocks < 400 and time.time() - t < 60:
        time.sleep(0.01)
    h.meters()
    parts = [p for p in h.voices[0].design.parts()
             if p.type == "resistor" and p.value][:2]
    rng = np.random.default_rng(3)
    b0, x0 = h.blocks, h.xruns
    t0 = time.perf_counter()
    futs = []
    for k in range(edits):
        p = parts[k % len(parts)]
        futs.append(h.set_value(p.qualname, float(p.value * rng.uniform(0.7, 1.4))))
    for f in futs:
        f.result(300)
    drain = time.perf_counter() - t0
    time.sleep(0.5)
    m = h.meters()
    blocks = h.blocks - b0
    xruns = h.xruns - x0
    h.stop()
    h.close()
    cpu = m["session"]["cpu_load"]
    return {"design": design, "block": block, "helper": helper, "edits_asked": edits,
            "rederivations": int(h.edits), "drain_s": drain, "blocks": blocks,
            "xruns": xruns, "cpu_median": cpu["median"], "cpu_p99": cpu["p99"],
            "cpu_max": cpu["max"]}


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--designs", default="booster,flagship")
    ap.add_argument("--edits", type=int, default=400)
    ap.add_argument("--block", type=int, default=128)
    ap.add_argument("--root", default=str(ROOT))
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--out", default=str(ROOT / "bench" / "results" / "edit_storm.json"))
    a = ap.parse_args()
    sys.path.insert(0, a.root)
    rows = [run(d, a.edits, a.block, helper) for helper in (False, True)
            for _ in range(a.repeat) for d in a.designs.split(",")]
    print(f"{'design':<12}{'helper':>7}{'block':>6}{'asked':>7}{'derived':>8}{'drain s':>9}"
          f"{'blocks':>8}{'xruns':>6}{'cpu med':>8}{'p99':>7}{'max':>7}")
    for r in rows:
        print(f"{r['design']:<12}{'yes' if r['helper'] else 'no':>7}{r['block']:>6}{r['edits_asked']:>7}{r['rederivations']:>8}"
              f"{r['drain_s']:>9.2f}{r['blocks']:>8}{r['xruns']:>6}"
              f"{r['cpu_median']:>8.2f}{r['cpu_p99']:>7.2f}{r['cpu_max']:>7.2f}")
    out = Path(a.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps({"machine": platform.platform(), "cpus": __import__("os").cpu_count(),
                               "engine": "this checkout" if Path(a.root) == ROOT else "other",
                               "rows": rows}, indent=1))
    print(f"wrote {out.relative_to(ROOT) if out.is_relative_to(ROOT) else out.name}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
