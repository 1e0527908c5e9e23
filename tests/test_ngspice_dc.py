"""DC operating point of Solderless against ngspice, node by node.

Reference: ngspice (version printed with ``-s``), ``op`` analysis with
reltol=1e-6, abstol=1e-12, vntol=1e-7, gmin=1e-12 (tests/spice_ref.py).
Tolerance: 1 mV on every node of every reference netlist (project requirement).
"""
from __future__ import annotations

import pytest

import spice_ref as S

pytest.importorskip("solderless.engine.formats.spice")

TOL_V = 1e-3


@pytest.fixture(scope="module")
def version():
    v = S.require_ngspice()
    print(f"reference simulator: {v}")
    return v


@pytest.mark.parametrize("name", S.netlist_names())
def test_operating_point_matches_ngspice(name, version):
    cards = S.load_netlist(name)
    ref = S.run_op(cards)                       # ngspice op
    Simulator = S.engine_simulator()
    circ = S.engine_circuit(name)
    if circ.output[0] not in circ.nets():      # no audio output: read any net
        circ.output = (circ.nets()[0], "0")
    sim = Simulator(circ, 48000.0)
    ours = {k.lower(): v for k, v in sim.operating_point().nets.items()}
    nodes = [k for k in ref if not k.startswith("i(")]
    assert nodes, "ngspice returned no node voltages"
    errors = {}
    for node in nodes:
        assert node in ours, f"{name}: node {node!r} missing from our operating point"
        errors[node] = ours[node] - ref[node]
    worst = max(errors, key=lambda k: abs(errors[k]))
    print(f"{name}: worst node {worst} diff {errors[worst]*1e3:+.4f} mV "
          f"(ngspice {ref[worst]:.6f} V) [{version}]")
    bad = {k: f"{v*1e3:+.3f} mV (ngspice {ref[k]:.6f} V)" for k, v in errors.items()
           if abs(v) > TOL_V}
    assert not bad, f"{name}: nodes off by more than 1 mV vs {version}: {bad}"
