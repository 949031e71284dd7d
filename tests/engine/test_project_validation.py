"""Damaged or hostile project files: one line naming the JSON path, exit 2, never a traceback or a hang.

The files in ``data/fuzz/`` are reduced cases from a fuzz run over the samples; each test
runs the command that failed on it. The property tests mutate the samples at the JSON
level and check that the loader and ``resources/diagram.schema.json`` agree.
"""
from __future__ import annotations

import contextlib
import copy
import io
import json
import os
import re
import shutil
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from diagrams import SAMPLES, sample_path
from loopwright.engine import project
from loopwright.engine.blocks import port_widths, source_intensity, tf_to_ss
from loopwright.engine.cli import main
from loopwright.engine.diagram import Diagram
from loopwright.engine.errors import ParameterError, ProjectFileError
from loopwright.engine.recipes import ESTIMATOR_METHODS, GAIN_METHODS, RECIPE_KEYS
from loopwright.engine.validation import MAX_TOTAL_WIDTH, MAX_WIDTH, as_width

jsonschema = pytest.importorskip("jsonschema")

DATA = Path(__file__).parent / "data" / "fuzz"


def run_cli(args: list[str]) -> tuple[int, str]:
    """``loopwright ARGS`` in-process: (exit status, stderr)."""
    err, out = io.StringIO(), io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(out):
        try:
            status = main(args)
        except SystemExit as stop:  # argparse
            status = stop.code
    return status, err.getvalue()


def assert_one_line(status: int, stderr: str, *pieces: str) -> None:
    lines = stderr.strip().splitlines()
    assert status == 2, stderr
    assert len(lines) == 1 and "Traceback" not in stderr, stderr
    for piece in pieces:
        assert piece in lines[0], (piece, lines[0])


# (file in data/fuzz, command and options as the fuzz run gave them, what the one line must name)
CASES = [
    ("nested_1100_levels_in_a_parameter.lwd", ["check"], ["nested more than 40 levels", "line 46"]),
    ("nested_900_levels_in_a_parameter.lwd", ["check"], ["nested more than 40 levels", "line 245"]),
    ("width_infinity.lwd", ["check"], ["blocks[0].params.width", "block 'err'", "Infinity is not a finite number"]),
    ("width_nan.lwd", ["check"], ["blocks[0].params.width", "block 'ym'", "NaN is not a finite number"]),
    ("width_typo_10000_on_a_source_with_intensity.lwd", ["check"], ["blocks[3].params.width", "block 'dl'", f"from 1 to {MAX_WIDTH}"]),
    ("intensity_as_text.lwd", ["check"], ["blocks[1].params.waveform.intensity", "block 'n'", "'loud'"]),
    ("intensity_null.lwd", ["check"], ["blocks[5].params.waveform.intensity", "block 'n'", "got null"]),
    ("numerator_empty.lwd", ["check"], ["blocks[1].params.num", "block 'N'", "non-empty list"]),
    ("time_settings_as_text.lwd", ["time", "--to", "y"], ["settings.time:", "t_end and dt", "'fast'"]),
    ("time_end_as_list.lwd", ["time", "--to", "y"], ["settings.time.t_end", "expected a number, got a list"]),
    ("time_end_as_text.lwd", ["time", "--to", "y"], ["settings.time.t_end", "'ten'"]),
    ("recipe_as_text.lwd", ["design"], ["blocks[2].params.recipe", "block 'K'", "got 'place'"]),
    ("recipe_feedback_as_object.lwd", ["design"], ["blocks[0].params.recipe.feedback", "block 'N'", "got an object"]),
    ("recipe_feedback_as_number.lwd", ["check"], ["blocks[1].params.recipe.feedback", "block 'N'", "got 1"]),
    ("recipe_weight_with_text.lwd", ["design", "--write"], ["blocks[1].params.recipe.Q[1]", "block 'K'"]),
    ("estimator_gain_row_false.lwd", ["design"], ["blocks[1].params.L[1]", "block 'est'", "got false"]),
    ("loop_break_as_object.lwd", ["margins"], ["settings.loop_break", "got an object"]),
    ("loop_break_as_number.lwd", ["margins"], ["settings.loop_break", "got 5"]),
    ("block_name_with_newline.lwd", ["check"], ["blocks[6].name", r"'P\n' is not a name"]),
    ("signal_name_with_newline.lwd", ["check"], ["wires[3].signal", r"'P\n' is not a signal name"]),
    ("signal_name_with_newline_design.lwd", ["design"], ["wires[1].signal", r"'P\n' is not a signal name"]),
    ("layout_nan.lwd", ["check"], ["blocks[2].layout.x", "block 'uc'", "NaN is not a finite number"]),
]


@pytest.mark.parametrize("name, command, pieces", CASES, ids=[c[0].removesuffix(".lwd") for c in CASES])
def test_damaged_file_gives_one_line_naming_the_field(name, command, pieces, tmp_path):
    path = tmp_path / name  # a copy: --write must not touch the test data even if it went wrong
    shutil.copyfile(DATA / name, path)
    before = path.read_bytes()
    status, stderr = run_cli([command[0], str(path), *command[1:], "--json"])
    assert_one_line(status, stderr, str(path), *pieces)
    assert path.read_bytes() == before


def sample_data(name: str = "levitated_rotor_axis.lwd") -> dict:
    return json.loads(sample_path(name).read_text(encoding="utf-8"))


def first_block(data: dict, kind: str) -> tuple[int, dict]:
    return next((k, b) for k, b in enumerate(data["blocks"]) if b["kind"] == kind)


def test_a_width_typo_on_a_summing_junction_is_refused_before_any_allocation():
    data = sample_data()
    k, block = first_block(data, "sum")
    block["params"]["width"] = 10000
    with pytest.raises(ProjectFileError, match=rf"blocks\[{k}\]\.params\.width \(block '{block['name']}'\): 10000 is more than {MAX_WIDTH}"):
        project.from_dict(data)


def test_the_total_of_declared_widths_is_bounded_and_named():
    data = sample_data()
    k, block = first_block(data, "sum")
    block["params"].update(width=MAX_WIDTH, signs=["+"] * (MAX_TOTAL_WIDTH // MAX_WIDTH))  # inputs and output exceed the total
    with pytest.raises(ProjectFileError, match=rf"at most {MAX_TOTAL_WIDTH} \(largest: blocks\[{k}\]\.params\.width \(block '{block['name']}'\)\)"):
        project.from_dict(data)


def test_the_width_bound_is_the_same_in_schema_and_engine():
    assert project.schema()["$defs"]["width"]["maximum"] == MAX_WIDTH
    assert as_width(MAX_WIDTH, where="block 'S'") == MAX_WIDTH
    for bad in (MAX_WIDTH + 1, 0, 2.5, float("nan"), float("inf"), True, "3"):
        with pytest.raises(ParameterError, match="block 'S': width"):
            as_width(bad, where="block 'S'")


def test_recipe_keys_and_methods_are_the_same_in_schema_and_engine():
    defs = project.schema()["$defs"]
    assert set(defs["recipe"]["properties"]) == set(RECIPE_KEYS)
    assert defs["gain_params"]["properties"]["recipe"]["allOf"][1]["properties"]["method"]["enum"] == list(GAIN_METHODS)
    assert defs["estimator_params"]["properties"]["recipe"]["allOf"][1]["properties"]["method"]["enum"] == list(ESTIMATOR_METHODS)


@pytest.mark.parametrize(
    "literal, shown",
    [("NaN", "NaN"), ("-Infinity", "-Infinity"), ("1e400", "1e400"), ("1" + "0" * 400, "(401 digits)"), ("9" * 5000, "(5000 digits)")],
)
def test_numbers_beyond_the_float_range_are_refused_where_they_stand(literal, shown):
    text = json.dumps(sample_data(), indent=2).replace('"t_end": 0.3', f'"t_end": {literal}', 1)
    with pytest.raises(ProjectFileError, match=rf"settings\.time\.t_end: .*{re.escape(shown)} is not a finite number"):
        project.loads(text)


def test_a_huge_but_finite_matrix_entry_still_loads():
    # 1e308 is a legitimate float; whether the numerics cope is not the loader's business
    data = sample_data()
    _, plant = first_block(data, "plant")
    plant["params"]["A"][0][1] = 1e308
    assert project.from_dict(data).blocks


def test_nesting_is_bounded_also_for_data_given_directly():
    data = sample_data()
    deep: list = [1.0]
    for _ in range(project.MAX_NESTING + 5):
        deep = [deep]
    data["meta"]["notes"] = deep
    with pytest.raises(ProjectFileError, match=r"meta\.notes(\[0\])+: nested more than 40 levels"):
        project.from_dict(data)


@pytest.mark.parametrize(
    "edit, message",
    [
        (lambda d: d["blocks"][0].update(name="P\n"), r"blocks\[0\]\.name \(block 'P\\n'\): 'P\\n' is not a name"),
        (lambda d: d["blocks"][0]["params"].update(Kx=1), r"blocks\[0\]\.params \(block '\w+'\): unknown field 'Kx' \(known: "),
        (lambda d: d["blocks"][0].pop("params"), r"blocks\[0\] \(block '\w+'\): missing field 'params'"),
        (lambda d: d["settings"].update(loop_brake="u"), r"settings: unknown field 'loop_brake' \(known: loop_break, pairs, time\)"),
        (lambda d: d["settings"]["time"].update(dt=-1), r"settings\.time\.dt: -1 is not more than 0"),
        (lambda d: d["wires"][0].update(to=[]), r"wires\[0\]\.to \(wire '\w+'\): has 0 entries, expected at least 1"),
        (lambda d: d.update(version=2), r"newer Loopwright"),
    ],
    ids=["name-newline", "unknown-param", "missing-params", "unknown-setting", "negative-dt", "wire-to-nothing", "newer"],
)
def test_schema_errors_read_as_one_line_with_path(edit, message):
    data = sample_data()
    edit(data)
    with pytest.raises(ProjectFileError) as caught:
        project.from_dict(data, origin="rotor.lwd")
    assert re.search(message, str(caught.value)), str(caught.value)
    assert "\n" not in str(caught.value)


def test_names_are_matched_whole_by_the_engine_too():
    d = Diagram()
    for bad in ("P\n", "P ", "1P", ""):
        with pytest.raises(ParameterError, match="is not valid"):
            d.add_block("gain", bad, {"K": 1})
    d.add_block("gain", "G", {"K": 1})
    with pytest.raises(ParameterError, match="signal name"):
        d.connect("G.out", "G.in", name="s\n")


def test_an_empty_coefficient_list_is_not_a_zero():
    with pytest.raises(ParameterError, match="num is empty"):
        tf_to_ss([], [1.0, 1.0], where="block 'N'")


@pytest.mark.parametrize("holder", ["waveform", "params"])
@pytest.mark.parametrize("value", [None, "loud", {"W": 1}, [[1, "x"]]], ids=["null", "text", "object", "text-entry"])
def test_a_malformed_intensity_built_in_code_is_a_parameter_error(holder, value):
    params = {"role": "noise", "width": 1, "waveform": {"kind": "white", "intensity": value}}
    if holder == "params":
        params = {"role": "disturbance", "width": 1, "waveform": {"kind": "step"}, "intensity": value}
    d = Diagram()
    d.add_block("source", "n", params)
    with pytest.raises(ParameterError, match="block 'n': intensity"):
        source_intensity(d.block_by_name("n"))


def test_a_wide_summing_junction_with_many_inputs_is_refused_before_its_matrix_is_built():
    d = Diagram()
    d.add_block("sum", "s", {"signs": ["+"] * 10, "width": MAX_WIDTH})
    with pytest.raises(ParameterError, match=f"block 's': width {MAX_WIDTH} with 10 inputs .* at most {MAX_TOTAL_WIDTH}"):
        port_widths(d.block_by_name("s"), d)


def test_a_file_name_with_a_newline_stays_on_one_line(tmp_path):
    path = tmp_path / "bad\nname.lwd"
    path.write_text("{", encoding="utf-8")
    status, stderr = run_cli(["check", str(path)])
    assert_one_line(status, stderr, r"bad\nname.lwd", "not valid JSON")


# ---- property tests: JSON-level mutants of the samples ----------------------------------
SCHEMA = json.loads(json.dumps(project.schema()))
PLAIN_VALIDATOR = jsonschema.Draft202012Validator(SCHEMA)  # the reference: no speed-ups
# What the loader refuses beyond the schema (see the schema's description).
BEYOND_SCHEMA = re.compile(
    r"nested more than|is not a finite number|is already used|already carried|no block named|not an output port|"
    r"not an input port|is already fed|a second wire leaves|widths add up|newer Loopwright|expected 'block\.port'"
)
DEEP = "__deeply_nested__"


def _paths(node, path=()):
    yield path
    if isinstance(node, dict):
        for k, v in node.items():
            yield from _paths(v, (*path, k))
    elif isinstance(node, list):
        for k, v in enumerate(node):
            yield from _paths(v, (*path, k))


def _replacement():
    return st.one_of(
        st.sampled_from([None, True, False, "", "x", "1.5", "P\n", [], {}, [[]], [None], {"kind": "zero"}, DEEP]),
        st.sampled_from([0, -1, 1, 2, 2.5, 1000, 1001, 10000, 10**6, -1e-3, float("nan"), float("inf"), float("-inf")]),
        st.lists(st.integers(-2, 3), max_size=3),
    )


@st.composite
def mutants(draw) -> str:
    """A sample's text with one to three mutations: retyped, nulled, deleted, renamed, widened, nested."""
    data = sample_data(draw(st.sampled_from(SAMPLES)))
    for _ in range(draw(st.integers(1, 3))):
        paths = [p for p in _paths(data) if p]
        if not paths:
            break  # every key deleted: the empty document is a mutant too
        path = draw(st.sampled_from(paths))
        parent = data
        for part in path[:-1]:
            parent = parent[part]
        key = path[-1]
        op = draw(st.sampled_from(["replace", "delete", "suffix", "width", "add"]))
        if op == "delete":
            del parent[key]
        elif op == "suffix" and isinstance(parent[key], str):
            parent[key] += draw(st.sampled_from(["\n", " ", "-", "\u00e9", "\x00", ".", "_2"]))
        elif op == "width":
            # an earlier mutation may have replaced the block list by anything
            listed = data.get("blocks")
            blocks = [b for b in listed if isinstance(b, dict) and isinstance(b.get("params"), dict)] if isinstance(listed, list) else []
            if blocks:
                draw(st.sampled_from(blocks))["params"]["width"] = draw(
                    st.sampled_from([0, -3, 1.5, 2, 3, MAX_WIDTH, MAX_WIDTH + 1, 10000, 10**12, float("inf"), float("nan"), "4"])
                )
        elif op == "add" and isinstance(parent[key], dict):
            parent[key][draw(st.sampled_from(["extra", "width", "recipe", "intensity", "plant", "E"]))] = draw(_replacement())
        else:
            parent[key] = copy.deepcopy(draw(_replacement()))
    text = json.dumps(data, indent=1, allow_nan=True)
    depth = draw(st.sampled_from([30, 45, 900, 5000]))
    return text.replace(json.dumps(DEEP), "[" * depth + "1" + "]" * depth)


def _check_mutant(text: str, folder: Path) -> None:
    path = folder / "mutant.lwd"
    path.write_text(text, encoding="utf-8")
    status, stderr = run_cli(["check", str(path), "--json"])
    assert status in (0, 2), stderr
    if status == 2:
        assert len(stderr.strip().splitlines()) == 1 and "Traceback" not in stderr, stderr
    try:
        project.loads(text)
    except ProjectFileError as err:
        try:
            data = json.loads(text)
        except (ValueError, RecursionError):
            return  # not JSON, or too deep for Python's own decoder: no schema question
        if PLAIN_VALIDATOR.is_valid(data):
            assert BEYOND_SCHEMA.search(str(err)), f"schema accepts what the loader refuses: {err}"
    else:
        assert PLAIN_VALIDATOR.is_valid(json.loads(text)), "the loader accepts what the schema forbids"


@pytest.fixture(scope="module")
def scratch(tmp_path_factory) -> Path:
    return tmp_path_factory.mktemp("mutants")


@settings(
    max_examples=int(os.environ.get("LOOPWRIGHT_MUTANTS", "200")),
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
)
@given(text=mutants())
def test_mutated_samples_load_or_fail_in_one_line_and_loader_agrees_with_schema(text, scratch):
    _check_mutant(text, scratch)


def test_every_sample_is_valid_against_the_schema_the_loader_uses():
    for name in SAMPLES:
        assert PLAIN_VALIDATOR.is_valid(sample_data(name)), name
        project.load(sample_path(name))


def test_a_designed_gain_with_a_ragged_row_is_redesigned_not_a_traceback(tmp_path):
    # found by a fuzz run (common practice, no source): the oven's LQR gain K lost one entry of
    # a row; `check` names the field, and `design --write` replaces the matrix by its design
    src = Path(__file__).parent / "data" / "oven_gain_with_a_ragged_row.lwd"
    work = tmp_path / "oven.lwd"
    shutil.copy(src, work)
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(["design", str(work), "--write", "--json"])
    assert code == 0, err.getvalue()
    assert "changes shape from a ragged list" in out.getvalue()
    d = project.load(work)
    for b in d.blocks.values():
        if b.kind == "gain" and "recipe" in b.params:
            rows = b.params["K"]
            assert len({len(r) for r in rows}) == 1  # every row as long as the others again


_MUTANTS = st.sampled_from([None, True, 0, 1.5, -1, "x", "P.u", "gain", "plant", "source", [], [[1.0]], [1, 2], {}, {"K": 1}, {"kind": "white"}])


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(name=st.sampled_from(SAMPLES), picks=st.lists(st.tuples(st.integers(0, 10**6), st.integers(0, 10**6), _MUTANTS), min_size=1, max_size=4),
       twins=st.booleans())
def test_the_fast_validator_agrees_with_the_reference_validator(name, picks, twins):
    # Reference: jsonschema's own Draft 2020-12 validator on the schema file (PyPI
    # reference library). The project's validator runs only a block's own kind branch and
    # skips values already found valid; it must accept, refuse and point exactly as the
    # reference does, also when a block repeats another's parameters (twins).
    import jsonschema

    data = json.loads(sample_path(name).read_text(encoding="utf-8"))
    if twins:
        data["blocks"].extend(copy.deepcopy(b) | {"name": f"{b['name']}_twin"} for b in list(data["blocks"]))
    for at, key_pick, value in picks:
        # walk to a random object in the document and set one of its fields (or add one)
        node, path = data, []
        while True:
            kids = [(k, v) for k, v in (node.items() if isinstance(node, dict) else enumerate(node)) if isinstance(v, (dict, list)) and v]
            if not kids or at % 3 == 0:
                break
            k, node = kids[at % len(kids)]
            at //= 3
        if isinstance(node, dict):
            keys = list(node) + ["extra"]
            node[keys[key_pick % len(keys)]] = copy.deepcopy(value)
        else:
            node[key_pick % len(node)] = copy.deepcopy(value)
    reference = jsonschema.Draft202012Validator(project.schema())
    ref_errors = sorted((tuple(e.absolute_path), e.validator) for e in reference.iter_errors(data))
    for _ in range(2):  # the second pass meets the values the first one found valid
        fast = project._validator()[0]
        got = sorted((tuple(e.absolute_path), e.validator) for e in fast.iter_errors(data))
        assert got == ref_errors
