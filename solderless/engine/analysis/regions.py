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
IABC_MAX (OTA). A part over a rating, or within ``MARGIN`` of saturation or
cut-off where it should amplify, gets a warning.
"""
from __future__ import annotations

IC_OFF = 1e-6       # A: a BJT's collector current under this is cut off (common practice)
VCE_SAT = 0.3       # V: Vce under this is saturated (common practice, small-signal BJT)
MARGIN = 0.5        # V: this close to saturation or cut-off is reported
DIODE_ON = 1e-6     # A: a diode conducting at least this is forward (common practice)
OTA_OFF = 1e-9      # A: an OTA's control current under this is off
OFF_BY_DESIGN = "off at rest"   # a part note with this phrase: cut off on purpose

#: Rating names read from a part's model, per element kind.
RATING_NAMES = {"Q": ("ICMAX", "VCEMAX", "PDMAX"), "D": ("IAVE", "VPK", "PDMAX"),
                "J": ("VDSMAX", "VGSMAX", "PDMAX"), "M": ("VDSMAX", "IDMAX", "PDMAX"),
                "OTA": ("IABC_MAX",)}

#: Regions in which a device amplifies (used for the near-edge warnings).
AMPLIFYING = {"Q": "active", "J": "saturated", "M": "saturated"}


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


def diode_region(vd: float, id_: float, bv: float | None) -> str:
    if bv is not None and bv > 0 and vd < -bv:
        return "breakdown"
    if id_ >= DIODE_ON:
        return "forward"
    if vd < 0:
        return "reverse"
    return "off"


def classify(kind: str, q: dict, params: dict, base_region: str = "",
             vth: float | None = None) -> str:
    """The region of one device from its operating-point quantities ``q``
    and its element parameters; ``base_region`` is the device module's own
    answer, used where this module adds nothing (op-amp, OTA); ``vth`` a
    FET's folded threshold (the device layout's ``par[1]``)."""
    typ = str(params.get("TYPE", "")).upper()
    if kind == "Q":
        return bjt_region(-1.0 if typ == "PNP" else 1.0, q.get("ic", 0.0), q.get("vce", 0.0))
    if kind in ("J", "M"):
        sign = -1.0 if typ in ("PJF", "PMOS") else 1.0
        if vth is None:
            vto = float(params.get("VTO", -2.0 if kind == "J" else 0.0))
            vth = vto if kind == "J" else sign * vto
        return fet_region(sign, q.get("vgs", 0.0), q.get("vds", 0.0), vth)
    if kind == "D":
        bv = params.get("BV")
        return diode_region(q.get("vd", 0.0), q.get("id", 0.0),
                            float(bv) if bv not in (None, 0) else None)
    return base_region


def _fmt(x: float, unit: str) -> str:
    from solderless.engine.values import format_value
    try:
        return format_value(x, unit=unit, style="eng")
    except Exception:
        return f"{x:.3g} {unit}"


def warnings_for(name: str, kind: str, q: dict, region: str,
                 ratings: dict | None, off_by_design: bool = False) -> list[str]:
    """Warnings for one device: the region where it should amplify, and
    every rating it exceeds. A device its design note calls off at rest
    is not warned about for being cut off."""
    out = []
    if off_by_design and region in ("cut-off", "off"):
        pass
    elif kind == "Q" and region in ("saturated", "near saturation"):
        out.append(f"{name}: transistor is {region} at the operating point (Vce "
                   f"{abs(q.get('vce', 0.0)):.2f} V; an amplifying stage wants more than "
                   f"{VCE_SAT + MARGIN:.1f} V)")
    elif kind == "Q" and region in ("cut-off", "reverse"):
        out.append(f"{name}: transistor is {region} at the operating point (Ic "
                   f"{_fmt(abs(q.get('ic', 0.0)), 'A')})")
    elif kind in ("J", "M") and region in ("cut-off", "linear", "near cut-off", "near linear"):
        what = "JFET" if kind == "J" else "MOSFET"
        out.append(f"{name}: {what} is {region} at the operating point (Vgs "
                   f"{q.get('vgs', 0.0):.2f} V, Vds {q.get('vds', 0.0):.2f} V)")
    elif kind == "OTA" and region != "on":
        out.append(f"{name}: OTA is {region} at the operating point")
    elif kind == "OPAMP" and region != "linear":
        out.append(f"{name}: op-amp output is {region} at the operating point")
    r = ratings or {}

    def over(label, value, limit, unit):
        if limit and limit > 0 and abs(value) > limit:
            out.append(f"{name}: {label} {_fmt(abs(value), unit)} exceeds its rating "
                       f"{_fmt(limit, unit)} ({abs(value) / limit:.1f} times; parts library)")

    if kind == "Q":
        over("collector current", q.get("ic", 0.0), r.get("ICMAX"), "A")
        over("Vce", q.get("vce", 0.0), r.get("VCEMAX"), "V")
        p = abs(q.get("ic", 0.0) * q.get("vce", 0.0)) + abs(q.get("ib", 0.0) * q.get("vbe", 0.0))
        over("power", p, r.get("PDMAX"), "W")
    elif kind == "D":
        over("forward current", max(q.get("id", 0.0), 0.0), r.get("IAVE"), "A")
        over("reverse voltage", min(q.get("vd", 0.0), 0.0), r.get("VPK"), "V")
        over("power", q.get("id", 0.0) * q.get("vd", 0.0), r.get("PDMAX"), "W")
    elif kind in ("J", "M"):
        over("Vds", q.get("vds", 0.0), r.get("VDSMAX"), "V")
        over("Vgs", q.get("vgs", 0.0), r.get("VGSMAX"), "V")
        over("drain current", q.get("id", 0.0), r.get("IDMAX"), "A")
        over("power", q.get("id", 0.0) * q.get("vds", 0.0), r.get("PDMAX"), "W")
    elif kind == "OTA":
        over("control current", q.get("iabc", 0.0), r.get("IABC_MAX"), "A")
    return out


def ratings_of(model) -> dict[str, float]:
    """The ratings a parts-library model carries (see ``RATING_NAMES``)."""
    names = RATING_NAMES.get(getattr(model, "element_kind", ""), ())
    return {k: float(model.params[k]) for k in names if k in model.params}
