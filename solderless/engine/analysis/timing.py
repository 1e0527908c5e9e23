"""Attack and release times of a design with a control (a compressor), by
the 63 % convention the demo report uses: a 220 Hz tone burst, the gain
reduction from the control (``solderless.engine.analysis.compression``), attack from
the burst's onset until 63 % (1 - 1/e) of the step is covered, release
from its end until 63 % of the way back to rest (Giannoulis et al., JAES
2012; IEC 60050-351-45-36).

Runs a simulator of its own for about 2.5 s of audio; call it off the
audio thread (the console runs it on a helper thread after edits).
"""
from __future__ import annotations

import numpy as np

from solderless.engine.analysis import compression as cp

#: Peak volts of the burst: a hard-picked note at the jack (as the demo).
BURST_V = 0.05
LEAD_S, BURST_S, TAIL_S = 0.2, 0.6, 1.8
SMOOTH_S = 0.02


def attack_release(design, fs: float = 48000.0, amplitude: float = BURST_V) -> dict:
    """``{"attack_s", "release_s", "depth_db"}`` of ``design`` (NaN where a
    time is not reached; None for a design without a control)."""
    expr = design.control_probe() if hasattr(design, "control_probe") else None
    if not expr:
        return {"attack_s": None, "release_s": None, "depth_db": None}
    from solderless.engine.solver import Simulator
    x, t0, t1 = cp.tone_burst(fs, 220.0, amplitude, lead=LEAD_S, burst=BURST_S, tail=TAIL_S)
    sim = Simulator(design.flatten(), fs=fs, oversample=design.oversample,
                    probes=(design.resolve_probe(expr),))
    _, pr = sim.run(x)
    ctl = pr[0]
    if ctl.size < x.size:
        ctl = np.pad(ctl, (0, x.size - ctl.size), mode="edge")
    rest = float(np.median(ctl[: int(0.15 * fs)]))
    law = str(design.meters.get("control_law", "linear"))
    if law == "linear" and not rest > 0:
        return {"attack_s": None, "release_s": None, "depth_db": None}
    gr = cp.gain_reduction_from_control(ctl, rest, law)
    n = max(1, int(SMOOTH_S * fs))
    grs = np.convolve(gr, np.ones(n) / n, mode="same")
    i1 = int(t1 * fs)
    depth = float(np.mean(grs[i1 - int(0.1 * fs):i1]))
    att = cp.attack_time(grs, fs, start=t0, final=depth)
    rel = cp.release_time(grs, fs, start=t1, final=0.0)
    return {"attack_s": float(att), "release_s": float(rel), "depth_db": depth}


def describe(r: dict) -> str:
    """One line for the console."""
    if r.get("attack_s") is None:
        return "attack/release: this design declares no control"

    def ms(x):
        return "not reached" if x != x else f"{1e3 * x:.0f} ms"
    return (f"attack {ms(r['attack_s'])}, release {ms(r['release_s'])} (63 % of the "
            f"gain-reduction step, {1e3 * BURST_V:.0f} mV burst at 220 Hz, "
            f"{r['depth_db']:.1f} dB deep)")
