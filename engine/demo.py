"""`solderless demo`: the flagship compressor and its variants, rendered and
measured, with a short HTML report.

What it does, in order:

1. renders the synthetic guitar phrase ``demo`` (engine.synth) at the jack;
2. runs it through the built-in flagship compressor and its two A/B variants
   (slower release; linear threshold taper), recording the OTA's control
   current, and reads the deepest gain reduction on each group of notes;
   writes the input and output WAVs (float, full scale stated);
3. measures each design's static curve (steady 220 Hz tones at stepped
   levels, output against input level, dB), its attack and release times
   around a tone burst (time for the gain reduction to cover 63 % = 1 - 1/e
   of its step; Giannoulis, Massberg & Reiss, JAES 2012; IEC
   60050-351-45-36), and its integrated loudness (ITU-R BS.1770-4,
   engine.live.loudness) against the bypassed input, from which the
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
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from engine.analysis import compression as cp
from engine.errors import SolderlessError
from engine.fileio import atomic_write

FLAGSHIP = "flagship"
VARIANTS = ("flagship-slow-release", "flagship-linear-threshold")
FS = 48000.0
#: WAV full scale: a sample of 1.0 is this many volts (engine/levels.py).
from engine.levels import FULL_SCALE_V as WAV_FULL_SCALE_V  # noqa: E402
#: Saturation and cut-off thresholds: the shared classifier's
#: (engine/analysis/regions.py, common practice for small-signal BJTs).
from engine.analysis.regions import IC_OFF, VCE_SAT  # noqa: E402
#: Part notes containing this phrase mark a device that is off at rest by design.
from engine.analysis.regions import OFF_BY_DESIGN  # noqa: E402

STATIC_LEVELS_DB = np.arange(-64.0, 0.0 + 0.1, 4.0)
STATIC_FREQ = 220.0


# ------------------------------------------------------------------ running

@dataclass
class Run:
    """One design's render: output volts, probe traces, solver statistics."""
    name: str
    title: str
    y: np.ndarray
    probes: dict[str, np.ndarray]
    stats: dict
    op: object
    latency: float
    extra: dict = field(default_factory=dict)


def simulate(design, x: np.ndarray, fs: float = FS, probes: tuple[str, ...] = (),
             oversample: int | None = None):
    """Run ``x`` (volts at the jack) through ``design``; return (output volts,
    {probe: trace}, simulator). The output is shifted by the oversampling
    latency so it lines up with the input."""
    from engine.solver import Simulator
    circ = design.flatten()
    flat = tuple(design.resolve_probe(p) for p in probes)
    sim = Simulator(circ, fs=fs, oversample=oversample or design.oversample, probes=flat)
    y, pdata = sim.run(np.ascontiguousarray(x, dtype=float))
    if flat and pdata.shape[1] < y.size:      # pad (no decimation is asked for)
        pdata = np.pad(pdata, ((0, 0), (0, y.size - pdata.shape[1])), mode="edge")
    lat = int(round(getattr(sim, "latency_samples", 0) or 0))
    if lat > 0:
        y = np.concatenate([y[lat:], np.full(lat, y[-1])])
    return y, {p: pdata[i] for i, p in enumerate(probes)}, sim


def _device_quantity(q: dict, *names: str) -> float | None:
    for nm in names:
        if nm in q and isinstance(q[nm], (int, float)):
            return float(q[nm])
    return None


#: Transistor part types the region check covers.
BJT_TYPES = ("npn", "pnp")
FET_TYPES = ("njfet", "pjfet", "nmos", "pmos")


def transistor_check(design, op) -> list[dict]:
    """Classify every transistor at the operating point; ``intended`` is
    True where the part's note says it is off at rest by design.

    BJTs: ``active``, ``near saturation``, ``saturated``, ``reverse`` or
    ``off``, by the one classifier op and the workbench use
    (engine/analysis/regions.py): saturated under Vce 0.3 V, near saturation
    within 0.5 V above that, off under |Ic| 1 uA (common practice thresholds
    for small-signal transistors). Keys ``ic``, ``vbe``, ``vce``.

    JFETs and MOSFETs: ``active`` in the FET's saturation (pinch-off)
    region, the one an amplifier or follower uses; ``triode`` in its
    linear (ohmic) region (Vds below Vgs - Vto: the FET acts as a
    resistor); ``off`` when cut off or |Id| < 1 uA (the square-law
    regions, docs/references.md; the engine's device ``region``). Keys
    ``id``, ``vgs``, ``vds``; ``edge`` is ``near cut-off`` / ``near
    linear`` when the shared classifier finds an active FET within 0.5 V of
    either edge (op reports that region and warns). ``ic``, ``vbe`` and
    ``vce`` carry the same
    figures so one table shows every kind.
    """
    rows = []
    for info in design.parts():
        if info.type not in BJT_TYPES + FET_TYPES:
            continue
        q = op.devices.get(info.qualname)
        if q is None:
            continue
        intended = OFF_BY_DESIGN in (info.note or "").lower()
        if info.type in BJT_TYPES:
            sign = 1.0 if info.type == "npn" else -1.0
            ic = _device_quantity(q, "ic")
            vbe = _device_quantity(q, "vbe")
            vce = _device_quantity(q, "vce")
            # the one classifier op and the workbench use; its cut-off is "off" here
            from engine.analysis.regions import bjt_region
            region = bjt_region(sign, ic or 0.0, vce if vce is not None else 10.0 * sign)
            region = "off" if region == "cut-off" else region
            rows.append({"part": info.qualname, "type": info.type, "ic": ic, "vbe": vbe,
                         "vce": vce, "region": region, "intended": intended})
            continue
        i_d = _device_quantity(q, "id")
        vgs = _device_quantity(q, "vgs")
        vds = _device_quantity(q, "vds")
        dev_region = q.get("region").split(" (")[0] if isinstance(q.get("region"), str) \
            else None
        if dev_region == "cut-off" or abs(i_d or 0.0) < IC_OFF:
            region = "off"
        elif dev_region == "linear":
            region = "triode"
        else:
            region = "active"
        rows.append({"part": info.qualname, "type": info.type, "id": i_d, "vgs": vgs,
                     "vds": vds, "ic": i_d, "vbe": vgs, "vce": vds, "region": region,
                     "intended": intended,
                     # within 0.5 V of an edge of the active region (op warns)
                     "edge": dev_region if dev_region in ("near cut-off", "near linear")
                     else None})
    return rows


def transistor_problems(design, op) -> list[str]:
    """Transistors saturated (BJT) or in the triode region (FET), or off
    without a note saying so, at rest."""
    out = []
    for r in transistor_check(design, op):
        if r["region"] in ("saturated", "near saturation", "reverse", "triode") or (
                r["region"] == "off" and not r["intended"]):
            if r["type"] in BJT_TYPES:
                out.append(f"{r['part']} is {r['region']} at rest "
                           f"(Ic {r['ic']:.3g} A, Vce {r['vce']:.3g} V)")
            else:
                out.append(f"{r['part']} is {r['region']} at rest "
                           f"(Id {r['id'] or 0.0:.3g} A, Vds {r['vds'] or 0.0:.3g} V)")
    return out


def rest_control(design, op) -> float | None:
    """The gain cell's control quantity (Iabc) at the operating point."""
    expr = design.control_probe() if hasattr(design, "control_probe") else None
    if not expr or not expr.startswith("iabc("):
        return None
    part = expr[5:-1].strip()
    q = op.devices.get(part)
    return _device_quantity(q, "iabc") if q else None


#: Peak volts of the tone burst for the release measurement: a hard-picked
#: note at the jack (tens of mV peak; docs/references.md, pickups, common practice).
RELEASE_BURST_V = 0.05


def burst_response(design, fs: float = FS, amplitude: float = RELEASE_BURST_V,
                   burst: float = 0.6, tail: float = 2.0, smooth: float = 0.02):
    """Gain reduction (dB, from the control current, smoothed over ``smooth``
    seconds) around a 220 Hz tone burst of ``amplitude`` volts peak. Returns
    (times, GR trace, burst start, burst end, solver statistics)."""
    x, t0, t1 = cp.tone_burst(fs, 220.0, amplitude, lead=0.2, burst=burst, tail=tail)
    expr = design.control_probe()
    _, pr, sim = simulate(design, x, fs, probes=(expr,))
    ctl = pr[expr]
    rest = float(np.median(ctl[: int(0.15 * fs)]))
    gr = cp.gain_reduction_from_control(ctl, rest, design.meters.get("control_law", "linear"))
    n = max(1, int(smooth * fs))
    grs = np.convolve(gr, np.ones(n) / n, mode="same")
    return np.arange(x.size) / fs, grs, t0, t1, sim.stats


def measure_release(design, fs: float = FS, amplitude: float = RELEASE_BURST_V,
                    burst: float = 0.6, tail: float = 2.0, smooth: float = 0.02):
    """Release time (s) after a tone burst (220 Hz, ``amplitude`` volts peak), from the control current:
    the time for the gain reduction to recover by 63 % (1 - 1/e) of its step
    (Giannoulis et al., JAES 2012). Returns (release time, times, GR trace in
    dB, burst end time, solver statistics)."""
    t, grs, _, t1, stats = burst_response(design, fs, amplitude, burst, tail, smooth)
    rt = cp.release_time(grs, fs, start=t1, final=0.0)
    return rt, t, grs, t1, stats


def measure_attack(design, fs: float = FS, amplitude: float = RELEASE_BURST_V,
                   burst: float = 0.6, smooth: float = 0.002):
    """Attack time (s) at the onset of the same tone burst: the time for the
    gain reduction to cover 63 % of its step towards its level at the end of
    the burst (time-constant convention, Giannoulis et al., JAES 2012). A
    shorter smoothing window than the release's keeps the fast attack
    visible. Returns (attack time, times, GR trace, burst start, statistics)."""
    t, grs, t0, _, stats = burst_response(design, fs, amplitude, burst, 0.2, smooth)
    at = cp.attack_time(grs, fs, start=t0, settle=burst)
    return at, t, grs, t0, stats


#: Onsets (s) of the note groups of the demo phrase (engine.synth._phrase_demo).
PHRASE_GROUPS = {"soft notes": (0.0, 0.45, 0.9), "hard notes": (1.5, 1.9, 2.3),
                 "strummed chord": (3.0,), "palm-muted chugs": (4.6, 4.8, 5.0, 5.2, 5.4, 5.6)}


def phrase_gain_reduction(gr: np.ndarray, fs: float = FS, window: float = 0.3) -> dict:
    """Deepest gain reduction (dB, positive) within ``window`` seconds of
    each onset of each group of the demo phrase: {group: [dB per onset]}
    (onsets beyond the trace are left out)."""
    out = {}
    for name, onsets in PHRASE_GROUPS.items():
        vals = [float(-gr[int(t * fs):int((t + window) * fs)].min())
                for t in onsets if int(t * fs) < gr.size]
        if vals:
            out[name] = vals
    return out


def measure_static(design, fs: float = FS, levels_db=STATIC_LEVELS_DB,
                   hold: float = 0.4, measure: float = 0.15) -> cp.StaticCurve:
    """Static curve of a design with steady tones (see compression.static_curve)."""
    def proc(x):
        return simulate(design, x, fs)[0]
    return cp.static_curve(proc, fs, np.asarray(levels_db, float), STATIC_FREQ, hold, measure)


def loudness(x: np.ndarray, fs: float) -> float:
    """Integrated loudness (LUFS, ITU-R BS.1770-4) of volts scaled to the WAV
    full scale."""
    from engine.live.loudness import integrated_loudness
    return float(integrated_loudness(np.asarray(x, float) / WAV_FULL_SCALE_V, fs))


# ----------------------------------------------------------------- plotting

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
    files["waveforms"] = "waveforms.png"
    atomic_write(out / files["waveforms"], lambda tmp: fig.savefig(tmp, dpi=90, format="png"),
                 suffix=".png")
    plt.close(fig)

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
    files["control"] = "control.png"
    atomic_write(out / files["control"], lambda tmp: fig.savefig(tmp, dpi=90, format="png"),
                 suffix=".png")
    plt.close(fig)

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
    files["static"] = "static_curve.png"
    atomic_write(out / files["static"], lambda tmp: fig.savefig(tmp, dpi=90, format="png"),
                 suffix=".png")
    plt.close(fig)

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
    files["release"] = "release.png"
    atomic_write(out / files["release"], lambda tmp: fig.savefig(tmp, dpi=90, format="png"),
                 suffix=".png")
    plt.close(fig)
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
    from engine.design import load_design
    from engine.synth import render_phrase, write_wav

    t_start = time.perf_counter()
    out = Path(out_dir)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise SolderlessError(f"cannot create the output folder: {e.strerror or e}",
                              file=str(out), hint="choose another --out folder") from None
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
