"""Fingerprints of renders: the proof that a refactor or a speed change left
the numbers alone.

Every built-in design renders 1 s of the synthetic phrase "demo" (48 kHz,
solderless.engine.synth) at its own oversampling, with its probes; every
reference netlist under tests/netlists that names an input source renders
the same phrase, plus the start-up bench's two-transistor clipper.  For each
we keep

* ``sha256``: the SHA-256 of the output's bytes and of each probe trace, to
  hold the same machine to bit-identical output;
* ``cpu``: the CPU the numbers were taken on (numba compiles for the host
  CPU, and with fast-math another CPU may round the last bits differently);
* ``peak``, ``rms`` and ``trace``: the output's peak, RMS and 64 evenly
  spaced samples, so another machine is held to agreement within a relative
  1e-6 of the peak instead.

Used by tests/test_render_fingerprints.py and bench/check_renders.py.
"""
from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
STORED = ROOT / "tests" / "data" / "render_fingerprints.json"
SECONDS, FS = 1.0, 48000.0


def cpu_name() -> str:
    import llvmlite.binding as llvm
    return f"{llvm.get_host_cpu_name()}:{llvm.get_host_cpu_features().flatten()}"


def sources() -> dict[str, Path | str]:
    """Every design and netlist fingerprinted: name -> built-in name or path."""
    from solderless.engine.design import builtin_designs
    out: dict[str, Path | str] = {name: name for name in builtin_designs()}
    out["bench-clipper2"] = ROOT / "bench" / "netlists" / "clipper2.cir"
    for f in sorted((ROOT / "tests" / "netlists").glob("*.cir")):
        text = f.read_text(errors="replace").upper()
        if "\nVIN " in text:          # a netlist runs as a design through its VIN
            out["netlist-" + f.stem] = f
    return out


def fingerprint(source) -> dict:
    from solderless.engine.analysis.measure import simulate
    from solderless.engine.design import load_design
    from solderless.engine.synth import render_phrase
    x = render_phrase("demo", FS)[: int(SECONDS * FS)]
    d = load_design(str(source))
    probes = tuple(p.expr for p in getattr(d, "probes", ()) or ())
    ctl = d.control_probe() if hasattr(d, "control_probe") else None
    if ctl and ctl not in probes:
        probes = (ctl,) + probes
    y, pr, _ = simulate(d, x, FS, probes=probes)
    y = np.ascontiguousarray(y, float)
    h = hashlib.sha256(y.tobytes())
    for k in sorted(pr):
        h.update(k.encode())
        h.update(np.ascontiguousarray(pr[k], float).tobytes())
    idx = np.linspace(0, y.size - 1, 64).astype(int)
    return {"sha256": h.hexdigest(), "peak": float(np.max(np.abs(y))),
            "rms": float(np.sqrt(np.mean(y * y))), "trace": [float(v) for v in y[idx]]}


def all_fingerprints(verbose: bool = False) -> dict:
    out = {"cpu": cpu_name(), "renders": {}}
    for name, src in sources().items():
        out["renders"][name] = fp = fingerprint(src)
        if verbose:
            print(f"{name:<28} {fp['sha256'][:16]}  peak {fp['peak']:.6g} V", flush=True)
    return out


def differences(old: dict, new: dict) -> list[str]:
    """Names whose render differs: bit for bit on the CPU ``old`` was taken
    on, beyond 1e-6 of the peak on any other."""
    same_cpu = old.get("cpu") == new.get("cpu")
    bad = []
    for name in sorted(set(old["renders"]) | set(new["renders"])):
        a, b = old["renders"].get(name), new["renders"].get(name)
        if a is None or b is None:
            bad.append(f"{name}: {'new' if a is None else 'missing'}")
        elif same_cpu and a["sha256"] != b["sha256"]:
            bad.append(f"{name}: output bytes differ")
        elif not same_cpu:
            tol = 1e-6 * max(a["peak"], 1e-9)
            err = max(abs(a["peak"] - b["peak"]), abs(a["rms"] - b["rms"]),
                      max(abs(p - q) for p, q in zip(a["trace"], b["trace"])))
            if err > tol:
                bad.append(f"{name}: differs by {err:.3g} V (allowed {tol:.3g} V)")
    return bad
