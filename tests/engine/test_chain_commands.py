"""Every command on a long chain of gains: linear by structure, exact answers.

No timing here: the checks count what the work is made of (per-block calls, the size of
the printed text) and compare the answers with closed forms. Demo data throughout: a
first-order plant ``2/(s + 1)`` under proportional control through gains in series.
"""
from __future__ import annotations

import contextlib
import importlib.resources as ir
import io
import json
import pickle
import re

import numpy as np
import pytest
from numpy.testing import assert_allclose

from loopwright.engine import cli, interconnect, project
from loopwright.engine.diagram import Diagram, PortRef
from loopwright.engine.interconnect import assemble
from loopwright.engine.path_text import PATH_TEXT_MAX, path_text
from diagrams import gain_chain as _gain_chain

SAMPLES = ["conveyor_flexible_drive.lwd", "levitated_rotor_axis.lwd", "two_zone_oven.lwd"]


def _run(argv) -> tuple[int, str]:
    out = io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(io.StringIO()):
        status = cli.main(argv)
    return status, out.getvalue()


def _same_diagram(a: Diagram, b: Diagram) -> None:
    assert a == b
    assert list(a.blocks) == list(b.blocks) and list(a.wires) == list(b.wires)
    assert a._next == b._next
    for w in b.wires.values():
        assert a.wire_from(w.source).id == w.id
        for t in w.targets:
            assert a.wire_into(t).id == w.id
        assert a.wire_by_name(w.name).id == w.id
    for blk in b.blocks.values():
        assert a.block_by_name(blk.name).id == blk.id


def _one_by_one(data: dict) -> Diagram:
    """The diagram of a project file's data built by ``add_block`` and ``connect`` in file order."""
    d = Diagram()
    d.meta, d.settings = data.get("meta", {}), data.get("settings", {})
    for entry in data["blocks"]:
        bid = d.add_block(entry["kind"], entry["name"], entry["params"], caption=entry.get("caption", ""))
        d.blocks[bid].layout = entry.get("layout", {})
    for entry in data["wires"]:
        for target in entry["to"]:
            wid = d.connect(entry["from"], target, name=entry["signal"])
        if "layout" in entry:
            d.wires[wid].layout = entry["layout"]
    return d


@pytest.mark.parametrize("name", SAMPLES + ["chain"])
def test_loading_at_once_gives_the_diagram_built_one_by_one(name, monkeypatch):
    text = project.dumps(_gain_chain([1.0, 2.0, 0.5] * 20)) if name == "chain" else (ir.files("loopwright.samples") / name).read_text()
    reference = _one_by_one(json.loads(text))
    calls = []
    monkeypatch.setattr(Diagram, "add_block", lambda *a, **k: calls.append(a))
    monkeypatch.setattr(Diagram, "connect", lambda *a, **k: calls.append(a))
    loaded = project.loads(text)
    assert calls == []  # no per-block lookups: blocks and wires added in one pass each
    _same_diagram(loaded, reference)
    monkeypatch.undo()
    assert project.dumps(loaded) == text  # load then save: the same file


def _extra_junction_fed_from(data, src, signal):
    data["blocks"].append({"name": "extra", "kind": "sum", "params": {"signs": ["+"], "width": 1}})
    data["wires"].append({"signal": signal, "from": src, "to": ["extra.in1"]})


@pytest.mark.parametrize("edit, message", [
    (lambda data: data["blocks"].append(dict(data["blocks"][3])), "blocks[8] (block 'P'): block name 'P' is already used by another block"),
    (lambda data: data["wires"][2]["to"].append("g0.in"), "wires[2].to[1] (wire 's1'): g0.in is already fed by wire 's0'"),
    (lambda data: data["wires"].append({"signal": "x", "from": "g0.out", "to": ["P.d"]}),
     "wires[8].to[0] (wire 'x'): P.d is not an input port of plant 'P' (inputs: u)"),
    (lambda data: data["wires"].append({"signal": "x", "from": "nowhere.out", "to": ["P.u"]}), "wires[8].to[0] (wire 'x'): no block named 'nowhere'"),
    (lambda data: _extra_junction_fed_from(data, "g1.out", "s1"), "wires[8].to[0] (wire 's1'): signal name 's1' is already carried by another wire"),
])
def test_a_file_refused_by_the_one_pass_load_gets_the_one_by_one_message(edit, message):
    data = json.loads(project.dumps(_gain_chain([1.0, 2.0, 3.0])))
    edit(data)
    with pytest.raises(project.ProjectFileError, match="^" + re.escape("f.lwd: " + message)):
        project.loads(json.dumps(data), origin="f.lwd")


def test_a_second_wire_entry_from_one_port_loads_as_connecting_one_by_one_does():
    # connecting one by one fans the first wire out and renames it after the second entry
    data = json.loads(project.dumps(_gain_chain([1.0, 2.0, 3.0])))
    _extra_junction_fed_from(data, "P.y", "yy")
    loaded = project.loads(json.dumps(data))
    _same_diagram(loaded, _one_by_one(data))
    assert loaded.wire_by_name("yy").targets == [PortRef(loaded.block_by_name("ym").id, "in1"), PortRef(loaded.block_by_name("extra").id, "in1")]


def test_the_schema_is_checked_once_per_file_not_block_by_block(monkeypatch):
    # a valid file passes the quick check alone: the full validator never walks it
    text = project.dumps(_gain_chain([1.0] * 300))
    validator = project._validator()[0]
    walks = []
    monkeypatch.setattr(type(validator), "iter_errors", lambda self, *a, **k: walks.append(1) or iter(()))
    project.loads(text)
    assert walks == []


@pytest.mark.parametrize("text, odd", [
    ("1e400", True), ("1E+0400", True), ("-2.5e308", True), ("1" + "0" * 309, True), ("0." + "0" * 400 + "1", True),
    ("1e-400", False), ("1e99", False), ("1" + "0" * 307, False), ('"e400"', True), ("[1.5, 2e+38]", False),
])
def test_the_out_of_range_hint_finds_every_number_beyond_the_float_range(text, odd):
    # a hint: it may flag harmless text (a name with digits after an e), never miss a number
    # beyond about 1.8e308 (common practice, no source: the IEEE double range)
    assert project._may_hold_out_of_range_number(text) is odd


def test_loading_refuses_numbers_beyond_the_float_range_with_their_place():
    text = project.dumps(_gain_chain([1.0, 2.0])).replace('"K": [\n          [\n            2.0', '"K": [\n          [\n            2e400')
    with pytest.raises(project.ProjectFileError, match=r"blocks\[6\]\.params\.K\[0\]\[0\] \(block 'g1'\): 2e400 is not a finite number"):
        project.loads(text, origin="f.lwd")


@pytest.mark.parametrize("name", SAMPLES + ["chain"])
def test_a_copy_is_equal_and_independent(name):
    d = _gain_chain([1.0, 2.0] * 10) if name == "chain" else project.load(str(ir.files("loopwright.samples") / name))
    d.wire_into(next(iter(d.wires.values())).targets[0])  # lookup tables built, copied along
    c = d.copy()
    _same_diagram(c, pickle.loads(pickle.dumps(d)))
    for bid, blk in d.blocks.items():
        assert c.blocks[bid] is not blk and c.blocks[bid].params is not blk.params and c.blocks[bid].layout is not blk.layout
    for wid, w in d.wires.items():
        assert c.wires[wid].targets is not w.targets and c.wires[wid].layout is not w.layout
    first = next(iter(c.blocks))
    c.rename_block(first, "renamed")
    c.blocks[first].params["changed"] = True
    assert d.blocks[first].name != "renamed" and "changed" not in d.blocks[first].params
    src = next(iter(d.wires.values())).source
    c.remove_wire(c.wire_from(src).id)
    assert d.wire_from(src) is not None and c.wire_from(src) is None


def test_equal_gains_share_one_realisation_and_the_model_is_exact(monkeypatch):
    gains = [1.0, -0.5, 2.0] * 100
    made = []
    real = interconnect.realize
    monkeypatch.setattr(interconnect, "realize", lambda b, d: made.append(b.name) or real(b, d))
    m = assemble(_gain_chain(gains))
    # one realisation per distinct gain, the plant and the two junctions (equal gains share one)
    assert sorted(made) == sorted(["e", "ym", "P", "g0", "g1", "g2"])
    g = float(np.prod(gains))
    # closed form: x' = -x + 2 u, u = g (r - x - n): A = -(1 + 2 g), B_r = 2 g, C_u = -g, D_ur = g
    assert_allclose(m.A, [[-(1.0 + 2.0 * g)]], rtol=1e-14)
    assert_allclose(m.pair("r", "u")[1:], ([[2.0 * g]], [[-g]], [[g]]), rtol=1e-14)
    # every chain signal: s_k = (g_0 ... g_{k-1}) e, with e = r - x - n
    for k in (0, 1, 150, 299):
        scale = float(np.prod(gains[:k]))
        assert_allclose(m.pair("n", f"s{k}")[2:], ([[-scale]], [[-scale]]), rtol=1e-14)


def test_a_shared_realisation_cannot_be_changed_in_place():
    m = assemble(_gain_chain([3.0] * 4))
    shared = m.realizations[m.diagram.block_by_name("g0").id]
    assert shared is m.realizations[m.diagram.block_by_name("g3").id]
    with pytest.raises(ValueError):
        shared.D[0, 0] = 1.0


@pytest.mark.parametrize("params", [{"K": [[1]]}, {"K": 1}, {"K": [[True]]}, {"K": [[1.0]], "recipe": {}}])
def test_gains_equal_as_python_numbers_but_not_as_parameters_are_not_shared(params, monkeypatch):
    # 1, 1.0 and true differ in a project file (true is not a number there), and a gain
    # with more than K is checked on its own: none of these borrows the realisation of [[1.0]]
    d = _gain_chain([1.0, 1.0])
    d.add_block("gain", "odd", params)
    d.add_block("source", "q", {"role": "reference", "width": 1})
    d.connect("q.out", "odd.in")
    made = []
    real = interconnect.realize
    monkeypatch.setattr(interconnect, "realize", lambda b, dd: made.append(b.name) or real(b, dd))
    m = assemble(d)
    assert made.count("odd") == 1 and made.count("g0") == 1 and "g1" not in made
    assert_allclose(m.pair("q", "odd.out")[3], [[1.0]])


def test_the_audit_table_grows_linearly_with_the_chain(tmp_path):
    sizes = {}
    for gains in (200, 400):
        path = str(tmp_path / f"chain{gains}.lwd")
        project.save(_gain_chain([1.0] * gains), path)
        status, text = _run(["audit", path])
        assert status == 0
        sizes[gains] = len(text)
        status, text_json = _run(["audit", path, "--json"])
        rows = json.loads(text_json)["rows"]
        assert max(len(r["path"]["blocks"]) for r in rows) == gains + 4  # --json lists every block
    # linear: twice the gains, about twice the text (a full listing would give about 4 times)
    assert 1.8 < sizes[400] / sizes[200] < 2.2


def test_a_long_path_is_shown_by_its_ends_and_a_short_one_in_full():
    names = [f"b{k}" for k in range(PATH_TEXT_MAX + 1)]
    assert path_text(names[:PATH_TEXT_MAX]) == " ".join(names[:PATH_TEXT_MAX])
    assert path_text(names) == f"b0 b1 b2 ... {PATH_TEXT_MAX + 1 - 6} more ... b10 b11 b12"
    assert path_text([f"g{k}" for k in range(5000)], sep=" -> ") == "g0 -> g1 -> g2 -> ... 4,994 more ... -> g4997 -> g4998 -> g4999"


def test_the_report_shows_the_chain_paths_by_their_ends(tmp_path):
    path = str(tmp_path / "chain.lwd")
    project.save(_gain_chain([1.0] * 50), path)
    status, text = _run(["report", path])
    assert status == 0
    assert "... 48 more ..." in text and "g20" not in text
