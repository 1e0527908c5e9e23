"""Gain-reduction meters (issue 16): shown only for a design that declares a
control; 0 dB at rest (the measured one read +2.8 dB at rest, and a booster
showed 'GR +6.5 dB'); the console explains what each meter means."""
import pytest

from solderless.engine.design import load_design
from solderless.engine.live import host as H
from solderless.app.console import Console
from solderless.engine.live.source import ToneSource


def _host(name, amp):
    h = H.LiveHost(load_design(name), source=ToneSource(1000.0, amp), block=256,
                   autosave=False)
    h.prepare()
    return h


def test_no_gain_reduction_meters_without_a_control():
    h = _host("booster", 0.05)
    h.run_offline(200)
    v = h.meters()["voices"]["A"]
    assert v["control_a"] is None and v["gr_control_db"] is None
    assert v["gr_measured_db"] is None
    said = []
    Console(h, say=said.append).handle("meters")
    assert "GR" not in said[0] and "ctl" not in said[0]
    assert "GRm: gain reduction measured" in said[1]       # the legend, once
    h.close()


def test_gain_reduction_reads_zero_at_rest_and_deepens_when_loud():
    h = _host("flagship", 0.001)      # 1 mV: the detector stays at rest
    h.run_offline(300)
    v = h.meters()["voices"]["A"]
    assert v["gr_control_db"] == pytest.approx(0.0, abs=0.1)
    assert v["gr_measured_db"] == pytest.approx(0.0, abs=0.3)
    h.close()
    h = _host("flagship", 0.3)        # a hard note: the control current drops
    h.run_offline(300)
    v = h.meters()["voices"]["A"]
    assert v["gr_control_db"] < -6.0 and v["gr_measured_db"] < -6.0
    h.close()
