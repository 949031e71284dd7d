"""Views latency: from an edit to every open view redrawn, in a real (offscreen) window.

For each size a chain of observer-based loops (``loops.view_loop``, demo data) is saved to
a temporary file and opened in the main window with four views side by side: frequency
view, time view, pole map and loop-break view, two kept pairs and the loop break at
``P0.u``. Then the state-feedback gain ``K0`` is edited (an undoable command, as the
inspector does) ``--edits`` times; each latency runs from the push of the command to the
moment the last of the four views has drawn the new revision and its plot has been painted
on screen (the first paint event of the view's plot after its new answer was set, as the
event loop delivers it; no paint is forced).

Targets (issue 11): at most 100 ms for 50 states, at most 1 s for 400 states.

The same computations are timed one by one on this thread (ours), and the nearest
python-control calls beside them (frequency responses of both pairs on our grids, step
responses on our time grid, the poles, ``stability_margins`` of the loop transfer), and
the ratio printed. The path audit of the largest loop is timed too, with the time from
pressing Stop to the worker being free again.

The machine is shared: the script prints the load average, and both wall-clock and CPU
seconds for the engine parts. OpenBLAS threads on small matrices only spin on two busy
cores; run once as is and once with ``OPENBLAS_NUM_THREADS=1`` to see the difference.

Run:  QT_QPA_PLATFORM=offscreen python bench/bench_views.py [--states 50 400] [--edits 7]
"""
from __future__ import annotations

import argparse
import copy
import os
import statistics
import sys
import tempfile
import time
import warnings
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

import numpy as np  # noqa: E402

import loopwright.gui  # noqa: E402,F401  (applies the PySide6 guard before Qt is used)
from loops import view_loop  # noqa: E402
from loopwright.engine.project import save  # noqa: E402

VIEWS = ("frequency", "time", "poles", "loop_break")


def _wait(app, until, timeout_s: float = 120.0) -> None:
    """Run the event loop until ``until()`` holds.

    The loop sleeps between events, as the app's own does; ``until`` is checked every two
    milliseconds by a timer. (Polling ``processEvents`` in a busy loop instead held the
    interpreter lock for a third of the time the workers needed it, which slowed exactly
    what is measured; the times themselves are taken inside the panels' hooks.)
    """
    from PySide6.QtCore import QEventLoop, QTimer

    if until():
        return
    loop = QEventLoop()
    end = time.perf_counter() + timeout_s
    timed_out = []

    def check():
        if until():
            loop.quit()
        elif time.perf_counter() > end:
            timed_out.append(True)
            loop.quit()

    timer = QTimer()
    timer.setInterval(2)
    timer.timeout.connect(check)
    timer.start()
    loop.exec()
    timer.stop()
    if timed_out:
        raise TimeoutError("the views did not finish")


def _window(app, tmp: Path, debounce_ms: int, views=VIEWS):
    from PySide6.QtCore import QSettings, Qt

    from loopwright.gui.main_window import MainWindow
    from loopwright.gui.settings import Preferences

    prefs = Preferences(autosave_dir=tmp / "autosave", autosave_interval_s=0, debounce_ms=debounce_ms, dark=False)
    win = MainWindow(settings=QSettings(str(tmp / "s.ini"), QSettings.Format.IniFormat), prefs=prefs)
    win.resize(1600, 1000)
    win.show()
    # four views side by side along the bottom (the default layout tabs some of them)
    for key in views:
        win.addDockWidget(Qt.DockWidgetArea.BottomDockWidgetArea, win.view_docks[key], Qt.Orientation.Horizontal)
        win.view_docks[key].show()
    for key, dock in win.view_docks.items():
        if key not in views:
            dock.hide()  # exactly the views asked for are open (the target's four by default)
    return win


def measure_edits(app, states: int, edits: int, debounce_ms: int, tmp: Path, views=VIEWS, timeout_s: float = 120.0) -> dict:
    """Latencies (s) of ``edits`` gain edits on a ``states``-state loop with ``views`` open."""
    from loopwright.gui.commands import SetParams

    path = tmp / f"loop_{states}.lwd"
    save(view_loop(states), path)
    win = _window(app, tmp, debounce_ms, views)
    drawn: dict[str, int] = {}
    drawn_at: dict[str, float] = {}
    painted: dict[str, int] = {}  # the revision each view's plot last painted after drawing
    painted_at: dict[str, float] = {}
    errors: dict[str, str] = {}
    doc = win.document
    for key in views:
        panel = win.panels[key]
        original = panel.show_value

        def recorder(value, _orig=original, _key=key):
            _orig(value)
            drawn[_key] = doc.revision
            drawn_at[_key] = time.perf_counter()

        panel.show_value = recorder
        original_error = panel.show_error

        def error_recorder(text, _orig=original_error, _key=key):
            _orig(text)
            errors[_key] = text
            drawn[_key] = doc.revision

        panel.show_error = error_recorder
        canvas = panel.canvas
        paint = canvas.paintEvent

        def paint_recorder(event, _paint=paint, _key=key):
            _paint(event)
            if drawn.get(_key) == doc.revision and painted.get(_key) != doc.revision:
                painted[_key] = doc.revision
                painted_at[_key] = time.perf_counter()

        canvas.paintEvent = paint_recorder
    # when the first view job and the live check were sent after each edit: an undoable
    # command starts them at once (the debounce preference only gathers edits that arrive
    # while the views compute, which this bench never does)
    sent: dict[str, float] = {}
    submit, request = win.views.jobs.submit, win.live.request_now

    def recording_submit(*args, **kwargs):
        sent.setdefault("views", time.perf_counter())
        return submit(*args, **kwargs)

    def recording_request():
        sent.setdefault("live", time.perf_counter())
        return request()

    win.views.jobs.submit = recording_submit
    win.live.request_now = recording_request
    win.open_path(str(path))
    _wait(app, lambda: all(drawn.get(k) == doc.revision for k in views) and win.views.is_idle(), timeout_s)
    kid = doc.diagram.block_by_name("K0").id
    base = copy.deepcopy(doc.diagram.blocks[kid].params)
    latencies, computes, cpu, per_view, per_paint = [], [], [], {k: [] for k in views}, {k: [] for k in views}
    window_cpu = []  # CPU of the window's own thread, from the push to all being idle again
    started: dict[str, list] = {"views": [], "live": []}
    for i in range(edits):
        params = copy.deepcopy(base)
        params["K"] = (np.asarray(base["K"]) * (1.0 + 0.02 * (i + 1))).tolist()
        sent.clear()
        t0, c0, m0 = time.perf_counter(), time.process_time(), time.thread_time()
        doc.push(SetParams(doc, kid, params))
        _wait(app, lambda: all(drawn.get(k) == doc.revision for k in views), timeout_s)
        t1 = time.perf_counter()
        _wait(app, lambda: all(painted.get(k) == doc.revision for k in views), timeout_s)
        latencies.append(max(painted_at[k] for k in views) - t0)
        cpu.append(time.process_time() - c0)  # every thread of the process: workers, GUI, BLAS
        computes.append(t1 - t0)
        for key in views:
            per_view[key].append(drawn_at[key] - t0)
            per_paint[key].append(painted_at[key] - t0)
        _wait(app, lambda: win.views.is_idle() and win.live.is_current(), timeout_s)
        window_cpu.append(time.thread_time() - m0)
        for what in started:
            started[what].append(sent.get(what, float("nan")) - t0)
    win._closing_ok = True
    win.live.shutdown()
    win.views.shutdown()
    win.close()
    app.processEvents()
    return {"latency": latencies, "until_drawn": computes, "cpu": cpu, "per_view": per_view, "per_paint": per_paint, "errors": errors,
            "started": started, "window_cpu": window_cpu}


def time_engine_parts(states: int, views=VIEWS) -> dict:
    """Each open view's own job (what its panel sends to the worker), on this thread: (wall s, cpu s)."""
    from loopwright.gui.docks.frequency import FrequencyPanel
    from loopwright.gui.docks.loop_break import LoopBreakPanel
    from loopwright.gui.docks.poles import PoleMapPanel
    from loopwright.gui.docks.time import TimePanel
    from loopwright.gui.view_commands import pairs_of

    d = view_loop(states)
    pairs = pairs_of(d)
    out = {}
    for panel in (FrequencyPanel(), TimePanel(), PoleMapPanel(), LoopBreakPanel()):
        if panel.key not in views:
            continue
        panel.set_pairs(pairs)
        fn, args, kwargs = panel.job(d, pairs)
        best = None
        for _ in range(3):
            w0, c0 = time.perf_counter(), time.process_time()
            fn(*args, **kwargs)
            t = (time.perf_counter() - w0, time.process_time() - c0)
            best = t if best is None or t[0] < best[0] else best
        out[panel.key] = best
    return out


def time_python_control(states: int) -> tuple[float, str]:
    """The nearest python-control calls for the same four views (wall s), and what failed."""
    import control as ct

    from loopwright.engine.interconnect import assemble
    from loopwright.engine.margins import loop_transfer
    from loopwright.engine.views_data import frequency_views, time_grid
    from loopwright.gui.view_commands import pairs_of

    d = view_loop(states)
    model = assemble(d)
    pairs = pairs_of(d)
    grids = [r.w_rad_s for r in frequency_views(d, pairs, drawing=True)]
    t = time_grid(d, model)
    t0 = time.perf_counter()
    for (src, sig), w in zip(pairs, grids):
        A, B, C, D = model.pair(model.resolve_input(src), model.resolve_signal(sig))
        sys_p = ct.ss(A, B, C, D)
        ct.frequency_response(sys_p, w)
        ct.step_response(sys_p, t)
    ct.poles(ct.ss(model.A, model.B, model.C, model.D))
    A, B, C, D = loop_transfer(d, "P0.u")
    failed = ""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # its own warnings are not what is timed
        try:
            ct.stability_margins(ct.ss(A, B, C, D))
        except (np.linalg.LinAlgError, ValueError) as err:  # its polynomial route on a large loop
            failed = f"stability_margins failed ({err})"
    return time.perf_counter() - t0, failed


def measure_audit(app, states: int, tmp: Path, route: str = "auto", full: bool = True, run_s: float = 3.0) -> dict:
    """The audit in the window: its full time (when ``full``), when the busy line showed,
    its progress text after ``run_s`` seconds, and the time from Stop to the worker being free.

    ``route`` other than ``"auto"`` makes the audit panel's engine call take that route
    (:func:`loopwright.engine.audit.path_audit`'s ``route``), to time the Stop of each.
    """
    import functools

    import loopwright.gui.docks.audit as audit_dock

    original = audit_dock.path_audit
    if route != "auto":
        audit_dock.path_audit = functools.partial(original, route=route)
    try:
        return _measure_audit(app, states, tmp, full, run_s)
    finally:
        audit_dock.path_audit = original


def _measure_audit(app, states: int, tmp: Path, full: bool, run_s: float) -> dict:
    path = tmp / f"audit_{states}.lwd"
    save(view_loop(states), path)
    win = _window(app, tmp, 20)
    win.open_path(str(path))
    _wait(app, lambda: win.views.is_idle() and win.live.is_current())
    dock, panel = win.view_docks["audit"], win.panels["audit"]
    dock.show()
    dock.raise_()
    app.processEvents()
    _wait(app, lambda: win.views.is_idle(), timeout_s=1200.0)
    total, rows = float("nan"), 0
    if full:
        t0 = time.perf_counter()
        win.views.refresh("audit")
        _wait(app, lambda: win.views.is_idle(), timeout_s=1200.0)
        total = time.perf_counter() - t0
        rows = len(panel.rows)
    else:
        panel.stop_button.click()  # the audit the dock started when shown
        _wait(app, lambda: win.views.jobs.worker_idle())
    # again, and Stop after run_s seconds; the window must stay responsive meanwhile
    t0 = time.perf_counter()
    win.views.refresh("audit")
    _wait(app, lambda: panel.waiting.isVisible() or win.views.is_idle())
    shown_after = time.perf_counter() - t0
    if not panel.waiting.isVisible():  # done before the busy line was due: nothing to stop
        win._closing_ok = True
        win.live.shutdown()
        win.views.shutdown()
        win.close()
        app.processEvents()
        return {"full": total, "rows": rows, "busy_shown_after": float("nan"), "finished_after": shown_after,
                "progress": "", "stop_to_free": float("nan"), "longest_event_loop_turn": float("nan")}
    longest_turn, last = 0.0, time.perf_counter()
    while time.perf_counter() - t0 < run_s:
        app.processEvents()
        now = time.perf_counter()
        longest_turn, last = max(longest_turn, now - last), now
        time.sleep(0.002)
    progress = panel.progress_text()
    t1 = time.perf_counter()
    panel.stop_button.click()
    _wait(app, lambda: win.views.jobs.worker_idle())
    stop_latency = time.perf_counter() - t1
    win._closing_ok = True
    win.live.shutdown()
    win.views.shutdown()
    win.close()
    app.processEvents()
    return {"full": total, "rows": rows, "busy_shown_after": shown_after, "progress": progress, "stop_to_free": stop_latency,
            "longest_event_loop_turn": longest_turn}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--states", type=int, nargs="+", default=[50, 400])
    ap.add_argument("--edits", type=int, default=7)
    ap.add_argument("--debounce-ms", type=int, default=150, help="the window's debounce preference (the app's default)")
    ap.add_argument("--no-audit", action="store_true")
    ap.add_argument("--views", nargs="+", choices=VIEWS, default=list(VIEWS),
                    help="the views open during the edits (default: the four of the target)")
    ap.add_argument("--timeout", type=float, default=120.0, help="seconds to wait for the views after opening or an edit")
    ap.add_argument("--no-full-audit", action="store_true", help="time the audit's progress and Stop only, not a whole run")
    ap.add_argument("--no-reference", action="store_true", help="skip the python-control timings (repeated runs side by side)")
    args = ap.parse_args(argv)
    import control as ct
    from PySide6.QtWidgets import QApplication

    app = QApplication.instance() or QApplication([])
    print(f"load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores; OPENBLAS_NUM_THREADS={os.environ.get('OPENBLAS_NUM_THREADS', 'unset')}; "
          f"python-control {ct.__version__}")
    targets = {50: 0.1, 400: 1.0}
    with tempfile.TemporaryDirectory() as tmp_name:
        tmp = Path(tmp_name)
        for n in args.states:
            res = measure_edits(app, n, args.edits, args.debounce_ms, tmp, tuple(args.views), args.timeout)
            lat = res["latency"]
            target = targets.get(n) if tuple(args.views) == VIEWS else None  # the target is for the four views
            verdict = "" if target is None else (f"  target {target * 1000:.0f} ms: " + ("met" if statistics.median(lat) <= target else "MISSED"))
            print(f"\n{n} states, views open: {', '.join(args.views)}; {len(lat)} edits of K0 (debounce preference {args.debounce_ms} ms):")
            for key, text in res["errors"].items():
                print(f"  note: the {key} view answered with a message: {text}")
            print(f"  edit -> every view redrawn: median {statistics.median(lat) * 1000:.0f} ms, "
                  f"min {min(lat) * 1000:.0f} ms, max {max(lat) * 1000:.0f} ms{verdict}")
            print(f"  CPU per edit (all threads of the process): median {statistics.median(res['cpu']) * 1000:.0f} ms; "
                  f"of the window's own thread (until all is idle again): median {statistics.median(res['window_cpu']) * 1000:.0f} ms")
            print("  work sent after (median ms): " + ", ".join(f"{k} {statistics.median(v) * 1000:.1f}" for k, v in res["started"].items())
                  + f" (the debounce preference, {args.debounce_ms} ms, is not waited for: each edit arrives with the window idle)")
            print("  each view's answer set, and painted, after (median ms): "
                  + ", ".join(f"{k} {statistics.median(v) * 1000:.0f}/{statistics.median(res['per_paint'][k]) * 1000:.0f}"
                              for k, v in res["per_view"].items()))
            parts = time_engine_parts(n, tuple(args.views))
            ours = sum(w for w, _c in parts.values())
            print("  engine, one view at a time on this thread (wall / cpu ms): "
                  + ", ".join(f"{k} {w * 1000:.0f}/{c * 1000:.0f}" for k, (w, c) in parts.items())
                  + f"; total {ours * 1000:.0f} ms")
            if args.no_reference:
                continue
            t_ct, failed = time_python_control(n)
            print(f"  python-control, nearest calls for the same views: {t_ct * 1000:.0f} ms   ratio {t_ct / ours:.1f}x "
                  "(python-control's margins are not certified peak gains, and it draws no disk margin)"
                  + (f"; note: its {failed}" if failed else ""))
        if not args.no_audit:
            n = max(args.states)
            for route in ("whole model", "block by block"):
                a = measure_audit(app, n, tmp, route, full=route == "whole model" and not args.no_full_audit)
                whole = f"{a['rows']} paths in {a['full']:.1f} s; " if a["rows"] else ""
                if "finished_after" in a:
                    print(f"\npath audit, {n} states, {route} route: {whole}finished in {a['finished_after'] * 1000:.0f} ms, "
                          "before the busy line was due (half a second)")
                    continue
                print(f"\npath audit, {n} states, {route} route: {whole}the busy line showed after "
                      f"{a['busy_shown_after'] * 1000:.0f} ms; after 3 s it said \"{a['progress']}\"; longest event-loop turn "
                      f"{a['longest_event_loop_turn'] * 1000:.0f} ms; Stop -> worker free in {a['stop_to_free'] * 1000:.0f} ms")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
