"""User mistakes in a flat circuit fail cleanly with a SolderlessError that
names the part (never a traceback from numpy, never NaN)."""
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

from solderless.engine.circuit import Circuit, Element as E, Where
from solderless.engine.errors import DesignError, SolderlessError
from solderless.engine.solver import Simulator, ac_response


def _c(*els, **kw):
    return Circuit(list(els), **kw)


@pytest.mark.parametrize("value", [0.0, -1.0, float("nan")])
def test_nonpositive_resistor_names_part_and_line(value):
    c = _c(E("V1", "V", ("out", "0"), 1.0),
           E("R7", "R", ("out", "0"), value, where=Where("amp.toml", 12)))
    with pytest.raises(DesignError) as ei:
        Simulator(c)
    msg = str(ei.value)
    assert "R7" in msg and "amp.toml:12" in msg


def test_zero_capacitor_and_inductor():
    for kind in ("C", "L"):
        c = _c(E("V1", "V", ("in", "0"), 1.0), E("R1", "R", ("in", "out"), 1e3),
               E("X1", kind, ("out", "0"), 0.0))
        with pytest.raises(DesignError, match="X1"):
            Simulator(c)


def test_floating_net_names_net():
    # 'mid' only connects through capacitors: no DC path to ground
    c = _c(E("V1", "V", ("in", "0"), 1.0), E("C1", "C", ("in", "mid"), 1e-6),
           E("C2", "C", ("mid", "out"), 1e-6), E("R1", "R", ("out", "0"), 1e3))
    with pytest.raises(DesignError, match="mid"):
        Simulator(c)


def test_voltage_source_loop():
    c = _c(E("V1", "V", ("out", "0"), 1.0), E("V2", "V", ("out", "0"), 2.0))
    with pytest.raises(DesignError, match="V2"):
        Simulator(c)
    c = _c(E("V1", "V", ("out", "0"), 1.0), E("L1", "L", ("out", "0"), 1e-3))
    with pytest.raises(DesignError, match="L1"):
        Simulator(c)


def test_missing_ground():
    c = _c(E("V1", "V", ("a", "b"), 1.0), E("R1", "R", ("a", "b"), 1e3))
    with pytest.raises(DesignError, match="ground"):
        Simulator(c)


def test_bad_device_parameters():
    base = [E("V1", "V", ("vcc", "0"), 9.0), E("R1", "R", ("vcc", "out"), 1e3)]
    for el in (E("Q1", "Q", ("out", "vcc", "0"), 0.0, {"TYPE": "NPX"}),
               E("Q1", "Q", ("out", "vcc", "0"), 0.0, {"BF": -3}),
               E("Q1", "Q", ("out", "vcc", "0"), 0.0, {"WIBBLE": 1}),
               E("Q1", "OTA", ("out", "0", "out", "vcc", "0"), 0.0, {"JUNCTIONS": 3})):
        with pytest.raises(DesignError, match="Q1"):
            Simulator(_c(*base, el))


def test_wrong_node_count_and_unknown_kind():
    with pytest.raises(DesignError, match="Q1"):
        Simulator(_c(E("V1", "V", ("out", "0"), 1.0), E("Q1", "Q", ("out", "0"), 0.0)))
    with pytest.raises(DesignError, match="X1"):
        Simulator(_c(E("V1", "V", ("out", "0"), 1.0), E("X1", "T", ("out", "0"), 1.0)))


def test_ac_without_input_source():
    with pytest.raises(DesignError):
        ac_response(_c(E("V1", "V", ("out", "0"), 1.0), E("R1", "R", ("out", "0"), 1.0)), [1e3])


# ---------------------------------------------------------------- hypothesis
NETS = ["0", "in", "a", "b", "out"]


@st.composite
def small_circuits(draw):
    els = [E("Vin", "V", ("in", "0"), draw(st.sampled_from([0.0, 0.5, -1.0]))),
           E("Vcc", "V", ("vcc", "0"), draw(st.sampled_from([9.0, -9.0, 3.0])))]
    nets = NETS + ["vcc"]
    n = draw(st.integers(2, 8))
    for k in range(n):
        kind = draw(st.sampled_from(["R", "R", "C", "D", "Q", "M", "E", "G", "F", "H"]))
        if kind == "M":
            nodes = tuple(draw(st.sampled_from(nets)) for _ in range(4))
            els.append(E(f"M{k}", "M", nodes, 0.0,
                         {"TYPE": draw(st.sampled_from(["NMOS", "PMOS"])),
                          "VTO": draw(st.sampled_from([1.5, -1.0, 0.0])), "KP": 1e-3,
                          "GAMMA": draw(st.sampled_from([0.0, 0.5]))}))
        elif kind in ("F", "H"):
            nodes = (draw(st.sampled_from(nets)), draw(st.sampled_from(nets)))
            els.append(E(f"{kind}{k}", kind, nodes, draw(st.sampled_from([-10.0, 0.5, 3.0])),
                         {"CONTROL": draw(st.sampled_from(["Vin", "Vcc", "Vnone"]))}))
        elif kind in ("E", "G"):
            nodes = tuple(draw(st.sampled_from(nets)) for _ in range(4))
            els.append(E(f"{kind}{k}", kind, nodes,
                         draw(st.sampled_from([-10.0, 0.5, 3.0, 1e-3]))))
        elif kind == "Q":
            nodes = tuple(draw(st.sampled_from(nets)) for _ in range(3))
            els.append(E(f"Q{k}", "Q", nodes, 0.0,
                         {"TYPE": draw(st.sampled_from(["NPN", "PNP"])), "IS": 1e-14}))
        else:
            a = draw(st.sampled_from(nets))
            b = draw(st.sampled_from(nets))
            val = {"R": draw(st.sampled_from([10.0, 1e3, 47e3, 1e6])),
                   "C": draw(st.sampled_from([1e-9, 1e-6, 100e-6])), "D": 0.0}[kind]
            els.append(E(f"{kind}{k}", kind, (a, b), val))
    return Circuit(els, input_source="Vin")


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(small_circuits(), st.floats(0.01, 50.0))
def test_random_circuits_run_finite_or_fail_cleanly(circ, amp):
    # random R/C/diode/BJT/MOSFET/controlled-source networks: either a
    # SolderlessError or finite output
    try:
        sim = Simulator(circ)
    except SolderlessError:
        return
    rng = np.random.default_rng(1)
    y = sim.process(amp * rng.standard_normal(300))
    assert np.all(np.isfinite(y))
    assert sim.stats["samples"] == 300
