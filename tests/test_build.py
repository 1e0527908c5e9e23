"""Build sheet, tolerance Monte Carlo and value sweeps (issue 19).

Sources: JCGM 100:2008 (GUM) law of propagation of uncertainty; IEC 60063
preferred values and the customary series tolerances; ngspice (tests/spice_ref.py);
margins marked common practice (docs/references.md, "Building from a simulation").
"""
from __future__ import annotations

import csv
import html.parser
import json
import math
import threading

import numpy as np
import pytest

from solderless.engine.analysis import build as B
from solderless.engine.analysis import montecarlo as MC
from solderless.engine.analysis.sweep import make_grid, parse_pot, parse_values
from solderless.app.cli import main
from solderless.engine.design import builtin_designs, load_design
from solderless.engine.errors import DesignError, SolderlessError

from pathlib import Path

#: our own one-transistor booster, part by part (stable part names)
BOOSTER = Path(__file__).resolve().parent / "build_booster.toml"
BOOSTER_ARG = str(BOOSTER)

DIVIDER = """divider for the uncertainty check
VIN src 0 DC 0
R1 src out 10k
R2 out 0 10k
.end
"""
# corner at 1 kHz: 1 / (2 pi 10k 15.9155n)
RC = """RC low-pass for the uncertainty check
VIN src 0 DC 0
R1 src out 10k
C1 out 0 15.9155n
.end
"""


def _netlist_design(tmp_path, name, text):
    p = tmp_path / f"{name}.cir"
    p.write_text(text)
    return load_design(str(p))


def _gains(design, n, dist, seed=7):
    spec = MC.TrialSpec(design, seed=seed, dist=dist, control=False, device_spread=False)
    rr = MC.run_trials(spec, range(n), workers=1)
    return np.array([10 ** (r["gain_db"] / 20) for r in rr.results])


# ---------------------------------------------------------------- GUM checks

def test_divider_against_gum(tmp_path):
    """JCGM 100:2008 (GUM) 5.1.2: u_c(H)^2 = sum (dH/dRi)^2 u(Ri)^2. A uniform
    draw over +-a has u = a / sqrt(3) (GUM 4.3.7). Equal resistors with
    tolerance t: u(H)/H = t / sqrt(6); mean H = 1/2 to first order."""
    d = _netlist_design(tmp_path, "divider", DIVIDER)
    t = B.DEFAULT_TOLERANCE["resistor"]
    n = 400
    h = _gains(d, n, "uniform")
    u = 0.5 * t / math.sqrt(6.0)
    se_mean = u / math.sqrt(n)
    se_sd = u / math.sqrt(2 * (n - 1))
    assert abs(h.mean() - 0.5) < 4 * se_mean
    assert abs(h.std(ddof=1) - u) < 4 * se_sd


def test_rc_corner_against_gum(tmp_path):
    """RC low-pass at its corner: |H| = (1 + (f/fc)^2)^-1/2 and
    d|H|/d ln fc = 2^-3/2 at f = fc; u(ln fc)^2 = u_R^2 + u_C^2 (GUM 5.1.6,
    relative uncertainties of a product). Normal draws with sigma = t/3."""
    d = _netlist_design(tmp_path, "rc", RC)
    tr, tc = B.DEFAULT_TOLERANCE["resistor"], B.DEFAULT_TOLERANCE["capacitor"]
    n = 400
    h = _gains(d, n, "normal", seed=11)
    u = 2 ** -1.5 * math.hypot(tr / 3, tc / 3)
    assert abs(h.mean() - 2 ** -0.5) < 4 * u / math.sqrt(n) + 1e-4
    assert abs(h.std(ddof=1) - u) < 4 * u / math.sqrt(2 * (n - 1)) + 0.02 * u


def test_draws_stay_within_tolerance(tmp_path):
    d = _netlist_design(tmp_path, "divider", DIVIDER)
    r = MC.TrialRunner(MC.TrialSpec(d, control=False))
    for i in range(50):
        for lab, e in r.draw(i).items():
            assert -0.05 <= e <= 0.05, (lab, e)


# ---------------------------------------------------------------- snapping

@pytest.mark.parametrize("value,tol,series,snapped", [
    (4800.0, 0.05, "E24", 4700.0),      # IEC 60063 E24: 4.7, 5.1
    (5000.0, 0.05, "E24", 5100.0),
    (5000.0, 0.10, "E12", 4700.0),      # E12: 4.7, 5.6
    (4990.0, 0.01, "E96", 4990.0),      # E96: 499
    (1.3e-6, 0.20, "E6", 1.5e-6),       # E6 (electrolytic): 1.0, 1.5, 2.2
    (8.0e-9, 0.05, "E24", 8.2e-9),      # E24 8.2 (not the geometric 8.3)
])
def test_snap_to_iec60063(value, tol, series, snapped):
    """IEC 60063 series and their customary tolerances (E24 5 %, E12 10 %,
    E96 1 %, E6 20 %; docs/references.md)."""
    kind = "electrolytic" if series == "E6" else "resistor"
    assert B.series_for(tol, kind) == series
    from solderless.engine.values import nearest_preferred
    assert nearest_preferred(value, series) == pytest.approx(snapped, rel=1e-12)


def test_pot_values_and_taper_words():
    """Pots come in 1-2.5-5 and 1-2-5 steps (common practice)."""
    assert B.snap_pot(47e3) == 50e3
    assert B.snap_pot(100e3) == 100e3
    assert B.snap_pot(22e3) == 20e3
    assert "logarithmic" in B.taper_words("audio")
    assert B.clock(0.0) == "about 7 o'clock" and B.clock(1.0) == "about 5 o'clock"
    assert B.clock(0.5) == "about 12 o'clock"


def test_series_for_rejects_bad_tolerance():
    for t in (0.0, 1.0, 1.5):
        with pytest.raises(DesignError):
            B.series_for(t)


# ---------------------------------------------------------------- ratings

def test_resistor_dissipation_is_i2r_of_the_operating_point():
    """P = I^2 R = V^2 / R at the DC operating point; the rating holds it at
    no more than half (common practice)."""
    from solderless.engine.solver.dcop import operating_point
    d = load_design(BOOSTER)
    rt = B.ratings(d, seconds=0.3)
    op = operating_point(d.flatten())
    circ = {e.name: e for e in d.flatten().elements}
    assert rt["resistors"]
    for r in rt["resistors"]:
        e = circ[r["part"]]
        va = op.nets.get(e.nodes[0], 0.0)
        vb = op.nets.get(e.nodes[1], 0.0)
        i = (va - vb) / e.value
        assert r["p_dc"] == pytest.approx(i * i * e.value, rel=1e-9, abs=1e-15)
        assert r["rating"] * B.POWER_MARGIN >= max(r["p_dc"], r["p_peak"])
    for c in rt["capacitors"]:
        assert c["rating"] * B.VOLTAGE_MARGIN >= c["v_max"]
        assert c["v_max"] >= abs(c["v_dc"]) - 1e-9
    s = rt["supply"]
    assert s["rest"] > 0 and s["battery_hours"] == pytest.approx(
        B.BATTERY_MAH * 1e-3 / s["average"])


class _Parser(html.parser.HTMLParser):
    def __init__(self):
        super().__init__()
        self.text = []

    def handle_data(self, data):
        self.text.append(data)


@pytest.mark.parametrize("name", sorted(builtin_designs()))
def test_build_sheet_of_every_builtin(name, tmp_path):
    """Every built-in design: the sheet opens, the parts list names every
    part once, quantities add up to the design's part count."""
    d = load_design(name)
    rep = B.build_report(d, seconds=0.3, timing=False)
    files = B.write_build(rep, tmp_path)
    text = files["sheet"].read_text(encoding="utf-8")
    p = _Parser()
    p.feed(text)
    assert "A simulation is not the hardware" in text and "local electrical codes" in text
    rows = list(csv.DictReader(files["parts"].open(encoding="utf-8")))
    names = [n for r in rows for n in r["designators"].split()]
    buyable = [i.qualname for i in d.parts()
               if i.type not in ("supply", "input", "current", "switch",
                                 "vcvs", "vccs", "cccs", "ccvs")]
    assert sorted(names) == sorted(buyable)
    assert len(set(names)) == len(names)
    assert sum(int(r["quantity"]) for r in rows) == len(buyable)
    for q in buyable:
        assert q in text
    conn = files["connections"].read_text()
    assert all(s.name in conn for s in d.stages)
    # every design gets its SPICE netlist, macromodels included (issue 19;
    # ngspice runs it: tests/test_spice_macromodels.py); it reads back
    # with one X instance per OTA or op-amp and the same nets
    from solderless.engine.formats.spice import parse_netlist
    assert rep.netlist and "design.cir" in text
    cir = files["netlist"].read_text(encoding="utf-8")
    flat = d.flatten()
    macros = [e for e in flat.elements if e.kind in ("OTA", "OPAMP")]
    assert sum(1 for ln in cir.splitlines() if ln.upper().startswith("X.")) == len(macros)
    back = parse_netlist(cir).circuit
    nets = {n.lower() for e in back.elements for n in e.nodes}
    assert {n.lower() for e in flat.elements for n in e.nodes if "#" not in n} <= nets


def test_snapped_values_resolve_and_warn(tmp_path):
    """A part off the series is snapped; the re-solve reports what moved and
    warns when a figure moves by more than the tolerance."""
    d = load_design(BOOSTER)
    d.set_value("boost.RC", "11.9k")         # E24 neighbours 11k and 12k
    d.set_tolerance("boost.RC", "1%")        # but a 1 % part: E96 has 11.8k
    lines = {ln.designator: ln for ln in B.part_lines(d)}
    assert lines["boost.RC"].series == "E96"
    assert lines["boost.RC"].snapped == pytest.approx(11.8e3)
    d.set_value("boost.RE2", "1.4k")         # 5 %: E24 1.3k or 1.5k
    rep = B.build_report(d, seconds=0.2, timing=False)
    figs = {r["figure"]: r for r in rep.figure_rows}
    assert figs["gain at 1 kHz"]["nominal"] != figs["gain at 1 kHz"]["snapped"]
    # the bias of the collector moves by the snap of RC: that is reported
    assert any(r["figure"].startswith("bias ") for r in rep.figure_rows)


# ---------------------------------------------------------------- ngspice

@pytest.mark.ngspice
def test_monte_carlo_draws_against_ngspice():
    """For three draws, the operating point of the written netlist with the
    drawn values (and transistor gains) run through ngspice matches ours
    within 1 mV (tests/spice_ref.py)."""
    from spice_ref import circuit_cards, require_ngspice, run_op
    from solderless.engine.formats.spice import circuit_to_netlist
    require_ngspice()
    d = load_design(BOOSTER)
    r = MC.TrialRunner(MC.TrialSpec(d, seed=3, control=False))
    assert any(":BF" in dr.label for dr in r.draws)
    for k in range(3):
        res = r.run(k)
        ref = run_op(circuit_cards(circuit_to_netlist(r.circuit_for(res["draws"]))))
        assert ref, "ngspice returned no operating point"
        for net, v in res["nets"].items():
            if net.lower() in ref:
                assert abs(ref[net.lower()] - v) < 1e-3, (k, net, ref[net.lower()], v)


# ---------------------------------------------------------------- same seed

def _key(rr):
    return [(r["index"], r["gain_db"], r["zin"], r["headroom"], tuple(sorted(r["draws"].items())))
            for r in rr.results]


def test_same_seed_serial_pool_and_dask():
    """Trial k draws from SeedSequence(seed, spawn_key=(k,)): the same
    results serially, in a process pool and on a Dask LocalCluster."""
    d = load_design(BOOSTER)
    spec = MC.TrialSpec(d, seed=5, control=False)
    serial = MC.run_trials(spec, range(6), workers=1)
    # spawn: fresh interpreters, so the spec really travels by pickle
    pool = MC.run_trials(spec, range(6), workers=2, chunk=2, mp_context="spawn")
    assert _key(serial) == _key(pool)
    distributed = pytest.importorskip("dask.distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster, \
            distributed.Client(cluster) as client:
        dk = MC.run_trials(spec, range(6), cluster=client, chunk=2)
    assert _key(serial) == _key(dk)
    other = MC.run_trials(MC.TrialSpec(d, seed=6, control=False), range(6), workers=1)
    assert _key(other) != _key(serial)


# ---------------------------------------------------------------- bad input

def test_interrupted_run_keeps_partial_results():
    d = load_design(BOOSTER)
    spec = MC.TrialSpec(d, seed=1, control=False)
    stop = threading.Event()

    def tick(done, total):
        if done >= 3:
            stop.set()
    rr = MC.run_trials(spec, range(20), workers=1, progress=tick, stop=stop)
    assert rr.interrupted and len(rr.results) == 3

    def ctrl_c(done, total):
        if done >= 2:
            raise KeyboardInterrupt
    rr = MC.run_trials(spec, range(20), workers=1, progress=ctrl_c)
    assert rr.interrupted and [r["index"] for r in rr.results] == [0, 1]


def test_cli_interrupted_montecarlo_writes_partial(tmp_path, monkeypatch, capsys):
    real = MC.TrialRunner.run

    def run(self, index):
        if index == 4:
            raise KeyboardInterrupt
        return real(self, index)
    monkeypatch.setattr(MC.TrialRunner, "run", run)
    rc = main(["montecarlo", BOOSTER_ARG, "--trials", "10", "--workers", "1", "--quick",
               "--out", str(tmp_path)])
    assert rc == 130
    rows = list(csv.DictReader((tmp_path / "trials.csv").open()))
    assert [int(r["trial"]) for r in rows] == [0, 1, 2, 3]
    s = json.loads((tmp_path / "summary.json").read_text())
    assert s["interrupted"] and s["trials"] == 4 and s["requested"] == 10
    assert "stopped after 4 of 10" in capsys.readouterr().err


@pytest.mark.parametrize("argv,needle", [
    (["sweep", BOOSTER_ARG, "--part", "boost.NOPE", "--values", "1u,2u"], "no part named"),
    (["sweep", BOOSTER_ARG, "--part", "boost.CE", "--values", ""], "empty value range"),
    (["sweep", BOOSTER_ARG, "--part", "boost.CE", "--values", "E12:5u..5u4"], "holds no E12"),
    (["sweep", BOOSTER_ARG, "--part", "boost.Q1", "--values", "1u"], "has no value"),
    (["sweep", BOOSTER_ARG, "--part", "boost.CE", "--values", "1u", "--pot", "level.LEVEL=0:1"],
     "cannot read pot range"),
    (["montecarlo", BOOSTER_ARG, "--trials", "2", "--tolerance", "boost.RC=0"],
     "tolerance must lie between 0 and 100"),
    (["montecarlo", BOOSTER_ARG, "--trials", "2", "--tolerance", "boost.RC=150%"],
     "outside 0..100"),
    (["montecarlo", BOOSTER_ARG, "--trials", "0"], "--trials"),
    (["montecarlo", BOOSTER_ARG, "--seed", "-3"], "--seed"),
    (["build", BOOSTER_ARG, "--seconds", "0"], "--seconds"),
    (["montecarlo", BOOSTER_ARG, "--trials", "2", "--quick", "--cluster", "not an address"],
     "cannot reach the Dask scheduler"),
    (["sweep", BOOSTER_ARG, "--part", "boost.CE", "--values", "1u", "--metric", "release"],
     "needs a design with a control"),
    (["montecarlo", BOOSTER_ARG, "--trials", "2", "--limit", "speed=1:2"], "unknown metric"),
])
def test_bad_input_clear_errors(argv, needle, capsys, tmp_path):
    rc = main(argv + ["--out", str(tmp_path / "o")])
    err = capsys.readouterr().err
    assert rc == 2
    assert needle in err and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1


def test_zero_tolerance_in_design_file_names_file_and_line(tmp_path):
    src = BOOSTER.read_text()
    src = src.replace('value = "10k"\n', 'value = "10k"\ntolerance = "0%"\n', 1)
    p = tmp_path / "zero.toml"
    p.write_text(src)
    d2 = load_design(str(p))
    with pytest.raises(SolderlessError) as exc:
        MC.TrialRunner(MC.TrialSpec(d2, control=False))
    msg = str(exc.value)
    assert "boost.RC" in msg and "tolerance" in msg and "zero.toml" in msg
    line = src.splitlines().index('name = "RC"') + 1      # the part's table
    assert f"zero.toml:{line}:" in msg


# ---------------------------------------------------------------- sweeps

def test_value_ranges():
    """E12 between 1u and 47u: 1, 1.2 ... 4.7, 5.6 ... 47 (IEC 60063 E12)."""
    v = parse_values("E12:1u..47u")
    assert len(v) == 12 * 1 + 8 + 1 - 1 + 1   # 1u..8u2 (12), 10u..47u (9)
    assert v[0] == pytest.approx(1e-6) and v[-1] == pytest.approx(47e-6)
    assert parse_values("1u,2u2,4u7") == pytest.approx([1e-6, 2.2e-6, 4.7e-6])
    q, rots = parse_pot("level.LEVEL=0:1:5")
    assert q == "level.LEVEL" and rots == pytest.approx([0, 0.25, 0.5, 0.75, 1])


def test_sweep_matches_direct_solve(tmp_path):
    """Each grid point equals a fresh solve of the design with that value."""
    from solderless.engine.solver import ac_response
    d = load_design(BOOSTER)
    grid = make_grid(d, "boost.RE2", "E6:1k..2k2")
    from solderless.engine.analysis.sweep import SweepJob
    spec = MC.TrialSpec(d, control=False, device_spread=False)
    rr = MC.run_trials(spec, range(len(grid)), workers=1, job=SweepJob(grid))
    assert [r["value"] for r in rr.results] == pytest.approx([1e3, 1.5e3, 2.2e3])
    for r in rr.results:
        dd = load_design(BOOSTER)
        dd.set_value("boost.RE2", r["value"])
        _, H, _ = ac_response(dd.flatten(), [1000.0])
        assert r["gain_db"] == pytest.approx(20 * math.log10(abs(H[0])), abs=1e-9)
    rc = main(["sweep", BOOSTER_ARG, "--part", "boost.RE2", "--values", "1k,2k2", "--pot",
               "level.LEVEL=0.2:0.8:2", "--workers", "1", "--quick", "--out", str(tmp_path)])
    assert rc == 0
    rows = list(csv.reader((tmp_path / "sweep.csv").open()))
    assert len(rows) == 1 + 4 and (tmp_path / "sweep.png").exists()
    assert rows[0][:3] == ["value_si", "rotation", "gain_db"] and "zin" in rows[0]


def test_sensitivity_ranks_the_part_that_matters(tmp_path):
    """Divider with a 10 % R1 and a 1 % R2: R1 drives the gain spread."""
    d = _netlist_design(tmp_path, "divider", DIVIDER)
    q = {i.name: i.qualname for i in d.parts()}
    d.set_tolerance(q["R1"], "10%")
    d.set_tolerance(q["R2"], "1%")
    spec = MC.TrialSpec(d, seed=2, control=False)
    rr = MC.run_trials(spec, range(60), workers=1)
    r = MC.runner_for(spec)
    s = MC.summary(rr.results, r.nominal_result, MC.Limits(), r.draws)
    sens = s["sensitivity"]["gain_db"]
    assert sens[0]["part"].endswith("R1") and sens[0]["share"] > 0.9


@pytest.mark.parametrize("spread,needle", [
    ('{ BF = [450, 150] }', "above high"),
    ('{ BF = [150] }', "must be [low, high]"),
    ('"wide"', "spread must be a table"),
])
def test_bad_spread_in_parts_library(tmp_path, spread, needle):
    from solderless.engine.parts import load_library
    p = tmp_path / "mine.toml"
    p.write_text(f'[npn-mine]\nkind = "NPN"\nspread = {spread}\nBF = 200\n')
    with pytest.raises(DesignError) as exc:
        load_library([p])
    assert needle in str(exc.value) and "mine.toml" in str(exc.value)


def test_spread_reaches_the_device():
    """A drawn current gain reaches the kernel's parameter vector: the
    operating point's Ic/Ib follows it (Ebers-Moll forward gain BF in the
    active region, docs/references.md)."""
    d = load_design(BOOSTER)
    r = MC.TrialRunner(MC.TrialSpec(d, seed=1, control=False))
    lo = r.measure({}, {"boost.Q1": {"BF": 150.0}})
    hi = r.measure({}, {"boost.Q1": {"BF": 450.0}})
    op = r.sim.operating_point()  # the last state: BF 450
    assert op.devices["boost.Q1"]["beta"] == pytest.approx(450.0, rel=0.05)
    assert lo["nets"] != hi["nets"]


REVERSE = """electrolytic across a 0.6 V source that also carries the signal
VIN src 0 DC 0.6
RS src b 100
C1 b 0 1u
R3 b out 1k
R4 out 0 100k
.end
"""


def test_electrolytic_reversal_is_an_error(tmp_path):
    """An electrolytic with 0.6 V across it at rest and a 1 V peak signal
    across it too reverses: an error on the sheet (docs/references.md,
    building from a simulation). With 0.2 V peak it does not."""
    d = _netlist_design(tmp_path, "rev", REVERSE)
    loud = B.ratings(d, seconds=1.0, peak=1.0)
    cap = next(c for c in loud["capacitors"] if c["part"].endswith("C1"))
    assert cap["electrolytic"] and cap["v_dc"] == pytest.approx(0.6 * 101e3 / 101.1e3,
                                                                rel=1e-6)
    assert "net b" in cap["plus"]
    assert any("reverses" in e for e in loud["errors"])
    quiet = B.ratings(d, seconds=1.0, peak=0.2)
    assert not quiet["errors"]


HUNGRY = """a circuit that draws about 23 mA from 9 V
VIN src 0 DC 0
V1 vcc 0 DC 9
RH vcc 0 390
R1 src out 1k
R2 out 0 10k
.end
"""


def test_heavy_draw_suggests_an_adapter_with_the_mains_caution(tmp_path):
    """9 V / 390 ohm = 23 mA, above the 20 mA a 9 V battery suits (common
    practice, docs/references.md): the sheet suggests an adapter and names
    local codes; battery life = capacity / current (docs/references.md)."""
    d = _netlist_design(tmp_path, "hungry", HUNGRY)
    rt = B.ratings(d, seconds=0.2)
    assert rt["supply"]["rest"] == pytest.approx(9 / 390, rel=1e-6)
    assert rt["supply"]["battery_hours"] == pytest.approx(0.575 / (9 / 390), rel=1e-3)
    assert any("adapter" in w and "local codes" in w for w in rt["warnings"])
    r = next(x for x in rt["resistors"] if x["part"] == "RH")
    assert r["p_dc"] == pytest.approx(81 / 390) and r["rating"] == 0.5   # 0.21 W <= 50 %


def test_yield_fails_a_trial_whose_transistor_leaves_its_region():
    """A base resistor to ground of 10k instead of 220k against the 470k
    collector-feedback resistor holds the booster's base below a conducting
    junction's 0.6 V (at most 9 V * 10k/480k = 0.19 V): the transistor is cut
    off and the trial fails the region limit even with a gain limit too wide
    to matter."""
    d = load_design(BOOSTER)
    r = MC.TrialRunner(MC.TrialSpec(d, control=False))
    wide = MC.Limits(gain_db=200.0)
    ok = r.measure({"boost.RB2": 220e3}, {})
    bad = r.measure({"boost.RB2": 10e3}, {})
    bad["error"] = ok["error"] = ""
    assert ok["in_region"] and MC.passes(ok, r.nominal_result, wide)
    assert bad["regions"]["boost.Q1"] == "cut-off" and not bad["in_region"]
    assert not MC.passes(bad, r.nominal_result, wide)
    assert MC.passes(bad, r.nominal_result, MC.Limits(gain_db=200.0, regions=False))


def test_cli_writes_trial_netlists(tmp_path):
    """--netlists K writes the drawn values: a drawn resistor's value appears
    in the netlist exactly as the trial used it."""
    rc = main(["montecarlo", BOOSTER_ARG, "--trials", "3", "--workers", "1", "--quick",
               "--netlists", "2", "--out", str(tmp_path)])
    assert rc == 0
    rows = list(csv.DictReader((tmp_path / "trials.csv").open()))
    from solderless.engine.formats.spice import parse_netlist
    for k in (0, 1):
        text = (tmp_path / f"trial-{k}.cir").read_text()
        nl = parse_netlist(text)
        el = {e.name: e for e in nl.circuit.elements}
        rc_el = next(e for n, e in el.items() if n.upper().endswith("BOOST.RC"))
        # the CSV keeps 9 significant digits of the draw
        assert rc_el.value == pytest.approx(10e3 * (1 + float(rows[k]["boost.RC"])), rel=1e-8)
    assert not (tmp_path / "trial-2.cir").exists()


def test_release_sweep_follows_the_time_constant_capacitor():
    """The built-in compressor's release is set by the detector's time-constant
    capacitor (detector.CT): a first-order recovery's time constant is
    R * C, so the 63 % release time grows in proportion to C (time-constant
    convention, Giannoulis et al. 2012, docs/references.md). 22 uF needs a
    longer tail than the default render: the runner extends it."""
    from solderless.engine.analysis.sweep import SweepJob
    d = load_design("flagship")
    grid = make_grid(d, "detector.CT", "4u7,22u")
    spec = MC.TrialSpec(d, threshold=False, device_spread=False)
    rr = MC.run_trials(spec, range(len(grid)), workers=1, job=SweepJob(grid))
    a, b = (r["release"] for r in rr.results)
    assert math.isfinite(a) and math.isfinite(b)
    assert b / a == pytest.approx(22 / 4.7, rel=0.05)
