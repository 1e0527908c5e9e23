"""The Monte Carlo report: ``trials.csv``, ``summary.json``, the plots and
``report.html`` written from a run of :mod:`solderless.engine.analysis.montecarlo`.
Used by ``solderless montecarlo`` and the workbench's build panel alike.
"""
from __future__ import annotations

import csv
import html
import io
import json
from pathlib import Path

from solderless.engine.errors import SolderlessError


def write_text(path: Path, text: str) -> None:
    """Write ``text`` to ``path`` atomically; a failure is a SolderlessError
    naming the file."""
    from solderless.engine.fileio import atomic_write
    try:
        atomic_write(path, text)
    except OSError as exc:
        raise SolderlessError(f"cannot write: {exc.strerror or exc}", file=str(path)) from None


def csv_text(rows: list[dict], cols: list[str]) -> str:
    """Rows (dicts) as CSV with a header of ``cols``."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(cols)
    for r in rows:
        w.writerow([csv_cell(r.get(c, "")) for c in cols])
    return buf.getvalue()


def csv_cell(v):
    """A CSV cell: floats to 9 significant digits, the rest as they are."""
    if isinstance(v, float):
        return f"{v:.9g}"
    return v


def write_montecarlo(out: Path, d, spec, runner, rr, limits) -> dict:
    """Write the report of run ``rr`` (:func:`~solderless.engine.analysis.montecarlo.run_trials`)
    of design ``d`` into the folder ``out``; returns the summary and the plot files."""
    from solderless.engine.analysis.montecarlo import METRICS, passes, plots, summary
    nominal = runner.nominal_result
    s = summary(rr.results, nominal, limits, runner.draws)
    s.update(interrupted=rr.interrupted, requested=rr.requested, where=rr.where,
             seed=spec.seed, dist=spec.dist, design=d.name)
    labels = [dr.label for dr in runner.draws]
    rows = []
    for r in rr.results:
        row = {"trial": r["index"], "passed": int(passes(r, nominal, limits)),
               "error": r.get("error", ""), "in_region": int(bool(r.get("in_region")))}
        for m in METRICS:
            row[m] = r.get(m, float("nan"))
        for lab in labels:
            row[lab] = r["draws"].get(lab, "")
        rows.append(row)
    cols = ["trial", "passed", "error", "in_region", *METRICS, *labels]
    write_text(out / "trials.csv", csv_text(rows, cols))
    write_text(out / "summary.json", json.dumps(s, indent=2, default=float, allow_nan=True))
    files = plots(rr.results, nominal, out)
    write_text(out / "report.html", montecarlo_html(d.name, s, files, limits))
    return {"summary": s, "files": files}


def montecarlo_html(name: str, s: dict, files: dict, limits) -> str:
    e = html.escape
    p = [f"<h1>Tolerance Monte Carlo: {e(name)}</h1>"]
    if s.get("interrupted"):
        p.append(f"<p><b>Interrupted: {s['trials']} of {s['requested']} trials.</b></p>")
    p.append(f"<p>{s['trials']} trials, seed {s['seed']}, parts drawn {e(s['dist'])} within "
             f"their tolerance" + (" (normal: sigma = tolerance/3)" if s["dist"] == "normal"
                                   else "") + ", transistor and diode parameters over the "
             "parts library's spreads; run " + e(s["where"]) + ".</p>")
    p.append(f"<h2>Yield: {100 * s['yield']:.1f} %</h2><p>Passed {s['passed']} of "
             f"{s['trials']}: gain at 1 kHz within {limits.gain_db:g} dB of nominal and every "
             "device in its nominal region" + "".join(
                 f", {e(m)} in [{lo:g}, {hi:g}]" for m, (lo, hi) in limits.extra.items())
             + f". {s['failed_to_solve']} trial(s) found no operating point.</p>")
    rows = "".join(f"<tr><td>{e(m)}</td>" + "".join(
        f"<td>{st[k]:.4g}</td>" for k in ("nominal", "mean", "std", "p05", "p95")) + "</tr>"
        for m, st in s["stats"].items())
    p.append("<table border=1 cellpadding=3><tr><th>metric</th><th>nominal</th><th>mean</th>"
             f"<th>sd</th><th>5 %</th><th>95 %</th></tr>{rows}</table>")
    if "distributions" in files:
        p.append(f"<img src='{files['distributions']}' alt='distributions'>")
    p.append("<h2>Sensitivity</h2><p>Share of each metric's explained variance by part "
             "(standardised linear regression on the draws).</p>")
    for m, lst in s["sensitivity"].items():
        if lst:
            p.append(f"<p><b>{e(m)}</b>: " + ", ".join(
                f"{e(x['part'])} {100 * x['share']:.0f} %" for x in lst) + "</p>")
    p.append("<p>A simulation is not the hardware: measure the built circuit.</p>")
    return ("<!DOCTYPE html><html><head><meta charset='utf-8'><title>Monte Carlo</title>"
            "</head><body style='font-family:sans-serif'>" + "\n".join(p) + "</body></html>\n")
