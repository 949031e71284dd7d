"""Numeric options of every command, and messages that must stay on one line (tests of
engine/cli_options.py and the error handling of engine/cli.py)."""
from __future__ import annotations

import contextlib
import io
import math
import os
import shutil
from pathlib import Path

import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from diagrams import SAMPLES, sample_path
from loopwright.engine.cli import main, one_line

DATA = Path(__file__).parent / "data" / "numerics"
ROTOR = "levitated_rotor_axis.lwd"


def _run(argv) -> tuple[int, list[str]]:
    err = io.StringIO()
    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(err):
        code = main(argv)
    return code, err.getvalue().strip().splitlines()


OUT_OF_RANGE = [
    (["freq", "--from", "dl", "--to", "y", "--w-max", "inf"], "argument --w-max: must be a number from 1e-12 to 1e+12 rad/s; got 'inf'"),
    (["freq", "--from", "dl", "--to", "y", "--w-min", "inf"], "argument --w-min: must be a number from 0 to 1e+12 rad/s (0: a grid from DC); got 'inf'"),
    (["freq", "--from", "dl", "--to", "y", "--w-min", "nan"], "argument --w-min: must be a number from 0 to 1e+12 rad/s"),
    (["freq", "--from", "dl", "--to", "y", "--w-max", "1e400"], "argument --w-max: must be a number from 1e-12"),
    (["freq", "--from", "dl", "--to", "y", "--w-min", "-1"], "argument --w-min: must be a number from 0"),
    (["freq", "--from", "dl", "--to", "y", "--points", "1"], "argument --points: must be a whole number from 2 to 200000"),
    (["freq", "--from", "dl", "--to", "y", "--points", "1e3"], "argument --points: must be a whole number from 2"),
    (["time", "--to", "y", "--t-end", "1e300"], "argument --t-end: must be a number from 1e-12 to 1e+12 s"),
    (["time", "--to", "y", "--dt", "-1"], "argument --dt: must be a number from 1e-12 to 1e+12 s"),
    (["time", "--to", "y", "--dt", "nan"], "argument --dt: must be a number from 1e-12"),
    (["margins", "--skew", "1e308"], "argument --skew: must be a number from -1e+06 to 1e+06; got '1e308'"),
    (["margins", "--skew=-inf"], "argument --skew: must be a number from -1e+06 to 1e+06"),
    (["time", "--to", "y", "--free", "--initial", "P=1e300,0,0"], "--initial 'P=1e300,0,0': give finite numbers from -1e+50 to 1e+50"),
    (["time", "--to", "y", "--free", "--initial", "P=nan,0,0"], "--initial 'P=nan,0,0': give finite numbers"),
    (["audit", "--top", "0"], "argument --top: must be a whole number from 1 to 1000000"),
    (["report", "--top", "-3"], "argument --top: must be a whole number from 1 to 1000000"),
    (["export", "--what", "controller", "--ts", "1e300", "-o", "{out}/c.c"], "argument --ts: must be a number from 1e-09 to 1e+06 s; got '1e300'"),
    (["export", "--what", "controller", "--ts", "0", "-o", "{out}/c.c"], "argument --ts: must be a number from 1e-09"),
    (["export", "--what", "controller", "--ts", "0.001", "--method", "tustin", "--prewarp", "inf", "-o", "{out}/c.c"],
     "argument --prewarp: must be a number from 1e-12 to 1e+12 rad/s"),
    (["export", "--what", "controller", "--ts", "0.001", "--method", "tustin", "--prewarp", "4000", "-o", "{out}/c.c"],
     "below the Nyquist frequency 3141.59 rad/s"),
]


@pytest.mark.parametrize("args, message", OUT_OF_RANGE, ids=[f"{a[0]}{'-'.join(a[1:][-3:-1])}" for a, _ in OUT_OF_RANGE])
def test_an_out_of_range_option_is_one_line_naming_option_and_range(args, message, tmp_path):
    argv = [args[0], str(sample_path(ROTOR)), *(a.replace("{out}", str(tmp_path)) for a in args[1:])]
    code, err = _run(argv)
    assert code == 2 and len(err) == 1, err
    assert err[0].startswith(f"loopwright {args[0]}: ") and message in err[0]
    assert not list(tmp_path.iterdir())


def test_a_sample_period_too_long_for_the_plant_still_exports_and_says_why_margins_are_missing(tmp_path, capsys):
    # the rotor is open-loop unstable (pole +63.2 rad/s): e^(63.2 * 20) overflows, so the
    # sampled-loop comparison is refused with its reason; the (stable) controller is exported
    out = tmp_path / "c.c"
    assert main(["export", str(sample_path(ROTOR)), "--what", "controller", "--ts", "20", "-o", str(out)]) == 0
    text = capsys.readouterr().out
    assert "margins not compared: sample period 20 s is too long for this model" in text and out.exists()


# --- hypothesis: random values for every numeric option -------------------------------
_SPECIAL = ["inf", "-inf", "nan", "1e400", "-1e308", "1e308", "1e-320", "0", "-0", "-1", "1e300", "1e-300", "abc", ""]
_VALUES = st.one_of(
    st.sampled_from(_SPECIAL),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.floats(min_value=1e-6, max_value=1e6).map(repr),
    st.integers(min_value=-10**6, max_value=10**7).map(str),
)


def _as_float(text: str) -> float:
    try:
        return float(text)
    except ValueError:
        return math.nan


def _check(argv) -> None:
    code, err = _run(argv)
    assert code in (0, 2), (argv, code)
    if code == 2:
        assert len(err) == 1 and err[0].startswith(f"loopwright {argv[0]}: "), (argv, err)
        assert "Traceback" not in err[0]
    else:
        assert err == [], (argv, err)


_SETTINGS = settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])


@_SETTINGS
@given(sample=st.sampled_from(SAMPLES), w_min=st.none() | _VALUES, w_max=st.none() | _VALUES, points=st.none() | _VALUES)
def test_freq_options_answer_or_refuse_in_one_line(sample, w_min, w_max, points):
    argv = ["freq", str(sample_path(sample)), "--from", "r", "--to", "y", "--csv"]
    for opt, v in (("--w-min", w_min), ("--w-max", w_max), ("--points", points)):
        if v is not None:
            argv.append(f"{opt}={v}")
    _check(argv)


@_SETTINGS
@given(sample=st.sampled_from(SAMPLES), t_end=st.none() | _VALUES, dt=st.none() | _VALUES, step=st.booleans())
def test_time_options_answer_or_refuse_in_one_line(sample, t_end, dt, step):
    # long but valid runs (millions of steps) are a legitimate request, not what this checks
    te = _as_float(t_end) if t_end is not None else 1.0
    d = _as_float(dt) if dt is not None else te / 2000
    assume(not (math.isfinite(te) and math.isfinite(d) and d > 0 and te / d > 20_000))
    argv = ["time", str(sample_path(sample)), "--to", "y", "--csv"] + (["--step", "r"] if step else [])
    for opt, v in (("--t-end", t_end), ("--dt", dt)):
        if v is not None:
            argv.append(f"{opt}={v}")
    _check(argv)


@_SETTINGS
@given(sample=st.sampled_from(SAMPLES), skew=_VALUES)
def test_margins_skew_answers_or_refuses_in_one_line(sample, skew):
    _check(["margins", str(sample_path(sample)), f"--skew={skew}", "--json"])


@_SETTINGS
@given(sample=st.sampled_from(SAMPLES), ts=_VALUES, prewarp=st.none() | _VALUES)
def test_export_sample_period_and_prewarp_answer_or_refuse_in_one_line(sample, ts, prewarp, tmp_path_factory):
    out = tmp_path_factory.mktemp("export") / "ctrl.json"
    argv = ["export", str(sample_path(sample)), "--what", "controller", f"--ts={ts}", "-o", str(out), "--json"]
    if prewarp is not None:
        argv += ["--method", "tustin", f"--prewarp={prewarp}"]
    _check(argv)


# --- messages stay on one line ----------------------------------------------------------
def test_a_block_name_with_a_newline_is_shown_escaped():
    # the file names a source "P\n": the loader refuses the name, shown escaped on one line
    code, err = _run(["freq", str(DATA / "source_name_with_newline.lwd"), "--from", "dl", "--to", "y", "--json"])
    assert code == 2 and len(err) == 1
    assert "(block 'P\\n'): 'P\\n' is not a name" in err[0]


def test_a_path_with_a_newline_is_shown_escaped(tmp_path):
    if os.name == "nt":
        pytest.skip("no newline in Windows file names")
    bad = tmp_path / "bad\nname.lwd"
    bad.write_text("not json", encoding="utf-8")
    code, err = _run(["check", str(bad), "--json"])
    assert code == 2 and len(err) == 1
    assert "bad\\nname.lwd: not valid JSON" in err[0]


def test_an_option_value_with_a_newline_is_shown_escaped():
    code, err = _run(["margins", str(sample_path(ROTOR)), "--skew", "1\n2"])
    assert code == 2 and len(err) == 1 and "got '1\\n2'" in err[0]


@pytest.mark.parametrize(
    "text, shown",
    [("a\nb", "a\\nb"), ("tab\there", "tab\\there"), ("esc\x1b[2J", "esc\\x1b[2J"), ("line\u2028sep", "line\\u2028sep"),
     ("plain 'quoted' text", "plain 'quoted' text")],
)
def test_one_line_escapes_control_characters_only(text, shown):
    assert one_line(text) == shown


def test_a_numerical_breakdown_behind_the_guard_is_one_line(tmp_path, monkeypatch):
    # the safety net: a LAPACK failure the scaling guard did not foresee
    import numpy as np

    from loopwright.engine import check

    def broken(_diagram, **_options):
        raise np.linalg.LinAlgError("SVD did not converge")

    monkeypatch.setattr(check, "summarize", broken)
    monkeypatch.setattr("loopwright.engine.cli.summarize", broken)
    path = tmp_path / "d.lwd"
    shutil.copy(sample_path(ROTOR), path)
    code, err = _run(["check", str(path)])
    assert code == 2 and len(err) == 1
    assert "the computation broke down numerically (LinAlgError: SVD did not converge)" in err[0]


def test_an_unrelated_value_error_is_still_a_bug_with_a_traceback(tmp_path, monkeypatch):
    def broken(_diagram, **_options):
        raise ValueError("operands could not be broadcast together")

    monkeypatch.setattr("loopwright.engine.cli.summarize", broken)
    with pytest.raises(ValueError, match="broadcast"):
        _run(["check", str(sample_path(ROTOR))])
