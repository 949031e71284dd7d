"""Choosing what the panels look at: the picks on the canvas and the pairs panel.

:class:`PairPicker` turns the canvas picks ("look here", "inject here", "drive from
here", "break the loop here") into commands: an input and an output make a pair; the
first half waits (tagged on the canvas) until the second is picked. It also pins the tags
of the kept pairs and the loop break on the canvas. :class:`PairsPanel` does the same
from searchable lists, for the keyboard.
"""
from __future__ import annotations

from PySide6.QtCore import QObject, Qt, QTimer, Signal
from PySide6.QtGui import QColor, QIcon, QPixmap
from PySide6.QtWidgets import (
    QComboBox,
    QCompleter,
    QFormLayout,
    QHBoxLayout,
    QLabel,
    QListWidget,
    QListWidgetItem,
    QPushButton,
    QVBoxLayout,
    QWidget,
)

from loopwright.engine.diagram import PortRef
from loopwright.gui.docks.panel import pair_colour
from loopwright.gui.view_commands import add_pair, input_label, pairs_of, remove_pair, set_loop_break

__all__ = ["PairPicker", "PairsPanel", "input_choices", "signal_choices", "break_choices"]

_PENDING = QColor("#5b6573")
_BREAK = QColor("#1f2933")


def input_choices(diagram) -> list[str]:
    """Every input a pair may start from: the sources, then the injection on every wire."""
    srcs = [b.name for b in diagram.blocks.values() if b.kind == "source"]
    return srcs + [f"inject:{w.name}" for w in diagram.wires.values()]


def signal_choices(diagram) -> list[str]:
    """Every signal a pair may end at (every wire's signal name)."""
    return [w.name for w in diagram.wires.values()]


def break_choices(diagram) -> list[str]:
    """Where the loop may be broken: every signal, and every input port a fanned-out signal feeds."""
    out = []
    for w in diagram.wires.values():
        out.append(w.name)
        if len(w.targets) > 1:
            out += [diagram.port_label(t) for t in w.targets]
    return out


class PairPicker(QObject):
    """The canvas picks and the tags that show them.

    Signals
    -------
    message(str)
        What to do next, or what was done (for the status bar).
    """

    message = Signal(str)

    def __init__(self, document, scene, push, parent=None):
        super().__init__(parent)
        self._doc = document
        self._scene = scene
        self._push = push
        self.pending_input: str | None = None
        self.pending_output: str | None = None
        self._tag_timer = QTimer(self)
        self._tag_timer.setSingleShot(True)
        self._tag_timer.setInterval(0)
        self._tag_timer.timeout.connect(self.refresh_tags)
        document.changed.connect(lambda _rev: self._tag_timer.start())
        document.diagram_replaced.connect(self._forget_pending)

    def _forget_pending(self) -> None:
        self.pending_input = self.pending_output = None

    # ---- canvas menu -------------------------------------------------------------------------
    def actions_for(self, kind: str, item_id: str, branch_target: PortRef | None) -> list:
        """The picks for a right-click on a block or wire (see ``DiagramView.pick_provider``)."""
        d = self._doc.diagram
        if kind == "block":
            blk = d.blocks.get(item_id)
            if blk is None or blk.kind != "source":
                return []
            return [("Drive from here", lambda: self.pick_input(blk.name))]
        wire = d.wires.get(item_id)
        if wire is None:
            return []
        out = [
            (f"Look here ({wire.name})", lambda: self.pick_output(wire.name)),
            (f"Inject here ({wire.name})", lambda: self.pick_input(f"inject:{wire.name}")),
        ]
        if branch_target is not None:
            port = d.port_label(branch_target)
            out.append((f"Break the loop here (into {port} only)", lambda: self.pick_break(port)))
        else:
            out.append((f"Break the loop here ({wire.name})", lambda: self.pick_break(wire.name)))
        if d.settings.get("loop_break"):
            out.append(("Close the loop break", lambda: self.pick_break(None)))
        return out

    # ---- picks -------------------------------------------------------------------------------
    def pick_input(self, name: str) -> None:
        if self.pending_output is not None:
            out, self.pending_output = self.pending_output, None
            self._keep(name, out)
        else:
            self.pending_input = name
            self.message.emit(f"Input: {input_label(name)}. Now right-click a wire and choose “look here”.")
        self.refresh_tags()

    def pick_output(self, signal: str) -> None:
        if self.pending_input is not None:
            src, self.pending_input = self.pending_input, None
            self._keep(src, signal)
        else:
            self.pending_output = signal
            self.message.emit(f"Output: {signal}. Now right-click a source (“drive from here”) or a wire (“inject here”).")
        self.refresh_tags()

    def pick_break(self, where: str | None) -> None:
        if self._doc.diagram.settings.get("loop_break") == where:
            self.message.emit(f"The loop is already broken at {where}." if where else "There is no loop break.")
            return
        if self._push(set_loop_break(self._doc, where)):
            self.message.emit(f"Loop broken at {where}: see the loop-break view." if where else "Loop break removed.")

    def _keep(self, source: str, signal: str) -> None:
        cmd = add_pair(self._doc, source, signal)
        if cmd is None:
            self.message.emit(f"{signal} from the {input_label(source)} is already kept.")
        elif self._push(cmd):
            self.message.emit(f"Kept the pair {signal} ← {input_label(source)}.")

    # ---- tags --------------------------------------------------------------------------------
    def refresh_tags(self) -> None:
        """Pin the current pairs, the pending pick and the loop break on the canvas."""
        d = self._doc.diagram
        by_name = {w.name: w.id for w in d.wires.values()}
        by_block = {b.name: b.id for b in d.blocks.values()}
        blocks: dict[str, list] = {}
        wires: dict[str, list] = {}

        def pin_input(name: str, text: str, colour: QColor) -> None:
            if name.startswith("inject:"):
                wid = by_name.get(name.split(":", 1)[1])
                if wid:
                    wires.setdefault(wid, []).append((text, colour))
            elif name in by_block:
                blocks.setdefault(by_block[name], []).append((text, colour))

        for k, (src, sig) in enumerate(pairs_of(d)):
            colour = pair_colour(k)
            pin_input(src, f"in {k + 1}", colour)
            if sig in by_name:
                wires.setdefault(by_name[sig], []).append((f"out {k + 1}", colour))
        if self.pending_input:
            pin_input(self.pending_input, "in ?", _PENDING)
        if self.pending_output and self.pending_output in by_name:
            wires.setdefault(by_name[self.pending_output], []).append(("out ?", _PENDING))
        brk = d.settings.get("loop_break")
        if isinstance(brk, str):
            if brk in by_name:
                wires.setdefault(by_name[brk], []).append(("break", _BREAK))
            else:
                blk, _, port = brk.partition(".")
                bid = by_block.get(blk)
                fed = d.wire_into(PortRef(bid, port)) if bid else None
                if fed is not None:
                    wires.setdefault(fed.id, []).append((f"break → {brk}", _BREAK))
        try:
            self._scene.set_tags(blocks, wires)
        except RuntimeError:
            pass  # the scene is being torn down


def _swatch(colour: QColor) -> QIcon:
    pm = QPixmap(14, 14)
    pm.fill(colour)
    return QIcon(pm)


def _searchable_combo(name: str) -> QComboBox:
    box = QComboBox()
    box.setObjectName(name)
    box.setEditable(True)
    box.setInsertPolicy(QComboBox.InsertPolicy.NoInsert)
    comp = QCompleter(box.model(), box)
    comp.setFilterMode(Qt.MatchFlag.MatchContains)
    comp.setCaseSensitivity(Qt.CaseSensitivity.CaseInsensitive)
    box.setCompleter(comp)
    return box


class PairsPanel(QWidget):
    """Searchable lists for the keyboard: input, output, keep; the kept pairs; the loop break."""

    def __init__(self, document, picker: PairPicker, push, parent=None):
        super().__init__(parent)
        self.setObjectName("pairs_panel")
        self._doc = document
        self._picker = picker
        self._push = push
        lay = QVBoxLayout(self)
        lay.setContentsMargins(4, 4, 4, 4)
        lay.setSpacing(3)
        form = QFormLayout()
        self.input_box = _searchable_combo("pair_input")
        self.output_box = _searchable_combo("pair_output")
        form.addRow("Input (source or injection)", self.input_box)
        form.addRow("Output (signal)", self.output_box)
        lay.addLayout(form)
        self.keep_button = QPushButton("Keep this pair")
        self.keep_button.setObjectName("keep_pair")
        self.keep_button.clicked.connect(self.keep_typed_pair)
        lay.addWidget(self.keep_button)
        kept = QLabel("Kept pairs (one colour each, in every view):")
        kept.setWordWrap(True)
        lay.addWidget(kept)
        self.list = QListWidget()
        self.list.setObjectName("pair_list")
        self.list.setMinimumHeight(36)
        lay.addWidget(self.list, 1)
        self.remove_button = QPushButton("Stop looking at the selected pair")
        self.remove_button.setObjectName("remove_pair")
        self.remove_button.clicked.connect(self.remove_selected)
        lay.addWidget(self.remove_button)
        row = QHBoxLayout()
        self.break_box = _searchable_combo("break_at")
        row.addWidget(QLabel("Loop break"))
        row.addWidget(self.break_box, 1)
        self.break_button = QPushButton("Break here")
        self.break_button.setObjectName("apply_break")
        self.break_button.clicked.connect(self.apply_break)
        row.addWidget(self.break_button)
        lay.addLayout(row)
        self._timer = QTimer(self)
        self._timer.setSingleShot(True)
        self._timer.setInterval(0)
        self._timer.timeout.connect(self.refresh)
        document.changed.connect(lambda _rev: self._timer.start())
        self._shown: tuple | None = None
        self.refresh()

    def refresh(self) -> None:
        d = self._doc.diagram
        choices = (input_choices(d), signal_choices(d), ["(none)"] + break_choices(d))
        brk = d.settings.get("loop_break")
        pairs = pairs_of(d)
        shown = (choices, brk, pairs)
        if shown == self._shown:
            return  # a parameter edit: the same lists (refilling them would also drop what is being typed)
        self._shown = shown
        for box, items in zip((self.input_box, self.output_box, self.break_box), choices):
            current = box.currentText()
            box.blockSignals(True)
            box.clear()
            box.addItems(items)
            if current in items:
                box.setCurrentText(current)
            box.blockSignals(False)
        self.break_box.setCurrentText(brk if isinstance(brk, str) else "(none)")
        self.list.clear()
        for k, (src, sig) in enumerate(pairs):
            item = QListWidgetItem(_swatch(pair_colour(k)), f"{k + 1}: {sig} ← {input_label(src)}")
            self.list.addItem(item)

    def keep_typed_pair(self) -> None:
        src, sig = self.input_box.currentText().strip(), self.output_box.currentText().strip()
        d = self._doc.diagram
        if src not in input_choices(d) or sig not in signal_choices(d):
            self._picker.message.emit(f"No such pair: pick the input and the output from the lists ({src!r}, {sig!r}).")
            return
        self._picker._keep(src, sig)

    def remove_selected(self) -> None:
        row = self.list.currentRow()
        if 0 <= row < len(pairs_of(self._doc.diagram)):
            self._push(remove_pair(self._doc, row))

    def apply_break(self) -> None:
        text = self.break_box.currentText().strip()
        if text in ("", "(none)"):
            self._picker.pick_break(None)
        elif text in break_choices(self._doc.diagram):
            self._picker.pick_break(text)
        else:
            self._picker.message.emit(f"No signal or input port called {text!r}.")


