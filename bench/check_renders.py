"""Fingerprint every built-in design's render, to prove a speed change left
the numbers alone.

Renders 1 s of the synthetic phrase (engine/synth.py, phrase "demo", 48 kHz)
through each built-in design at its own oversampling (engine/demo.py's
``simulate``), plus the start-up bench's two-transistor clipper netlist, and
prints the SHA-256 of each output's bytes (and of each probe trace the design
declares).  ``--save FILE`` writes them; ``--compare FILE`` exits 1 if any
differs from a saved run.  Not a test (it proves nothing about correctness,
only sameness between two builds).

    python bench/check_renders.py --save /tmp/before.json
    python bench/check_renders.py --compare /tmp/before.json
"""
from __future__ import annotations

import argparse
import hashlib
import json
import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))


def fingerprints(seconds: float = 1.0, fs: float = 48000.0) -> dict[str, str]:
    from engine.demo import simulate
    from engine.design import builtin_designs, load_design
    from engine.synth import render_phrase
    x = render_phrase("demo", fs)[: int(seconds * fs)]
    out = {}
    sources = dict(builtin_designs())
    sources["bench-clipper2"] = ROOT / "bench" / "netlists" / "clipper2.cir"
    for name, path in sorted(sources.items()):
        d = load_design(str(path) if name.startswith("bench-") else name)
        probes = tuple(p.expr for p in getattr(d, "probes", ()) or ())
        ctl = d.control_probe() if hasattr(d, "control_probe") else None
        if ctl and ctl not in probes:
            probes = (ctl,) + probes
        try:
            y, pr, _ = simulate(d, x, fs, probes=probes)
        except Exception:            # a probe this design cannot resolve
            y, pr, _ = simulate(d, x, fs)
        h = hashlib.sha256(np.ascontiguousarray(y, float).tobytes())
        for k in sorted(pr):
            h.update(k.encode())
            h.update(np.ascontiguousarray(pr[k], float).tobytes())
        out[name] = h.hexdigest()
        print(f"{name:<28} {out[name][:16]}  peak {np.max(np.abs(y)):.6g} V", flush=True)
    return out


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--save", metavar="FILE")
    ap.add_argument("--compare", metavar="FILE")
    a = ap.parse_args()
    fp = fingerprints()
    if a.save:
        Path(a.save).write_text(json.dumps(fp, indent=1) + "\n")
    if a.compare:
        old = json.loads(Path(a.compare).read_text())
        bad = [k for k in sorted(set(old) | set(fp)) if old.get(k) != fp.get(k)]
        for k in bad:
            print(f"DIFFERS: {k}")
        print("all identical" if not bad else f"{len(bad)} differ")
        return 1 if bad else 0
    return 0


if __name__ == "__main__":
    sys.exit(main())
