"""Op-amp macromodel: single-pole voltage amplifier with soft output swing.

Nodes (inp, inn, out, vcc, vee).  An internal node ``<name>#p`` carries the
open-loop voltage: a transconductance A0/RP from (inp, inn) into RP || CP to
ground sets DC gain A0 and the dominant pole GBW/A0; the output is that
voltage behind ROUT.  Two exponential clamps hold the internal voltage within
VHR of the rails with a knee of width VSOFT, so the output swing is limited
softly to [vee+VHR, vcc-VHR] and the integrator does not wind up.  RIN is the
differential input resistance.

The clamps take one port or two.  When both rails sit at fixed potentials
(ground, or a DC supply to ground: mna.fixed_potentials), as in every
battery-powered design, one port (p, ground) carries both: its current is
I0*exp((v - Vcc + VHR)/VSOFT) - I0*exp((Vee - v + VHR)/VSOFT) with the rail
potentials held in the parameters (a supply edit re-lays the device).  The
node voltages are those of the two-port form exactly; only the clamp
current returns through ground instead of the rail's source.  Otherwise
(a rail behind a resistor, a rail with ripple) ports 0 = (p, vcc) and
1 = (vee, p) carry one clamp each.  Port count sets the size of every matrix
in the per-sample solve, so the one-port form makes an op-amp design's
samples cheaper (bench/bench_designs.py).

A clamp more than CLAMP_OFF (20) knee widths from its threshold reads
exactly zero current and conductance without an exponential.  The current
cut off there is I0*exp(-20) = 2e-13*A0/RP: into the internal node, whose
own leak is 1/RP, that is worth 2e-13 V at the inputs, far below the
solver's 1 uV tolerance.  Between the two cut-offs the device draws
nothing at all, so the layout declares that window as its dead zone
(DeviceLayout.dead) and the port solve drops the clamp port while the
internal node stays inside it (solver/dormant.py): at a guitar signal's
levels an op-amp design's port solve shrinks by one port per op-amp.
The dominant-pole capacitor is integrated with backward Euler (L-stable), so
the fast closed-loop pole does not ring at the Nyquist frequency as it would
with the trapezoidal rule.
"""
from __future__ import annotations

import math

import numpy as np
from solderless.engine.lazyjit import njit  # numba on first need (lazyjit)

from solderless.engine.circuit import GROUND, canonical_net
from solderless.engine.devices._common import DeviceLayout, lexp, pnjlim, read_params, vcrit
from solderless.engine.analysis import regions
from solderless.engine.devices.registry import DeviceKind

KIND = "OPAMP"
CODE = 5
NPORTS = 2  # 1 when both rails sit at fixed potentials
#: layout() takes the network's fixed net potentials (mna.Network.layout_of)
RAILS = True
#: a clamp this many VSOFT below its knee reads exactly zero (no exp call)
CLAMP_OFF = 20.0
#: the dead zone stops this far (volts) short of the exact cut-off, so a
#: port voltage rounded the other way in the kernel is never taken as dead
DEAD_MARGIN = 1e-9
DEFAULTS = {"A0": 2e5, "GBW": 1e6, "ROUT": 50.0, "RIN": 1e12, "VHR": 1.5,
            "VSOFT": 0.05, "RP": 1e9}
# par: 0 I0, 1 VHR, 2 VSOFT, 3 vcrit (shifted variable), 4 1/VSOFT,
#      5 one clamp port (1.0) or two (0.0), 6 Vcc, 7 Vee (one port only)


def layout(el, fixed: dict[str, float] | None = None) -> DeviceLayout:
    """Validate the model and describe internal node, stamps and clamp
    ports: one port when both rails are in ``fixed`` (net -> volts), else
    two."""
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
    rails = [(fixed or {}).get(canonical_net(n)) for n in (vcc, vee)]
    one = rails[0] is not None and rails[1] is not None
    par = np.array([i0, p["VHR"], p["VSOFT"], vcrit(p["VSOFT"], i0), 1.0 / p["VSOFT"],
                    1.0 if one else 0.0, rails[0] if one else 0.0, rails[1] if one else 0.0])
    # each clamp is exactly zero more than CLAMP_OFF knee widths below its
    # threshold (clamp()): the upper one below Vcc - VHR - edge, the lower
    # one above Vee + VHR + edge
    edge = CLAMP_OFF * p["VSOFT"] + DEAD_MARGIN
    if one:
        ports, iclip = [(node, GROUND)], {0: 1.0}
        dead = [(rails[1] + p["VHR"] + edge, rails[0] - p["VHR"] - edge)]
    else:
        # port 0 is v(p) - v(vcc), port 1 is v(vee) - v(p): each clamp's
        # shifted voltage is its port voltage plus VHR
        ports, iclip = [(node, vcc), (vee, node)], {0: 1.0, 1: -1.0}
        dead = [(-math.inf, -p["VHR"] - edge)] * 2
    if not dead[0][0] < dead[0][1]:
        dead = None       # rails too close together: the clamps never rest
    return DeviceLayout(CODE, ports, par, [node], stamps, probes={"iclip": (iclip, {})},
                        quiet_step=2.0 * p["VSOFT"], dead=dead)


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def clamp(x, par, pa):
    """One clamp's current and conductance over I0 at its shifted voltage x
    (volts past the threshold less VHR): exp(x/VSOFT) and its slope, or
    exactly zero more than CLAMP_OFF knee widths below."""
    a = x * par[pa + 4]
    if a < -CLAMP_OFF:
        return 0.0, 0.0
    e, de = lexp(a)
    return e, de * par[pa + 4]


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def evaluate(par, pa, v, po, i, G):
    """Clamp currents I0*exp((v + VHR)/VSOFT) and conductances (one port:
    both clamps on (p, ground), v - Vcc and Vee - v for v)."""
    i0 = par[pa + 0]
    h = par[pa + 1]
    if par[pa + 5] != 0.0:
        x = v[po]
        eu, gu = clamp(x - par[pa + 6] + h, par, pa)
        el, gl = clamp(par[pa + 7] - x + h, par, pa)
        i[po] = i0 * (eu - el)
        G[po, po] = i0 * (gu + gl)
        return
    for k in range(2):
        e, g = clamp(v[po + k] + h, par, pa)
        i[po + k] = i0 * e
        G[po + k, po + k] = i0 * g
    G[po, po + 1] = 0.0
    G[po + 1, po] = 0.0


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False, inline="always")
def limit(par, pa, vn, vo, po):
    """pnjlim on the shifted clamp voltages (one port: on the upper clamp's,
    then on the lower one's)."""
    h = par[pa + 1]
    if par[pa + 5] != 0.0:
        vcc = par[pa + 6]
        vee = par[pa + 7]
        x = pnjlim(vn[po] - vcc + h, vo[po] - vcc + h, par[pa + 2], par[pa + 3]) - h + vcc
        vn[po] = vee - (pnjlim(vee - x + h, vee - vo[po] + h, par[pa + 2], par[pa + 3]) - h)
        return
    for k in range(2):
        vn[po + k] = pnjlim(vn[po + k] + h, vo[po + k] + h, par[pa + 2], par[pa + 3]) - h


def region(par, v, i) -> str:
    """linear / clipping high / clipping low from the clamp currents."""
    lim = 10.0 * par[0]
    if i[0] > lim:
        return "clipping high"
    if (i[0] if par[5] != 0.0 else -i[1]) < -lim:
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
