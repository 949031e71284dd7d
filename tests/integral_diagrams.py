"""The levitated-rotor sample (demo data) with integral action on the gap drawn in, shared by
the GUI tests of the recipe editor and of dragging on the pole map."""
from __future__ import annotations

import copy

from loopwright.engine.diagram import Diagram
from loopwright.engine.project import load
from loopwright.engine.recipes import redesign
from loopwright.engine.tracking import add_integral_action

from diagrams import sample_path

#: the state feedback's recipe: the four poles of the plant augmented with the integrator of r - y
ROTOR_INTEGRAL_POLES = [[-80, 60], [-80, -60], -150, -60]


def rotor_with_integral_action() -> Diagram:
    """Rotor sample + integrator of ``r - y`` feeding gain ``integral_gain`` into ``uc``; the
    feedforward gain is zeroed (the reference enters through the integrator); designed."""
    d = add_integral_action(load(sample_path("levitated_rotor_axis.lwd")), [[0.0]], reference="r", measured="y",
                            actuator_sum="uc")
    d.set_params(d.block_by_name("N").id, {"K": [[0.0]]})
    k = d.block_by_name("K")
    params = copy.deepcopy(k.params)
    params["recipe"] = {"method": "place", "plant": "P", "poles": copy.deepcopy(ROTOR_INTEGRAL_POLES),
                        "integral": {"block": "integral_gain", "outputs": [1]}}
    d.set_params(k.id, params)
    return redesign(d)[0]
