"""Fingerprint every built-in design's and reference netlist's render, to
prove a speed change or a refactor left the numbers alone.

What is rendered and kept is described in tests/fingerprints.py (1 s of the
synthetic phrase through each built-in design, each reference netlist with an
input source and the start-up bench's clipper; SHA-256 of the output and probe
bytes, plus a coarse trace for other CPUs); the test
tests/test_render_fingerprints.py holds main to tests/data/render_fingerprints.json.  ``--save FILE`` writes them; ``--compare FILE`` exits 1 if any
differs from a saved run.  Not a test (it proves nothing about correctness,
only sameness between two builds).

    python bench/check_renders.py --save /tmp/before.json
    python bench/check_renders.py --compare /tmp/before.json
"""
from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

from fingerprints import all_fingerprints, differences  # noqa: E402


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--save", metavar="FILE")
    ap.add_argument("--compare", metavar="FILE")
    a = ap.parse_args()
    fp = all_fingerprints(verbose=True)
    if a.save:
        Path(a.save).write_text(json.dumps(fp, indent=1) + "\n")
    if a.compare:
        old = json.loads(Path(a.compare).read_text())
        bad = differences(old, fp)
        for k in bad:
            print(f"DIFFERS: {k}")
        print("all identical" if not bad else f"{len(bad)} differ")
        return 1 if bad else 0
    return 0


if __name__ == "__main__":
    sys.exit(main())
