"""Offline previews and analyses of a design for a front end: the live
host run without a sound card (:func:`run_preview`, :func:`run_ab_offline`),
the operating point as table rows, the small-signal response, attack and
release, and the A/B overlay curves. Plain functions on a design; the
workbench runs them on a worker thread.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np

PREVIEW_SECONDS = 3.0
SCOPE_SECONDS = 0.1
FS = 48000.0
BLOCK = 128
SOURCES = {
    "synth:notes": "synthetic instrument: single notes",
    "synth:chords": "synthetic instrument: strummed chords",
    "synth:mutes": "synthetic instrument: palm-muted chugs",
    "synth:demo": "synthetic instrument: demo phrase",
    "tone:1000:0.1": "test tone 1 kHz, 100 mV peak",
    "input": "live input",
}


def make_source(spec: str):
    """An :mod:`solderless.engine.live.source` source for a source text (see
    :func:`solderless.engine.live.source.parse_source`); ``input`` offline becomes silence."""
    from solderless.engine.live.source import parse_source, Source
    if spec == "input":
        return Source()
    return parse_source(spec)


@dataclass
class PreviewResult:
    """What one offline preview produced, per meter block."""
    fs: float
    block: int
    t: np.ndarray                                # block times, s
    series: dict[str, np.ndarray]                # name -> per-block values
    units: dict[str, str]
    scope_in: np.ndarray                         # volts at the input jack (last part)
    scope_out: np.ndarray                        # volts at the output jack
    meters: dict                                 # live host's last meter snapshot
    messages: list[str] = field(default_factory=list)


@dataclass
class OpReport:
    """Operating point rows for a table: (group, name, quantity, value, unit)."""
    rows: list[tuple[str, str, str, Any, str]]
    warnings: list[str]
    raw: Any = None


@dataclass
class ACResult:
    f: np.ndarray
    H: np.ndarray
    zin: np.ndarray


def _factory(factory):
    if factory is not None:
        return factory
    from solderless.engine.live.host import default_simulator_factory
    return default_simulator_factory


def run_preview(design, source: str = "synth:notes", seconds: float = PREVIEW_SECONDS,
                fs: float = FS, block: int = BLOCK, factory: Callable | None = None,
                level_db: float = 0.0) -> PreviewResult:
    """Play ``seconds`` of ``source`` through a copy of ``design`` with the
    live host's offline path (:meth:`solderless.engine.live.host.LiveHost.run_offline`)
    and collect its meter readings block by block."""
    from solderless.engine.live.host import LiveHost
    d = design.copy()
    host = LiveHost(d, fs=fs, block=block, source=make_source(source), autosave=False,
                    simulator_factory=factory, level_db=level_db)
    try:
        host.prepare()
        nb = max(1, int(round(seconds * fs / block)))
        keys = ["input level", "output level", "control current", "gain reduction"]
        units = {"input level": "dBFS", "output level": "dBFS", "control current": "µA",
                 "gain reduction": "dB"}
        probe_names = list(host.voices[0].probes)
        pu = dict(zip(probe_names, host.voices[0].probe_units or ("",) * len(probe_names)))
        for p in probe_names:
            units[p] = pu.get(p, "")
        series = {k: np.full(nb, np.nan) for k in keys + probe_names}
        t = np.arange(nb) * block / fs
        ns = int(SCOPE_SECONDS * fs) // block * block
        sc_in = np.zeros(max(ns, block))
        sc_out = np.zeros(max(ns, block))
        snap = {}
        for b in range(nb):
            host.run_offline(1)
            snap = host.meters()
            series["input level"][b] = snap["input"]["rms_dbfs"]
            series["output level"][b] = snap["output"]["rms_dbfs"]
            va = snap["voices"].get("A", {})
            if va.get("control_ua") is not None:
                series["control current"][b] = va["control_ua"]
            if va.get("gr_control_db") is not None:
                series["gain reduction"][b] = va["gr_control_db"]
            elif va.get("gr_measured_db") is not None:
                series["gain reduction"][b] = va["gr_measured_db"]
            for p, v in va.get("probes", {}).items():
                series[p][b] = v
            if b * block >= nb * block - len(sc_in):
                k = b * block - (nb * block - len(sc_in))
                sc_in[k:k + block] = host.x[:block]
                sc_out[k:k + block] = host.voices[0].y[:block]
        msgs = []
        while not host.messages.empty():
            msgs.append(host.messages.get())
        return PreviewResult(fs, block, t, series, units, sc_in, sc_out, snap, msgs)
    finally:
        host.close()


def _unit_of(q: str) -> str:
    """Unit of a device quantity, as its device declares it (the registry)."""
    from solderless.engine.devices.registry import QUANTITY_UNITS
    return QUANTITY_UNITS.get(q, "")


def operating_point(design, factory: Callable | None = None) -> OpReport:
    """The DC operating point of ``design`` as table rows and warnings
    (from the solver's ``operating_point()``)."""
    circuit = design.flatten()
    sim = _factory(factory)(circuit, FS, 1, [])
    op = sim.operating_point()
    if op is None:
        return OpReport([], ["this simulator reports no operating point"])
    rows: list[tuple[str, str, str, Any, str]] = []
    nets = getattr(op, "nets", {}) or {}
    for n, v in (nets.items() if isinstance(nets, dict) else nets):
        rows.append(("net", str(n), "V", float(v), "V"))
    for n, v in (getattr(op, "currents", {}) or {}).items():
        rows.append(("current", str(n), "I", float(v), "A"))
    devs = getattr(op, "devices", {}) or {}
    for name, info in (devs.items() if isinstance(devs, dict) else enumerate(devs)):
        if isinstance(info, dict):
            for q, v in info.items():
                if isinstance(v, (int, float, np.floating)):
                    rows.append(("device", str(name), str(q), float(v), _unit_of(str(q))))
                else:
                    rows.append(("device", str(name), str(q), str(v), ""))
        else:
            rows.append(("device", str(name), "", str(info), ""))
    warnings = [str(w) for w in (getattr(op, "warnings", []) or [])]
    return OpReport(rows, warnings, op)


def frequency_response(design, freqs: np.ndarray | None = None) -> ACResult:
    """Small-signal response from the input jack to the output and the input
    impedance, from the engine's AC analysis."""
    if freqs is None:
        from solderless.engine.solver.ac import default_frequencies   # the CLI's range too
        freqs = default_frequencies()
    from solderless.engine.solver.ac import ac_response
    f, H, zin = ac_response(design.flatten(), freqs)
    return ACResult(np.asarray(f), np.asarray(H), np.asarray(zin))


@dataclass
class Dynamics:
    """Attack and release times of a design with a gain-cell control, by the
    demo's 63 % convention (a 220 Hz tone burst; the time for the gain
    reduction to cover 63 % of its step), from
    :func:`solderless.engine.analysis.timing.attack_release`."""
    attack_s: float | None
    release_s: float | None


def dynamics(design, fs: float = FS) -> Dynamics | None:
    """Attack and release of ``design`` (None without a control)."""
    if not (getattr(design, "meters", None) or {}).get("control"):
        return None

    def ok(v):
        return None if v is None or not math.isfinite(v) else float(v)
    from solderless.engine.analysis.timing import attack_release
    r = attack_release(design, fs)
    return Dynamics(ok(r.get("attack_s")), ok(r.get("release_s")))


@dataclass
class Traces:
    """One design's curves for an A/B overlay: frequency response and input
    impedance (AC analysis), and gain reduction and control against time
    through a tone burst (None without a control)."""
    name: str
    ac: "ACResult | None"
    t: np.ndarray | None = None
    gr_db: np.ndarray | None = None
    control: np.ndarray | None = None
    control_unit: str = ""
    burst: tuple[float, float] = (0.0, 0.0)


def overlay_traces(design, name: str, fs: float = FS) -> Traces:
    """Curves of ``design`` for an overlay (see :class:`Traces`); the burst
    is the demo's release burst (``solderless.engine.analysis.measure.RELEASE_BURST_V`` at 220 Hz)."""
    from solderless.engine.analysis import measure
    from solderless.engine.analysis import compression as cp
    tr = Traces(name, frequency_response(design))
    expr = (getattr(design, "meters", None) or {}).get("control")
    if expr:
        x, t0, t1 = cp.tone_burst(fs, 220.0, measure.RELEASE_BURST_V, lead=0.2, burst=0.6,
                                  tail=1.5)
        _, pr, _ = measure.simulate(design, x, fs, probes=(expr,))
        ctl = np.asarray(pr[expr], dtype=float)
        rest = float(np.median(ctl[: int(0.15 * fs)]))
        gr = cp.gain_reduction_from_control(ctl, rest,
                                            design.meters.get("control_law", "linear"))
        step = max(1, int(fs / 2000))              # 0.5 ms points are plenty to draw
        tr.t = np.arange(x.size)[::step] / fs
        tr.gr_db = np.asarray(gr)[::step]
        unit = "A" if expr.lower().startswith("i") else "V"
        tr.control, tr.control_unit = (ctl[::step] * 1e6, "µA") if unit == "A" \
            else (ctl[::step], "V")
        tr.burst = (t0, t1)
    return tr


@dataclass
class ABResult:
    """An offline A/B run: the live host's loudness offset (A minus B, LU)
    and each voice's loudness and output level at the end."""
    offset_db: float
    meters: dict


def run_ab_offline(a, b, source: str = "synth:notes", seconds: float = PREVIEW_SECONDS,
                   fs: float = FS, block: int = BLOCK,
                   factory: Callable | None = None) -> ABResult:
    """Play A and B together through the live host without a sound card and
    report its BS.1770 loudness match (:class:`solderless.engine.live.host.LiveHost`)."""
    from solderless.engine.live.host import LiveHost
    host = LiveHost(a.copy(), variant=b.copy(), fs=fs, block=block,
                    source=make_source(source), autosave=False, simulator_factory=factory)
    try:
        host.run_offline(max(1, int(round(seconds * fs / block))))
        return ABResult(float(host.loudness_offset_db), host.meters())
    finally:
        host.close()
