"""Bipolar operational transconductance amplifier (OTA) macromodel.

Nodes (inp, inn, out, abc, vee).  Ports: 0 = (inp, inn) differential sense
(no current); 1 = (abc, vee) the bias-current input through JUNCTIONS
junction drops of its current mirror (diode law, IS, N); 2 = (out, vee) the
output.  Output current into ``out``:
    Iout = Iabc * tanh(Vd / (2*VT)) * s(Vo)
(emitter-coupled pair: Gray, Hurst, Lewis & Meyer, Analysis and Design of
Analog Integrated Circuits, 5th ed.), where s(Vo) is a soft output compliance
that fades the current out as Vo = v(out)-v(vee) leaves [VLO, VHI] (width
VSOFT), and ROUT is the output resistance from out to vee.  The device has no
positive-supply pin, so the upper limit is off by default (VHI = 1e6 V); set
VHI to about (V+ - V-) - 1 V to model it.
Small-signal transconductance gm = Iabc/(2*VT).
"""
from __future__ import annotations

import math

import numpy as np
from solderless.engine.lazyjit import njit  # numba on first need (lazyjit)

from solderless.engine.devices._common import (GMIN, VT, DeviceLayout, junction, pnjlim,
                                    read_params, vcrit)
from solderless.engine.analysis import regions
from solderless.engine.devices.registry import DeviceKind

KIND = "OTA"
CODE = 4
NPORTS = 3
DEFAULTS = {"IS": 1e-15, "N": 1.0, "JUNCTIONS": 1.0, "VLO": 1.0, "VHI": 1e6,
            "VSOFT": 0.1, "ROUT": 1e8, "RIN": math.inf}
# par: 0 IS, 1 vte (all junctions), 2 vcrit, 3 1/(2VT), 4 VLO, 5 VHI, 6 VSOFT


def layout(el) -> DeviceLayout:
    """Validate the model and describe ports and stamps."""
    p = read_params(el, DEFAULTS, positive=("IS", "N", "VSOFT", "ROUT", "RIN"))
    nj = p["JUNCTIONS"]
    if nj not in (1.0, 2.0):
        from solderless.engine.errors import DesignError
        w = el.where
        raise DesignError(f"JUNCTIONS must be 1 or 2, got {nj:g}", part=el.name,
                          file=getattr(w, "file", None), line=getattr(w, "line", None))
    inp, inn, out, abc, vee = el.nodes
    vte = nj * p["N"] * VT
    stamps = []
    if math.isfinite(p["ROUT"]):
        stamps.append(("R", out, vee, p["ROUT"]))
    if math.isfinite(p["RIN"]):
        stamps.append(("R", inp, inn, p["RIN"]))
    par = np.array([p["IS"], vte, vcrit(vte, p["IS"]), 1.0 / (2.0 * VT),
                    p["VLO"], p["VHI"], p["VSOFT"], 1.0 / vte, 1.0 / p["VSOFT"]])
    return DeviceLayout(CODE, [(inp, inn), (abc, vee), (out, vee)], par, [], stamps,
                        probes={"iabc": ({1: 1.0}, {}), "gm": ({1: 1.0 / (2.0 * VT)}, {}),
                                "iout": ({2: -1.0}, {}), "vd": ({}, {0: 1.0}),
                                "vabc": ({}, {1: 1.0})},
                        quiet_step=2.0 * vte)


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def evaluate(par, pa, v, po, i, G):
    """Port currents (0, Iabc, -Iout) and their 3x3 Jacobian."""
    va = v[po + 1]
    c, g = junction(va, par[pa + 0], par[pa + 1], par[pa + 7])
    i[po] = 0.0
    i[po + 1] = c + GMIN * va
    G[po + 1, po + 1] = g + GMIN
    ia = c
    dia = g
    if ia < 0.0:
        ia = 0.0
        dia = 0.0
    t = math.tanh(v[po] * par[pa + 3])
    dt = (1.0 - t * t) * par[pa + 3]
    vo = v[po + 2]
    if t >= 0.0:
        h = math.tanh((par[pa + 5] - vo) * par[pa + 8])
        s = 0.5 * (1.0 + h)
        ds = -0.5 * (1.0 - h * h) * par[pa + 8]
    else:
        h = math.tanh((vo - par[pa + 4]) * par[pa + 8])
        s = 0.5 * (1.0 + h)
        ds = 0.5 * (1.0 - h * h) * par[pa + 8]
    i[po + 2] = -ia * t * s
    G[po + 2, po] = -ia * dt * s
    G[po + 2, po + 1] = -dia * t * s
    G[po + 2, po + 2] = -ia * t * ds
    G[po, po] = 0.0
    G[po, po + 1] = 0.0
    G[po, po + 2] = 0.0
    G[po + 1, po] = 0.0
    G[po + 1, po + 2] = 0.0


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def limit(par, pa, vn, vo, po):
    """pnjlim on the bias junction(s); the tanh input needs none."""
    vn[po + 1] = pnjlim(vn[po + 1], vo[po + 1], par[pa + 1], par[pa + 2])


def region(par, v, i) -> str:
    """on / off (bias current below 1 nA) / compliance (output out of range)."""
    if i[1] < 1e-9:
        return "off"
    if not (par[4] < v[2] < par[5]):
        return "compliance"
    return "on"


# --------------------------------------------------------------------------
# The device's description (solderless.engine.devices.registry)

def report(q, el, par, v, i, G, region):
    """The module's own answer: on, off or compliance."""
    return region


DEVICE = DeviceKind(
    kind=KIND, terminals=("inp", "inn", "out", "abc", "vee"), title="OTA",
    model_types={"OTA": 1.0}, part_types={"ota": "OTA"},
    part_nodes=("in+", "in-", "out", "control", "v-"),
    params=DEFAULTS, units={"IS": "A", "VLO": "V", "VHI": "V", "VSOFT": "V", "ROUT": "Ω",
                            "RIN": "Ω"},
    probes={"iabc": "A", "gm": "S", "iout": "A", "vd": "V", "vabc": "V"},
    report=report, health=regions.ota_health, ratings=("IABC_MAX",), output=2,
    steady_region=True,
    library=frozenset({"IS", "N", "JUNCTIONS", "IABC_MAX", "VHEAD", "RIN"}),
    library_required=("IS", "N", "JUNCTIONS", "IABC_MAX", "VHEAD"))
