"""The kernel's two paths and its tolerance, against ngspice and each other.

Circuits with at most four nonlinear ports run the lean path
(kernel.run_block_small: Newton with a fresh Jacobian every iteration,
inverted in closed form, 2 x 2 or by cofactors at four); larger ones the
generic path (kernel.run_block: chord iterations
with an earlier Jacobian's inverse, stopped on an error estimate).  Forced
onto the same circuit, at a tight tolerance both must reach the same
solution of the same discrete equations, and each must stay within the
tolerance it is given against ngspice run at the same step with its own
tolerances tightened (reference: ngspice, Debian package; the "same step"
mode of tests/spice_ref.py).
"""
import numpy as np
import pytest

import spice_ref as S
from solderless.engine.solver import Simulator
from solderless.engine.solver import kernel as K

FS = 48000.0
TWO_PORT = ["diode_clipper", "npn_ce", "pnp_ce", "njfet_cs", "njfet_follower"]
# four ports: an emitter-coupled Schmitt trigger (two BJTs), a JFET stage
# into a diode clipper
FOUR_PORT = ["schmitt_off", "jfet_clip"]


def _run(name, path, tolerance=None, seconds=0.25):
    circ = S.engine_circuit(name)
    _, x = S.engine_input(name, FS, seconds)
    sim = Simulator(circ, FS, tolerance=tolerance)
    assert sim._runner[0] == "run_block_small"    # at most four ports: the lean path
    if path == "generic":
        # the same kernel (ahead-of-time module or JIT, solver/aot.py), generic runner
        sim._runner[0] = "run_block"
        sim._run[0] = sim._K.raw("run_block")
    y = sim.process(x)
    return y, sim.stats


@pytest.mark.parametrize("name", TWO_PORT + FOUR_PORT)
def test_lean_and_generic_paths_agree(name):
    # same model, same discrete equations: at 1e-11 V both converge to the
    # same solution (differences are the tolerance, not the method)
    a, sa = _run(name, "lean", 1e-11)
    b, sb = _run(name, "generic", 1e-11)
    assert sa["nonconverged"] == 0 and sb["nonconverged"] == 0
    assert np.abs(a - b).max() < 1e-8


@pytest.mark.parametrize("path", ["lean", "generic"])
def test_default_tolerance_error_is_bounded(path):
    # The PNP stage, whose collector port sits at about -5.5 V, accumulated
    # an error of 5.7e-4 V on the generic path when a first chord step was
    # accepted with a guessed contraction rate of 0.01 while the Jacobian had
    # drifted by 3-16 % since its factorisation.  At the default tolerance
    # (1 uV on the error left per sample) the output must stay within a few
    # times 1e-5 V of a 1e-11 V run.
    ref, _ = _run("pnp_ce", "lean", 1e-11)
    y, _ = _run("pnp_ce", path)
    assert np.abs(y - ref).max() < 5e-5


@pytest.mark.skipif(S.ngspice_path() is None, reason="ngspice not installed")
@pytest.mark.parametrize("path", ["lean", "generic"])
def test_tight_tolerance_matches_ngspice_same_step(path):
    # ngspice, trapezoidal at the same fixed step with tightened tolerances
    # (spice_ref.OPTIONS: RELTOL 1e-6, VNTOL 1e-7): both solve the same
    # discrete equations, so a tight run of ours must land within ngspice's
    # own tolerance of it (the generic path, before its first chord step's
    # rate was taken from the Jacobian's drift, was 5.7e-4 V off here).
    name = "pnp_ce"
    seconds = 0.05
    y, _ = _run(name, path, 1e-11, seconds)
    ref = S.run_tran(S.load_netlist(name), 1.0 / FS, seconds, fixed_step=True,
                     nodes=("out",))
    r = ref.v["out"][: y.size]
    assert np.abs(y - r).max() < 1e-5


def test_block_runners_take_the_documented_arguments():
    # the positional contract of both runners is written down once, in
    # kernel_layout.RUN_BLOCK_ARGS (common practice: one list, checked), and
    # Simulator passes exactly that many
    import inspect

    from solderless.engine.solver import kernel_layout as KL
    for run in (K.run_block, K.run_block_small):
        assert tuple(inspect.signature(run.py_func).parameters) == KL.RUN_BLOCK_ARGS
    sim = Simulator(S.engine_circuit("diode_clipper"), FS)
    assert len(sim._args(sim._model)) == len(KL.RUN_BLOCK_ARGS) - KL.RUN_BLOCK_ARGS.index("pdec") - 1


@pytest.mark.parametrize("name", ["diode_clipper", "gp_fuzz"])
def test_statistics_are_not_solver_state(name):
    # the run statistics are only counted: clearing them between blocks
    # leaves every output sample as it was (the solver state is apart)
    circ = S.engine_circuit(name)
    _, x = S.engine_input(name, FS, 0.1)
    a = Simulator(circ, FS)
    ya = a.process(x)
    b = Simulator(circ, FS)
    yb = np.empty_like(x)
    for s in range(0, x.size, 256):
        b._stats[:] = 0
        b.process_into(x[s:s + 256], yb[s:s + 256])
    assert np.array_equal(ya, yb)
    assert a.stats["samples"] == x.size and b.stats["samples"] == (x.size - 1) % 256 + 1


def _edges(y):
    """Crossing instants (samples, linearly interpolated) of y through the
    middle of its swing."""
    mid = 0.5 * (y.max() + y.min())
    s = np.sign(y - mid)
    k = np.nonzero(s[1:] != s[:-1])[0]
    return k + (mid - y[k]) / (y[k + 1] - y[k])


@pytest.mark.skipif(S.ngspice_path() is None, reason="ngspice not installed")
@pytest.mark.parametrize("path", ["lean", "generic"])
def test_schmitt_edges_converge_and_land_where_ngspice_switches(path):
    # At each switching edge of the Schmitt trigger netlist the branch the
    # last sample sat on ends in a fold: Newton circles it and continuation
    # in p cannot pass it, so the kernel used to keep the previous solution
    # there (one sample per edge, 50 in these 0.25 s) and switch a sample
    # late.  Pseudo-transient continuation (kernel/newton.py) crosses the
    # fold: every sample converges, and every edge lands within one step of
    # ngspice's (trapezoidal at the same fixed step, which cuts its own
    # step at the edge: the instants a fixed step can reach are a step
    # apart).  Measured: within 1.004 samples, mean -0.24 (before: up to
    # 1.74, mean +0.75 late).
    seconds = 0.25
    y, st = _run("schmitt_off", path, None, seconds)
    assert st["nonconverged"] == 0
    assert st["pseudo_transient"] > 0            # the edges did need the rescue
    ref = S.run_tran(S.load_netlist("schmitt_off"), 1.0 / FS, seconds, fixed_step=True,
                     nodes=("out",))
    er, ey = _edges(np.asarray(ref.v["out"])), _edges(y)
    assert len(er) == len(ey) == 50              # 25 periods of 100 Hz
    d = ey - er
    assert np.abs(d).max() < 1.1
    assert abs(d.mean()) < 0.5
