"""Edits as data (solderless/engine/design/edits.py): each edit applies
completely or not at all, its inverse puts the design and the user's file
back exactly, and a copy without the file document takes the same edits.

The expectations are the design file itself (docs/design-format.md): the
text before an edit and after its undo must be the same, and a refused edit
must leave both the model and the text as they were.
"""
import pickle
import shutil
from pathlib import Path

import pytest

from solderless.engine.design import document, edits as E, load_design
from solderless.engine.design.differences import differences
from solderless.engine.errors import DesignError

HERE = Path(__file__).resolve().parent


def _state(d):
    """Everything an edit may touch: the file's text, the flat circuit's
    elements, the chain and the links."""
    return (d.to_toml(), _circuit(d), [(s.name, s.bypass) for s in d.stages],
            [(ln.a, ln.b) for ln in d.links])


@pytest.fixture
def netlist_design(tmp_path):
    p = tmp_path / "ce_amp.cir"
    shutil.copy(HERE / "ce_amp.cir", p)
    return load_design(p)


@pytest.mark.parametrize("index", [None, 0, 1])
def test_adding_a_stage_to_a_netlist_design_is_refused_and_changes_nothing(
        netlist_design, index):
    # regression: with index 1 the stage went into the model, then the
    # document's empty [[stage]] list raised IndexError (the design left
    # changed, no undo step); with index 0 the stage was inserted and then
    # silently left out of the circuit, which is the netlist's alone
    d = netlist_design
    before = _state(d)
    with pytest.raises(DesignError) as err:
        E.apply_edit(d, E.AddStage("output/volume", index))
    msg = str(err.value)
    assert "whole netlist" in msg and "\n" not in msg
    assert _state(d) == before
    assert [s.name for s in d.stages] == ["netlist"]
    for edit in (E.DuplicateStage("netlist"), E.RemoveStage("netlist"),
                 E.RenameStage("netlist", "amp"), E.ImportStage(str(HERE / "ce_amp.cir"))):
        with pytest.raises(DesignError):
            E.apply_edit(d, edit)
        assert _state(d) == before


def test_workbench_adding_a_stage_to_a_netlist_design_keeps_no_undo_step(
        netlist_design, qtbot):
    from solderless.gui.model import Workbench
    wb = Workbench(netlist_design)
    for index in (0, 1):
        with pytest.raises(DesignError):
            wb.add_stage("output/volume", index)
    assert not wb.can_undo() and not wb.dirty
    assert [s.name for s in wb.design.stages] == ["netlist"]
    # the part edits a netlist design does take still work and undo
    wb.set_value("RC", "5k6")
    assert wb.design.flatten().element("RC").value == pytest.approx(5.6e3)
    wb.undo()
    assert wb.design.flatten().element("RC").value == 4.7e3


def test_an_edit_that_fails_half_way_leaves_the_design_as_it_was(design_file, monkeypatch):
    d = load_design(design_file)
    before = _state(d)

    def broken(*a, **k):
        raise IndexError("list index out of range")
    # the model has the new stage by the time the document is written
    monkeypatch.setattr(document, "insert_stage_table", broken)
    with pytest.raises(DesignError) as err:
        E.apply_edit(d, E.AddStage("output/volume", 1))
    assert "unchanged" in str(err.value) and "\n" not in str(err.value)
    assert _state(d) == before
    monkeypatch.undo()
    monkeypatch.setattr(document, "drop_link_table", broken)
    E.apply_edit(d, E.AddLink(("amp", "env"), ("level", "ctl")))
    with_link = _state(d)
    with pytest.raises(DesignError):
        E.apply_edit(d, E.RemoveStage("amp"))     # fails after the links went
    assert _state(d) == with_link


EDITS = [
    E.SetValue("amp.R2", "68k1"),
    E.SetRotation("level.VOL", 0.2),
    E.SetTaper("level.VOL", [[0, 0], [0.5, 0.2], [1, 1]]),
    E.SetTolerance("amp.R2", None),
    E.SetTolerance("amp.R1", "1%"),
    E.SetPosition("level.SW", 1),
    E.SetTemperature(40.0),
    E.SetBypass("amp", True),
    E.AddStage("output/volume", 1),
    E.AddStage("output/volume", 0, "first"),
    E.DuplicateStage("amp"),
    E.RemoveStage("level"),
    E.MoveStage("level", -1),
    E.RenameStage("amp", "front"),
    E.AddLink(("amp", "env"), ("level", "ctl")),
    E.AddProbe("v(level.w)", "wiper"),
]


@pytest.mark.parametrize("edit", EDITS, ids=lambda e: type(e).__name__)
def test_undo_is_the_inverse_edit_and_restores_the_file_exactly(design_file, edit):
    d = load_design(design_file)
    before = _state(d)
    applied = E.apply_edit(d, edit)
    assert _state(d) != before
    back = E.apply_edit(d, applied.inverse)
    assert _state(d) == before
    assert differences(load_design(design_file), d) == []
    # redo (the inverse of the inverse) lands where the edit did
    E.apply_edit(d, back.inverse)
    again = _state(d)
    d2 = load_design(design_file)
    E.apply_edit(d2, edit)
    assert again == _state(d2)


def test_edits_travel_as_data_to_a_copy_without_the_document(design_file):
    d = load_design(design_file)
    host = d.copy(document=False)
    assert host.doc is None
    for edit in EDITS[:9] + [E.AddLink(("amp", "env"), ("level", "ctl"))]:
        applied = E.apply_edit(d, edit)
        sent = pickle.loads(pickle.dumps(applied.edit))     # as the pipe carries it
        E.apply_edit(host, sent)
    assert _circuit(host) == _circuit(d)
    assert differences(d, host) == []


def _circuit(d):
    """The flat circuit's elements, or why there is none (a chain moved
    out of order may leave a net without a DC path)."""
    try:
        return [(e.name, e.kind, e.nodes, e.value, e.params) for e in d.flatten().elements]
    except DesignError as exc:
        return exc.message


def test_a_value_is_read_once_when_the_edit_is_made():
    # IEC 60062 letter-for-decimal notation: 4k7 = 4.7 kilo-ohm (docs/references.md)
    assert E.SetValue("amp.R2", "4k7").value == 4700.0
    with pytest.raises(DesignError):
        E.SetValue("amp.R2", "4k7k")
