"""File ▸ Write report: the HTML report of the open diagram, with the canvas and the open views.

The pictures are taken on the GUI thread (Qt paints the canvas and each open, current
plot panel into SVG); the report itself (:func:`loopwright.engine.report_html.report_html`)
is computed and written on the task worker from a snapshot. The headless
``loopwright report FILE --html OUT`` uses :func:`diagram_svg` of this module through the
launcher, so the app and the command line draw the diagram the same way.
"""
from __future__ import annotations

from pathlib import Path

from PySide6.QtCore import QBuffer, QByteArray, QCoreApplication, QIODevice, QObject, QRect, QRectF, Qt, Signal
from PySide6.QtGui import QColor, QPainter
from PySide6.QtSvg import QSvgGenerator
from PySide6.QtWidgets import QFileDialog, QGraphicsItem, QWidget

from loopwright.engine.output_paths import check_export_output
from loopwright.engine.report_html import Picture, report_html, write_report_html
from loopwright.gui.workers import Tasks

__all__ = ["scene_svg", "diagram_svg", "widget_png", "open_view_pictures", "ReportWriter"]


def _svg_text(paint, width: int, height: int, title: str) -> str:
    buf = QBuffer()
    buf.open(QIODevice.OpenModeFlag.WriteOnly)
    gen = QSvgGenerator()
    gen.setOutputDevice(buf)
    gen.setSize(QRect(0, 0, width, height).size())
    gen.setViewBox(QRect(0, 0, width, height))
    gen.setTitle(title)
    painter = QPainter(gen)
    paint(painter)
    painter.end()
    data = bytes(QByteArray(buf.data()))
    buf.close()
    return data.decode("utf-8")


def scene_svg(scene, *, margin: float = 24.0) -> str:
    """The canvas's blocks and wires as SVG (no grid, light background), cropped to the items."""
    src = scene.itemsBoundingRect().adjusted(-margin, -margin, margin, margin)
    w, h = max(1, int(src.width())), max(1, int(src.height()))
    old_brush, old_grid = scene.backgroundBrush(), scene.grid_size
    scene.setBackgroundBrush(QColor("#ffffff"))
    scene.grid_size = 0.0  # the snap grid helps drawing, not reading
    # cached items would paint their pixmaps; uncached they paint vectors and real text
    cached = [(it, it.cacheMode()) for it in scene.items() if it.cacheMode() != QGraphicsItem.CacheMode.NoCache]
    for it, _mode in cached:
        it.setCacheMode(QGraphicsItem.CacheMode.NoCache)
    # the selection is the user's focus in the app, not part of the drawing; the inspector must not
    # notice it going and coming back
    selected = scene.selectedItems()
    blocked = scene.blockSignals(True)
    for it in selected:
        it.setSelected(False)

    def paint(p):
        scene.render(p, QRectF(0, 0, w, h), src)

    try:
        return _svg_text(paint, w, h, "Loopwright diagram")
    finally:
        for it in selected:
            it.setSelected(True)
        scene.blockSignals(blocked)
        for it, mode in cached:
            it.setCacheMode(mode)
        scene.grid_size = old_grid
        scene.setBackgroundBrush(old_brush)


def diagram_svg(diagram) -> str:
    """Draw ``diagram`` with the canvas renderer, offscreen (needs a QGuiApplication)."""
    from loopwright.gui.canvas.scene import DiagramScene
    from loopwright.gui.document import Document
    from loopwright.gui.theme import theme_from_palette

    doc = Document(diagram.copy())
    scene = DiagramScene(doc, theme_from_palette(dark=False))
    try:
        return scene_svg(scene)
    finally:
        scene.deleteLater()
        doc.deleteLater()


def widget_png(widget: QWidget) -> bytes:
    """A widget (a plot panel's plot area) as PNG bytes, as it looks on screen.

    PNG rather than SVG: pyqtgraph draws markers from a pixmap atlas, which Qt's SVG
    painter embeds as tiny images that browsers show badly.
    """
    buf = QBuffer()
    buf.open(QIODevice.OpenModeFlag.WriteOnly)
    widget.grab().save(buf, "PNG")
    data = bytes(QByteArray(buf.data()))
    buf.close()
    return data


_PAIR_VIEWS = ("frequency", "time", "singular_values")  # views that show the kept pairs
_HIDDEN_VIEW_SIZE = (640, 420)  # pixels: a view behind a tab is drawn at least this large in the report


def open_view_pictures(window) -> tuple[list[Picture], list[str]]:
    """Pictures of the plot panels the user has open and whose answer is current.

    Returns
    -------
    (pictures, skipped)
        ``skipped`` names open panels that were not current (waiting, or hidden behind a
        tab since the last edit); the report says so.
    """
    from loopwright.gui.docks.install import PANEL_TITLES

    pictures, skipped = [], []
    revision = window.document.revision
    for key, dock in window.view_docks.items():
        if not dock.toggleViewAction().isChecked():
            continue
        panel = window.panels[key]
        title = PANEL_TITLES[key]
        if key in _PAIR_VIEWS and not panel.pairs:
            continue  # open but asked nothing yet: an empty plot says nothing to a reviewer
        if window.views._fresh.get(key) != revision or getattr(panel, "data", True) is None:
            skipped.append(title)
            continue
        note = panel.message.text() if panel.message.isVisible() else ""
        # behind a tab the panel was never laid out at a readable size: lay it out for the picture
        png = _picture_of_hidden_panel(panel) if dock.visibleRegion().isEmpty() else widget_png(panel.picture_widget())
        pictures.append(Picture(f"{title} (as open in the app)", png=png, note=note))
    return pictures, skipped


def _picture_of_hidden_panel(panel) -> bytes:
    """A PNG of a panel hidden behind a tab, laid out at least ``_HIDDEN_VIEW_SIZE``.

    Behind a tab the panel keeps whatever size its dock had (a dock's layout overrides a
    resize), and a panel that arranges itself by size (the loop-break view puts its plot
    beside the list when wide) would be pictured squeezed. It is lifted out of its dock for
    the picture, drawn offscreen at the readable size, and put back.
    """
    dock = panel.parentWidget()
    w = max(panel.width(), _HIDDEN_VIEW_SIZE[0])
    h = max(panel.height(), _HIDDEN_VIEW_SIZE[1])
    panel.setParent(None)
    panel.setAttribute(Qt.WidgetAttribute.WA_DontShowOnScreen, True)
    try:
        panel.resize(w, h)
        panel.show()
        QCoreApplication.sendPostedEvents(None, 0)
        if panel.layout() is not None:
            panel.layout().activate()
        QCoreApplication.sendPostedEvents(None, 0)
        return widget_png(panel.picture_widget())
    finally:
        panel.hide()
        panel.setAttribute(Qt.WidgetAttribute.WA_DontShowOnScreen, False)
        if dock is not None:
            dock.setWidget(panel)


def _build_and_write(snapshot, path: str, origin: str, diagram_picture, views, reading) -> str:
    """Worker side: compute the report from the snapshot and write it."""
    text = report_html(snapshot, origin=origin, diagram_picture=diagram_picture, views=views)
    write_report_html(path, text, reading=reading)
    return path


class ReportWriter(QObject):
    """Writes the open diagram's report; ``written(path)`` or ``failed(message)`` follow."""

    written = Signal(str)
    failed = Signal(str)

    def __init__(self, window, parent=None):
        super().__init__(parent or window)
        self._w = window
        self.tasks = Tasks(self)
        self.tasks.finished.connect(self._on_finished)

    def choose_and_write(self) -> None:
        doc = self._w.document
        stem = Path(doc.path).stem if doc.path else "diagram"
        folder = str(Path(doc.path).parent) if doc.path else ""
        path, _ = QFileDialog.getSaveFileName(self._w, "Write the report", str(Path(folder) / f"{stem}_report.html"),
                                              "HTML report (*.html);;All files (*)")
        if path:
            self.write_to(path)

    def write_to(self, path: str) -> bool:
        """Take the pictures now and write the report on the worker; False when refused at once."""
        doc = self._w.document
        reading = [doc.path] if doc.path else []
        try:
            check_export_output(path, reading=reading)
        except Exception as err:  # noqa: BLE001 - an engine refusal, shown in one line
            self.failed.emit(str(err))
            return False
        diagram_picture = Picture("The diagram as drawn", svg=scene_svg(self._w.scene))
        views, skipped = open_view_pictures(self._w)
        if skipped:
            views.append(Picture("Views not included", note="Open but not current when the report was written: " + ", ".join(skipped)
                                 + ". Bring them to the front and write the report again to include them."))
        if not views:
            views = None  # nothing open: the engine draws the standard set
        origin = doc.path or doc.title()
        self.tasks.submit("report", _build_and_write, doc.snapshot(), path, origin, diagram_picture, views, reading)
        self._w.statusBar().showMessage(f"writing the report to {path}…")
        return True

    def _on_finished(self, result) -> None:
        if result.error is not None:
            self._w.statusBar().showMessage(f"report not written: {result.error}", 15000)
            self.failed.emit(result.error)
            return
        self._w.statusBar().showMessage(f"report written: {result.value}", 15000)
        self.written.emit(result.value)

    def shutdown(self) -> None:
        self.tasks.shutdown(wait=False)
