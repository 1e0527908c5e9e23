"""Device models, one module per device, and the registry of them.

Every device module provides the same small set of things (SPICE3 style):
``DEVICE`` (its description as data: terminals, model and part types, SPICE
letter, parameters with aliases, units and defaults, probes, report hooks;
see :mod:`solderless.engine.devices.registry`), ``CODE`` (integer type code
of its branch in the compiled kernel's dispatch), ``KIND``, ``NPORTS``,
``DEFAULTS`` (SPICE .model parameter defaults), ``layout(element)``
(validate parameters; ports, internal nodes, linear stamps, flat parameter
vector, probes), numba ``evaluate(par, pa, v, po, i, G)`` (port currents and
Jacobian block), numba ``limit(par, pa, vnew, vold, po)`` (junction
limiting) and ``region(par, v, i)`` for reports; a device with junction
charge storage also lists ``DeviceLayout.caps`` and provides
``capacitances(par, v, vc)`` (plain Python, at an operating point).

Adding a device: one module, and one line in ``BUILTIN`` below (see
DEVELOPERS.md, "How to add a device"). A device with a new law also needs its
branch in the type-code dispatch of :mod:`solderless.engine.solver.kernel`
(numba needs the call sites spelled out to compile one kernel for all
devices); a test checks the codes against that dispatch.
"""
from __future__ import annotations

from solderless.engine.devices import registry
from solderless.engine.devices import behav, bjt, diode, jfet, mosfet, opamp, ota, switch
from solderless.engine.devices._common import GMIN, TNOM, VT

#: the built-in devices, in the order messages list them
BUILTIN = (diode, bjt, jfet, mosfet, opamp, ota, behav, switch)
for _m in BUILTIN:
    if _m.KIND not in registry._DEVICES:
        registry.register(_m)

#: element kind -> device module (live: includes devices registered later)
REGISTRY = registry.MODULES
#: kernel type code -> device module
BY_CODE = registry.BY_CODE

__all__ = ["REGISTRY", "BY_CODE", "BUILTIN", "VT", "GMIN", "TNOM", "registry"]
