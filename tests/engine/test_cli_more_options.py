"""Options that no other test ran: ``time --settle``, ``design --all`` and ``design
--print`` (tests of engine/cli_analysis.py and cli_design.py); each result is checked
against a closed form computed here. test_cli_option_coverage.py keeps the list complete."""
from __future__ import annotations

import json
from importlib import resources
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from loopwright.engine.cli import main
from loopwright.engine.project import save

from diagrams import winder_servo


# ---- time --settle --------------------------------------------------------------------

def _servo_file(tmp_path) -> str:
    path = tmp_path / "servo.lwd"
    save(winder_servo(), str(path))
    return str(path)


def _settling_time_closed_form(band: float) -> float:
    """Last time the unit-step response of the winder servo (tests/REFERENCES.md#winder-step,
    wn = 2, zeta = 0.5) is at least ``band`` from 1.

    Closed form: y(t) = 1 - exp(-zeta wn t) sin(wd t + phi) / sqrt(1 - zeta^2), with
    wd = wn sqrt(1 - zeta^2) = sqrt(3) and phi = arccos(zeta) = pi/3; evaluated on a
    1e-6 s grid (the engine's own grid below is 5e-4 s).
    """
    t = np.arange(0.0, 10.0, 1e-6)
    y = 1.0 - np.exp(-t) * np.sin(np.sqrt(3.0) * t + np.pi / 3) / np.sqrt(0.75)
    return float(t[np.nonzero(np.abs(y - 1.0) >= band)[0][-1]])


@pytest.mark.parametrize("band", [0.05, 0.10])
def test_settle_sets_the_settling_band_of_the_step_metrics(tmp_path, capsys, band):
    path = _servo_file(tmp_path)
    args = ["time", path, "--step", "r", "--to", "y", "--metrics", "--t-end", "10", "--dt", "0.0005", "--json"]
    assert main([*args, "--settle", str(band)]) == 0
    m = json.loads(capsys.readouterr().out)["metrics"]["y"]
    assert_allclose(m["settling_time_s"], _settling_time_closed_form(band), atol=1e-3)
    assert main(args) == 0  # the default band, 2 %, takes longer to enter
    default = json.loads(capsys.readouterr().out)["metrics"]["y"]
    assert_allclose(default["settling_time_s"], _settling_time_closed_form(0.02), atol=1e-3)
    assert m["settling_time_s"] < default["settling_time_s"]


def test_settle_is_shown_in_the_text_output(tmp_path, capsys):
    assert main(["time", _servo_file(tmp_path), "--step", "r", "--to", "y", "--metrics", "--settle", "0.05"]) == 0
    assert "settling band 5 %" in capsys.readouterr().out


# ---- design --all, design --print -----------------------------------------------------

def _conveyor_copy(tmp_path) -> Path:
    dst = tmp_path / "conveyor.lwd"
    dst.write_bytes((resources.files("loopwright.samples") / "conveyor_flexible_drive.lwd").read_bytes())
    return dst


def test_design_all_print_is_the_default_and_places_every_recipe_s_poles(tmp_path, capsys):
    path = _conveyor_copy(tmp_path)
    before = path.read_bytes()
    assert main(["design", str(path), "--all", "--print", "--json"]) == 0
    explicit = json.loads(capsys.readouterr().out)
    assert main(["design", str(path), "--json"]) == 0
    assert json.loads(capsys.readouterr().out) == explicit  # both flags are the defaults
    assert path.read_bytes() == before and explicit["written"] is False  # --print writes nothing

    # Checked with numpy alone on the plant and recipes stored in the file (closed forms):
    # eig(A - B K) and eig(A - L C) are the recipes' poles; the feedforward makes the DC gain
    # from r to y one: N = 1 / (C (B K - A)^-1 B).
    doc = json.loads(before)
    blocks = {b["name"]: b for b in doc["blocks"]}
    plant = blocks["P"]["params"]
    A, B, C = (np.array(plant[k], dtype=float) for k in ("A", "B", "C"))
    designed = {b["block"]: np.array(b["matrix"], dtype=float) for b in explicit["blocks"]}
    assert set(designed) == {b for b, v in blocks.items() if "recipe" in v["params"]}

    def same_poles(got, wanted):
        wanted = np.array([complex(*p) if isinstance(p, list) else complex(p) for p in wanted])
        assert_allclose(np.sort_complex(got), np.sort_complex(wanted), rtol=1e-9, atol=1e-9)

    # A gain block holds sign * K for the state feedback u = -K x (engine/recipes.py, "sign").
    K = blocks["K"]["params"]["recipe"]["sign"] * designed["K"]
    same_poles(np.linalg.eigvals(A - B @ K), blocks["K"]["params"]["recipe"]["poles"])
    est = next(b for b, v in blocks.items() if v["kind"] == "estimator")
    same_poles(np.linalg.eigvals(A - designed[est] @ C), blocks[est]["params"]["recipe"]["poles"])
    assert_allclose(designed["N"], 1.0 / (C @ np.linalg.solve(B @ K - A, B)), rtol=1e-9)
