"""A toy device added through the registry alone (tests/test_device_registry.py).

An exponential two-terminal junction with its own names: element kind
``TOYJ``, SPICE letter ``Y`` and model type ``TOYJ``, design part type
``toyjunction``, parameters ISAT (saturation current, A) and VSLOPE (the
exponential's slope voltage, V), probes ``ij`` and ``vj``, and its own
operating-point report (``conducting`` from 1 uA, ``blocking`` below) with a
rating IMAX. Its law I = ISAT*(exp(v/VSLOPE) - 1) + GMIN*v is the one the
compiled kernel already runs for a diode (dispatch code ``diode.CODE``,
solderless/engine/devices/diode.py: the parameter vector below is laid out as
that module's, with no breakdown), so adding it touches no kernel file: one
module and one registry line (DEVELOPERS.md, "How to add a device").
"""
from __future__ import annotations

import math

import numpy as np

from solderless.engine.devices import diode
from solderless.engine.devices._common import DeviceLayout, read_params, vcrit
from solderless.engine.devices.registry import DeviceKind

KIND = "TOYJ"
CODE = diode.CODE          # reuses the diode's compiled law
NPORTS = 1
DEFAULTS = {"ISAT": 1e-12, "VSLOPE": 0.05}
ON = 1e-6                  # A: conducting from here (this toy's own threshold)


def layout(el) -> DeviceLayout:
    p = read_params(el, DEFAULTS, positive=("ISAT", "VSLOPE"))
    a, k = el.nodes
    vte, isat = p["VSLOPE"], p["ISAT"]
    # the diode module's parameter vector: IS, vte, vcrit, xbv (inf: no
    # breakdown), 1/vte, the (unused) breakdown slope; no charge storage
    # (CJO 0, VJ 1, M 0.5, FC 0.5, TT 0, the kernel's 1/T slot 0, the
    # depletion constants and the charge kept for the kernel's history)
    par = np.array([isat, vte, vcrit(vte, isat), math.inf, 1.0 / vte, vte, 1.0 / vte,
                    0.0, 1.0, 0.5, 0.5, 0.0, 0.0, 0.0, 1.0, 0.0, 0.0, 0.0])
    assert par.size == diode.NPAR
    return DeviceLayout(CODE, [(a, k)], par,
                        probes={"ij": ({0: 1.0}, {}), "vj": ({}, {0: 1.0})},
                        quiet_step=2.0 * vte)


def region(par, v, i) -> str:
    return "conducting" if i[0] >= ON else "blocking"


def report(q, el, par, v, i, G, base):
    q["gj"] = float(G[0, 0])
    return base


def health(name, q, region, ratings):
    limit = ratings.get("IMAX")
    if limit and abs(q["ij"]) > limit:
        return [f"{name}: toy junction current {abs(q['ij']):.3g} A exceeds its rating "
                f"{limit:.3g} A"]
    return []


DEVICE = DeviceKind(
    kind=KIND, terminals=("a", "k"), title="toy junction",
    model_types={"TOYJ": 1.0}, part_types={"toyjunction": "TOYJ"},
    part_nodes=("anode", "cathode"), letter="Y",
    params=DEFAULTS, units={"ISAT": "A", "VSLOPE": "V"}, also_read=frozenset({"IMAX"}),
    probes={"ij": "A", "vj": "V"}, report=report, report_units={"gj": "S"},
    health=health, ratings=("IMAX",))
