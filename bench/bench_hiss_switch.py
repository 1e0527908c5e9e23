"""Noise switched while playing: what each way of switching costs.

For the flagship and the booster (solderless/presets/designs), the synthetic
phrase "demo" (solderless.engine.synth) at the design's own oversampling,
in 128-sample blocks through ``process_into`` as the live host does, with
three simulators: the plain ``Simulator``, ``HissSimulator`` with the noise
on, and ``HissSimulator`` switched off (``set_hiss(False)``: the sources
stay in the kernel at zero amplitude, which is how the live host turns the
noise off).  Timed alternately ``--repeat`` times, best CPU time each
(``time.process_time``: the machine is shared); real-time factor = audio
seconds / CPU seconds.  Then, in a live host paced at real time (no sound
card; solderless.engine.live.host.LiveHost.start_paced) playing the
flagship: the wall time from posting each SetHiss edit to its answer (the
first switch-on builds the noisy simulator and crossfades, the others
switch the amplitude) and the host's own edit-to-first-block latency for
the amplitude switches.  Prints tables and writes
bench/results/hiss_switch.json.

Run from the repository root:  python bench/bench_hiss_switch.py [--repeat N] [--seconds S]
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

from solderless.engine.design import load_design  # noqa: E402
from solderless.engine.design.edits import SetHiss  # noqa: E402
from solderless.engine.solver import Simulator  # noqa: E402
from solderless.engine.solver.livenoise import HissSimulator  # noqa: E402
from solderless.engine.synth import render_phrase  # noqa: E402
from bench_hiss import render_time  # noqa: E402  (bench/ is the script's folder)

FS = 48000.0
BLOCK = 128


def _render(sim, x):
    return render_time(sim, x, BLOCK, reset=False)


def cpu_table(names, seconds, repeat):
    rows = []
    for name in names:
        d = load_design(name)
        circ = d.flatten()
        x = np.ascontiguousarray(render_phrase("demo", FS)[: int(seconds * FS)], dtype=np.float64)
        sims = {"plain": Simulator(circ, fs=FS, oversample=d.oversample),
                "noise on": HissSimulator(circ, fs=FS, oversample=d.oversample, seed=1),
                "noise off": HissSimulator(circ, fs=FS, oversample=d.oversample, seed=1)}
        sims["noise off"].set_hiss(False)
        for s in sims.values():
            _render(s, x[:4096])          # warm
        best = {k: float("inf") for k in sims}
        for _ in range(repeat):
            for k, s in sims.items():
                s.reset()
                best[k] = min(best[k], _render(s, x))
        audio = x.size / FS
        rows.append({"design": name, "oversample": d.oversample, "audio_s": audio,
                     "sources": len(sims["noise on"].sources),
                     **{f"rt_{k.replace(' ', '_')}": audio / best[k] for k in sims}})
    return rows


def switch_table():
    from solderless.engine.live import host as H
    from solderless.engine.live.source import parse_source
    h = H.LiveHost(load_design("flagship"), fs=FS, block=BLOCK, source=parse_source("synth"),
                   autosave=False)
    h.start_paced(realtime=False)
    time.sleep(1.0)
    rows = []
    try:
        for label, edit in (("first on: build + crossfade", SetHiss(True, 1)),
                            ("off: amplitude", SetHiss(False)),
                            ("on again: amplitude", SetHiss(True)),
                            ("new seed: amplitude", SetHiss(True, 2))):
            t0 = time.perf_counter()
            h.edit(edit).result(120)
            rows.append({"edit": label, "answer_ms": 1e3 * (time.perf_counter() - t0)})
            time.sleep(0.5)
        rows.append({"edit_to_block_ms": [1e3 * x for x in h.edit_latencies_s]})
    finally:
        h.close()
    return rows


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--seconds", type=float, default=4.0)
    a = ap.parse_args()
    cpu = cpu_table(["flagship", "booster"], a.seconds, a.repeat)
    print(f"{'design':<10} {'ovs':>3} {'sources':>7} {'plain':>8} {'on':>8} {'off':>8}  "
          "(x real time, CPU, 128-sample blocks)")
    for r in cpu:
        print(f"{r['design']:<10} {r['oversample']:>3} {r['sources']:>7} "
              f"{r['rt_plain']:>8.1f} {r['rt_noise_on']:>8.1f} {r['rt_noise_off']:>8.1f}")
    sw = switch_table()
    print("\nlive host (flagship, paced, 128-sample blocks): SetHiss posted -> answered")
    for r in sw[:-1]:
        print(f"  {r['edit']:<30} {r['answer_ms']:8.1f} ms")
    print("  edit -> first block using it (amplitude switches): "
          + ", ".join(f"{x:.1f}" for x in sw[-1]["edit_to_block_ms"]) + " ms")
    out = {"machine": platform.platform(), "load": os.getloadavg(), "cpu": cpu, "switch": sw}
    res = ROOT / "bench" / "results"
    res.mkdir(exist_ok=True)
    (res / "hiss_switch.json").write_text(json.dumps(out, indent=1))
    print(f"\nwrote {res / 'hiss_switch.json'}")


if __name__ == "__main__":
    main()
