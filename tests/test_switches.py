"""Voltage- and current-controlled switches (S with .model SW, W with
.model CSW) against ngspice-39.

References (docs/references.md, "Netlist syntax and behavioural sources"
and "Reference simulator"): ngspice's manual, chapter "Switches" (VT, VH,
RON, ROFF; IT, IH; ON/OFF), and ngspice-39 in batch mode: ``op`` and
``tran`` at the same step (tests/spice_ref.py).  tests/netlists/switches.cir
also runs through the generic operating-point, transient and export checks.
"""
from __future__ import annotations

import numpy as np
import pytest

import spice_ref as S
from solderless.engine.errors import DesignError
from solderless.engine.formats.spice import parse_netlist
from solderless.engine.solver import Simulator
from solderless.engine.solver.dcop import operating_point

FS = 48000.0


@pytest.fixture(scope="module")
def version():
    return S.require_ngspice()


@pytest.mark.parametrize("node", ["out", "b", "d"])
def test_switching_matches_ngspice_transient(node, version):
    """Every switch's node over three periods of the control: NRMSE at most
    1 % (measured 0.48-0.60 %: ngspice's time points sit a fraction of a step
    off the sample grid, so an edge can fall one sample apart), the same
    number of switchings."""
    cards = S.load_netlist("switches")
    ref = S.run_tran(cards, 1 / FS, 0.03, nodes=(node,))
    circ = S.engine_circuit("switches", keep_wave=True)
    circ.input_source = None
    circ.output = (node, "0")
    sim = Simulator(circ, FS)
    y = sim.process(np.zeros(ref.t.size))
    err, lag = S.nrmse(ref.v[node], y)
    assert err < 0.01 and lag == 0, f"{node}: NRMSE {err:.4f} lag {lag} [{version}]"
    mid = 0.5 * (np.max(y) + np.min(y))
    edges = lambda s: int(np.sum(np.abs(np.diff((s > mid).astype(int)))))  # noqa: E731
    assert edges(y) == edges(ref.v[node]) >= 4


def test_hysteresis_and_on_keyword_at_the_operating_point(version):
    """A control inside the band: the switch keeps its initial state (off,
    or on with ON); outside it, the state follows the control."""
    base = ("hold\nVC c 0 DC {vc}\nVP vp 0 DC 5\nR1 vp a 10k\nS1 a 0 c 0 SM\n"
            "R2 vp b 10k\nS2 b 0 c 0 SM ON\nVS c 0x DC 0\nRX 0x 0 1\n"
            ".model SM SW(VT=0.5 VH=0.3 RON=100 ROFF=1meg)\n")
    for vc in (0.1, 0.6, 0.9):
        cards = base.replace("{vc}", repr(vc)).replace("VS c 0x DC 0\nRX 0x 0 1\n", "")
        ref = S.run_op(cards)
        nl = parse_netlist(cards, file="hold.cir", out_node="a")
        ours = operating_point(nl.circuit).nets
        for node in ("a", "b"):
            assert ours[node] == pytest.approx(ref[node], abs=1e-6), (vc, node, version)


def test_switch_card_errors_name_the_line():
    for card, what in [("S1 a 0 c 0 NOPE", "model 'NOPE' is not defined"),
                       ("S1 a 0 c 0", "needs its nodes"),
                       ("W1 a 0 R1 WM", "not a voltage source"),
                       ("W1 a 0 V1 SM", "needs a CSW model")]:
        with pytest.raises(DesignError) as ei:
            parse_netlist(f"t\nV1 c 0 1\nR1 a 0 1k\n{card}\n"
                          ".model SM SW(VT=1)\n.model WM CSW(IT=1m)\n", file="sw.cir")
        msg = str(ei.value)
        assert "sw.cir:4" in msg and what in msg, msg
