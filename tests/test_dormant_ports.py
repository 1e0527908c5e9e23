"""Dormant ports: the port solve without the op-amps' clamps while they
draw nothing (solderless/engine/solver/dormant.py).

Expected values come from the model's own definitions, not from the code
under test: the clamp law of solderless/engine/devices/opamp.py (exactly
zero more than CLAMP_OFF knee widths below each threshold), the full
model's linear equations solved directly with numpy for the reduced lane's
algebra, and the full port solve (``dormant_ports=False``) for renders:
both solve the same equations, so they must agree within the solver's
error (the kernel's 1 uV tolerance; bench/bench_accuracy.py puts the
built-in designs' outputs within -95 dB RMS of a 1e-11 V tolerance).
"""
import numpy as np
import pytest

from solderless.engine.circuit import Circuit, Element as E
from solderless.engine.design import load_design
from solderless.engine.devices import opamp
from solderless.engine.solver import Simulator
from solderless.engine.solver import dormant
from solderless.engine.solver import kernel_layout as KL
from solderless.engine.solver.mna import Network

FS = 48000.0


def stage(diodes: bool, vcc: float = 9.0) -> Circuit:
    """An inverting amplifier, gain -10 about a 4.5 V reference on a single
    supply; with ``diodes`` a pair of silicon diodes from its output to the
    reference through 10 kohm (a clipper after the gain: three ports, two
    left on the reduced lane, which then runs the lean runner's two-port
    loop instead of its four-port one;
    without, the reduced lane has no port at all)."""
    els = [E("VCC", "V", ("vcc", "0"), vcc), E("VREF", "V", ("ref", "0"), 4.5),
           E("Vin", "V", ("in", "ref"), 0.0), E("R1", "R", ("in", "n"), 10e3),
           E("RF", "R", ("n", "out"), 100e3),
           E("U1", "OPAMP", ("ref", "n", "out", "vcc", "0"), 0.0, {}),
           E("RL", "R", ("out", "ref"), 100e3)]
    out = "out"
    if diodes:
        els += [E("RS", "R", ("out", "c"), 10e3),
                E("D1", "D", ("c", "ref"), 0.0, {"IS": 2.5e-9, "N": 1.75}),
                E("D2", "D", ("ref", "c"), 0.0, {"IS": 2.5e-9, "N": 1.75})]
        out = "c"
    return Circuit(els, input_source="Vin", output=(out, "0"))


def burst(n_each: int = 9600) -> np.ndarray:
    """440 Hz: 50 mV (linear), 1 V (the output wants 10 V: clips on both
    rails), 50 mV again."""
    t = np.arange(3 * n_each) / FS
    level = np.repeat([0.05, 1.0, 0.05], n_each)
    return level * np.sin(2 * np.pi * 440.0 * t)


def render(circ, x, dormant_ports, block=4096, **kw):
    sim = Simulator(circ, fs=FS, block_max=block, dormant_ports=dormant_ports, **kw)
    return sim, sim.process(x)


def test_the_clamp_is_exactly_zero_inside_its_dead_zone_and_not_outside():
    net = Network(stage(False))
    (port, lo, hi), = dormant.dead_zones(net)
    # opamp.py: each clamp is exactly zero more than CLAMP_OFF knee widths
    # (VSOFT) below its threshold VHR from its rail
    d = opamp.DEFAULTS
    edge = opamp.CLAMP_OFF * d["VSOFT"]
    assert lo == pytest.approx(0.0 + d["VHR"] + edge, abs=1e-8)
    assert hi == pytest.approx(9.0 - d["VHR"] - edge, abs=1e-8)
    el, mod, lay, po = net.devices[0]
    for v, zero in ((lo + 1e-6, True), (hi - 1e-6, True), (4.5, True),
                    (lo - 1e-3, False), (hi + 1e-3, False)):
        vv, ii, G = np.array([v]), np.zeros(1), np.zeros((1, 1))
        mod.evaluate(lay.par, 0, vv, 0, ii, G)
        assert (ii[0] == 0.0 and G[0, 0] == 0.0) == zero, v


def test_a_supply_edit_moves_the_dead_zone():
    sim = Simulator(stage(False), fs=FS)
    hi0 = sim._arr[2][0, 1]
    sim.set_values({"VCC": 12.0})
    sim.process(np.zeros(64))
    d = opamp.DEFAULTS
    assert hi0 == pytest.approx(9.0 - d["VHR"] - opamp.CLAMP_OFF * d["VSOFT"], abs=1e-8)
    assert sim._arr[2][0, 1] == pytest.approx(12.0 - d["VHR"] - opamp.CLAMP_OFF * d["VSOFT"],
                                              abs=1e-8)


def test_the_reduced_model_is_the_full_one_with_the_clamps_drawing_nothing():
    """The reduced lane's matrices against the full model's equations
    solved directly: for any z and active-port currents i_A, with the
    dormant ports' device currents zero (kernel current -PORT_G0*v_D),
    the full model gives p_A + K_AA i_A + K_AD i_D, the state update
    x0 + Az z + C i and the output y0 + Yz z + Fy i + Vy v."""
    sim = Simulator(stage(True), fs=FS)
    pl = sim._plan
    m = sim._model
    full, red = m.lanes
    A, D, n = pl.active, pl.dormant, pl.npt
    rng = np.random.default_rng(1)
    z = rng.normal(size=sim._z.size)
    iA = rng.normal(size=A.size) * 1e-3
    K = m.K
    p = m.p0[:n] + m.Pz[:n] @ z
    # v_D = p_D + K_DA i_A + K_DD i_D with i_D = -G0 v_D: a linear solve
    vD = np.linalg.solve(np.eye(D.size) + KL.PORT_G0 * K[np.ix_(D, D)],
                         p[D] + K[np.ix_(D, A)] @ iA)
    i = np.zeros(n)
    i[A] = iA
    i[D] = -KL.PORT_G0 * vD
    v = p + K @ i
    na = A.size
    pr = red.p0[:na] + red.Pz[:na] @ z
    Kr = red.Kk[:red.Kk.shape[1]][:na, :na]
    assert np.allclose(pr + Kr @ iA, v[A], rtol=1e-12, atol=1e-12)
    d = D.size      # the watch rows are padded to a multiple of four
    assert np.allclose(red.w0[:d] + red.Wz[:d] @ z + red.Wk[:d, :na] @ iA, vD, rtol=1e-12,
                       atol=1e-12)
    x_full = m.x0 + m.Az @ z + m.Ck[:, :n] @ i
    x_red = red.x0 + red.Az @ z + red.Ck[:, :na] @ iA
    assert np.allclose(x_red, x_full, rtol=1e-12, atol=1e-12)
    y_full = m.y0 + m.Yz @ z + m.Fyk[:, :n] @ i + m.Vyk[:, :n] @ v
    y_red = red.y0 + red.Yz @ z + red.Fyk[:, :na] @ iA + red.Vyk[:, :na] @ v[A]
    assert np.allclose(y_red, y_full, rtol=1e-12, atol=1e-12)
    # the full lane watches the same voltages through its own port rows
    assert np.allclose(full.w0[:d] + full.Wz[:d] @ z + full.Wk[:d, :n] @ i, v[D], rtol=1e-12,
                       atol=1e-12)


@pytest.mark.parametrize("diodes", [False, True], ids=["no-port-left", "two-ports-left"])
def test_a_clipping_burst_hands_over_both_ways_and_renders_as_the_full_solve(diodes):
    x = burst()
    sim_d, yd = render(stage(diodes), x, True)
    sim_f, yf = render(stage(diodes), x, False)
    _, yr = render(stage(diodes), x, False, tolerance=1e-11)   # the reference
    assert sim_d._runner[1] == ("run_block_small" if diodes else "run_block")
    st = sim_d.stats
    # quiet, clipping, quiet: at least there and back
    assert st["handovers"] >= 2
    n = x.size
    # the clipping third runs on the full lane; most of the quiet ones not
    assert n / 2 < st["reduced_samples"] < 2 * n / 3
    assert sim_f.stats["reduced_samples"] == 0
    assert np.max(yf) > 6.5 or diodes           # it does clip (opamp.py: VHR 1.5 V)
    # as accurate as the full solve at the same tolerance (both against a
    # run at 1e-11 V)
    err_d = np.max(np.abs(yd - yr))
    err_f = np.max(np.abs(yf - yr))
    assert err_d <= 2.0 * err_f
    assert err_d < 2e-5 * np.max(np.abs(yr - np.mean(yr)))


def test_the_block_size_does_not_change_the_render():
    """Handovers fall on kernel samples (the watch's count runs on across
    blocks), so the render is the same whatever the blocks."""
    x = burst(4800)
    _, y1 = render(stage(True), x, True, block=64)
    _, y2 = render(stage(True), x, True, block=4096)
    assert np.array_equal(y1, y2)


def test_a_live_edit_on_the_reduced_lane():
    """A part edit between blocks: the reduced lane takes the new model as
    the full one does (against the full solve at 1e-11 V, as accurate as
    the full solve at the default tolerance)."""
    x = burst(4800)
    out = []
    for dp, tol in ((True, None), (False, None), (False, 1e-11)):
        sim = Simulator(stage(True), fs=FS, block_max=1024, dormant_ports=dp, tolerance=tol)
        y = np.empty_like(x)
        for s in range(0, x.size, 1024):
            if s == 6144:
                sim.set_values({"RF": 47e3})
            sim.process_into(x[s:s + 1024], y[s:s + 1024])
        out.append(y)
    assert np.max(np.abs(out[0] - out[2])) <= 2.0 * np.max(np.abs(out[1] - out[2]))


def test_octave_up_runs_mostly_on_the_reduced_lane():
    """The built-in op-amp octave at a guitar's level: its three op-amps
    stay off their rails, so its seven ports solve as four
    (bench/bench_designs.py times it)."""
    d = load_design("octave-up")
    t = np.arange(int(0.5 * FS)) / FS
    x = 0.1 * np.sin(2 * np.pi * 196.0 * t) * np.exp(-2.0 * t)
    ys = []
    for dp in (True, False):
        sim = Simulator(d.flatten(), fs=FS, oversample=d.oversample, dormant_ports=dp)
        ys.append(sim.process(x))
        if dp:
            assert sim.n_ports == 7 and sim._plan.active.size == 4
            assert sim.stats["reduced_samples"] > 0.9 * sim.stats["samples"]
    assert np.max(np.abs(ys[0] - ys[1])) < 1e-5 * np.max(np.abs(ys[1] - np.mean(ys[1])))
