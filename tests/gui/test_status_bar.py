"""The status bar says something true in every case: the path audit's line names a
frequency only where the peak has one, and an empty diagram is not an internal error."""
from __future__ import annotations

import numpy as np
import pytest

from loopwright.engine.audit import AuditRow, path_audit
from loopwright.engine.diagram import Diagram
from loopwright.engine.interconnect import assemble
from loopwright.gui.docks.audit import audit_summary
from loopwright.gui.main_window import status_text


def _row(peak: float, w: float) -> AuditRow:
    return AuditRow(source="r", signal="y", peak_gain=peak, peak_freq_rad_s=w, h2=1.0, dc_gain=1.0, stable=True)


@pytest.mark.parametrize(
    "peak, w, phrase",
    [
        (2.0, 3.5, "peak gain 2 at 3.5 rad/s"),
        (2.0, 0.0, "peak gain 2 at DC (0 rad/s)"),
        (10.0, np.inf, "peak gain 10, approached as the frequency grows (direct feedthrough)"),
        (2.0, np.nan, "peak gain 2 (no single frequency)"),
        (0.0, np.nan, "zero gain at every frequency"),
    ],
    ids=["at-a-frequency", "at-dc", "as-frequency-grows", "no-frequency", "zero-gain"],
)
def test_the_audit_line_names_a_frequency_only_where_there_is_one(peak, w, phrase):
    text = audit_summary([_row(peak, w)])
    assert text == f"Path audit — worst stable path: r → y, {phrase}"
    assert "—" not in text.removeprefix("Path audit —")


def test_a_lead_with_feedthrough_is_said_to_peak_as_the_frequency_grows():
    # (10 s + 1)/(s + 1): |G(jw)| rises from 1 at DC to 10 as w -> inf (closed form), never above
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1})
    d.add_block("dynamic", "F", {"num": [10.0, 1.0], "den": [1.0, 1.0]})
    d.connect("r.out", "F.u")
    rows = path_audit(assemble(d))
    text = audit_summary(rows)
    assert "r → F.y, peak gain 10, approached as the frequency grows (direct feedthrough)" in text
    assert "at — rad/s" not in text and "at ∞" not in text


def test_an_empty_window_is_checked_without_an_internal_error(window, wait_live):
    # the assembly of no blocks once failed inside the engine and the status bar showed that
    result = wait_live(window)
    assert status_text(result) == "not assembled — empty diagram"


def test_in_a_small_window_the_poles_stay_in_sight_and_the_audit_line_gives_way(window, wait_live, qtbot):
    # tests/REFERENCES.md#stage-observer: poles -2 +- 2j, -5, -6 (separation principle)
    from diagrams import stage_loop_ref03

    window.resize(800, 600)
    window.show()
    qtbot.waitExposed(window)
    window.document.replace_diagram(stage_loop_ref03())
    wait_live(window)
    line = "Path audit — worst stable path: d → est.xhat, peak gain 0.1 at 1 rad/s, and much more besides"
    window.audit_status.setText(line)
    qtbot.wait(50)
    model = window._model_label
    assert model.text().endswith("poles: -6, -5, -2 ± 2j")
    assert model.width() >= model.fontMetrics().horizontalAdvance(model.text())
    audit = window.audit_status
    assert audit.text() == line and audit.toolTip() == line
    assert audit.width() <= 0.4 * window.statusBar().width()


def test_the_audit_table_shows_a_long_path_by_its_ends(qtbot):
    # a chain of 40 gains inside a loop (demo data): every path passes nearly every block, so
    # the table lists each by its first and last three blocks and the count between (the
    # engine's path_text), while the row keeps every block for lighting it on the canvas
    from diagrams import gain_chain

    from loopwright.gui.docks.audit import AuditPanel

    panel = AuditPanel()
    qtbot.addWidget(panel)
    rows = path_audit(assemble(gain_chain([1.0] * 40)))
    panel.show_value(rows)
    longest = max(range(len(rows)), key=lambda i: len(rows[i].blocks))
    blocks = rows[longest].blocks
    assert len(blocks) > 40
    cell = panel.grid.item(longest, panel.grid.columnCount() - 1).text()
    assert cell == " → ".join([*blocks[:3], f"... {len(blocks) - 6:,} more ...", *blocks[-3:]])
    short = min(range(len(rows)), key=lambda i: len(rows[i].blocks))
    assert panel.grid.item(short, panel.grid.columnCount() - 1).text() == " → ".join(rows[short].blocks)
    assert panel.rows[longest].blocks == blocks
