"""Op-amp macromodel: single-pole voltage amplifier with soft output swing.

Nodes (inp, inn, out, vcc, vee).  An internal node ``<name>#p`` carries the
open-loop voltage: a transconductance A0/RP from (inp, inn) into RP || CP to
ground sets DC gain A0 and the dominant pole GBW/A0; the output is that
voltage behind ROUT.  Two exponential clamps (ports 0 = (p, vcc) and
1 = (vee, p)) hold the internal voltage within VHR of the rails with a knee of
width VSOFT, so the output swing is limited softly to [vee+VHR, vcc-VHR] and
the integrator does not wind up.  RIN is the differential input resistance.
The dominant-pole capacitor is integrated with backward Euler (L-stable), so
the fast closed-loop pole does not ring at the Nyquist frequency as it would
with the trapezoidal rule.
"""
from __future__ import annotations

import math

import numpy as np
from solderless.engine.lazyjit import njit  # numba on first need (lazyjit)

from solderless.engine.devices._common import DeviceLayout, lexp, pnjlim, read_params, vcrit
from solderless.engine.analysis import regions
from solderless.engine.devices.registry import DeviceKind

KIND = "OPAMP"
CODE = 5
NPORTS = 2
DEFAULTS = {"A0": 2e5, "GBW": 1e6, "ROUT": 50.0, "RIN": 1e12, "VHR": 1.5,
            "VSOFT": 0.05, "RP": 1e9}
# par: 0 I0, 1 VHR, 2 VSOFT, 3 vcrit (shifted variable), 4 1/VSOFT


def layout(el) -> DeviceLayout:
    """Validate the model and describe internal node, stamps and clamp ports."""
    p = read_params(el, DEFAULTS, positive=("A0", "GBW", "ROUT", "RIN", "VSOFT", "RP"),
                    nonneg=("VHR",))
    inp, inn, out, vcc, vee = el.nodes
    node = f"{el.name}#p"
    gm1 = p["A0"] / p["RP"]
    cp = p["A0"] / (2.0 * math.pi * p["GBW"] * p["RP"])
    stamps = [("G", "0", node, inp, inn, gm1), ("R", node, "0", p["RP"]),
              ("C", node, "0", cp, "be"), ("G", "0", out, node, "0", 1.0 / p["ROUT"]),
              ("R", out, "0", p["ROUT"])]
    if math.isfinite(p["RIN"]):
        stamps.append(("R", inp, inn, p["RIN"]))
    i0 = gm1 * 1e-4
    par = np.array([i0, p["VHR"], p["VSOFT"], vcrit(p["VSOFT"], i0), 1.0 / p["VSOFT"]])
    return DeviceLayout(CODE, [(node, vcc), (vee, node)], par, [node], stamps,
                        probes={"iclip": ({0: 1.0, 1: -1.0}, {})},
                        quiet_step=2.0 * p["VSOFT"])


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def evaluate(par, pa, v, po, i, G):
    """Clamp currents I0*exp((v + VHR)/VSOFT) and conductances."""
    for k in range(2):
        e, de = lexp((v[po + k] + par[pa + 1]) * par[pa + 4])
        i[po + k] = par[pa + 0] * e
        G[po + k, po + k] = par[pa + 0] * de * par[pa + 4]
    G[po, po + 1] = 0.0
    G[po + 1, po] = 0.0


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def limit(par, pa, vn, vo, po):
    """pnjlim on the shifted clamp voltages."""
    for k in range(2):
        vn[po + k] = pnjlim(vn[po + k] + par[pa + 1], vo[po + k] + par[pa + 1], par[pa + 2], par[pa + 3]) - par[pa + 1]


def region(par, v, i) -> str:
    """linear / clipping high / clipping low from the clamp currents."""
    lim = 10.0 * par[0]
    if i[0] > lim:
        return "clipping high"
    if i[1] > lim:
        return "clipping low"
    return "linear"


# --------------------------------------------------------------------------
# The device's description (solderless.engine.devices.registry)

def report(q, el, par, v, i, G, region):
    """The clamp's own answer: linear or clipping."""
    return region


DEVICE = DeviceKind(
    kind=KIND, terminals=("inp", "inn", "out", "vcc", "vee"), title="op-amp",
    model_types={"OPAMP": 1.0}, part_types={"opamp": "OPAMP"},
    part_nodes=("in+", "in-", "out", "v+", "v-"),
    params=DEFAULTS, units={"GBW": "Hz", "ROUT": "Ω", "RIN": "Ω", "VHR": "V",
                            "VSOFT": "V", "RP": "Ω"},
    probes={"iclip": "A"}, report=report, health=regions.opamp_health, output=2,
    steady_region=True,
    library=frozenset({"A0", "GBW", "ROUT", "VHEAD", "IQ", "RIN"}),
    library_required=("A0", "GBW", "ROUT", "VHEAD"), library_aliases={"VHEAD": "VHR"})
