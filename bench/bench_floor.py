"""How far the solver is from the floor of its own building blocks.

For each reference netlist with an audio input (tests/netlists) and each
built-in design, at 48 kHz, oversampling 1:

* full: ``Simulator.process`` on the bench input (best of ``--repeat``), in
  ns per sample: what bench_vs_ngspice.py and bench_designs.py time.
* floor: the work no port solve of the DK-method can skip, done with the
  kernel's own compiled pieces (``kernel.eval_one``, ``kernel.gemv_inl``) and
  nothing else: per sample the port offsets p = p0 + Pz z, one predictor
  product with the inverse Jacobian, one evaluation of every device, the
  residual product with K, one step product with the inverse Jacobian, the
  output row and the state update.  No bypass, no limiting, no convergence
  test, no refactorisation.  The devices are evaluated on the full run's own
  solution, recorded sample by sample, so the exponentials see the voltages
  they see in the full run; the numbers this loop computes are not used.
* silent: the full solver on a silent input of the same length (best of
  ``--repeat``): one chord iteration per sample with every device bypassed,
  so what is left is the solver's own fixed cost per sample (predictor,
  products, bypass and limit checks, convergence test, state update, charge
  history), without the device evaluations the floor has.
* budget: for the ngspice netlists, ngspice's time per step (from
  bench/results/vs_ngspice.json, same step) divided by the 25x target, i.e.
  what one sample may cost for the target to hold.

Prints a table and writes bench/results/floor.json.

    python bench/bench_floor.py [--seconds 1.0] [--repeat 7]
"""
from __future__ import annotations

import argparse
import json
import platform
import sys
import time
from pathlib import Path

import numpy as np
from numba import njit

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

from solderless.engine.solver import Simulator, kernel as K  # noqa: E402

FS = 48000.0
TARGET_X = 25.0


@njit(fastmath=K.FM, error_model="numpy")
def floor_loop(V, Z, Pz, p0, Az, x0, C, Kk, Yz, y0, Fy, Vy, Ji,
               dcode, dpo, dpa, par, i, G, p, pprev, F, vn, xt):
    """The unavoidable products and one device evaluation per sample (see
    the module text); returns a checksum so nothing is optimised away."""
    n = V.shape[0]
    npt = V.shape[1]
    nz = Z.shape[1]
    nxp = x0.size
    acc = 0.0
    for r in range(npt):
        pprev[r] = p0[r]
    for k in range(n):
        z = Z[k]
        v = V[k]
        for r in range(npt):
            p[r] = p0[r]
        K.gemv_inl(Pz, z, p, npt, nz)
        for r in range(npt):
            F[r] = p[r] - pprev[r]
            vn[r] = v[r]
            pprev[r] = p[r]
        K.gemv_inl(Ji, F, vn, npt, npt)          # predictor
        for d in range(dcode.size):
            K.eval_one(dcode[d], par, dpa[d], v, dpo[d], i, G)
        for r in range(npt):
            i[r] -= K.PORT_G0 * v[r]
            F[r] = p[r] - v[r]
        K.gemv_inl(Kk, i, F, npt, npt)           # residual
        for r in range(npt):
            vn[r] = v[r]
        K.gemv_inl(Ji, F, vn, npt, npt)          # step
        s = y0[0]
        for c in range(nz):
            s += Yz[0, c] * z[c]
        for c in range(npt):
            s += Fy[0, c] * i[c] + Vy[0, c] * vn[c]
        for r in range(nxp):
            xt[r] = x0[r]
        K.gemv_inl(Az, z, xt, nxp, nz)           # state update
        K.gemv_inl(C, i, xt, nxp, npt)
        acc += s + xt[0] + vn[0]
    return acc


def trajectory(sim: Simulator, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Port solution v and kernel vector z (states, then the input) of every
    sample, recorded by running the simulator one sample at a time."""
    m = sim._model
    V = np.zeros((x.size, sim._v.size))
    Z = np.zeros((x.size, sim._z.size))
    y = np.zeros(1)
    inp = int(np.flatnonzero(m.uvar == sim.net.input_index)[0]) if m.uvar.size else -1
    for k in range(x.size):
        Z[k] = sim._z
        if inp >= 0:
            Z[k, sim.n_states + inp] = x[k]
        sim.process_into(x[k:k + 1], y)
        V[k] = sim._v
    return V, Z


def measure(name: str, make, x: np.ndarray, repeat: int) -> dict:
    """Full and floor time per sample of one circuit (floor only on the
    general kernel: circuits of at most kernel.SMALL_PORTS ports run a lean
    path with its devices inlined, which beats these pieces)."""
    full = np.inf
    for _ in range(repeat):
        sim = make()
        t0 = time.perf_counter()
        sim.process(x)
        full = min(full, time.perf_counter() - t0)
    stats = sim.stats
    n = x.size
    silent = np.inf
    quiet = np.zeros_like(x)
    for _ in range(repeat):
        sim_q = make()
        t0 = time.perf_counter()
        sim_q.process(quiet)
        silent = min(silent, time.perf_counter() - t0)
    row = {"name": name, "ports": sim.n_ports, "padded_ports": sim._v.size,
           "states": sim.n_states, "devices": int(sim._arr[0][0].size),
           "full_ns_per_sample": full / n * 1e9, "silent_ns_per_sample": silent / n * 1e9,
           "silent_iterations": sim_q.stats["mean_iterations"], "floor_ns_per_sample": None,
           "full_over_floor": None, "mean_iterations": stats["mean_iterations"],
           "factorizations_per_sample": stats["factorizations"] / max(1, stats["samples"]),
           "updates_per_sample": stats["jacobian_updates"] / max(1, stats["samples"])}
    if sim.n_ports <= K.SMALL_PORTS:
        return row
    sim = make()
    V, Z = trajectory(sim, x)
    m = sim._model
    dcode, dpo, dnp, dpa, par, dqs = sim._arr[0]
    npt = sim._v.size
    work = [np.zeros(npt) for _ in range(4)] + [np.zeros(m.x0.size)]
    args = (V, Z, m.Pz, m.p0, m.Az, m.x0, m.Ck, m.Kk, m.Yz, m.y0, m.Fyk, m.Vyk,
            sim._Ji.copy(), dcode, dpo, dpa, par, np.zeros(npt), np.zeros((npt, npt)), *work)
    floor_loop(*args)
    floor = np.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        floor_loop(*args)
        floor = min(floor, time.perf_counter() - t0)
    row.update(floor_ns_per_sample=floor / n * 1e9, full_over_floor=full / floor)
    return row


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=1.0)
    ap.add_argument("--repeat", type=int, default=7)
    ap.add_argument("--out", default=str(ROOT / "bench" / "results" / "floor.json"))
    a = ap.parse_args(argv)
    import spice_ref as S
    from solderless.engine.design import builtin_designs, load_design
    from solderless.engine.synth import render_phrase

    ng = {}
    ng_file = ROOT / "bench" / "results" / "vs_ngspice.json"
    if ng_file.exists():
        for r in json.loads(ng_file.read_text())["rows"]:
            ng[r["netlist"]] = r["ngspice_minus_startup_s"] / r["samples"] * 1e9
    rows = []
    for name in S.audio_netlists():
        circ = S.engine_circuit(name)
        _, x = S.engine_input(name, FS, a.seconds)
        row = measure(name, lambda c=circ: Simulator(c, FS, dormant_ports=False), np.ascontiguousarray(x), a.repeat)
        if name in ng:
            row["ngspice_ns_per_step"] = ng[name]
            row["budget_ns_per_sample"] = ng[name] / TARGET_X
        rows.append(row)
    phrase = render_phrase("demo", FS)[: int(a.seconds * FS)]
    for name, path in sorted(builtin_designs().items()):
        circ = load_design(path).flatten()
        rows.append(measure(name, lambda c=circ: Simulator(c, FS, dormant_ports=False), phrase, a.repeat))
    hdr = (f"{'circuit':26s} {'ports':>5s} {'dev':>3s} {'full ns':>8s} {'silent ns':>9s} "
           f"{'floor ns':>8s} "
           f"{'full/floor':>10s} {'it/sample':>9s} {'budget ns':>9s}")
    print(f"ns per sample at {FS:g} Hz, oversampling 1, best of {a.repeat}")
    print(hdr)
    print("-" * len(hdr))
    for r in rows:
        b = r.get("budget_ns_per_sample")
        fl = r["floor_ns_per_sample"]
        floor_cols = (f"{fl:8.0f} {r['full_over_floor']:10.2f}" if fl is not None
                      else f"{'lean' if r['ports'] else 'linear':>8s} {'':>10s}")
        print(f"{r['name']:26s} {r['ports']:5d} {r['devices']:3d} "
              f"{r['full_ns_per_sample']:8.0f} {r['silent_ns_per_sample']:9.0f} {floor_cols} "
              f"{r['mean_iterations']:9.3f} "
              f"{'' if b is None else f'{b:9.0f}'}")
    print("floor: the general kernel's own pieces, one device evaluation and the "
          "products per sample, nothing else;\nsilent: the full solver on silence "
          "(every device bypassed, one iteration per sample);\n'lean': a circuit of at most "
          f"{K.SMALL_PORTS} ports runs the inlined two-port path, not these pieces; "
          "'linear': no nonlinear ports; "
          f"budget: ngspice's ns per step / {TARGET_X:g}")
    out = {"fs": FS, "seconds": a.seconds, "repeat": a.repeat,
           "python": platform.python_version(), "machine": platform.machine(), "rows": rows}
    Path(a.out).parent.mkdir(parents=True, exist_ok=True)
    Path(a.out).write_text(json.dumps(out, indent=2))
    print(f"wrote {a.out}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
