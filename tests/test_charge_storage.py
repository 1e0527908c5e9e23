"""Junction charge storage (BJT, diode, JFET, MOSFET level 1) against
ngspice-39 and the SPICE depletion law.

References: ngspice-39 (``ngspice -b``, tests/spice_ref.py): ``ac`` from
20 Hz to 20 kHz and ``tran`` at the same step; the depletion-capacitance
law with its forward-bias linearisation above FC*VJ (SPICE2, L. W. Nagel,
ERL-M520, 1975; docs/references.md, "Junction charge storage").
Netlists (our own typical values): tests/netlists/gp_ce40 (40 dB
common-emitter stage, full Gummel-Poon card with CJE/CJC/XCJC/CJS/TF with
XTF, VTF, ITF/TR), gp_fuzz (two-transistor fuzz), jfet_clip (JFET stage
with CGS/CGD into a diode clipper with CJO/TT), mosfet_stages (overlap and
bulk-junction capacitances, CBD/CBS and CJ/CJSW with AD/AS/PD/PS),
ge_stage (germanium PNP at 45 degC with TNOM 25: the capacitances'
temperature law); tests/netlists/stored_charge: diode_recovery (a diode
with TT = 50 us: reverse recovery) and bjt_storage (an NPN switch with
TR = 40 us: saturation storage), against ngspice's transient with its own
error control.
"""
from __future__ import annotations

import math
import re

import numpy as np
import pytest

import spice_ref as S
from solderless.engine.circuit import Element
from solderless.engine.devices import REGISTRY
from solderless.engine.devices._common import depletion_cap
from solderless.engine.solver.ac import ac_response

AC_NETLISTS = ["gp_ce40", "gp_fuzz", "jfet_clip", "mosfet_stages", "ge_stage"]
#: issue 18's bounds: 0.1 dB and 1 degree from 20 Hz to 20 kHz
TOL_DB, TOL_DEG = 0.1, 1.0
#: every charge-storage parameter of the reference cards
CHARGE = (r"\b(CJE|VJE|MJE|TF|XTF|VTF|ITF|CJC|VJC|MJC|XCJC|TR|CJS|VJS|MJS|FC|CGS|CGD|"
          r"CJO|VJ|M|TT|CGSO|CGDO|CGBO|CBD|CBS|CJ|MJ|CJSW|MJSW|AD|AS|PD|PS)=\S+?(?=[\s)])")


@pytest.fixture(scope="module")
def version():
    return S.require_ngspice()


#: the FET stages are driven here from a pickup-like 47k source (the
#: netlists have 1k), so that their gate capacitances show at 20 kHz
SOURCE = {"jfet_clip": ("RSG src in 1k", "RSG src in 47k"),
          "mosfet_stages": ("RS src in 1k", "RS src in 47k")}


def _cards(name):
    text = S.load_netlist(name)
    if name in SOURCE:
        assert SOURCE[name][0] in text
        text = text.replace(*SOURCE[name])
    return text


def _ac_cards(name):
    return re.sub(r"^(VIN\s+\S+\s+\S+\s+DC\s+\S+).*$", r"\1 AC 1", _cards(name),
                  flags=re.M | re.I)


def _circuit(name, cards=None):
    from solderless.engine.formats.spice import parse_netlist
    nl = parse_netlist(cards or _cards(name), file=f"{name}.cir", in_source="VIN",
                       out_node="out")
    nl.circuit.element("VIN").params.pop("wave", None)
    return nl.circuit


def _compare(H, ref):
    db = 20 * np.log10(np.abs(H)) - 20 * np.log10(np.abs(ref))
    ph = np.degrees(np.angle(H / ref))
    return float(np.max(np.abs(db))), float(np.max(np.abs(ph)))


@pytest.mark.ngspice
@pytest.mark.parametrize("name", AC_NETLISTS)
def test_ac_with_charge_storage_matches_ngspice(name, version):
    """The small-signal response at the operating point, junction
    capacitances included, within 0.1 dB and 1 degree of ngspice's ``ac``;
    and the capacitances matter at that resolution: ngspice's own
    response without the charge parameters is further away than that."""
    cards = _ac_cards(name)
    f, ref = S.run_ac(cards, "out", 20.0, 20e3, 10)
    _, H, _ = ac_response(_circuit(name), f)
    db, deg = _compare(H, ref)
    print(f"{name}: worst {db:.4f} dB, {deg:.4f} deg [{version}]")
    assert db < TOL_DB and deg < TOL_DEG, f"{name}: {db:.3f} dB, {deg:.3f} deg vs {version}"
    _, bare = S.run_ac(re.sub(CHARGE, "", cards), "out", 20.0, 20e3, 10)
    db0, deg0 = _compare(bare, ref)
    assert db0 > TOL_DB or deg0 > TOL_DEG, f"{name}: the capacitances change nothing"


def test_depletion_law_and_its_linearisation():
    """cz*(1 - v/pb)**-m below fc*pb (SPICE2, Nagel 1975), and above it the
    tangent that SPICE continues with: value and slope continuous at fc*pb."""
    cz, pb, m, fc = 10e-12, 0.7, 0.4, 0.5
    assert depletion_cap(0.0, cz, pb, m, fc) == pytest.approx(cz)
    assert depletion_cap(-3.0, cz, pb, m, fc) == pytest.approx(cz * (1 + 3.0 / pb) ** -m)
    x = fc * pb
    below = depletion_cap(x - 1e-7, cz, pb, m, fc)
    above = depletion_cap(x + 1e-7, cz, pb, m, fc)
    assert above == pytest.approx(below, rel=1e-6)
    slope_law = cz * m / pb * (1 - x / pb) ** (-m - 1)
    slope_lin = (depletion_cap(x + 0.1, cz, pb, m, fc) - depletion_cap(x, cz, pb, m, fc)) / 0.1
    assert slope_lin == pytest.approx(slope_law, rel=1e-9)


def test_mosfet_junction_geometry_is_simulated():
    """AD, AS, PD, PS (instance parameters) size the bulk junctions with CJ
    and CJSW; CBD/CBS, when given, take precedence (ngspice's level 1)."""
    mod = REGISTRY["M"]
    base = {"TYPE": "NMOS", "CJ": 1e-4, "CJSW": 1e-9, "MJ": 0.5, "MJSW": 0.33}
    el = lambda **kw: Element("M1", "M", ("d", "g", "s", "b"), 0.0, dict(base, **kw))  # noqa: E731
    lay = mod.layout(el(AD=2e-9, AS=3e-9, PD=1e-4, PS=2e-4))
    c = mod.capacitances(lay.par, np.zeros(3), np.zeros(len(lay.caps)))
    assert [e[:2] for e in lay.caps] == [("b", "d"), ("b", "s")]
    assert c == pytest.approx([1e-4 * 2e-9 + 1e-9 * 1e-4, 1e-4 * 3e-9 + 1e-9 * 2e-4])
    for k in ("AD", "AS", "PD", "PS"):
        other = mod.layout(el(**{"AD": 2e-9, "AS": 3e-9, "PD": 1e-4, "PS": 2e-4, k: 5e-9}))
        assert not np.array_equal(other.par, lay.par), k
    lay = mod.layout(el(AD=2e-9, CBD=7e-12, CBS=0.0))
    assert mod.capacitances(lay.par, np.zeros(3), np.zeros(len(lay.caps)))[0] \
        == pytest.approx(7e-12)


def test_the_report_says_what_is_simulated():
    """The operating-point report says truthfully what happens to the
    junction capacitances: the charges follow the signal (every junction of
    the 40 dB stage's BJT, the MOSFETs' bulk junctions), the constant gate
    overlaps are linear capacitors, and with junction charge storage off
    all are left out of renders."""
    from solderless.engine.solver.dcop import operating_point
    circ = S.engine_circuit("gp_ce40")
    circ.junction_charge = True
    on = [w for w in operating_point(circ).warnings if "junction" in w]
    assert len(on) == 1 and "Q1" in on[0]
    assert "follow the signal" in on[0] and "operating-point" not in on[0]
    mos = [w for w in operating_point(S.engine_circuit("mosfet_stages")).warnings
           if "junction" in w]
    assert len(mos) == 1 and "follow the signal" in mos[0]
    assert "linear capacitors at their operating-point values" in mos[0]
    assert "overlaps" in mos[0]
    circ.junction_charge = False
    off = [w for w in operating_point(circ).warnings if "junction" in w]
    assert len(off) == 1 and "left out of renders" in off[0]
    bare = S.engine_circuit("npn_ce")  # no capacitance parameters
    assert not [w for w in operating_point(bare).warnings if "junction" in w]


# ---------------------------------------------------------------- time domain
FS = 48000.0
DURATION = 0.02


def _render(name, fs, duration, charge=True, cards=None):
    from solderless.engine.solver import Simulator
    circ = _circuit(name, cards)
    circ.junction_charge = charge
    _, x = S.engine_input(name, fs, duration)
    return np.asarray(Simulator(circ, fs).process(x), float)


@pytest.mark.ngspice
@pytest.mark.parametrize("name,fs", [("gp_ce40", FS), ("jfet_clip", FS),
                                     ("mosfet_stages", FS), ("ge_stage", FS),
                                     ("gp_fuzz", FS), ("gp_fuzz", 4 * FS)])
def test_transient_with_charge_storage_matches_ngspice(name, fs, version):
    """Renders with junction charge storage (the junction charges
    nonlinear, by BDF2; a MOSFET's constant overlaps linear) within 1 %
    NRMSE of ngspice's transient at the same step (ngspice integrates the
    nonlinear charges by the trapezoidal rule); and closer than the same
    render without them, so they are simulated.  Measured (48 kHz): 40 dB
    stage 0.003 % (0.12 % without), JFET 0.10 % (0.52 %), MOSFET 0.04 %
    (0.61 %), germanium 0.01 % (0.53 %); the clipping fuzz 0.07 % (0.34 %)
    at 192 kHz.  At 48 kHz the fuzz's nanosecond charges are below what
    the step resolves: against ngspice's error-controlled transient, ours
    0.34 %, ngspice's own run at that step 0.37 %, no charge storage 0.27 %
    (measured), so there only the 1 % bound is asserted."""
    cards = _cards(name)
    ref = S.run_tran(cards, 1.0 / fs, DURATION, fixed_step=True, nodes=("out",)).v["out"]
    on, lag = S.nrmse(ref, _render(name, fs, DURATION, True))
    off, _ = S.nrmse(ref, _render(name, fs, DURATION, False))
    print(f"{name} at {fs:g} Hz: NRMSE {on * 100:.3f} % with charge storage, "
          f"{off * 100:.3f} % without [{version}]")
    assert on < 0.01 and abs(lag) <= 1
    if (name, fs) != ("gp_fuzz", FS):
        assert on < off


def _top_band_db(y, fs, lo=0.45):
    """Energy above lo*fs relative to the whole, dB (Hann window)."""
    y = y - y.mean()
    Y = np.abs(np.fft.rfft(y * np.hanning(y.size))) ** 2
    f = np.fft.rfftfreq(y.size, 1.0 / fs)
    return 10 * math.log10(Y[f > lo * fs].sum() / Y.sum())


@pytest.mark.ngspice
def test_no_nyquist_ringing_from_stiff_junctions(version):
    """Junction time constants are nanoseconds against a 21 us step: with
    the trapezoidal rule such a mode sits at z = -0.9996 and rings at
    Nyquist after every clipping edge (measured on the fuzz at 48 kHz:
    -43.8 dB of the output's energy above 0.45 fs against ngspice's
    -48.7 dB); the junction charges integrate by BDF2 and the linear
    junction states by backward Euler (mna.JUNCTION_METHOD), both of which
    damp such a mode, and stay below ngspice there (measured -54.0 dB;
    -56.3 dB with backward Euler for the charges too)."""
    dur = 0.05
    ref = S.run_tran(_cards("gp_fuzz"), 1.0 / FS, dur, fixed_step=True, nodes=("out",))
    ours = _top_band_db(_render("gp_fuzz", FS, dur), FS)
    theirs = _top_band_db(ref.v["out"], FS)
    print(f"energy above 0.45 fs: ours {ours:.1f} dB, ngspice {theirs:.1f} dB [{version}]")
    assert ours < theirs


def test_live_edit_recomputes_the_junction_capacitances():
    """Every junction of the 40 dB stage's BJT (B'-E', B'-C', the external
    B-C' share, C'-substrate and TF's transcapacitance) is its own law's
    charge, not a state; the MOSFETs' constant gate overlaps are linear
    states, and after a value edit they keep their values (the bulk
    junctions are the law's); with junction charge storage off there are
    no junction states at all."""
    from solderless.engine.solver import Simulator
    sim = Simulator(S.engine_circuit("gp_ce40"), FS)
    assert sim.net.kernel_charge
    assert [j.kernel for j in sim.net.junctions] == [True] * 5
    assert not [s for s in sim.net.states if s.junction >= 0]
    mos = Simulator(S.engine_circuit("mosfet_stages"), FS)
    assert [j.kernel for j in mos.net.junctions] == [False, False, False, True,
                                                     False, False, True, True]
    js = [s for s in mos.net.states if s.junction >= 0]
    before = [s.value for s in js]
    assert before == pytest.approx([200e-6 * 5e-8, 200e-6 * 1.5e-8, 2e-6 * 1e-9,
                                    400e-6 * 3e-8, 400e-6 * 1e-8])  # W*CGSO ... (card)
    mos.set_values({"RG2": 820e3})
    assert [s.value for s in js] == before
    off = S.engine_circuit("mosfet_stages")
    off.junction_charge = False
    assert Simulator(off, FS).n_states == mos.n_states - len(js)


@pytest.mark.parametrize("name", ["gp_ce40", "jfet_clip", "stored_charge/bjt_storage"])
def test_charge_history_starts_at_rest(name):
    """At the operating point every charge is constant, so silence in
    gives the operating point's output, sample for sample, from the first
    sample on; and again after a reset that follows a loud render (the
    runner takes the charges afresh at the reset's voltages: a history
    left over from the render would drive q/T of current into the
    circuit at once, microamps at these charges).  Exact to the solver's
    tolerance (common practice: a circuit at rest stays at rest)."""
    from solderless.engine.solver import Simulator
    circ = _circuit(name)
    sim = Simulator(circ, FS)
    assert sim.net.kernel_charge
    rest = sim.process(np.zeros(256))
    y0 = sim._ydc
    assert np.max(np.abs(rest - y0)) < 1e-8 * max(1.0, abs(y0))
    _, x = S.engine_input(name, FS, 0.005)
    sim.process(4.0 * x)
    sim.reset()
    again = sim.process(np.zeros(256))
    assert np.max(np.abs(again - y0)) < 1e-8 * max(1.0, abs(y0))


#: the switching circuits: a diode and an NPN switch whose stored charge
#: (TT; TR and TF) holds them on for tens of microseconds after the drive
#: reverses, at 192 kHz (5.2 us steps).  Kept apart from the netlists every
#: ngspice test walks: at ngspice's own step its trapezoidal rule overshoots
#: at each of their edges, so "the same step" is no reference for them
STORAGE = ("stored_charge/diode_recovery", "stored_charge/bjt_storage")


@pytest.mark.ngspice
@pytest.mark.parametrize("name", STORAGE)
def test_stored_charge_follows_the_signal_as_ngspice(name, version):
    """Reverse recovery and saturation storage come from the junction
    charge's change with the signal (TT*Id, TR*Ibc: zero at the operating
    point, so a capacitance taken there cannot show them).  Against
    ngspice-39's transient with its own error control (maximum step 1/64
    of ours), a render at 192 kHz is within 1 % NRMSE, closer than
    ngspice's own run at our step (its trapezoidal rule overshoots at each
    switching edge), and five times closer than without charge storage.
    Measured: diode 0.56 % (ngspice at our step 3.4 %, no charge 7.1 %),
    NPN switch 0.61 % (4.3 %, 50 %)."""
    fs, dur = 192000.0, 0.003
    cards = S.load_netlist(name)
    acc = S.run_tran(cards, 1.0 / fs, dur, fixed_step=False, refine=64, nodes=("out",)).v["out"]
    same = S.run_tran(cards, 1.0 / fs, dur, fixed_step=True, nodes=("out",)).v["out"]
    on, lag = S.nrmse(acc, _render(name, fs, dur, True, cards=cards))
    off, _ = S.nrmse(acc, _render(name, fs, dur, False, cards=cards))
    theirs, _ = S.nrmse(acc, same)
    print(f"{name}: NRMSE {on * 100:.3f} % (ngspice at the same step {theirs * 100:.3f} %, "
          f"without charge storage {off * 100:.3f} %) [{version}]")
    assert on < 0.01 and abs(lag) <= 1
    assert on < theirs
    assert 5 * on < off


#: DC-coupled stages whose collector and drains swing volts across large
#: depletion capacitances (a BJT's external B-C' share and CJS with RB and
#: RBM; MOSFET bulk junctions, bulk on the source and on ground), so that
#: the charges' change with the swing shows
SWING = ("stored_charge/bjt_outer_charge", "stored_charge/mosfet_bulk_charge")


def _swing_nrmse(ref, y, fs):
    """NRMSE of the swing about the operating point (the outputs are DC
    coupled), after ngspice's first 0.5 ms (its first steps are shorter
    than ours, whatever the step options)."""
    return S.nrmse(ref - ref[0], y - ref[0], skip=int(0.0005 * fs))


@pytest.mark.ngspice
@pytest.mark.parametrize("name", SWING)
def test_depletion_charges_follow_the_swing_as_ngspice(name, version, monkeypatch):
    """The depletion charges of the junctions off a BJT's B'-E'/B'-C' ports
    and of a MOSFET's bulk junctions are the device law's, integrated as
    ngspice integrates them: against ngspice-39 with the same integration
    rule and step (``method=gear maxord=2``: BDF2 at a fixed step) the
    render agrees to within 0.05 % NRMSE of the swing, where the same
    capacitances taken linear at the operating point (the previous method)
    are ten times further off; against ngspice's error-controlled
    transient (trapezoidal, maximum step 1/64 of ours) within 1 %.
    Measured at 192 kHz: BJT 0.0009 % (linear, by backward Euler, 1.2 %),
    0.018 %; MOSFET 0.007 % (3.4 %), 0.76 % (the charges by backward Euler,
    the rule before BDF2, 3.4 %)."""
    from solderless.engine.devices import bjt, mosfet
    fs, dur = 192000.0, 0.003
    cards = S.load_netlist(name)
    acc = S.run_tran(cards, 1.0 / fs, dur, fixed_step=False, refine=64, nodes=("out",)).v["out"]
    with monkeypatch.context() as m:
        m.setattr(S, "OPTIONS", S.OPTIONS.replace("method=trap", "method=gear maxord=2"))
        bdf2 = S.run_tran(cards, 1.0 / fs, dur, fixed_step=True, nodes=("out",)).v["out"]
    y = _render(name, fs, dur, True, cards=cards)
    for mod in (bjt, mosfet):
        def linear(el, *a, _orig=mod.layout, **k):
            lay = _orig(el, *a, **k)
            lay.kernel_caps = [False] * len(lay.caps)
            return lay
        monkeypatch.setattr(mod, "layout", linear)
    lin = _render(name, fs, dur, True, cards=cards)
    same, lag = _swing_nrmse(bdf2, y, fs)
    same_lin, _ = _swing_nrmse(bdf2, lin, fs)
    exact, _ = _swing_nrmse(acc, y, fs)
    print(f"{name}: NRMSE of the swing {same * 100:.4f} % against ngspice's BDF2 at the "
          f"same step (linear at the operating point {same_lin * 100:.3f} %), "
          f"{exact * 100:.3f} % against its error-controlled run [{version}]")
    assert same < 5e-4 and lag == 0
    assert same_lin > 10 * same
    assert exact < 0.01


@pytest.mark.ngspice
@pytest.mark.parametrize("temp", [0.0, 60.0])
def test_capacitance_temperature_law_as_ngspice(temp, version):
    """The germanium stage away from TNOM with capacitances ten times its
    card's, so that their temperature law (VJ and CJ0 with the band gap,
    docs/references.md) shows: within 0.01 dB and 0.05 degrees of ngspice
    (a reference potential taken at the circuit temperature instead of
    TNOM is 0.85 degrees off at 0 degC)."""
    from solderless.engine.formats.spice import parse_netlist
    text = re.sub(r"^\.temp .*$", f".temp {temp:g}", S.load_netlist("ge_stage"), flags=re.M)
    text = text.replace("CJE=30p", "CJE=300p").replace("CJC=12p", "CJC=120p")
    cards = re.sub(r"^(VIN\s+\S+\s+\S+\s+DC\s+\S+).*$", r"\1 AC 1", text, flags=re.M)
    f, ref = S.run_ac(cards, "out", 20.0, 20e3, 10)
    circ = parse_netlist(text, file="ge_stage.cir", in_source="VIN", out_node="out").circuit
    _, H, _ = ac_response(circ, f)
    db, deg = _compare(H, ref)
    print(f"ge_stage x10 caps at {temp:g} degC: {db:.2e} dB, {deg:.2e} deg [{version}]")
    assert db < 0.01 and deg < 0.05
