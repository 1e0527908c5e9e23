"""Start-up of a one-off render, and a 10 s render against ngspice, as whole
processes.

Circuit: bench/netlists/clipper2.cir (two NPN stages; our own values).  Input:
a 220 Hz sine, 0.5 of full scale, written here as a 32-bit float WAV at
96 kHz.

(a) Start-up (``python -m solderless.app.cli render`` on 10 ms of input, so the
    simulation itself is negligible):

    * whole process wall time and CPU time (user + system of the child), the
      minimum over ``--repeat`` runs (the machine may be busy: the minimum is
      the least disturbed run);
    * time to first sample and a breakdown from a child that runs the same
      steps as ``cmd_render`` with a clock between them (interpreter start,
      imports, argument parsing, reading the design and the WAV, building
      the simulator, the first block);
    * the whole process again with Python's bytecode cache allowed (the
      environment may set PYTHONDONTWRITEBYTECODE; an installed package has
      its .pyc files);
    * ``python -X importtime``: the slowest imports (cumulative);
    * numba: the time each dispatcher spends loading its cached machine code
      on its first call (``numba.core.caching.Cache.load_overload`` timed),
      and how many were compiled instead (a cold cache) -- only when the
      render runs the JIT kernel; with the ahead-of-time kernel module
      (solderless/engine/solver/aot.py, built here first if not fresh) numba
      is never imported, which the child reports.

    The render and the 10 s render are measured twice: with the
    ahead-of-time module (what a render uses when it is fresh) and with the
    JIT kernel forced (``SOLDERLESS_JIT=1``, what it uses otherwise).

(b) 10 s at 96 kHz, whole processes: ``python -m solderless.app.cli render`` (no
    oversampling: the same time step as ngspice) against ``ngspice -b`` on
    the same netlist with a transient at tstep = tmax = 1/96000 (trapezoidal,
    truncation-error control off: the same step; tests/spice_ref.py), its
    source the same sine as a SIN source, writing v(out) to a raw file.

(c) Running speed, module against JIT: the same designs rendered in one
    process through the ahead-of-time module and through the JIT kernel,
    interleaved run by run (best CPU time of ``--repeat``), as real-time
    factors: a module built for a generic CPU would be slower; this one is
    built for the host.

Prints a table and writes bench/results/startup.json.

    python bench/bench_startup.py [--repeat 5] [--seconds 10] [--baseline OLD.json]

``--baseline`` embeds an earlier run (e.g. of the code before a change, the
same script copied into that tree) and prints the figures side by side.
"""
from __future__ import annotations

import argparse
import json
import os
import platform
import re
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
NETLIST = ROOT / "bench" / "netlists" / "clipper2.cir"
FS = 96000
AMPLITUDE, FREQ = 0.5, 220.0     # of full scale, Hz


# ------------------------------------------------------------------ child

def _phases(argv: list[str]) -> None:
    """Run the render command's steps with a clock between them and print
    JSON (child process; argv[0] is the parent's time.time() at spawn)."""
    t_spawn = float(argv[0])
    t_main = time.time()
    marks = [("interpreter start", t_main - t_spawn)]
    loads: dict[str, float] = {}

    def mark(name, t0=[time.perf_counter()]):
        t = time.perf_counter()
        marks.append((name, t - t0[0]))
        t0[0] = t

    import numpy as np
    mark("import numpy")
    import solderless.app.cli as cli
    mark("import solderless.app.cli")
    ap = cli.build_parser(argv[1:]) if _takes_argv(cli.build_parser) else cli.build_parser()
    args = ap.parse_args(argv[1:])
    mark("build parser, parse arguments")
    import soundfile as sf
    d = cli._load(args)
    x, fs = sf.read(args.input, dtype="float64", always_2d=True)
    circ = d.flatten()
    mark("read design and WAV")
    from solderless.engine.solver import Simulator
    mark("import solver")
    from solderless.engine.solver.aot import kernels
    kern = kernels()
    mark("load the ahead-of-time module" if kern.aot else "import numba, the JIT kernels")
    if not kern.aot:
        # time every cache load (and count compilations) from here on
        from numba.core import caching
        orig = caching.Cache.load_overload

        def timed(self, sig, target_context, _orig=orig):
            t0 = time.perf_counter()
            r = _orig(self, sig, target_context)
            f = getattr(self, "_py_func", None)
            key = f"{f.__module__}.{f.__qualname__}" if f is not None else str(self)
            loads[key] = loads.get(key, 0.0) + time.perf_counter() - t0
            if r is None:
                loads[key + " (compiled: cache miss)"] = 0.0
            return r
        caching.Cache.load_overload = timed
    sim = Simulator(circ, fs=float(fs), oversample=args.oversample or d.oversample)
    mark("build simulator (DC operating point)")
    v = x[:, 0] * args.input_fs_volts
    y = np.empty(min(len(v), 4096))
    sim.process_into(v[: len(y)], y, None, probe_start=0)
    mark("first block")
    t_first = time.time() - t_spawn
    print(json.dumps({"marks": marks, "first_sample_s": t_first,
                      "kernel": "ahead-of-time module" if kern.aot else "JIT",
                      "numba_imported": "numba" in sys.modules,
                      "cache_loads": sorted(loads.items(), key=lambda kv: -kv[1])}))


def _takes_argv(fn) -> bool:
    import inspect
    return len(inspect.signature(fn).parameters) > 0


# ------------------------------------------------------------------ parent

def _python() -> list[str]:
    return [sys.executable]


#: set by main() for the forced-JIT runs
JIT = False


def _env(pyc: bool = False) -> dict:
    env = dict(os.environ)
    if pyc:     # as an installed package runs: bytecode cached in __pycache__
        env.pop("PYTHONDONTWRITEBYTECODE", None)
    env.pop("SOLDERLESS_JIT", None)
    if JIT:
        env["SOLDERLESS_JIT"] = "1"
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    return env


def run_timed(cmd: list[str], cwd=None, writes: Path | None = None, pyc: bool = False):
    """(wall seconds, child CPU seconds user+sys, result).  ``writes``: a file
    the run must write (ngspice -b exits 1 after a control-block-only run)."""
    if writes is not None:
        writes.unlink(missing_ok=True)
    r0 = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    res = subprocess.run(cmd, capture_output=True, text=True, env=_env(pyc), cwd=cwd)
    wall = time.perf_counter() - t0
    r1 = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (r1.ru_utime - r0.ru_utime) + (r1.ru_stime - r0.ru_stime)
    if (res.returncode != 0 if writes is None else not writes.exists()):
        raise RuntimeError(f"{' '.join(cmd)} failed:\n{res.stderr[-2000:]}")
    return wall, cpu, res


def best_of(cmd, repeat, cwd=None, writes=None, pyc=False) -> dict:
    walls, cpus = [], []
    for _ in range(repeat):
        w, c, _ = run_timed(cmd, cwd, writes, pyc)
        walls.append(w)
        cpus.append(c)
    return {"wall_min_s": min(walls), "wall_median_s": sorted(walls)[len(walls) // 2],
            "cpu_min_s": min(cpus), "runs": repeat}


def write_input(path: Path, seconds: float) -> "np.ndarray":
    import numpy as np
    import soundfile as sf
    t = np.arange(int(round(seconds * FS))) / FS
    x = AMPLITUDE * np.sin(2 * np.pi * FREQ * t)
    sf.write(str(path), x.astype(np.float32), FS, subtype="FLOAT")
    return sf.read(str(path), dtype="float64")[0]


def importtime(render_cmd: list[str], top: int = 12) -> list[tuple[str, float]]:
    """The slowest imports by cumulative time (python -X importtime), outermost
    first-level entries only."""
    cmd = [sys.executable, "-X", "importtime"] + render_cmd[1:]
    res = subprocess.run(cmd, capture_output=True, text=True, env=_env())
    rows = []
    for line in res.stderr.splitlines():
        m = re.match(r"import time:\s+(\d+) \|\s+(\d+) \|( *)(\S+)", line)
        if m and len(m.group(3)) <= 2:      # imported from the program itself
            rows.append((m.group(4), int(m.group(2)) * 1e-6))
    return sorted(rows, key=lambda r: -r[1])[:top]


def ngspice_render(seconds: float, tmp: Path) -> list[str]:
    """Write the ngspice deck (the netlist with VIN the same sine the WAV
    holds, same-step transient) and return its command line."""
    sys.path.insert(0, str(ROOT / "tests"))
    import spice_ref as S
    h = 1.0 / FS
    amp = AMPLITUDE * 1.548      # solderless/engine/levels.py FULL_SCALE_V, as the CLI scales
    cards = []
    for line in NETLIST.read_text().splitlines():
        if line.upper().startswith("VIN "):
            line = f"VIN src 0 DC 0 SIN(0 {amp:.9g} {FREQ:g})"
        if line.strip().lower() == ".end":
            continue
        cards.append(line)
    ctl, opts = S.tran_control(h, seconds, fixed_step=True)
    ctl = ctl.replace("write out.raw all", "write out.raw v(out)")
    deck = tmp / "clipper2_tran.cir"
    deck.write_text("\n".join(cards) + f"\n.options {opts}\n"
                    + ".control\n" + ctl + "\n.endc\n.end\n")
    return ["ngspice", "-b", str(deck.name)]


SPEED_DESIGNS = ("flagship", "booster", "bench/netlists/clipper2.cir")


def running_speed(repeat: int, seconds: float = 4.0) -> dict:
    """Real-time factors (audio s / CPU s, best of ``repeat``) of a few
    designs through the module and through the JIT kernel, interleaved."""
    import numpy as np
    from solderless.engine.design import load_design
    from solderless.engine.solver import Simulator, aot
    from solderless.engine.synth import render_phrase
    fs = 48000.0
    x = render_phrase("demo", fs)[: int(seconds * fs)]
    kinds = {"module": aot.Kernels(aot.load()), "jit": aot.jit_kernels()}
    out = {}
    for name in SPEED_DESIGNS:
        src = str(ROOT / name) if name.endswith(".cir") else name
        d = load_design(src)
        sims = {}
        for k, kern in kinds.items():
            aot._kernels = kern
            sims[k] = Simulator(d.flatten(), fs=fs, oversample=d.oversample)
            sims[k].process(x[:256])
        aot._kernels = None
        best = {k: float("inf") for k in sims}
        ys = {}
        for _ in range(repeat):
            for k, sim in sims.items():
                sim.reset()
                t0 = time.process_time()
                ys[k] = sim.process(x)
                best[k] = min(best[k], time.process_time() - t0)
        row = {f"{k}_rt": seconds / best[k] for k in sims}
        row["module_over_jit_time"] = best["module"] / best["jit"]
        row["max_abs_difference_v"] = float(np.max(np.abs(ys["module"] - ys["jit"])))
        row["oversample"] = d.oversample
        out[Path(name).stem] = row
    return out


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--seconds", type=float, default=10.0)
    ap.add_argument("--label", default="", help="a note stored with the results")
    ap.add_argument("--baseline", metavar="FILE",
                    help="an earlier run's JSON, stored under 'baseline' and printed beside")
    ap.add_argument("--out", default=str(ROOT / "bench" / "results" / "startup.json"))
    a = ap.parse_args()
    tmp = Path(tempfile.mkdtemp(prefix="sl-startup-"))
    short, long_ = tmp / "in_10ms.wav", tmp / "in_long.wav"
    write_input(short, 0.01)
    write_input(long_, a.seconds)
    render = [sys.executable, "-m", "solderless.app.cli", "render", str(NETLIST)]
    short_cmd = render + [str(short), str(tmp / "o1.wav"), "--output-fs-volts", "10"]
    long_cmd = render + [str(long_), str(tmp / "o2.wav"), "--output-fs-volts", "10",
                         "--oversample", "1"]

    global JIT
    sys.path.insert(0, str(ROOT))
    from solderless.engine.solver import aot
    t0 = time.perf_counter()
    fresh = aot.find() is not None
    aot.build(quiet=True)
    build_s = None if fresh else time.perf_counter() - t0
    run_timed(short_cmd)                                  # warm the cache (compile once)
    JIT = True
    run_timed(short_cmd)
    JIT = False
    res = {"machine": platform.platform(), "python": platform.python_version(),
           "cpu_count": os.cpu_count(), "load_avg_at_start": os.getloadavg(),
           "label": a.label, "netlist": "bench/netlists/clipper2.cir", "fs": FS,
           "kernel_module": aot.module_name(), "kernel_module_build_s": build_s}
    res["python_bare"] = best_of([sys.executable, "-c", "pass"], a.repeat)
    res["import_numpy"] = best_of([sys.executable, "-c", "import numpy"], a.repeat)
    res["startup_render_10ms"] = best_of(short_cmd, a.repeat)
    res["help"] = best_of(render[:3] + ["--help"], a.repeat)
    # the same with Python's bytecode cache allowed (this environment may set
    # PYTHONDONTWRITEBYTECODE, which makes every start compile our modules)
    res["pythondontwritebytecode"] = bool(os.environ.get("PYTHONDONTWRITEBYTECODE"))
    run_timed(short_cmd, pyc=True)
    res["startup_render_10ms_pyc"] = best_of(short_cmd, a.repeat, pyc=True)

    phases = []
    for _ in range(a.repeat):
        out = subprocess.run([sys.executable, __file__, "--phases", repr(time.time())]
                             + short_cmd[3:], capture_output=True, text=True, env=_env())
        if out.returncode != 0:
            raise RuntimeError(out.stderr[-2000:])
        phases.append(json.loads(out.stdout.strip().splitlines()[-1]))
    best = min(phases, key=lambda p: p["first_sample_s"])
    res["first_sample"] = {"min_s": best["first_sample_s"], "breakdown_of_best": best["marks"],
                           "kernel": best["kernel"], "numba_imported": best["numba_imported"],
                           "cache_loads_of_best": best["cache_loads"]}
    res["importtime_top"] = importtime(short_cmd)

    res["render_10s_solderless"] = best_of(long_cmd, max(2, a.repeat // 2))
    res["render_10s_solderless_pyc"] = best_of(long_cmd, max(2, a.repeat // 2), pyc=True)
    # the same two with the JIT kernel forced (no fresh module)
    JIT = True
    res["startup_render_10ms_pyc_jit"] = best_of(short_cmd, a.repeat, pyc=True)
    res["render_10s_solderless_jit"] = best_of(long_cmd, max(2, a.repeat // 2))
    JIT = False
    ng = ngspice_render(a.seconds, tmp)
    res["render_10s_ngspice"] = best_of(ng, max(2, a.repeat // 2), cwd=tmp,
                                        writes=tmp / "out.raw")
    sl, ns = res["render_10s_solderless"], res["render_10s_ngspice"]
    res["ratio_ngspice_over_solderless_wall"] = ns["wall_min_s"] / sl["wall_min_s"]
    res["ratio_ngspice_over_solderless_cpu"] = ns["cpu_min_s"] / sl["cpu_min_s"]
    res["ratio_ngspice_over_solderless_jit_wall"] = (
        ns["wall_min_s"] / res["render_10s_solderless_jit"]["wall_min_s"])
    res["ratio_ngspice_over_solderless_pyc_wall"] = (
        ns["wall_min_s"] / res["render_10s_solderless_pyc"]["wall_min_s"])
    res["seconds"] = a.seconds
    res["running_speed"] = running_speed(a.repeat)

    print(f"start-up of a one-off render ({FS} Hz, {res['netlist']}); min of "
          f"{a.repeat} runs, load average at start {res['load_avg_at_start'][0]:.1f}")
    print(f"{'':44}{'wall s':>9}{'cpu s':>9}")
    for k, name in (("python_bare", "python -c pass"), ("import_numpy", "python -c 'import numpy'"),
                    ("help", "solderless --help"),
                    ("startup_render_10ms", "render 10 ms (whole process)"),
                    ("startup_render_10ms_pyc", "  the same, bytecode cache allowed"),
                    ("startup_render_10ms_pyc_jit", "  the same, JIT kernel forced")):
        print(f"{name:<44}{res[k]['wall_min_s']:9.3f}{res[k]['cpu_min_s']:9.3f}")
    print(f"{'time to first sample':<44}{res['first_sample']['min_s']:9.3f}")
    print(f"breakdown (best run; kernel: {best['kernel']}, numba imported: "
          f"{best['numba_imported']}):")
    for name, t in best["marks"]:
        print(f"  {name:<42}{t:9.3f}")
    print("numba cached-code loads (best run):")
    for name, t in best["cache_loads"][:10]:
        print(f"  {name[:42]:<42}{t:9.3f}")
    print("slowest imports (-X importtime, cumulative):")
    for name, t in res["importtime_top"][:8]:
        print(f"  {name[:42]:<42}{t:9.3f}")
    print(f"10 s render at {FS} Hz, whole processes:")
    print(f"  {'solderless render':<42}{sl['wall_min_s']:9.3f}{sl['cpu_min_s']:9.3f}")
    sp = res["render_10s_solderless_pyc"]
    print(f"  {'  the same, bytecode cache allowed':<42}{sp['wall_min_s']:9.3f}{sp['cpu_min_s']:9.3f}")
    sj = res["render_10s_solderless_jit"]
    print(f"  {'  the same, JIT kernel forced':<42}{sj['wall_min_s']:9.3f}{sj['cpu_min_s']:9.3f}")
    print(f"  {'ngspice -b (same step)':<42}{ns['wall_min_s']:9.3f}{ns['cpu_min_s']:9.3f}")
    print(f"  ngspice / solderless: {res['ratio_ngspice_over_solderless_wall']:.2f}x wall, "
          f"{res['ratio_ngspice_over_solderless_cpu']:.2f}x cpu "
          f"(JIT forced: {res['ratio_ngspice_over_solderless_jit_wall']:.2f}x wall)")
    if build_s is not None:
        print(f"kernel module built first: {build_s:.1f} s")
    print("running speed, times real time (CPU time, best of the interleaved runs):")
    print(f"  {'design':<20}{'oversample':>11}{'module':>9}{'JIT':>9}{'time ratio':>12}")
    for name, r in res["running_speed"].items():
        print(f"  {name:<20}{r['oversample']:>11}{r['module_rt']:9.1f}{r['jit_rt']:9.1f}"
              f"{r['module_over_jit_time']:12.3f}")
    if a.baseline:
        b = json.loads(Path(a.baseline).read_text())
        res["baseline"] = b
        print(f"against the baseline ({b.get('label') or a.baseline}), min wall s:")
        for k, name in (("startup_render_10ms", "render 10 ms (whole process)"),
                        ("help", "solderless --help"),
                        ("render_10s_solderless", "10 s render"),
                        ("render_10s_ngspice", "10 s ngspice")):
            print(f"  {name:<42}{b[k]['wall_min_s']:9.3f} -> {res[k]['wall_min_s']:.3f}")
        print(f"  {'time to first sample':<42}{b['first_sample']['min_s']:9.3f} -> "
              f"{res['first_sample']['min_s']:.3f}")
        print(f"  {'ngspice / solderless (wall)':<42}"
              f"{b['ratio_ngspice_over_solderless_wall']:9.2f} -> "
              f"{res['ratio_ngspice_over_solderless_wall']:.2f}")
    Path(a.out).parent.mkdir(parents=True, exist_ok=True)
    Path(a.out).write_text(json.dumps(res, indent=1) + "\n")
    print(f"wrote {Path(a.out).relative_to(ROOT) if Path(a.out).is_relative_to(ROOT) else a.out}")
    return 0


if __name__ == "__main__":
    if len(sys.argv) > 1 and sys.argv[1] == "--phases":
        sys.path.insert(0, str(ROOT))
        _phases(sys.argv[2:])
        sys.exit(0)
    sys.exit(main())
