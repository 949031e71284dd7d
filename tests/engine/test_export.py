"""Tests of engine/export.py: JSON / NPZ / C exports of closed loop, path and controller."""
from __future__ import annotations

import json
import os

import control as ct
import numpy as np
import pytest
from numpy.testing import assert_allclose

from loopwright.engine import CAUTION
from loopwright.engine.discretize import discretize
from loopwright.engine.errors import EngineError
from loopwright.engine.export import (
    EXPORT_FORMAT,
    closed_loop_model,
    controller_model,
    model_to_dict,
    path_model,
    read_json,
    write_c,
    write_json,
    write_npz,
)
from loopwright.engine.interconnect import assemble
from loopwright.engine.lumped import lumped_controller
from loopwright.engine.recipes import redesign

from diagrams import stage_servo as stage_loop


def _stage():
    d = stage_loop({"method": "place", "poles": [[-2, 2], [-2, -2]]}, {"method": "place", "poles": [-5, -6]})
    return redesign(d)[0]


def test_closed_loop_json_round_trip_keeps_matrices_names_and_caution(tmp_path):
    d = _stage()
    m = closed_loop_model(d, source="stage.lwd")
    path = tmp_path / "loop.json"
    write_json(m, path)
    back = read_json(path)
    model = assemble(d)
    for k in "ABCD":
        assert_allclose(back[k], getattr(model, k), rtol=0, atol=0)
    assert back["format"] == EXPORT_FORMAT and back["time"] == "continuous"
    assert back["caution"] == CAUTION
    assert back["output_names"] == list(model.output_names)
    assert back["input_names"][: len(model.sources)] == ["r", "dist", "meas_noise"]
    assert "stage.lwd" in back["origin"]


def test_path_export_has_the_path_dc_gain(tmp_path):
    # tests/REFERENCES.md#stage-observer (separation principle, derived by hand): DC gain d -> y is 82/240.
    m = path_model(_stage(), "dist", "y")
    assert m.input_names == ("dist",) and m.output_names == ("y",)
    assert_allclose(ct.dcgain(ct.ss(m.A, m.B, m.C, m.D)), 82.0 / 240.0, rtol=1e-9)


def test_npz_export_holds_same_data_as_json(tmp_path):
    m = controller_model(_stage(), measured=["y_meas"], actuator=["u"], ts=0.01, method="tustin", prewarp_rad_s=3.0)
    write_npz(m, tmp_path / "ctrl.npz")
    write_json(m, tmp_path / "ctrl.json")
    with np.load(tmp_path / "ctrl.npz") as z:
        js = read_json(tmp_path / "ctrl.json")
        for k in "ABCD":
            assert_allclose(z[k], js[k], rtol=0, atol=0)
        assert list(z["input_names"]) == ["y_meas"] and list(z["output_names"]) == ["u"]
        assert str(z["caution"]) == CAUTION
        meta = json.loads(str(z["json"]))
        assert meta["method"] == "tustin" and meta["sample_period_s"] == 0.01 and meta["prewarp_rad_s"] == 3.0
    assert js["time"] == "discrete"


def test_discrete_controller_export_matches_python_control_sample_system():
    # python-control 0.10.2 sample_system (Tustin) as reference, compared on the unit circle.
    d = _stage()
    k = lumped_controller(d, measured=["y_meas"], actuator=["u"])
    m = controller_model(d, measured=["y_meas"], actuator=["u"], ts=0.05, method="tustin")
    ref = ct.sample_system(ct.ss(k.A, k.B, k.C, k.D), 0.05, method="tustin")
    ours = ct.ss(m.A, m.B, m.C, m.D, 0.05)
    for w in (0.5, 5.0, 40.0):
        z = np.exp(1j * w * 0.05)
        assert_allclose(ours(z), ref(z), rtol=1e-10)


def test_c_export_writes_source_and_header_named_after_output(tmp_path):
    m = controller_model(_stage(), measured=["y_meas"], actuator=["u"], ts=0.001)
    code = write_c(m, tmp_path / "stage_ctrl.c", precision="float")
    assert (tmp_path / "stage_ctrl.c").read_text() == code.source
    assert (tmp_path / "stage_ctrl.h").read_text() == code.header
    assert '#include "stage_ctrl.h"' in code.source and "float x[2]" in code.header
    assert "0.001 s" in code.header and "zoh" in code.header


def test_c_export_of_continuous_model_is_refused(tmp_path):
    m = controller_model(_stage(), measured=["y_meas"], actuator=["u"])
    with pytest.raises(EngineError, match="continuous-time"):
        write_c(m, tmp_path / "x.c")


def test_failed_write_leaves_previous_file_whole(tmp_path, monkeypatch):
    # Atomic write: a failure while writing must not truncate the existing export.
    path = tmp_path / "loop.json"
    write_json(closed_loop_model(_stage()), path)
    before = path.read_bytes()

    def boom(*_a, **_k):
        raise OSError("disk full (simulated)")

    monkeypatch.setattr(os, "replace", boom)
    with pytest.raises(OSError, match="disk full"):
        write_json(path_model(_stage(), "r", "y"), path)
    assert path.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["loop.json"]  # no temp file left


def test_model_to_dict_is_plain_json():
    m = controller_model(_stage(), measured=["y_meas"], actuator=["u"], ts=0.01)
    text = json.dumps(model_to_dict(m), allow_nan=False)
    assert json.loads(text)["what"] == "controller"


def test_exported_discrete_controller_equals_engine_discretisation():
    # The stage controller of tests/REFERENCES.md#stage-observer is, by hand,
    # u = -(208 s + 240)/(s^2 + 15 s + 82) y; its zero-order-hold equivalent from
    # scipy 1.17.1 cont2discrete must equal the exported model on the unit circle, and the
    # exported matrices must be those of the engine's own discretisation.
    from scipy.signal import cont2discrete, freqz

    d = _stage()
    k = lumped_controller(d, measured=["y_meas"], actuator=["u"])
    m = controller_model(d, measured=["y_meas"], actuator=["u"], ts=0.02, method="zoh")
    num, den, _ = cont2discrete(([-208.0, -240.0], [1.0, 15.0, 82.0]), 0.02, method="zoh")
    w = np.array([0.1, 1.0, 10.0, 100.0]) * 0.02
    _, ref = freqz(np.ravel(num), den, worN=w)
    z = np.exp(1j * w)
    ours = [(m.C @ np.linalg.solve(zk * np.eye(2) - m.A, m.B) + m.D)[0, 0] for zk in z]
    assert_allclose(ours, ref, rtol=1e-9)
    ref_m = discretize(k.A, k.B, k.C, k.D, 0.02, method="zoh")
    for name in "ABCD":
        assert_allclose(getattr(m, name), getattr(ref_m, name), rtol=0, atol=0)
    assert m.state_names == ("est.xhat1", "est.xhat2")