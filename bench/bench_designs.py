"""Speed and operating-point sanity of every built-in design.

For each design in solderless/presets/designs: flatten, solve the DC operating point,
classify its transistors (solderless.engine.analysis.measure.transistor_check), then render the
synthetic guitar phrase "demo" (solderless.engine.synth) at the design's suggested
oversampling, in 4096-sample blocks through ``Simulator.process_into`` as the
live host does. The kernels are warmed on a short block first, so the timing
excludes compilation. The designs are timed round-robin, --repeat times
each, and each keeps its best run (the table also stores the median), so a
slow stretch of a shared machine does not fall on one design alone.
Real-time factor = audio seconds / wall seconds (the target is 20x or
more). The table also gives the solver's work per kernel sample (it/smp:
Newton iterations; upd/smp: Jacobian factorisations plus low-rank updates),
which says where a slow design's time goes. Prints a table and writes
bench/results/designs.json.

For designs with a gain-cell control meter (the compressors) it also
measures, outside the timing: the static curve's threshold (1 dB of gain
reduction) and slope 6 dB above it, the release time after a 50 mV burst
(63 % recovery, time-constant convention; solderless.engine.analysis.measure.measure_release), and
the deepest gain reduction on the phrase's soft and hard single notes.

``--charge-cost`` times every design with junction charge storage on and
off instead (interleaved run by run), and writes bench/results/charge_cost.json
("+st": the junction capacitances left as linear states, "nlq": the devices
whose port charges the kernel integrates nonlinearly).
``--lanes`` times every design with dormant ports (solver/dormant.py) on and
off, interleaved, and writes bench/results/lanes.json.

Run from the repository root:  python bench/bench_designs.py [--repeat N] [--charge-cost]
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

from solderless.engine.analysis import measure  # noqa: E402
from solderless.engine.design import builtin_designs, load_design  # noqa: E402
from solderless.engine.solver import Simulator  # noqa: E402
from solderless.engine.synth import render_phrase  # noqa: E402

FS = 48000.0
TARGET_RT = 20.0
BLOCK = 4096


class DesignRun:
    """One design set up for timing: flattened, at its operating point, its
    kernels warmed (compilation excluded from the timing)."""

    def __init__(self, name: str, charge: bool | None = None, dormant_ports: bool = True):
        self.name = name
        self.d = d = load_design(name)
        t0 = time.perf_counter()
        circ = d.flatten()
        if charge is not None:
            circ.junction_charge = charge
        self.sim = Simulator(circ, fs=FS, oversample=d.oversample, block_max=BLOCK,
                             dormant_ports=dormant_ports)
        self.op = self.sim.operating_point()
        self.setup_s = time.perf_counter() - t0
        y = np.empty(BLOCK)
        self.sim.process_into(np.zeros(BLOCK), y)          # warm the compiled kernels
        self.walls: list[float] = []
        self.cpus: list[float] = []
        self.nonconv = 0
        self.out = None

    def time_once(self, x: np.ndarray) -> None:
        """Render x once from the operating point, as the live host does."""
        sim = self.sim
        sim.reset()
        out = np.empty_like(x)
        t1 = time.perf_counter()
        c1 = time.process_time()
        for s in range(0, x.size, BLOCK):
            e = min(s + BLOCK, x.size)
            sim.process_into(x[s:e], out[s:e])
        self.walls.append(time.perf_counter() - t1)
        self.cpus.append(time.process_time() - c1)
        st = sim.stats
        self.nonconv = max(self.nonconv, st["nonconverged"])
        # solver work per kernel sample (deterministic: the same every run)
        n = max(1, st["samples"])
        self.work = {"iterations_per_sample": st["mean_iterations"],
                     "factorizations_per_sample": st["factorizations"] / n,
                     "jacobian_updates_per_sample": st["jacobian_updates"] / n,
                     "reduced_share": st["reduced_samples"] / n,
                     "handovers": st["handovers"]}
        self.out = out

    def row(self, x: np.ndarray) -> dict:
        d, sim, op = self.d, self.sim, self.op
        wall = min(self.walls)
        types = [p.type for p in d.parts()]
        return {
            "design": self.name, "title": d.name, "oversample": d.oversample,
            "bjts": types.count("npn") + types.count("pnp"),
            "devices": sum(types.count(t) for t in ("npn", "pnp", "njfet", "pjfet", "diode",
                                                    "opamp", "ota")),
            "states": sim.n_states, "ports": sim.n_ports,
            "setup_s": self.setup_s, "audio_s": x.size / FS, "wall_s": wall,
            "wall_median_s": float(np.median(self.walls)),
            "realtime_factor": (x.size / FS) / wall,
            "meets_target": (x.size / FS) / wall >= TARGET_RT,
            "nonconverged": self.nonconv,
            **self.work,
            "op_method": getattr(op, "method", ""),
            "transistors": {r["part"]: r["region"] + (" (by design)" if r["intended"] else "")
                            for r in measure.transistor_check(d, op)},
            "op_problems": measure.transistor_problems(d, op),
            "out_rms_v": float(np.sqrt(np.mean((self.out - self.out.mean()) ** 2))),
        }


def bench_all(names: list[str], x: np.ndarray, repeat: int) -> list[dict]:
    """Time every design ``repeat`` times, round-robin: on a shared machine
    whose speed drifts over minutes, each design then meets the same slow
    and fast stretches instead of one design taking all of a slow one.  The
    best run of each is kept (noise only ever adds time)."""
    runs = [DesignRun(n) for n in names]
    for _ in range(repeat):
        for r in runs:
            r.time_once(x)
    return [r.row(x) for r in runs]


def interleave(pairs, x: np.ndarray, repeat: int):
    """Time each (on, off) pair of DesignRuns ``repeat`` times, the two
    alternating run by run, so a loaded machine's drift falls on both
    alike; returns the pairs."""
    for _ in range(repeat):
        for on, off in pairs:
            on.time_once(x)
            off.time_once(x)
    return pairs


def lanes(names: list[str], repeat: int) -> int:
    """``--lanes``: every design with dormant ports on (the reduced lane
    while the op-amps are off their rails) and off (always the full port
    solve), interleaved; prints the table and writes bench/results/lanes.json."""
    x = render_phrase("demo", fs=FS)
    load0 = os.getloadavg() if hasattr(os, "getloadavg") else None
    pairs = interleave([(DesignRun(n), DesignRun(n, dormant_ports=False)) for n in names],
                       x, repeat)
    load = os.getloadavg() if hasattr(os, "getloadavg") else None
    a = x.size / FS
    rows = []
    for on, off in pairs:
        pl = on.sim._plan
        rows.append({"design": on.name, "oversample": on.d.oversample,
                     "ports": on.sim.n_ports,
                     "reduced_ports": int(pl.active.size) if pl is not None else None,
                     "rt_on": a / min(on.walls), "rt_off": a / min(off.walls),
                     "rt_on_cpu": a / min(on.cpus), "rt_off_cpu": a / min(off.cpus),
                     "reduced_share": on.work["reduced_share"],
                     "handovers": on.work["handovers"],
                     "max_abs_difference_v": float(np.max(np.abs(on.out - off.out))),
                     "peak_v": float(np.max(np.abs(off.out - np.mean(off.out))))})
    hdr = (f"{'design':<26}{'os':>3}{'ports':>7}{'x RT on':>9}{'x RT off':>9}"
           f"{'CPU on':>8}{'CPU off':>8}{'reduced':>9}{'hand':>6}{'diff/peak':>11}")
    print(hdr)
    print("-" * len(hdr))
    for r in rows:
        ports = f"{r['ports']}" + (f">{r['reduced_ports']}" if r["reduced_ports"] is not None
                                   else "")
        print(f"{r['design']:<26}{r['oversample']:>3}{ports:>7}{r['rt_on']:>9.1f}"
              f"{r['rt_off']:>9.1f}{r['rt_on_cpu']:>8.1f}{r['rt_off_cpu']:>8.1f}"
              f"{100 * r['reduced_share']:>8.0f}%{r['handovers']:>6d}"
              f"{r['max_abs_difference_v'] / max(r['peak_v'], 1e-30):>11.1e}")
    return save_paired("lanes.json", a, repeat, load0, load, rows,
                       "dormant ports on and off interleaved; x RT from the best wall time, "
                       "CPU from the best process time; reduced = share of kernel samples on "
                       "the reduced lane; diff/peak = largest output difference between the "
                       "two over the output's peak")


def save_paired(name: str, audio_s: float, repeat: int, load0, load, rows: list[dict],
                note: str) -> int:
    """Write an interleaved comparison's rows to bench/results/NAME with the
    machine and load it ran on."""
    result = {"fs": FS, "phrase_s": audio_s, "block": BLOCK, "target_realtime": TARGET_RT,
              "repeat": repeat, "machine": platform.machine(),
              "python": platform.python_version(), "cpus": os.cpu_count(),
              "loadavg_at_start": load0, "loadavg_at_end": load, "note": note,
              "designs": rows}
    out = ROOT / "bench" / "results"
    out.mkdir(parents=True, exist_ok=True)
    (out / name).write_text(json.dumps(result, indent=2, default=float))
    print(f"\nwrote {out / name} (load average {load0} -> {load})")
    return 0


def charge_cost(names: list[str], x: np.ndarray, repeat: int) -> list[dict]:
    """Real-time factor of every design with junction charge storage on and
    off (Circuit.junction_charge), the two interleaved run by run so a
    loaded machine's drift falls on both alike; best of ``repeat`` by wall
    time and by CPU time (time.process_time)."""
    pairs = interleave([(DesignRun(n, True), DesignRun(n, False)) for n in names], x, repeat)

    def products(run):
        # multiply-adds of the kernel's per-sample matrix products (padded)
        m = run.sim._model
        return int(m.Pz.size + m.Az.size + m.Ck.size + m.Yz.size)

    rows = []
    for on, off in pairs:
        a = x.size / FS
        rows.append({"design": on.name, "oversample": on.d.oversample,
                     "states_on": on.sim.n_states, "states_off": off.sim.n_states,
                     "junction_states": on.sim.n_states - off.sim.n_states,
                     "nonlinear_charge_devices": sum(
                         1 for _el, _m, lay, _po in on.sim.net.devices
                         if any(lay.kernel_caps)),
                     "rt_on": a / min(on.walls), "rt_off": a / min(off.walls),
                     "rt_on_cpu": a / min(on.cpus), "rt_off_cpu": a / min(off.cpus),
                     "cost_cpu": min(on.cpus) / min(off.cpus) - 1.0,
                     "matrix_products_on": products(on), "matrix_products_off": products(off),
                     "meets_target_on": a / min(on.walls) >= TARGET_RT,
                     "iterations_per_sample_on": on.work["iterations_per_sample"],
                     "iterations_per_sample_off": off.work["iterations_per_sample"]})
    return rows


def main_charge(names: list[str], repeat: int) -> int:
    """``--charge-cost``: print the table and write bench/results/charge_cost.json."""
    x = render_phrase("demo", fs=FS)
    load0 = os.getloadavg() if hasattr(os, "getloadavg") else None
    rows = charge_cost(names, x, repeat)
    load = os.getloadavg() if hasattr(os, "getloadavg") else None
    hdr = (f"{'design':<26}{'os':>3}{'+st':>4}{'nlq':>4}{'x RT on':>9}{'x RT off':>9}"
           f"{'CPU on':>8}{'CPU off':>8}{'cost':>7}{'it on':>7}{'it off':>7}{'madd on/off':>13}")
    print(hdr)
    print("-" * len(hdr))
    for r in rows:
        print(f"{r['design']:<26}{r['oversample']:>3}{r['junction_states']:>4}"
              f"{r['nonlinear_charge_devices']:>4}{r['rt_on']:>9.1f}{r['rt_off']:>9.1f}"
              f"{r['rt_on_cpu']:>8.1f}"
              f"{r['rt_off_cpu']:>8.1f}{100 * r['cost_cpu']:>6.0f}%"
              f"{r['iterations_per_sample_on']:>7.2f}{r['iterations_per_sample_off']:>7.2f}"
              f"{r['matrix_products_on']:>7d}/{r['matrix_products_off']:<5d}")
    return save_paired("charge_cost.json", x.size / FS, repeat, load0, load, rows,
                       "on and off runs interleaved; x RT from the best wall time, CPU "
                       "from the best process time; cost = extra CPU time with charge on; "
                       "matrix_products = multiply-adds of the kernel's per-sample matrix "
                       "products (deterministic, padded sizes)")


#: Onsets (s) of the demo phrase's soft and hard single notes (solderless.engine.synth).
SOFT_NOTES = (0.0, 0.45, 0.9)
HARD_NOTES = (1.5, 1.9, 2.3)


def compression_figures(name: str, x: np.ndarray) -> dict:
    """Static curve, release and phrase gain reduction of a compressor design."""
    from solderless.engine.analysis import compression as cp
    d = load_design(name)
    ctl = d.control_probe()
    if not ctl:
        return {}
    c = measure.measure_static(d, FS, np.arange(-64.0, 0.1, 4.0), hold=0.4, measure=0.1)
    thr = c.threshold_db(1.0)
    try:
        slope = c.slope(thr + 6.0)
    except ValueError:          # no reduction, or too near the top of the range
        slope = float("nan")
    rt = measure.measure_release(d, FS, tail=2.0)[0]
    _, pr, sim = measure.simulate(d, x, FS, probes=(ctl,))
    rest = measure.rest_control(d, sim.operating_point())
    gr = cp.gain_reduction_from_control(pr[ctl], rest, d.meters.get("control_law", "linear"))

    def deepest(onsets):
        return [float(-gr[int(t * FS):int((t + 0.3) * FS)].min()) for t in onsets]
    return {"rest_control_a": rest, "threshold_dbv": thr, "slope_above": slope,
            "release_time_s": rt, "gr_soft_db": deepest(SOFT_NOTES),
            "gr_hard_db": deepest(HARD_NOTES), "gr_max_db": float(-gr.min())}


def cpu_times() -> tuple[int, int] | None:
    """(busy, steal) jiffies of all CPUs from /proc/stat (Linux), else None.
    Steal is time the hypervisor gave to other guests: on a shared virtual
    machine it is why runs of the same code differ."""
    try:
        f = [int(v) for v in Path("/proc/stat").read_text().split("\n")[0].split()[1:]]
    except (OSError, ValueError, IndexError):
        return None
    return sum(f[:3]) + sum(f[5:7]), f[7] if len(f) > 7 else 0


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=5,
                    help="timed runs per design, round-robin over the designs (best kept)")
    ap.add_argument("--designs", nargs="*", default=None, help="names (default: all built-in)")
    ap.add_argument("--charge-cost", action="store_true",
                    help="time every design with junction charge storage on and off, "
                         "interleaved; writes bench/results/charge_cost.json")
    ap.add_argument("--lanes", action="store_true",
                    help="time every design with dormant ports on and off, interleaved; "
                         "writes bench/results/lanes.json")
    args = ap.parse_args(argv)
    if args.charge_cost:
        return main_charge(args.designs or sorted(builtin_designs()), args.repeat)
    if args.lanes:
        return lanes(args.designs or sorted(builtin_designs()), args.repeat)
    x = render_phrase("demo", fs=FS)
    c0 = cpu_times()
    rows = bench_all(args.designs or sorted(builtin_designs()), x, args.repeat)
    c1 = cpu_times()
    steal = None
    if c0 and c1 and (c1[0] - c0[0]) + (c1[1] - c0[1]) > 0:
        steal = (c1[1] - c0[1]) / ((c1[0] - c0[0]) + (c1[1] - c0[1]))
    hdr = (f"{'design':<26}{'os':>3}{'BJT':>4}{'dev':>4}{'st':>4}{'pt':>4}"
           f"{'x RT':>8}{'target':>8}{'nonconv':>8}{'it/smp':>7}{'upd/smp':>8}  operating point")
    print(hdr)
    print("-" * len(hdr))
    for r in rows:
        opn = "ok" if not r["op_problems"] else "; ".join(r["op_problems"])
        print(f"{r['design']:<26}{r['oversample']:>3}{r['bjts']:>4}{r['devices']:>4}"
              f"{r['states']:>4}{r['ports']:>4}{r['realtime_factor']:>8.1f}"
              f"{'yes' if r['meets_target'] else 'NO':>8}{r['nonconverged']:>8}"
              f"{r['iterations_per_sample']:>7.2f}"
              f"{r['jacobian_updates_per_sample'] + r['factorizations_per_sample']:>8.3f}  {opn}")
    print(f"\n{'compressor':<26}{'Iabc uA':>8}{'thr dBV':>8}{'slope':>7}{'rel ms':>7}"
          f"{'GR soft dB':>14}{'GR hard dB':>14}{'GR max':>7}")
    for r in rows:
        f = compression_figures(r["design"], x)
        r["compression"] = f
        if f:
            print(f"{r['design']:<26}{f['rest_control_a'] * 1e6:>8.1f}{f['threshold_dbv']:>8.1f}"
                  f"{f['slope_above']:>7.3f}{f['release_time_s'] * 1e3:>7.0f}"
                  f"{min(f['gr_soft_db']):>7.1f}-{max(f['gr_soft_db']):<6.1f}"
                  f"{min(f['gr_hard_db']):>7.1f}-{max(f['gr_hard_db']):<6.1f}{f['gr_max_db']:>7.1f}")
    load = os.getloadavg() if hasattr(os, "getloadavg") else None
    result = {"fs": FS, "phrase_s": x.size / FS, "block": BLOCK, "target_realtime": TARGET_RT,
              "repeat": args.repeat, "machine": platform.machine(), "python": platform.python_version(),
              "cpus": os.cpu_count(), "loadavg_at_end": load,
              "cpu_steal_fraction": steal, "designs": rows}
    out = ROOT / "bench" / "results"
    out.mkdir(parents=True, exist_ok=True)
    (out / "designs.json").write_text(json.dumps(result, indent=2, default=float))
    st = "n/a" if steal is None else f"{100 * steal:.1f} %"
    print(f"\nwrote {out / 'designs.json'} (load average {load}; CPU time stolen by the "
          f"hypervisor during the timing: {st})")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
