"""Canvas benchmark: open a generated 300-block diagram and pan and zoom it offscreen.

Prints the open time (load the file, build every item, first full paint), frames per
second while panning and while zooming (each frame a synchronous repaint of the whole
viewport), and the time the live model needs for the same diagram on its worker.
python-control draws nothing, so the drawing has no counterpart there; for the model
behind the status bar the script times our assembly beside python-control building the
same closed loop with ``ct.interconnect`` (on a smaller tiling, python-control being slow)
and prints the ratio.

Run:  QT_QPA_PLATFORM=offscreen python bench/bench_canvas.py [--blocks 300]
"""
from __future__ import annotations

import argparse
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import loopwright.gui  # noqa: E402,F401  (applies the PySide6 guard before Qt is used)
from loopwright.engine.diagram import Diagram  # noqa: E402
from loopwright.engine.project import dumps, load  # noqa: E402

SAMPLE = "conveyor_flexible_drive.lwd"


def tiled_diagram(blocks: int) -> Diagram:
    """Copies of the conveyor sample (demo data) laid out on a grid, about ``blocks`` blocks."""
    import importlib.resources

    cell = load(Path(str(importlib.resources.files("loopwright.samples") / SAMPLE)))
    per = len(cell.blocks)
    copies = max(1, round(blocks / per))
    cols = max(1, int(round(copies ** 0.5)))
    out = Diagram()
    for k in range(copies):
        dx, dy = (k % cols) * 900.0, (k // cols) * 600.0
        ids = {}
        for b in cell.blocks.values():
            params = dict(b.params)
            if "plant" in params:
                params["plant"] = f"{params['plant']}_{k}"
            if isinstance(params.get("recipe"), dict) and "plant" in params["recipe"]:
                params["recipe"] = dict(params["recipe"], plant=f"{params['recipe']['plant']}_{k}")
            lay = dict(b.layout, x=b.layout["x"] + dx, y=b.layout["y"] + dy)
            ids[b.id] = out.add_block(b.kind, f"{b.name}_{k}", params, layout=lay, caption=b.caption)
        for w in cell.wires.values():
            from loopwright.engine.diagram import PortRef

            wid = None
            for t in w.targets:
                wid = out.connect(PortRef(ids[w.source.block], w.source.port), PortRef(ids[t.block], t.port),
                                  name=f"{w.name}_{k}" if wid is None else None)
    return out


def _compare_with_python_control(blocks: int) -> None:
    """Time our assembly and python-control's interconnect of the same tiled diagram."""
    import control as ct
    import numpy as np

    sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
    from reference_models import to_python_control

    from loopwright.engine.interconnect import assemble

    d = tiled_diagram(blocks)
    t = time.perf_counter()
    model = assemble(d)
    t_ours = time.perf_counter() - t
    t = time.perf_counter()
    ref, _, _ = to_python_control(d)
    t_ref = time.perf_counter() - t
    ours = np.sort_complex(np.linalg.eigvals(model.A))
    theirs = np.sort_complex(ref.poles())
    gap = float(np.max(np.abs(ours - theirs)) / max(1.0, float(np.max(np.abs(theirs))))) if ours.size else 0.0
    print(f"assembly of {len(d.blocks)} blocks ({model.A.shape[0]} states): loopwright {t_ours * 1e3:.1f} ms, "
          f"python-control {ct.__version__} interconnect {t_ref * 1e3:.1f} ms, ratio {t_ref / t_ours:.1f}x; "
          f"largest relative pole gap {gap:.1e}")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--blocks", type=int, default=300)
    ap.add_argument("--frames", type=int, default=120)
    ap.add_argument("--reference-blocks", type=int, default=60, help="size of the tiling compared with python-control")
    args = ap.parse_args(argv)

    from PySide6.QtCore import QSettings
    from PySide6.QtWidgets import QApplication

    from loopwright.gui.app import _HeadlessDialogs
    from loopwright.gui.main_window import MainWindow
    from loopwright.gui.settings import Preferences
    from loopwright.gui.workers import compute_live_result

    app = QApplication.instance() or QApplication(sys.argv[:1])
    diagram = tiled_diagram(args.blocks)
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "big.lwd"
        path.write_text(dumps(diagram), encoding="utf-8")
        settings = QSettings(str(Path(tmp) / "s.ini"), QSettings.Format.IniFormat)
        win = MainWindow(settings=settings, prefs=Preferences(autosave_dir=Path(tmp) / "a", autosave_interval_s=0),
                         dialogs=_HeadlessDialogs())
        win.resize(1400, 900)
        win.show()
        app.processEvents()
        vp = win.view.viewport()

        t0 = time.perf_counter()
        assert win.open_path(str(path))
        win.view.zoom_reset()
        vp.repaint()
        app.processEvents()
        t_open = time.perf_counter() - t0

        def frames(step):
            times = []
            for k in range(args.frames):
                t = time.perf_counter()
                step(k)
                vp.repaint()
                times.append(time.perf_counter() - t)
            return times

        # Let the window's own live check finish first, so the frame rates below measure
        # drawing alone; the last line repeats the pan while a check runs on the worker.
        t = time.perf_counter()
        while not win.live.is_current() and time.perf_counter() - t < 300:
            app.processEvents()
            time.sleep(0.01)
        t_first_check = time.perf_counter() - t0

        pan = frames(lambda k: win.view.pan_by(25 if (k // 40) % 2 == 0 else -25, 12 if (k // 60) % 2 == 0 else -12))
        zoom = frames(lambda k: win.view.zoom_by(1.03 if (k // 30) % 2 == 0 else 1 / 1.03))
        win.view.fit_to_view()
        whole = frames(lambda k: win.view.pan_by(3 if k % 2 else -3, 0))
        win.view.zoom_reset()
        win.live.request_now()
        busy = frames(lambda k: (app.processEvents(), win.view.pan_by(25 if (k // 40) % 2 == 0 else -25, 0)))
        still_running = not win.live.is_current()

        snapshot = win.document.snapshot()
        win.live.shutdown(wait=True)  # the check started above would compete for the CPU
        t = time.perf_counter()
        res = compute_live_result(snapshot, 0)
        t_live = time.perf_counter() - t

        n_blocks, n_wires = len(win.document.diagram.blocks), len(win.document.diagram.wires)
        print(f"diagram: {n_blocks} blocks, {n_wires} wires, "
              f"{res.report.states if res.report else '?'} states (demo data: tiled conveyor loops)")
        print(f"open (load + items + first paint): {t_open:.3f} s")
        print(f"status bar first shows the model after: {t_first_check:.1f} s")
        for label, ts in (("pan at 100 %", pan), ("zoom in/out", zoom), ("pan, whole diagram in view", whole),
                          ("pan while a check runs" + ("" if still_running else " (it ended)"), busy)):
            print(f"{label:>28}: {1.0 / statistics.mean(ts):7.1f} frames/s mean, "
                  f"{1.0 / max(ts):7.1f} frames/s worst frame ({len(ts)} frames)")
        print(f"live model on the worker (validate + widths + check): {t_live:.3f} s")
        _compare_with_python_control(args.reference_blocks)
        win._closing_ok = True
        win.close()
    return 0


if __name__ == "__main__":
    sys.exit(main())
