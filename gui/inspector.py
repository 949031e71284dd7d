"""The inspector: edits the selected block's parameters or the selected wire's signal.

Every field commits one :class:`~loopwright.gui.commands.SetParams` (or rename) when the
user finishes editing it. The document checks the new value through the engine first;
a refused value stays in the field, marked, with the engine's reason beside it, and the
diagram keeps its old value. Numbers are never clipped or rounded behind the user's back.
"""
from __future__ import annotations

import copy
from contextlib import contextmanager

from PySide6.QtCore import QEvent, Qt, QTimer
from PySide6.QtWidgets import (
    QComboBox,
    QFormLayout,
    QHBoxLayout,
    QLabel,
    QLineEdit,
    QPushButton,
    QScrollArea,
    QSpinBox,
    QVBoxLayout,
    QWidget,
)

from loopwright.engine.errors import EngineError, ParameterError
from loopwright.engine.validation import parse_matrix_text
from loopwright.gui.commands import RenameBlock, RenameWire, SetCaption, SetParams
from loopwright.gui.matrix_table import MatrixEditor, error_label, number_text, show_error
from loopwright.gui.model_editor import ModelEditor, WrappedNote, describe_state_order
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


def _hand_edit(params: dict, key: str, value) -> None:
    """Set ``key`` by hand; a recipe no longer describing the block goes with it (undo brings it back)."""
    if params.get(key) != value:
        params.pop("recipe", None)
    params[key] = value


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
        self._refit = QTimer(self)
        self._refit.setSingleShot(True)
        self._refit.setInterval(0)
        self._refit.timeout.connect(self._refit_page)
        outer = QVBoxLayout(self)
        outer.setContentsMargins(2, 2, 2, 2)
        outer.addWidget(self._scroll)
        self._live_widths: dict[str, int] = {}
        # Unapplied model drafts by block id: kept across selection changes and redraws.
        self._drafts: dict[str, dict] = {}
        self.model_editor: ModelEditor | None = None
        # the design recipe's part of the page (gui/recipe_editor.py): the editor shown, and the
        # session (design worker, messages) that outlives the pages
        self.recipe_editor = None
        self.recipe_session = None
        document.params_changed.connect(self._on_block_event)
        document.renamed.connect(self._on_block_event)
        document.caption_changed.connect(self._on_block_event)
        document.block_removed.connect(self._on_block_removed)
        document.wire_removed.connect(self._on_wire_removed)
        document.wire_renamed.connect(self._on_wire_event)
        document.wire_changed.connect(self._on_wire_event)
        document.diagram_replaced.connect(self._on_diagram_replaced)
        self.show_nothing()

    # ---- public interface for the embedded editors ----------------------------------------
    @property
    def document(self):
        """The document the inspector edits."""
        return self._doc

    @property
    def block_id(self) -> str | None:
        """Id of the block shown, or None."""
        return self._block_id

    @contextmanager
    def keep_page(self, keep: bool = True):
        """While inside, edits of the block shown do not rebuild its page (a slider held in the
        page stays held); ``keep=False`` makes it a no-op."""
        before = self._building
        self._building = before or keep
        try:
            yield
        finally:
            self._building = before

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
        self._drafts.clear()
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
        w.installEventFilter(self)

    def eventFilter(self, obj, event) -> bool:
        if obj is self._scroll.widget() and event.type() == QEvent.Type.LayoutRequest:
            # The page grew or shrank in place (a plant linked, a matrix resized, a note
            # rewritten): the scroll area only refits it on its own resize, so the rows
            # were squeezed into the old height and a note's last line was cut.
            self._refit.start()
        return super().eventFilter(obj, event)

    def _refit_page(self) -> None:
        self._scroll.setWidgetResizable(True)  # resizes the page to its height for the viewport's width

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
            show_error(lab, message)
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
        self.model_editor = None
        self.recipe_editor = None
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
        size = WrappedNote(self._size_text(blk))  # a wrapped line the form would cut
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
        err = error_label()
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

    def _model(self, form, blk) -> None:
        """The block's model as one draft (sizes once, every matrix follows, one Apply)."""
        editor = ModelEditor(blk.kind, blk.params, block_name=blk.name, diagram=self._doc.diagram,
                             check=lambda params, bid=blk.id: self._doc.check_params(bid, params),
                             state=self._drafts.get(blk.id))
        editor.draft_changed.connect(lambda bid=blk.id, ed=editor: self._keep_draft(bid, ed))
        editor.applied.connect(lambda params, bid=blk.id: self._apply_model(bid, params))
        form.addRow(editor)
        self.model_editor = editor
        self.fields.update({k: w for k, w in editor.fields.items() if k not in self.fields})

    def _keep_draft(self, bid: str, editor) -> None:
        """An unapplied draft stays with its block until applied or reverted."""
        if editor.is_draft():
            self._drafts[bid] = editor.state()
        else:
            self._drafts.pop(bid, None)

    def _apply_model(self, bid: str, params: dict) -> None:
        blk = self._doc.diagram.blocks.get(bid)
        if blk is None:
            return
        draft = self._drafts.pop(bid, None)
        try:
            self._doc.push(SetParams(self._doc, bid, params, text=f"Edit {blk.name} model"))
        except EngineError as err:
            if draft is not None:
                self._drafts[bid] = draft
            if self.model_editor is not None:
                self.model_editor.status.setText(f"Draft, not applied: {err}")

    def pending_drafts(self) -> list[str]:
        """Names of blocks with a model draft not applied yet."""
        d = self._doc.diagram
        return sorted(d.blocks[b].name for b in self._drafts if b in d.blocks)

    def _build_plant(self, form, blk) -> None:
        self._model(form, blk)

    def _build_dynamic(self, form, blk) -> None:
        self._model(form, blk)

    def _build_gain(self, form, blk) -> None:
        ed = MatrixEditor(blk.params.get("K", []), name="K")
        ed.edited.connect(lambda val: self._commit_params("K", lambda p: _hand_edit(p, "K", val), rebuild=False)
                          and self._after_gain_edit())
        self._add(form, "K", "K (out = K in)", ed)
        order = QLabel(self._gain_state_order(blk))
        order.setObjectName("k_order")
        order.setWordWrap(True)
        order.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        form.addRow("", order)
        self.fields["k_order"] = order
        self._designed_note(form, blk)

    def _after_gain_edit(self) -> bool:
        """A hand edit of K ends its recipe: the note saying it was designed goes."""
        blk = self._doc.diagram.blocks.get(self._block_id)
        note = self.fields.get("designed_note")
        if blk is not None and note is not None and not isinstance(blk.params.get("recipe"), dict):
            note.hide()
        return self._refresh_size()

    def _designed_note(self, form, blk) -> None:
        if isinstance(blk.params.get("recipe"), dict):
            note = QLabel(f"designed from plant {blk.params['recipe'].get('plant') or blk.params.get('plant', '?')}; "
                          "a hand edit replaces the design")
            note.setObjectName("designed_note")
            note.setWordWrap(True)
            form.addRow("", note)
            self.fields["designed_note"] = note

    def _gain_state_order(self, blk) -> str:
        """What K's columns multiply, in order ("... P's states: P.x1 = y, P.x2 = dy/dt")."""
        from loopwright.engine.diagram import PortRef

        d = self._doc.diagram
        wire = d.wire_into(PortRef(blk.id, "in"))
        if wire is not None:
            src = d.blocks[wire.source.block]
            if src.kind == "estimator" and wire.source.port == "xhat":
                link = src.params.get("plant")
                if isinstance(link, str):
                    return f"K multiplies the estimate of {link}'s states: {describe_state_order(d, link)}"
                n = len(src.params.get("A") or [])
                states = ", ".join(f"{src.name}.x{k + 1}" for k in range(n)) or "none"
                return f"K multiplies the estimate of {src.name}'s own model states (rows of its A): {states}"
            if src.kind in ("plant", "dynamic"):
                return f"K multiplies the signal {wire.name} ({src.name}'s output y)"
            return f"K multiplies the signal {wire.name}"
        rec = blk.params.get("recipe")
        if isinstance(rec, dict) and isinstance(rec.get("plant"), str):
            return f"K was designed for {rec['plant']}'s states: {describe_state_order(d, rec['plant'])}"
        return "K multiplies whatever is wired to its input (nothing yet)"

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
        self._model(form, blk)
        self._designed_note(form, blk)

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
            text = number_text(val) if not isinstance(val, list) else repr(val)
            edit = QLineEdit(text)
            edit.setObjectName(f"field_{key}")
            edit.editingFinished.connect(lambda k=key, e=edit: self._commit_waveform_field(k, e.text()))
            self._add(form, key, _FIELD_LABELS.get(key, key), edit)
        if wf.get("kind") != "white":
            val = p.get("intensity", "")
            edit = QLineEdit(number_text(val) if not isinstance(val, list) else repr(val))
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
