"""The inspector: edits the selected block's parameters or the selected wire's signal.

Every field commits one :class:`~loopwright.gui.commands.SetParams` (or rename) when the
user finishes editing it. The document checks the new value through the engine first;
a refused value stays in the field, marked, with the engine's reason beside it, and the
diagram keeps its old value. Numbers are never clipped or rounded behind the user's back.
"""
from __future__ import annotations

import copy

from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QGuiApplication, QKeySequence
from PySide6.QtWidgets import (
    QCheckBox,
    QComboBox,
    QFormLayout,
    QHBoxLayout,
    QLabel,
    QLineEdit,
    QPushButton,
    QScrollArea,
    QSpinBox,
    QTableWidget,
    QTableWidgetItem,
    QVBoxLayout,
    QWidget,
)

from loopwright.engine.errors import EngineError, ParameterError
from loopwright.engine.validation import parse_matrix_text
from loopwright.gui.commands import RenameBlock, RenameWire, SetCaption, SetParams
from loopwright.gui.recipe_editor import embed_recipe_editor

__all__ = ["Inspector", "MatrixEditor", "format_complex_list"]

_WAVEFORMS = {
    "step": ("amplitude", "start"),
    "ramp": ("slope", "start"),
    "sine": ("amplitude", "frequency_rad_s", "phase_deg"),
    "white": ("intensity", "seed"),
    "zero": (),
}
_FIELD_LABELS = {
    "amplitude": "amplitude",
    "start": "start time (s)",
    "slope": "slope (per s)",
    "frequency_rad_s": "frequency (rad/s)",
    "phase_deg": "phase (deg)",
    "intensity": "intensity W",
    "seed": "seed",
}


def format_complex_list(values) -> str:
    """``[-1, -2+3j]`` -> ``-1, -2 ± 3j`` (conjugate pairs written once)."""
    out, skip = [], set()
    vals = list(values)
    for i, v in enumerate(vals):
        if i in skip:
            continue
        if abs(v.imag) < 1e-12 * max(1.0, abs(v)):
            out.append(f"{v.real:.4g}")
            continue
        for j in range(i + 1, len(vals)):
            if j not in skip and abs(vals[j] - v.conjugate()) < 1e-9 * max(1.0, abs(v)):
                skip.add(j)
                out.append(f"{v.real:.4g} ± {abs(v.imag):.4g}j")
                break
        else:
            out.append(f"{v.real:.4g}{v.imag:+.4g}j")
    return ", ".join(out) if out else "none"


def _error_label() -> QLabel:
    lab = QLabel("")
    lab.setObjectName("field_error")
    lab.setWordWrap(True)
    lab.setStyleSheet("color: #d62839;")
    lab.hide()
    return lab


def _show_error(label: QLabel, message: str | None) -> None:
    label.setText(message or "")
    label.setVisible(bool(message))


class MatrixEditor(QWidget):
    """A table that grows and shrinks with the row and column counts.

    Paste (the button, or the platform's paste shortcut in the table) accepts spreadsheet
    cells and Python/numpy literals and sets the size from what was pasted. ``edited``
    carries the nested list when every cell is a finite number; otherwise the bad cell
    is named in the error label and nothing is emitted.
    """

    edited = Signal(object)

    def __init__(self, value, *, name: str, parent=None):
        super().__init__(parent)
        self.setObjectName(f"matrix_{name}")
        self._name = name
        self.rows = QSpinBox()
        self.cols = QSpinBox()
        for s in (self.rows, self.cols):
            s.setRange(0, 10000)
            s.setMaximumWidth(64)
        self.table = QTableWidget()
        self.table.setObjectName(f"table_{name}")
        self.table.horizontalHeader().setDefaultSectionSize(62)
        self.table.setMinimumWidth(60)  # wide matrices scroll inside the table, not the page
        self.table.verticalHeader().setDefaultSectionSize(24)
        self.paste_button = QPushButton("Paste")
        self.paste_button.setToolTip("Paste numbers from a spreadsheet, or a Python/numpy literal such as [[1, 2], [3, 4]]")
        self.error = _error_label()
        self.rows.setToolTip("rows")
        self.cols.setToolTip("columns")
        top = QHBoxLayout()
        top.addWidget(QLabel("size"))
        top.addWidget(self.rows)
        top.addWidget(QLabel("×"))
        top.addWidget(self.cols)
        top.addStretch(1)
        top.addWidget(self.paste_button)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.addLayout(top)
        lay.addWidget(self.table)
        lay.addWidget(self.error)
        self.set_value(value)
        self.rows.valueChanged.connect(self._on_resize)
        self.cols.valueChanged.connect(self._on_resize)
        self.table.itemChanged.connect(lambda _item: self._emit())
        self.paste_button.clicked.connect(lambda: self.paste_text(QGuiApplication.clipboard().text()))
        self.table.installEventFilter(self)

    def set_value(self, value) -> None:
        rows = value if isinstance(value, list) else [[value]]
        rows = [r if isinstance(r, list) else [r] for r in rows]
        if rows == [[]]:
            rows = []
        n, m = len(rows), (len(rows[0]) if rows else 0)
        for w in (self.rows, self.cols, self.table):
            w.blockSignals(True)
        self.rows.setValue(n)
        self.cols.setValue(m)
        self.table.setRowCount(n)
        self.table.setColumnCount(m)
        for i, r in enumerate(rows):
            for j, v in enumerate(r):
                self.table.setItem(i, j, _cell(v))
        for w in (self.rows, self.cols, self.table):
            w.blockSignals(False)
        self.table.resizeColumnsToContents()
        self._fit_height()

    def _fit_height(self) -> None:
        # Rows, header, and room for the horizontal scroll bar that wide numbers may need.
        h = (self.table.horizontalHeader().sizeHint().height() + 6 + self.table.horizontalScrollBar().sizeHint().height()
             + sum(self.table.rowHeight(i) for i in range(self.table.rowCount())))
        self.table.setFixedHeight(min(max(h, 40), 260))

    def _on_resize(self) -> None:
        n, m = self.rows.value(), self.cols.value()
        self.table.blockSignals(True)
        self.table.setRowCount(n)
        self.table.setColumnCount(m)
        for i in range(n):
            for j in range(m):
                if self.table.item(i, j) is None:
                    self.table.setItem(i, j, QTableWidgetItem("0"))
        self.table.blockSignals(False)
        self._fit_height()
        self._emit()

    def value(self) -> list[list[float]]:
        """The table as a nested list; ParameterError naming the first bad cell."""
        out = []
        for i in range(self.table.rowCount()):
            row = []
            for j in range(self.table.columnCount()):
                item = self.table.item(i, j)
                text = item.text().strip() if item is not None else ""
                exact = item.data(_EXACT_ROLE) if item is not None else None
                if exact is not None and text == _short_num(exact):
                    # An untouched cell keeps the stored value, not its rounded display.
                    row.append(float(exact))
                    continue
                try:
                    v = float(text)
                except ValueError:
                    raise ParameterError(f"{self._name}: row {i + 1}, column {j + 1}: {text!r} is not a number", field=self._name) from None
                if v != v or v in (float("inf"), float("-inf")):
                    raise ParameterError(f"{self._name}: row {i + 1}, column {j + 1}: {text!r} is not finite", field=self._name)
                row.append(v)
            out.append(row)
        return out

    def _emit(self) -> None:
        try:
            val = self.value()
        except ParameterError as err:
            self.set_error(str(err))
            return
        self.set_error(None)
        self.edited.emit(val)

    def set_error(self, message: str | None) -> None:
        _show_error(self.error, message)

    def paste_text(self, text: str) -> bool:
        try:
            val = parse_matrix_text(text)
        except ParameterError as err:
            self.set_error(f"{self._name}: cannot paste: {err}")
            return False
        self.set_value(val)
        self._emit()
        return True

    def eventFilter(self, obj, event) -> bool:
        if obj is self.table and event.type() == event.Type.KeyPress and event.matches(QKeySequence.StandardKey.Paste):
            self.paste_text(QGuiApplication.clipboard().text())
            return True
        return super().eventFilter(obj, event)


_EXACT_ROLE = Qt.ItemDataRole.UserRole + 1


def _short_num(v) -> str:
    """A matrix entry as shown: 10 significant digits, so a designed gain reads 1010,
    not 1009.999999994998 (the full value stays in the cell and in its tooltip)."""
    f = float(v)
    return str(int(f)) if f.is_integer() and abs(f) < 1e15 else f"{f:.10g}"


def _cell(v) -> QTableWidgetItem:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return QTableWidgetItem(str(v))
    item = QTableWidgetItem(_short_num(f))
    item.setData(_EXACT_ROLE, f)
    if _short_num(f) != _num(f):
        item.setToolTip(_num(f))
    return item


def _num(v) -> str:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return str(v)
    return str(int(f)) if f.is_integer() and abs(f) < 1e15 else repr(f)


def _parse_number_or_list(text: str, *, field: str):
    """A number, or a list/matrix of numbers (for amplitudes and intensities)."""
    val = parse_matrix_text(text)
    if len(val) == 1 and len(val[0]) == 1:
        return val[0][0]
    if len(val) == 1:
        return val[0]
    return val


class Inspector(QWidget):
    """Edits whatever the canvas has selected: one block, or one wire."""

    def __init__(self, document, parent=None):
        super().__init__(parent)
        self.setObjectName("inspector")
        self._doc = document
        self._block_id: str | None = None
        self._wire_id: str | None = None
        self._building = False
        self.fields: dict[str, QWidget] = {}
        self.errors: dict[str, QLabel] = {}
        self._scroll = QScrollArea()
        self._scroll.setWidgetResizable(True)
        self._scroll.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        outer = QVBoxLayout(self)
        outer.setContentsMargins(2, 2, 2, 2)
        outer.addWidget(self._scroll)
        self._live_widths: dict[str, int] = {}
        document.params_changed.connect(self._on_block_event)
        document.renamed.connect(self._on_block_event)
        document.caption_changed.connect(self._on_block_event)
        document.block_removed.connect(self._on_block_removed)
        document.wire_removed.connect(self._on_wire_removed)
        document.wire_renamed.connect(self._on_wire_event)
        document.wire_changed.connect(self._on_wire_event)
        document.diagram_replaced.connect(self._on_diagram_replaced)
        self.show_nothing()

    # ---- what to show ----------------------------------------------------------------------
    def show_selection(self, block_ids, wire_ids) -> None:
        if len(block_ids) == 1 and not wire_ids:
            self.show_block(block_ids[0])
        elif len(wire_ids) == 1 and not block_ids:
            self.show_wire(wire_ids[0])
        elif block_ids or wire_ids:
            self.show_nothing(f"{len(block_ids)} blocks and {len(wire_ids)} wires selected")
        else:
            self.show_nothing()

    def show_nothing(self, text: str = "Select a block or a wire to edit it.") -> None:
        self._block_id = self._wire_id = None
        w = QWidget()
        lay = QVBoxLayout(w)
        lab = QLabel(text)
        lab.setWordWrap(True)
        lay.addWidget(lab)
        lay.addStretch(1)
        self._set_page(w)

    def _on_diagram_replaced(self) -> None:
        self.show_nothing()

    def set_live_widths(self, widths: dict[str, int]) -> None:
        """Widths from the live model; the wire page shown updates its width in place."""
        self._live_widths = dict(widths)
        label = self.fields.get("width_info")
        if self._wire_id is not None and isinstance(label, QLabel):
            width = self._live_widths.get(self._wire_id)
            label.setText(str(width) if width is not None else "unknown until the diagram checks")

    def _set_page(self, w: QWidget) -> None:
        old = self._scroll.takeWidget()
        if old is not None:
            old.deleteLater()
        self._scroll.setWidget(w)

    def _on_block_event(self, bid: str) -> None:
        if bid == self._block_id and not self._building:
            self.show_block(bid)

    def _on_block_removed(self, bid: str) -> None:
        if bid == self._block_id:
            self.show_nothing()

    def _on_wire_removed(self, wid: str) -> None:
        if wid == self._wire_id:
            self.show_nothing()

    def _on_wire_event(self, wid: str) -> None:
        if wid == self._wire_id and not self._building:
            self.show_wire(wid)

    # ---- committing ----------------------------------------------------------------------
    def _commit_params(self, key: str, mutate, *, rebuild: bool = True) -> bool:
        """Apply ``mutate(params)`` to a copy of the block's params and push it.

        ``rebuild`` redraws the page (needed when the fields themselves change, e.g. a new
        waveform kind); a plain value edit keeps the page, so focus and scroll stay put.
        """
        blk = self._doc.diagram.blocks.get(self._block_id)
        if blk is None:
            return False
        params = copy.deepcopy(blk.params)
        try:
            mutate(params)
            if params == blk.params:
                self._set_field_error(key, None)
                return True
            cmd = SetParams(self._doc, blk.id, params, text=f"Edit {blk.name}.{key}")
        except EngineError as err:
            self._set_field_error(key, str(err))
            return False
        self._building = True
        try:
            self._doc.push(cmd)
        finally:
            self._building = False
        self._set_field_error(key, None)
        if rebuild:
            self.show_block(blk.id)
        return True

    def _refresh_size(self) -> bool:
        blk = self._doc.diagram.blocks.get(self._block_id)
        label = self.fields.get("block_size")
        if blk is not None and isinstance(label, QLabel):
            label.setText(self._size_text(blk))
        return True

    def _set_field_error(self, key: str, message: str | None) -> None:
        lab = self.errors.get(key)
        if lab is not None:
            _show_error(lab, message)
        w = self.fields.get(key)
        if isinstance(w, MatrixEditor) and message:
            w.set_error(message)

    # ---- block page ----------------------------------------------------------------------
    def show_block(self, bid: str) -> None:
        blk = self._doc.diagram.blocks.get(bid)
        if blk is None:
            self.show_nothing()
            return
        self._block_id, self._wire_id = bid, None
        self.fields, self.errors = {}, {}
        page = QWidget()
        form = QFormLayout(page)
        form.setRowWrapPolicy(QFormLayout.RowWrapPolicy.WrapLongRows)
        title = QLabel(f"<b>{blk.kind}</b> block")
        form.addRow(title)
        name = QLineEdit(blk.name)
        name.setObjectName("field_name")
        name.editingFinished.connect(lambda: self._rename_block(name.text().strip()))
        self._add(form, "name", "name", name)
        cap = QLineEdit(blk.caption)
        cap.setObjectName("field_caption")
        cap.editingFinished.connect(lambda: self._set_caption(cap.text()))
        self._add(form, "caption", "caption", cap)
        builder = getattr(self, f"_build_{blk.kind}")
        builder(form, blk)
        embed_recipe_editor(self, form, blk)  # gui/recipe_editor.py: recipe, Design button, checks
        size = QLabel(self._size_text(blk))
        size.setObjectName("block_size")
        size.setWordWrap(True)
        self.fields["block_size"] = size
        form.addRow("size", size)
        self._set_page(page)

    def _size_text(self, blk) -> str:
        """States and port widths as the engine reads the block (or why it cannot)."""
        from loopwright.engine.blocks import realize

        if blk.kind == "source":
            from loopwright.engine.blocks import port_widths

            try:
                return f"output out: {port_widths(blk, self._doc.diagram)[1]['out']}"
            except EngineError as err:
                return f"unknown: {err}"
        try:
            r = realize(blk, self._doc.diagram)
        except EngineError as err:
            return f"unknown: {err}"
        ins = ", ".join(f"{p}: {w}" for p, w in r.inputs) or "none"
        outs = ", ".join(f"{p}: {w}" for p, w in r.outputs) or "none"
        n = len(r.state_names)
        return f"{n} state{'s' if n != 1 else ''}; inputs {ins}; outputs {outs}"

    def _add(self, form: QFormLayout, key: str, label: str, widget: QWidget) -> None:
        err = _error_label()
        err.setObjectName(f"error_{key}")
        box = QWidget()
        lay = QVBoxLayout(box)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.addWidget(widget)
        lay.addWidget(err)
        form.addRow(label, box)
        self.fields[key], self.errors[key] = widget, err

    def _rename_block(self, text: str) -> None:
        blk = self._doc.diagram.blocks.get(self._block_id)
        if blk is None or text == blk.name:
            self._set_field_error("name", None)
            return
        try:
            cmd = RenameBlock(self._doc, blk.id, text)
        except EngineError as err:
            self._set_field_error("name", str(err))
            return
        self._doc.push(cmd)

    def _set_caption(self, text: str) -> None:
        blk = self._doc.diagram.blocks.get(self._block_id)
        if blk is not None and text != blk.caption:
            try:
                self._doc.push(SetCaption(self._doc, blk.id, text))
            except EngineError as err:
                self._set_field_error("caption", str(err))

    def _matrix(self, form, blk, key: str, label: str | None = None) -> MatrixEditor:
        ed = MatrixEditor(blk.params.get(key, []), name=key)
        ed.edited.connect(lambda val, k=key: self._commit_params(k, lambda p: p.__setitem__(k, val), rebuild=False)
                          and self._refresh_size())
        self._add(form, key, label or key, ed)
        return ed

    def _lti(self, form, blk, *, allow_load: bool) -> None:
        p = blk.params
        is_tf = "num" in p or "den" in p
        form_choice = QComboBox()
        form_choice.setObjectName("field_form")
        form_choice.addItems(["state space (A, B, C, D)", "transfer function (num, den)"])
        form_choice.setCurrentIndex(1 if is_tf else 0)
        form_choice.currentIndexChanged.connect(lambda idx: self._switch_form(idx == 1))
        self._add(form, "form", "model", form_choice)
        if is_tf:
            siso = all(isinstance(c, (int, float)) for c in p.get("num", [])) and all(isinstance(c, (int, float)) for c in p.get("den", []))
            if siso:
                for key, label in (("num", "numerator"), ("den", "denominator")):
                    edit = QLineEdit(", ".join(_num(c) for c in p.get(key, [])))
                    edit.setObjectName(f"field_{key}")
                    edit.setToolTip("coefficients, highest power of s first, e.g. 1, 3, 2 for s² + 3s + 2")
                    edit.editingFinished.connect(lambda k=key, e=edit: self._commit_coeffs(k, e.text()))
                    self._add(form, key, label, edit)
                pz = QLabel(self._poles_zeros_text(p.get("num"), p.get("den")))
                pz.setObjectName("poles_zeros")
                pz.setWordWrap(True)
                pz.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
                form.addRow("", pz)
                self.fields["poles_zeros"] = pz
            else:
                note = QLabel("a transfer-function matrix: one (num, den) pair per output and input, kept as written in the file")
                note.setWordWrap(True)
                form.addRow("", note)
        else:
            for key in ("A", "B", "C", "D"):
                self._matrix(form, blk, key)
            if allow_load:
                has = "E" in p
                box = QCheckBox("load input d (x' = … + E d, y = … + F d)")
                box.setObjectName("field_load")
                box.setChecked(has)
                box.toggled.connect(self._toggle_load)
                form.addRow("", box)
                if has:
                    self._matrix(form, blk, "E")
                    self._matrix(form, blk, "F")

    def _poles_zeros_text(self, num, den) -> str:
        from loopwright.engine.blocks import tf_poles_zeros

        try:
            poles, zeros = tf_poles_zeros(num, den)
        except EngineError as err:
            return f"poles and zeros unknown: {err}"
        return f"poles: {format_complex_list(poles)}\nzeros: {format_complex_list(zeros)}"

    def _commit_coeffs(self, key: str, text: str) -> None:
        try:
            rows = parse_matrix_text(text)
            if len(rows) != 1:
                raise ParameterError(f"{key}: expected one row of coefficients, got {len(rows)} rows", field=key)
        except ParameterError as err:
            self._set_field_error(key, f"{key}: {err}")
            return
        if self._commit_params(key, lambda p: p.__setitem__(key, rows[0]), rebuild=False):
            self._refresh_size()
            blk = self._doc.diagram.blocks.get(self._block_id)
            label = self.fields.get("poles_zeros")
            if blk is not None and label is not None:
                label.setText(self._poles_zeros_text(blk.params.get("num"), blk.params.get("den")))

    def _switch_form(self, to_tf: bool) -> None:
        """Switch between state space and transfer function; keeps the block SISO-valid."""
        def mutate(p):
            for k in ("A", "B", "C", "D", "num", "den", "E", "F"):
                p.pop(k, None)
            if to_tf:
                p.update({"num": [1.0], "den": [1.0, 1.0]})
            else:
                p.update({"A": [[-1.0]], "B": [[1.0]], "C": [[1.0]], "D": [[0.0]]})
        self._commit_params("form", mutate)

    def _toggle_load(self, on: bool) -> None:
        def mutate(p):
            if on:
                n = len(p.get("A", []))
                rows_c = len(p.get("C", []))
                p["E"] = [[0.0] for _ in range(n)] or [[0.0]]
                p["F"] = [[0.0] for _ in range(rows_c)] or [[0.0]]
            else:
                p.pop("E", None)
                p.pop("F", None)
        self._commit_params("load", mutate)

    def _build_plant(self, form, blk) -> None:
        self._lti(form, blk, allow_load=True)

    def _build_dynamic(self, form, blk) -> None:
        self._lti(form, blk, allow_load=False)

    def _build_gain(self, form, blk) -> None:
        self._matrix(form, blk, "K", "K (out = K in)")
        if isinstance(blk.params.get("recipe"), dict):
            form.addRow("", QLabel(f"designed from plant {blk.params['recipe'].get('plant', '?')}"))

    def _build_integrator(self, form, blk) -> None:
        self._width_field(form, blk)

    def _width_field(self, form, blk) -> None:
        spin = QSpinBox()
        spin.setObjectName("field_width")
        spin.setRange(1, 10000)
        spin.setValue(int(blk.params.get("width", 1)))
        spin.editingFinished.connect(lambda: self._commit_params("width", lambda p: p.__setitem__("width", spin.value()), rebuild=False))
        self._add(form, "width", "width", spin)

    def _build_sum(self, form, blk) -> None:
        signs = list(blk.params.get("signs", []))
        row = QWidget()
        lay = QHBoxLayout(row)
        lay.setContentsMargins(0, 0, 0, 0)
        for k, s in enumerate(signs):
            b = QPushButton("−" if s == "-" else "+")
            b.setObjectName(f"sign_{k + 1}")
            b.setToolTip(f"input in{k + 1}: click to flip the sign")
            b.setFixedWidth(32)
            b.clicked.connect(lambda _=False, k=k: self._flip_sign(k))
            lay.addWidget(b)
        add = QPushButton("add input")
        add.setObjectName("sign_add")
        add.clicked.connect(lambda: self._commit_params("signs", lambda p: p.__setitem__("signs", list(p.get("signs", [])) + ["+"])))
        rem = QPushButton("remove last")
        rem.setObjectName("sign_remove")
        rem.setEnabled(len(signs) > 1)
        rem.clicked.connect(lambda: self._commit_params("signs", lambda p: p.__setitem__("signs", list(p.get("signs", []))[:-1])))
        lay.addWidget(add)
        lay.addWidget(rem)
        lay.addStretch(1)
        self._add(form, "signs", "signs (per input)", row)
        self._width_field(form, blk)

    def _flip_sign(self, k: int) -> None:
        def mutate(p):
            signs = list(p.get("signs", []))
            signs[k] = "-" if signs[k] == "+" else "+"
            p["signs"] = signs
        self._commit_params("signs", mutate)

    def _build_estimator(self, form, blk) -> None:
        link = QComboBox()
        link.setObjectName("field_plant")
        link.addItem("own model (A, B, C, D)", None)
        plants = sorted(b.name for b in self._doc.diagram.blocks.values() if b.kind == "plant")
        for name in plants:
            link.addItem(f"plant {name}", name)
        cur = blk.params.get("plant")
        if cur is not None and cur not in plants:
            link.addItem(f"plant {cur} (missing)", cur)
        link.setCurrentIndex(max(0, link.findData(cur)) if cur is not None else 0)
        link.currentIndexChanged.connect(lambda _i: self._relink(link.currentData()))
        self._add(form, "plant", "model of", link)
        if cur is None:
            for key in ("A", "B", "C", "D"):
                self._matrix(form, blk, key)
        self._matrix(form, blk, "L", "L (estimator gain)")
        if isinstance(blk.params.get("recipe"), dict):
            form.addRow("", QLabel(f"designed from plant {blk.params['recipe'].get('plant', '?')}"))

    def _relink(self, plant: str | None) -> None:
        def mutate(p):
            if plant is None:
                p.pop("plant", None)
                try:
                    from loopwright.engine.blocks import plant_matrices

                    A, B, C, D = plant_matrices(self._doc.diagram, self._doc.diagram.blocks[self._block_id].params["plant"])
                    p.update({"A": A.tolist(), "B": B.tolist(), "C": C.tolist(), "D": D.tolist()})
                except (EngineError, KeyError):
                    p.update({"A": [[-1.0]], "B": [[1.0]], "C": [[1.0]], "D": [[0.0]]})
            else:
                for k in ("A", "B", "C", "D"):
                    p.pop(k, None)
                p["plant"] = plant
        self._commit_params("plant", mutate)

    def _build_source(self, form, blk) -> None:
        p = blk.params
        role = QComboBox()
        role.setObjectName("field_role")
        role.addItems(["reference", "disturbance", "noise"])
        role.setCurrentText(p.get("role", "reference"))
        role.currentTextChanged.connect(lambda r: self._commit_params("role", lambda q: q.__setitem__("role", r)))
        self._add(form, "role", "role", role)
        self._width_field(form, blk)
        wf = p.get("waveform", {}) or {}
        kind = QComboBox()
        kind.setObjectName("field_waveform")
        kind.addItems(list(_WAVEFORMS))
        kind.setCurrentText(wf.get("kind", "step"))
        kind.currentTextChanged.connect(self._set_waveform_kind)
        self._add(form, "waveform", "waveform", kind)
        for key in _WAVEFORMS.get(wf.get("kind", "step"), ()):
            val = wf.get(key, "")
            text = _num(val) if not isinstance(val, list) else repr(val)
            edit = QLineEdit(text)
            edit.setObjectName(f"field_{key}")
            edit.editingFinished.connect(lambda k=key, e=edit: self._commit_waveform_field(k, e.text()))
            self._add(form, key, _FIELD_LABELS.get(key, key), edit)
        if wf.get("kind") != "white":
            val = p.get("intensity", "")
            edit = QLineEdit(_num(val) if not isinstance(val, list) else repr(val))
            edit.setObjectName("field_intensity")
            edit.setPlaceholderText("none")
            edit.setToolTip("intensity W of a random part riding on this waveform (used by the noise budget); leave empty for none")
            edit.editingFinished.connect(lambda e=edit: self._commit_intensity(e.text()))
            self._add(form, "intensity", "random part W", edit)

    def _commit_intensity(self, text: str) -> None:
        """The random part of a non-white source (for the noise budget); empty removes it."""
        text = text.strip()
        if not text:
            self._commit_params("intensity", lambda p: p.pop("intensity", None), rebuild=False)
            return
        try:
            value = _parse_number_or_list(text, field="intensity")
        except ParameterError as err:
            self._set_field_error("intensity", f"intensity: {err}")
            return
        self._commit_params("intensity", lambda p: p.__setitem__("intensity", value), rebuild=False)

    def _set_waveform_kind(self, kind: str) -> None:
        defaults = {
            "step": {"kind": "step", "amplitude": 1.0, "start": 0.0},
            "ramp": {"kind": "ramp", "slope": 1.0, "start": 0.0},
            "sine": {"kind": "sine", "amplitude": 1.0, "frequency_rad_s": 1.0, "phase_deg": 0.0},
            "white": {"kind": "white", "intensity": 1.0, "seed": 1},
            "zero": {"kind": "zero"},
        }
        self._commit_params("waveform", lambda p: p.__setitem__("waveform", copy.deepcopy(defaults[kind])))

    def _commit_waveform_field(self, key: str, text: str) -> None:
        try:
            if key == "seed":
                try:
                    value = int(text.strip())
                except ValueError:
                    raise ParameterError(f"seed: {text.strip()!r} is not a whole number", field=key) from None
            else:
                value = _parse_number_or_list(text, field=key)
        except ParameterError as err:
            self._set_field_error(key, f"{_FIELD_LABELS.get(key, key)}: {err}")
            return

        def mutate(p):
            wf = dict(p.get("waveform", {}) or {})
            wf[key] = value
            p["waveform"] = wf
        self._commit_params(key, mutate, rebuild=False)

    # ---- wire page ----------------------------------------------------------------------------
    def show_wire(self, wid: str) -> None:
        w = self._doc.diagram.wires.get(wid)
        if w is None:
            self.show_nothing()
            return
        self._block_id, self._wire_id = None, wid
        self.fields, self.errors = {}, {}
        d = self._doc.diagram
        page = QWidget()
        form = QFormLayout(page)
        form.addRow(QLabel("<b>wire</b>"))
        name = QLineEdit(w.name)
        name.setObjectName("field_signal")
        name.editingFinished.connect(lambda: self._rename_wire(name.text().strip()))
        self._add(form, "signal", "signal name", name)
        form.addRow("from", QLabel(d.port_label(w.source)))
        form.addRow("to", QLabel(", ".join(d.port_label(t) for t in w.targets)))
        width = self._live_widths.get(wid)
        width_label = QLabel(str(width) if width is not None else "unknown until the diagram checks")
        width_label.setObjectName("width_info")
        self.fields["width_info"] = width_label
        form.addRow("width", width_label)
        hint = QLabel(f"Any point can be excited without redrawing: the assembled model has the input inject:{w.name}.")
        hint.setWordWrap(True)
        form.addRow("", hint)
        self._set_page(page)

    def _rename_wire(self, text: str) -> None:
        w = self._doc.diagram.wires.get(self._wire_id)
        if w is None or text == w.name:
            self._set_field_error("signal", None)
            return
        try:
            cmd = RenameWire(self._doc, w.id, text)
        except EngineError as err:
            self._set_field_error("signal", str(err))
            return
        self._doc.push(cmd)
