"""Solver benchmark: per-sample cost vs ports/states, part-change cost, cold
and warm start.  Prints a table and writes bench/results/solver.json.

Run:  python bench/bench_solver.py  [--quick]

Timings depend on the machine and its load; the load average is recorded.
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from solderless.engine.circuit import Circuit, Element as E  # noqa: E402

FS = 48000.0
NPN = {"TYPE": "NPN", "IS": 1e-14, "BF": 200.0}


def cascade(n: int) -> Circuit:
    """n capacitor-coupled common-emitter stages with attenuators between them."""
    els = [E("Vcc", "V", ("vcc", "0"), 9.0), E("Vin", "V", ("in", "0"), 0.0)]
    prev = "in"
    for k in range(n):
        els += [E(f"C1_{k}", "C", (prev, f"b{k}"), 1e-6),
                E(f"R1_{k}", "R", ("vcc", f"b{k}"), 100e3),
                E(f"R2_{k}", "R", (f"b{k}", "0"), 22e3),
                E(f"RC_{k}", "R", ("vcc", f"c{k}"), 4.7e3),
                E(f"RE_{k}", "R", (f"e{k}", "0"), 1e3),
                E(f"CE_{k}", "C", (f"e{k}", "0"), 10e-6),
                E(f"Q{k}", "Q", (f"c{k}", f"b{k}", f"e{k}"), 0.0, NPN),
                E(f"C2_{k}", "C", (f"c{k}", f"o{k}"), 1e-6),
                E(f"RA_{k}", "R", (f"o{k}", f"a{k}"), 100e3),
                E(f"RB_{k}", "R", (f"a{k}", "0"), 2.2e3)]
        prev = f"a{k}"
    els += [E("Rout", "R", (prev, "out"), 1e3), E("Cout", "C", ("out", "0"), 1e-9)]
    return Circuit(els, input_source="Vin")


def compressor() -> Circuit:
    """A feedback compressor: buffer, OTA gain cell, output buffer, detector
    amplifier, peak rectifier, gain-control transistor (5 NPN + 1 OTA)."""
    els = [E("Vcc", "V", ("vcc", "0"), 9.0), E("Vee", "V", ("vee", "0"), -9.0),
           E("Vin", "V", ("src", "0"), 0.0), E("Vin.rs", "R", ("src", "in"), 1e3),
           # input buffer
           E("C1", "C", ("in", "b1"), 1e-6), E("R1", "R", ("b1", "0"), 1e6),
           E("Q1", "Q", ("vcc", "b1", "e1"), 0.0, NPN), E("RE1", "R", ("e1", "vee"), 10e3),
           # attenuator into the OTA (1/100)
           E("C2", "C", ("e1", "a"), 10e-6), E("RA", "R", ("a", "x"), 20e3),
           E("RB", "R", ("x", "0"), 200.0), E("RN", "R", ("n", "0"), 200.0),
           E("U1", "OTA", ("x", "n", "o", "abc", "vee"), 0.0, {}),
           E("RL", "R", ("o", "0"), 22e3), E("RABC", "R", ("vcc", "abc"), 150e3),
           # output buffer
           E("Q2", "Q", ("vcc", "o", "out"), 0.0, NPN), E("RE2", "R", ("out", "vee"), 10e3),
           # detector amplifier
           E("C3", "C", ("out", "b3"), 1e-6), E("R3A", "R", ("vcc", "b3"), 470e3),
           E("R3B", "R", ("b3", "vee"), 470e3), E("Q3", "Q", ("c3", "b3", "e3"), 0.0, NPN),
           E("RE3", "R", ("e3", "vee"), 8.2e3), E("CE3", "C", ("e3", "ne"), 10e-6),
           E("RE3B", "R", ("ne", "vee"), 1e3), E("RC3", "R", ("vcc", "c3"), 4.7e3),
           # peak rectifier with attack and release
           E("C4", "C", ("c3", "b4"), 1e-6), E("R4", "R", ("b4", "0"), 100e3),
           E("Q4", "Q", ("vcc", "b4", "e4"), 0.0, NPN), E("RATK", "R", ("e4", "det"), 1e3),
           E("CDET", "C", ("det", "0"), 1e-6), E("RREL", "R", ("det", "0"), 470e3),
           # gain control: Q5 steals bias current from the OTA
           E("RB5A", "R", ("det", "b5"), 47e3), E("RB5B", "R", ("b5", "vee"), 2.7e3),
           E("Q5", "Q", ("abc", "b5", "e5"), 0.0, NPN), E("RE5", "R", ("e5", "vee"), 1e3)]
    return Circuit(els, input_source="Vin")


def _guitarish(n: int) -> np.ndarray:
    rng = np.random.default_rng(0)
    t = np.arange(n) / FS
    env = np.exp(-3 * (t % 1.0))
    return 0.3 * env * (np.sin(2 * np.pi * 110 * t) + 0.5 * np.sin(2 * np.pi * 220 * t)
                        + 0.01 * rng.standard_normal(n))


def per_sample(circ: Circuit, seconds: float, block: int = 256, oversample: int = 1) -> dict:
    from solderless.engine.solver import Simulator
    t0 = time.perf_counter()
    sim = Simulator(circ, fs=FS, oversample=oversample, block_max=block)
    build = time.perf_counter() - t0
    n = int(seconds * FS) // block * block
    x = _guitarish(n)
    y = np.empty(block)
    sim.process_into(x[:block], y)  # warm
    sim.reset()
    t0 = time.perf_counter()
    c0 = time.process_time()
    for s in range(0, n, block):
        sim.process_into(x[s:s + block], y)
    dt = time.perf_counter() - t0
    cpu = time.process_time() - c0
    st = sim.stats
    return {"ports": sim.n_ports, "states": sim.n_states, "unknowns": sim.net.nw,
            "oversample": oversample, "build_s": build, "us_per_sample": dt / n * 1e6,
            "realtime_x": (n / FS) / dt, "cpu_us_per_sample": cpu / n * 1e6,
            "realtime_x_cpu": (n / FS) / cpu, "mean_iterations": st["mean_iterations"],
            "factorizations_per_sample": st["factorizations"] / max(1, st["samples"]),
            "max_iterations": st["max_iterations"], "fallbacks": st["fallbacks"],
            "nonconverged": st["nonconverged"]}


def per_sample_designs(seconds: float) -> dict:
    """Every built-in design (solderless/presets/designs), flattened, at oversample 1."""
    from solderless.engine.design import builtin_designs, load_design
    out = {}
    for name, path in sorted(builtin_designs().items()):
        try:
            out[name] = per_sample(load_design(path).flatten(), seconds)
        except Exception as e:  # a broken preset is reported, not fatal here
            out[name] = {"error": f"{type(e).__name__}: {e}"}
    return out


def part_change(circ: Circuit, name: str, values, reps: int = 20) -> dict:
    from solderless.engine.solver import Simulator
    sim = Simulator(circ, fs=FS)
    y = np.empty(64)
    ts = []
    for k in range(reps):
        t0 = time.perf_counter()
        sim.set_values({name: values[k % len(values)]})
        ts.append(time.perf_counter() - t0)
        sim.process_into(np.zeros(64), y)
    t0 = time.perf_counter()
    Simulator(circ, fs=FS)
    rebuild = time.perf_counter() - t0
    return {"unknowns": sim.net.nw, "set_values_ms_median": 1e3 * float(np.median(ts)),
            "set_values_ms_max": 1e3 * float(np.max(ts)), "rebuild_ms": 1e3 * rebuild}


_START = """
import time, sys
t0 = time.perf_counter()
sys.path.insert(0, {root!r})
sys.path.insert(0, {bench!r})
import numpy as np
from bench_solver import compressor
from solderless.engine.solver import Simulator
t1 = time.perf_counter()
sim = Simulator(compressor())
y = np.empty(256)
sim.process_into(np.zeros(256), y)
t2 = time.perf_counter()
print(t1 - t0, t2 - t1)
"""


def start_times() -> dict:
    """Cold (empty numba cache: compile) and warm (cached) start to the first
    processed block, each in a fresh interpreter."""
    code = _START.format(root=str(ROOT), bench=str(ROOT / "bench"))
    out = {}
    with tempfile.TemporaryDirectory() as cache:
        env = dict(os.environ, NUMBA_CACHE_DIR=cache)
        for label in ("cold", "warm"):
            t0 = time.perf_counter()
            r = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True,
                               text=True, check=True)
            wall = time.perf_counter() - t0
            imp, first = (float(v) for v in r.stdout.split())
            out[label] = {"import_s": imp, "first_block_s": first, "process_wall_s": wall}
    return out


def main(quick: bool = False) -> dict:
    secs = 1.0 if quick else 3.0
    res = {"fs": FS, "loadavg": os.getloadavg(), "cpu_count": os.cpu_count(),
           "cascade": [], "compressor": {}, "part_change": {}, "start": {}}
    print(f"load average {res['loadavg']}, {res['cpu_count']} CPUs")
    print("us/smp and x RT from wall time; cpu = process CPU time (less sensitive to load)")
    print(f"{'circuit':<22}{'ports':>6}{'states':>7}{'unk':>5}{'os':>4}{'us/smp':>9}"
          f"{'x RT':>8}{'x RTcpu':>8}{'iter':>6}{'LU/smp':>7}{'fb':>5}{'nc':>5}")

    def row(name, r):
        print(f"{name:<22}{r['ports']:>6}{r['states']:>7}{r['unknowns']:>5}{r['oversample']:>4}"
              f"{r['us_per_sample']:>9.2f}{r['realtime_x']:>8.1f}{r['realtime_x_cpu']:>8.1f}"
              f"{r['mean_iterations']:>6.2f}{r['factorizations_per_sample']:>7.3f}"
              f"{r['fallbacks']:>5}{r['nonconverged']:>5}")

    for n in (1, 2, 3, 5, 7):
        r = per_sample(cascade(n), secs)
        r["stages"] = n
        res["cascade"].append(r)
        row(f"CE cascade x{n}", r)
    for os_ in (1, 2, 4):
        r = per_sample(compressor(), secs, oversample=os_)
        res["compressor"][f"x{os_}"] = r
        row("compressor 5Q+OTA", r)
    res["designs"] = per_sample_designs(secs)
    for name, r in res["designs"].items():
        if "error" in r:
            print(f"{name:<22} {r['error']}")
        else:
            row(name[:22], r)
    print()
    print(f"{'part change':<28}{'unk':>5}{'median ms':>11}{'max ms':>9}{'rebuild ms':>12}")
    for label, circ, name, vals in (("compressor RREL", compressor(), "RREL", [220e3, 1e6]),
                                    ("CE cascade x7 RC_3", cascade(7), "RC_3", [3.3e3, 6.8e3]),
                                    ("CE cascade x12 CE_5", cascade(12), "CE_5", [1e-6, 47e-6])):
        r = part_change(circ, name, vals)
        res["part_change"][label] = r
        print(f"{label:<28}{r['unknowns']:>5}{r['set_values_ms_median']:>11.3f}"
              f"{r['set_values_ms_max']:>9.3f}{r['rebuild_ms']:>12.2f}")
    print()
    res["start"] = start_times()
    for k, v in res["start"].items():
        print(f"{k} start: import {v['import_s']:.2f} s, build + first block "
              f"{v['first_block_s']:.2f} s")
    out = ROOT / "bench" / "results" / "solver.json"
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps(res, indent=2))
    print(f"\nwrote {out}")
    return res


def start_only() -> dict:
    """Measure only the cold/warm start and update that entry of
    bench/results/solver.json (the per-sample tables are kept)."""
    out = ROOT / "bench" / "results" / "solver.json"
    res = json.loads(out.read_text()) if out.exists() else {}
    res["start"] = start_times()
    res["start_loadavg"] = os.getloadavg()
    for k, v in res["start"].items():
        print(f"{k} start: import {v['import_s']:.2f} s, build + first block "
              f"{v['first_block_s']:.2f} s")
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps(res, indent=2))
    print(f"\nwrote {out}")
    return res


if __name__ == "__main__":
    import argparse
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="1 s of audio per row instead of 3 s")
    ap.add_argument("--start", action="store_true",
                    help="measure only cold/warm start (updates that entry of the JSON)")
    a = ap.parse_args()
    if a.start:
        start_only()
    else:
        main(quick=a.quick)
