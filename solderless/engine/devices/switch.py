"""Voltage-controlled switch with hysteresis, as SPICE's S element (``.model
SW``): RON when the control voltage has risen above VT + VH, ROFF when it
has fallen below VT - VH, and between the two it keeps its state.

Nodes (p, n, cp, cn): port 0 = (p, n) carries the switch's current, port 1
= (cp, cn) senses the control voltage and draws nothing, port 2 = (m, 0)
is the switch's memory: an internal node ``<name>#m`` at 0 (off) or 1 (on)
on a 1 mF capacitor integrated with backward Euler.  Outside the band the
device drives m to its new state through 10 MS (it lands there within the
same sample, to 5e-6); inside the band it draws only 1e-12 S towards the
initial state (ON keyword: 1, default 0), so the state holds from sample
to sample as a circuit state, and the operating point inside the band takes
the initial state, as ngspice's does.  The switch's conductance is
1/ROFF + (1/RON - 1/ROFF) * m, abrupt as ngspice's law (checked with
``ngspice -b``: with VH = 0 the switch is on for a control above VT), so
the switching instants fall on the same samples as ngspice's at the same
step.  A current-controlled switch (W, ``.model CSW`` with IT, IH) is this
device behind a transresistance (H) of the controlling source's current.
"""
from __future__ import annotations

import math

import numpy as np
from solderless.engine.lazyjit import njit  # numba on first need (lazyjit)

from solderless.engine.devices._common import DeviceLayout, read_params
from solderless.engine.devices.registry import DeviceKind

KIND = "SW"
CODE = 10
NPORTS = 3
DEFAULTS = {"VT": 0.0, "VH": 0.0, "RON": 1.0, "ROFF": 1e12, "STATE": 0.0}
#: memory node: capacitance, drive and hold conductances
C_MEM, G_SET, G_HOLD = 1e-3, 1e7, 1e-12
# par: 0 1/RON, 1 1/ROFF, 2 VT, 3 VH, 4 initial state (1 on, 0 off)


def layout(el) -> DeviceLayout:
    """Validate the model; ports (p, n), (cp, cn) and the memory (m, 0)."""
    p = read_params(el, DEFAULTS, positive=("RON", "ROFF"), nonneg=("VH",))
    a, b, cp, cn = el.nodes
    m = f"{el.name}#m"
    par = np.array([1.0 / p["RON"], 1.0 / p["ROFF"], p["VT"], p["VH"],
                    1.0 if p["STATE"] > 0.5 else 0.0])
    return DeviceLayout(CODE, [(a, b), (cp, cn), (m, "0")], par, [m],
                        [("C", m, "0", C_MEM, "be")],
                        probes={"i": ({0: 1.0}, {}), "vc": ({}, {1: 1.0}),
                                "state": ({}, {2: 1.0})},
                        quiet_step=math.inf)


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False)
def evaluate(par, pa, v, po, i, G):
    """Switch current and conductance from the memory; the memory's drive."""
    vc = v[po + 1]
    vm = v[po + 2]
    if vc > par[pa + 2] + par[pa + 3]:
        i[po + 2] = G_SET * (vm - 1.0)
        G[po + 2, po + 2] = G_SET
    elif vc < par[pa + 2] - par[pa + 3]:
        i[po + 2] = G_SET * vm
        G[po + 2, po + 2] = G_SET
    else:
        i[po + 2] = G_HOLD * (vm - par[pa + 4])
        G[po + 2, po + 2] = G_HOLD
    s = vm
    ds = 1.0
    if s <= 0.0:
        s, ds = 0.0, 0.0
    elif s >= 1.0:
        s, ds = 1.0, 0.0
    dg = par[pa + 0] - par[pa + 1]
    g = par[pa + 1] + dg * s
    vs = v[po]
    i[po] = g * vs
    i[po + 1] = 0.0
    G[po, po] = g
    G[po, po + 1] = 0.0
    G[po, po + 2] = dg * ds * vs
    for k in range(3):
        G[po + 1, po + k] = 0.0
    G[po + 2, po] = 0.0
    G[po + 2, po + 1] = 0.0


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False)
def limit(par, pa, vn, vo, po):
    """No limiting."""
    return


def region(par, v, i) -> str:
    """on / off, from the memory node."""
    return "on" if v[2] > 0.5 else "off"


# --------------------------------------------------------------------------
# The device's description (solderless.engine.devices.registry)

def report(q, el, par, v, i, G, region):
    """on or off, from the memory node."""
    return region


DEVICE = DeviceKind(kind=KIND, terminals=("p", "n", "cp", "cn"), title="switch",
                    params=DEFAULTS, units={"VT": "V", "VH": "V", "RON": "Ω", "ROFF": "Ω"},
                    probes={"i": "A", "vc": "V", "state": ""}, report=report)
