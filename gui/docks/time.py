"""The time view: step, impulse, initial-condition and source-driven runs of every kept pair,
and the estimation error of each linked estimator.

A source-driven run plays every source's own waveform (white noise with its seed, named
under the plot). An initial-condition run starts the blocks typed in "initial state"
(``P=1`` or ``P=0.1,0,0``) with every other state at zero: starting the plant and not its
estimator shows the estimation error's transient.
"""
from __future__ import annotations

import numpy as np
from PySide6.QtCore import Qt
from PySide6.QtGui import QColor
from PySide6.QtWidgets import QCheckBox, QComboBox, QFrame, QHBoxLayout, QLabel, QLineEdit, QScrollArea, QSizePolicy

from loopwright.engine.errors import ParameterError
from loopwright.engine.views_data import time_views
from loopwright.gui.docks.panel import (
    PlotPanel, data_span, elastic, fit_range, legend_row, new_layout_widget, pair_colour, pen_for, release_user_range, themed_plot,
)
from loopwright.gui.view_commands import input_label

__all__ = ["TimePanel", "RUN_LABELS", "parse_initial"]

RUN_LABELS = {"step": "unit step", "impulse": "unit impulse", "initial": "initial state", "sources": "the sources' own waveforms"}
_ERROR_COLOUR = QColor("#5b6573")
#: Samples per pixel a curve is thinned to before it is drawn (pairs of the largest and
#: smallest sample of each stretch); above 1, so the thinning settles on one value.
_SAMPLES_PER_PIXEL = 1.5


def parse_initial(text: str) -> dict:
    """``"P=1; est=0,0"`` -> ``{"P": [1.0], "est": [0.0, 0.0]}`` (block name -> values).

    Raises
    ------
    ParameterError
        Not ``BLOCK=V[,V...]`` items separated by ``;``.
    """
    out = {}
    for part in [p.strip() for p in text.replace("\n", ";").split(";") if p.strip()]:
        name, sep, vals = part.partition("=")
        try:
            values = [float(v) for v in vals.split(",") if v.strip()]
        except ValueError:
            values = []
        if not sep or not name.strip() or not values or not np.all(np.isfinite(values)):
            raise ParameterError(f"initial state {part!r}: write BLOCK=V or BLOCK=V1,V2,... (items separated by ;)", field="initial")
        out[name.strip()] = values
    return out


class TimePanel(PlotPanel):
    """Time runs of the kept pairs; one curve per pair and component."""

    key = "time"
    title = "time view"

    def __init__(self, parent=None):
        super().__init__(parent)
        bar = QHBoxLayout()
        bar.addWidget(QLabel("Run"))
        self.kind = QComboBox()
        self.kind.setObjectName("time_kind")
        self.kind.setSizeAdjustPolicy(QComboBox.SizeAdjustPolicy.AdjustToMinimumContentsLengthWithIcon)
        self.kind.setMinimumContentsLength(9)
        for k, label in RUN_LABELS.items():
            self.kind.addItem(label, k)
        self.kind.currentIndexChanged.connect(self._on_options)
        bar.addWidget(self.kind)
        self.initial = QLineEdit()
        self.initial.setObjectName("time_initial")
        self.initial.setPlaceholderText("initial state, e.g. P=1")
        self.initial.setToolTip("Initial state by block: BLOCK=V or BLOCK=V1,V2,...; items separated by ;. "
                                "Start the plant and leave its estimator at zero to see the estimation error.")
        self.initial.editingFinished.connect(self._on_options)
        self.initial.setMinimumWidth(60)
        bar.addWidget(self.initial, 1)
        self.show_error_box = QCheckBox("estimation error")
        self.show_error_box.setObjectName("time_estimation_error")
        self.show_error_box.setToolTip("Also draw the estimation error x − x̂ of every estimator linked to its plant")
        self.show_error_box.toggled.connect(self._on_options)
        bar.addWidget(self.show_error_box)
        self._layout.addLayout(bar)
        self.canvas = new_layout_widget()
        # the legend has a row of its own above the plot: it never covers a settled response
        self.legend = legend_row(self.canvas, 0, columns=2)
        self.plot = themed_plot(self.canvas, 1, left="response", bottom="time (s)")
        # a run has thousands of samples and the plot a few hundred pixels: each curve draws
        # the largest and smallest sample of every stretch of about a pixel (the envelope
        # stays exact), not every sample with a wide pen; its data stays the run's own
        self.plot.setDownsampling(auto=True, mode="peak")
        row = QHBoxLayout()
        row.addWidget(self.canvas, 1)
        # step metrics of each pair, beside the plot, in the pair's colour (step runs only)
        self.metrics_label = QLabel("")
        self.metrics_label.setObjectName("time_metrics")
        self.metrics_label.setTextFormat(Qt.TextFormat.RichText)
        self.metrics_label.setAlignment(Qt.AlignmentFlag.AlignTop | Qt.AlignmentFlag.AlignLeft)
        self.metrics_label.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self.metrics_label.setWordWrap(True)
        self.metrics_label.setMaximumWidth(190)
        self.metrics_label.setToolTip("Rise time 10 % to 90 % of the steady state; settling into ±2 %; overshoot and undershoot "
                                      "in % of the steady state, which is the path's exact DC gain.")
        # in a scroll area: many pairs (or a vector pair) never make the panel taller
        self.metrics_area = QScrollArea()
        self.metrics_area.setObjectName("time_metrics_area")
        self.metrics_area.setWidget(self.metrics_label)
        self.metrics_area.setWidgetResizable(True)
        self.metrics_area.setFrameShape(QFrame.Shape.NoFrame)
        self.metrics_area.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        self.metrics_area.setSizePolicy(QSizePolicy.Policy.Maximum, QSizePolicy.Policy.Ignored)
        self.metrics_area.setFixedWidth(200)
        self.metrics_area.setVisible(False)
        row.addWidget(self.metrics_area)
        self._layout.addLayout(row, 1)
        self.note = QLabel("")
        self.note.setObjectName("time_note")
        self.note.setWordWrap(True)
        elastic(self.note)
        self._layout.addWidget(self.note)
        self.curves: dict[tuple, object] = {}
        self.runs: dict[tuple, object] = {}
        self._title = ""
        self._estimators: list[str] = []
        self.set_message("No pair yet: right-click a wire and choose “look here”.")
        self._enable_initial()

    def _on_options(self, *_args) -> None:
        release_user_range(self.plot)  # another run: fitted to its own answer
        self._enable_initial()
        self.options_changed.emit()

    def _enable_initial(self) -> None:
        """The initial state is read by an initial-state run, and by a source run drawing the
        estimation error; for a step or impulse it is greyed out, so no one expects it to count."""
        kind = self.run_kind()
        self.initial.setEnabled(kind == "initial" or (kind == "sources" and self.show_error_box.isChecked()))

    def run_kind(self) -> str:
        return self.kind.currentData()

    def set_run_kind(self, kind: str) -> None:
        self.kind.setCurrentIndex(list(RUN_LABELS).index(kind))

    def _series(self) -> list[tuple[str, str]]:
        out = list(self.pairs)
        if self.show_error_box.isChecked():
            src = self.pairs[0][0] if self.pairs else ""
            out += [(src, f"error:{e}") for e in self._estimators]
        return out

    def job(self, diagram, pairs, shared=None):
        self._estimators = [b.name for b in diagram.blocks.values() if b.kind == "estimator" and b.params.get("plant")]
        if not self.initial.text().strip() and self._estimators:
            # the plant started, its estimator not: the estimation error's transient
            self.initial.setText(f"{diagram.block_by_name(self._estimators[0]).params['plant']}=1")
        series = self._series()
        notes = []
        kind = self.run_kind()
        if kind == "sources":
            for b in diagram.blocks.values():
                wf = (b.params.get("waveform") or {}) if b.kind == "source" else {}
                if wf.get("kind") == "white":
                    notes.append(f"{b.name}: white noise, intensity {wf.get('intensity')}, seed {wf.get('seed', 'by position')}")
        self.note.setText("; ".join(notes))
        if not series:
            return None
        initial = parse_initial(self.initial.text()) if kind in ("initial", "sources") and self.initial.text().strip() else None
        if kind == "sources" and initial is not None and not self.show_error_box.isChecked():
            initial = None  # a source run starts at rest unless the error transient is asked for
        if kind == "initial" and initial is None:
            raise ParameterError("an initial-state run needs an initial state: type e.g. P=1")
        self._shown = series
        return time_views, (diagram, series, kind), {"initial": initial, "shared": shared}

    def show_value(self, value) -> None:
        if value is None:
            value = []
        shown = getattr(self, "_shown", [])
        errors, wanted = [], set()
        self.runs = {}
        for k, (pair, run) in enumerate(zip(shown, value)):
            if isinstance(run, str):
                errors.append(f"{pair[1]}: {run}")
                continue
            self.runs[pair] = run
            colour = pair_colour(self.pairs.index(pair)) if pair in self.pairs else _ERROR_COLOUR
            for c, name in enumerate(run.names):
                key = (pair, name)
                wanted.add(key)
                if key not in self.curves:
                    label = f"{name} ← {input_label(pair[0])}" if pair in self.pairs and self.run_kind() in ("step", "impulse") else name
                    self.curves[key] = self.plot.plot(autoDownsampleFactor=_SAMPLES_PER_PIXEL)
                    self.legend.addItem(self.curves[key], label)
                pen = pen_for(colour, c if pair in self.pairs else c + 1)
                if self.curves[key].opts["pen"] != pen:  # a new pen, even an equal one, processes the data again
                    self.curves[key].setPen(pen)
                self.curves[key].setData(run.t, run.y[:, c])
            if run.diverged:
                errors.append(f"{pair[1]}: {run.message}")
        for key in [k for k in self.curves if k not in wanted]:
            item = self.curves.pop(key)
            self.plot.removeItem(item)
            self.legend.removeItem(item)
        self._show_metrics()
        if errors:
            self.show_error("\n".join(errors))
        else:
            self.set_message("" if self.runs else "No pair yet: right-click a wire and choose “look here”.")
        title = f"response to {RUN_LABELS[self.run_kind()]}"
        if title != self._title:  # a new title lays the plot out again
            self._title = title
            self.plot.setTitle(title, color="#1f2933", size="9pt")
        if self.runs:
            fit_range(self.plot, x=data_span([r.t for r in self.runs.values()]), y=data_span([r.y for r in self.runs.values()]))

    def step_metrics(self) -> dict:
        """(pair, name) -> StepMetrics of the runs on show (step runs of kept pairs only)."""
        return {(pair, nm): m for pair, run in self.runs.items() if pair in self.pairs for nm, m in run.metrics.items()}

    def _show_metrics(self) -> None:
        metrics = self.step_metrics()
        blocks = []
        for (pair, name), m in metrics.items():
            colour = pair_colour(self.pairs.index(pair)).name()
            settling = f"{m.settling_time_s:.3g} s" if m.settled else "not settled"
            blocks.append(f"<div style='color:{colour}'><b>{name} ← {input_label(pair[0])}</b><br>"
                          f"rise {m.rise_time_s:.3g} s · settling {settling}<br>"
                          f"overshoot {m.overshoot_pct:.3g} % · undershoot {m.undershoot_pct:.3g} %<br>"
                          f"peak {m.peak:.4g} at {m.peak_time_s:.3g} s · steady {m.steady_state:.4g}</div>")
        self.metrics_label.setText("<br>".join(blocks))
        self.metrics_area.setVisible(bool(blocks))

    def clear_value(self) -> None:
        for item in self.curves.values():
            item.setData([], [])

    def plot_scene_item(self):
        return self.canvas.ci

    def table(self):
        header, cols = ["t_s"], []
        t = None
        for pair, run in self.runs.items():
            for c, name in enumerate(run.names):
                header.append(f"{name} <- {pair[0]}" if not pair[1].startswith("error:") else name)
                cols.append(run.y[:, c])
                t = run.t if t is None or run.t.size < t.size else t
        if t is None:
            return header, []
        return header, [[float(t[k])] + [float(c[k]) for c in cols] for k in range(t.size)]
