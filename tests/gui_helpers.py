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
