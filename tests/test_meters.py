"""Meters against known signals, and the meter ballistics as documented."""
import math

import numpy as np
import pytest

from solderless.engine.live import meters as M
from solderless.engine.live.host import LiveHost
from solderless.engine.live.ring import FrameRing
from solderless.engine.live.source import ToneSource
from standin import StandInDesign, StandInSimulator

FS = 48000.0


def _host(**kw):
    kw.setdefault("simulator_factory", StandInSimulator)
    kw.setdefault("autosave", False)
    return LiveHost(kw.pop("design", StandInDesign()), **kw)


@pytest.mark.parametrize("peak", [0.05, 0.5, 1.2])
def test_sine_peak_and_rms_at_the_input(peak):
    # A sine of peak A has RMS A/sqrt(2) (handbook formula); with full scale
    # 1 V peak, AES17 reads both its peak and its RMS as 20 log10(A) dBFS.
    h = _host(source=ToneSource(1000.0, peak), in_full_scale_v=1.0, block=64)
    h.run_offline(int(0.6 * FS / 64))
    m = h.meters()
    assert m["input"]["peak_v"] == pytest.approx(peak, rel=1e-9)
    assert m["input"]["rms_v"] == pytest.approx(peak / math.sqrt(2), rel=1e-6)
    assert m["input"]["peak_dbfs"] == pytest.approx(20 * math.log10(peak), abs=1e-6)
    assert m["input"]["rms_dbfs"] == pytest.approx(20 * math.log10(peak), abs=1e-5)
    # dBu re 0.775 V RMS (common practice, stated in the issue)
    assert m["input"]["rms_dbu"] == pytest.approx(
        20 * math.log10(peak / math.sqrt(2) / 0.775), abs=1e-5)
    h.close()


def test_output_meter_follows_the_circuit_gain():
    # The stand-in's pot is a divider: rotation r -> gain r (about, with 1 ohm
    # ends); its low-pass at 1.59 kHz passes 100 Hz at 1/sqrt(1+(f/fc)^2)
    # (first-order RC, handbook formula).
    d = StandInDesign()
    d.set_rotation("level.VOL", 0.5)
    h = _host(design=d, source=ToneSource(100.0, 0.2), block=128)
    h.run_offline(int(1.0 * FS / 128))
    m = h.meters()
    fc = 1 / (2 * math.pi * 10e3 * 10e-9)
    g = (0.5 * 10e3 + 1) / (10e3 + 2) / math.sqrt(1 + (100 / fc) ** 2)
    assert m["output"]["rms_v"] == pytest.approx(0.2 / math.sqrt(2) * g, rel=2e-3)
    h.close()


def _feed(reader, ring, peaks, ms=None):
    for i, p in enumerate(peaks):
        row = np.zeros(ring.width)
        row[M.C_IN_PEAK] = p
        row[M.C_IN_MS] = p * p / 2 if ms is None else ms[i]
        ring.write_row(row)
    return reader.poll()


def test_peak_hold_then_fall_at_the_stated_rate():
    # Ballistics as documented in solderless.engine.live.meters: hold 1 s, fall 20 dB/s.
    block = 480                       # 10 ms frames
    ring = FrameRing(4096, M.C_PROBES)
    r = M.MeterReader(ring, FS, block, 1.0, 1.0)
    _feed(r, ring, [1.0])
    m = _feed(r, ring, [1e-6] * 99)            # 0.99 s later: still held
    assert m["input"]["peak_dbfs"] == pytest.approx(0.0, abs=1e-9)
    m = _feed(r, ring, [1e-6] * 51)            # 1.5 s after the peak: 10 dB down
    assert m["input"]["peak_dbfs"] == pytest.approx(-M.PEAK_FALL_DB_PER_S * 0.5, abs=0.25)
    m = _feed(r, ring, [1e-6] * 1000)          # long after: the floor signal
    assert m["input"]["peak_dbfs"] == pytest.approx(-120.0, abs=1e-6)


def test_rms_window_integrates_the_stated_time():
    # A rectangular 300 ms window: 150 ms into a steady tone the RMS is the
    # tone's RMS times sqrt(150/300).
    block = 480
    ring = FrameRing(4096, M.C_PROBES)
    r = M.MeterReader(ring, FS, block, 1.0, 1.0)
    _feed(r, ring, [0.0] * 40, ms=[0.0] * 40)
    m = _feed(r, ring, [1.0] * 15, ms=[0.5] * 15)
    assert m["rms_window_s"] == pytest.approx(0.3)
    assert m["input"]["rms_v"] == pytest.approx(math.sqrt(0.5 * 0.5), rel=1e-9)


def test_control_current_meter_equals_the_engines_own_probe():
    # The meter's control reading must be the simulator's own probe, averaged
    # over the block: run an identical simulator by hand on the same input.
    d = StandInDesign()
    h = _host(design=d, source=ToneSource(440.0, 0.3), block=64)
    nb = 200
    h.run_offline(nb)
    m = h.meters()
    sim = StandInSimulator(d.flatten(), FS, 1, ("iabc(comp.U1)",))
    src = ToneSource(440.0, 0.3)
    src.prepare(FS, 1.0)
    x = np.zeros(64)
    y = np.zeros(64)
    pb = np.zeros((1, 64))
    sim.process_into(np.zeros(64), y, pb)          # the host warms with one silent block
    for _ in range(nb):
        src.fill(None, 64, x)
        sim.process_into(x, y, pb)
    assert m["voices"]["A"]["control_a"] == pytest.approx(pb[0].mean(), rel=1e-12)
    assert m["voices"]["A"]["control_ua"] == pytest.approx(pb[0].mean() * 1e6, rel=1e-12)
    h.close()


def test_gain_reduction_from_the_control_current():
    # For a gain cell with gain proportional to Iabc (bipolar OTA, gm = Iabc/2VT;
    # docs/references.md), GR = 20 log10(I / I_quiescent). The stand-in's control is
    # I_Q / (1 + env / 50 mV), quiescent I_Q = 20 uA.
    h = _host(source=ToneSource(1000.0, 0.5), block=64)
    h.run_offline(int(0.5 * FS / 64))
    v = h.meters()["voices"]["A"]
    assert h.meter.control_a[1] == pytest.approx(20e-6, rel=1e-6)
    assert v["gr_control_db"] == pytest.approx(20 * math.log10(v["control_a"] / 20e-6), abs=1e-9)
    assert v["gr_control_db"] < -10.0          # 0.5 V input: env >> 50 mV
    h.close()


def test_measured_gain_reduction_is_zero_for_a_linear_circuit():
    # The stand-in's audio path is linear: level-based GR (output/input level
    # relative to the small-signal gain) must read ~0 dB at any level.
    for amp in (0.01, 0.8):
        h = _host(source=ToneSource(1000.0, amp), block=64)
        h.run_offline(int(0.8 * FS / 64))
        assert h.meters()["voices"]["A"]["gr_measured_db"] == pytest.approx(0.0, abs=0.02)
        h.close()


def test_session_figures_keep_extremes_after_the_display_has_fallen():
    # frames written by hand: a loud block, then quiet ones for longer than the
    # hold + fall time; the session keeps the loud block's peak
    ring = FrameRing(4096, M.C_PROBES + 1)
    r = M.MeterReader(ring, 48000.0, 128, 1.0, 1.0, ("iabc(U1)",))
    q = 20e-6
    r.control_a = (0, q)
    ctl = [20e-6, 10e-6, 2e-6, 40e-6] + [20e-6] * 1500
    for b, c in enumerate(ctl):
        row = np.zeros(ring.width)
        row[M.C_IN_PEAK] = 0.5 if b == 1 else 1e-3
        row[M.C_OUT_PEAK] = 0.25 if b == 1 else 1e-3
        row[M.C_DAC_PEAK] = 0.25 if b == 1 else 1e-3
        row[M.C_CPU] = 0.1 * (b % 10)        # 0.0 .. 0.9, uniform
        row[M.C_PROBES] = c
        ring.write_row(row)
    snap = r.poll()
    ss = snap["session"]
    assert ss["input_peak_v"] == 0.5 and ss["output_peak_v"] == 0.25
    # the ballistic display has fallen: 1.0 s hold, then 20 dB/s (module doc)
    assert snap["input"]["peak_v"] < 0.5 * 10 ** (-10 / 20)
    va = ss["voices"]["A"]
    assert va["control_a_min"] == 2e-6 and va["control_a_max"] == 40e-6
    # gain of an OTA cell is proportional to its control current (gm = Iabc/2VT,
    # docs/references.md): 2 uA against 20 uA quiescent is 20 log10(0.1) = -20 dB
    assert va["gr_control_db_deepest"] == pytest.approx(-20.0, abs=1e-9)
    cpu = ss["cpu_load"]
    assert cpu["max"] == pytest.approx(0.9) and cpu["blocks"] == len(ctl)
    assert cpu["median"] == pytest.approx(np.median([0.1 * (b % 10) for b in range(len(ctl))]))
