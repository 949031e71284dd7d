"""A block's model edited as one thing: the model part of the inspector.

Plant, dynamic block and estimator keep their model in several matrices that must agree
in size. Here the sizes (states, inputs, outputs, load inputs, performance outputs) are set once and every
matrix follows them; what the user types is a *draft* until it is consistent, and
**Apply** hands it to the inspector as one parameter set (one undoable step). A draft
that is not applied is never dropped behind the user's back: the inspector keeps it per
block (:meth:`ModelEditor.state`) and shows it again with a note until it is applied or
reverted.

Transfer functions show the engine's realisation (A, B, C, D and what each state is)
read-only beside the coefficients. The engine computes everything shown here; this
module only lays it out.
"""
from __future__ import annotations

import copy
from typing import Any, Callable

from PySide6.QtCore import QSize, Qt, Signal
from PySide6.QtGui import QKeySequence, QShortcut
from PySide6.QtWidgets import (
    QComboBox,
    QFormLayout,
    QGridLayout,
    QHBoxLayout,
    QLabel,
    QLineEdit,
    QPushButton,
    QSizePolicy,
    QSpinBox,
    QVBoxLayout,
    QWidget,
)

from loopwright.engine.errors import EngineError, ParameterError
from loopwright.engine.validation import parse_matrix_text
from loopwright.gui.matrix_table import MatrixEditor, number_text

__all__ = ["ModelEditor", "MODEL_KEYS", "WrappedNote", "state_order", "describe_state_order"]

#: parameters that make up a block's model (everything else, e.g. a recipe, is kept)
MODEL_KEYS = ("A", "B", "C", "D", "E", "F", "Cz", "Dz", "Fz", "num", "den", "plant", "L")

_SIZES = ("states", "inputs", "outputs", "loads", "perf")
_PLANT_ONLY = ("loads", "perf")
# matrix -> (rows, columns) as size names
_SHAPES = {
    "A": ("states", "states"),
    "B": ("states", "inputs"),
    "C": ("outputs", "states"),
    "D": ("outputs", "inputs"),
    "E": ("states", "loads"),
    "F": ("outputs", "loads"),
    "Cz": ("perf", "states"),
    "Dz": ("perf", "inputs"),
    "Fz": ("perf", "loads"),
    "L": ("states", "outputs"),
}
_SIZE_LABELS = {"states": "states", "inputs": "inputs u", "outputs": "outputs y", "loads": "load inputs d",
                "perf": "performance outputs z"}


def _count(n: int, word: str) -> str:
    """``1 state``, ``2 states``."""
    return f"{n} {word}{'' if n == 1 else 's'}"


def _is_siso_coeffs(value: Any) -> bool:
    return isinstance(value, list) and all(isinstance(c, (int, float)) and not isinstance(c, bool) for c in value)


def state_order(diagram, block_name: str) -> list[str]:
    """The states of a plant or dynamic block in the engine's order, described.

    ``["P.x1 = y", "P.x2 = dy/dt"]`` for a transfer function (what each state is), or
    ``["P.x1", "P.x2"]`` for a state-space model (the rows of its A, as typed).
    Raises EngineError when the block cannot be realised.
    """
    from loopwright.engine.blocks import plant_matrices, tf_state_descriptions

    blk = diagram.block_by_name(block_name)
    A = plant_matrices(diagram, block_name)[0]
    names = [f"{block_name}.x{k + 1}" for k in range(A.shape[0])]
    if "num" in blk.params:
        return [f"{n} = {what}" for n, what in zip(names, tf_state_descriptions(blk.params["num"], blk.params["den"]))]
    return names


def describe_state_order(diagram, block_name: str) -> str:
    """``"P.x1 = y, P.x2 = dy/dt"``, or why the order is unknown."""
    try:
        order = state_order(diagram, block_name)
    except (EngineError, KeyError, ValueError) as err:
        return f"unknown until {block_name} is valid ({err})"
    return ", ".join(order) if order else "no states"


class WrappedNote(QLabel):
    """A word-wrapped note whose minimum height is its height at its width.

    A form caches each row's height for width: a note rewritten or shown again (linking a
    plant) kept the height of its old text and its last line was cut. A minimum height
    is always read afresh.
    """

    def __init__(self, text: str = "", parent=None):
        super().__init__(text, parent)
        self.setWordWrap(True)

    def setText(self, text: str) -> None:
        super().setText(text)
        self._fit()

    def resizeEvent(self, event) -> None:
        super().resizeEvent(event)
        if event.size().width() != event.oldSize().width():
            self._fit()

    def _fit(self) -> None:
        h = self.heightForWidth(self.width()) if self.width() > 0 else -1
        if h > 0 and h != self.minimumHeight():
            self.setMinimumHeight(h)


class _SizedByWidth(QWidget):
    """A container whose size hints are its height for its current width.

    A form lays a spanning row out by the row's size hint, not by its height for the width
    it gets: word-wrapped notes then squeezed the matrices under them (a 2x1 L, a 2x2
    realization showed one row). These hints say the height needed at the current width.
    """

    def sizeHint(self) -> QSize:
        hint = super().sizeHint()
        return QSize(hint.width(), max(hint.height(), self._height_at_width()))

    def minimumSizeHint(self) -> QSize:
        hint = super().minimumSizeHint()
        return QSize(hint.width(), max(hint.height(), self._height_at_width()))

    def heightForWidth(self, width: int) -> int:
        # asked for a wider width than it has (the form's spanning row counts its margins
        # differently), answer for the width it has: more height is harmless, less cuts a line
        return super().heightForWidth(min(width, self.width()) if self.width() > 0 else width)

    def _height_at_width(self) -> int:
        lay = self.layout()
        return lay.totalHeightForWidth(self.width()) if lay is not None and lay.hasHeightForWidth() and self.width() > 0 else 0

    def resizeEvent(self, event) -> None:
        super().resizeEvent(event)
        if event.size().width() != event.oldSize().width():
            self.updateGeometry()  # the hints above depend on the width



class ModelEditor(_SizedByWidth):
    """Edits the model of one plant, dynamic block or estimator as one draft.

    Parameters
    ----------
    kind : {"plant", "dynamic", "estimator"}
    params : dict
        The block's stored parameters.
    block_name : str
    diagram : Diagram
        Read only: linked plants' sizes and state order for an estimator.
    check : callable(params) -> None
        Raises EngineError when the engine refuses ``params`` for this block.
    state : dict, optional
        A draft kept from before (:meth:`state`), shown instead of the stored model.
    """

    applied = Signal(dict)
    draft_changed = Signal()

    def __init__(self, kind: str, params: dict, *, block_name: str, diagram, check: Callable[[dict], None],
                 state: dict | None = None, parent=None):
        super().__init__(parent)
        self.setObjectName("model_editor")
        self.setSizePolicy(QSizePolicy.Policy.Preferred, QSizePolicy.Policy.Maximum)
        self._kind, self._stored, self._name = kind, copy.deepcopy(params), block_name
        self._diagram, self._check = diagram, check
        self._building = True
        self.fields: dict[str, QWidget] = {}
        self.matrices: dict[str, MatrixEditor] = {}
        self._valid_params: dict | None = None
        lay = QVBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        self._form = QFormLayout()
        self._form.setRowWrapPolicy(QFormLayout.RowWrapPolicy.WrapLongRows)
        lay.addLayout(self._form)

        # how the model is given: form (plant, dynamic) or link (estimator)
        self.choice = QComboBox()
        if kind == "estimator":
            self.choice.setObjectName("field_plant")
            self.choice.addItem("own model (A, B, C, D)", None)
            plants = sorted(b.name for b in diagram.blocks.values() if b.kind in ("plant", "dynamic"))
            for name in plants:
                self.choice.addItem(f"plant {name}", name)
            cur = params.get("plant")
            if cur is not None and cur not in plants:
                self.choice.addItem(f"plant {cur} (missing)", cur)
            self._form.addRow("model of", self.choice)
        else:
            self.choice.setObjectName("field_form")
            self.choice.addItem("state space (A, B, C, D)", "ss")
            self.choice.addItem("transfer function (num, den)", "tf")
            self._form.addRow("model", self.choice)
        self.fields["choice"] = self.choice
        self.fields["plant" if kind == "estimator" else "form"] = self.choice

        # sizes, set once for every matrix
        self.sizes: dict[str, QSpinBox] = {}
        size_row = QWidget()
        srow = QGridLayout(size_row)
        srow.setContentsMargins(0, 0, 0, 0)
        for k, key in enumerate(k for k in _SIZES if k not in _PLANT_ONLY or kind == "plant"):
            spin = QSpinBox()
            spin.setObjectName(f"size_{key}")
            spin.setRange(0 if key in ("states", *_PLANT_ONLY) else 1, 200)
            spin.setToolTip(_SIZE_LABELS[key])
            if k < 4:
                srow.addWidget(QLabel(_SIZE_LABELS[key]), k // 2, 2 * (k % 2))
                srow.addWidget(spin, k // 2, 2 * (k % 2) + 1)
            else:
                # a long label spans the first three columns: the pairs above stay narrow
                # enough for the inspector's usual width
                srow.addWidget(QLabel(_SIZE_LABELS[key]), k // 2, 0, 1, 3)
                srow.addWidget(spin, k // 2, 3)
            self.sizes[key] = spin
        srow.setColumnStretch(4, 1)
        self._size_row = size_row
        self._form.addRow("sizes", size_row)
        # notes span the form's width: in the field column of a wrapping form, a note's
        # row was sized for another width than it got and its last line was cut
        self.linked_info = WrappedNote("")
        self.linked_info.setObjectName("linked_info")
        self.linked_info.setWordWrap(True)
        self._form.addRow(self.linked_info)

        for key in ("A", "B", "C", "D", "E", "F", "Cz", "Dz", "Fz"):
            if key in ("E", "F", "Cz", "Dz", "Fz") and kind != "plant":
                continue
            self._add_matrix(key, key)
        if kind == "plant":
            self.performance_note = WrappedNote("z = Cz x + Dz u + Fz d: what must stay small but is not measured; "
                                           "estimators and designs read y only")
            self.performance_note.setObjectName("performance_note")
            self.performance_note.setWordWrap(True)
            self._form.addRow(self.performance_note)
        self.states_note = WrappedNote("")
        self.states_note.setObjectName("states_note")
        self.states_note.setWordWrap(True)
        self.states_note.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self._form.addRow(self.states_note)

        # transfer function: coefficients and the realisation beside them
        self.num = QLineEdit()
        self.num.setObjectName("field_num")
        self.den = QLineEdit()
        self.den.setObjectName("field_den")
        for edit, example in ((self.num, "1"), (self.den, "1, 0, 0  (s²)")):
            edit.setToolTip("coefficients, highest power of s first, e.g. 1, 3, 2 for s² + 3s + 2")
            edit.setPlaceholderText(f"e.g. {example}")
            edit.textEdited.connect(lambda _t: self._redraft())
        self.fields["num"], self.fields["den"] = self.num, self.den
        self._form.addRow("numerator", self.num)
        self._form.addRow("denominator", self.den)
        self.poles_zeros = WrappedNote("")
        self.poles_zeros.setObjectName("poles_zeros")
        self.poles_zeros.setWordWrap(True)
        self.poles_zeros.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self._form.addRow(self.poles_zeros)
        self.fields["poles_zeros"] = self.poles_zeros
        self.tf_note = WrappedNote("a transfer-function matrix: one (num, den) pair per output and input, kept as written in the file")
        self.tf_note.setWordWrap(True)
        self._form.addRow(self.tf_note)
        self.realization = _SizedByWidth()
        self.realization.setObjectName("realization")
        rlay = QVBoxLayout(self.realization)
        rlay.setContentsMargins(0, 0, 0, 0)
        head = QLabel("<b>realization</b> (read-only: what the engine builds from the transfer function)")
        head.setWordWrap(True)
        rlay.addWidget(head)
        self.realization_states = WrappedNote("")
        self.realization_states.setObjectName("realization_states")
        self.realization_states.setWordWrap(True)
        rlay.addWidget(self.realization_states)
        self.realization_mats: dict[str, MatrixEditor] = {}
        for key in ("A", "B", "C", "D"):
            row = QHBoxLayout()
            row.addWidget(QLabel(key))
            ed = MatrixEditor([], name=f"realization_{key}", read_only=True)
            row.addWidget(ed, 1)
            rlay.addLayout(row)
            self.realization_mats[key] = ed
        self._form.addRow(self.realization)

        if kind == "estimator":
            self._add_matrix("L", "L (estimator gain)")
            self.l_order = WrappedNote("")
            self.l_order.setObjectName("l_order")
            self.l_order.setWordWrap(True)
            self._form.addRow(self.l_order)

        # the draft's state and the one step that applies it
        self.status = WrappedNote("")
        self.status.setObjectName("model_draft_status")
        self.status.setWordWrap(True)
        self.apply_button = QPushButton("Apply model")
        self.apply_button.setObjectName("model_apply")
        self.apply_button.setToolTip("Apply the whole model as one undoable step (Ctrl+Return)")
        self.revert_button = QPushButton("Revert")
        self.revert_button.setObjectName("model_revert")
        self.revert_button.setToolTip("Drop the draft and show the model the diagram has")
        buttons = QHBoxLayout()
        buttons.addWidget(self.apply_button)
        buttons.addWidget(self.revert_button)
        buttons.addStretch(1)
        lay.addWidget(self.status)
        lay.addLayout(buttons)
        self.apply_button.clicked.connect(self.apply)
        self.revert_button.clicked.connect(self.revert)
        for seq in ("Ctrl+Return", "Ctrl+Enter"):
            sc = QShortcut(QKeySequence(seq), self)
            sc.setContext(Qt.ShortcutContext.WidgetWithChildrenShortcut)
            sc.activated.connect(self.apply)

        self._load(state if state is not None else self._state_from_params(params))
        self._kept = state is not None
        for spin in self.sizes.values():
            spin.valueChanged.connect(self._on_sizes)
        self.choice.currentIndexChanged.connect(self._on_choice)
        self._building = False
        self._redraft()

    # ---- building -----------------------------------------------------------------------
    def _add_matrix(self, key: str, label: str) -> None:
        ed = MatrixEditor([], name=key, sized_outside=True)
        ed.changed.connect(self._redraft)
        ed.reshaped.connect(lambda r, c, k=key: self._on_reshaped(k, r, c))
        self._form.addRow(label, ed)
        self.matrices[key] = ed
        self.fields[key] = ed

    def _state_from_params(self, params: dict) -> dict:
        """The editor's state (what each widget shows) for stored parameters."""
        st: dict[str, Any] = {"choice": None, "cells": {}, "num": "", "den": "", "sizes": {}}
        if self._kind == "estimator":
            st["choice"] = params.get("plant")
        else:
            st["choice"] = "tf" if ("num" in params or "den" in params) else "ss"
        for key in _SHAPES:
            if key in params and key in self.matrices:
                st["cells"][key] = [[number_text(v) for v in (row if isinstance(row, list) else [row])] for row in params[key]]
        if st["choice"] == "tf":
            st["num"] = params.get("num")
            st["den"] = params.get("den")
        st["sizes"] = self._sizes_of(st["cells"])
        return st

    def _sizes_of(self, cells: dict) -> dict:
        def shape(key):
            rows = cells.get(key) or []
            return len(rows), (len(rows[0]) if rows else 0)
        n = shape("A")[0]
        m = shape("D")[1] or shape("B")[1]
        p = shape("D")[0] or shape("C")[0]
        q = shape("E")[1]
        return {"states": n, "inputs": max(m, 1), "outputs": max(p, 1), "loads": q, "perf": shape("Cz")[0]}

    def _load(self, st: dict) -> None:
        self._building = True
        idx = self.choice.findData(st["choice"])
        self.choice.setCurrentIndex(max(idx, 0))
        for key, spin in self.sizes.items():
            spin.setValue(int(st["sizes"].get(key, 0)))
        for key, ed in self.matrices.items():
            if key in st["cells"]:
                ed.set_texts(st["cells"][key])
        self._tf_raw = (st.get("num"), st.get("den"))
        self.num.setText(self._coeff_text(st.get("num")))
        self.den.setText(self._coeff_text(st.get("den")))
        self._follow_sizes()
        self._show_parts()
        self._building = False

    @staticmethod
    def _coeff_text(value) -> str:
        if value is None:
            return ""
        if isinstance(value, str):
            return value
        if _is_siso_coeffs(value):
            return ", ".join(number_text(c) for c in value)
        return repr(value)

    def state(self) -> dict:
        """What the editor shows, to keep an unapplied draft and show it again later."""
        return {
            "choice": self.choice.currentData(),
            "sizes": {k: s.value() for k, s in self.sizes.items()},
            "cells": {k: ed.texts() for k, ed in self.matrices.items()},
            "num": self.num.text() if self._tf_is_siso() else self._tf_raw[0],
            "den": self.den.text() if self._tf_is_siso() else self._tf_raw[1],
        }

    # ---- what is visible --------------------------------------------------------------------
    def _linked(self) -> str | None:
        return self.choice.currentData() if self._kind == "estimator" else None

    def _is_tf(self) -> bool:
        return self._kind != "estimator" and self.choice.currentData() == "tf"

    def _tf_is_siso(self) -> bool:
        raw_num, raw_den = self._tf_raw
        return not (isinstance(raw_num, list) and not _is_siso_coeffs(raw_num)) and not (
            isinstance(raw_den, list) and not _is_siso_coeffs(raw_den))

    def _show_parts(self) -> None:
        tf, linked = self._is_tf(), self._linked()
        ss_own = not tf and linked is None
        self._set_row_visible(self._size_row, ss_own)
        for key, ed in self.matrices.items():
            visible = ss_own
            if key in ("E", "F"):
                visible = ss_own and self.sizes["loads"].value() > 0
            if key in ("Cz", "Dz", "Fz"):
                visible = ss_own and self.sizes["perf"].value() > 0 and (key != "Fz" or self.sizes["loads"].value() > 0)
            if key == "L":
                visible = True
            self._set_row_visible(ed, visible)
        self._set_row_visible(self.linked_info, linked is not None)
        self._set_row_visible(self.states_note, ss_own)
        if self._kind == "plant":
            self._set_row_visible(self.performance_note, ss_own and self.sizes["perf"].value() > 0)
        siso = self._tf_is_siso()
        for w in (self.num, self.den, self.poles_zeros):
            self._set_row_visible(w, tf and siso)
        self._set_row_visible(self.tf_note, tf and not siso)
        self._set_row_visible(self.realization, tf)

    def _set_row_visible(self, widget: QWidget, visible: bool) -> None:
        if self._form.indexOf(widget) >= 0:
            self._form.setRowVisible(widget, visible)
        else:
            widget.setVisible(visible)

    # ---- reacting to the user ---------------------------------------------------------------
    def _on_choice(self) -> None:
        if self._building:
            return
        self._building = True
        if self._kind == "estimator":
            linked = self._linked()
            if linked is None:
                self._prefill_from_link(self._stored.get("plant"))
        elif self._is_tf():
            if not self.num.text() and not self.den.text():
                self._tf_raw = (None, None)
        else:
            self._prefill_from_tf()
        self._follow_sizes()
        self._show_parts()
        self._building = False
        self._redraft()

    def _prefill_from_link(self, plant: str | None) -> None:
        """Own model from the plant it was linked to (the engine's realisation of it)."""
        from loopwright.engine.blocks import plant_matrices

        if plant is None:
            return
        try:
            mats = plant_matrices(self._diagram, plant)
        except (EngineError, KeyError, ValueError):
            return
        self._set_model_matrices(mats)

    def _prefill_from_tf(self) -> None:
        """State space from the transfer function typed so far (the engine's realisation)."""
        from loopwright.engine.blocks import tf_to_ss

        try:
            num, den = self._tf_coeffs()
            mats = tf_to_ss(num, den, where=f"block {self._name!r}")
        except EngineError:
            return
        self._set_model_matrices(mats)

    def _set_model_matrices(self, mats) -> None:
        A, B, C, D = mats
        self.sizes["states"].setValue(A.shape[0])
        self.sizes["inputs"].setValue(max(D.shape[1], 1))
        self.sizes["outputs"].setValue(max(D.shape[0], 1))
        for key, M in zip("ABCD", mats):
            self.matrices[key].set_texts([[number_text(v) for v in row] for row in M.tolist()])

    def _on_sizes(self) -> None:
        if self._building:
            return
        self._follow_sizes()
        self._show_parts()
        self._redraft()

    def _on_reshaped(self, key: str, rows: int, cols: int) -> None:
        """A paste gave one matrix a new size: the shared sizes follow it, then the rest."""
        if key == "L" and self._linked() is not None:
            self._follow_sizes()
            return
        r_name, c_name = _SHAPES[key]
        self._building = True
        if key == "A" and rows != cols:
            self._building = False
            self._follow_sizes()
            self.status.setText(f"A must be square; the pasted block is {rows}×{cols}")
            return
        self.sizes[r_name].setValue(rows)
        if c_name in self.sizes:
            self.sizes[c_name].setValue(cols)
        self._building = False
        self._follow_sizes()
        self._show_parts()
        self._redraft()

    def _model_sizes(self) -> tuple[int, int, int, int, int] | None:
        """(states, inputs, outputs, loads, performance outputs) the matrices must have, or None if unknown."""
        linked = self._linked()
        if linked is not None:
            from loopwright.engine.blocks import plant_matrices

            try:
                A, B, C, D = plant_matrices(self._diagram, linked)
            except (EngineError, KeyError, ValueError):
                return None
            return A.shape[0], D.shape[1], D.shape[0], 0, 0
        return tuple(self.sizes[k].value() if k in self.sizes else 0 for k in _SIZES)

    def _follow_sizes(self) -> None:
        sizes = self._model_sizes()
        if sizes is None:
            return
        dims = dict(zip(_SIZES, sizes))
        for key, ed in self.matrices.items():
            r, c = _SHAPES[key]
            if (ed.table.rowCount(), ed.table.columnCount()) != (dims[r], dims[c]):
                ed.blockSignals(True)
                ed.resize_to(dims[r], dims[c])
                ed.blockSignals(False)

    # ---- the draft --------------------------------------------------------------------------
    def _tf_coeffs(self):
        raw_num, raw_den = self._tf_raw
        if not self._tf_is_siso():
            return raw_num, raw_den
        out = []
        for key, edit in (("num", self.num), ("den", self.den)):
            text = edit.text().strip()
            if not text:
                raise ParameterError(f"{'numerator' if key == 'num' else 'denominator'}: enter the coefficients", field=key)
            try:
                rows = parse_matrix_text(text)
            except ParameterError as err:
                raise ParameterError(f"{key}: {err}", field=key) from None
            if len(rows) != 1:
                raise ParameterError(f"{key}: expected one row of coefficients, got {len(rows)} rows", field=key)
            out.append(rows[0])
        return out[0], out[1]

    def draft_params(self) -> dict:
        """The block's parameters as the draft has them. ParameterError names a bad entry."""
        params = {k: v for k, v in copy.deepcopy(self._stored).items() if k not in MODEL_KEYS}
        if self._is_tf():
            params["num"], params["den"] = self._tf_coeffs()
        else:
            linked = self._linked()
            if linked is not None:
                params["plant"] = linked
            else:
                for key in ("A", "B", "C", "D"):
                    value = self.matrices[key].value()
                    value = value if value and value[0] else []  # 1×0 is as empty as 0×1
                    if value or key == "D" or key in self._stored:
                        # a block without states is D alone, as the file format writes it
                        params[key] = value
                if self._kind == "plant" and self.sizes["loads"].value() > 0:
                    params["E"], params["F"] = self.matrices["E"].value(), self.matrices["F"].value()
                    if "F" not in self._stored and not any(v for row in params["F"] for v in row):
                        del params["F"]  # F is optional (zero when left out): keep the file as written
                if self._kind == "plant" and self.sizes["perf"].value() > 0:
                    params["Cz"] = self.matrices["Cz"].value()
                    # Dz and Fz are optional like F: written when not zero or when the file had them
                    optional = [("Dz", True), ("Fz", self.sizes["loads"].value() > 0)]
                    for key, possible in optional:
                        value = self.matrices[key].value()
                        if possible and (key in self._stored or any(v for row in value for v in row)):
                            params[key] = value
        if self._kind == "estimator":
            params["L"] = self.matrices["L"].value()
            if params.get("L") != self._stored.get("L") or params.get("plant") != self._stored.get("plant"):
                # A hand edit: the stored design inputs no longer describe this L.
                params.pop("recipe", None)
        return params

    def is_draft(self) -> bool:
        """True when what is shown differs from the stored model (applied or not)."""
        try:
            return self.draft_params() != self._stored
        except ParameterError:
            return True

    def _redraft(self) -> None:
        if self._building:
            return
        self._valid_params = None
        message = None
        try:
            params = self.draft_params()
            self._check(params)
            self._valid_params = params
        except EngineError as err:
            message = str(err)
        self._update_views()
        differs = self.is_draft()
        self.apply_button.setEnabled(self._valid_params is not None and differs)
        self.revert_button.setEnabled(differs)
        if message:
            self.status.setStyleSheet("color: #d62839;")
            self.status.setText(f"Draft, not applied: {message}")
        elif differs:
            self.status.setStyleSheet("color: #b86e00;")
            lead = "Unapplied draft kept from before. " if self._kept else "Draft, not applied yet. "
            self.status.setText(lead + "Apply makes the whole model one undoable step.")
        else:
            self.status.setStyleSheet("")
            self.status.setText("The diagram has this model.")
        self.draft_changed.emit()

    def _update_views(self) -> None:
        """Realisation, state order and the sizes line, from the engine."""
        from loopwright.engine.blocks import tf_poles_zeros, tf_state_descriptions, tf_to_ss

        name = self._name
        if self._is_tf():
            try:
                num, den = self._tf_coeffs()
                mats = tf_to_ss(num, den, where=f"block {name!r}")
                what = tf_state_descriptions(num, den)
            except EngineError as err:
                self.realization_states.setText(f"no realization yet: {err}")
                for ed in self.realization_mats.values():
                    ed.set_value([])
                self.poles_zeros.setText("")
            else:
                states = ", ".join(f"{name}.x{k + 1} = {w}" for k, w in enumerate(what)) or "no states"
                self.realization_states.setText(f"states, in this order: {states}")
                for key, M in zip("ABCD", mats):
                    self.realization_mats[key].set_value(M.tolist() if M.size else [])
                if self._tf_is_siso():
                    from loopwright.gui.inspector import format_complex_list

                    try:
                        poles, zeros = tf_poles_zeros(num, den)
                        self.poles_zeros.setText(f"poles: {format_complex_list(poles)}\nzeros: {format_complex_list(zeros)}")
                    except EngineError as err:
                        self.poles_zeros.setText(f"poles and zeros unknown: {err}")
        elif self._linked() is None:
            n = self.sizes["states"].value()
            order = ", ".join(f"{name}.x{k + 1}" for k in range(n)) or "none"
            self.states_note.setText(f"states, in this order (the rows of A): {order}")
        linked = self._linked()
        if linked is not None:
            sizes = self._model_sizes()
            if sizes is None:
                self.linked_info.setText(f"plant {linked} cannot be read yet; L keeps its size")
            else:
                self.linked_info.setText(f"uses the model of {linked}: {_count(sizes[0], 'state')}, {_count(sizes[1], 'input')} u, {_count(sizes[2], 'output')} y")
        if self._kind == "estimator":
            if linked is not None:
                order = describe_state_order(self._diagram, linked)
            else:
                n = self.sizes["states"].value()
                order = ", ".join(f"{name}.x{k + 1}" for k in range(n)) or "no states"
            self.l_order.setText(f"L's rows are the estimated states, in this order: {order}; its columns the outputs y")

    def apply(self) -> None:
        """Hand the consistent draft on (one undoable step); nothing if it is not consistent."""
        if self._valid_params is None or not self.is_draft():
            return
        self.applied.emit(copy.deepcopy(self._valid_params))

    def revert(self) -> None:
        self._kept = False
        self._load(self._state_from_params(self._stored))
        self._redraft()
