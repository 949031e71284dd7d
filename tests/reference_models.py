"""Translate a Loopwright diagram into python-control systems (the outside reference).

Used by tests and bench scripts only: the engine itself never imports python-control.
Each block becomes a named ``ct.ss`` with one signal per port component; wires become
explicit ``connections`` of ``ct.interconnect``. Sources enter as external inputs.
"""
from __future__ import annotations

import control as ct
import numpy as np

from loopwright.engine.blocks import port_widths, realize
from loopwright.engine.diagram import Diagram


def _names(block: str, port: str, width: int) -> list[str]:
    return [f"{block}__{port}_{k}" for k in range(width)]


def to_python_control(diagram: Diagram):
    """``(closed_loop, input_names, output_names)`` built by ``ct.interconnect``.

    Inputs: every source component (``<source>__ext_k``). Outputs: every output port component.
    """
    syslist, inplist, outlist, connections = [], [], [], []
    for b in diagram.blocks.values():
        if b.kind == "source":
            w = port_widths(b, diagram)[1]["out"]
            ext = [f"{b.name}__ext_{k}" for k in range(w)]
            outs = _names(b.name, "out", w)
            syslist.append(ct.ss(np.zeros((0, 0)), np.zeros((0, w)), np.zeros((w, 0)), np.eye(w), inputs=ext, outputs=outs, name=b.name))
            inplist += ext
            outlist += outs
            continue
        r = realize(b, diagram)
        ins = [n for port, w in r.inputs for n in _names(b.name, port, w)]
        outs = [n for port, w in r.outputs for n in _names(b.name, port, w)]
        syslist.append(ct.ss(r.A, r.B, r.C, r.D, inputs=ins, outputs=outs, name=b.name))
        outlist += outs
    for w in diagram.wires.values():
        sb = diagram.blocks[w.source.block]
        width = port_widths(sb, diagram)[1][w.source.port]
        for t in w.targets:
            tb = diagram.blocks[t.block]
            for k in range(width):
                connections.append([f"{tb.name}.{tb.name}__{t.port}_{k}", f"{sb.name}.{sb.name}__{w.source.port}_{k}"])
    sys = ct.interconnect(syslist, connections=connections, inplist=inplist, outlist=outlist, check_unused=False)
    return sys, inplist, outlist
