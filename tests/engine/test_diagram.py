"""The diagram model: names, ids, wiring rules, fan-out, renames and the block graph."""
from __future__ import annotations

import pytest

from loopwright.engine.diagram import Diagram, PortRef
from loopwright.engine.errors import ConnectionError_, DiagramError, ParameterError, UnknownNameError
from loopwright.engine.validation import parse_matrix_text


def small() -> Diagram:
    d = Diagram()
    d.add_block("source", "r")
    d.add_block("gain", "G", {"K": [[2.0]]})
    d.add_block("plant", "P", {"num": [1.0], "den": [1.0, 1.0]})
    return d


def test_names_are_unique_identifiers():
    d = small()
    with pytest.raises(DiagramError, match="already used"):
        d.add_block("gain", "G")
    with pytest.raises(ParameterError, match="not valid"):
        d.add_block("gain", "2x")
    with pytest.raises(ParameterError, match="unknown block kind 'mux'"):
        d.add_block("mux", "M")
    assert d.unique_name("G") == "G2"


def test_fan_out_is_one_wire_with_many_targets():
    d = small()
    w1 = d.connect("r.out", "G.in")
    w2 = d.connect("r.out", "P.u")
    assert w1 == w2 and len(d.wires[w1].targets) == 2
    assert d.wires[w1].name == "r.out"


def test_an_input_takes_one_wire_only():
    d = small()
    d.connect("r.out", "P.u")
    with pytest.raises(ConnectionError_, match=r"P\.u is already fed by wire 'r\.out'"):
        d.connect("G.out", "P.u")


def test_ports_are_checked_by_direction():
    d = small()
    with pytest.raises(ConnectionError_, match="not an output port"):
        d.connect("P.u", "G.in")
    with pytest.raises(ConnectionError_, match="not an input port"):
        d.connect("r.out", "G.out")
    with pytest.raises(UnknownNameError, match="no block named 'Q'") as info:
        d.connect("r.out", "Q.u")
    assert info.value.suggestions == ()  # nothing resembles "Q"
    with pytest.raises(UnknownNameError, match="no block named 'PP'") as info:
        d.connect("r.out", "PP.u")
    assert info.value.suggestions == ("P",)  # one letter too many


def test_rename_carries_default_signal_names_and_links():
    d = small()
    d.connect("G.out", "P.u")
    d.add_block("estimator", "E", {"plant": "P", "L": [[1.0]]})
    d.rename_block(d.block_by_name("G").id, "Kc")
    d.rename_block(d.block_by_name("P").id, "Belt")
    assert [w.name for w in d.wires.values()] == ["Kc.out"]
    assert d.block_by_name("E").params["plant"] == "Belt"


def test_remove_block_detaches_wires_and_restores():
    d = small()
    d.connect("r.out", "G.in")
    d.connect("r.out", "P.u")
    g = d.block_by_name("G")
    d.remove_block(g.id)
    assert list(d.wires.values())[0].targets == [PortRef(d.block_by_name("P").id, "u")]
    d.restore_block(g)
    assert d.block_by_name("G").id == g.id


def test_graph_has_an_edge_per_target():
    d = small()
    d.connect("r.out", "G.in")
    d.connect("r.out", "P.u")
    g = d.graph()
    assert g.number_of_nodes() == 3 and g.number_of_edges() == 2


@pytest.mark.parametrize(
    "text, expected",
    [
        ("1\t2\n3\t4", [[1, 2], [3, 4]]),
        ("1, 2; 3, 4", [[1, 2], [3, 4]]),
        ("[[0, 1], [-2, -3.5]]", [[0, 1], [-2, -3.5]]),
        ("np.array([[1e-3, 2]])", [[1e-3, 2]]),
        ("7", [[7]]),
        ("[1, 2, 3]", [[1, 2, 3]]),
    ],
)
def test_pasted_matrix_text(text, expected):
    assert parse_matrix_text(text) == expected


@pytest.mark.parametrize("text, message", [("", "empty"), ("1 2\n3", "different lengths"), ("1 x", "row 1, column 2"), ("[[1, 'a']]", "row 1, column 2")])
def test_bad_matrix_text_says_where(text, message):
    with pytest.raises(ParameterError, match=message):
        parse_matrix_text(text)
