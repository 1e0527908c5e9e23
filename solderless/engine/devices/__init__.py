"""Device models, one module per device, and the registry kind -> module.

Every device module provides the same small set of things (SPICE3 style):
``KIND``, ``CODE`` (integer type code for the compiled kernel), ``NPORTS``,
``DEFAULTS`` (SPICE .model parameter defaults), ``layout(element)`` (validate
parameters; ports, internal nodes, linear stamps, flat parameter vector,
probes), numba ``evaluate(par, pa, v, po, i, G)`` (port currents and Jacobian
block), numba ``limit(par, pa, vnew, vold, po)`` (junction limiting) and
``region(par, v, i)`` for reports; a device with junction charge storage
also lists ``DeviceLayout.caps`` and provides ``capacitances(par, v, vc)``
(plain Python, at an operating point).

Adding a device: one module, one line in ``REGISTRY`` below, and one branch
in the type-code dispatch of :mod:`solderless.engine.solver.kernel` (numba needs the
call sites spelled out to compile one kernel for all devices).
"""
from __future__ import annotations

from solderless.engine.devices import behav, bjt, diode, jfet, mosfet, opamp, ota, switch
from solderless.engine.devices._common import GMIN, TNOM, VT

REGISTRY = {m.KIND: m for m in (diode, bjt, jfet, ota, opamp, mosfet, behav, switch)}
BY_CODE = {m.CODE: m for m in REGISTRY.values()}

__all__ = ["REGISTRY", "BY_CODE", "VT", "GMIN", "TNOM"]
