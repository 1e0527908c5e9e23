"""Values outside the range real parts have: warned about, naming the part.

A value far outside these ranges is almost always a typing slip (``1e300``
for ``100p``, ``N=1e-6`` for ``N=1``) and makes the simulation report
absurd voltages and currents, or a singular matrix, without saying why.
The circuit still runs (a deliberate extreme is allowed); the warning tells
the user which part to look at.

The ranges are common practice: wide bounds around what discrete parts and
the SPICE model cards of real devices use, chosen by us, not taken from a
standard.  Limits are inclusive; ``None`` means no bound on that side.
"""
from __future__ import annotations

import math

from solderless.engine.circuit import Circuit
from solderless.engine.derived import LiveMapping

#: element kind -> (quantity, unit, low, high) for the element's value.
#: Common practice: resistors from milliohms (sense resistors, wire) to
#: gigaohms; capacitors from femtofarads (parasitics) to a farad;
#: inductors from picohenries to kilohenries (transformer windings);
#: sources up to the kilovolts of valve supplies.
VALUE_RANGES: dict[str, tuple[str, str, float | None, float | None]] = {
    "R": ("resistance", "ohm", 1e-4, 1e12),
    "C": ("capacitance", "F", 1e-16, 10.0),
    "L": ("inductance", "H", 1e-12, 1e4),
    "V": ("voltage", "V", -1e4, 1e4),
    "I": ("current", "A", -1e3, 1e3),
}

#: SPICE model parameter -> (low, high) in SI units, per element kind: each
#: device declares its own (``DeviceKind.ranges`` in its module under
#: solderless/engine/devices). Common practice (typical device model cards
#: span well inside these): saturation currents 1e-20..1e-3 A, emission
#: coefficients 0.5..4 (ideal junction 1, recombination about 2), current
#: gains 1..10000, Early voltages above 1 V, JFET and MOSFET thresholds
#: within +-50 V, transconductance parameters 1e-9..10 A/V^2, series
#: resistances below 1 Mohm.
PARAM_RANGES = LiveMapping(lambda: {d.kind: dict(d.ranges) for d in _devices() if d.ranges})


def _devices():
    from solderless.engine.devices.registry import devices
    return devices()


def _out(x: float, lo, hi) -> bool:
    return (lo is not None and x < lo) or (hi is not None and x > hi)


def _where(e) -> str:
    w = getattr(e, "where", None)
    if w is not None and w.file:
        return f"{w.file}:{w.line}: " if w.line else f"{w.file}: "
    return ""


#: A part's unit (as the design reports it) -> its element kind in VALUE_RANGES.
_KIND_OF_UNIT = {"Ω": "R", "ohm": "R", "F": "C", "H": "L"}


def value_warning(part: str, unit: str, value: float) -> str | None:
    """The warning for a part value edited by hand (console, workbench) that
    lies outside the range of real parts, or None: the same ranges
    :func:`check_values` holds a file to."""
    rng = VALUE_RANGES.get(_KIND_OF_UNIT.get(unit or "", ""))
    if rng is None or not math.isfinite(value):
        return None
    what, u, lo, hi = rng
    if not _out(float(value), lo, hi):
        return None
    return (f"part '{part}': {what} {value:g} {u} is outside the range of real parts "
            f"({lo:g}..{hi:g} {u}); check the value")


def check_values(circuit: Circuit) -> list[str]:
    """Warnings for element values and model parameters outside the ranges
    above, each naming the file, line and part."""
    out: list[str] = []
    for e in circuit.elements:
        rng = VALUE_RANGES.get(e.kind)
        try:
            v = float(e.value)
        except (TypeError, ValueError):
            v = math.nan
        if rng is not None and math.isfinite(v) and not (e.params or {}).get("_input"):
            what, unit, lo, hi = rng
            if e.kind in "VI":
                bad = abs(v) > hi
            else:
                bad = _out(v, lo, hi)
            if bad:
                span = (f"{abs(hi):g} {unit}" if e.kind in "VI" else
                        f"{lo:g}..{hi:g} {unit}")
                out.append(f"{_where(e)}part '{e.name}': {what} {v:g} {unit} is outside "
                           f"the range of real parts ({span}); check the value")
        for key, (lo, hi) in PARAM_RANGES.get(e.kind, {}).items():
            p = (e.params or {}).get(key)
            if isinstance(p, bool) or not isinstance(p, (int, float)):
                continue
            if math.isfinite(p) and _out(float(p), lo, hi):
                span = f"{lo:g}..{hi:g}" if hi is not None else f">= {lo:g}"
                out.append(f"{_where(e)}part '{e.name}': model parameter {key}={p:g} is "
                           f"outside the range of real devices ({span}); check the model")
    return out
