"""A design imported from a SPICE netlist is as live, probeable and editable
as a TOML design, under the names ``op`` prints (issue 16 regressions):
live value edits reached no element ('netlist.RC'), a failed edit was still
saved, ``v(out)`` was rejected, and parts needed a 'netlist.' prefix."""
from pathlib import Path

import numpy as np
import pytest

from solderless.engine.design import load_design
from solderless.engine.live import host as H
from solderless.app.console import Console
from solderless.engine.live.source import ToneSource
from solderless.engine.solver import Simulator

FS = 48000.0

# A common-emitter stage, our own values.  Bias by hand (common practice):
# Vb = 9 * 22k / 122k = 1.62 V, Ve ~ Vb - 0.65 = 0.97 V, Ie ~ 0.97 mA,
# Vc ~ 9 - 4.7k * 0.96 mA ~ 4.5 V; gain ~ -RC/re with CE bypassing RE.
AMP = (Path(__file__).resolve().parent / "ce_amp.cir").read_text()


@pytest.fixture
def amp(tmp_path):
    p = tmp_path / "amp.cir"
    p.write_text(AMP)
    return p


def test_parts_are_named_as_op_prints_them(amp):
    d = load_design(amp)
    op = Simulator(d.flatten(), fs=FS).operating_point()
    names = {p.qualname for p in d.parts()}
    assert "Q1" in op.devices and "Q1" in names       # no 'netlist.' prefix anywhere
    assert {"RC", "RE", "CE", "CIN"} <= names
    # the older spelling and any case still find the part
    assert d.part("netlist.RC") is d.part("RC") is d.part("rc")


def test_probes_take_the_nets_and_devices_op_prints(amp):
    d = load_design(amp)
    probes = [d.resolve_probe(p) for p in ("v(out)", "v(netlist.c)", "ic(Q1)", "i(RC)")]
    assert probes == ["v(out)", "v(c)", "ic(Q1)", "i(RC)"]
    sim = Simulator(d.flatten(), fs=FS, probes=tuple(probes))
    op = sim.operating_point()
    _, pb = sim.run(np.zeros(2048))
    # at rest the probes read the operating point (probe == op report)
    assert pb[1, -1] == pytest.approx(op.nets["c"], abs=1e-4)
    assert pb[2, -1] == pytest.approx(op.devices["Q1"]["ic"], rel=1e-3)
    # i(RC) is Ohm's law over RC: (Vvcc - Vc) / 4.7k, and equals ic within ib
    assert pb[3, -1] == pytest.approx((9.0 - op.nets["c"]) / 4.7e3, rel=1e-3)


def test_a_live_value_edit_reaches_the_netlist_circuit_and_is_heard(amp, tmp_path):
    d = load_design(amp)
    # 1 mV in: about 0.2 V out, well under the limiter's ceiling (4 V peak here)
    h = H.LiveHost(d, source=ToneSource(1000.0, 0.001), block=256, in_full_scale_v=1.0,
                   out_full_scale_v=8.0, autosave=False)
    h.prepare()
    h.run_offline(600)           # past the start-up ramp (limiter.py)
    before = h.run_offline(40)
    said = []
    con = Console(h, say=said.append)
    con.handle("pick rc")                  # any case; the name op prints
    assert said[-1].startswith("picked RC")
    con.handle("value 2.2k")
    assert not any(s.startswith("error") for s in said), said
    h.run_offline(200)           # the collector's new DC level settles through COUT
    after = h.run_offline(40)
    rms = lambda y: float(np.sqrt(np.mean(y ** 2)))  # noqa: E731
    # the stage's gain is about RC/re (common practice): halving RC (4.7k to
    # 2.2k) lowers the output by about 20*log10(2.2/4.7) = -6.6 dB
    drop = 20 * np.log10(rms(after) / rms(before))
    assert -8.5 < drop < -5.0
    assert h.voices[0].sim.values["RC"] == pytest.approx(2.2e3)
    out = tmp_path / "amp-mod.toml"
    con.handle(f"save {out}")
    h.close()
    d2 = load_design(out)
    assert d2.part("RC").value == pytest.approx(2.2e3)


def test_an_edit_the_circuit_refuses_is_not_saved(amp, tmp_path):
    d = load_design(amp)

    class Refusing:
        """Wraps the engine's simulator; refuses every live change."""
        def __init__(self, *a):
            self.sim = H.default_simulator_factory(*a)

        def __getattr__(self, k):
            return getattr(self.sim, k)

        def set_values(self, changes):
            raise RuntimeError("refused")

    h = H.LiveHost(d, source=ToneSource(1000.0, 0.01), block=256, autosave=False,
                   simulator_factory=Refusing)
    h.prepare()
    with pytest.raises(RuntimeError):
        h.set_value("RC", 2.2e3).result(30)
    assert d.part("RC").value == pytest.approx(4.7e3)
    assert "values" not in d.doc["netlist"] or "RC" not in d.doc["netlist"]["values"]
    h.close()
