"""Matrix tables for the inspector: a table of numbers that grows and shrinks with its
size, takes spreadsheet or numpy-literal paste, names a bad cell, and keeps an untouched
cell's exact value behind its rounded display."""
from __future__ import annotations

from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QGuiApplication, QKeySequence
from PySide6.QtWidgets import (
    QAbstractItemView,
    QHBoxLayout,
    QLabel,
    QPushButton,
    QSizePolicy,
    QSpinBox,
    QTableWidget,
    QTableWidgetItem,
    QVBoxLayout,
    QWidget,
)

from loopwright.engine.errors import ParameterError
from loopwright.engine.validation import parse_matrix_text

__all__ = ["MatrixEditor", "error_label", "show_error", "number_text"]


def error_label() -> QLabel:
    lab = QLabel("")
    lab.setObjectName("field_error")
    lab.setWordWrap(True)
    lab.setStyleSheet("color: #d62839;")
    lab.hide()
    return lab


def show_error(label: QLabel, message: str | None) -> None:
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
    #: any change of a cell or of the size, valid or not (a model editor redrafts on it)
    changed = Signal()
    #: a paste gave the table a new size (rows, columns)
    reshaped = Signal(int, int)

    def __init__(self, value, *, name: str, sized_outside: bool = False, read_only: bool = False, parent=None):
        """``sized_outside``: the size is set by :meth:`resize_to` (a model editor's shared
        sizes), so the table shows no size boxes of its own. ``read_only``: display only."""
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
        self.error = error_label()
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
        if sized_outside or read_only:
            for w in (self.rows, self.cols):
                w.hide()
            for i in range(top.count()):
                item = top.itemAt(i).widget()
                if isinstance(item, QLabel):
                    item.hide()
        if read_only:
            self.paste_button.hide()
            self.table.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        # Never taller than its rows: spare room in a panel stays below the last field.
        self.setSizePolicy(QSizePolicy.Policy.Preferred, QSizePolicy.Policy.Maximum)
        self.set_value(value)
        self.rows.valueChanged.connect(self._on_resize)
        self.cols.valueChanged.connect(self._on_resize)
        self.table.itemChanged.connect(lambda _item: self._emit())
        self.paste_button.clicked.connect(lambda: self.paste_text(QGuiApplication.clipboard().text()))
        self.table.installEventFilter(self)
        self.table.horizontalHeader().sectionResized.connect(lambda *_a: self._fit_height())

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
        # Rows and header; room for the horizontal scroll bar only while the columns are
        # wider than the table (wide numbers, many columns): an empty band under every
        # matrix pushed the model's Apply button out of sight.
        t = self.table
        bar = t.horizontalScrollBar().sizeHint().height() if self.needs_scroll_room() else 0
        h = t.horizontalHeader().sizeHint().height() + 2 * t.frameWidth() + 2 + bar + sum(t.rowHeight(i) for i in range(t.rowCount()))
        t.setFixedHeight(min(max(h, 40), 260))

    def needs_scroll_room(self) -> bool:
        """Whether the columns are wider than the table (the height then keeps room for the scroll bar)."""
        t = self.table
        columns = t.verticalHeader().sizeHint().width() + sum(t.columnWidth(j) for j in range(t.columnCount())) + 2 * t.frameWidth()
        return columns > t.width()

    def resizeEvent(self, event) -> None:
        super().resizeEvent(event)
        self._fit_height()

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

    def resize_to(self, rows: int, cols: int) -> None:
        """Take a new size: kept cells keep their text, new cells read 0."""
        for s in (self.rows, self.cols):
            s.blockSignals(True)
        self.rows.setValue(rows)
        self.cols.setValue(cols)
        for s in (self.rows, self.cols):
            s.blockSignals(False)
        self._on_resize()

    def texts(self) -> list[list[str]]:
        """The cells as typed (a draft may hold text that is not a number yet)."""
        out = []
        for i in range(self.table.rowCount()):
            row = []
            for j in range(self.table.columnCount()):
                item = self.table.item(i, j)
                exact = item.data(_EXACT_ROLE) if item is not None else None
                text = item.text() if item is not None else ""
                row.append(number_text(exact) if exact is not None and text.strip() == _short_num(exact) else text)
            out.append(row)
        return out

    def set_texts(self, texts: list[list[str]]) -> None:
        """Fill the table from :meth:`texts` (numbers become cells with their exact value)."""
        cols = len(texts[0]) if texts else 0
        self.set_value([[0.0] * cols for _ in texts] if texts else [])
        self.table.blockSignals(True)
        for i, row in enumerate(texts):
            for j, text in enumerate(row):
                try:
                    self.table.setItem(i, j, _cell(float(text)))
                except ValueError:
                    self.table.setItem(i, j, QTableWidgetItem(text))
        self.table.blockSignals(False)
        self.table.resizeColumnsToContents()

    def _emit(self) -> None:
        self.changed.emit()
        try:
            val = self.value()
        except ParameterError as err:
            self.set_error(str(err))
            return
        self.set_error(None)
        self.edited.emit(val)

    def set_error(self, message: str | None) -> None:
        show_error(self.error, message)

    def paste_text(self, text: str) -> bool:
        try:
            val = parse_matrix_text(text)
        except ParameterError as err:
            self.set_error(f"{self._name}: cannot paste: {err}")
            return False
        self.set_value(val)
        self.reshaped.emit(self.rows.value(), self.cols.value())
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
    if _short_num(f) != number_text(f):
        item.setToolTip(number_text(f))
    return item


def number_text(v) -> str:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return str(v)
    return str(int(f)) if f.is_integer() and abs(f) < 1e15 else repr(f)
