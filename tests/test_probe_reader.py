"""The one probe-expression reader (solderless/engine/probes.py) that the
design layer and the simulator share, and the one union-find
(solderless/engine/unionfind.py). Expectations: the probe forms documented
in docs/design-format.md, and net names as schematic editors export them
(``Net-(R1-Pad2)``, docs/design-format.md; "Netlist syntax" in docs/references.md)."""
import pytest

from solderless.engine.design import load_design
from solderless.engine.errors import DesignError
from solderless.engine.probes import parse_probe
from solderless.engine.unionfind import UnionFind


@pytest.mark.parametrize("text, want", [
    ("v(out)", ("v", ["out"])),
    ("  V ( a , b )  ", ("V", ["a", "b"])),
    ("v(Net-(R1-Pad2))", ("v", ["Net-(R1-Pad2)"])),
    ("v(Net-(R1-Pad2),Net-(C1-Pad1))", ("v", ["Net-(R1-Pad2)", "Net-(C1-Pad1)"])),
    ("ic(Q1)", ("ic", ["Q1"])),
])
def test_reads_probe_forms(text, want):
    assert parse_probe(text) == want


@pytest.mark.parametrize("text", ["v", "v(a,b,c)", "v(a b)", "v()", "v(a))", "v((a)", "(a)",
                                  "v(a,)"])
def test_refuses_what_is_not_a_probe(text):
    assert parse_probe(text) is None


def test_design_and_simulator_refuse_the_same_probe(design_file):
    d = load_design(design_file)
    with pytest.raises(DesignError, match="quantity"):
        d.resolve_probe("v(a,b,c)")


def test_union_find_names_sets_and_keeps_ground():
    uf = UnionFind(keep="0")
    assert uf.union("a", "b") and not uf.union("b", "a")
    assert uf.find("b") == "a"                 # the first name names the set
    uf.union("c", "0")
    assert uf.union("a", "c")
    assert {uf.find(x) for x in "abc0"} == {"0"}   # ground names its set
    assert uf.find("d") == "d"
