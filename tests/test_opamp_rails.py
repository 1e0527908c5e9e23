"""The op-amp's output clamps on one port when its rails are fixed.

solderless/engine/devices/opamp.py carries both clamps on one port (p,
ground) when both supply rails sit at fixed potentials, and on two ports
(p, vcc) and (vee, p) otherwise.  The node voltages must be those of the
two-port form (the same equations), a supply edit while playing must move
the clipping level as a fresh start at the new supply does, and the swing
must stay within VHR of the rails (the model's definition, opamp.py).
Expected values: the two-port form of the same circuit, and the inverting
amplifier's gain -Rf/Rin (common practice).
"""
import numpy as np
import pytest

from solderless.engine.circuit import Circuit, Element as E
from solderless.engine.solver import Simulator
from solderless.engine.solver.mna import Network, fixed_potentials

FS = 48000.0


def inverting(rail_r: float | None = None, vcc: float = 9.0) -> Circuit:
    """An inverting amplifier, gain -10, about a 4.5 V reference, on a single
    supply, the input riding on the reference (no coupling capacitor, so
    the output depends on no history beyond the op-amp's pole).  rail_r: a resistor between the supply and the op-amp's v+ pin
    (the rail is then not a fixed potential)."""
    rail = "vcc" if rail_r is None else "vr"
    els = [E("VCC", "V", ("vcc", "0"), vcc), E("VREF", "V", ("ref", "0"), 4.5),
           E("Vin", "V", ("in", "ref"), 0.0), E("R1", "R", ("in", "n"), 10e3), E("RF", "R", ("n", "out"), 100e3),
           E("U1", "OPAMP", ("ref", "n", "out", rail, "0"), 0.0, {}),
           E("RL", "R", ("out", "ref"), 100e3)]
    if rail_r is not None:
        els.append(E("RR", "R", ("vcc", "vr"), rail_r))
    return Circuit(els, input_source="Vin", output=("out", "0"))


def tone(level: float, n: int = 9600) -> np.ndarray:
    return level * np.sin(2 * np.pi * 440.0 * np.arange(n) / FS)


def test_fixed_potentials_follow_dc_sources_only():
    els = [E("V1", "V", ("a", "0"), 9.0), E("V2", "V", ("b", "a"), 3.0),
           E("Vin", "V", ("in", "0"), 0.0),
           E("VS", "V", ("s", "0"), 1.0, {"wave": ("SIN", (0.0, 1.0, 100.0))}),
           E("R1", "R", ("c", "a"), 1e3)]
    fixed = fixed_potentials(els, "Vin")
    assert fixed == {"0": 0.0, "a": 9.0, "b": 12.0}
    assert fixed_potentials(els, "Vin", {"V1": 12.0})["b"] == 15.0


def test_one_port_with_fixed_rails_two_behind_a_resistor():
    assert Network(inverting()).np_ == 1
    assert Network(inverting(rail_r=1e-3)).np_ == 2


def test_one_port_form_renders_as_the_two_port_form():
    # 1 V peak wanted 10 V peak: clips on both rails.  A 1 mohm rail
    # resistor moves the rail by the clamp current times 1 mohm (nA..uA:
    # under 1e-9 V), so the two forms must agree to the solver's tolerance.
    x = tone(1.0)
    y1 = Simulator(inverting(), fs=FS).process(x)
    y2 = Simulator(inverting(rail_r=1e-3), fs=FS).process(x)
    assert np.max(np.abs(y1 - y2)) < 1e-5 * np.max(np.abs(y2))
    # it does clip, at about VHR (1.5 V, opamp.DEFAULTS) from the rails,
    # softly (the knee VSOFT lets it a few tenths closer)
    assert 7.0 < y1.max() < 8.5 and 0.5 < y1.min() < 2.0


def test_small_signal_gain_unchanged():
    y = Simulator(inverting(), fs=FS).process(tone(0.05))
    out = y[4800:] - np.mean(y[4800:])
    assert np.max(np.abs(out)) == pytest.approx(0.5, rel=0.01)   # -Rf/Rin = -10


def test_a_supply_edit_moves_the_clipping_level_live():
    x = tone(1.0)
    live = Simulator(inverting(vcc=9.0), fs=FS, block_max=512)
    live.process(x)
    live.set_values({"VCC": 12.0})
    live.process(x)                       # settle at the new supply
    y_live = live.process(x)
    fresh = Simulator(inverting(vcc=12.0), fs=FS, block_max=512)
    fresh.process(x)
    fresh.process(x)
    y_fresh = fresh.process(x)
    # the upper clip follows the rail: 12 V - VHR instead of 9 V - VHR
    assert y_live.max() == pytest.approx(y_fresh.max(), abs=1e-4)
    assert y_live.max() > 9.0
    assert np.max(np.abs(y_live - y_fresh)) < 1e-4
    assert live.operating_point().devices["U1"]["region"] == \
        fresh.operating_point().devices["U1"]["region"]
