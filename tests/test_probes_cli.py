"""Probes from the command line (issue 16): ``--probes-csv`` alone writes
the design's declared probes (it wrote nothing); a design's own probe name
is accepted; a probe left dangling by a stage change is warned about."""
import numpy as np
import soundfile as sf

from solderless.app.cli import main
from solderless.engine.design import load_design


def _wav(tmp_path, seconds=0.2):
    t = np.arange(int(48000 * seconds)) / 48000.0
    p = tmp_path / "in.wav"
    sf.write(str(p), (0.05 * np.sin(2 * np.pi * 220 * t)).astype(np.float32), 48000,
             subtype="FLOAT")
    return p


def test_probes_csv_alone_writes_the_design_probes(tmp_path, capsys):
    wav = _wav(tmp_path)
    csv = tmp_path / "p.csv"
    assert main(["render", "flagship", str(wav), str(tmp_path / "o.wav"),
                 "--probes-csv", str(csv)]) == 0
    d = load_design("flagship")
    head = csv.read_text().splitlines()[0].split(",")
    declared = [d.control_probe()] + [p.expr for p in d.probes if p.expr != d.control_probe()]
    assert head == ["time_s"] + declared
    data = np.loadtxt(csv, delimiter=",", skiprows=1)
    assert data.shape == (9600, 1 + len(declared))
    # the control column is the gain cell's control current: near its
    # resting value (tens of uA) at this level, never zero or NaN
    assert np.all(np.isfinite(data)) and 1e-6 < data[:, 1].mean() < 1e-3


def test_a_design_probe_name_is_a_probe(tmp_path, capsys):
    wav = _wav(tmp_path)
    csv = tmp_path / "p.csv"
    name = load_design("flagship").probes[0].name
    assert main(["render", "flagship", str(wav), str(tmp_path / "o.wav"),
                 "--probe", name, "--probes-csv", str(csv)]) == 0
    assert csv.read_text().splitlines()[0] == f"time_s,{name}"


def test_a_probe_left_dangling_by_a_stage_change_is_warned(tmp_path, capsys):
    d = load_design("flagship")
    assert d.dangling_probes() == []
    d.set_bypass("gain", True)            # the control probe's OTA is gone
    target = tmp_path / "no-gain.toml"
    d.save(target)
    assert main(["op", str(target)]) == 0
    err = capsys.readouterr().err
    assert "left dangling" in err and "gain.U1" in err
