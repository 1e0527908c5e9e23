"""Outputs stay bit-identical through a refactor (issue 20).

tests/data/render_fingerprints.json holds the fingerprints of every built-in
design and every reference netlist that runs as a design, taken before the
refactor (how: tests/fingerprints.py).  On the machine they were taken on the
renders must match byte for byte; on another CPU, within 1e-6 of each output's
peak (numba compiles for the host CPU and may round the last bits another
way).  A change that is meant to alter a render re-records the file with
``python bench/check_renders.py --save tests/data/render_fingerprints.json``
and says so in its commit message.
"""
import json

from fingerprints import STORED, all_fingerprints, differences, sources


def test_every_design_and_reference_netlist_renders_as_recorded():
    old = json.loads(STORED.read_text())
    assert set(old["renders"]) == set(sources()), "the fingerprinted set changed"
    new = all_fingerprints()
    assert differences(old, new) == []


def test_the_comparison_catches_a_one_bit_change():
    old = json.loads(STORED.read_text())
    name = next(iter(old["renders"]))
    new = json.loads(json.dumps(old))
    new["renders"][name]["sha256"] = "0" * 64
    assert differences(old, new) == [f"{name}: output bytes differ"]
    other = json.loads(json.dumps(new))
    other["cpu"] = "another"
    other["renders"][name]["trace"][3] += 1e-3 * old["renders"][name]["peak"]
    assert len(differences(old, other)) == 1
