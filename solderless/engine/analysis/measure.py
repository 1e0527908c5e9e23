"""Measuring a design offline: render a signal through it, read its
transistors' operating regions, its attack and release around a tone burst,
its static curve and its loudness.  The demo report, the workbench's preview,
the benches and the tests all measure through these functions.

Attack and release: the time for the gain reduction to cover 63 % = 1 - 1/e
of its step (Giannoulis, Massberg & Reiss, JAES 2012; IEC 60050-351-45-36).
Loudness: ITU-R BS.1770-4 (solderless.engine.live.loudness).  Gain reduction
is read from the OTA's control current: gm = Iabc / 2VT, so
GR = 20 log10(Iabc / Iabc,rest).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from solderless.engine.analysis import compression as cp
#: WAV full scale: a sample of 1.0 is this many volts (solderless/engine/levels.py).
from solderless.engine.levels import FULL_SCALE_V as WAV_FULL_SCALE_V
#: Saturation and cut-off thresholds: the shared classifier's
#: (solderless/engine/analysis/regions.py, common practice for small-signal BJTs).
from solderless.engine.analysis.regions import IC_OFF, VCE_SAT  # noqa: F401
#: Part notes containing this phrase mark a device that is off at rest by design.
from solderless.engine.analysis.regions import OFF_BY_DESIGN
from solderless.engine.derived import LiveSet

FS = 48000.0
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
    from solderless.engine.solver import Simulator
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


def _transistor_types(family: str) -> tuple[str, ...]:
    from solderless.engine.devices.registry import transistor_part_types
    return transistor_part_types(family)


#: Transistor part types the region check covers: every device the registry
#: marks as a BJT or a FET (solderless.engine.devices.registry), read when used.
BJT_TYPES = LiveSet(lambda: _transistor_types("bjt"))
FET_TYPES = LiveSet(lambda: _transistor_types("fet"))


def _polarity(part_type: str) -> float:
    """+1 for an N-type part, -1 for a P-type (its model type's polarity)."""
    from solderless.engine.devices import registry
    kind = registry.PART_TYPES[part_type][0]
    return registry.DEVICES[kind].model_types[registry.PART_MODEL[part_type]]


def transistor_check(design, op) -> list[dict]:
    """Classify every transistor at the operating point; ``intended`` is
    True where the part's note says it is off at rest by design.

    BJTs: ``active``, ``near saturation``, ``saturated``, ``reverse`` or
    ``off``, by the one classifier op and the workbench use
    (solderless/engine/analysis/regions.py): saturated under Vce 0.3 V, near saturation
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
        if info.type not in BJT_TYPES and info.type not in FET_TYPES:
            continue
        q = op.devices.get(info.qualname)
        if q is None:
            continue
        intended = OFF_BY_DESIGN in (info.note or "").lower()
        if info.type in BJT_TYPES:
            sign = _polarity(info.type)
            ic = _device_quantity(q, "ic")
            vbe = _device_quantity(q, "vbe")
            vce = _device_quantity(q, "vce")
            # the one classifier op and the workbench use; its cut-off is "off" here
            from solderless.engine.analysis.regions import bjt_region
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


#: Onsets (s) of the note groups of the demo phrase (solderless.engine.synth._phrase_demo).
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
    from solderless.engine.live.loudness import integrated_loudness
    return float(integrated_loudness(np.asarray(x, float) / WAV_FULL_SCALE_V, fs))
