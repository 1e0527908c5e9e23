"""Time to read a large generated design file and a parameter-heavy
netlist: reading must grow linearly with the file's size (issue 17: a 10 MB design took over 300 s because each
part rescanned the file for its line number).

Each size runs in its own process (CPU time of ``load_design`` only).  With
``--old PATH`` the same files are also read by another checkout (for
example the main branch before the change) for a before/after table.

    python bench/bench_reading.py [--sizes 1,2,5,10] [--params 25000,100000]
                                  [--old ../main] [--timeout 600]

Prints a table and writes bench/results/reading.json.
"""
from __future__ import annotations

import argparse
import json
import os
import platform
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent

CHILD = r"""
import sys, time
from solderless.engine.design import load_design
t = time.process_time()
d = load_design(sys.argv[1])
print(time.process_time() - t, sum(len(s.parts) for s in d.stages))
"""
#: A netlist of N chained .param cards (each value used the previous one):
#: every value used to copy all parameters seen so far.
CHILD_NETLIST = r"""
import sys, time
from solderless.engine.formats.spice import parse_netlist
n = int(sys.argv[1])
text = ("params\nVIN in 0 0\nR1 in 0 {p%d}\n" % (n - 1) + ".param p0=1\n"
        + "".join(".param p%d={p%d+1}\n" % (k, k - 1) for k in range(1, n)) + ".end\n")
t = time.process_time()
parse_netlist(text)
print(time.process_time() - t, len(text))
"""


def generate(path: Path, megabytes: float) -> int:
    """A design of many 8-part stages whose parts are inline tables (the
    shape that made each part rescan the file); returns the part count."""
    stage = []
    lines = ["[design]", 'name = "generated"', ""]
    n = 0
    k = 0
    target = megabytes * 1e6
    size = 0
    while size < target:
        stage = [f"[[stage]]", f'name = "s{k}"', 'ports = ["in", "out"]', "part = ["]
        for j in range(8):
            nodes = '["in", "out"]' if j == 0 else '["out", "0"]'
            stage.append(f'  {{ name = "R{j}", type = "resistor", nodes = {nodes}, '
                         f'value = "10k", note = "generated part {k}.{j}" }},')
        stage += ["]", ""]
        block = "\n".join(stage) + "\n"
        lines.append(block)
        size += len(block)
        n += 8
        k += 1
    path.write_text("\n".join(lines))
    return n


def measure(checkout: Path, design, timeout: float, child: str = CHILD) -> float | None:
    env = dict(os.environ, PYTHONPATH=str(checkout))
    try:
        r = subprocess.run([sys.executable, "-c", child, str(design)], env=env,
                           cwd=str(checkout),
                           capture_output=True, text=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        return None
    if r.returncode != 0:
        raise RuntimeError(r.stderr[-2000:])
    return float(r.stdout.split()[0])


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--sizes", default="1,2,5,10", help="file sizes in MB")
    ap.add_argument("--old", help="another checkout to compare against")
    ap.add_argument("--timeout", type=float, default=600.0)
    ap.add_argument("--params", default="25000,100000",
                    help="netlists of this many chained .param cards")
    a = ap.parse_args()
    rows = []
    nrows = []
    for n in [int(x) for x in a.params.split(",") if x]:
        new = measure(ROOT, n, a.timeout, CHILD_NETLIST)
        old = measure(Path(a.old).resolve(), n, a.timeout, CHILD_NETLIST) if a.old else None
        nrows.append({"params": n, "new_s": new, "old_s": old,
                      "old_timed_out": bool(a.old) and old is None})
        o = ("-" if not a.old else (f"> {a.timeout:.0f}" if old is None else f"{old:.2f}"))
        print(f"netlist {n:7d} .param cards  new {new:7.2f} s  old {o} s", flush=True)
    with tempfile.TemporaryDirectory() as tmp:
        for mb in [float(x) for x in a.sizes.split(",")]:
            f = Path(tmp) / f"d{mb:g}.toml"
            parts = generate(f, mb)
            new = measure(ROOT, f, a.timeout)
            old = measure(Path(a.old).resolve(), f, a.timeout) if a.old else None
            rows.append({"megabytes": round(f.stat().st_size / 1e6, 2), "parts": parts,
                         "new_s": new, "old_s": old,
                         "old_timed_out": bool(a.old) and old is None})
            o = ("-" if not a.old else (f"> {a.timeout:.0f}" if old is None
                                        else f"{old:.2f}"))
            print(f"{rows[-1]['megabytes']:6.2f} MB {parts:7d} parts  new {new:7.2f} s  "
                  f"old {o} s", flush=True)
    out = ROOT / "bench" / "results" / "reading.json"
    out.write_text(json.dumps({
        "what": "CPU seconds of load_design on a generated design (inline-table parts)",
        "machine": platform.platform(), "python": platform.python_version(),
        "load": os.getloadavg(), "time": time.strftime("%Y-%m-%d %H:%M:%S"),
        "old_checkout": bool(a.old), "rows": rows,
        "netlist_what": "CPU seconds of parse_netlist on N chained .param cards",
        "netlist_rows": nrows}, indent=1))
    print(f"wrote {out.relative_to(ROOT)}")


if __name__ == "__main__":
    main()
