"""Tests of engine/ccode.py: the generated C compiles, runs, and matches the engine."""
from __future__ import annotations

import shutil
import subprocess

import numpy as np
import pytest
from numpy.testing import assert_allclose

from loopwright.engine import CAUTION
from loopwright.engine.ccode import controller_to_c
from loopwright.engine.discretize import DiscreteModel, discretize, simulate_discrete
from loopwright.engine.errors import DesignError

_CC = shutil.which("cc") or shutil.which("gcc")
_needs_cc = pytest.mark.skipif(_CC is None, reason="no C compiler (cc/gcc) on this machine; C round trip not checked")

_MAIN = r"""
#include <stdio.h>
#include "{prefix}.h"

int main(void)
{{
    {prefix}_state s;
    {real} u[{up}_N_INPUTS];
    {real} y[{up}_N_OUTPUTS];
    int k, i, steps;
    if (scanf("%d", &steps) != 1) return 1;
    {prefix}_reset(&s);
    for (k = 0; k < steps; ++k) {{
        for (i = 0; i < {up}_N_INPUTS; ++i) {{
            double v;
            if (scanf("%lf", &v) != 1) return 1;
            u[i] = ({real})v;
        }}
        {prefix}_step(&s, u, y);
        for (i = 0; i < {up}_N_OUTPUTS; ++i) printf("%.17g ", (double)y[i]);
        printf("\n");
    }}
    return 0;
}}
"""


def _compile_and_run(tmp_path, model, u, *, precision, prefix="lw_ctrl"):
    code = controller_to_c(model, prefix=prefix, precision=precision, origin="test model (demo data)")
    (tmp_path / code.header_name).write_text(code.header)
    (tmp_path / code.source_name).write_text(code.source)
    (tmp_path / "main.c").write_text(_MAIN.format(prefix=prefix, up=prefix.upper(), real=precision))
    exe = tmp_path / "run_ctrl"
    cmd = [_CC, "-std=c99", "-Wall", "-Wextra", "-pedantic", "-Werror", "-O1", "-o", str(exe),
           str(tmp_path / "main.c"), str(tmp_path / code.source_name)]
    res = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    stdin = f"{u.shape[0]}\n" + "\n".join(" ".join(repr(float(v)) for v in row) for row in u) + "\n"
    run = subprocess.run([str(exe)], input=stdin, capture_output=True, text=True, timeout=60)
    assert run.returncode == 0, run.stderr
    return np.array([[float(v) for v in line.split()] for line in run.stdout.strip().splitlines()])


def _demo_controller(ts=0.01, method="tustin"):
    # Demo data: an observer-based gimbal-rate controller, 3 states, 2 measurements, 1 command.
    A = np.array([[-13.0, 1.0, 0.0], [-30.0, -4.0, 4.0], [-20.0, -12.0, -13.0]])
    B = np.array([[11.0, 0.5], [30.0, 0.0], [0.0, 2.0]])
    C = np.array([[-6.0, -2.2, -0.6]])
    D = np.array([[0.0, 0.05]])
    return discretize(A, B, C, D, ts, method=method)


@_needs_cc
@pytest.mark.parametrize("method", ["zoh", "tustin"])
def test_generated_double_code_matches_engine_simulation_to_1e_9(tmp_path, method):
    model = _demo_controller(method=method)
    rng = np.random.default_rng(11)
    u = rng.normal(size=(300, 2))
    got = _compile_and_run(tmp_path, model, u, precision="double")
    want = simulate_discrete(model, u)
    assert_allclose(got, want, rtol=1e-9, atol=1e-9)


@_needs_cc
def test_generated_float_code_matches_engine_simulation_to_single_precision(tmp_path):
    model = _demo_controller()
    u = np.sin(np.linspace(0, 20, 200))[:, None] * np.array([[1.0, 0.3]])
    got = _compile_and_run(tmp_path, model, u, precision="float", prefix="gimbal_rate")
    want = simulate_discrete(model, u)
    assert_allclose(got, want, rtol=1e-4, atol=1e-4 * np.abs(want).max())


@_needs_cc
def test_static_controller_without_states_compiles_and_runs(tmp_path):
    model = DiscreteModel(np.zeros((0, 0)), np.zeros((0, 2)), np.zeros((1, 0)), np.array([[2.0, -1.0]]), 0.1, "zoh")
    u = np.array([[1.0, 1.0], [3.0, 0.5]])
    assert_allclose(_compile_and_run(tmp_path, model, u, precision="double"), [[1.0], [5.5]], rtol=1e-15)


def test_generated_comments_carry_period_method_origin_and_caution():
    code = controller_to_c(_demo_controller(ts=0.002), origin="conveyor.lwd, measured y, actuator u",
                           input_names=["y[1]", "y[2]"], output_names=["u"])
    for text in (code.header, code.source):
        assert "0.002 s" in text and "tustin" in text and "conveyor.lwd" in text
        assert " ".join(CAUTION.split()[:6]) in " ".join(text.split())
    assert "in[1] = y[2]" in code.header and "out[0] = u" in code.header
    assert "LW_CONTROLLER_N_STATES 3" in code.header


@pytest.mark.parametrize("kwargs, message", [({"prefix": "9bad"}, "not a C identifier"), ({"precision": "half"}, "precision")])
def test_bad_export_options_are_rejected(kwargs, message):
    with pytest.raises(DesignError, match=message):
        controller_to_c(_demo_controller(), **kwargs)
