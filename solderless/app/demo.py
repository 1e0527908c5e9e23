"""`solderless demo`: the flagship compressor and its variants, rendered and
measured, with a short HTML report.

What it does, in order:

1. renders the synthetic guitar phrase ``demo`` (solderless.engine.synth) at the jack;
2. runs it through the built-in flagship compressor and its two A/B variants
   (slower release; linear threshold taper), recording the OTA's control
   current, and reads the deepest gain reduction on each group of notes;
   writes the input and output WAVs (float, full scale stated);
3. measures each design's static curve (steady 220 Hz tones at stepped
   levels, output against input level, dB), its attack and release times
   around a tone burst (time for the gain reduction to cover 63 % = 1 - 1/e
   of its step; Giannoulis, Massberg & Reiss, JAES 2012; IEC
   60050-351-45-36), and its integrated loudness (ITU-R BS.1770-4,
   solderless.engine.live.loudness) against the bypassed input, from which the
   loudness-matched level difference between variants follows;
4. writes ``report.html`` with PNG plots (matplotlib, Agg backend) and the
   operating point table, and prints where everything is.

Gain reduction is read from the control current: the OTA's gain is
proportional to Iabc (gm = Iabc / 2VT), so GR = 20 log10(Iabc / Iabc,rest).

Nothing here runs on the audio thread.
"""
from __future__ import annotations

import argparse
import html
import json
import math
import os
import time
from pathlib import Path

import numpy as np

from solderless.engine.analysis import compression as cp
from solderless.engine.errors import SolderlessError
from solderless.engine.fileio import atomic_write

FLAGSHIP = "flagship"
VARIANTS = ("flagship-slow-release", "flagship-linear-threshold")
FS = 48000.0
#: WAV full scale: a sample of 1.0 is this many volts (solderless/engine/levels.py).
from solderless.engine.levels import FULL_SCALE_V as WAV_FULL_SCALE_V  # noqa: E402
#: The measurements themselves are engine work (solderless/engine/analysis/measure.py).
from solderless.engine.analysis.measure import (  # noqa: E402,F401
    PHRASE_GROUPS, RELEASE_BURST_V, STATIC_FREQ, STATIC_LEVELS_DB, Run, loudness,
    measure_attack, measure_release, measure_static, phrase_gain_reduction, rest_control,
    simulate, transistor_check, transistor_problems)


def _save_png(fig, out: Path, files: dict, key: str, name: str) -> None:
    """Write one figure as ``out/name`` (atomically) and list it under ``key``."""
    import matplotlib.pyplot as plt
    files[key] = name
    atomic_write(out / name, lambda tmp: fig.savefig(tmp, dpi=90, format="png"),
                 suffix=".png")
    plt.close(fig)


def _plots(out: Path, fs: float, x: np.ndarray, runs: list[Run], curves, releases) -> dict:
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    files = {}
    t = np.arange(len(x)) / fs

    fig, axs = plt.subplots(len(runs) + 1, 1, figsize=(9, 2.0 * (len(runs) + 1)), sharex=True)
    axs[0].plot(t, x, lw=0.5, color="0.3")
    axs[0].set_ylabel("input (V)")
    axs[0].set_title("Input at the jack and outputs")
    for ax, r in zip(axs[1:], runs):
        ax.plot(t, r.y, lw=0.5)
        ax.set_ylabel("out (V)")
        ax.text(0.01, 0.85, r.title, transform=ax.transAxes, fontsize=8)
    axs[-1].set_xlabel("time (s)")
    fig.tight_layout()
    _save_png(fig, out, files, "waveforms", "waveforms.png")

    fig, (a1, a2) = plt.subplots(2, 1, figsize=(9, 5), sharex=True)
    for r in runs:
        ctl = r.extra.get("control")
        if ctl is None:
            continue
        a1.plot(t, ctl * 1e6, lw=0.7, label=r.title)
        a2.plot(t, r.extra["gr"], lw=0.7, label=r.title)
    a1.set_ylabel("Iabc (uA)")
    a1.set_title("OTA control current and gain reduction")
    a2.set_ylabel("gain reduction (dB)")
    a2.set_xlabel("time (s)")
    a1.legend(fontsize=7)
    fig.tight_layout()
    _save_png(fig, out, files, "control", "control.png")

    fig, ax = plt.subplots(figsize=(5.5, 5))
    for r, c in zip(runs, curves):
        ax.plot(c.input_db, c.output_db, "o-", ms=3, label=r.title)
    lo, hi = float(curves[0].input_db[0]), float(curves[0].input_db[-1])
    g0 = float(curves[0].gain_db[0])
    ax.plot([lo, hi], [lo + g0, hi + g0], ":", color="0.5",
            label="slope 1 through the first point (no compression)")
    ax.set_xlabel("input level (dBV RMS)")
    ax.set_ylabel("output level (dBV RMS)")
    ax.set_title(f"Static curve, steady {STATIC_FREQ:g} Hz tones")
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize=7)
    fig.tight_layout()
    _save_png(fig, out, files, "static", "static_curve.png")

    fig, ax = plt.subplots(figsize=(9, 3.5))
    for r, (rt, tt, gr, t1, _) in zip(runs, releases):
        ax.plot(tt - t1, gr, lw=0.8, label=f"{r.title}: release {rt * 1e3:.0f} ms")
        if math.isfinite(rt):
            ax.axvline(rt, ls=":", lw=0.7, color=ax.lines[-1].get_color())
    ax.set_xlim(-0.7, tt[-1] - t1)
    ax.set_xlabel("time after the burst ends (s)")
    ax.set_ylabel("gain reduction (dB)")
    ax.set_title(f"Release after a {RELEASE_BURST_V * 1e3:g} mV peak tone burst (dotted: 63 % recovered)")
    ax.legend(fontsize=7)
    ax.grid(True, alpha=0.3)
    fig.tight_layout()
    _save_png(fig, out, files, "release", "release.png")
    return files


# ------------------------------------------------------------------- report

def _op_table(design, op) -> str:
    rows = []
    checks = {r["part"]: r for r in transistor_check(design, op)}
    for name, q in op.devices.items():
        vals = []
        for k, v in q.items():
            if isinstance(v, (int, float)):
                vals.append(f"{k} = {v:.4g}")
            else:
                vals.append(f"{k} = {v}")
        c = checks.get(name)
        region = ""
        if c:
            region = c["region"] + (" (by design)" if c["region"] == "off" and c["intended"]
                                    else "")
        rows.append(f"<tr><td>{html.escape(name)}</td><td>{html.escape(region)}</td>"
                    f"<td>{html.escape(', '.join(vals))}</td></tr>")
    nets = "".join(f"<tr><td>{html.escape(n)}</td><td>{v:.4f} V</td></tr>"
                   for n, v in sorted(op.nets.items()))
    return (f"<table><tr><th>device</th><th>region</th><th>quantities (SI)</th></tr>"
            f"{''.join(rows)}</table><details><summary>net voltages</summary>"
            f"<table>{nets}</table></details>")


def _write_report(out: Path, fs: float, x, runs, curves, releases, louds, files,
                  wavs, elapsed, attacks=None, bypass_lufs=None) -> Path:
    base = runs[0]
    attacks = attacks or [(float("nan"),)] * len(runs)
    tr = []
    gtr = []
    for r, at in zip(runs, attacks):
        groups = phrase_gain_reduction(r.extra["gr"], fs) if "gr" in r.extra else {}
        cells = "".join(
            f"<td>{min(groups[g]):.1f} to {max(groups[g]):.1f}</td>" if g in groups
            else "<td>-</td>" for g in PHRASE_GROUPS)
        gtr.append(f"<tr><td>{html.escape(r.title)}</td>{cells}</tr>")
    for r, c, rel, lu, at in zip(runs, curves, releases, louds, attacks):
        try:
            slope = c.slope(c.threshold_db(1.0) + 6.0)
        except (ValueError, TypeError):
            slope = float("nan")
        diff = lu - louds[0]
        byp = lu - bypass_lufs if bypass_lufs is not None else float("nan")
        tr.append(f"<tr><td>{html.escape(r.title)}</td><td>{c.threshold_db(1.0):.1f}</td>"
                  f"<td>{slope:.2f}</td><td>{at[0] * 1e3:.1f}</td><td>{rel[0] * 1e3:.0f}</td>"
                  f"<td>{lu:.1f}</td><td>{byp:+.1f}</td>"
                  f"<td>{diff:+.1f}</td><td>{-diff:+.1f}</td></tr>")
    gheads = "".join(f"<th>{html.escape(g)} (dB)</th>" for g in PHRASE_GROUPS)
    wav_list = "".join(f"<li><a href='{html.escape(w)}'>{html.escape(w)}</a> "
                       f"{html.escape(d)}</li>" for w, d in wavs)
    imgs = {k: f"<img src='{v}' alt='{k}'>" for k, v in files.items()}
    doc = f"""<!doctype html><html><head><meta charset="utf-8">
<title>Solderless demo: {html.escape(base.title)}</title>
<style>body{{font-family:sans-serif;max-width:60em;margin:1em auto;}}
table{{border-collapse:collapse;font-size:90%}}td,th{{border:1px solid #ccc;padding:2px 6px}}
img{{max-width:100%}}</style></head><body>
<h1>Solderless demo: {html.escape(base.title)} and its variants</h1>
<p>A synthetic guitar phrase ({len(x) / fs:.1f} s, single-coil pickup, at the jack)
rendered through the built-in feedback OTA compressor with a parallel blend, and two variants
for A/B.
Rendered in {elapsed:.1f} s. WAV files are 32-bit float at {fs:g} Hz; full scale
(1.0) is {WAV_FULL_SCALE_V:g} V.</p>
<ul>{wav_list}</ul>
<h2>Summary</h2>
<table><tr><th>design</th><th>threshold (dBV, 1 dB GR)</th><th>slope above threshold + 6 dB</th>
<th>attack time (ms, 63 %)</th><th>release time (ms, 63 %)</th><th>integrated loudness (LUFS)</th>
<th>level vs bypass (LU)</th><th>level vs baseline (LU)</th><th>gain to loudness-match (dB)</th></tr>{''.join(tr)}</table>
<p>Deepest gain reduction on the phrase's notes (within 0.3 s of each onset, from the control
current):</p>
<table><tr><th>design</th>{gheads}</tr>{''.join(gtr)}</table>
<p>Threshold: input level where the gain has dropped by 1 dB. Slope: output dB per input dB
(1 = no compression; 1/ratio above threshold; Giannoulis, Massberg &amp; Reiss, JAES 2012).
Attack time: time for the gain reduction to cover 63 % of its step after a
{RELEASE_BURST_V * 1e3:g} mV peak 220 Hz burst starts; release time: time for it to recover by 63 % (1 &minus; 1/e)
of its step after the burst ends (time-constant convention; IEC 60050-351-45-36). Loudness: ITU-R BS.1770-4
integrated loudness of the output WAV; "level vs bypass" compares it with the input played straight
through ({bypass_lufs if bypass_lufs is not None else float("nan"):.1f} LUFS); the last column is the gain
that would play the variant at the baseline's loudness.</p>
<h2>Input and output waveforms</h2>{imgs['waveforms']}
<h2>Control current and gain reduction</h2>
<p>Gain reduction from the control current: the OTA's gain is proportional to Iabc, so
GR = 20&nbsp;log10(Iabc / Iabc at rest).</p>{imgs['control']}
<h2>Static compression curve</h2>{imgs['static']}
<h2>Release</h2>{imgs['release']}
<h2>Operating point of {html.escape(base.title)}</h2>{_op_table(base.extra['design'], base.op)}
<h2>Design notes</h2><pre>{html.escape(base.extra['design'].notes)}</pre>
<h2>Listen live</h2><p><code>solderless play flagship</code> plays an audio interface's input
(or the synthetic guitar) through the design; <code>solderless gui flagship</code> opens the
workbench. Mind the listening level: start low.</p>
</body></html>
"""
    path = out / "report.html"
    atomic_write(path, doc)
    return path


def run_demo(out_dir: str | os.PathLike = "demo-out", seconds: float | None = None,
             designs: tuple[str, ...] = (FLAGSHIP, *VARIANTS), fs: float = FS,
             verbose: bool = True) -> Path:
    """Render the demo phrase through the flagship and its variants, measure,
    and write WAVs, PNG plots, ``summary.json`` and ``report.html`` into
    ``out_dir``. ``seconds`` shortens the phrase (and the measurements) for a
    quick run. Returns the report's path."""
    from solderless.engine.design import load_design
    from solderless.engine.fileio import output_folder
    from solderless.engine.synth import render_phrase, write_wav

    t_start = time.perf_counter()
    out = output_folder(out_dir)
    x = render_phrase("demo", fs=fs)
    if seconds is not None:
        if not seconds > 0:
            raise SolderlessError(f"--seconds must be positive, not {seconds!r}",
                                  part="demo", hint="e.g. --seconds 5")
        x = x[: int(round(seconds * fs))]
    quick = seconds is not None and seconds < 4.0

    wavs = []
    write_wav(out / "input.wav", x, fs, WAV_FULL_SCALE_V)
    wavs.append(("input.wav", "the synthetic guitar at the jack"))
    runs: list[Run] = []
    for name in designs:
        d = load_design(name)
        ctl = d.control_probe()
        probes = (ctl,) if ctl else ()
        y, pr, sim = simulate(d, x, fs, probes=probes)
        op = sim.operating_point()
        r = Run(name, d.name, y, pr, dict(sim.stats), op, float(sim.latency_samples))
        r.extra["design"] = d
        if ctl:
            c = pr[ctl]
            rest = rest_control(d, op) or float(c[0])
            r.extra["control"] = c
            r.extra["gr"] = cp.gain_reduction_from_control(c, rest,
                                                           d.meters.get("control_law", "linear"))
        write_wav(out / f"{name}.wav", y, fs, WAV_FULL_SCALE_V)
        wavs.append((f"{name}.wav", f"output of {d.name}"))
        runs.append(r)

    levels = STATIC_LEVELS_DB[::2] if quick else STATIC_LEVELS_DB
    hold = 0.25 if quick else 0.4
    curves = [measure_static(r.extra["design"], fs, levels, hold=hold, measure=0.1)
              for r in runs]
    releases = [measure_release(r.extra["design"], fs, tail=1.0 if quick else 2.0)
                for r in runs]
    attacks = [measure_attack(r.extra["design"], fs) for r in runs]
    louds = [loudness(r.y, fs) for r in runs]
    bypass_lufs = loudness(x, fs)
    files = _plots(out, fs, x, runs, curves, releases)
    elapsed = time.perf_counter() - t_start
    path = _write_report(out, fs, x, runs, curves, releases, louds, files, wavs, elapsed,
                         attacks, bypass_lufs)
    summary = {
        "fs": fs, "seconds": len(x) / fs, "wav_full_scale_volts": WAV_FULL_SCALE_V,
        "bypass_loudness_lufs": bypass_lufs,
        "designs": [{
            "name": r.name, "title": r.title,
            "threshold_dbv": c.threshold_db(1.0),
            "static_input_dbv": c.input_db.tolist(), "static_output_dbv": c.output_db.tolist(),
            "attack_time_s": at[0], "release_time_s": rel[0], "integrated_loudness_lufs": lu,
            "level_vs_baseline_lu": lu - louds[0], "level_vs_bypass_lu": lu - bypass_lufs,
            "phrase_gain_reduction_db": (phrase_gain_reduction(r.extra["gr"], fs)
                                         if "gr" in r.extra else {}),
            "nonconverged": int(r.stats.get("nonconverged", 0)),
        } for r, c, rel, lu, at in zip(runs, curves, releases, louds, attacks)],
    }
    atomic_write(out / "summary.json", json.dumps(summary, indent=2, default=float))
    if verbose:
        print(f"Solderless demo ({elapsed:.1f} s): {len(x) / fs:.1f} s of synthetic guitar "
              f"through {len(runs)} designs")
        for w, desc in wavs:
            print(f"  {out / w}  ({desc}; full scale = {WAV_FULL_SCALE_V:g} V)")
        for k in files.values():
            print(f"  {out / k}")
        print(f"  {out / 'summary.json'}")
        print(f"report: {path}")
        for r, rel, at, lu in zip(runs, releases, attacks, louds):
            print(f"  {r.title:<36} attack {at[0] * 1e3:5.1f} ms  release {rel[0] * 1e3:6.0f} ms  "
                  f"loudness {lu:6.1f} LUFS ({lu - bypass_lufs:+.1f} LU vs bypass, "
                  f"{lu - louds[0]:+.1f} vs baseline)")
        print("Listen live: `solderless play flagship` (audio interface or synthetic guitar), "
              "or `solderless gui flagship` for the workbench. Start with the volume low.")
    return path


def add_demo_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the `solderless demo` options to ``parser``."""
    parser.add_argument("--out", default="demo-out", metavar="DIR",
                        help="folder for the WAVs, plots and report.html (default demo-out)")
    parser.add_argument("--seconds", type=float, default=None, metavar="S",
                        help="render only the first S seconds of the phrase (quick look)")


def cli_demo(args) -> int:
    """Run `solderless demo` from parsed arguments; returns the exit status."""
    run_demo(args.out, args.seconds)
    return 0
