"""Live noise switched on and off while playing: the SetHiss edit
(solderless.engine.design.edits), the live host applying it
(solderless.engine.live.host), the console's ``hiss`` command and the
amplitude switch of the noisy simulator (solderless.engine.solver.livenoise).

References (docs/references.md, "Noise"): the small-signal noise analysis,
itself checked against ngspice-39's noise analysis (tests/test_noise.py), is
the expectation for the live noise floor, unweighted and A-weighted (IEC
61672-1:2013 Annex E); the live spectrum is estimated with SciPy's Welch
method (``scipy.signal.welch``), as in tests/test_live_noise.py.
"""
from __future__ import annotations

import math

import numpy as np
import pytest

from solderless.engine.analysis.noise import a_weighting, floor_summary, noise_floor
from solderless.engine.design import load_design
from solderless.engine.design.edits import SetHiss, SetValue, apply_edit
from solderless.engine.errors import DesignError
from solderless.engine.formats.spice import parse_netlist
from solderless.engine.live import host as H
from solderless.engine.live.source import Source
from solderless.engine.solver import Simulator
from solderless.engine.solver.livenoise import HissSimulator

import noise_circuits as NC  # noqa: E402

FS = 48000.0
BLOCK = 256


def _band_rms(y, fs, weight=None):
    """RMS over 20 Hz-20 kHz: the check of tests/test_live_noise.py."""
    return NC.band_rms(y, fs, weight=weight)


@pytest.fixture
def divider(tmp_path):
    p = tmp_path / "divider.cir"
    p.write_text(NC.DIVIDER + ".end\n")
    return p


def _host(design, **kw):
    return H.LiveHost(design, fs=FS, block=BLOCK, source=Source(), autosave=False,
                      level_db=0.0, **kw)


def _blocks(seconds):
    return int(seconds * FS / BLOCK)


def test_host_switches_noise_on_and_off_while_playing(divider):
    """Silence through a 10k/10k divider, played by the live host: switched
    on, the output floor is the analysis' within 0.5 dB (unweighted and
    A-weighted; the output is the sound card's, volts = samples x full
    scale at 0 dB level); switched off, the output is bit for bit that of
    a host that never had noise; undo (the inverse edit) brings it back;
    the output limiter and the start ramp stay in the path."""
    d = load_design(str(divider))
    assert (d.hiss, d.hiss_seed) == (False, 0)
    ref = _host(load_design(str(divider)))
    h = _host(d)
    try:
        quiet_ref = ref.run_offline(_blocks(1.0))
        quiet = h.run_offline(_blocks(1.0))
        np.testing.assert_array_equal(quiet, quiet_ref)
        assert h.hiss_state()["sources"] == 0        # off: the plain simulator plays
        # on: the noisy simulator is built and crossfaded in
        assert h.set_hiss(True, 4).result(60) == (True, 4)
        assert h.hiss_state() == {"on": True, "seed": 4, "sources": 2}
        h.run_offline(_blocks(0.5))
        y = h.run_offline(_blocks(4.0)) * h.out_fs_v
        fl = noise_floor(d.flatten())
        assert abs(20 * math.log10(_band_rms(y, FS) / fl.v_rms)) < 0.5
        assert abs(20 * math.log10(_band_rms(y, FS, a_weighting) / fl.v_rms_a)) < 0.5
        assert np.max(np.abs(y)) < 1e-3       # microvolts of hiss, no click
        # off: the sources stay in the kernel at zero amplitude
        inverse = apply_edit(load_design(str(divider)), SetHiss(True, 4)).inverse
        assert h.edit(SetHiss(False)).result(60) == (False, 4)
        h.run_offline(1)                       # the block that was running
        off = h.run_offline(_blocks(0.5))
        on_ref = ref.run_offline(_blocks(1.5 + 0.5) + 1)[-off.size:]
        np.testing.assert_array_equal(off, on_ref)
        assert h.hiss_state()["sources"] == 2
        # undo of the switch-on (its inverse edit) and redo
        assert h.edit(inverse).result(60) == (False, 0)
        assert h.edit(SetHiss(True)).result(60) == (True, 0)
        y2 = h.run_offline(_blocks(3.0)) * h.out_fs_v
        assert abs(20 * math.log10(_band_rms(y2[BLOCK:], FS) / fl.v_rms)) < 0.5
        assert h.meters()["guard"] == ""
    finally:
        h.close()
        ref.close()


def test_a_structural_edit_keeps_the_noise_setting(divider):
    """A rebuild (a value edit here does not rebuild; a temperature change
    does not either) keeps the noise; a fresh build follows the design's
    setting: noisy when on, plain when off."""
    d = load_design(str(divider))
    d.hiss = True
    h = _host(d)
    try:
        h.prepare()
        assert h.hiss_state()["sources"] == 2
        h.edit(SetValue("R1", 40e3)).result(60)
        v = h.voices[0]
        assert isinstance(v.build(), HissSimulator)
        h.edit(SetHiss(False)).result(60)
        assert type(v.build()) is Simulator
    finally:
        h.close()


def test_amplitude_switch_keeps_the_sequence_and_a_new_seed_restarts_it():
    """Off then on again: the noise carries on where an uninterrupted run
    of the same seed is (the draws go on while off); a new seed plays that
    seed's sequence from its beginning; off plays the plain circuit (a
    divider has no states, so exactly)."""
    circ = parse_netlist(NC.DIVIDER + ".end\n", in_source="VIN", out_node="out").circuit
    x = np.zeros(4800)
    a = HissSimulator(circ, fs=FS, seed=3, block_max=1200)
    b = HissSimulator(circ, fs=FS, seed=3, block_max=1200)
    first = a.process(x)
    np.testing.assert_array_equal(first, b.process(x))
    a.set_hiss(False)
    np.testing.assert_array_equal(a.process(x), Simulator(circ, fs=FS).process(x))
    b.process(x)
    a.set_hiss(True)
    np.testing.assert_array_equal(a.process(x), b.process(x))
    a.set_hiss(True, 9)
    np.testing.assert_array_equal(a.process(x),
                                  HissSimulator(circ, fs=FS, seed=9).process(x))


def test_set_hiss_edit_keeps_the_document_and_undoes_exactly(tmp_path):
    """The edit changes the model and the design file's [design] table;
    its inverse puts the file's text back exactly; a saved and re-read
    design plays with its noise."""
    import shutil
    from solderless.engine.design import builtin_designs
    path = tmp_path / "b.toml"
    shutil.copy(builtin_designs()["booster"], path)
    d = load_design(str(path))
    text0 = d.to_toml()
    a = apply_edit(d, SetHiss(True, 12))
    assert (d.hiss, d.hiss_seed) == (True, 12) and a.result == (True, 12)
    assert not a.rebuild and not a.changes
    assert "hiss = true" in d.to_toml() and "hiss_seed = 12" in d.to_toml()
    d.save()
    again = load_design(str(path))
    assert (again.hiss, again.hiss_seed) == (True, 12)
    b = apply_edit(d, SetHiss(False))
    assert (d.hiss, d.hiss_seed) == (False, 12)
    apply_edit(d, b.inverse)
    base = d.copy()
    apply_edit(d, a.inverse)
    assert d.to_toml() == text0 and (d.hiss, d.hiss_seed) == (False, 0)
    # a variant's change lines name it
    assert d.differences_from(base) == ["circuit noise off"]
    assert base.differences_from(d) == ["circuit noise on (seed 12)"]


def test_set_hiss_refusals_are_one_line():
    """A seed that is not a whole number from 0, or a switch that is not
    true/false, is refused when the edit is made; a design-shaped object
    that is not a design refuses the edit; each a one-line DesignError."""
    for bad in (-1, 2 ** 63, 1.5, "7"):
        with pytest.raises(DesignError, match="hiss_seed must be a whole number") as e:
            SetHiss(True, bad)
        assert "\n" not in str(e.value)
    with pytest.raises(DesignError, match="on or off"):
        SetHiss("yes")

    class Shaped:
        def parts(self):
            return []
    with pytest.raises(DesignError, match="cannot take a SetHiss edit") as e:
        apply_edit(Shaped(), SetHiss(True))
    assert "\n" not in str(e.value)


def test_console_hiss_command(divider):
    """``hiss on [SEED]``, ``hiss off`` and ``hiss``: the same SetHiss edit
    through the host; the floor line is the analysis' (the line render and
    play print); a bad argument is one error line and changes nothing."""
    from solderless.app.console import HELP, Console
    from solderless.engine.analysis.noise import floor_line
    d = load_design(str(divider))
    h = _host(d)
    try:
        h.prepare()
        said, sent = [], []
        host_edit = h.edit
        h.edit = lambda e, voice=None: (sent.append(e), host_edit(e, voice))[1]
        con = Console(h, say=said.append)
        con.handle("hiss on 7")
        assert (d.hiss, d.hiss_seed) == (True, 7)
        assert said[-1] == floor_line(floor_summary(d.flatten(), 7))
        assert "dBV" in said[-1] and "A-weighted" in said[-1]
        con.handle("hiss off")
        assert (d.hiss, d.hiss_seed) == (False, 7)
        assert said[-1].startswith("hiss off (seed 7)")
        n = len(said)
        for bad in ("hiss loud", "hiss on x", "hiss off 3", "hiss on 1 2", "hiss on 99999999999999999999"):
            con.handle(bad)
            assert len(said) == n + 1 and said[-1].startswith("error: "), bad
            assert "\n" not in said[-1]
            n += 1
        assert (d.hiss, d.hiss_seed) == (False, 7)
        # the edits the workbench's switch makes too (tests/test_gui_hiss.py)
        assert sent == [SetHiss(True, 7), SetHiss(False)]
        assert "hiss on [SEED] / off" in HELP
    finally:
        h.close()


def test_noise_off_in_a_stage_with_memory(tmp_path):
    """A common-emitter stage (capacitors, a transistor, flicker noise on
    its card): switched on while playing silence, its output floor is the
    analysis' within 0.5 dB (measured -0.04 dB); switched off, the noise
    already in the circuit dies away through the circuit itself (no reset,
    no click): 0.1 s later the output's 20 Hz-20 kHz noise is more than
    80 dB under the floor (measured about -100 dB; what remains is the
    sub-audio drift of the 1 s output coupling, under 20 uV)."""
    p = tmp_path / "ce.cir"
    p.write_text(NC.CE_STAGE + ".end\n")
    d = load_design(str(p))
    h = _host(d)
    try:
        h.run_offline(_blocks(1.0))
        h.set_hiss(True).result(60)
        h.run_offline(_blocks(1.0))
        y = h.run_offline(_blocks(3.0)) * h.out_fs_v
        fl = noise_floor(d.flatten())
        assert abs(20 * math.log10(_band_rms(y, FS) / fl.v_rms)) < 0.5
        h.set_hiss(False).result(60)
        off = h.run_offline(_blocks(2.0)) * h.out_fs_v
        assert np.max(np.abs(np.diff(off))) < 1e-4          # no click at the switch
        assert _band_rms(off[int(0.1 * FS):], FS) < fl.v_rms * 1e-4
        assert h.meters()["guard"] == ""
    finally:
        h.close()


@pytest.mark.audio
def test_play_console_switches_noise_while_playing(tmp_path):
    """``solderless play booster --source silence`` through real PortAudio
    on ALSA's null device (DESIGN.md), driven through its console: the
    output meter reads the plain circuit's silence, then the hiss after
    'hiss on 3' (more than 40 dB up), then silence again after 'hiss off'
    (more than 40 dB down); the session goes on throughout and the saved
    file carries the setting."""
    import json
    import re
    import subprocess
    import sys
    from nullaudio import ROOT as root, null_audio_env
    env = null_audio_env(tmp_path)
    saved = tmp_path / "noisy.toml"
    script = ["wait 1", "meters", "hiss on 3", "wait 1", "meters", "hiss off", "wait 1",
              "meters", "hiss on", f"save {saved}", "quit"]
    r = subprocess.run([sys.executable, "-m", "solderless.app.cli", "play", "booster",
                        "--source", "silence", "--json", "--seconds", "300"],
                       input="\n".join(script) + "\n", cwd=root, env=env,
                       capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr[-3000:]
    rms = [(-math.inf if v == "-inf" else float(v)) for v in
           re.findall(r"out\s+\S+ pk\s+(-?[\d.]+|-inf) rms dBFS", r.stderr)]
    assert len(rms) == 3, r.stderr[-3000:]
    print("out rms dBFS (off, on, off):", rms)
    assert rms[1] > max(rms[0], -150.0) + 40.0 and rms[2] < rms[1] - 40.0, rms
    assert "hiss on (seed 3" in r.stderr and "hiss off (seed 3)" in r.stderr
    assert "error" not in r.stderr.lower()
    s = json.loads(r.stdout)
    assert s["hiss"]["seed"] == 3          # on at the end of the session
    back = load_design(str(saved))
    assert (back.hiss, back.hiss_seed) == (True, 3)


def test_a_netlist_design_keeps_its_noise_setting(divider, tmp_path):
    """A design made from a whole netlist takes the edit and keeps it in
    the small design file it is saved as (docs/design-format.md)."""
    d = load_design(str(divider))
    apply_edit(d, SetHiss(True, 5))
    target = tmp_path / "divider-noisy.toml"
    d.save(target)
    back = load_design(str(target))
    assert back.netlist is not None and (back.hiss, back.hiss_seed) == (True, 5)
    target.write_text(target.read_text().replace("hiss_seed = 5", "hiss_seed = -5"))
    with pytest.raises(DesignError, match="hiss_seed must be a whole number") as e:
        load_design(str(target))
    assert str(target) in str(e.value) and "\n" not in str(e.value)
