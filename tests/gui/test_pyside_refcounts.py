"""PySide6 must not drop references to None, True or False (regression guard for the
dependency pin in pyproject.toml).

PySide6-Essentials 6.12.0 on CPython 3.11 loses one reference per ``Signal.emit()`` and
per call of a Python override of a C++ virtual; CPython 3.11 then aborts ("bool_dealloc",
"none_dealloc") after a few hundred calls. 3.12+ makes these objects immortal, which hides
it. The check runs in a fresh process because the failure is an interpreter abort.
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap

import pytest

pytestmark = pytest.mark.qt

CALLS = 10_000
# A handful of references may come and go with caches and the objects made here; a leak
# of one reference per call would move the counts by thousands.
DRIFT_BOUND = 200

_SCRIPT = textwrap.dedent(
    """
    import json, sys
    from PySide6.QtCore import QCoreApplication, QEvent, QObject, QRectF, Signal
    from PySide6.QtGui import QImage, QPainter
    from PySide6.QtWidgets import QApplication, QGraphicsItem, QGraphicsScene

    CALLS = int(sys.argv[1])
    app = QApplication([])

    class Emitter(QObject):
        fired = Signal(bool)

    class Receiver(QObject):
        def __init__(self):
            super().__init__()
            self.events = 0
            self.values = 0

        def on_fired(self, value):  # returns None to the emitter
            self.values += 1

        def customEvent(self, event):  # a C++ virtual overridden in Python; returns None
            self.events += 1

    class Dot(QGraphicsItem):
        painted = 0

        def boundingRect(self):
            return QRectF(0, 0, 2, 2)

        def paint(self, painter, option, widget=None):  # Qt calls it on every render
            Dot.painted += 1

    def counts():
        return [sys.getrefcount(None), sys.getrefcount(True), sys.getrefcount(False)]

    emitter, receiver = Emitter(), Receiver()
    emitter.fired.connect(receiver.on_fired)
    scene = QGraphicsScene()
    scene.addItem(Dot())
    image = QImage(4, 4, QImage.Format.Format_ARGB32)
    before = counts()
    for i in range(CALLS):
        emitter.fired.emit(i % 2 == 0)
    for _ in range(CALLS):
        QCoreApplication.sendEvent(receiver, QEvent(QEvent.Type.User))
    painter = QPainter(image)
    for _ in range(CALLS):
        scene.render(painter)
    painter.end()
    after = counts()
    print(json.dumps({"before": before, "after": after, "values": receiver.values,
                      "events": receiver.events, "painted": Dot.painted}))
    """
)


def test_signals_and_python_overrides_keep_the_reference_counts_of_singletons():
    env = dict(os.environ, QT_QPA_PLATFORM="offscreen")
    proc = subprocess.run([sys.executable, "-c", _SCRIPT, str(CALLS)], env=env, capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, f"the interpreter did not exit normally ({proc.returncode}): {proc.stderr[-400:]}"
    out = json.loads(proc.stdout.strip().splitlines()[-1])
    assert (out["values"], out["events"], out["painted"]) == (CALLS, CALLS, CALLS)
    for name, before, after in zip(("None", "True", "False"), out["before"], out["after"]):
        assert abs(after - before) <= DRIFT_BOUND, f"{name}: reference count moved from {before} to {after}"
