"""Huge, tiny and overflowing numbers in a diagram: a one-line refusal naming the block and
field, or a correct answer (tests of engine/scaling.py and its callers)."""
from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from diagrams import SAMPLES, sample_path
from loopwright.engine.cli import main
from loopwright.engine.diagram import Diagram
from loopwright.engine.discretize import discretize
from loopwright.engine.errors import DesignError, ParameterError
from loopwright.engine.interconnect import assemble, collect_problems
from loopwright.engine.project import load
from loopwright.engine.responses import auto_frequency_grid, refine_grid_at_peaks
from loopwright.engine.scaling import SCALE_LIMIT

DATA = Path(__file__).parent / "data" / "numerics"


def _run(argv, capsys) -> tuple[int, list[str], str]:
    code = main(argv)
    captured = capsys.readouterr()
    return code, captured.err.strip().splitlines(), captured.out


# Files found by fuzzing the rotor sample (one mutation each, named after it); every
# command that used to trace back or hang on them.
REFUSALS = [
    ("feedforward_tf_leading_1e-320.lwd", ["check", "--json"], "block 'N' field den[0] = 1e-320"),
    ("feedforward_tf_leading_1e-320_loop_break.lwd", ["margins", "--json"], "block 'N' field den[0] = 1e-320"),
    ("feedforward_tf_leading_1e-320.lwd", ["audit", "--json"], "block 'N' field den[0] = 1e-320"),
    ("feedforward_tf_leading_1e-300.lwd", ["freq", "--from", "dl", "--to", "y", "--json"], "block 'N' field den[0] = 1e-300"),
    ("plant_B_1e308.lwd", ["export", "--what", "controller", "--ts", "0.001", "-o", "{out}/ctrl.c", "--json"],
     "block 'P' field B[0][0] = 1e+308"),
    ("gain_K_1e300.lwd", ["audit", "--json"], "block 'K' field K[1][0] = 1e+300"),
    ("estimator_L_minus_1e308.lwd", ["report", "--json"], "block 'est' field L[2][0] = -1e+308"),
    ("plant_E_1e308.lwd", ["design", "--write", "--json"], "block 'P' field E[1][0] = 1e+308"),
    ("gain_K_minus_1e308.lwd", ["freq", "--from", "dl", "--to", "y", "--json"], "block 'K' field K[0][0] = -1e+308"),
    ("estimator_L_float_max.lwd", ["margins", "--json"], "block 'est' field L[0][1] = 1.8e+308"),
    ("plant_A_float_max.lwd", ["margins", "--json"], "block 'P' field A[1][2] = 1.8e+308"),
    ("plant_A_1e300_design.lwd", ["design", "--json"], "block 'P' field A[1][2] = 1e+300"),
    ("plant_A_1e300_freq.lwd", ["freq", "--from", "dl", "--to", "y", "--json"], "block 'P' field A[0][1] = 1e+300"),
]


@pytest.mark.parametrize("name, args, field", REFUSALS, ids=[f"{r[0]}-{r[1][0]}" for r in REFUSALS])
def test_a_bad_number_is_one_line_naming_block_and_field(name, args, field, tmp_path, capsys):
    path = tmp_path / name
    shutil.copy(DATA / name, path)
    before = path.read_bytes()
    argv = [args[0], str(path), *(a.replace("{out}", str(tmp_path)) for a in args[1:])]
    code, err, _ = _run(argv, capsys)
    assert code == 2
    assert len(err) == 1, err
    assert err[0].startswith(f"loopwright {args[0]}: badly scaled: ") and field in err[0]
    assert path.read_bytes() == before  # nothing written
    assert not (tmp_path / "ctrl.c").exists()


def test_design_write_of_the_plant_is_unaffected_by_a_broken_prefilter(tmp_path, capsys):
    # The feedforward block N (den [1e-320, 1]) is not part of the design of K and L, which
    # only read the plant: the design runs and is written, and only the cross-checks that
    # need the whole assembled diagram are skipped.
    path = tmp_path / "d.lwd"
    shutil.copy(DATA / "feedforward_tf_leading_1e-320_recipes.lwd", path)
    recipes = {b["name"]: b["params"]["recipe"] for b in json.loads(path.read_text(encoding="utf-8"))["blocks"]
               if "recipe" in b["params"]}
    code, err, out = _run(["design", str(path), "--write", "--json"], capsys)
    assert code == 0 and err == []
    got = {b["block"]: b for b in json.loads(out)["blocks"]}

    def as_sorted(poles):
        zs = [complex(*p) if isinstance(p, list) else complex(p) for p in poles]
        return np.array(sorted(zs, key=lambda z: (z.real, z.imag)))

    # each recipe's own requested poles, independent of the design
    for name in ("K", "est"):
        assert_allclose(as_sorted(got[name]["poles"]), as_sorted(recipes[name]["poles"]), rtol=1e-6)
    written = {b["name"]: b["params"] for b in json.loads(path.read_text(encoding="utf-8"))["blocks"]}
    assert_allclose(written["K"]["K"], got["K"]["matrix"])
    assert written["N"]["den"] == [1e-320, 1.0]  # the rest of the diagram is left as it was


def test_the_numpy_warnings_of_an_overflow_never_reach_the_terminal(tmp_path, capsys):
    path = tmp_path / "d.lwd"
    shutil.copy(DATA / "plant_A_1e300_design.lwd", path)
    code, err, _ = _run(["design", str(path), "--json"], capsys)
    assert code == 2 and len(err) == 1 and "RuntimeWarning" not in err[0]


def _first_order_loop(k, den=(1.0, 1.0)) -> Diagram:
    """r -> (+) -> P = 1/den -> y, with y fed back through a gain k (negative sign at the sum)."""
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1})
    d.add_block("sum", "e", {"signs": ["+", "-"], "width": 1})
    d.add_block("plant", "P", {"num": [1.0], "den": list(den)})
    d.add_block("gain", "k", {"K": [[k]]})
    d.connect("r.out", "e.in1")
    d.connect("e.out", "P.u")
    d.connect("P.y", "k.in")
    d.connect("k.out", "e.in2")
    return d


@pytest.mark.parametrize(
    "k, den, pole",
    [
        (1e-320, (1.0, 1.0), -1.0),          # closed form: s + 1 + k = 0, k negligible (subnormal)
        (1e99, (1.0, 1.0), -(1.0 + 1e99)),   # closed form: s = -(1 + k), just inside the limit
        (0.0, (1e-50, 1.0), -1e50),          # closed form: 1e-50 s + 1 = 0, a fast but representable pole
        (-1e-300, (1.0, 2.0), -2.0 + 1e-300),  # closed form: s + 2 + k = 0
    ],
    ids=["subnormal-gain", "gain-1e99", "leading-1e-50", "tiny-negative-gain"],
)
def test_extreme_but_representable_numbers_give_the_closed_form_pole(k, den, pole):
    model = assemble(_first_order_loop(k, den))
    assert_allclose(np.linalg.eigvals(model.A), [pole], rtol=1e-12)


@pytest.mark.parametrize(
    "k, den, field, message",
    [
        (1.01e100, (1.0, 1.0), "K", "block 'k' field K[0][0] = 1.01e+100"),
        (1.0, (1e-101, 1.0), "den", "block 'P' field den[0] = 1e-101: the leading coefficient is negligible"),
        (1.0, (1e-320, 1.0), "den", "block 'P' field den[0] = 1e-320: the leading coefficient is negligible"),
        (1.0, (1.0, -1e300), "den", "block 'P' field den[1] = -1e+300"),
    ],
    ids=["gain-over-limit", "leading-1e-101", "leading-subnormal", "constant-1e300"],
)
def test_out_of_range_numbers_are_refused_by_assembly_and_problem_list(k, den, field, message):
    d = _first_order_loop(k, den)
    with pytest.raises(ParameterError) as info:
        assemble(d)
    assert message in str(info.value) and info.value.field == field
    assert info.value.block_ids == (d.block_by_name("k" if field == "K" else "P").id,)
    problems = collect_problems(d)
    assert len(problems) == 1 and message in problems[0].message


def test_gains_in_series_that_overflow_name_the_assembled_path():
    # each gain 1e60 is in range, their product 1e120 is not: the model says so
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1})
    d.add_block("gain", "g1", {"K": [[1e60]]})
    d.add_block("gain", "g2", {"K": [[1e60]]})
    d.add_block("plant", "P", {"num": [1.0], "den": [1.0, 1.0]})
    d.connect("r.out", "g1.in")
    d.connect("g1.out", "g2.in")
    d.connect("g2.out", "P.u")
    with pytest.raises(Exception) as info:
        assemble(d)
    assert "badly scaled: the assembled model has 1e+120" in str(info.value)
    assert f"beyond +-{SCALE_LIMIT:.3g}" in str(info.value)


def test_seed_and_width_are_not_model_numbers():
    d = _first_order_loop(1.0)
    d.blocks[d.block_by_name("r").id].params["waveform"] = {"kind": "white", "intensity": 1.0, "seed": 2**62}
    assemble(d)  # a large seed is a seed, not a badly scaled number


@pytest.mark.parametrize("name", SAMPLES)
def test_every_sample_passes_the_guard_with_room_to_spare(name):
    # the limit must be far from real models: the samples' largest entry is many decades below
    model = assemble(load(str(sample_path(name))))
    largest = max(np.abs(M).max() for M in (model.A, model.B, model.C, model.D) if M.size)
    assert largest < SCALE_LIMIT * 1e-80


def test_a_sample_period_that_overflows_the_discretisation_is_refused():
    # x' = 63 x (an unstable pole): e^(63 ts) passes the largest double once 63 ts > 709.8
    with pytest.raises(DesignError, match=r"sample period 20 s is too long .*\|p\| ts = 1.26e\+03"):
        discretize([[63.0]], [[1.0]], [[1.0]], [[0.0]], 20.0)
    d = discretize([[63.0]], [[1.0]], [[1.0]], [[0.0]], 10.0)  # e^630, finite: closed form
    assert_allclose(d.A, [[np.exp(630.0)]], rtol=1e-12)
    with pytest.raises(DesignError, match="too long"):  # A ts itself overflows
        discretize([[-1e300]], [[1.0]], [[1.0]], [[0.0]], 1e10, method="tustin")


@pytest.mark.parametrize(
    "poles",
    [[-1e300, -1e-300], [-1e100 + 1e100j, -1e100 - 1e100j, -1e-100], [complex("nan"), -1.0]],
    ids=["1e300-and-1e-300", "1e100-resonance", "nan-pole"],
)
def test_the_automatic_grid_stays_bounded_for_extreme_poles(poles):
    w = auto_frequency_grid(np.array(poles))
    assert 10 <= w.size <= 25_000
    assert w[0] >= 1e-30 and w[-1] <= 1e30 and np.all(np.diff(w) > 0)


@pytest.mark.parametrize("bad", [np.inf, np.nan, -1.0, 0.0])
def test_the_automatic_grid_refuses_a_bad_end(bad):
    with pytest.raises(ParameterError, match="w_max must be a positive, finite frequency"):
        auto_frequency_grid(np.array([-1.0]), w_max=bad)


def test_a_flat_response_does_not_grow_the_grid():
    # every point of a constant gain used to count as a peak: the grid grew tenfold per pass
    calls = []

    def evaluate(w):
        calls.append(w.size)
        return np.full(w.size, 3.0)

    w0 = np.logspace(-2, 4, 361)
    w, g = refine_grid_at_peaks(evaluate, w0, np.full(w0.size, 3.0))
    assert w.size == w0.size and calls == []


def test_a_path_through_a_subnormal_gain_answers_on_a_bounded_grid(tmp_path, capsys):
    # The reference passes the prefilter N before reaching u, so G(r -> u) is linear in N:
    # closed form G(N = 1e-320) = 1e-20 G(N = 1e-300), about 1e-321. Subnormal doubles
    # carry no relative precision at that size, so the check is absolute (a few 1e-320,
    # the size of the number typed); before the fix this command never returned.
    rotor = json.loads(sample_path("levitated_rotor_axis.lwd").read_text(encoding="utf-8"))
    curves, sizes = {}, {}
    for k in (1e-300, 1e-320):
        for b in rotor["blocks"]:
            if b["name"] == "N":
                b["params"]["K"] = [[k]]
        path = tmp_path / f"n{k}.lwd"
        path.write_text(json.dumps(rotor), encoding="utf-8")
        code, err, out = _run(["freq", str(path), "--from", "r", "--to", "u", "--w-min", "1", "--w-max", "1000",
                               "--points", "50", "--json"], capsys)
        assert code == 0 and err == []
        body = json.loads(out)
        curves[k] = np.array(body["re"]) + 1j * np.array(body["im"])
        code, err, out = _run(["freq", str(path), "--from", "r", "--to", "u", "--json"], capsys)
        assert code == 0 and err == []
        sizes[k] = len(json.loads(out)["w"])
    assert_allclose(curves[1e-320], 1e-20 * curves[1e-300], rtol=0, atol=5e-320)
    assert np.abs(curves[1e-300]).min() > 1e-302  # the reference curve itself is not zero
    assert sizes[1e-320] <= 2 * sizes[1e-300] + 100
