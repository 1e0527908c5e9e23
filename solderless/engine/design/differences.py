"""Differences between two designs: exactly, field by field, for the A/B
list (:func:`differences`), and in a builder's words for a variant's notes
(:func:`change_lines`)."""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from solderless.engine.design.model import Design, Link, _format_value
from solderless.engine.errors import DesignError, SolderlessError
from solderless.engine.values import format_value


@dataclass(frozen=True)
class Difference:
    """One thing that differs between two designs."""
    what: str       # "R1 (gain)", "stage gain", "link a.env - b.ctl"
    field: str      # value, rotation, taper, position, tolerance, model, bypass, present, order
    a: str
    b: str


def _exact(x: float | None, unit: str) -> str:
    if x is None:
        return "-"
    return format_value(x, unit, style="eng", digits=6)


def _text_pair(x, y, unit):
    """Readable texts for two different numbers, with enough digits to differ."""
    sa, sb = _exact(x, unit), _exact(y, unit)
    if sa == sb:
        sa, sb = repr(x), repr(y)
    return sa, sb


def differences(a: Design, b: Design) -> list[Difference]:
    """Exactly what differs between designs ``a`` and ``b``, part by part:
    values, pot rotations and tapers, switch positions, tolerances, models,
    stage presence, order and bypass, and links. Equal floats compare equal;
    any other change is listed."""
    out: list[Difference] = []
    sa = [s.name for s in a.stages]
    sb = [s.name for s in b.stages]
    for n in sa:
        if n not in sb:
            out.append(Difference(f"stage {n}", "present", "yes", "no"))
    for n in sb:
        if n not in sa:
            out.append(Difference(f"stage {n}", "present", "no", "yes"))
    common_a = [n for n in sa if n in sb]
    common_b = [n for n in sb if n in sa]
    if common_a != common_b:
        out.append(Difference("chain", "order", " > ".join(common_a), " > ".join(common_b)))
    for n in common_a:
        if a.stage(n).bypass != b.stage(n).bypass:
            out.append(Difference(f"stage {n}", "bypass", _onoff(a.stage(n).bypass),
                                  _onoff(b.stage(n).bypass)))
    pa = {p.qualname: p for p in a.parts()}
    pb = {p.qualname: p for p in b.parts()}
    for q in list(pa) + [q for q in pb if q not in pa]:
        x, y = pa.get(q), pb.get(q)
        label = q
        if x is None or y is None:
            if (x or y).stage in common_a or not (x or y).stage:
                out.append(Difference(label, "present", "yes" if x else "no",
                                      "yes" if y else "no"))
            continue
        if x.type != y.type:
            out.append(Difference(label, "type", x.type, y.type))
            continue
        if x.value != y.value:
            out.append(Difference(label, "value", *_text_pair(x.value, y.value, x.unit)))
        if x.is_pot and x.rotation != y.rotation:
            ta, tb = (f"{100 * x.rotation:.4g} %", f"{100 * y.rotation:.4g} %")
            if ta == tb:
                ta, tb = repr(x.rotation), repr(y.rotation)
            out.append(Difference(label, "rotation", ta, tb))
        if x.is_pot and x.taper != y.taper:
            out.append(Difference(label, "taper", taper_text(x.taper), taper_text(y.taper)))
        if x.position != y.position:
            la = x.labels[x.position] if x.labels and x.position is not None else str(x.position)
            lb = y.labels[y.position] if y.labels and y.position is not None else str(y.position)
            out.append(Difference(label, "position", la, lb))
        if x.tolerance != y.tolerance:
            out.append(Difference(label, "tolerance", _tol(x.tolerance), _tol(y.tolerance)))
        if x.model != y.model:
            out.append(Difference(label, "model", str(x.model), str(y.model)))
        if x.stage or "." in q:
            try:
                px, py = a.part(q).params, b.part(q).params
            except SolderlessError:
                px = py = {}
            for k in sorted(set(px) | set(py)):
                if px.get(k) != py.get(k):
                    out.append(Difference(label, f"param {k}", str(px.get(k, "-")),
                                          str(py.get(k, "-"))))
    la = {_link_key(ln) for ln in a.links}
    lb = {_link_key(ln) for ln in b.links}
    for k in sorted(la - lb):
        out.append(Difference(f"link {k}", "present", "yes", "no"))
    for k in sorted(lb - la):
        out.append(Difference(f"link {k}", "present", "no", "yes"))
    return out


def _onoff(v: bool) -> str:
    return "bypassed" if v else "in circuit"


def _tol(t):
    return "-" if t is None else f"{t * 100:g} %"


def _link_key(ln: Link) -> str:
    ends = sorted([f"{ln.a[0]}.{ln.a[1]}", f"{ln.b[0]}.{ln.b[1]}"])
    return f"{ends[0]} - {ends[1]}"


def taper_text(taper: Any) -> str:
    if isinstance(taper, str):
        return taper
    return "custom " + " ".join(f"({r:g},{f:g})" for r, f in taper)


def change_lines(base: Design, d: Design) -> list[str]:
    """What ``d`` changes from ``base``, part by part, in a builder's words:
    values, pot rotations and tapers, device models, bypassed stages, the
    circuit's noise switched on or off."""
    out = []
    mine = {p.qualname: p for p in d.parts()}
    for p in base.parts():
        q = mine.get(p.qualname)
        if q is None:
            out.append(f"{p.qualname} removed")
            continue
        if p.value != q.value and q.value is not None:
            out.append(f"{p.qualname} {_format_value(p.value or 0.0, p.unit)} -> "
                       f"{_format_value(q.value, q.unit)}")
        if p.is_pot and p.rotation != q.rotation:
            out.append(f"{p.qualname} rotation {p.rotation:.2f} -> {q.rotation:.2f}")
        if p.is_pot and p.taper != q.taper:
            out.append(f"{p.qualname} taper {p.taper} -> {q.taper}")
        if p.model != q.model:
            out.append(f"{p.qualname} model {p.model} -> {q.model}")
    for s in d.stages:
        try:
            b = base.stage(s.name).bypass
        except DesignError:
            continue
        if b != s.bypass:
            out.append(f"stage {s.name} {'bypassed' if s.bypass else 'back in'}")
    was = (bool(getattr(base, "hiss", False)), int(getattr(base, "hiss_seed", 0) or 0))
    now = (bool(getattr(d, "hiss", False)), int(getattr(d, "hiss_seed", 0) or 0))
    if was != now:      # live noise (the design's hiss setting)
        out.append(f"circuit noise {'on' if now[0] else 'off'}"
                   + (f" (seed {now[1]})" if now[0] else ""))
    return out


def same_structure(a: Design, b: Design) -> bool:
    """True when ``a`` and ``b`` differ at most in values, pot rotations,
    tapers and tolerances: one simulator runs both (no rebuild)."""
    if [(s.name, s.bypass, s.template, tuple(s.ports), tuple(p.name for p in s.parts))
            for s in a.stages] != [(s.name, s.bypass, s.template, tuple(s.ports),
                                    tuple(p.name for p in s.parts)) for s in b.stages]:
        return False
    if [_link_key(x) for x in a.links] != [_link_key(x) for x in b.links]:
        return False
    pa = [(p.qualname, p.position, p.model) for p in a.parts()]
    pb = [(p.qualname, p.position, p.model) for p in b.parts()]
    return pa == pb
