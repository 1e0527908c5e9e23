"""Operating regions and rating checks: the one classifier that ``op``, the
workbench's inspector and the demo report all read.

Each device kind is judged by its own law, from the quantities of the DC
operating point (SI units, the signs SPICE uses):

* BJT (NPN/PNP, signs folded by type): ``cut-off`` when the collector
  current is under ``IC_OFF`` (1 uA); ``saturated`` when Vce is under
  ``VCE_SAT`` (0.3 V); ``near saturation`` when Vce is within ``MARGIN``
  (0.5 V) above that; ``reverse`` when Vce is negative; else ``active``.
  Common practice for small-signal transistors.
* JFET / MOSFET: the device's own square law, in SPICE's words (cut-off,
  linear, saturated: Shichman & Hodges 1968; a FET amplifies when
  saturated), with ``near cut-off`` when Vgs is within ``MARGIN`` of the
  threshold and ``near linear`` when Vds is within ``MARGIN`` of Vgs - Vth.
* Diode: ``forward`` when its current is at least ``DIODE_ON`` (1 uA:
  a germanium or Schottky junction at 22 uA drops only about 0.2 V, so a
  voltage threshold of 0.3 V called it off), ``breakdown`` past BV,
  ``reverse`` when reverse biased, else ``off``.
* OTA: ``off`` (control current under 1 nA), ``compliance`` (output out of
  its window), else ``on``; its control current is checked against the
  part's IABC_MAX.
* Op-amp: ``linear`` or clipping, from its output clamp.

Ratings come from the parts library (``solderless/presets/parts.toml``) with SPICE's
names where SPICE has one: ICMAX, VCEMAX, PDMAX (BJT), IAVE, VPK, PDMAX
(diode), VDSMAX, VGSMAX, PDMAX (JFET), VDSMAX, IDMAX, PDMAX (MOSFET),
IABC_MAX (OTA): each device declares its rating names
(``DeviceKind.ratings``, solderless/engine/devices/registry.py). A part over
a rating, or within ``MARGIN`` of saturation or cut-off where it should
amplify, gets a warning, from the device's own health hook
(``DeviceKind.health``: the ``*_health`` functions below for the built-in
devices).
"""
from __future__ import annotations

IC_OFF = 1e-6       # A: a BJT's collector current under this is cut off (common practice)
VCE_SAT = 0.3       # V: Vce under this is saturated (common practice, small-signal BJT)
MARGIN = 0.5        # V: this close to saturation or cut-off is reported
DIODE_ON = 1e-6     # A: a diode conducting at least this is forward (common practice)
OTA_OFF = 1e-9      # A: an OTA's control current under this is off
OFF_BY_DESIGN = "off at rest"   # a part note with this phrase: cut off on purpose

def bjt_region(sign: float, ic: float, vce: float) -> str:
    """Region of a BJT; ``sign`` +1 for NPN, -1 for PNP."""
    ic_s, vce_s = sign * ic, sign * vce
    if ic_s < IC_OFF:
        return "cut-off"
    if vce_s < 0:
        return "reverse"
    if vce_s < VCE_SAT:
        return "saturated"
    if vce_s < VCE_SAT + MARGIN:
        return "near saturation"
    return "active"


def fet_region(sign: float, vgs: float, vds: float, vth: float) -> str:
    """Region of a JFET or MOSFET by the square law; ``vth`` is the
    threshold (a JFET's pinch-off voltage VTO) with the type's sign folded
    in, as the device module holds it (negative for a depletion part)."""
    vgs_s, vds_s = sign * vgs, sign * vds
    if vds_s < 0:                      # inverse mode: source and drain swap
        vgs_s, vds_s = vgs_s - vds_s, -vds_s
    vov = vgs_s - vth
    if vov <= 0:
        return "cut-off"
    if vov > vds_s:
        return "linear"
    if vov < MARGIN:
        return "near cut-off"
    if vds_s - vov < MARGIN:
        return "near linear"
    return "saturated"


def bjt_headroom(q: dict) -> float | None:
    """Volts of Vce above saturation (VCE_SAT) at the operating point."""
    return abs(q["vce"]) - VCE_SAT if "vce" in q else None


def fet_headroom(q: dict) -> float | None:
    """Volts of Vds at the operating point."""
    return abs(q["vds"]) if "vds" in q else None


def diode_region(vd: float, id_: float, bv: float | None) -> str:
    if bv is not None and bv > 0 and vd < -bv:
        return "breakdown"
    if id_ >= DIODE_ON:
        return "forward"
    if vd < 0:
        return "reverse"
    return "off"


def _fmt(x: float, unit: str) -> str:
    from solderless.engine.values import format_reading
    return format_reading(x, unit)


def over(out: list, name: str, label: str, value: float, limit, unit: str) -> None:
    """Append a warning to ``out`` when |value| exceeds a rating ``limit``."""
    if limit and limit > 0 and abs(value) > limit:
        out.append(f"{name}: {label} {_fmt(abs(value), unit)} exceeds its rating "
                   f"{_fmt(limit, unit)} ({abs(value) / limit:.1f} times; parts library)")


def bjt_health(name: str, q: dict, region: str | None, r: dict) -> list[str]:
    """A BJT out of its active region, or over a rating. ``region`` is None
    for a part off at rest by design (no region warning)."""
    out = []
    if region in ("saturated", "near saturation"):
        out.append(f"{name}: transistor is {region} at the operating point (Vce "
                   f"{abs(q.get('vce', 0.0)):.2f} V; an amplifying stage wants more than "
                   f"{VCE_SAT + MARGIN:.1f} V)")
    elif region in ("cut-off", "reverse"):
        out.append(f"{name}: transistor is {region} at the operating point (Ic "
                   f"{_fmt(abs(q.get('ic', 0.0)), 'A')})")
    over(out, name, "collector current", q.get("ic", 0.0), r.get("ICMAX"), "A")
    over(out, name, "Vce", q.get("vce", 0.0), r.get("VCEMAX"), "V")
    p = abs(q.get("ic", 0.0) * q.get("vce", 0.0)) + abs(q.get("ib", 0.0) * q.get("vbe", 0.0))
    over(out, name, "power", p, r.get("PDMAX"), "W")
    return out


def fet_health(what: str):
    """The health hook of a FET (``what``: "JFET", "MOSFET"): out of its
    saturation region, or over a rating."""
    def health(name: str, q: dict, region: str | None, r: dict) -> list[str]:
        out = []
        if region in ("cut-off", "linear", "near cut-off", "near linear"):
            out.append(f"{name}: {what} is {region} at the operating point (Vgs "
                       f"{q.get('vgs', 0.0):.2f} V, Vds {q.get('vds', 0.0):.2f} V)")
        over(out, name, "Vds", q.get("vds", 0.0), r.get("VDSMAX"), "V")
        over(out, name, "Vgs", q.get("vgs", 0.0), r.get("VGSMAX"), "V")
        over(out, name, "drain current", q.get("id", 0.0), r.get("IDMAX"), "A")
        over(out, name, "power", q.get("id", 0.0) * q.get("vds", 0.0), r.get("PDMAX"), "W")
        return out
    return health


def diode_health(name: str, q: dict, region: str | None, r: dict) -> list[str]:
    """A diode over a rating (a diode has no region to be warned about)."""
    out: list[str] = []
    over(out, name, "forward current", max(q.get("id", 0.0), 0.0), r.get("IAVE"), "A")
    over(out, name, "reverse voltage", min(q.get("vd", 0.0), 0.0), r.get("VPK"), "V")
    over(out, name, "power", q.get("id", 0.0) * q.get("vd", 0.0), r.get("PDMAX"), "W")
    return out


def ota_health(name: str, q: dict, region: str | None, r: dict) -> list[str]:
    out = []
    if region is not None and region != "on":
        out.append(f"{name}: OTA is {region} at the operating point")
    over(out, name, "control current", q.get("iabc", 0.0), r.get("IABC_MAX"), "A")
    return out


def opamp_health(name: str, q: dict, region: str | None, r: dict) -> list[str]:
    if region is not None and region != "linear":
        return [f"{name}: op-amp output is {region} at the operating point"]
    return []


def warnings_for(name: str, kind: str, q: dict, region: str,
                 ratings: dict | None, off_by_design: bool = False) -> list[str]:
    """Warnings for one device: the region where it should amplify, and
    every rating it exceeds, by the device's own health hook
    (solderless.engine.devices.registry). A device its design note calls
    off at rest is not warned about for being cut off."""
    from solderless.engine.devices.registry import DEVICES
    dev = DEVICES.get(kind)
    if dev is None or dev.health is None:
        return []
    quiet = off_by_design and region in ("cut-off", "off")
    return dev.health(name, q, None if quiet else region, ratings or {})


def ratings_of(model) -> dict[str, float]:
    """The ratings a parts-library model carries (its device's ``ratings``)."""
    from solderless.engine.devices.registry import RATINGS
    names = RATINGS.get(getattr(model, "element_kind", ""), ())
    return {k: float(model.params[k]) for k in names if k in model.params}
