"""The main window: canvas in the centre, shelf, inspector and problems list in docks,
menus and a toolbar, a status bar showing the live model, files, autosave and recovery.

The analysis panels (pairs, frequency and time views, pole map, loop-break and
singular-value views, noise budget, path audit) are added by
:func:`loopwright.gui.docks.install.install_views`; the window keeps dock nesting on and
saves the dock layout with the window state, apart from the document.
"""
from __future__ import annotations

import importlib.resources
from pathlib import Path

from PySide6.QtCore import QEvent, QSettings, Qt, QTimer, Signal
from PySide6.QtGui import QAction, QActionGroup, QGuiApplication, QKeySequence
from PySide6.QtWidgets import QDockWidget, QLabel, QMainWindow, QStyle, QUndoView

from loopwright.engine import CAUTION, __version__
from loopwright.engine.diagram import Diagram
from loopwright.engine.errors import EngineError
from loopwright.engine.project import FILE_SUFFIX, load, save
from loopwright.gui.autosave import Autosaver, find_leftovers
from loopwright.gui.canvas.clipboard import fragment_from_mime, fragment_to_mime, make_fragment
from loopwright.gui.canvas.scene import DiagramScene
from loopwright.gui.canvas.view import DiagramView
from loopwright.gui.commands import DeleteItems, MoveBlocks, PasteFragment
from loopwright.gui.dialogs import Dialogs
from loopwright.gui.docks.install import install_views
from loopwright.gui.document import Document
from loopwright.gui.inspector import Inspector
from loopwright.gui.problems import ProblemsList
from loopwright.gui.settings import Preferences, RecentFiles, save_canvas_colours
from loopwright.gui.shelf import Shelf
from loopwright.gui.theme import theme_from_palette
from loopwright.gui import workers
from loopwright.gui.workers import LiveModel, LiveResult

__all__ = ["MainWindow", "sample_paths", "status_text"]


def sample_paths() -> list[Path]:
    """The bundled sample diagrams, sorted by file name."""
    root = importlib.resources.files("loopwright.samples")
    return sorted((Path(str(p)) for p in root.iterdir() if p.name.endswith(FILE_SUFFIX)), key=lambda p: p.name)


def _sample_title(path: Path) -> str:
    """The sample's own title (its ``meta.title``), else a name made from the file name."""
    import json

    try:
        title = json.loads(path.read_text(encoding="utf-8")).get("meta", {}).get("title")
    except (OSError, ValueError, AttributeError):
        title = None
    return str(title) if title else path.stem.replace("_", " ")


def status_text(result: LiveResult | None) -> str:
    """One line about the live model, as the status bar shows it."""
    if result is None:
        return "checking…"
    rep = result.report
    if rep is None:
        return f"not assembled — {result.error}" if result.error else "not assembled"
    parts = [f"{rep.states} state{'s' if rep.states != 1 else ''}"]
    where = rep.pole_classes.phrase() if rep.pole_classes is not None else f"{rep.rhp_poles} in the right half-plane"
    if rep.stable:
        parts.append("stable (0 right-half-plane poles)")
    elif rep.rhp_poles:
        axis = rep.pole_classes.on_axis if rep.pole_classes is not None else 0
        parts.append(f"UNSTABLE: {rep.rhp_poles} right-half-plane pole{'s' if rep.rhp_poles != 1 else ''}" + (f" ({where})" if axis else ""))
    else:
        parts.append(f"not stable: {where}")
    if not rep.poles_trusted:
        parts.append(f"poles ill-conditioned (condition up to {rep.worst_condition:.0e})")
    sep = rep.separation
    if sep is not None:
        parts.append(
            {
                "holds": "separation: poles match eig(A−BK) ∪ eig(A−LC)",
                "unconfirmed": "separation: too ill-conditioned to confirm",
                "not_separated": "separation: poles DIFFER from eig(A−BK) ∪ eig(A−LC)",
            }[sep.verdict]
        )
    for gap in getattr(rep, "input_gaps", ()) or ():
        # Separation can hold while the estimate is biased: say so where the verdict is.
        said = [f"misses {', '.join(gap.missing)}"] if gap.missing else []
        said += [f"also reads {', '.join(gap.extra)}"] if gap.extra else []
        said += [f"weighs {', '.join(gap.differing)} differently"] if gap.differing else []
        parts.append(f"estimate biased: {gap.estimator}.u {'; '.join(said)}")
    if 0 < len(rep.poles) <= _POLES_SHOWN:
        # A small loop's poles in plain sight: the designed ones, or not.
        from loopwright.gui.inspector import format_complex_list

        parts.append(f"poles: {format_complex_list(rep.poles)}")
    return " · ".join(parts)


_POLES_SHOWN = 8

#: The dock layout's version, saved with the window state: raised when the default layout
#: changes so that a state saved before (e.g. the inspector and the pairs in one tab group)
#: gives way to the new default instead of being restored.
_LAYOUT_VERSION = 1


def undo_redo_icon(which: str):
    """The platform's undo or redo icon (the desktop theme's edit-undo / edit-redo); where
    the platform has no icon theme, a hooked arrow of our own, never a back/forward arrow."""
    from PySide6.QtCore import QPointF as _P
    from PySide6.QtGui import QColor, QIcon, QPainter, QPainterPath, QPen, QPixmap

    named = getattr(QIcon, "ThemeIcon", None)  # Qt 6.7+: also the native icons of Windows and macOS
    if named is not None:
        themed = QIcon.fromTheme(named.EditUndo if which == "undo" else named.EditRedo)
    else:
        themed = QIcon.fromTheme(f"edit-{which}")
    if not themed.isNull():
        return themed
    icon = QIcon()
    for size in (16, 24, 32):
        pm = QPixmap(size, size)
        pm.fill(QColor(0, 0, 0, 0))
        p = QPainter(pm)
        p.setRenderHint(QPainter.RenderHint.Antialiasing, True)
        s = size / 24.0
        if which == "redo":
            p.translate(size, 0)
            p.scale(-1, 1)
        pen = QPen(QColor("#3b4a5a"), 2.2 * s)
        pen.setCapStyle(pen.capStyle().RoundCap)
        p.setPen(pen)
        path = QPainterPath(_P(6 * s, 10 * s))
        # Back along the top, then a U-turn down and to the right: the "take back" hook.
        path.cubicTo(_P(11 * s, 5 * s), _P(21 * s, 6 * s), _P(20 * s, 14 * s))
        path.cubicTo(_P(19.5 * s, 18 * s), _P(16 * s, 20 * s), _P(12 * s, 20 * s))
        p.drawPath(path)
        head = QPainterPath(_P(4 * s, 4 * s))
        head.lineTo(_P(5 * s, 11.5 * s))
        head.lineTo(_P(12 * s, 10 * s))
        p.setBrush(QColor("#3b4a5a"))
        p.drawPath(head)
        p.end()
        icon.addPixmap(pm)
    return icon


def _design_states(result: LiveResult, diagram: Diagram) -> dict[str, str]:
    """Block id -> why its designed matrix cannot be vouched for ("stale", "not designed yet", ...)."""
    states = getattr(result.report, "recipe_states", None)
    if states is None:
        # Not assembled: the marks still say which designs no longer fit (fingerprints only, cheap).
        from loopwright.engine.recipes import recipe_status

        states = recipe_status(diagram)
    ids = {b.name: b.id for b in diagram.blocks.values()}
    return {ids[name]: state for name, state in states.items() if state and name in ids}


def _problems_with_culprits(result: LiveResult, diagram: Diagram) -> tuple[list, tuple[str, ...]]:
    """The engine's problems plus the check's warnings that have a culprit (an estimator's
    input gap, a stale design) as problems, so picking one selects it; the other warnings
    (about the loop as a whole) as plain text."""
    from loopwright.engine.estimator_inputs import gap_problems
    from loopwright.engine.interconnect import Problem

    rep = result.report
    found = list(result.problems)
    warnings = list(getattr(rep, "warnings", ()) or ())
    gaps = list(getattr(rep, "input_gaps", ()) or ())
    extra = gap_problems(gaps)
    ids = {b.name: b.id for b in diagram.blocks.values()}
    for name in (getattr(rep, "recipe_states", None) or {}):
        prefix = f"block {name!r}"
        for w in warnings:
            if w.startswith(prefix) and name in ids:
                extra.append(Problem(w, (ids[name],), (), severity="warning"))
    taken = {p.message for p in extra}
    return found + extra, tuple(w for w in warnings if w not in taken)


class MainWindow(QMainWindow):
    """One diagram in one window.

    Parameters
    ----------
    settings : QSettings
        Where recent files and the window layout live (tests pass an ini file).
    prefs : Preferences
        Autosave folder and interval, grid, debounce, theme.
    dialogs : object, optional
        Answers the window's questions; defaults to real dialogs.
    """

    live_updated = Signal(object)

    def __init__(self, *, settings: QSettings, prefs: Preferences, dialogs=None, parent=None):
        super().__init__(parent)
        self.settings = settings
        self.prefs = prefs
        self.dialogs = dialogs or Dialogs(self)
        self.recent = RecentFiles(settings)
        self.document = Document(parent=self)
        self.theme = theme_from_palette(dark=prefs.dark)
        self._theme_choice = prefs.dark
        self.scene = DiagramScene(self.document, self.theme, grid_size=prefs.grid_size, parent=self)
        self.view = DiagramView(self.scene)
        self.view.setObjectName("canvas")
        self.setCentralWidget(self.view)
        self.setDockNestingEnabled(True)
        self.shelf = Shelf(self.theme)
        self.inspector = Inspector(self.document)
        self.problems = ProblemsList()
        self.shelf_dock = self._dock("Shelf", "shelf_dock", self.shelf, Qt.DockWidgetArea.LeftDockWidgetArea)
        self.inspector_dock = self._dock("Inspector", "inspector_dock", self.inspector, Qt.DockWidgetArea.RightDockWidgetArea)
        self.problems_dock = self._dock("Problems", "problems_dock", self.problems, Qt.DockWidgetArea.BottomDockWidgetArea)
        self.history = QUndoView(self.document.undo_stack)
        self.history.setObjectName("history")
        self.history.setEmptyLabel("(opened)")
        self.history_dock = self._dock("History", "history_dock", self.history, Qt.DockWidgetArea.BottomDockWidgetArea)
        self.tabifyDockWidget(self.problems_dock, self.history_dock)
        self.problems_dock.raise_()
        self.live = LiveModel(self.document, debounce_ms=prefs.debounce_ms, parent=self)
        self.autosaver = Autosaver(prefs.autosave_dir)
        self._autosave_timer = QTimer(self)
        if prefs.autosave_interval_s > 0:
            self._autosave_timer.setInterval(int(prefs.autosave_interval_s * 1000))
            self._autosave_timer.timeout.connect(self.autosave_now)
            self._autosave_timer.start()
        self._live_status = ""  # the status line of the latest live result
        self._model_label = QLabel("checking…")
        self._model_label.setObjectName("model_status")
        self._model_label.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self.statusBar().addPermanentWidget(self._model_label, 1)
        self._zoom_label = QLabel("100 %")
        self._zoom_label.setObjectName("zoom_status")
        self.statusBar().addPermanentWidget(self._zoom_label)
        self.view.zoom_changed.connect(self._on_zoom_changed)
        self._build_actions()
        self._build_menus()
        self._build_toolbar()
        install_views(self)
        # the live check takes each revision's snapshot and check report from the views'
        # shared model (the loop is assembled and its poles computed once per edit), and
        # runs once the quick views are drawn
        self.live.share_with(self.views.revision_inputs, self.views.quick_views_done)
        self._install_design_entries()
        self.scene.selectionChanged.connect(self._on_selection_changed)
        self.scene.edit_refused.connect(self._show_refusal)
        self.shelf.place_requested.connect(self._place_from_shelf)
        self.problems.culprits_chosen.connect(self.select_culprits)
        self.live.result_ready.connect(self._on_live_result)
        # "checking…" shows only once a check has taken half a second: a quick one's
        # two status changes per edit laid the whole window out twice
        self._checking_timer = QTimer(self)
        self._checking_timer.setSingleShot(True)
        self._checking_timer.timeout.connect(self._show_checking)
        self.live.busy_changed.connect(self._on_busy)
        # Bound methods, not lambdas: Qt drops them when the window goes, while the undo
        # stack may still emit as it is destroyed.
        self.document.undo_stack.cleanChanged.connect(self._update_title)
        self.document.path_changed.connect(self._update_title)
        self.document.diagram_replaced.connect(self._on_diagram_replaced)
        self._closing_ok = False
        self._hidden_for_room: list | None = None  # docks hidden while the window is small
        self._copy_title: str | None = None  # an opened sample's title, until it is saved
        self._copy_name: str | None = None
        self._update_title()
        self.resize(1400, 900)
        self._docks_sized = False
        state = settings.value("window/state")
        # a layout saved by an older version is not restored: the default one is sized instead
        self._state_restored = state is not None and bool(self.restoreState(state, _LAYOUT_VERSION))
        self.live.request_now()

    # ---- construction --------------------------------------------------------------------------
    def _dock(self, title: str, name: str, widget, area) -> QDockWidget:
        dock = QDockWidget(title, self)
        dock.setObjectName(name)
        dock.setWidget(widget)
        self.addDockWidget(area, dock)
        return dock

    def _action(self, text: str, slot, *, shortcut=None, tip: str = "", icon=None, name: str | None = None) -> QAction:
        act = QAction(text, self)
        if icon is not None:
            act.setIcon(self.style().standardIcon(icon))
        if shortcut is not None:
            if isinstance(shortcut, QKeySequence.StandardKey):
                act.setShortcuts(shortcut)
            else:
                act.setShortcut(QKeySequence(shortcut))
        if tip:
            act.setStatusTip(tip)
            act.setToolTip(tip)
        act.triggered.connect(lambda _checked=False: slot())
        act.setObjectName(name or text.lower().replace(" ", "_").replace("…", "").replace("&", ""))
        self.addAction(act)
        return act

    def _build_actions(self) -> None:
        SK, SP = QKeySequence.StandardKey, QStyle.StandardPixmap
        a = self.actions_ = {}
        a["new"] = self._action("&New", self.new_diagram, shortcut=SK.New, icon=SP.SP_FileIcon, tip="Start an empty diagram")
        a["open"] = self._action("&Open…", self.open_dialog, shortcut=SK.Open, icon=SP.SP_DialogOpenButton, tip="Open a diagram file")
        a["save"] = self._action("&Save", self.save, shortcut=SK.Save, icon=SP.SP_DialogSaveButton, tip="Save the diagram")
        a["save_as"] = self._action("Save &as…", self.save_as, shortcut=SK.SaveAs, tip="Save the diagram under a new name")
        a["close"] = self._action("&Close window", self.close, shortcut=SK.Close)
        a["quit"] = self._action("&Quit", self._quit, shortcut=SK.Quit)
        undo = self.document.undo_stack.createUndoAction(self, "&Undo")
        undo.setShortcuts(SK.Undo)
        undo.setIcon(undo_redo_icon("undo"))
        undo.setObjectName("undo")
        redo = self.document.undo_stack.createRedoAction(self, "&Redo")
        # Both desktop habits: Ctrl+Shift+Z and Ctrl+Y (whatever the platform's own key is).
        keys = list(QKeySequence.keyBindings(SK.Redo))
        for extra in (QKeySequence("Ctrl+Y"), QKeySequence("Ctrl+Shift+Z")):
            if extra not in keys:
                keys.append(extra)
        redo.setShortcuts(keys)
        redo.setIcon(undo_redo_icon("redo"))
        redo.setObjectName("redo")
        a["undo"], a["redo"] = undo, redo
        a["cut"] = self._action("Cu&t", self.cut, shortcut=SK.Cut)
        a["copy"] = self._action("&Copy", self.copy, shortcut=SK.Copy)
        a["paste"] = self._action("&Paste", self.paste, shortcut=SK.Paste)
        a["delete"] = self._action("&Delete", self.delete_selection, shortcut=SK.Delete)
        a["select_all"] = self._action("Select &all", self.select_all, shortcut=SK.SelectAll)
        a["rename"] = self._action("&Rename", self.rename_selected, shortcut="F2", tip="Rename the selected block or signal in place")
        a["rotate"] = self._action("&Turn a quarter", self.rotate_selection, shortcut="Ctrl+R", tip="Turn the selected blocks 90° clockwise")
        a["flip"] = self._action("&Mirror", self.flip_selection, shortcut="Ctrl+M", tip="Mirror the selected blocks (feedback paths run right to left)")
        a["flip_v"] = self._action("Mirror &top to bottom", self.flip_selection_vertically, shortcut="Ctrl+Shift+M",
                                   tip="Mirror the selected blocks top to bottom (e.g. a junction's second input from above)")
        a["align_left"] = self._action("Line up &left edges", lambda: self.align("left"))
        a["align_right"] = self._action("Line up &right edges", lambda: self.align("right"))
        a["align_top"] = self._action("Line up &top edges", lambda: self.align("top"))
        a["align_bottom"] = self._action("Line up &bottom edges", lambda: self.align("bottom"))
        a["align_hcenter"] = self._action("Line up centres &vertically", lambda: self.align("hcenter"))
        a["align_vcenter"] = self._action("Line up centres &horizontally", lambda: self.align("vcenter"))
        a["spread_h"] = self._action("Space &evenly across", lambda: self.distribute("h"))
        a["spread_v"] = self._action("Space evenly &down", lambda: self.distribute("v"))
        a["zoom_in"] = self._action("Zoom &in", self.view.zoom_in, shortcut=SK.ZoomIn)
        a["zoom_out"] = self._action("Zoom &out", self.view.zoom_out, shortcut=SK.ZoomOut)
        a["zoom_fit"] = self._action("&Fit to window", self.view.fit_to_view, shortcut="Ctrl+0", tip="Show the whole diagram")
        a["zoom_reset"] = self._action("&Actual size", self.view.zoom_reset, shortcut="Ctrl+1")
        a["check_now"] = self._action("Check &now", self.live.request_now, shortcut=SK.Refresh, tip="Re-check the diagram at once")
        a["about"] = self._action("&About Loopwright", self.show_about, shortcut=None)
        # Editing keys act on the canvas only: in the inspector, paste and delete belong to
        # the field being edited (a matrix table takes a pasted spreadsheet block).
        for k in ("cut", "copy", "paste", "delete", "select_all", "rename", "rotate", "flip", "flip_v"):
            act = a[k]
            self.removeAction(act)
            act.setShortcutContext(Qt.ShortcutContext.WidgetWithChildrenShortcut)
            self.view.addAction(act)

    def _build_menus(self) -> None:
        a = self.actions_
        mb = self.menuBar()
        m = mb.addMenu("&File")
        for k in ("new", "open"):
            m.addAction(a[k])
        self.samples_menu = m.addMenu("Open &sample")
        self.samples_menu.setObjectName("samples_menu")
        for p in sample_paths():
            act = self.samples_menu.addAction(_sample_title(p))
            act.setData(str(p))
            act.triggered.connect(lambda _c=False, path=str(p): self.open_sample(path))
        self.recent_menu = m.addMenu("Open &recent")
        self.recent_menu.aboutToShow.connect(self._fill_recent)
        self._fill_recent()
        m.addSeparator()
        for k in ("save", "save_as"):
            m.addAction(a[k])
        m.addSeparator()
        m.addAction(a["close"])
        m.addAction(a["quit"])
        m = mb.addMenu("&Edit")
        for k in ("undo", "redo", None, "cut", "copy", "paste", "delete", None, "select_all", "rename"):
            m.addSeparator() if k is None else m.addAction(a[k])
        m = mb.addMenu("&Arrange")
        for k in ("rotate", "flip", "flip_v", None, "align_left", "align_right", "align_hcenter", "align_top", "align_bottom", "align_vcenter",
                  None, "spread_h", "spread_v"):
            m.addSeparator() if k is None else m.addAction(a[k])
        m = mb.addMenu("&View")
        for k in ("zoom_in", "zoom_out", "zoom_fit", "zoom_reset", None, "check_now"):
            m.addSeparator() if k is None else m.addAction(a[k])
        m.addSeparator()
        for dock in (self.shelf_dock, self.inspector_dock, self.problems_dock, self.history_dock):
            m.addAction(dock.toggleViewAction())
        theme_menu = m.addMenu("Canvas &colours")
        group = QActionGroup(self)
        for label, choice in (("Follow the system", None), ("Light", False), ("Dark", True)):
            act = theme_menu.addAction(label)
            act.setCheckable(True)
            act.setChecked(choice == self._theme_choice)
            act.triggered.connect(lambda _c=False, ch=choice: self.set_theme_choice(ch))
            group.addAction(act)
        m = mb.addMenu("&Help")
        m.addAction(a["about"])

    def _build_toolbar(self) -> None:
        tb = self.addToolBar("Main")
        tb.setObjectName("main_toolbar")
        a = self.actions_
        for k in ("new", "open", "save", None, "undo", "redo", None, "rotate", "flip", None, "zoom_fit"):
            tb.addSeparator() if k is None else tb.addAction(a[k])

    # Below this window size the panels give way to the canvas (View menu brings them back).
    COMPACT_SIZE = (900, 600)

    def resizeEvent(self, event) -> None:
        super().resizeEvent(event)
        w, h = event.size().width(), event.size().height()
        compact = w < self.COMPACT_SIZE[0] or h < self.COMPACT_SIZE[1]
        if compact and self._hidden_for_room is None:
            docks = [dk for dk in self.findChildren(QDockWidget) if not dk.isHidden() and not dk.isFloating()]
            self._front_docks = [dk for dk in docks if dk.isVisible()] or [self.problems_dock, self.inspector_dock]
            self._hidden_for_room = docks
            for dk in docks:
                dk.hide()
            if docks:
                self.statusBar().showMessage("Small window: the panels make room for the canvas (View menu shows them)", 6000)
        elif not compact and self._hidden_for_room is not None:
            docks, self._hidden_for_room = self._hidden_for_room, None
            for dk in docks:
                dk.show()
            for dk in self._front_docks:  # the same tabs in front as before
                dk.raise_()

    def showEvent(self, event) -> None:
        super().showEvent(event)
        if not self._docks_sized and not self._state_restored:
            # Dock sizes only take once the window has its size: keep the canvas large.
            self._docks_sized = True
            self.resizeDocks([self.problems_dock], [300], Qt.Orientation.Vertical)
            self.resizeDocks([self.problems_dock, self.view_docks["frequency"], self.view_docks["time"]], [330, 520, 520],
                             Qt.Orientation.Horizontal)
            self.resizeDocks([self.shelf_dock, self.inspector_dock], [200, 330], Qt.Orientation.Horizontal)

    # ---- title, status --------------------------------------------------------------------------
    def _on_zoom_changed(self, scale: float) -> None:
        self._zoom_label.setText(f"{scale * 100:.0f} %")

    def _show_refusal(self, message: str) -> None:
        self.statusBar().showMessage(message, 8000)

    def _update_title(self, *_args) -> None:
        d = self.document
        if d.path:
            self._copy_title = None
        title = self._copy_title if (self._copy_title and not d.path) else d.title()
        self.setWindowTitle(f"{title}[*] — Loopwright")
        self.setWindowModified(d.is_dirty)

    def _on_busy(self, busy: bool) -> None:
        if not busy:
            self._checking_timer.stop()
        elif not self._checking_timer.isActive():
            self._checking_timer.start(int(1000 * workers.PROGRESS_AFTER_S))

    def _show_checking(self) -> None:
        if not self.live.is_current():
            # the line of the last result, made when it came (not again on every edit)
            self._model_label.setText("checking…  " + self._live_status)

    def _on_live_result(self, result: LiveResult) -> None:
        self._checking_timer.stop()
        text = status_text(result)
        self._live_status = text
        self._model_label.setText(text)
        self._model_label.setToolTip("\n".join(getattr(result.report, "warnings", ()) or ()) or text)
        found, warnings = _problems_with_culprits(result, self.document.diagram)
        self.scene.set_problems(found)
        self.scene.set_design_states(_design_states(result, self.document.diagram))
        self.scene.set_widths(result.widths)
        self.inspector.set_live_widths(result.widths)
        self.problems.set_problems(found, warnings=warnings)
        count = len(found) + len(warnings)
        self.problems_dock.setWindowTitle(f"Problems ({count})" if count else "Problems")
        self.live_updated.emit(result)

    def _on_selection_changed(self) -> None:
        try:
            self.inspector.show_selection(self.scene.selected_block_ids(), self.scene.selected_wire_ids())
        except RuntimeError:
            pass  # the scene is being torn down

    def _on_diagram_replaced(self) -> None:
        self._update_title()
        self.view.fit_to_view()

    def select_culprits(self, block_ids, wire_ids) -> None:
        if not block_ids and not wire_ids:
            return  # a warning about the whole loop keeps the selection as it is
        self.scene.select_ids(block_ids, wire_ids)
        items = [self.scene.block_items[b] for b in block_ids if b in self.scene.block_items]
        items += [self.scene.wire_items[w] for w in wire_ids if w in self.scene.wire_items]
        if items:
            self.view.centerOn(items[0])

    # ---- files ----------------------------------------------------------------------------------
    def _confirm_discard(self) -> bool:
        """True if it is fine to drop the current diagram (saved, or the user agreed)."""
        drafts = self.inspector.pending_drafts()
        if not self.document.is_dirty and not drafts:
            return True
        # An unapplied model draft is never dropped silently: the question names it.
        title = self.document.title() + (f" (unapplied model drafts: {', '.join(drafts)})" if drafts else "")
        answer = self.dialogs.ask_save_changes(title)
        if answer == "save":
            return self.save()
        return answer == "discard"

    def new_diagram(self) -> None:
        if self._confirm_discard():
            self._copy_title = None
            self.document.replace_diagram(Diagram())
            self.autosaver.clear()

    def open_dialog(self) -> None:
        folder = str(Path(self.document.path).parent) if self.document.path else ""
        path = self.dialogs.open_path(folder)
        if path:
            self.open_path(path)

    def open_path(self, path: str, *, as_untitled: bool = False) -> bool:
        """Open ``path``; on any engine error show its message and change nothing."""
        try:
            diagram = load(path)
        except EngineError as err:
            self.dialogs.error("Cannot open diagram", str(err))
            return False
        if not self._confirm_discard():
            return False
        self._copy_title = None
        self.document.replace_diagram(diagram, path=None if as_untitled else str(Path(path).resolve()))
        self.autosaver.clear()
        if not as_untitled:
            self.recent.add(path)
        return True

    def open_sample(self, path: str) -> bool:
        """Open a bundled sample as a copy under its own title (saving asks where)."""
        if not self.open_path(path, as_untitled=True):
            return False
        self._copy_title = f"{_sample_title(Path(path))} (copy)"
        self._copy_name = Path(path).name
        self._update_title()
        return True

    def _fill_recent(self) -> None:
        self.recent_menu.clear()
        paths = self.recent.paths()
        for p in paths:
            act = self.recent_menu.addAction(p)
            act.triggered.connect(lambda _c=False, path=p: self.open_path(path))
        if not paths:
            act = self.recent_menu.addAction("(none yet)")
            act.setEnabled(False)
        else:
            self.recent_menu.addSeparator()
            self.recent_menu.addAction("Clear this list", self.recent.clear)

    def save(self) -> bool:
        if not self.document.path:
            return self.save_as()
        return self.save_to(self.document.path)

    def save_as(self) -> bool:
        suggestion = self.document.path or (self._copy_name if self._copy_title else None) or f"untitled{FILE_SUFFIX}"
        path = self.dialogs.save_path(suggestion)
        return self.save_to(path) if path else False

    def save_to(self, path: str) -> bool:
        try:
            save(self.document.diagram, path)
        except (EngineError, OSError) as err:
            self.dialogs.error("Cannot save diagram", str(err))
            return False
        self.document.mark_saved(str(Path(path).resolve()))
        self.recent.add(path)
        self.autosaver.clear()
        self.statusBar().showMessage(f"Saved {path}", 4000)
        return True

    def autosave_now(self) -> Path | None:
        """Write the autosave copy if there are unsaved changes."""
        if not self.document.is_dirty:
            return None
        try:
            return self.autosaver.write(self.document.diagram, self.document.path)
        except (EngineError, OSError) as err:
            self.statusBar().showMessage(f"Autosave failed: {err}", 8000)
            return None

    def offer_recovery(self) -> bool:
        """If an earlier run left autosaves behind, offer the newest one; True if recovered."""
        leftovers = [lo for lo in find_leftovers(self.prefs.autosave_dir) if lo.path != self.autosaver.path]
        if not leftovers:
            return False
        newest = leftovers[0]
        recovered = False
        if self.dialogs.ask_recover(newest.describe()):
            try:
                diagram = load(newest.path)
            except EngineError as err:
                self.dialogs.error("Cannot recover", str(err))
            else:
                self.document.replace_diagram(diagram, path=newest.original, dirty=True)
                recovered = True
                self.autosave_now()
        for lo in leftovers:
            lo.discard()
        return recovered

    def closeEvent(self, event) -> None:
        if not self._closing_ok and not self._confirm_discard():
            event.ignore()
            return
        if self._hidden_for_room:
            # The layout saved is the full one, not the one squeezed for a small window.
            self.setUpdatesEnabled(False)
            for dk in self._hidden_for_room:
                dk.show()
        self.settings.setValue("window/state", self.saveState(_LAYOUT_VERSION))
        self._autosave_timer.stop()
        # Do not wait for a check still running on the worker: its result is dropped.
        self.live.shutdown(wait=False)
        self.views.shutdown()
        self.report_writer.shutdown()
        self.pole_dragger.shutdown()
        self.design_marks.shutdown()
        if getattr(self.inspector, "recipe_session", None) is not None:
            self.inspector.recipe_session.shutdown()
        self.autosaver.clear()
        event.accept()

    def _install_design_entries(self) -> None:
        """File ▸ Write report (HTML)… and Hand over the controller…, placed above Close window."""
        from loopwright.gui.report_action import ReportWriter

        self.report_writer = ReportWriter(self)
        self.report_writer.failed.connect(lambda text: self.dialogs.error("Report not written", text))
        file_menu = next(a.menu() for a in self.menuBar().actions() if a.text().replace("&", "") == "File")
        before = self.actions_["close"]
        act = QAction("Write &report (HTML)…", self)
        act.setObjectName("write_report")
        act.setStatusTip("Write a self-contained HTML report of this diagram: model, margins, audit, noise, open views, designs")
        act.triggered.connect(lambda _c=False: self.report_writer.choose_and_write())
        file_menu.insertAction(before, act)
        self.actions_["write_report"] = act
        act = QAction("&Hand over the controller (C, JSON, NPZ)…", self)
        act.setObjectName("handover")
        act.setStatusTip("Discretise the lumped controller, compare its sampled margins and write it for implementation")
        act.triggered.connect(lambda _c=False: self.open_handover())
        file_menu.insertAction(before, act)
        self.actions_["handover"] = act
        file_menu.insertSeparator(before)
        self.handover_dialog = None
        from loopwright.gui.docks.pole_map_drag import PoleDragger

        self.pole_dragger = PoleDragger(self.panels["poles"], self.document, refresh=self.views.refresh_visible, parent=self)
        from loopwright.gui.recipe_editor import DesignMarks

        self.design_marks = DesignMarks(self.document, self.scene, debounce_ms=self.prefs.debounce_ms, parent=self)
        self.pole_dragger.retuned.connect(lambda name: self.statusBar().showMessage(f"{name} redesigned from the dragged pole", 5000))

    def open_handover(self):
        """Open the hand-over dialog on the diagram as it is now (one at a time)."""
        from loopwright.gui.handover_dialog import HandoverDialog

        if self.handover_dialog is not None:
            self.handover_dialog.close()
        self.handover_dialog = HandoverDialog(self.document, self)
        self.handover_dialog.written.connect(lambda files: self.statusBar().showMessage("handed over: " + ", ".join(files), 15000))
        self.handover_dialog.show()
        return self.handover_dialog

    def _quit(self) -> None:
        from PySide6.QtWidgets import QApplication

        QApplication.closeAllWindows()

    # ---- editing ----------------------------------------------------------------------------------
    def _place_from_shelf(self, kind: str, params) -> None:
        centre = self.view.mapToScene(self.view.viewport().rect().center())
        self.scene.place_block(kind, self.scene.free_spot(kind, centre, params), params)

    def _push(self, command) -> bool:
        try:
            self.document.push(command)
        except EngineError as err:
            self.statusBar().showMessage(str(err), 8000)
            return False
        return True

    def delete_selection(self) -> None:
        cmd = DeleteItems(self.document, self.scene.selected_block_ids(), self.scene.selected_wire_ids())
        if not cmd.is_empty():
            self._push(cmd)

    def select_all(self) -> None:
        for item in list(self.scene.block_items.values()) + list(self.scene.wire_items.values()):
            item.setSelected(True)

    def copy(self) -> bool:
        ids = self.scene.selected_block_ids()
        if not ids:
            return False
        QGuiApplication.clipboard().setMimeData(fragment_to_mime(make_fragment(self.document.diagram, ids)))
        return True

    def cut(self) -> None:
        if self.copy():
            cmd = DeleteItems(self.document, self.scene.selected_block_ids(), self.scene.selected_wire_ids())
            cmd.setText("Cut")
            self._push(cmd)

    def paste(self) -> list[str]:
        try:
            fragment = fragment_from_mime(QGuiApplication.clipboard().mimeData())
        except EngineError as err:
            self.statusBar().showMessage(f"Cannot paste: {err}", 8000)
            return []
        if fragment is None or not fragment.blocks:
            self.statusBar().showMessage("The clipboard holds no blocks", 4000)
            return []
        # Beside what is there (the originals, an earlier paste), never on top of it.
        from loopwright.gui.canvas.glyphs import body_rect

        rects = [body_rect(b).translated(float(b.layout.get("x", 0.0)), float(b.layout.get("y", 0.0))) for b in fragment.blocks.values()]
        cmd = PasteFragment(self.document, fragment, offset=self.scene.free_offset(rects, (40.0, 40.0)))
        if not self._push(cmd):
            return []
        self.scene.select_ids(cmd.block_ids)
        return cmd.block_ids

    def rename_selected(self) -> None:
        items = self.scene.selectedItems()
        if len(items) == 1:
            self.view.begin_rename(items[0])

    def rotate_selection(self) -> None:
        d = self.document.diagram
        changes = {b: {"rotation": (int(d.blocks[b].layout.get("rotation", 0) or 0) + 90) % 360} for b in self.scene.selected_block_ids()}
        if changes:
            self._push(MoveBlocks(self.document, changes, text="Turn"))

    def flip_selection(self) -> None:
        d = self.document.diagram
        changes = {b: {"flip": not bool(d.blocks[b].layout.get("flip", False))} for b in self.scene.selected_block_ids()}
        if changes:
            self._push(MoveBlocks(self.document, changes, text="Mirror"))

    def flip_selection_vertically(self) -> None:
        # A top-to-bottom mirror is a left-right mirror followed by a half turn.
        d = self.document.diagram
        changes = {
            b: {"rotation": (int(d.blocks[b].layout.get("rotation", 0) or 0) + 180) % 360,
                "flip": not bool(d.blocks[b].layout.get("flip", False))}
            for b in self.scene.selected_block_ids()
        }
        if changes:
            self._push(MoveBlocks(self.document, changes, text="Mirror top to bottom"))

    def align(self, edge: str) -> None:
        items = [self.scene.block_items[b] for b in self.scene.selected_block_ids()]
        if len(items) < 2:
            return
        rects = {it.block_id: it.body_scene_rect() for it in items}
        pos = {it.block_id: it.pos() for it in items}
        changes = {}
        if edge == "left":
            ref = min(r.left() for r in rects.values())
            changes = {b: {"x": pos[b].x() + ref - r.left()} for b, r in rects.items()}
        elif edge == "right":
            ref = max(r.right() for r in rects.values())
            changes = {b: {"x": pos[b].x() + ref - r.right()} for b, r in rects.items()}
        elif edge == "top":
            ref = min(r.top() for r in rects.values())
            changes = {b: {"y": pos[b].y() + ref - r.top()} for b, r in rects.items()}
        elif edge == "bottom":
            ref = max(r.bottom() for r in rects.values())
            changes = {b: {"y": pos[b].y() + ref - r.bottom()} for b, r in rects.items()}
        elif edge == "hcenter":
            ref = sum(p.x() for p in pos.values()) / len(pos)
            changes = {b: {"x": ref} for b in pos}
        elif edge == "vcenter":
            ref = sum(p.y() for p in pos.values()) / len(pos)
            changes = {b: {"y": ref} for b in pos}
        changes = {b: {k: float(round(v, 6)) for k, v in c.items()} for b, c in changes.items()}
        self._push(MoveBlocks(self.document, changes, text="Line up"))

    def distribute(self, axis: str) -> None:
        items = [self.scene.block_items[b] for b in self.scene.selected_block_ids()]
        if len(items) < 3:
            return
        key = (lambda it: it.pos().x()) if axis == "h" else (lambda it: it.pos().y())
        items.sort(key=key)
        first, last = key(items[0]), key(items[-1])
        step = (last - first) / (len(items) - 1)
        coord = "x" if axis == "h" else "y"
        changes = {it.block_id: {coord: float(first + k * step)} for k, it in enumerate(items)}
        self._push(MoveBlocks(self.document, changes, text="Space evenly"))

    # ---- theme, about ---------------------------------------------------------------------------
    def set_theme_choice(self, dark: bool | None) -> None:
        if dark != self._theme_choice:
            save_canvas_colours(self.settings, dark)
        self._theme_choice = dark
        self.theme = theme_from_palette(dark=dark)
        self.scene.set_theme(self.theme)
        self.shelf.set_theme(self.theme)
        self.view.resetCachedContent()

    def changeEvent(self, event) -> None:
        if event.type() in (QEvent.Type.PaletteChange, QEvent.Type.ApplicationPaletteChange) and self._theme_choice is None:
            self.set_theme_choice(None)
        super().changeEvent(event)

    def about_text(self) -> str:
        return (
            f"<h3>Loopwright {__version__}</h3>"
            "<p>Draw an observer-based control loop with its disturbances and sensor noise, "
            "and get one closed-loop model of exactly that drawing.</p>"
            f"<p><b>{CAUTION}</b></p>"
        )

    def show_about(self) -> None:
        self.dialogs.info("About Loopwright", self.about_text())
