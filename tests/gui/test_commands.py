"""Scripted editing runs: every sample rebuilt from an empty canvas through the app's own
commands, undone to nothing and redone, copied, pasted and turned; the assembled model is
compared with the sample file's each time."""
from __future__ import annotations

import copy

import pytest
from numpy.testing import assert_allclose

from loopwright.engine.diagram import Diagram, PortRef
from loopwright.engine.errors import ConnectionError_, DiagramError, ParameterError
from loopwright.engine.interconnect import assemble
from loopwright.engine.project import load
from loopwright.gui.commands import (
    AddBlock,
    Connect,
    DeleteItems,
    Disconnect,
    MoveBlocks,
    PasteFragment,
    RenameBlock,
    RenameWire,
    SetCaption,
    SetParams,
    SetWireLayout,
)
from loopwright.gui.canvas.clipboard import fragment_from_mime, fragment_to_mime, make_fragment
from loopwright.gui.document import Document

from gui_helpers import SAMPLES, apply_random_edit, assert_same_transfer

pytestmark = pytest.mark.qt


def rebuild(doc: Document, sample: Diagram) -> dict[str, str]:
    """Draw ``sample`` on ``doc`` the way a user would: place, rename, edit, connect, name.

    Returns the map from the sample's block ids to the new ones.
    """
    ids = {}
    for b in sample.blocks.values():
        place = AddBlock(doc, b.kind, layout={"x": b.layout["x"] + 3, "y": b.layout["y"] + 3})
        doc.push(place)
        bid = place.block_id
        ids[b.id] = bid
        doc.push(MoveBlocks(doc, {bid: {"x": b.layout["x"], "y": b.layout["y"], "rotation": b.layout.get("rotation", 0),
                                        "flip": b.layout.get("flip", False)}}))
        if doc.diagram.blocks[bid].name != b.name:
            doc.push(RenameBlock(doc, bid, b.name))
        doc.push(SetParams(doc, bid, b.params))
        if b.caption:
            doc.push(SetCaption(doc, bid, b.caption))
    for w in sample.wires.values():
        src = PortRef(ids[w.source.block], w.source.port)
        for t in w.targets:
            cmd = Connect(doc, src, PortRef(ids[t.block], t.port))
            doc.push(cmd)
        if doc.diagram.wires[cmd.wire_id].name != w.name:
            doc.push(RenameWire(doc, cmd.wire_id, w.name))
        if w.layout:
            doc.push(SetWireLayout(doc, cmd.wire_id, w.layout))
    return ids


@pytest.mark.parametrize("path", SAMPLES, ids=[p.stem for p in SAMPLES])
def test_rebuilding_each_sample_from_empty_gives_the_sample_model(qtbot, path):
    # The sample file is the outside reference; the comparison of responses uses python-control.
    sample = load(path)
    doc = Document()
    rebuild(doc, sample)
    assert {b.name for b in doc.diagram.blocks.values()} == {b.name for b in sample.blocks.values()}
    ma, mb = assemble(doc.diagram), assemble(sample)
    # Same drawing order gives the same state order, so the matrices agree entry by entry.
    assert ma.state_names == mb.state_names
    for x, y in ((ma.A, mb.A), (ma.B, mb.B), (ma.C, mb.C), (ma.D, mb.D)):
        assert_allclose(x, y, rtol=1e-12, atol=1e-12)
    assert_same_transfer(doc.diagram, sample)


@pytest.mark.parametrize("path", SAMPLES, ids=[p.stem for p in SAMPLES])
def test_undo_everything_empties_and_redo_everything_restores_the_model(qtbot, path):
    sample = load(path)
    doc = Document()
    rebuild(doc, sample)
    built = doc.snapshot()
    stack = doc.undo_stack
    steps = stack.count()
    for _ in range(steps):
        stack.undo()
    assert doc.diagram.blocks == {} and doc.diagram.wires == {}
    for _ in range(steps):
        stack.redo()
    assert doc.diagram == built
    assert_same_transfer(doc.diagram, sample)


@pytest.mark.parametrize("path", SAMPLES, ids=[p.stem for p in SAMPLES])
def test_copy_paste_of_a_whole_sample_into_an_empty_document_keeps_the_model(qtbot, path):
    sample = load(path)
    src = Document(sample.copy())
    mime = fragment_to_mime(make_fragment(src.diagram, list(src.diagram.blocks)))
    fragment = fragment_from_mime(mime)
    dst = Document()
    dst.push(PasteFragment(dst, fragment, offset=(40.0, 40.0)))
    assert_same_transfer(dst.diagram, sample)
    # The layout moved by the offset, names and signals did not change.
    for b in sample.blocks.values():
        pasted = dst.diagram.block_by_name(b.name)
        assert pasted.layout["x"] == pytest.approx(b.layout["x"] + 40.0)


@pytest.mark.parametrize("path", SAMPLES, ids=[p.stem for p in SAMPLES])
def test_pasting_next_to_the_original_renames_the_copy_and_relinks_its_estimator(qtbot, path):
    sample = load(path)
    doc = Document(sample.copy())
    fragment = make_fragment(doc.diagram, list(doc.diagram.blocks))
    cmd = PasteFragment(doc, fragment)
    doc.push(cmd)
    assert len(doc.diagram.blocks) == 2 * len(sample.blocks)
    copies = [doc.diagram.blocks[b] for b in cmd.block_ids]
    assert {b.name for b in copies}.isdisjoint({b.name for b in sample.blocks.values()})
    est = next(b for b in copies if b.kind == "estimator")
    plant = next(b for b in copies if b.kind == "plant")
    assert est.params["plant"] == plant.name
    # The copy is a second, independent loop: twice the states.
    assert assemble(doc.diagram).A.shape[0] == 2 * assemble(sample).A.shape[0]
    doc.undo_stack.undo()
    assert doc.diagram == sample


@pytest.mark.parametrize("path", SAMPLES, ids=[p.stem for p in SAMPLES])
def test_turning_and_mirroring_every_block_keeps_the_model(qtbot, path):
    sample = load(path)
    doc = Document(sample.copy())
    before = assemble(doc.diagram)
    doc.push(MoveBlocks(doc, {b: {"rotation": 90} for b in doc.diagram.blocks}, text="Turn"))
    doc.push(MoveBlocks(doc, {b: {"flip": not doc.diagram.blocks[b].layout.get("flip", False)} for b in doc.diagram.blocks}))
    after = assemble(doc.diagram)
    for x, y in ((before.A, after.A), (before.B, after.B), (before.C, after.C), (before.D, after.D)):
        assert_allclose(x, y, rtol=0, atol=0)


def test_deleting_a_block_detaches_its_wires_and_undo_puts_everything_back(qtbot):
    sample = load(SAMPLES[0])
    doc = Document(sample.copy())
    plant = doc.diagram.block_by_name("P")
    cmd = DeleteItems(doc, [plant.id], [])
    doc.push(cmd)
    assert plant.id not in doc.diagram.blocks
    for w in doc.diagram.wires.values():
        assert w.source.block != plant.id and all(t.block != plant.id for t in w.targets)
    # The wire "u" fed both P and the estimator: it survives with the estimator only.
    u = doc.diagram.wire_by_name("u")
    assert [doc.diagram.blocks[t.block].name for t in u.targets] == ["est"]
    doc.undo_stack.undo()
    assert doc.diagram == sample


def test_a_drag_of_several_blocks_is_one_undo_step_and_moves_their_shared_bends(qtbot):
    doc = Document()
    a = AddBlock(doc, "gain", layout={"x": 0, "y": 0})
    b = AddBlock(doc, "gain", layout={"x": 200, "y": 0})
    doc.push(a)
    doc.push(b)
    c = Connect(doc, PortRef(a.block_id, "out"), PortRef(b.block_id, "in"), bends=[[100.0, 0.0], [100.0, 50.0]])
    doc.push(c)
    count = doc.undo_stack.count()
    doc.push(MoveBlocks(doc, {a.block_id: {"x": 10.0, "y": 20.0}, b.block_id: {"x": 210.0, "y": 20.0}}))
    assert doc.undo_stack.count() == count + 1
    assert doc.diagram.wires[c.wire_id].layout["bends"]["0"] == [[110.0, 20.0], [110.0, 70.0]]
    doc.undo_stack.undo()
    assert doc.diagram.wires[c.wire_id].layout["bends"]["0"] == [[100.0, 0.0], [100.0, 50.0]]
    assert doc.diagram.blocks[a.block_id].layout["x"] == 0


def test_connecting_an_input_that_is_already_fed_is_refused_and_changes_nothing(qtbot):
    doc = Document(load(SAMPLES[0]))
    before = doc.snapshot()
    r = doc.diagram.block_by_name("r")
    p = doc.diagram.block_by_name("P")
    steps = doc.undo_stack.count()
    with pytest.raises(ConnectionError_, match="already fed"):
        doc.push(Connect(doc, PortRef(r.id, "out"), PortRef(p.id, "u")))
    assert doc.diagram == before
    assert doc.undo_stack.count() == steps  # nothing recorded: undo cannot trip over it
    doc.undo_stack.undo()


def test_renaming_to_a_taken_name_is_refused_before_the_command_exists(qtbot):
    doc = Document(load(SAMPLES[0]))
    k = doc.diagram.block_by_name("K")
    with pytest.raises(DiagramError, match="already used"):
        RenameBlock(doc, k.id, "P")
    with pytest.raises(ParameterError, match="not valid"):
        RenameBlock(doc, k.id, "2fast")


def test_set_params_with_a_malformed_matrix_is_refused_by_the_engine(qtbot):
    doc = Document(load(SAMPLES[0]))
    p = doc.diagram.block_by_name("P")
    bad = copy.deepcopy(p.params)
    bad["A"] = [[1.0, 2.0], [3.0]]
    with pytest.raises(ParameterError):
        SetParams(doc, p.id, bad)
    assert doc.diagram.block_by_name("P").params == load(SAMPLES[0]).block_by_name("P").params


def test_removing_a_summing_input_that_a_wire_feeds_is_refused(qtbot):
    doc = Document(load(SAMPLES[0]))
    s = next(b for b in doc.diagram.blocks.values() if b.kind == "sum")
    params = dict(s.params, signs=s.params["signs"][:1])
    with pytest.raises(ConnectionError_, match="delete the wire first"):
        SetParams(doc, s.id, params)


def test_disconnecting_one_branch_keeps_the_rest_of_the_wire(qtbot):
    doc = Document(load(SAMPLES[0]))
    u = doc.diagram.wire_by_name("u")
    first, second = u.targets
    doc.push(Disconnect(doc, u.id, second))
    assert doc.diagram.wires[u.id].targets == [first]
    doc.undo_stack.undo()
    assert doc.diagram.wires[u.id].targets == [first, second]


def test_document_emits_one_specific_signal_per_change_and_none_when_unchanged(qtbot):
    doc = Document()
    seen = []
    for name in ("block_added", "params_changed", "layout_changed", "renamed", "caption_changed", "changed"):
        getattr(doc, name).connect(lambda *args, n=name: seen.append(n))
    bid = doc.add_block("gain", "K")
    doc.set_params(bid, {"K": [[2.0]]})
    doc.set_params(bid, {"K": [[2.0]]})  # unchanged: nothing emitted
    doc.set_layout(bid, {"x": 0.0})  # unchanged
    doc.set_layout(bid, {"x": 10.0})
    doc.rename_block(bid, "K")  # unchanged
    doc.rename_block(bid, "Kx")
    doc.set_caption(bid, "feedback")
    assert [s for s in seen if s != "changed"] == ["block_added", "params_changed", "layout_changed", "renamed", "caption_changed"]
    assert seen.count("changed") == 5
    assert doc.revision == 5


from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

_KINDS = ["plant", "dynamic", "gain", "sum", "integrator", "source"]
_op = st.one_of(
    st.tuples(st.just("add"), st.sampled_from(_KINDS), st.integers(-300, 300), st.integers(-300, 300)),
    st.tuples(st.just("connect"), st.integers(0, 50), st.integers(0, 50)),
    st.tuples(st.just("move"), st.integers(0, 50), st.integers(-100, 100)),
    st.tuples(st.just("turn"), st.integers(0, 50)),
    st.tuples(st.just("delete"), st.integers(0, 50)),
    st.tuples(st.just("paste"), st.integers(0, 50)),
)


@settings(max_examples=25, deadline=None)
@given(ops=st.lists(_op, min_size=1, max_size=14))
def test_any_edit_sequence_undoes_to_empty_and_redoes_to_the_same_diagram(qapp, ops):
    # Property (common practice, no source): undo is the exact inverse of every command.
    doc = Document()
    for op in ops:
        apply_random_edit(doc, op)
    final = doc.snapshot()
    n = doc.undo_stack.count()
    for _ in range(n):
        doc.undo_stack.undo()
    assert doc.diagram.blocks == {} and doc.diagram.wires == {}
    for _ in range(n):
        doc.undo_stack.redo()
    assert doc.diagram == final
