"""The hand-over dialog: the lumped controller from chosen measured signals (and, if wanted,
the reference) to the actuator signals, discretised, with its sampled margins, written as
C, JSON or NPZ.

Everything numeric is the engine's (:mod:`loopwright.engine.lumped`,
:mod:`~loopwright.engine.discretize`, :mod:`~loopwright.engine.export`); the comparison and
the writing run on the task worker from a snapshot. Output names are checked with
:func:`loopwright.engine.output_paths.check_export_output` before anything is computed, so a
hand-over never replaces a diagram.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from PySide6.QtCore import Qt, QTimer, Signal
from PySide6.QtWidgets import (
    QComboBox, QDialog, QDialogButtonBox, QFileDialog, QFormLayout, QGroupBox, QHBoxLayout, QLabel, QLineEdit,
    QListWidget, QListWidgetItem, QPushButton, QTableWidget, QTableWidgetItem, QVBoxLayout, QWidget,
)

from loopwright.engine import CAUTION
from loopwright.engine.cli_common import fmt_num
from loopwright.engine.errors import EngineError
from loopwright.engine.export import c_output_paths, c_prefix_for, controller_model, write_c, write_json, write_npz
from loopwright.engine.lumped import default_loop_signals, lumped_controller, sampled_loop_margins
from loopwright.engine.output_paths import check_export_output
from loopwright.gui.workers import Tasks

__all__ = ["HandoverRequest", "HandoverPreview", "compute_preview", "write_handover", "HandoverDialog", "MARGIN_ROWS"]

FORMATS = {"C source and header": "c", "JSON": "json", "NumPy archive (NPZ)": "npz"}
SUFFIX = {"c": ".c", "json": ".json", "npz": ".npz"}

#: Rows of the margins table: (label, key of LoopMargins.as_dict(), index or None).
MARGIN_ROWS = (
    ("phase margin (deg)", "phase_margin_deg", None),
    ("delay margin (s)", "delay_margin_s", None),
    ("gain margin, upper (dB)", "gain_margin_db", 1),
    ("gain margin, lower (dB)", "gain_margin_db", 0),
    ("closed loop stable", "closed_loop_stable", None),
)


@dataclass(frozen=True)
class HandoverRequest:
    """What the dialog asks the engine for (immutable, safe to send to the worker)."""

    measured: tuple[str, ...]
    actuator: tuple[str, ...]
    ts: float
    method: str = "zoh"
    prewarp_rad_s: float | None = None
    fmt: str = "c"
    precision: str = "double"
    output: str = ""
    origin: str | None = None


@dataclass(frozen=True)
class HandoverPreview:
    """The controller's size and the continuous-versus-sampled margins per actuator channel."""

    states: int
    inputs: tuple[str, ...]
    outputs: tuple[str, ...]
    margins: dict  # channel name -> {"continuous": dict, "sampled": dict}
    note: str = ""


def compute_preview(diagram, req: HandoverRequest) -> HandoverPreview:
    """Worker side: the lumped controller and the margins at the actuator, continuous and sampled.

    A vector actuator is compared loop at a time (one component broken, the others closed),
    as ``loopwright export`` does.
    """
    k = lumped_controller(diagram, measured=list(req.measured), actuator=list(req.actuator))
    margins, note = {}, ""
    if len(req.actuator) == 1:
        q = k.C.shape[0]
        names = [req.actuator[0]] if q == 1 else [f"{req.actuator[0]}[{i + 1}]" for i in range(q)]
        try:
            for ch, name in enumerate(names):
                cmp_ = sampled_loop_margins(diagram, measured=list(req.measured), actuator=req.actuator[0], ts=req.ts,
                                            method=req.method, prewarp_rad_s=req.prewarp_rad_s, channel=ch)
                margins[name] = {"continuous": cmp_.continuous.as_dict(), "sampled": cmp_.sampled.as_dict()}
        except EngineError as err:
            margins, note = {}, f"margins not compared: {err}"
    else:
        note = "margins are compared for one actuator signal at a time"
    return HandoverPreview(k.A.shape[0], tuple(k.input_names), tuple(k.output_names), margins, note)


def output_targets(req: HandoverRequest) -> list[Path]:
    """The files a hand-over writes (C: the source and its header)."""
    return list(c_output_paths(req.output)) if req.fmt == "c" else [Path(req.output)]


def write_handover(diagram, req: HandoverRequest, reading=()) -> list[str]:
    """Worker side: check every output name, then discretise and write. Returns the files written."""
    targets = output_targets(req)
    for t in targets:
        check_export_output(t, reading=reading)
    if req.fmt == "c":
        c_prefix_for(req.output)
    model = controller_model(diagram, measured=list(req.measured), actuator=list(req.actuator), ts=req.ts, method=req.method,
                             prewarp_rad_s=req.prewarp_rad_s, source=req.origin)
    if req.fmt == "c":
        write_c(model, req.output, precision=req.precision)
    elif req.fmt == "json":
        write_json(model, req.output)
    else:
        write_npz(model, req.output)
    return [str(t) for t in targets]


def default_signals(diagram) -> tuple[list[str], list[str]]:
    """Measured: the signal into the estimator's y; actuator: the signal into its plant's u."""
    try:
        return default_loop_signals(diagram)
    except EngineError:
        return [], []


class HandoverDialog(QDialog):
    """Choose signals, sample period, method, precision and format; see the sampled margins; write."""

    written = Signal(list)

    def __init__(self, document, parent=None):
        super().__init__(parent)
        self.setWindowTitle("Hand over the controller")
        self.setObjectName("handover_dialog")
        self._doc = document
        self.tasks = Tasks(self)
        self.tasks.finished.connect(self._on_task)
        self.preview: HandoverPreview | None = None
        self.last_written: list[str] = []
        self._timer = QTimer(self)
        self._timer.setSingleShot(True)
        self._timer.setInterval(250)
        self._timer.timeout.connect(self.compute)

        d = document.diagram
        signals = sorted(w.name for w in d.wires.values())
        refs = {w.name for w in d.wires.values() if d.blocks[w.source.block].kind == "source"
                and d.blocks[w.source.block].params.get("role") == "reference"}
        measured, actuator = default_signals(d)
        lay = QVBoxLayout(self)
        intro = QLabel("The lumped controller is everything between the measured signals and the actuator signals, "
                       "as one model. Tick what it reads and what it drives; add the reference if the controller "
                       "reads it too.")
        intro.setWordWrap(True)
        lay.addWidget(intro)
        lists = QHBoxLayout()
        self.measured_list = self._signal_list(signals, measured, refs, "measured_list")
        self.actuator_list = self._signal_list(signals, actuator, set(), "actuator_list")
        for title, w in (("Reads (measured signals, reference)", self.measured_list), ("Drives (actuator signals)", self.actuator_list)):
            box = QGroupBox(title)
            QVBoxLayout(box).addWidget(w)
            lists.addWidget(box)
        lay.addLayout(lists)

        form = QFormLayout()
        self.ts_edit = QLineEdit(self._default_ts(d))
        self.ts_edit.setObjectName("ts_edit")
        form.addRow("Sample period (s)", self.ts_edit)
        self.method_box = QComboBox()
        self.method_box.setObjectName("method_box")
        self.method_box.addItem("zero-order hold", "zoh")
        self.method_box.addItem("Tustin", "tustin")
        form.addRow("Discretisation", self.method_box)
        self.prewarp_edit = QLineEdit()
        self.prewarp_edit.setObjectName("prewarp_edit")
        self.prewarp_edit.setPlaceholderText("none (Tustin only): frequency kept exact, rad/s")
        form.addRow("Pre-warp (rad/s)", self.prewarp_edit)
        self.precision_box = QComboBox()
        self.precision_box.setObjectName("precision_box")
        self.precision_box.addItems(["double", "float"])
        form.addRow("C precision", self.precision_box)
        self.format_box = QComboBox()
        self.format_box.setObjectName("format_box")
        for label, key in FORMATS.items():
            self.format_box.addItem(label, key)
        form.addRow("Format", self.format_box)
        row = QWidget()
        rl = QHBoxLayout(row)
        rl.setContentsMargins(0, 0, 0, 0)
        name = f"{Path(document.path).stem}_controller.c" if document.path else "controller.c"
        folder = Path(document.path).parent if document.path else Path.cwd()
        self.output_edit = QLineEdit(str(folder / name))
        self.output_edit.setObjectName("output_edit")
        browse = QPushButton("Choose…")
        browse.clicked.connect(self._browse)
        rl.addWidget(self.output_edit, 1)
        rl.addWidget(browse)
        form.addRow("Write to", row)
        lay.addLayout(form)

        self.summary = QLabel("")
        self.summary.setObjectName("handover_summary")
        self.summary.setWordWrap(True)
        lay.addWidget(self.summary)
        self.table = QTableWidget(len(MARGIN_ROWS), 2)
        self.table.setObjectName("handover_margins")
        self.table.setHorizontalHeaderLabels(["continuous", "sampled"])
        self.table.setVerticalHeaderLabels([r[0] for r in MARGIN_ROWS])
        self.table.setEditTriggers(QTableWidget.EditTrigger.NoEditTriggers)
        self.table.horizontalHeader().setStretchLastSection(True)
        lay.addWidget(self.table)
        self.status = QLabel("")
        self.status.setObjectName("handover_status")
        self.status.setWordWrap(True)
        self.status.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        lay.addWidget(self.status)
        caution = QLabel(CAUTION)
        caution.setWordWrap(True)
        caution.setStyleSheet("color: #a04000;")
        lay.addWidget(caution)
        buttons = QDialogButtonBox()
        self.write_button = buttons.addButton("Write", QDialogButtonBox.ButtonRole.AcceptRole)
        self.write_button.setObjectName("handover_write")
        close = buttons.addButton(QDialogButtonBox.StandardButton.Close)
        self.write_button.clicked.connect(self.write)
        close.clicked.connect(self.reject)
        lay.addWidget(buttons)

        for w in (self.ts_edit, self.prewarp_edit):
            w.textChanged.connect(self._schedule)
        for w in (self.method_box, self.precision_box):
            w.currentIndexChanged.connect(self._schedule)
        self.format_box.currentIndexChanged.connect(self._on_format)
        for w in (self.measured_list, self.actuator_list):
            w.itemChanged.connect(self._schedule)
        self._on_method()
        self.method_box.currentIndexChanged.connect(self._on_method)
        self.resize(640, 720)
        self.compute()

    # ---- building ------------------------------------------------------------------------------
    @staticmethod
    def _signal_list(signals, checked, refs, name) -> QListWidget:
        w = QListWidget()
        w.setObjectName(name)
        for s in signals:
            it = QListWidgetItem(s + ("  (reference)" if s in refs else ""))
            it.setData(Qt.ItemDataRole.UserRole, s)
            it.setFlags(it.flags() | Qt.ItemFlag.ItemIsUserCheckable)
            it.setCheckState(Qt.CheckState.Checked if s in checked else Qt.CheckState.Unchecked)
            w.addItem(it)
        return w

    @staticmethod
    def _default_ts(diagram) -> str:
        dt = (diagram.settings.get("time") or {}).get("dt")
        return f"{dt:g}" if isinstance(dt, (int, float)) and dt > 0 else "0.001"

    def set_checked(self, which: str, names) -> None:
        """Tick exactly ``names`` in the measured or actuator list (also used by tests)."""
        w = self.measured_list if which == "measured" else self.actuator_list
        for i in range(w.count()):
            it = w.item(i)
            it.setCheckState(Qt.CheckState.Checked if it.data(Qt.ItemDataRole.UserRole) in names else Qt.CheckState.Unchecked)

    def _checked(self, w: QListWidget) -> tuple[str, ...]:
        return tuple(w.item(i).data(Qt.ItemDataRole.UserRole) for i in range(w.count())
                     if w.item(i).checkState() == Qt.CheckState.Checked)

    # ---- reading the form ----------------------------------------------------------------------
    def request(self) -> HandoverRequest:
        """The form as a request; raises ValueError with a one-line message naming the field."""
        measured, actuator = self._checked(self.measured_list), self._checked(self.actuator_list)
        if not measured:
            raise ValueError("tick at least one signal the controller reads")
        if not actuator:
            raise ValueError("tick at least one signal the controller drives")
        try:
            ts = float(self.ts_edit.text())
        except ValueError:
            raise ValueError(f"sample period: {self.ts_edit.text()!r} is not a number of seconds") from None
        if not ts > 0 or ts != ts or ts == float("inf"):
            raise ValueError(f"sample period must be a positive number of seconds, got {self.ts_edit.text()}")
        method = self.method_box.currentData()
        prewarp = None
        if method == "tustin" and self.prewarp_edit.text().strip():
            try:
                prewarp = float(self.prewarp_edit.text())
            except ValueError:
                raise ValueError(f"pre-warp: {self.prewarp_edit.text()!r} is not a frequency in rad/s") from None
        fmt = self.format_box.currentData()
        return HandoverRequest(measured, actuator, ts, method, prewarp, fmt, self.precision_box.currentText(),
                               self.output_edit.text().strip(), self._doc.path)

    def _on_method(self) -> None:
        self.prewarp_edit.setEnabled(self.method_box.currentData() == "tustin")

    def _on_format(self) -> None:
        fmt = self.format_box.currentData()
        self.precision_box.setEnabled(fmt == "c")
        out = self.output_edit.text().strip()
        if out:
            p = Path(out)
            self.output_edit.setText(str(p.with_suffix(SUFFIX[fmt])))

    def _browse(self) -> None:
        fmt = self.format_box.currentData()
        path, _ = QFileDialog.getSaveFileName(self, "Hand-over file", self.output_edit.text(), f"{fmt.upper()} (*{SUFFIX[fmt]})")
        if path:
            self.output_edit.setText(path)

    def _schedule(self, *_a) -> None:
        self._timer.start()

    # ---- engine work ---------------------------------------------------------------------------
    def compute(self) -> None:
        """Send the preview (controller size, sampled margins) to the worker."""
        self._timer.stop()
        try:
            req = self.request()
        except ValueError as err:
            self._show_error(str(err))
            return
        self.status.setText("computing the sampled margins…")
        self.tasks.submit("preview", compute_preview, self._doc.snapshot(), req)

    def write(self) -> None:
        try:
            req = self.request()
        except ValueError as err:
            self._show_error(str(err))
            return
        if not req.output:
            self._show_error("give a file to write")
            return
        reading = [self._doc.path] if self._doc.path else []
        try:
            for t in output_targets(req):
                check_export_output(t, reading=reading)  # refused at once, before any work
        except EngineError as err:
            self._show_error(str(err))
            return
        self.status.setText("writing…")
        self.tasks.submit("write", write_handover, self._doc.snapshot(), req, reading)

    def _show_error(self, text: str) -> None:
        self.status.setText(text)
        self.status.setStyleSheet("color: #c0392b;")

    def _on_task(self, result) -> None:
        self.status.setStyleSheet("")
        if result.error is not None:
            self._show_error(result.error)
            return
        if result.key == "preview":
            self._show_preview(result.value)
            self.status.setText("")
        else:
            self.last_written = list(result.value)
            self.status.setText("wrote " + ", ".join(self.last_written))
            self.written.emit(self.last_written)

    def _show_preview(self, pv: HandoverPreview) -> None:
        self.preview = pv
        self.summary.setText(f"Controller: {pv.states} states, reads {', '.join(pv.inputs)}, drives {', '.join(pv.outputs)}."
                             + (f"  {pv.note}" if pv.note else ""))
        channels = list(pv.margins)
        self.table.setColumnCount(2 * max(1, len(channels)))
        heads = []
        for ch in channels or [""]:
            suffix = f" ({ch})" if len(channels) > 1 else ""
            heads += [f"continuous{suffix}", f"sampled{suffix}"]
        self.table.setHorizontalHeaderLabels(heads)
        for c, ch in enumerate(channels):
            for side, col in (("continuous", 2 * c), ("sampled", 2 * c + 1)):
                m = pv.margins[ch][side]
                for r, (_label, key, idx) in enumerate(MARGIN_ROWS):
                    v = m[key] if idx is None else m[key][idx]
                    text = ("yes" if v else "NO") if isinstance(v, bool) else fmt_num(v, digits=5)
                    self.table.setItem(r, col, QTableWidgetItem(text))
        if not channels:
            self.table.clearContents()

    def done(self, code: int) -> None:  # noqa: D401 - QDialog override
        self.tasks.shutdown(wait=False)
        super().done(code)
