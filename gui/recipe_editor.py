"""The recipe of a gain or estimator block, edited in the inspector, with a Design button.

:class:`RecipeEditor` shows every field of the recipe's method: the method (pole placement,
Ackermann, LQR, feedforward; for an estimator pole placement, Ackermann or Kalman filter),
the plant it designs from, the poles (a list where a complex pair is written once as
``re ± im j``), Q, R and the cross weight N, W, V and G (with what the engine traces from the
diagram's noise sources as the defaults), the plant inputs a state feedback may use, the
outputs a feedforward tracks, integral action (the gain block that gets K_i and the outputs
integrated) and the sign that maps the design onto the block. A field that cannot be read is
named in a one-line message; Design (or Enter in a field) applies the form as one undo step
together with the gains the engine computes. The result's checks (controllability or
observability of the plant, the poles the gain gives -- with integral action those of the
augmented plant -- and the gain's size) are shown in place. A log-scale slider scales the LQR
control weight R or the Kalman measurement intensity V and redesigns while it moves (one
undo step per slider drag).

The inspector embeds it with one call (:func:`embed_recipe_editor`). The engine designs
(:func:`loopwright.engine.recipes.redesign`) on the task worker; the result is pushed as one
:class:`~loopwright.gui.design_commands.DesignBlocks` command.

:class:`DesignMarks` tags designed blocks on the canvas that are stale or not designed yet.
"""
from __future__ import annotations

import json
import math

import numpy as np
from PySide6.QtCore import QObject, Qt, QTimer, Signal
from PySide6.QtGui import QColor
from PySide6.QtWidgets import (
    QComboBox, QFormLayout, QGroupBox, QHBoxLayout, QLabel, QLineEdit, QPushButton, QSlider, QVBoxLayout, QWidget,
)

from loopwright.engine.blocks import plant_matrices
from loopwright.engine.design import poles_to_json, uncontrollable_modes, unobservable_modes
from loopwright.engine.errors import EngineError
from loopwright.engine.recipes import noise_defaults, recipe_blocks, recipe_plant, stale_blocks
from loopwright.engine.tracking import integral_augmentation
from loopwright.gui.design_commands import DesignBlocks, redesigned_params
from loopwright.gui.workers import Tasks

__all__ = [
    "GAIN_CHOICES", "ESTIMATOR_CHOICES", "parse_poles", "format_poles", "parse_indices", "design_checks", "design_states",
    "RecipeEditor", "RecipeSession", "DesignMarks", "embed_recipe_editor",
]

GAIN_CHOICES = (("pole placement", "place"), ("Ackermann's formula", "ackermann"), ("LQR", "lqr"), ("feedforward", "feedforward"))
ESTIMATOR_CHOICES = (("pole placement", "place"), ("Ackermann's formula", "ackermann"), ("Kalman filter", "kalman"))
_FIELD_MIN_PX = 150  # the narrowest a text field of the form gets
_SLIDER_DECADES = 3  # the weight slider spans 1/1000 .. 1000 times the weight it started from


# ---------------------------------------------------------------------------------------
# text <-> recipe values
# ---------------------------------------------------------------------------------------
def parse_poles(text: str) -> list:
    """``"-80 ± 60j, -150"`` -> ``[[-80, 60], [-80, -60], -150]`` (the engine's recipe form).

    A pair written once with ``±`` gives both poles; a complex pole written out (``-2+3j``)
    must have its conjugate listed too (the engine checks). Raises ValueError naming the entry.
    """
    out: list = []
    for k, part in enumerate(p.strip() for p in text.split(",")):
        if not part:
            continue
        s = part.replace(" ", "").replace("i", "j").replace("+-", "±").replace("+/-", "±")
        try:
            if "±" in s:
                re_s, im_s = s.split("±")
                re_v, im_v = float(re_s), float(im_s.rstrip("j") or "1")
                out += [[re_v, abs(im_v)], [re_v, -abs(im_v)]]
            elif "j" in s:
                z = complex(s)
                out.append([z.real, z.imag] if z.imag else z.real)
            else:
                out.append(float(s))
        except ValueError:
            raise ValueError(f"poles: entry {k + 1} {part!r} is not a number, a complex number or 're ± im j'") from None
    if not out:
        raise ValueError("poles: give one pole per plant state, e.g. '-2 ± 3j, -5'")
    return out


def format_poles(poles) -> str:
    """The recipe's poles as text, each complex pair once as ``re ± im j``."""
    vals = [complex(p[0], p[1]) if isinstance(p, list) else complex(p) for p in poles]
    out, used = [], set()
    for i, v in enumerate(vals):
        if i in used:
            continue
        if v.imag == 0:
            out.append(f"{v.real:g}")
            continue
        j = next((j for j in range(i + 1, len(vals)) if j not in used and vals[j] == v.conjugate()), None)
        if j is None:
            out.append(f"{v.real:g}{v.imag:+g}j")
        else:
            used.add(j)
            out.append(f"{v.real:g} ± {abs(v.imag):g}j")
    return ", ".join(out)


def _parse_weight(text: str, field: str):
    """A weight as the recipe keeps it: a number, a list (diagonal) or a matrix (JSON)."""
    t = text.strip()
    if not t:
        return None
    try:
        v = json.loads(t if t[0] in "[{" else t)
    except json.JSONDecodeError:
        try:
            v = json.loads("[" + t + "]")
        except json.JSONDecodeError:
            raise ValueError(f"{field}: {text!r} is not a number, a list of numbers or a matrix [[...], [...]]") from None
    return v


def parse_indices(text: str, field: str) -> list[int] | None:
    """``"1, 3"`` -> ``[1, 3]`` (1-based plant inputs or outputs, as the recipe keeps them);
    empty -> None (all). Raises ValueError naming the field."""
    parts = [p.strip() for p in text.replace(";", ",").split(",") if p.strip()]
    if not parts:
        return None
    out = []
    for p in parts:
        try:
            v = int(p)
        except ValueError:
            raise ValueError(f"{field}: {p!r} is not a whole number; list 1-based numbers, e.g. '1, 2' (empty: all)") from None
        if v < 1:
            raise ValueError(f"{field}: {v} is not a 1-based number (the first is 1)")
        out.append(v)
    return out


def _indices_text(v) -> str:
    return ", ".join(str(i) for i in v) if isinstance(v, list) else ""


def _weight_text(v) -> str:
    return "" if v is None else json.dumps(v)


def _scaled(v, factor: float):
    """A recipe weight times ``factor`` (number, diagonal list or matrix)."""
    return (np.asarray(v, dtype=float) * factor).tolist() if not isinstance(v, (int, float)) else float(v) * factor


def _text_row(form: QFormLayout, key: str, label: str, text: str, hint: str) -> QLineEdit:
    """A text field ``recipe_<key>`` on its own form row."""
    e = QLineEdit(text)
    e.setObjectName(f"recipe_{key}")
    e.setPlaceholderText(hint)
    form.addRow(label, e)
    return e


def _choice_row(form: QFormLayout, key: str, label: str, items, current) -> QComboBox:
    """A choice ``recipe_<key>`` of ``(text, value)`` items on its own form row, set to ``current``
    (the first item when ``current`` is not among them)."""
    box = QComboBox()
    box.setObjectName(f"recipe_{key}")
    for text, value in items:
        box.addItem(text, value)
    box.setCurrentIndex(max(0, box.findData(current)))
    form.addRow(label, box)
    return box


# ---------------------------------------------------------------------------------------
# worker-side helpers
# ---------------------------------------------------------------------------------------
def design_checks(diagram, name: str) -> dict:
    """The checks of a block's current gain against its plant (worker side).

    Returns
    -------
    dict
        ``plant``; ``structure`` (the modes the gain cannot move: uncontrollable for K,
        unobservable for L, as a list of complex); ``poles`` (``eig(A - B K)`` or
        ``eig(A - L C)``, complex ndarray, None for feedforward or a gain of the wrong
        shape); ``gain_norm`` (largest singular value of the design gain); ``state``
        (``"designed"``, ``"stale"`` or ``"not designed"``); ``defaults`` (Kalman: the
        traced W, V and their sources).
    """
    d = diagram
    b = d.block_by_name(name)
    rec = b.params.get("recipe") or {}
    plant = recipe_plant(d, b)
    A, B, C, _D = plant_matrices(d, plant)
    out: dict = {"plant": plant, "poles": None, "gain_norm": float("nan"), "defaults": None}
    if b.kind == "gain":
        out["structure"] = list(uncontrollable_modes(A, B))
        K = np.asarray(b.params.get("K"), dtype=float)
        integral = _integral_loop(d, rec, A, B, C, _D, K)
        if integral is not None:
            Aa, Ba, Kd = integral
            out["poles"] = np.linalg.eigvals(Aa - Ba @ Kd)
            out["gain_norm"] = float(np.linalg.norm(Kd, 2))
            out["integral"] = True
        elif rec.get("method") != "feedforward" and rec.get("integral") is None and K.shape == (B.shape[1], A.shape[0]):
            Kd = float(rec.get("sign", -1)) * K
            out["poles"] = np.linalg.eigvals(A - B @ Kd)
            out["gain_norm"] = float(np.linalg.norm(Kd, 2))
        elif K.ndim == 2 and K.size:
            out["gain_norm"] = float(np.linalg.norm(K, 2))
    else:
        out["structure"] = list(unobservable_modes(A, C))
        L = np.asarray(b.params.get("L"), dtype=float)
        if L.shape == (A.shape[0], C.shape[0]):
            out["poles"] = np.linalg.eigvals(A - L @ C)
            out["gain_norm"] = float(np.linalg.norm(L, 2))
        try:
            nd = noise_defaults(d, name)
            out["defaults"] = {"W": None if nd.W is None else nd.W.tolist(), "V": None if nd.V is None else nd.V.tolist(),
                               "G": None if nd.G is None else nd.G.tolist(),
                               "process": list(nd.process_sources), "measurement": list(nd.measurement_sources)}
        except EngineError:
            out["defaults"] = None
    out["state"] = _state(d, b)
    return out


def _integral_loop(diagram, rec: dict, A, B, C, D, K):
    """``(Aa, Ba, [K_x, K_i])`` of a designed integral-action recipe, or None when the recipe
    has no integral action or its gains do not fit (the Design button names what is wrong)."""
    integ = rec.get("integral")
    if rec.get("method") == "feedforward" or not isinstance(integ, dict) or not isinstance(integ.get("block"), str):
        return None
    try:
        ki = np.asarray(diagram.block_by_name(integ["block"]).params.get("K"), dtype=float)
        outs = integ.get("outputs")
        Aa, Ba = integral_augmentation(A, B, C, D, outputs=None if outs is None else [int(o) - 1 for o in outs])
    except (EngineError, TypeError, ValueError, IndexError):
        return None
    n, q = A.shape[0], Aa.shape[0] - A.shape[0]
    if K.shape != (B.shape[1], n) or ki.shape != (B.shape[1], q):
        return None
    # the blocks hold sign * K_x and sign * K_i, and sign is +-1
    return Aa, Ba, float(rec.get("sign", -1)) * np.hstack([K, ki])


def _state(diagram, block) -> str:
    rec = block.params.get("recipe") or {}
    if not rec.get("designed_for"):
        return "not designed"
    return "stale" if block.name in stale_blocks(diagram) else "designed"


def design_states(diagram) -> dict[str, str]:
    """Block id -> ``"designed"``, ``"stale"`` or ``"not designed"`` for every recipe block."""
    stale = set(stale_blocks(diagram))
    out = {}
    for b in recipe_blocks(diagram):
        rec = b.params["recipe"]
        out[b.id] = "not designed" if not rec.get("designed_for") else ("stale" if b.name in stale else "designed")
    return out


# ---------------------------------------------------------------------------------------
# the editor
# ---------------------------------------------------------------------------------------
class RecipeEditor(QGroupBox):
    """Edits one block's recipe and designs from it.

    Signals
    -------
    designed(str)
        The block was designed and the new gains pushed (block name).
    """

    designed = Signal(str)

    def __init__(self, document, block_id: str, *, session: "RecipeSession", parent=None):
        super().__init__("Design recipe", parent)
        self.setObjectName("recipe_editor")
        self._doc = document
        self._bid = block_id
        self._session = session
        session.attach(self)
        self.checks: dict | None = None
        self._slider_base = None
        self._slider_gesture: int | None = None
        blk = document.diagram.blocks[block_id]
        self._kind = blk.kind
        rec = blk.params.get("recipe") if isinstance(blk.params.get("recipe"), dict) else {}
        lay = QVBoxLayout(self)
        self.state_label = QLabel("")
        self.state_label.setObjectName("recipe_state")
        self.state_label.setWordWrap(True)
        lay.addWidget(self.state_label)
        form = QFormLayout()
        form.setRowWrapPolicy(QFormLayout.RowWrapPolicy.WrapLongRows)  # a narrow inspector puts labels above
        lay.addLayout(form)
        choices = GAIN_CHOICES if self._kind == "gain" else ESTIMATOR_CHOICES
        self.method_box = _choice_row(form, "method", "method", [("(no recipe)", None), *choices], rec.get("method"))
        plants = [b.name for b in sorted(document.diagram.blocks.values(), key=lambda b: b.name) if b.kind in ("plant", "dynamic")]
        self.plant_box = _choice_row(form, "plant", "designs for plant", [("(as wired)", None)] + [(n, n) for n in plants],
                                     rec.get("plant"))
        self.poles_edit = _text_row(form, "poles", "poles (rad/s)",
                                    format_poles(rec["poles"]) if isinstance(rec.get("poles"), list) else "",
                                    "one per state, a pair once: -2 ± 3j, -5")
        self.weights = {
            key: _text_row(form, key, label, _weight_text(rec.get(key)), hint)
            for key, label, hint in (
                ("Q", "Q (state weight)", "a number (times I), a diagonal list or a matrix [[...], [...]]"),
                ("R", "R (input weight)", "a number (times I), a diagonal list or a matrix"),
                ("N", "N (cross weight)", "optional: states x inputs matrix; empty: none"),
                ("W", "W (process noise)", ""),
                ("V", "V (measurement noise)", ""),
                ("G", "G (how W enters the states)", "optional: states x W's size; empty: from the noise sources"),
            )
        }
        self.inputs_edit = _text_row(form, "inputs", "inputs used", _indices_text(rec.get("inputs")),
                                     "1-based plant inputs the gain may use; empty: all")
        others = [b.name for b in sorted(document.diagram.blocks.values(), key=lambda b: b.name)
                  if b.kind == "gain" and b.id != block_id]
        self.feedback_box = _choice_row(form, "feedback", "feedback gain", [(n, n) for n in others], rec.get("feedback"))
        self.outputs_edit = _text_row(form, "outputs", "outputs tracked", _indices_text(rec.get("outputs")),
                                      "1-based plant outputs to track; empty: all")
        integ = rec.get("integral") if isinstance(rec.get("integral"), dict) else {}
        self.integral_box = _choice_row(form, "integral", "integral gain block", [("(none)", None)] + [(n, n) for n in others],
                                        integ.get("block"))
        self.integral_box.setToolTip("Integral action: the gain block fed by the integral of r - y "
                                     "gets K_i; the poles then number plant states + integrators")
        self.integral_outputs_edit = _text_row(form, "integral_outputs", "integrated outputs", _indices_text(integ.get("outputs")),
                                               "1-based plant outputs integrated; empty: all")
        self._sign_given = "sign" in rec
        sign = rec.get("sign", self._default_sign(rec.get("method")))
        self.sign_box = _choice_row(form, "sign", "sign", [("−1: block holds −K", -1), ("+1: block holds K", 1)],
                                    int(sign) if sign in (1, -1) else -1)
        self.sign_box.setToolTip("−1: the block holds −K and feeds a '+' input (state feedback's default); "
                                 "+1: the block holds K, the minus sits in a summing junction (feedforward's default)")
        self.sign_box.activated.connect(self._on_sign_chosen)
        self.slider = QSlider(Qt.Orientation.Horizontal)
        self.slider.setObjectName("recipe_weight_slider")
        self.slider.setRange(-100 * _SLIDER_DECADES, 100 * _SLIDER_DECADES)
        self.slider.setValue(0)
        self.slider_label = QLabel("")
        row = QWidget()
        rl = QHBoxLayout(row)
        rl.setContentsMargins(0, 0, 0, 0)
        rl.addWidget(self.slider, 1)
        rl.addWidget(self.slider_label)
        self.slider_row_label = QLabel("")
        form.addRow(self.slider_row_label, row)
        self._rows = {"poles": self.poles_edit, **self.weights, "inputs": self.inputs_edit, "feedback": self.feedback_box,
                      "outputs": self.outputs_edit, "integral": self.integral_box, "integral_outputs": self.integral_outputs_edit,
                      "sign": self.sign_box, "slider": row}
        for e in (self.poles_edit, *self.weights.values(), self.inputs_edit, self.outputs_edit, self.integral_outputs_edit):
            e.returnPressed.connect(self.design)  # Enter in a field applies the recipe, as Design does
            # wide enough to read; a row whose label leaves less room puts its label above instead
            e.setMinimumWidth(_FIELD_MIN_PX)
        self._form = form
        buttons = QHBoxLayout()
        self.design_button = QPushButton("Design")
        self.design_button.setObjectName("recipe_design")
        self.design_button.setToolTip("Compute the gain from this recipe (undoable)")
        buttons.addWidget(self.design_button)
        buttons.addStretch(1)
        lay.addLayout(buttons)
        self.message = QLabel("")
        self.message.setObjectName("recipe_message")
        self.message.setWordWrap(True)
        self.message.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        lay.addWidget(self.message)
        self.result = QLabel("")
        self.result.setObjectName("recipe_result")
        self.result.setWordWrap(True)
        self.result.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        lay.addWidget(self.result)
        self.design_button.clicked.connect(self.design)
        self.method_box.currentIndexChanged.connect(self._on_method)
        self.integral_box.currentIndexChanged.connect(self._on_method)
        self.slider.sliderPressed.connect(self._on_slider_pressed)
        self.slider.valueChanged.connect(self._on_slider)
        self.slider.sliderReleased.connect(self._on_slider_released)
        self._on_method()
        if blk.name in session.memory:
            self.message.setText(session.memory[blk.name])
        if rec:
            session.tasks.submit("checks", design_checks, document.snapshot(), blk.name)

    # ---- form ------------------------------------------------------------------------------------
    @property
    def block_name(self) -> str:
        return self._doc.diagram.blocks[self._bid].name

    @staticmethod
    def _default_sign(method) -> int:
        return 1 if method == "feedforward" else -1

    def _on_sign_chosen(self, *_a) -> None:
        self._sign_given = True

    def _on_method(self, *_a) -> None:
        m = self.method_box.currentData()
        gain = self._kind == "gain"
        feedback = gain and m in ("place", "ackermann", "lqr")
        integral = feedback and self.integral_box.currentData() is not None
        show = {"poles": m in ("place", "ackermann"), "Q": m == "lqr", "R": m == "lqr", "N": m == "lqr",
                "W": m == "kalman", "V": m == "kalman", "G": m == "kalman", "inputs": feedback,
                "feedback": gain and m == "feedforward", "outputs": gain and m == "feedforward",
                "integral": feedback, "integral_outputs": integral, "sign": gain and m is not None,
                "slider": m in ("lqr", "kalman")}
        for key, w in self._rows.items():
            self._form.setRowVisible(w, show[key])
        if not self._sign_given:  # the method's default until the user picks one
            self.sign_box.setCurrentIndex(self.sign_box.findData(self._default_sign(m)))
        self._form.labelForField(self.poles_edit).setText(
            "poles (rad/s), plant states + integrators" if integral else "poles (rad/s)")
        self.plant_box.setEnabled(m is not None)
        self.design_button.setEnabled(m is not None)
        self.slider_row_label.setText("scale R (log)" if m == "lqr" else "scale V (log)")

    def recipe(self) -> dict:
        """The recipe the form describes (every field of the method); raises ValueError naming
        the field."""
        m = self.method_box.currentData()
        if m is None:
            raise ValueError("method: choose a design method first")
        rec: dict = {"method": m}
        if self.plant_box.currentData() is not None:
            rec["plant"] = self.plant_box.currentData()
        if m in ("place", "ackermann"):
            rec["poles"] = parse_poles(self.poles_edit.text())
        elif m == "lqr":
            for key in ("Q", "R"):
                v = _parse_weight(self.weights[key].text(), key)
                if v is None:
                    raise ValueError(f"{key}: LQR needs a weight (a number, a diagonal list or a matrix)")
                rec[key] = v
            cross = _parse_weight(self.weights["N"].text(), "N")
            if cross is not None:
                rec["N"] = cross
        elif m == "kalman":
            for key in ("W", "V", "G"):
                v = _parse_weight(self.weights[key].text(), key)
                if v is not None:  # empty: the engine traces it from the noise sources
                    rec[key] = v
            if "G" in rec and "W" not in rec:
                raise ValueError("G: state W too (G says how W enters the states); or leave both empty for the noise sources")
        else:
            if self.feedback_box.currentData() is None:
                raise ValueError("feedback gain: feedforward needs the gain block that holds the state feedback")
            rec["feedback"] = self.feedback_box.currentData()
            outs = parse_indices(self.outputs_edit.text(), "outputs tracked")
            if outs is not None:
                rec["outputs"] = outs
        if self._kind == "gain" and m in ("place", "ackermann", "lqr"):
            inputs = parse_indices(self.inputs_edit.text(), "inputs used")
            if inputs is not None:
                rec["inputs"] = inputs
            if self.integral_box.currentData() is not None:
                rec["integral"] = {"block": self.integral_box.currentData()}
                outs = parse_indices(self.integral_outputs_edit.text(), "integrated outputs")
                if outs is not None:
                    rec["integral"]["outputs"] = outs
        if self._kind == "gain":
            sign = int(self.sign_box.currentData())
            if self._sign_given or sign != self._default_sign(m):
                rec["sign"] = sign
        return rec

    # ---- designing ----------------------------------------------------------------------------------
    def design(self, *, gesture: int | None = None) -> bool:
        """Send the form's recipe to the engine; the result is pushed as one undo step."""
        try:
            rec = self.recipe()
        except ValueError as err:
            self._show_message(str(err), error=True)
            return False
        self._session.submit_design(self._doc.snapshot(), self.block_name, rec, gesture)
        self._show_message("designing…")
        return True

    def _show_message(self, text: str, *, error: bool = False) -> None:
        self.message.setText(text)
        self.message.setStyleSheet("color: #c0392b;" if error else "")

    def show_checks_result(self, result) -> None:
        if result.error is None:
            self._show_checks(result.value)
        else:
            self.result.setText(result.error)

    def _show_checks(self, c: dict) -> None:
        self.checks = c
        colours = {"designed": "#2aa05a", "stale": "#c0392b", "not designed": "#c97a00"}
        words = {"designed": "designed: the gains match the plant and the recipe",
                 "stale": "STALE: the plant or the recipe changed since the gains were computed; press Design",
                 "not designed": "not designed yet: press Design"}
        self.state_label.setText(words[c["state"]])
        self.state_label.setStyleSheet(f"color: {colours[c['state']]}; font-weight: bold;")
        what = "uncontrollable" if self._kind == "gain" else "unobservable"
        lines = [f"plant {c['plant']}: " + ("no " + what + " modes" if not c["structure"]
                                             else f"{what} modes " + ", ".join(f"{complex(z):.4g}" for z in c["structure"]))]
        if c["poles"] is not None:
            label = ("eig(A − B K) with the integrators" if c.get("integral") else "eig(A − B K)") if self._kind == "gain" \
                else "eig(A − L C)"
            lines.append(f"{label}: {format_poles(poles_to_json(np.sort_complex(c['poles'])))}")
        if math.isfinite(c["gain_norm"]):
            lines.append(f"gain size (largest singular value): {c['gain_norm']:.5g}")
        d = c.get("defaults")
        if d:
            for key, src in (("W", "process"), ("V", "measurement")):
                if d[key] is not None:
                    lines.append(f"default {key} from {', '.join(d[src])}: {json.dumps(d[key])}")
                    self.weights[key].setPlaceholderText(f"empty: {json.dumps(d[key])} from {', '.join(d[src])}")
        self.result.setText("\n".join(lines))

    # ---- the weight slider -----------------------------------------------------------------------------
    def _slider_key(self) -> str:
        return "R" if self.method_box.currentData() == "lqr" else "V"

    def _on_slider_pressed(self) -> None:
        key = self._slider_key()
        try:
            base = _parse_weight(self.weights[key].text(), key)
        except ValueError as err:
            self._show_message(str(err), error=True)
            base = None
        if base is None and self.checks and self.checks.get("defaults"):
            base = self.checks["defaults"].get(key)
        self._slider_base = base
        self._slider_gesture = self._session.new_gesture()

    def _on_slider(self, value: int) -> None:
        factor = 10.0 ** (value / 100.0)
        self.slider_label.setText(f"× {factor:.3g}")
        if self._slider_base is None:
            self._on_slider_pressed()  # moved by the keyboard: each step is its own gesture
            if self._slider_base is None:
                return
        key = self._slider_key()
        self.weights[key].setText(_weight_text(_scaled(self._slider_base, factor)))
        self.design(gesture=self._slider_gesture)
        if not self.slider.isSliderDown():
            self._on_slider_released()

    def _on_slider_released(self) -> None:
        self._slider_base = None
        self._slider_gesture = None
        self._session.gesture_ended(self._bid)


class RecipeSession(QObject):
    """What outlives one inspector page: the design worker, the last design message of each
    block, and the gesture counter. A design result is pushed here even when the page that
    asked for it has been rebuilt in the meantime."""

    def __init__(self, inspector):
        super().__init__(inspector)
        self._inspector = inspector
        self._doc = inspector.document
        self.tasks = Tasks(self)
        self.tasks.finished.connect(self._on_task)
        self.memory: dict[str, str] = {}
        self.editor: RecipeEditor | None = None
        self._gesture = 0
        self._in_gesture: set[int] = set()
        self._pending: dict[int, int | None] = {}

    def attach(self, editor: RecipeEditor) -> None:
        self.editor = editor
        self._editor_key = key = id(editor)
        # the page an editor sits on is deleted later, possibly after the next page's editor came
        editor.destroyed.connect(lambda *_a, k=key: self._on_editor_gone(k))

    def _on_editor_gone(self, key: int) -> None:
        if key == getattr(self, "_editor_key", None):
            self.editor = None

    def new_gesture(self) -> int:
        self._gesture += 1
        self._in_gesture.add(self._gesture)
        return self._gesture

    def gesture_ended(self, block_id: str) -> None:
        self._in_gesture.clear()
        # the page kept still during the drag; now show the gains the drag left
        QTimer.singleShot(0, lambda: self._inspector.show_block(block_id) if self._inspector.block_id == block_id else None)

    def submit_design(self, snapshot, name: str, recipe: dict, gesture: int | None) -> None:
        token = self.tasks.submit("design", redesigned_params, snapshot, name, recipe)
        self._pending[token] = gesture

    def _on_task(self, result) -> None:
        ed = self.editor
        if result.key == "checks":
            if ed is not None:
                ed.show_checks_result(result)
            return
        gesture = self._pending.pop(result.token, None)
        if result.error is not None:
            if ed is not None:
                ed._show_message(result.error, error=True)
            return
        changes, results = result.value
        name = results[0].block if results else "?"
        warns = [w for r in results for w in r.warnings]
        text = f"designed {', '.join(r.block for r in results)}" + "".join(f"\nwarning: {w}" for w in warns)
        self.memory[name] = text  # a rebuilt page shows it again
        if ed is not None:
            ed._show_message(text)
        if changes:
            what = "slider" if gesture is not None else "recipe"
            cmd = DesignBlocks(self._doc, changes, text=f"Design {name} from its {what}", gesture=gesture)
            # while a slider is held its page must stay (rebuilding it would drop the drag)
            with self._inspector.keep_page(gesture is not None and gesture in self._in_gesture):
                self._doc.push(cmd)
        if ed is not None and self.editor is ed:
            ed.designed.emit(name)

    def shutdown(self) -> None:
        self.tasks.shutdown(wait=False)


def embed_recipe_editor(inspector, form: QFormLayout, blk) -> RecipeEditor | None:
    """Add the recipe editor under a gain or estimator block's fields (the inspector's hook)."""
    if blk.kind not in ("gain", "estimator"):
        return None
    session = inspector.recipe_session
    if session is None:
        session = inspector.recipe_session = RecipeSession(inspector)
    editor = RecipeEditor(inspector.document, blk.id, session=session)
    form.addRow(editor)
    inspector.recipe_editor = editor
    return editor


# ---------------------------------------------------------------------------------------
# stale / not designed tags on the canvas
# ---------------------------------------------------------------------------------------
class DesignMarks(QObject):
    """Keeps a tag on each designed block that is stale or not designed yet."""

    COLOURS = {"stale": "#c0392b", "not designed": "#c97a00"}

    def __init__(self, document, scene, *, debounce_ms: int = 150, parent=None):
        super().__init__(parent)
        self._doc, self._scene = document, scene
        self.states: dict[str, str] = {}
        self._tags: dict[str, object] = {}
        self.tasks = Tasks(self)
        self.tasks.finished.connect(self._on_task)
        self._timer = QTimer(self)
        self._timer.setSingleShot(True)
        self._timer.setInterval(debounce_ms)
        self._timer.timeout.connect(self.refresh)
        document.changed.connect(lambda _r: self._timer.start())
        self.refresh()

    def refresh(self) -> None:
        self.tasks.submit("states", design_states, self._doc.snapshot())

    def is_idle(self) -> bool:
        return not self._timer.isActive() and not self.tasks.is_busy("states")

    def _on_task(self, result) -> None:
        if result.error is not None:
            return
        self.states = dict(result.value)
        self._place()

    def _place(self) -> None:
        from loopwright.gui.canvas.tags import TagItem

        for tag in self._tags.values():
            try:
                if tag.scene() is not None:
                    tag.scene().removeItem(tag)
            except RuntimeError:
                pass  # the scene was cleared (another diagram opened) and took the tag with it
        self._tags = {}
        for bid, state in self.states.items():
            item = self._scene.block_items.get(bid)
            if item is None or state not in self.COLOURS:
                continue
            tag = TagItem(state, QColor(self.COLOURS[state]), self._scene.font_)
            tag.setZValue(6)
            self._scene.addItem(tag)
            r = item.sceneBoundingRect()
            tag.setPos(r.right() - tag.width, r.bottom() + 2)
            self._tags[bid] = tag

    def tag_texts(self) -> dict[str, str]:
        return {bid: t.text for bid, t in self._tags.items()}

    def shutdown(self) -> None:
        self.tasks.shutdown(wait=False)
