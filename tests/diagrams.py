"""Diagrams shared by the engine tests: the bundled samples and the observer-based stage loops of
tests/REFERENCES.md#stage-observer."""
from __future__ import annotations

from importlib import resources
from pathlib import Path

from loopwright.engine.diagram import Diagram

SAMPLES = sorted(p.name for p in resources.files("loopwright.samples").iterdir() if p.name.endswith(".lwd"))


def sample_path(name: str) -> Path:
    return Path(str(resources.files("loopwright.samples") / name))


def stage_loop_ref03() -> Diagram:
    """tests/REFERENCES.md#stage-observer (separation principle, derived by hand): air-bearing stage, K = [8, 4], L = [11, 30], disturbance at the plant input."""
    d = Diagram()
    d.add_block("source", "d", {"role": "disturbance", "width": 1})
    d.add_block("plant", "P", {"A": [[0, 1], [0, 0]], "B": [[0], [1]], "C": [[1, 0]], "D": [[0]]})
    d.add_block("estimator", "est", {"plant": "P", "L": [[11], [30]]})
    d.add_block("gain", "Kx", {"K": [[-8, -4]]})
    d.add_block("sum", "up", {"signs": ["+", "+"], "width": 1})
    d.connect("est.xhat", "Kx.in")
    d.connect("Kx.out", "up.in1")
    d.connect("d.out", "up.in2")
    d.connect("up.out", "P.u")
    d.connect("P.y", "est.y")
    d.connect("Kx.out", "est.u")
    return d


STAGE = {"A": [[0.0, 1.0], [0.0, 0.0]], "B": [[0.0], [1.0]], "C": [[1.0, 0.0]], "D": [[0.0]]}


def stage_servo(k_recipe=None, l_recipe=None, *, plant=STAGE, disturbance=None, noise=None) -> Diagram:
    """The observer-based loop of tests/REFERENCES.md#stage-observer (air-bearing stage, demo data)."""
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0}})
    d.add_block("source", "dist", {"role": "disturbance", "width": 1,
                                   "waveform": disturbance or {"kind": "step", "amplitude": 0.2, "start": 1.0}})
    d.add_block("source", "meas_noise", {"role": "noise", "width": 1, "waveform": noise or {"kind": "zero"}})
    d.add_block("plant", "P", dict(plant))
    d.add_block("estimator", "est", {"plant": "P", "L": [[1.0], [1.0]], **({"recipe": l_recipe} if l_recipe else {})})
    d.add_block("gain", "Kx", {"K": [[-1.0, -1.0]], **({"recipe": k_recipe} if k_recipe else {})})
    d.add_block("gain", "Nr", {"K": [[1.0]], "recipe": {"method": "feedforward", "feedback": "Kx"}})
    d.add_block("sum", "uc", {"signs": ["+", "+"], "width": 1})
    d.add_block("sum", "up", {"signs": ["+", "+"], "width": 1})
    d.add_block("sum", "ym", {"signs": ["+", "+"], "width": 1})
    d.connect("r.out", "Nr.in", name="ref")
    d.connect("Nr.out", "uc.in1", name="u_ff")
    d.connect("Kx.out", "uc.in2", name="u_fb")
    d.connect("uc.out", "up.in1", name="u_c")
    d.connect("uc.out", "est.u")  # the estimator knows the command, not the disturbance
    d.connect("dist.out", "up.in2", name="d")
    d.connect("up.out", "P.u", name="u")
    d.connect("P.y", "ym.in1", name="y")
    d.connect("meas_noise.out", "ym.in2", name="v")
    d.connect("ym.out", "est.y", name="y_meas")
    d.connect("est.xhat", "Kx.in", name="xhat")
    return d


def stage_loop_named(*, linked: bool = True) -> Diagram:
    """tests/REFERENCES.md#stage-observer (separation principle, derived by hand) with named wires (xhat, ufb, dist, plant_input, y) and a step
    disturbance; ``linked=False`` gives the estimator its own copy of the plant model."""
    stage = {"A": [[0, 1], [0, 0]], "B": [[0], [1]], "C": [[1, 0]], "D": [[0]]}
    d = Diagram()
    d.add_block("source", "d", {"role": "disturbance", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0, "start": 0.0}})
    d.add_block("plant", "P", dict(stage))
    d.add_block("estimator", "est", {"plant": "P", "L": [[11], [30]]} if linked else {**stage, "L": [[11], [30]]})
    d.add_block("gain", "Kx", {"K": [[-8, -4]]})
    d.add_block("sum", "up", {"signs": ["+", "+"], "width": 1})
    d.connect("est.xhat", "Kx.in", name="xhat")
    d.connect("Kx.out", "up.in1", name="ufb")
    d.connect("Kx.out", "est.u")
    d.connect("d.out", "up.in2", name="dist")
    d.connect("up.out", "P.u", name="plant_input")
    d.connect("P.y", "est.y", name="y")
    return d


def rotor_lead_loop() -> Diagram:
    """tests/REFERENCES.md#rotor-sensitivity-integral: P = 1/(s^2 - 4), C = 80 (s + 1)/(s + 10) = 80 - 720/(s + 10), unity
    feedback; signals ref, err, u (the plant input, also settings.loop_break), y."""
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1})
    d.add_block("sum", "e", {"signs": ["+", "-"], "width": 1})
    d.add_block("plant", "Cl", {"A": [[-10.0]], "B": [[1.0]], "C": [[-720.0]], "D": [[80.0]]})
    d.add_block("plant", "P", {"A": [[0.0, 1.0], [4.0, 0.0]], "B": [[0.0], [1.0]], "C": [[1.0, 0.0]], "D": [[0.0]]})
    d.connect("r.out", "e.in1", name="ref")
    d.connect("e.out", "Cl.u", name="err")
    d.connect("Cl.y", "P.u", name="u")
    d.connect("P.y", "e.in2", name="y")
    d.settings["loop_break"] = "u"
    return d


def winder_servo() -> Diagram:
    """tests/REFERENCES.md#winder-step: L = 4/(s (s + 2)) in unity feedback, so
    T = 4/(s^2 + 2 s + 4) with wn = 2, zeta = 0.5; signals ref, err, u, y."""
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1})
    d.add_block("sum", "e", {"signs": ["+", "-"], "width": 1})
    d.add_block("gain", "Kp", {"K": [[4.0]]})
    d.add_block("plant", "P", {"A": [[0, 1], [0, -2]], "B": [[0], [1]], "C": [[1, 0]], "D": [[0]]})
    d.connect("r.out", "e.in1", name="ref")
    d.connect("e.out", "Kp.in", name="err")
    d.connect("Kp.out", "P.u", name="u")
    d.connect("P.y", "e.in2", name="y")
    return d


def nonminimum_phase_lag() -> Diagram:
    """G = (1 - s)/(s + 1)^2 driven by a reference (closed form: a zero at s = +1); output signal G.y."""
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1})
    d.add_block("plant", "G", {"num": [-1.0, 1.0], "den": [1.0, 2.0, 1.0]})
    d.connect("r.out", "G.u", name="u")
    return d


def gain_chain(gains: list[float]) -> Diagram:
    """Demo data: a first-order plant 2/(s + 1) under proportional control through gains in series:
    ``r -> e -> g0 -> ... -> P -> y``, ``ym = y + n`` fed back into ``e``."""
    d = Diagram()
    for kind, name, params in [
        ("source", "r", {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0}}),
        ("source", "n", {"role": "noise", "width": 1, "waveform": {"kind": "white", "intensity": 1e-4, "seed": 1}}),
        ("sum", "e", {"signs": ["+", "-"], "width": 1}),
        ("plant", "P", {"num": [2.0], "den": [1.0, 1.0]}),
        ("sum", "ym", {"signs": ["+", "+"], "width": 1}),
    ] + [("gain", f"g{k}", {"K": [[g]]}) for k, g in enumerate(gains)]:
        d.add_block(kind, name, params)
    outs = ["e.out"] + [f"g{k}.out" for k in range(len(gains))]
    wires = [("r.out", "e.in1", None)] + [(outs[k], f"g{k}.in", f"s{k}") for k in range(len(gains))]
    wires += [(outs[-1], "P.u", "u"), ("P.y", "ym.in1", "y"), ("n.out", "ym.in2", None), ("ym.out", "e.in2", "ym")]
    for src, dst, name in wires:
        d.connect(src, dst, name=name)
    return d
