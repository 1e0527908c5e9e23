"""The command line, end to end, against independent expectations."""
import json
import textwrap

import numpy as np
import pytest
import soundfile as sf
from scipy import signal

from solderless.app.cli import main

FS = 48000.0
R, C, RS = 10e3, 10e-9, 1e3

LOWPASS = textwrap.dedent(f"""\
    [design]
    name = "one-pole lowpass"
    source_impedance = {RS}
    load = "1G"
    [[stage]]
    name = "lp"
    [[stage.part]]
    name = "R1"
    type = "resistor"
    nodes = ["in", "out"]
    value = {R}
    [[stage.part]]
    name = "C1"
    type = "capacitor"
    nodes = ["out", "0"]
    value = {C}
""")


def expected_lowpass(x_volts, r_total, c, load=1e9):
    """The analog one-pole low-pass (series r_total, shunt c, load), discretised
    with the bilinear transform: the trapezoidal rule the engine uses
    (scipy.signal.bilinear is the reference)."""
    # H(s) = k / (1 + s*Rp*C) with k = load/(r+load), Rp = r || load
    k = load / (r_total + load)
    rp = r_total * load / (r_total + load)
    b, a = signal.bilinear([k], [rp * c, 1.0], fs=FS)
    return signal.lfilter(b, a, x_volts)


def test_render_matches_bilinear_with_calibration(tmp_path, capsys):
    rng = np.random.default_rng(1)
    x = 0.5 * rng.standard_normal(4800).clip(-1.9, 1.9) / 2
    wav_in, wav_out = tmp_path / "in.wav", tmp_path / "out.wav"
    sf.write(wav_in, x.astype(np.float32), int(FS), subtype="FLOAT")
    design = tmp_path / "lp.toml"
    design.write_text(LOWPASS)
    rc = main(["render", str(design), str(wav_in), str(wav_out),
               "--input-fs-volts", "0.5", "--output-fs-volts", "0.25",
               "--probe", "v(lp.out)", "--probe", "i(lp.C1)", "--probes-csv",
               str(tmp_path / "p.csv")])
    assert rc == 0, capsys.readouterr().err
    y, fs = sf.read(wav_out)
    assert fs == FS
    xv = x.astype(np.float32).astype(float) * 0.5          # volts at the jack
    ref = expected_lowpass(xv, R + RS, C) / 0.25           # scaled to output full scale
    err = np.max(np.abs(y - ref)) / np.max(np.abs(ref))
    assert err < 1e-6  # float32 WAV output limits this, not the engine
    data = np.genfromtxt(tmp_path / "p.csv", delimiter=",", names=True)
    assert data.dtype.names[0] == "time_s"
    assert np.allclose(np.diff(data["time_s"]), 1 / FS)
    vout = data[data.dtype.names[1]]
    assert np.allclose(vout, ref * 0.25, atol=1e-9 * np.max(np.abs(ref)) + 1e-9)
    # capacitor current = C dv/dt; with the trapezoidal rule the mean of two
    # neighbouring currents equals C * (v[n]-v[n-1]) * fs exactly
    ic = data[data.dtype.names[2]]
    lhs = 0.5 * (ic[1:] + ic[:-1])
    rhs = C * np.diff(vout) * FS
    assert np.allclose(lhs, rhs, atol=1e-6 * np.max(np.abs(rhs)))


def test_op_json_divider(tmp_path, capsys):
    # handbook: an unloaded divider gives V*R2/(R1+R2)
    design = tmp_path / "div.toml"
    design.write_text(textwrap.dedent("""\
        [design]
        name = "divider"
        global_nets = ["vcc"]
        [[design.part]]
        name = "VCC"
        type = "supply"
        nodes = ["vcc", "0"]
        value = "9"
        [[stage]]
        name = "bias"
        [[stage.part]]
        name = "R1"
        type = "resistor"
        nodes = ["vcc", "mid"]
        value = "47k"
        [[stage.part]]
        name = "R2"
        type = "resistor"
        nodes = ["mid", "0"]
        value = "22k"
        [[stage.part]]
        name = "RI"
        type = "resistor"
        nodes = ["in", "out"]
        value = "1k"
    """))
    assert main(["op", str(design), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["nets"]["bias.mid"] == pytest.approx(9 * 22 / 69, abs=1e-6)


def test_ac_csv_matches_freqs(tmp_path, capsys):
    design = tmp_path / "lp.toml"
    design.write_text(LOWPASS)
    out = tmp_path / "ac.csv"
    assert main(["ac", str(design), "--csv", str(out), "--fmin", "20", "--fmax", "20000",
                 "--points", "50"]) == 0
    d = np.genfromtxt(out, delimiter=",", names=True)
    # reference: scipy.signal.freqs of the analog transfer function
    k = 1e9 / (R + RS + 1e9)
    rp = (R + RS) * 1e9 / (R + RS + 1e9)
    _, h = signal.freqs([k], [rp * C, 1.0], worN=2 * np.pi * d["freq_hz"])
    assert np.allclose(d["gain_db"], 20 * np.log10(np.abs(h)), atol=1e-6)
    # input impedance seen at the jack (source resistor excluded): R + 1/(sCR) || load
    zc = 1 / (2j * np.pi * d["freq_hz"] * C)
    zin = R + zc * 1e9 / (zc + 1e9)
    assert np.allclose(d["zin_ohm"], np.abs(zin), rtol=1e-6)


def test_netlist_design_with_named_source_and_node(tmp_path, capsys):
    net = tmp_path / "rc.cir"
    net.write_text(textwrap.dedent("""\
        one-pole from a netlist
        VSIG src 0 DC 0
        R1 src filt 10k
        C1 filt 0 10n
        .end
    """))
    x = np.zeros(480, dtype=np.float32)
    x[0] = 0.5
    sf.write(tmp_path / "imp.wav", x, int(FS), subtype="FLOAT")
    rc = main(["render", str(net), str(tmp_path / "imp.wav"), str(tmp_path / "o.wav"),
               "--in-source", "VSIG", "--out-node", "filt"])
    assert rc == 0, capsys.readouterr().err
    y, _ = sf.read(tmp_path / "o.wav")
    # input and output share one calibration (solderless/engine/levels.py): unity in, unity out
    ref = expected_lowpass(x.astype(float), 10e3, 10e-9, load=1e30)
    assert np.allclose(y, ref, atol=1e-7)
    rc = main(["render", str(net), str(tmp_path / "imp.wav"), str(tmp_path / "o2.wav")])
    assert rc == 2
    assert "VIN" in capsys.readouterr().err


def test_exported_netlist_runs_as_it_is(tmp_path, capsys):
    # an editor's export: numbered sources (no VIN), nets named
    # "Net-(R1-Pad2)".  The one signal source becomes the input, with a
    # warning; the divider node sits at V*R2/(R1+R2) (textbook divider).
    net = tmp_path / "exported.cir"
    net.write_text(textwrap.dedent("""\
        * exported from a schematic
        V1 vcc 0 DC 9
        V2 /in 0 SIN(0 0.1 1k)
        R1 vcc Net-(R1-Pad2) 47k
        R2 Net-(R1-Pad2) 0 10k
        C1 /in Net-(R1-Pad2) 100n
        .end
    """))
    rc = main(["op", str(net), "--out-node", "Net-(R1-Pad2)", "--json"])
    out, err = capsys.readouterr()
    assert rc == 0, err
    assert "V2" in err and "warning" in err
    nets = json.loads(out)["nets"]
    assert nets["net-(r1-pad2)"] == pytest.approx(9 * 10 / 57, rel=1e-6)
    # two signal sources: no guess, the error names both
    net.write_text(net.read_text().replace("V1 vcc 0 DC 9", "V1 vcc 0 SIN(9 1 50)"))
    rc = main(["op", str(net), "--out-node", "Net-(R1-Pad2)"])
    err = capsys.readouterr().err
    assert rc == 2 and "V1" in err and "V2" in err and "Traceback" not in err


def test_render_missing_input_is_a_clear_error(tmp_path, capsys):
    design = tmp_path / "lp.toml"
    design.write_text(LOWPASS)
    rc = main(["render", str(design), str(tmp_path / "nope.wav"), str(tmp_path / "o.wav")])
    err = capsys.readouterr().err
    assert rc == 2 and "nope.wav" in err and "Traceback" not in err
