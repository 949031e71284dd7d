"""Helpers for the GUI tests: sample paths and model comparison through python-control."""
from __future__ import annotations

from pathlib import Path

import control as ct
import numpy as np
from numpy.testing import assert_allclose

from loopwright.engine.interconnect import assemble

SAMPLES = sorted(Path(__file__).resolve().parents[1].joinpath("samples").glob("*.lwd"))
FREQS_RAD_S = np.array([0.1, 1.0, 7.0, 40.0])


def frequency_responses(model) -> np.ndarray:
    """Response of every signal to every input at FREQS_RAD_S, computed by python-control."""
    sys = ct.ss(model.A, model.B, model.C, model.D)
    return np.asarray(sys(1j * FREQS_RAD_S))  # (outputs, inputs, freqs)


def assert_same_transfer(diagram_a, diagram_b, *, rtol=1e-9, atol=1e-9) -> None:
    """Both diagrams assemble to models with the same signals, inputs and responses.

    The response from every input to every signal is compared at a few frequencies with
    python-control's state-space evaluation (an outside reference), which does not depend
    on the order of the states.
    """
    ma, mb = assemble(diagram_a), assemble(diagram_b)
    assert ma.output_names == mb.output_names
    assert ma.input_names == mb.input_names
    assert ma.A.shape == mb.A.shape
    assert_allclose(frequency_responses(ma), frequency_responses(mb), rtol=rtol, atol=atol)


def apply_random_edit(doc, op) -> None:
    """Apply one generated edit through the commands; an edit the engine refuses is skipped."""
    from loopwright.engine.diagram import PortRef
    from loopwright.engine.errors import EngineError
    from loopwright.engine.ports import input_ports, output_ports
    from loopwright.gui.canvas.clipboard import make_fragment
    from loopwright.gui.commands import AddBlock, Connect, DeleteItems, MoveBlocks, PasteFragment

    blocks = list(doc.diagram.blocks)
    kind = op[0]
    try:
        if kind == "add":
            doc.push(AddBlock(doc, op[1], layout={"x": op[2], "y": op[3]}))
        elif not blocks:
            return
        elif kind == "connect":
            src = doc.diagram.blocks[blocks[op[1] % len(blocks)]]
            dst = doc.diagram.blocks[blocks[op[2] % len(blocks)]]
            outs, ins = output_ports(src), input_ports(dst)
            if outs and ins:
                doc.push(Connect(doc, PortRef(src.id, outs[0]), PortRef(dst.id, ins[-1])))
        elif kind == "move":
            bid = blocks[op[1] % len(blocks)]
            doc.push(MoveBlocks(doc, {bid: {"x": float(op[2]), "y": float(-op[2])}}))
        elif kind == "turn":
            bid = blocks[op[1] % len(blocks)]
            doc.push(MoveBlocks(doc, {bid: {"rotation": 90, "flip": True}}))
        elif kind == "delete":
            doc.push(DeleteItems(doc, [blocks[op[1] % len(blocks)]], []))
        elif kind == "paste":
            frag = make_fragment(doc.diagram, blocks[: 1 + op[1] % len(blocks)])
            doc.push(PasteFragment(doc, frag))
    except EngineError:
        pass  # a refused edit must leave no trace; checked by the undo/redo round trip
