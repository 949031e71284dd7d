"""The loop report: one pass over a diagram, consistent with the separate analyses."""
from __future__ import annotations

import json

import pytest
from numpy.testing import assert_allclose

from loopwright.engine.cli import main
from loopwright.engine.margins import margins_at
from loopwright.engine.project import load
from loopwright.engine.report import format_report, loop_report
from diagrams import stage_loop_ref03 as stage_loop
from diagrams import SAMPLES, sample_path


@pytest.mark.parametrize("name", SAMPLES)
def test_report_on_every_sample(name, capsys):
    assert main(["report", str(sample_path(name)), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["stable"] is True and out["separation"]["matches"] is True
    assert out["margins"] is not None and out["loop_break"] == "P.u"
    assert out["noise"] and len(out["audit_top"]) == 5 and out["audit_total"] >= 5
    assert "model-based" in out["caution"]


def test_report_margins_agree_with_the_margins_analysis():
    # tests/REFERENCES.md#stage-observer (separation principle, derived by hand): margins at the plant input of the air-bearing stage
    d = stage_loop()
    d.settings["loop_break"] = "up.out"
    rep = loop_report(d)
    assert_allclose(rep.margins.gain_upper, 4.665310651, rtol=1e-7)
    assert_allclose(rep.margins.phase_margin_deg, 38.48828081, rtol=1e-7)
    assert rep.margins.as_dict() == margins_at(d, "up.out").as_dict()
    assert rep.noise is None and any("noise budget skipped" in n for n in rep.notes)
    text = format_report(rep)
    assert "phase margin     38.49 deg" in text and text.rstrip().endswith("engineering practice prevail.")


def test_report_names_a_bad_loop_break_instead_of_failing():
    d = load(sample_path(SAMPLES[0]))
    d.settings["loop_break"] = "nowhere"
    rep = loop_report(d)
    assert rep.margins is None and "nowhere" in rep.margins_error


def test_report_rejects_a_bad_top(capsys):
    assert main(["report", str(sample_path(SAMPLES[0])), "--top", "0"]) == 2
    assert "--top" in capsys.readouterr().err
