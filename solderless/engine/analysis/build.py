"""`solderless build`: the hand-over from a voiced design to a builder.

:func:`build_report` collects, for one design:

* the parts list, grouped by type and value, with designators
  (``stage.part``), each value as marked (IEC 60062 RKM code) and snapped to
  the E-series its tolerance implies (IEC 60063), with the snap error;
* a re-solve of the circuit with the snapped values: bias points, gain and
  input impedance at 1 kHz, the -3 dB corners and, for designs with a
  control, attack and release; a warning where a figure moves by more than
  the tightest tolerance among the parts that moved;
* ratings from the circuit itself: the DC operating point plus a render of
  the synthetic guitar phrase (the loudest signal the sheet assumes), with
  every net recorded, gives each resistor's worst-case dissipation, each
  capacitor's worst-case voltage (and an electrolytic's polarity), each
  transistor's and diode's needs and a gain cell's control current;
* the supply current at rest and averaged over the render, battery life.

:func:`write_build` writes ``sheet.html`` (printable, PNG plots),
``parts.csv``, ``design.cir`` (the SPICE writer,
:func:`solderless.engine.formats.spice.circuit_to_netlist`: OTA and op-amp macromodels
as subcircuits of their own laws) and ``connections.txt``.

Margins are common practice, stated beside each: a resistor dissipates at
most half its rating; a capacitor sees at most two thirds of its rated
voltage; a semiconductor's needed voltage and current are given with a
factor of 1.5 to choose a part by.  Nothing here runs on the audio thread.
"""
from __future__ import annotations

import csv
import html
import io
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from solderless.engine.errors import DesignError, SolderlessError
from solderless.engine.values import POT_DECADE, SERIES_TOLERANCE, format_value, nearest_preferred

#: Tolerance assumed where a design gives none (common practice for the
#: parts a builder buys by default).
DEFAULT_TOLERANCE = {"resistor": 0.05, "capacitor": 0.10, "electrolytic": 0.20,
                     "pot": 0.20, "inductor": 0.10}
#: A capacitor of this value or more is taken as an electrolytic unless its
#: note says "film" (common practice for audio circuits).
ELECTROLYTIC_FROM = 1e-6
#: Standard resistor power ratings, W (common practice).
POWER_RATINGS = (0.125, 0.25, 0.5, 1.0, 2.0, 5.0)
#: A resistor should dissipate at most this fraction of its rating (common practice).
POWER_MARGIN = 0.5
#: Standard capacitor voltage ratings, V (common practice).
VOLTAGE_RATINGS = (6.3, 10.0, 16.0, 25.0, 35.0, 50.0, 63.0, 100.0, 250.0, 400.0)
#: A capacitor should see at most this fraction of its rated voltage (common practice).
VOLTAGE_MARGIN = 2.0 / 3.0
#: Factor on a semiconductor's needed voltage and current (common practice).
DEVICE_MARGIN = 1.5
#: Values potentiometers are made in, 100 ohm to 2 Mohm: the one table the
#: workbench and the console step a pot through (values.POT_DECADE).
POT_VALUES = tuple(round(m * 10.0 ** d, 6) for d in range(2, 7) for m in POT_DECADE
                   if m * 10.0 ** d <= 2e6)
#: 9 V alkaline battery capacity, mAh: 550-600 (from memory; docs/references.md).
BATTERY_MAH = 575.0
#: Above this average draw a mains adapter suits better than a 9 V battery
#: (common practice: under about 20 mA a battery lasts a day of playing or more).
ADAPTER_FROM = 0.020
#: Seconds of the synthetic phrase rendered for the ratings.
RATING_SECONDS = 6.0
#: The phrase is scaled to this peak at the jack for the ratings: a hot
#: pickup's loudest strum (above 1 V; docs/references.md, common practice).
RATING_PEAK_V = 1.0
CAUTIONS = (
    "A simulation is not the hardware: build on a breadboard first, measure the "
    "bias points against this sheet, and listen before you box it.",
    "Test at low volume: a wiring mistake or an oscillation can be loud enough to "
    "damage hearing and speakers. Start with the amplifier turned down.",
    "Mains-powered gear (adapters, amplifiers) follows local electrical codes and "
    "licensed practice; never open or modify a mains adapter.",
)
TAPER_WORDS = {"linear": "linear (resistance in proportion to rotation)",
               "audio": "audio / logarithmic (about 10 % of the track at half rotation)",
               "reverse-audio": "reverse audio (about 90 % of the track at half rotation)"}


# ---------------------------------------------------------------- values

def series_for(tolerance: float, kind: str = "resistor") -> str:
    """The IEC 60063 series whose customary tolerance is the widest not above
    ``tolerance`` (5 % -> E24, 10 % -> E12, 1 % -> E96); capacitors are
    stocked in at most E24, electrolytics in E6 (common practice)."""
    if not 0.0 < tolerance < 1.0:
        raise DesignError(f"tolerance must lie between 0 and 100 %, not {tolerance * 100:g} %")
    best = "E192"
    for name, tol in sorted(SERIES_TOLERANCE.items(), key=lambda kv: kv[1]):
        if tol <= tolerance * (1 + 1e-9):
            best = name
    cap = {"capacitor": "E24", "electrolytic": "E6"}.get(kind)
    if cap and SERIES_TOLERANCE[best] < SERIES_TOLERANCE[cap]:
        best = cap
    return best


def snap_pot(value: float) -> float:
    """The nearest value pots are made in (log distance)."""
    return min(POT_VALUES, key=lambda p: abs(math.log(value / p)))


def taper_words(taper) -> str:
    if isinstance(taper, str):
        return TAPER_WORDS.get(taper, taper)
    pts = ", ".join(f"{r:g}->{f:g}" for r, f in taper)
    return f"custom law (rotation->fraction of track: {pts})"


def _fmt(x: float, unit: str = "", digits: int = 3, floor: float = 0.0) -> str:
    """Engineering notation; magnitudes below ``floor`` (solver round-off,
    e.g. 1e-18 A through a resistor that carries no DC) are shown as 0."""
    if floor and abs(x) < floor:
        x = 0.0
    try:
        return format_value(x, unit=unit, style="eng", digits=digits)
    except (ValueError, OverflowError):
        return f"{x:.4g} {unit}".strip()


def _rkm(x: float, unit: str = "") -> str:
    return format_value(x, unit=unit, style="rkm")


@dataclass
class PartLine:
    """One part of the design as the builder buys it."""
    designator: str
    type: str            # resistor, capacitor, electrolytic, pot, inductor, device types
    value: float | None
    unit: str
    tolerance: float | None
    series: str = ""
    snapped: float | None = None
    snap_error: float = 0.0
    model: str | None = None
    note: str = ""
    taper: str = ""
    rotation: float | None = None

    @property
    def marked(self) -> str:
        return _rkm(self.value, self.unit) if self.value is not None else ""

    @property
    def snapped_marked(self) -> str:
        return _rkm(self.snapped, self.unit) if self.snapped is not None else ""


def _kind_of(info) -> str:
    if info.type == "capacitor" and info.value is not None:
        note = (info.note or "").lower()
        if "electrolytic" in note or (info.value >= ELECTROLYTIC_FROM and "film" not in note):
            return "electrolytic"
    return info.type


def part_lines(design) -> list[PartLine]:
    """Every buyable part (not supplies, inputs, switches' logic or sources)."""
    out = []
    for info in design.parts():
        if info.type in ("supply", "input", "current", "switch", "vcvs", "vccs", "cccs", "ccvs"):
            continue
        kind = _kind_of(info)
        line = PartLine(info.qualname, kind, info.value, info.unit, info.tolerance,
                        model=info.model, note=info.note)
        if kind in DEFAULT_TOLERANCE and info.value:
            tol = info.tolerance or DEFAULT_TOLERANCE[kind]
            line.tolerance = tol
            if kind == "pot":
                line.series = "pot values"
                line.snapped = snap_pot(info.value)
                line.taper = taper_words(info.taper)
                line.rotation = info.rotation
            else:
                line.series = series_for(tol, kind)
                line.snapped = nearest_preferred(info.value, line.series)
            line.snap_error = (line.snapped - info.value) / info.value
        out.append(line)
    return out


def group_lines(lines: list[PartLine]) -> list[dict]:
    """Parts grouped by type and (snapped) value or model, with quantities."""
    groups: dict[tuple, dict] = {}
    from solderless.engine.devices.registry import PART_MODEL   # device part types
    order = ["resistor", "pot", "capacitor", "electrolytic", "inductor", *PART_MODEL]
    for ln in lines:
        if ln.value is not None and ln.type in DEFAULT_TOLERANCE:
            key = (ln.type, ln.snapped_marked, ln.tolerance, ln.taper)
            desc = ln.snapped_marked
        else:
            key = (ln.type, ln.model or "", None, "")
            desc = ln.model or ""
        g = groups.setdefault(key, {"type": ln.type, "value": desc, "tolerance": ln.tolerance,
                                    "si": _fmt(ln.snapped, ln.unit) if ln.snapped else "",
                                    "taper": ln.taper, "designators": []})
        g["designators"].append(ln.designator)
    rows = sorted(groups.values(), key=lambda g: (order.index(g["type"]) if g["type"] in order
                                                  else 99, g["value"]))
    for g in rows:
        g["quantity"] = len(g["designators"])
    return rows


# ---------------------------------------------------------------- figures

@dataclass
class Figures:
    """The figures that matter, for comparing nominal and snapped values."""
    nets: dict[str, float]
    gain_db: float
    zin: float
    corners: tuple[float, float]
    attack: float = float("nan")
    release: float = float("nan")


def _corners(f: np.ndarray, mag_db: np.ndarray) -> tuple[float, float]:
    k = int(np.argmax(mag_db))
    ref = mag_db[k] - 3.0
    lo = hi = float("nan")
    below = np.nonzero(mag_db[:k] < ref)[0]
    if below.size:
        i = int(below[-1])
        lo = float(np.interp(ref, [mag_db[i], mag_db[i + 1]], [f[i], f[i + 1]]))
    above = np.nonzero(mag_db[k:] < ref)[0]
    if above.size:
        i = k + int(above[0])
        hi = float(np.interp(ref, [mag_db[i], mag_db[i - 1]], [f[i], f[i - 1]]))
    return lo, hi


def figures(design, fs: float = 48000.0, timing: bool = True) -> Figures:
    """Bias points, gain and Zin at 1 kHz, -3 dB corners, attack/release."""
    from solderless.engine.solver import ac_response
    from solderless.engine.solver.dcop import operating_point
    from solderless.engine.solver.mna import Network
    net = Network(design.flatten())
    op = operating_point(net)
    f = np.geomspace(5.0, 40e3, 160)
    f1 = np.concatenate([[1000.0], f])
    _, H, Z = ac_response(net, f1)
    mag = 20 * np.log10(np.maximum(np.abs(H[1:]), 1e-30))
    fig = Figures(dict(op.nets), float(20 * np.log10(max(abs(H[0]), 1e-30))),
                  float(abs(Z[0])), _corners(f, mag))
    if timing and design.control_probe():
        from solderless.engine.analysis.montecarlo import burst_timing
        from solderless.engine.solver import Simulator
        sim = Simulator(net.circuit, fs=fs, probes=(design.resolve_probe(design.control_probe()),))
        a, r, _ = burst_timing(sim, fs, design.meters.get("control_law", "linear"))
        fig.attack, fig.release = a, r
    return fig


def snapped_design(design, lines: list[PartLine]):
    """A copy of the design with every value replaced by its snapped value."""
    d = design.copy()
    for ln in lines:
        if ln.snapped is not None and ln.value and ln.snapped != ln.value:
            d.set_value(ln.designator, ln.snapped)
    return d


def compare_figures(nom: Figures, snap: Figures, limit: float) -> tuple[list[dict], list[str]]:
    """Rows (figure, nominal, snapped, change) and warnings where a figure
    moves by more than ``limit`` (a fraction)."""
    rows, warns = [], []

    def add(name, a, b, unit, rel=True, floor=0.0):
        if not (math.isfinite(a) and math.isfinite(b)):
            rows.append({"figure": name, "nominal": a, "snapped": b, "change": "", "unit": unit})
            return
        if rel:
            ch = (b - a) / a if a else 0.0
            txt = f"{ch * 100:+.2f} %"
            bad = abs(ch) > limit and abs(b - a) > floor
        else:
            ch = b - a
            txt = f"{ch:+.2f} dB"
            bad = abs(ch) > 20 * math.log10(1 + limit)
        rows.append({"figure": name, "nominal": a, "snapped": b, "change": txt, "unit": unit})
        if bad:
            warns.append(f"{name} moves by {txt} with the snapped values, more than the "
                         f"parts' tolerance ({limit * 100:g} %)")

    add("gain at 1 kHz", nom.gain_db, snap.gain_db, "dB", rel=False)
    add("input impedance at 1 kHz", nom.zin, snap.zin, "Ω")
    add("low -3 dB corner", nom.corners[0], snap.corners[0], "Hz")
    add("high -3 dB corner", nom.corners[1], snap.corners[1], "Hz")
    add("attack time", nom.attack, snap.attack, "s")
    add("release time", nom.release, snap.release, "s")
    for n, v in nom.nets.items():
        if n in snap.nets and abs(v) > 0.05:
            # bias points: 10 mV floor so a net near 0 V is not a percentage of nothing
            add(f"bias {n}", v, snap.nets[n], "V", floor=0.01)
    return rows, warns


# ---------------------------------------------------------------- ratings

def _pick(ratings, need):
    for r in ratings:
        if r >= need:
            return r
    return None


def _node_trace(net_names, traces, ops, node: str) -> np.ndarray | float:
    from solderless.engine.circuit import GROUND, canonical_net
    n = canonical_net(node)
    if n == GROUND:
        return 0.0
    return traces[n] if n in traces else ops.get(n, 0.0)


def ratings(design, seconds: float = RATING_SECONDS, fs: float = 48000.0,
            phrase: str = "demo", peak: float = RATING_PEAK_V) -> dict:
    """Worst-case stresses from the operating point plus a render of the
    synthetic phrase (``seconds`` long, scaled to ``peak`` volts at the
    jack), with every net and device recorded."""
    from solderless.engine.parts import load_library
    from solderless.engine.solver import Simulator
    from solderless.engine.synth import render_phrase
    circ = design.flatten()
    sim0 = Simulator(circ, fs=fs)
    net = sim0.net
    op = sim0.operating_point()
    nets = [n for n in net.net_names[:net.n_user_nets]]
    probes = [f"v({n})" for n in nets]
    dev_q = []
    for el, mod, lay, po in net.devices:
        for q in lay.probes:
            if q in ("ic", "vce", "id", "vd", "vds", "iabc", "ib"):
                probes.append(f"{q}({el.name})")
                dev_q.append((el.name, q))
    supplies = [e for e in circ.elements if e.kind == "V" and e.name != circ.input_source
                and not e.params.get("_input")]
    probes += [f"i({e.name})" for e in supplies]
    sim = Simulator(circ, fs=fs, oversample=design.oversample, probes=tuple(probes))
    x = render_phrase(phrase, fs=fs)[: int(seconds * fs)]
    if x.size and np.max(np.abs(x)) > 0:
        x = x * (peak / float(np.max(np.abs(x))))
    y, pdata = sim.run(x)
    trace = dict(zip(probes, pdata))
    vtr = {n: trace[f"v({n})"] for n in nets}
    lib = load_library()
    res = {"resistors": [], "capacitors": [], "devices": [], "supply": {}, "errors": [],
           "warnings": [], "seconds": x.size / fs, "input_peak": float(np.max(np.abs(x)))
           if x.size else 0.0, "op": op}
    elements = {e.name: e for e in circ.elements}
    lines = {ln.designator: ln for ln in part_lines(design)}
    # element name -> designator (a netlist design's elements keep their own
    # names; a pot is two elements)
    owner_of = {}
    names = {i.qualname: i.name for i in design.parts()}
    for q, ln in lines.items():
        base = names[q] if design.netlist is not None else q
        owner_of[base] = q
        if ln.type == "pot":
            owner_of[base + ".a"] = owner_of[base + ".b"] = q
    for name, e in elements.items():
        if e.kind not in ("R", "C"):
            continue
        owner = owner_of.get(name)
        if owner is None:
            continue           # the jack's source resistance and the load
        va = _node_trace(nets, vtr, op.nets, e.nodes[0])
        vb = _node_trace(nets, vtr, op.nets, e.nodes[1])
        vdc = op.nets.get(e.nodes[0], 0.0) - op.nets.get(e.nodes[1], 0.0)
        vt = np.asarray(va - vb, dtype=float)
        if vt.ndim == 0:
            vt = np.full(1, float(vt))
        if e.kind == "R":
            R = sim.values[name]
            p_dc = vdc * vdc / R
            i_dc = op.currents.get(name, vdc / R)
            p_pk = float(np.max(vt * vt) / R)
            p_w = max(p_dc, p_pk)
            rating = _pick(POWER_RATINGS, p_w / POWER_MARGIN)
            res["resistors"].append({"part": name, "owner": owner, "R": R, "i_dc": i_dc,
                                     "p_dc": p_dc, "p_peak": p_pk, "rating": rating})
        else:
            ln = lines[owner]
            vmax = float(np.max(np.abs(vt)))
            rating = _pick(VOLTAGE_RATINGS, vmax / VOLTAGE_MARGIN)
            row = {"part": name, "C": sim.values[name], "v_dc": vdc, "v_max": vmax,
                   "rating": rating, "electrolytic": ln.type == "electrolytic",
                   "plus": "", "reverse": 0.0}
            if row["electrolytic"]:
                if abs(vdc) < 0.5:
                    row["plus"] = "either (under 0.5 V at rest: use a bipolar part)"
                else:
                    s = 1.0 if vdc > 0 else -1.0
                    row["plus"] = "+ to " + design_pin(design, owner, 0 if s > 0 else 1)
                    row["reverse"] = float(max(0.0, -np.min(s * vt)))
                    if row["reverse"] > 0.0:
                        res["errors"].append(
                            f"{owner}: electrolytic's polarity reverses under signal (down to "
                            f"{-row['reverse']:.2f} V); use a bipolar or film part, or bias it")
            res["capacitors"].append(row)
    # devices
    for el, mod, lay, po in net.devices:
        m = lib.find(str(el.params.get("MODEL", "")))
        d = {"part": el.name, "kind": el.kind, "model": el.params.get("MODEL", ""),
             "type": el.params.get("TYPE", el.kind), "op": op.devices.get(el.name, {}),
             "spread": dict(m.spread) if m is not None else {}}
        get = lambda q: trace.get(f"{q}({el.name})")  # noqa: E731
        if el.kind == "Q":
            vce, ic = get("vce"), get("ic")
            d["v_need"] = float(np.max(np.abs(vce)))
            d["i_need"] = float(np.max(np.abs(ic)))
            d["p_need"] = float(np.max(np.abs(vce * ic)))
            d["vname"] = "Vce"
        elif el.kind in ("J", "M"):
            vds, idd = get("vds"), get("id")
            d["v_need"] = float(np.max(np.abs(vds)))
            d["i_need"] = float(np.max(np.abs(idd)))
            d["p_need"] = float(np.max(np.abs(vds * idd)))
            d["vname"] = "Vds"
        elif el.kind == "D":
            vd, idd = get("vd"), get("id")
            d["v_need"] = float(max(0.0, -np.min(vd)))
            d["i_need"] = float(max(0.0, np.max(idd)))
            d["p_need"] = float(np.max(np.abs(vd * idd)))
            d["vname"] = "reverse V"
        elif el.kind == "OTA":
            ia = get("iabc")
            mname = el.params.get("MODEL", "")
            lim = lib.find(mname).params.get("IABC_MAX") if lib.find(mname) else None
            d["i_need"] = float(np.max(np.abs(ia)))
            d["limit"] = lim
            d["vname"] = "Iabc"
            if lim and d["i_need"] > lim:
                res["errors"].append(f"{el.name}: control current reaches "
                                     f"{_fmt(d['i_need'], 'A')}, above the gain cell's "
                                     f"rated {_fmt(lim, 'A')}")
        elif el.kind == "OPAMP":
            mname = el.params.get("MODEL", "")
            m = lib.find(mname)
            d["iq"] = m.params.get("IQ") if m else None
        res["devices"].append(d)
    # supply
    rest = avg = 0.0
    for e in supplies:
        i_rest = -op.currents.get(e.name, 0.0)       # SPICE sign: into the + node
        i_avg = -float(np.mean(trace[f"i({e.name})"])) if x.size else i_rest
        rest += max(i_rest, 0.0)
        avg += max(i_avg, 0.0)
    # op-amp macromodels draw their quiescent current outside the network
    iq = sum(d.get("iq") or 0.0 for d in res["devices"])
    rest += iq
    avg += iq
    res["supply"] = {"rest": rest, "average": avg, "battery_mah": BATTERY_MAH,
                     "battery_hours": BATTERY_MAH * 1e-3 / avg if avg > 0 else float("inf"),
                     "opamp_iq": iq}
    if avg > ADAPTER_FROM:
        res["warnings"].append(
            f"the circuit draws {_fmt(avg, 'A')} on average: a regulated 9 V mains adapter "
            "suits it better than a battery (mains-powered gear follows local codes)")
    res["trace_out"] = y
    res["fs"] = fs
    return res


def clock(rotation: float) -> str:
    """A pot rotation as a clock position: 0 at 7 o'clock, 1 at 5 o'clock
    over 300 degrees (common practice)."""
    h = (7.0 + 10.0 * float(rotation)) % 12.0
    hh = int(round(h)) % 12 or 12
    return f"about {hh} o'clock"


def design_pin(design, qualname: str, index: int) -> str:
    """The net name (in the design's terms) of a two-pin part's pin."""
    try:
        p = design.part(qualname)
    except SolderlessError:
        return "pin " + str(index + 1)
    return f"net {p.nodes[index]}"


# ---------------------------------------------------------------- connections

def connections(design) -> str:
    """Per-stage connection list: which part pins share which net."""
    from solderless.engine.design import PART_TYPES
    out = []
    groups = [("(design)", design.parts_global)] + [(s.name, s.parts) for s in design.stages]
    for sname, parts in groups:
        nets: dict[str, list[str]] = {}
        for p in parts:
            pins = PART_TYPES[p.type][1]
            for pin, n in zip(pins, p.nodes):
                nets.setdefault(n, []).append(f"{p.name}.{pin}")
        if not nets:
            continue
        st = next((s for s in design.stages if s.name == sname), None)
        ports = f"  ports: {', '.join(st.ports)}" if st is not None and st.ports else ""
        out.append(f"[{sname}]{ports}")
        for n in sorted(nets):
            out.append(f"  {n:<14} {'  '.join(nets[n])}")
        out.append("")
    if design.links:
        out.append("[links]")
        for ln in design.links:
            out.append(f"  {ln.a[0]}.{ln.a[1]} = {ln.b[0]}.{ln.b[1]}")
        out.append("")
    out.append("The chain joins each stage's 'out' to the next stage's 'in'; 'vcc', "
               "'vref' and '0' are shared by every stage.")
    return "\n".join(out) + "\n"


# ---------------------------------------------------------------- whole report

@dataclass
class BuildReport:
    design_name: str
    lines: list[PartLine]
    groups: list[dict]
    figure_rows: list[dict]
    snap_warnings: list[str]
    ratings: dict
    connections: str
    netlist: str | None
    netlist_note: str = ""
    pots: list[PartLine] = field(default_factory=list)

    @property
    def errors(self) -> list[str]:
        return list(self.ratings.get("errors", []))

    @property
    def warnings(self) -> list[str]:
        return self.snap_warnings + list(self.ratings.get("warnings", []))


def build_report(design, seconds: float = RATING_SECONDS, timing: bool = True,
                 peak: float = RATING_PEAK_V) -> BuildReport:
    """Everything the build sheet shows (see the module docstring)."""
    from solderless.engine.formats.spice import circuit_to_netlist
    lines = part_lines(design)
    for ln in lines:
        if ln.tolerance is not None and not 0.0 < ln.tolerance < 1.0:
            raise DesignError(f"tolerance must lie between 0 and 100 %, not "
                              f"{ln.tolerance * 100:g} %", part=ln.designator,
                              file=str(design.path) if design.path else None)
    nom = figures(design, timing=timing)
    snap = figures(snapped_design(design, lines), timing=timing)
    moved = [ln.tolerance for ln in lines if ln.snapped is not None and abs(ln.snap_error) > 1e-9]
    limit = min(moved) if moved else 0.05
    rows, warns = compare_figures(nom, snap, limit)
    rt = ratings(design, seconds=seconds, peak=peak)
    try:
        netlist = circuit_to_netlist(design.flatten(), title=design.name)
        note = ""
    except DesignError as exc:
        # every device kind is written (macromodels as subcircuits); what is
        # left is a net or part name SPICE cannot tell apart: the sheet and
        # parts list are still written, and the note says what to rename
        netlist = None
        note = f"no SPICE netlist: {exc}"
    return BuildReport(design.name, lines, group_lines(lines), rows, warns, rt,
                       connections(design), netlist, note,
                       [ln for ln in lines if ln.type == "pot"])


def parts_csv(rep: BuildReport) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["quantity", "type", "marking", "value", "tolerance", "taper", "designators"])
    for g in rep.groups:
        tol = f"{g['tolerance'] * 100:g}%" if g["tolerance"] else ""
        w.writerow([g["quantity"], g["type"], g["value"], g["si"], tol, g["taper"],
                    " ".join(g["designators"])])
    return buf.getvalue()


def _plots(rep: BuildReport, out: Path) -> dict[str, str]:
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    files = {}
    rs = sorted(rep.ratings["resistors"], key=lambda r: -max(r["p_dc"], r["p_peak"]))[:20]
    if rs:
        fig, ax = plt.subplots(figsize=(7, 0.25 * len(rs) + 1.2))
        names = [r["part"] for r in rs][::-1]
        ax.barh(names, [max(r["p_dc"], r["p_peak"]) * 1e3 for r in rs][::-1], color="#888")
        ax.set_xlabel("worst-case dissipation, mW")
        ax.set_xscale("log")
        ax.set_title("Resistors: highest dissipation")
        fig.tight_layout()
        fig.savefig(out / "dissipation.png", dpi=90)
        plt.close(fig)
        files["dissipation"] = "dissipation.png"
    cs = rep.ratings["capacitors"]
    if cs:
        fig, ax = plt.subplots(figsize=(7, 0.25 * len(cs) + 1.2))
        ax.barh([c["part"] for c in cs][::-1], [c["v_max"] for c in cs][::-1], color="#888")
        ax.set_xlabel("worst-case voltage, V")
        ax.set_title("Capacitors: worst-case voltage")
        fig.tight_layout()
        fig.savefig(out / "cap_voltage.png", dpi=90)
        plt.close(fig)
        files["cap_voltage"] = "cap_voltage.png"
    return files


def _table(head, rows) -> str:
    e = html.escape
    h = "".join(f"<th>{e(str(c))}</th>" for c in head)
    body = "".join("<tr>" + "".join(f"<td>{e(str(c))}</td>" for c in r) + "</tr>" for r in rows)
    return f"<table><tr>{h}</tr>{body}</table>"


def sheet_html(rep: BuildReport, files: dict[str, str] | None = None) -> str:
    """The printable build sheet."""
    e = html.escape
    files = files or {}
    rt = rep.ratings
    parts = []
    parts.append(f"<h1>Build sheet: {e(rep.design_name)}</h1>")
    parts.append("<div class='caution'><b>Before you build</b><ul>"
                 + "".join(f"<li>{e(c)}</li>" for c in CAUTIONS) + "</ul></div>")
    if rep.errors:
        parts.append("<h2>Errors</h2><ul class='err'>"
                     + "".join(f"<li>{e(x)}</li>" for x in rep.errors) + "</ul>")
    if rep.warnings:
        parts.append("<h2>Warnings</h2><ul>"
                     + "".join(f"<li>{e(x)}</li>" for x in rep.warnings) + "</ul>")
    parts.append("<h2>Parts list</h2>")
    parts.append(_table(["qty", "type", "marking", "value", "tolerance", "designators"],
                        [[g["quantity"], g["type"], g["value"], g["si"],
                          f"{g['tolerance'] * 100:g} %" if g["tolerance"] else "",
                          ", ".join(g["designators"])] for g in rep.groups]))
    parts.append(f"<p>Total parts: {sum(g['quantity'] for g in rep.groups)}.</p>")
    parts.append("<h2>Values: as designed, as marked, snapped</h2><p>Each value is "
                 "snapped to the IEC 60063 series its tolerance implies (E24 for 5 %, "
                 "E12 for 10 %, E6 for 20 %); markings follow IEC 60062.</p>")
    parts.append(_table(["part", "as designed", "tolerance", "series", "buy", "snap error"],
                        [[ln.designator, ln.marked, f"{ln.tolerance * 100:g} %", ln.series,
                          ln.snapped_marked, f"{ln.snap_error * 100:+.2f} %"]
                         for ln in rep.lines if ln.snapped is not None]))
    parts.append("<h3>What the snapped values change</h3>")
    parts.append(_table(["figure", "nominal", "snapped", "change"],
                        [[r["figure"], _fmt(r["nominal"], r["unit"]) if r["unit"] != "dB"
                          else f"{r['nominal']:.2f} dB",
                          _fmt(r["snapped"], r["unit"]) if r["unit"] != "dB"
                          else f"{r['snapped']:.2f} dB", r["change"]]
                         for r in rep.figure_rows]))
    if rep.pots:
        parts.append("<h2>Pots</h2>")
        parts.append(_table(["part", "value", "taper", "rotation the designer settled on"],
                            [[p.designator, p.snapped_marked, p.taper,
                              f"{p.rotation * 100:.0f} % of the travel ({clock(p.rotation)} on "
                              "a 300-degree pot from 7 o'clock)" if p.rotation is not None
                              else ""]
                             for p in rep.pots]))
    parts.append(f"<h2>Ratings</h2><p>From the DC operating point plus a {rt['seconds']:.1f} s "
                 f"render of the synthetic guitar phrase scaled to "
                 f"{rt['input_peak']:.2g} V peak at the jack (a hot pickup's loudest strum). Margins (common practice): a resistor "
                 f"dissipates at most {POWER_MARGIN * 100:.0f} % of its rating; a capacitor "
                 f"sees at most {VOLTAGE_MARGIN * 100:.0f} % of its rated voltage; choose "
                 f"semiconductors rated {DEVICE_MARGIN:g} x the needs listed.</p>")
    parts.append("<h3>Resistors</h3>")
    parts.append(_table(["part", "value", "DC current", "DC power", "worst-case power",
                         "rating"],
                        [[r["part"], _rkm(r["R"]), _fmt(abs(r["i_dc"]), "A", floor=1e-12),
                          _fmt(r["p_dc"], "W", floor=1e-12), _fmt(r["p_peak"], "W", floor=1e-12),
                          f"{r['rating']:g} W" if r["rating"] else "over 5 W: redesign"]
                         for r in rt["resistors"]]))
    if "dissipation" in files:
        parts.append(f"<img src='{files['dissipation']}' alt='dissipation'>")
    parts.append("<h3>Capacitors</h3>")
    parts.append(_table(["part", "value", "DC voltage", "worst-case voltage", "rating",
                         "electrolytic: + pin"],
                        [[c["part"], _rkm(c["C"], "F"), f"{c['v_dc']:.2f} V",
                          f"{c['v_max']:.2f} V", f"{c['rating']:g} V" if c["rating"] else "?",
                          c["plus"] if c["electrolytic"] else "-"]
                         for c in rt["capacitors"]]))
    if "cap_voltage" in files:
        parts.append(f"<img src='{files['cap_voltage']}' alt='capacitor voltage'>")
    parts.append("<h3>Semiconductors (generic models: choose a real part by these figures)"
                 "</h3>")
    rows = []
    for d in rt["devices"]:
        q = d["op"]
        if d["kind"] == "Q":
            sp = d.get("spread", {}).get("BF")
            bf = f" (this class: {sp[0]:g} to {sp[1]:g}, typical, from memory)" if sp else ""
            rows.append([d["part"], f"{d['type']} BJT ({d['model']})",
                         f"current gain at rest {q.get('beta', float('nan')):.0f}{bf}",
                         f"Vce up to {d['v_need']:.2f} V, Ic up to {_fmt(d['i_need'], 'A')}, "
                         f"{_fmt(d['p_need'], 'W')}",
                         f"Vceo >= {d['v_need'] * DEVICE_MARGIN:.1f} V, Ic >= "
                         f"{_fmt(d['i_need'] * DEVICE_MARGIN, 'A')}"])
        elif d["kind"] in ("J", "M"):
            sp = d.get("spread", {})
            spt = "; ".join(f"{k} {a:g} to {b:g}" for k, (a, b) in sp.items())
            rows.append([d["part"], f"{d['type']} ({d['model']})",
                         f"region {q.get('region')}"
                         + (f" (this class: {spt}, typical, from memory)" if spt else ""),
                         f"Vds up to {d['v_need']:.2f} V, Id up to {_fmt(d['i_need'], 'A')}",
                         f"Vds >= {d['v_need'] * DEVICE_MARGIN:.1f} V"])
        elif d["kind"] == "D":
            rows.append([d["part"], f"diode ({d['model']})", "",
                         f"reverse up to {d['v_need']:.2f} V, forward up to "
                         f"{_fmt(d['i_need'], 'A')}",
                         f"VR >= {max(d['v_need'] * DEVICE_MARGIN, 1):.1f} V, IF >= "
                         f"{_fmt(max(d['i_need'] * DEVICE_MARGIN, 1e-3), 'A')}"])
        elif d["kind"] == "OTA":
            lim = d.get("limit")
            rows.append([d["part"], f"bipolar OTA ({d['model']})", "",
                         f"control current up to {_fmt(d['i_need'], 'A')}",
                         f"limit {_fmt(lim, 'A')}" if lim else ""])
        elif d["kind"] == "OPAMP":
            rows.append([d["part"], f"op-amp ({d['model']})", "",
                         f"quiescent current {_fmt(d['iq'], 'A')}" if d.get("iq") else "",
                         "single-supply operation from 9 V"])
    parts.append(_table(["part", "model", "at rest", "needs under signal", "choose"], rows))
    s = rt["supply"]
    parts.append("<h2>Supply</h2>")
    hours = s["battery_hours"]
    parts.append(f"<p>Current at rest {_fmt(s['rest'], 'A')}; averaged over the render "
                 f"{_fmt(s['average'], 'A')}. A 9 V alkaline battery holds about "
                 f"{s['battery_mah']:.0f} mAh (550-600 mAh, from memory): about "
                 f"{hours:.0f} hours of playing.</p>" if math.isfinite(hours) else
                 "<p>The circuit draws no supply current.</p>")
    parts.append("<h2>Files</h2><ul><li>parts.csv: the parts list</li>"
                 + ("<li>design.cir: SPICE netlist of the whole design</li>" if rep.netlist
                    else f"<li>{e(rep.netlist_note)}</li>")
                 + "<li>connections.txt: which part pins share which net, per stage</li></ul>")
    parts.append("<h2>Connections</h2><pre>" + e(rep.connections) + "</pre>")
    style = ("body{font-family:sans-serif;max-width:60em;margin:1em auto;color:#111}"
             "table{border-collapse:collapse;margin:.5em 0}td,th{border:1px solid #999;"
             "padding:2px 6px;font-size:90%}th{background:#eee}.caution{border:2px solid #000;"
             "padding:.3em 1em}.err{color:#900}@media print{img{max-width:100%}}")
    return ("<!DOCTYPE html><html><head><meta charset='utf-8'><title>Build sheet: "
            f"{e(rep.design_name)}</title><style>{style}</style></head><body>"
            + "\n".join(parts) + "</body></html>\n")


def write_build(rep: BuildReport, out: Path) -> dict[str, Path]:
    """Write the sheet, parts list, netlist and connection list into ``out``."""
    from solderless.engine.design import atomic_write_text
    from solderless.engine.fileio import output_folder
    out = output_folder(out)
    files = _plots(rep, out)
    written = {}
    written["sheet"] = out / "sheet.html"
    atomic_write_text(written["sheet"], sheet_html(rep, files))
    written["parts"] = out / "parts.csv"
    atomic_write_text(written["parts"], parts_csv(rep))
    if rep.netlist:
        written["netlist"] = out / "design.cir"
        atomic_write_text(written["netlist"], rep.netlist)
    written["connections"] = out / "connections.txt"
    atomic_write_text(written["connections"], rep.connections)
    return written
