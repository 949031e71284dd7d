"""What the app's plot panels show, computed from an assembled model or a diagram.

Each function is pure: it takes a diagram snapshot or an :class:`AssembledModel` and the
names the user picked, and returns plain arrays in physical units (rad/s, dB, degrees,
seconds). The panels only draw them; the CLI's ``freq`` and ``time`` commands use the same
grids and responses, so the app and the command line agree number for number.

A *pair* names one input and one output: the input is a source name or
``inject:<signal>`` (the injection on a signal), the output a signal name.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

from loopwright.engine.errors import AnalysisError, EngineError, ParameterError

__all__ = [
    "SharedModel",
    "PairResponse",
    "pair_frequency_response",
    "drawing_frequency_grid",
    "frequency_views",
    "singular_values",
    "singular_value_views",
    "time_grid",
    "PairRun",
    "pair_time_response",
    "time_views",
    "estimation_error_names",
    "damping_guides",
    "disk_exclusion_circle",
    "LoopBreakView",
    "loop_break_view",
    "NoiseBar",
    "noise_bars",
    "MAX_POINTS",
]

#: A frequency grid beyond this many points is a typing slip, not a wish (memory grows with it).
MAX_POINTS = 200_000


class SharedModel:
    """What every view of one diagram snapshot needs, computed once and shared.

    The app's views of one revision all start from the same closed loop: the assembled
    model, its one Schur reduction (balanced; the frequency and singular-value views
    evaluate their responses with it, and the pole map takes the poles and their condition
    numbers from it), the check report (pole map). Each is computed on first use and kept; a view asked for the same
    pair's frequency response as another view gets the same answer object. The snapshot
    must not change afterwards (the app hands each revision a fresh copy). Several threads
    may ask at once: each item is computed by the first that asks, the others wait for it.

    Parameters
    ----------
    diagram : Diagram
        A snapshot of the diagram.
    """

    def __init__(self, diagram):
        import threading

        self.diagram = diagram
        self._memo: dict = {}
        self._lock = threading.Lock()
        self._key_locks: dict = {}

    def _get(self, key, make):
        import threading

        with self._lock:
            if key in self._memo:
                return self._memo[key]
            key_lock = self._key_locks.setdefault(key, threading.Lock())
        # one lock per item: a thread computing the frequency responses does not hold up
        # another that only needs the model (items depend on each other without cycles)
        with key_lock:
            with self._lock:
                if key in self._memo:
                    return self._memo[key]
            value = make()
            with self._lock:
                self._memo[key] = value
            return value

    @property
    def model(self):
        """The assembled closed-loop model (:func:`interconnect.assemble`)."""
        from loopwright.engine.interconnect import assemble

        # the snapshot is the views' own and is not changed: the model keeps it (no copy),
        # so the loop-break view can break this very diagram with the realisations made here
        return self._get("model", lambda: assemble(self.diagram, take=True))

    @property
    def reduced(self):
        """The one Schur reduction of the closed loop's ``A`` (:func:`eigen.balanced_reduction`):
        the only O(n^3) decomposition of ``A`` the pole map and the frequency views need."""
        from loopwright.engine.eigen import balanced_reduction

        return self._get("reduced", lambda: balanced_reduction(self.model.A))

    @property
    def poles(self) -> np.ndarray:
        """Eigenvalues of the closed loop's ``A`` (the diagonal of its Schur form)."""
        return self._get("poles", lambda: self.reduced.poles)

    @property
    def stable(self) -> bool:
        """True when every pole has a negative real part (:func:`norms.is_stable_matrix`)."""
        from loopwright.engine.norms import is_stable_matrix

        return self._get("stable", lambda: is_stable_matrix(self.model.A, eigenvalues=self.poles if self.model.A.size else None))

    @property
    def report(self):
        """The check report (:func:`check.summarize`): the poles and the separation check."""
        from loopwright.engine.check import summarize

        return self._get("report", lambda: summarize(self.diagram, model=self.model, reduced=self.reduced))

    def assembled(self):
        """The assembled model if it has been made already, else None (never assembles)."""
        with self._lock:
            return self._memo.get("model")

    def remember(self, key, make):
        """``make()`` the first time ``key`` is asked for, the same object afterwards."""
        return self._get(("user", key), make)


# ---------------------------------------------------------------------------------------
# frequency


@dataclass(frozen=True)
class PairResponse:
    """The frequency response of one pair on a grid refined at its peaks.

    Attributes
    ----------
    input_group, signal : str
        The resolved input group and signal.
    w_rad_s : (k,) ndarray
        Frequencies, rad/s.
    response : (k, p, m) complex ndarray
    input_names, output_names : list of str
        Component names of the columns and rows.
    """

    input_group: str
    signal: str
    w_rad_s: np.ndarray
    response: np.ndarray
    input_names: list[str]
    output_names: list[str]

    @cached_property
    def mag_db(self) -> np.ndarray:
        """(k, p, m) magnitude in dB (computed once: a view reads it for every element)."""
        from loopwright.engine.responses import magnitude_db

        return magnitude_db(self.response)

    @cached_property
    def phase_deg(self) -> np.ndarray:
        """(k, p, m) phase in degrees, unwrapped along frequency (computed once)."""
        from loopwright.engine.responses import phase_deg

        return phase_deg(self.response)

    def peak(self, i: int = 0, j: int = 0) -> tuple[float, float]:
        """``(w_rad_s, mag_db)`` of the largest finite magnitude of element ``(i, j)``."""
        mag = self.mag_db[:, i, j]
        finite = np.where(np.isfinite(mag), mag, -np.inf)
        k = int(np.argmax(finite))
        return float(self.w_rad_s[k]), float(mag[k])


def pair_frequency_response(
    model,
    source: str,
    signal: str,
    *,
    w_min: float | None = None,
    w_max: float | None = None,
    points: int | None = None,
    drawing: bool = False,
    reduced=None,
    w=None,
) -> PairResponse:
    """Frequency response of the path ``source -> signal`` of an assembled model.

    Parameters
    ----------
    model : AssembledModel
    source : str
        A source name, ``inject:<signal>``, or a bare signal name (its injection).
    signal : str
        A signal name (or one component, ``name[k]``).
    w_min, w_max : float, optional
        Frequency span in rad/s (default: two decades beyond the model's poles). ``w_min = 0``
        asks for a grid from DC: the DC point, then the log grid above it.
    points : int, optional
        A plain log-spaced grid of this many points; without it the grid is automatic
        (dense at lightly damped poles) and refined at the response's peaks.
    drawing : bool
        Use :func:`drawing_frequency_grid` (fewer points per resonance: what the app draws)
        instead of the command line's automatic grid.
    reduced : ReducedModel, optional
        A reduction of ``model.A`` to reuse (every pair of one model shares it).
    w : (k,) array_like, optional
        Exact frequencies in rad/s (DC allowed); the span and point count are then unused.

    Raises
    ------
    UnknownNameError
        No such input or signal.
    ParameterError
        A bad span or point count.
    """
    from loopwright.engine.blockwise_response import path_evaluator
    from loopwright.engine.responses import auto_frequency_grid, reduced_response

    grp = model.resolve_input(source)
    sig = model.resolve_signal(signal)
    dc_point = w_min == 0.0 and w is None
    if dc_point:
        w_min = None
    for name, v in (("--w-min", w_min), ("--w-max", w_max)):
        if v is not None and not (v > 0 and np.isfinite(v)):
            raise ParameterError(f"{name} must be a positive finite frequency in rad/s (or --w-min 0 for a grid from DC); got {v}", field=name)
    if points is not None and not 2 <= points <= MAX_POINTS:
        raise ParameterError(f"--points must be from 2 to {MAX_POINTS}; got {points}", field="--points")
    if w_min is not None and w_max is not None and not w_max > w_min:
        raise ParameterError(f"--w-max ({w_max}) must exceed --w-min ({w_min})", field="--w-max")
    if reduced is None:
        # block by block or on the whole model, whichever an operation count says is cheaper
        evaluate = path_evaluator(model, grp, sig, points=points or 1000)
    else:  # the views share one Schur reduction of the closed loop
        A, B, C, D = model.pair(grp, sig)
        red = reduced
        Bt, Ct = red.input_matrix(B), red.output_matrix(C)
        # a drawn curve needs far fewer digits than a printed answer (the evaluator's default)
        accuracy = {"rtol": _DRAWING_RTOL, "max_steps": _DRAWING_STEPS} if drawing else {}

        def evaluate(w):
            with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
                return reduced_response(red, Bt, Ct, D, 1j * np.asarray(w, dtype=float), B=B, C=C, **accuracy)

        evaluate.poles = red.poles

    if w is not None:
        w = np.asarray(w, dtype=float).ravel()
        G = evaluate(w)
    elif points is not None:
        auto = auto_frequency_grid(evaluate.poles)
        lo = w_min if w_min is not None else auto[0]
        hi = w_max if w_max is not None else auto[-1]
        if not hi > lo:
            raise ParameterError(f"--w-max ({hi}) must exceed --w-min ({lo})", field="--w-max")
        w = np.logspace(np.log10(lo), np.log10(hi), points)
        G = evaluate(w)
    elif drawing:
        # a plot shows no more than this: fewer points per resonance, fewer peaks refined,
        # in one pass (each pass is a call, and a call's overhead, not its points, is the cost)
        w = drawing_frequency_grid(evaluate.poles, w_min=w_min, w_max=w_max)
        w, G = _refine_at_main_peaks(evaluate, w, evaluate(w), passes=_DRAWING_PASSES, points=_DRAWING_PEAK_POINTS, most=12)
    else:
        w = auto_frequency_grid(evaluate.poles, w_min=w_min, w_max=w_max)
        w, G = _refine_at_main_peaks(evaluate, w, evaluate(w))
    if dc_point:
        w = np.concatenate([[0.0], w])
        G = np.concatenate([evaluate(w[:1]), G])
    cols, rows = model.input_slice(grp), model.signal_slice(sig)
    return PairResponse(grp, sig, w, G, list(model.input_names[cols]), list(model.output_names[rows]))


#: Relative accuracy of a drawn response (a millionth: far below a pixel or a cursor's digits).
_DRAWING_RTOL = 1e-6
#: Refinement steps of a drawn response: one step restores the digits a plot shows (a
#: stiff model's lowest modes may need more for a printed answer); each costs about a solve.
_DRAWING_STEPS = 1
#: Peaks lower than this fraction of the highest are drawn on the grid as they fall.
_PEAK_FLOOR = 1e-3
#: At most this many peaks are refined in a pass (the highest).
_MAX_REFINED_PEAKS = 40


def _refine_at_main_peaks(evaluate, w: np.ndarray, G: np.ndarray, *, passes: int = 4, points: int = 9,
                          most: int = _MAX_REFINED_PEAKS) -> tuple[np.ndarray, np.ndarray]:
    """The grid ``w`` and response ``G`` (k, p, m) with points added around the highest peaks.

    A peak is a sample of the largest singular value higher than both neighbours by more
    than rounding (a flat stretch, or rounding ripple far down a roll-off, is no peak) and
    within :data:`_PEAK_FLOOR` of the highest sample; the ``most`` highest are refined.
    Each pass puts ``points`` frequencies between the neighbours of every such peak and
    evaluates them all in one call of ``evaluate(w) -> G``. Refining every local maximum
    instead lets rounding ripple multiply the grid on large loops (tens of thousands of
    points) and adds nothing a plot or the marked peak can show.
    """
    from loopwright.engine.norms import sigma_max

    w = np.asarray(w, dtype=float)
    g = sigma_max(G)
    for _ in range(passes):
        gi = np.where(np.isfinite(g), g, -np.inf)
        if w.size < 3 or not np.isfinite(gi.max()):
            break
        mid = gi[1:-1]
        strict = (mid > gi[:-2] * (1 + 1e-9)) & (mid > gi[2:] * (1 + 1e-9)) & (mid >= _PEAK_FLOOR * gi.max())
        peaks = np.nonzero(strict)[0] + 1
        if peaks.size == 0:
            break
        peaks = peaks[np.argsort(-gi[peaks])][:most]
        new = np.unique(np.concatenate([np.linspace(w[i - 1], w[i + 1], points + 2)[1:-1] for i in peaks]))
        # drop points that coincide with samples already taken, up to rounding: they would
        # be their own neighbours in the next pass
        pos = np.clip(np.searchsorted(w, new), 1, w.size - 1)
        gap = np.minimum(np.abs(new - w[pos - 1]), np.abs(new - w[pos]))
        new = new[gap > 1e-12 * new]
        if new.size == 0:
            break
        Gn = evaluate(new)
        w = np.concatenate([w, new])
        G = np.concatenate([G, Gn])
        g = np.concatenate([g, sigma_max(Gn)])
        order = np.argsort(w, kind="stable")
        w, G, g = w[order], G[order], g[order]
    return w, G


#: Refinement of a drawn response's highest peaks: one pass of 15 points between the
#: neighbours of each. The drawing grid already has a point at each lightly damped pole's
#: damped frequency and half a half-width either side, so one pass puts the marked peak
#: within 1e-5 dB of the command line's four passes on the samples and generated loops
#: (the half-width shrunk 16-fold), at two calls of the evaluator per pair instead of five.
_DRAWING_PASSES = 1
_DRAWING_PEAK_POINTS = 15

#: Points across each lightly damped resonance on the drawing grid, in half-widths from its peak.
_DRAWING_OFFSETS = np.array([-4.0, -2.0, -1.0, -0.5, 0.0, 0.5, 1.0, 2.0, 4.0])


#: Points per decade at most on a drawing grid (a wide plot has a few hundred pixels per decade).
_DRAWING_RESOLUTION = 1000


def drawing_frequency_grid(poles, *, w_min: float | None = None, w_max: float | None = None, points_per_decade: int = 80,
                           decades_beyond: float = 2.0) -> np.ndarray:
    """A frequency grid (rad/s) for drawing a response: log-spaced over the span of
    :func:`responses.auto_frequency_grid`, plus nine points across each lightly damped
    resonance (damping ratio below 0.5) from four half-widths below to four above.

    The automatic grid of the command line puts 65 points on every resonance, which a
    large loop multiplies into thousands of frequencies; a plot a thousand pixels wide
    shows no more with them. The highest peaks are refined afterwards anyway.
    """
    from loopwright.engine.responses import auto_frequency_grid

    roots = np.asarray(poles, dtype=complex).ravel()
    # the span depends on the poles' magnitudes only: real poles of the same magnitudes give
    # it without the points the automatic grid would lay on every resonance first
    span = auto_frequency_grid(-np.abs(roots), w_min=w_min, w_max=w_max, points_per_decade=4, decades_beyond=decades_beyond)
    lo, hi = float(span[0]), float(span[-1])
    parts = [np.logspace(np.log10(lo), np.log10(hi), max(10, int(np.ceil(np.log10(hi / lo) * points_per_decade)) + 1))]
    roots = roots[np.isfinite(roots) & (roots.imag >= 0)]
    wn = np.abs(roots)
    keep = (wn > 0) & (wn >= lo) & (wn <= hi)
    zeta = np.where(keep, -roots.real / np.where(wn > 0, wn, 1.0), 1.0)
    light = keep & (np.abs(zeta) < 0.5)
    if np.any(light):
        half = np.maximum(np.abs(zeta[light]), 1e-9) * wn[light]
        parts.append((np.abs(roots.imag[light])[:, None] + half[:, None] * _DRAWING_OFFSETS[None, :]).ravel())
    w = np.concatenate(parts)
    w = np.unique(w[(w >= lo) & (w <= hi) & (w > 0)])
    if not w.size:
        return w
    # Nearly equal poles (a loop repeated along a chain) put their resonance points on top
    # of each other: keep one point per 1/_DRAWING_RESOLUTION of a decade (far finer than a
    # pixel; the peaks are refined afterwards), so the grid grows with the distinct
    # resonances, not with the state count. The span's ends stay.
    bucket = np.floor(np.log10(w) * _DRAWING_RESOLUTION).astype(np.int64)
    _, first = np.unique(bucket, return_index=True)
    keep = np.zeros(w.size, dtype=bool)
    keep[first] = True
    keep[[0, -1]] = True
    return w[keep]


def frequency_views(diagram, pairs, *, w_min: float | None = None, w_max: float | None = None, drawing: bool = False,
                    shared: SharedModel | None = None) -> list:
    """One :class:`PairResponse` per pair, or the engine's message (a str) for a pair that
    cannot be computed; the diagram is assembled and reduced once.

    Parameters
    ----------
    diagram : Diagram
    pairs : list of (input, output) tuples
    shared : SharedModel, optional
        The snapshot's shared computations (the model, its reduction, responses already
        computed for another view); ``diagram`` is then unused.

    Raises
    ------
    EngineError
        The diagram does not assemble.
    """
    shared = shared if shared is not None else SharedModel(diagram)
    model = shared.model
    out = []
    for src, sig in pairs:

        def make(src=src, sig=sig):
            try:
                return pair_frequency_response(model, src, sig, w_min=w_min, w_max=w_max, drawing=drawing, reduced=shared.reduced)
            except EngineError as err:
                return str(err)

        out.append(shared.remember(("frequency", src, sig, w_min, w_max, drawing), make))
    return out


def singular_values(response: np.ndarray) -> np.ndarray:
    """Singular values of a (k, p, m) response at every frequency, largest first: (k, min(p, m))."""
    G = np.asarray(response)
    bad = ~np.all(np.isfinite(G), axis=(1, 2))
    safe = np.where(bad[:, None, None], 0.0, G)
    s = np.linalg.svd(safe, compute_uv=False)
    s[bad] = np.nan
    return s


def singular_value_views(diagram, pairs, *, drawing: bool = False, shared: SharedModel | None = None) -> list:
    """Per pair: ``(w_rad_s (k,), sigma_db (k, r))``, the singular values in dB largest
    first, or the engine's message (a str) for a pair that cannot be computed
    (``shared`` as in :func:`frequency_views`: the frequency view's responses are reused)."""
    out = []
    for resp in frequency_views(diagram, pairs, drawing=drawing, shared=shared):
        if isinstance(resp, str):
            out.append(resp)
            continue
        with np.errstate(divide="ignore"):
            out.append((resp.w_rad_s, 20.0 * np.log10(singular_values(resp.response))))
    return out


# ---------------------------------------------------------------------------------------
# time


def time_grid(diagram, model, t_end: float | None = None, dt: float | None = None, *, poles=None) -> np.ndarray:
    """The uniform time grid of a run, in s.

    ``t_end``/``dt`` given here win; then the diagram's ``settings.time``; else eight
    time constants of the slowest stable pole (at most 1e4 s) and 2000 steps.

    Raises
    ------
    ParameterError
        ``dt`` not below ``t_end``, or more than 5e6 steps.

    ``poles`` may give the eigenvalues of ``model.A`` when they are known already.
    """
    settings = diagram.settings.get("time") or {}
    t_end = t_end if t_end is not None else settings.get("t_end")
    dt = dt if dt is not None else settings.get("dt")
    if t_end is None:
        ev = np.asarray(poles) if poles is not None else (np.linalg.eigvals(model.A) if model.A.size else np.array([-1.0]))
        ev = ev if ev.size else np.array([-1.0])
        slow = np.abs(ev.real[ev.real < 0])
        t_end = float(min(8.0 / slow.min(), 1e4)) if slow.size else 10.0
    if dt is None:
        dt = t_end / 2000.0
    t_end, dt = float(t_end), float(dt)
    if not (t_end > 0 and dt > 0 and dt < t_end):
        raise ParameterError(f"need 0 < dt < t_end; got dt = {dt} s, t_end = {t_end} s", field="--dt")
    if t_end / dt > 5e6:
        raise ParameterError(f"{t_end / dt:.3g} time steps requested; at most 5e6 (raise --dt)", field="--dt")
    N = int(round(t_end / dt)) + 1
    return np.arange(N) * dt


#: The kinds of time run the time view offers.
RUN_KINDS = ("step", "impulse", "initial", "sources")


@dataclass(frozen=True)
class PairRun:
    """One time run for one pair.

    ``y`` is (N, q) with one column per name in ``names`` (``"out <- in"`` for a vector
    input). ``kind`` is one of :data:`RUN_KINDS`. A step run also carries ``metrics``:
    name -> :class:`step_metrics.StepMetrics` (steady state from the path's exact DC gain;
    none for an unstable model).
    """

    kind: str
    t: np.ndarray
    y: np.ndarray
    names: list[str]
    diverged: bool = False
    message: str = ""
    metrics: dict = field(default_factory=dict)


def estimation_error_names(model) -> dict[str, np.ndarray]:
    """Component name (``error:est[1]``) -> the row ``E`` with ``e = E x``, for every
    estimator linked to a plant of the same order."""
    from loopwright.engine.noise import _error_maps

    out = {}
    for _est, E, names in _error_maps(model):
        for i, nm in enumerate(names):
            out[nm] = E[i]
    return out


def pair_time_response(model, kind: str, source: str, signal: str, t, *, x0=None, stable: bool | None = None) -> PairRun:
    """A time run of one pair.

    Parameters
    ----------
    model : AssembledModel
    kind : str
        ``"step"``/``"impulse"``: unit step or impulse on ``source``; ``"sources"``: every
        source plays its own waveform (white noise with its seed), ``source`` unused;
        ``"initial"``: sources at zero, the response to ``x0`` alone.
    source, signal : str
        The pair. ``signal`` may also be ``error:<estimator>`` (the estimation error).
    t : (N,) array_like
        Uniform times, s.
    x0 : (n,) array_like, optional
        Initial state (``"sources"`` and ``"initial"`` runs).
    stable : bool, optional
        Whether ``model.A`` is stable, when already known (step metrics need it).

    Raises
    ------
    ParameterError
        Unknown ``kind``, or ``"initial"`` without ``x0``.
    """
    from loopwright.engine.responses import impulse_response, initial_response, simulate, source_inputs, step_response

    if kind not in RUN_KINDS:
        raise ParameterError(f"time run must be one of {', '.join(RUN_KINDS)}; got {kind!r}", field="kind")
    C, D, out_names = _run_outputs(model, signal)
    if kind == "initial":
        if x0 is None:
            raise ParameterError("an initial-condition run needs an initial state", field="initial")
        res = initial_response(model.A, C, x0, t)
        return PairRun(kind, res.t, res.y, out_names, res.diverged, res.message)
    if kind == "sources":
        U, foh = source_inputs(model, t)
        res = simulate(model.A, model.B, C, D, t, U, x0=x0, foh_columns=foh)
        return PairRun(kind, res.t, res.y, out_names, res.diverged, res.message)
    cols = model.input_slice(model.resolve_input(source))
    fn = step_response if kind == "step" else impulse_response
    res = fn(model.A, model.B[:, cols], C, D[:, cols], t)
    return _input_run(model, kind, cols, C, D, out_names, res.t, res.y, res.diverged, res.message, stable)


def _run_outputs(model, signal: str):
    """``(C, D, names)`` of the rows a time run of ``signal`` shows (``error:<estimator>``: its estimation error)."""
    if signal.startswith("error:"):
        errors = estimation_error_names(model)
        est = signal.split(":", 1)[1]
        names = [nm for nm in errors if nm == signal or nm.startswith(f"error:{est}[")]
        if not names:
            raise AnalysisError(f"no estimator {est!r} linked to a plant of its own order: no estimation error to show")
        return np.array([errors[nm] for nm in names]), np.zeros((len(names), model.B.shape[1])), names
    rows = model.signal_slice(model.resolve_signal(signal))
    return model.C[rows], model.D[rows], list(model.output_names[rows])


def _input_run(model, kind, cols, C, D, out_names, t, y, diverged, message, stable) -> PairRun:
    """The :class:`PairRun` of a step or impulse run whose samples ``y`` are (N, p, m): one
    column per output row of ``C`` and input column ``cols``."""
    in_names = list(model.input_names[cols])
    if len(in_names) == 1:
        names, Y = out_names, y[:, :, 0]
    else:
        names = [f"{o} <- {i}" for o in out_names for i in in_names]
        Y = y.reshape(y.shape[0], -1)
    metrics = _step_run_metrics(model, cols, C, D, names, Y, t, stable=stable) if kind == "step" and not diverged else {}
    return PairRun(kind, t, Y, names, diverged, message, metrics)


def _input_runs_together(model, kind: str, pairs, t, *, stable: bool | None) -> list | None:
    """Step or impulse runs of several pairs from one simulation (one discretisation of the
    loop, one pass over the time grid with every input column of every pair as one
    experiment each), or None when that is not possible (a pair the engine refuses, or a
    run that diverged: those are run pair by pair, each stopping where it diverges)."""
    from loopwright.engine.responses import impulse_response, step_response

    parts = []
    try:
        for src, sig in pairs:
            C, D, out_names = _run_outputs(model, sig)
            cols = model.input_slice(model.resolve_input(src))
            parts.append((cols, np.arange(model.B.shape[1])[cols], C, D, out_names))
    except EngineError:
        return None
    every = np.unique(np.concatenate([idx for _cols, idx, *_ in parts]))
    C_all = np.vstack([part[2] for part in parts])
    D_all = np.vstack([part[3] for part in parts])[:, every]
    fn = step_response if kind == "step" else impulse_response
    res = fn(model.A, model.B[:, every], C_all, D_all, t)
    if res.diverged:
        return None
    out, row = [], 0
    for cols, idx, C, D, out_names in parts:
        at = np.searchsorted(every, idx)
        y = res.y[:, row : row + C.shape[0], :][:, :, at]
        row += C.shape[0]
        out.append(_input_run(model, kind, cols, C, D, out_names, res.t, y, False, "", stable))
    return out


def _step_run_metrics(model, cols, C, D, names, Y, t, *, stable: bool | None = None) -> dict:
    """Step metrics of each column of a step run (none when the model is not stable: no
    steady state to measure against)."""
    from loopwright.engine.norms import is_stable_matrix
    from loopwright.engine.step_metrics import step_metrics

    if not (is_stable_matrix(model.A) if stable is None else stable):
        return {}
    with np.errstate(all="ignore"):
        # A stable A is nonsingular: G(0) = D - C A^-1 B needs no minimal realisation first
        # (that is for poles at the origin, which a stable loop has none of)
        G0 = np.asarray(D[:, cols] - C @ np.linalg.solve(model.A, model.B[:, cols]), dtype=float).reshape(-1)  # output-major, like Y
    scale = max(float(np.nanmax(np.abs(Y))) if Y.size else 0.0, float(np.nanmax(np.abs(G0), initial=0.0)))
    G0 = np.where(np.abs(G0) <= 1e-12 * scale, 0.0, G0)  # rounding of an exact zero
    return {nm: step_metrics(t, Y[:, k], float(G0[k])) for k, nm in enumerate(names) if np.isfinite(G0[k]) and G0[k] != 0.0}


def time_views(diagram, pairs, kind: str, *, initial: dict | None = None, t_end: float | None = None, dt: float | None = None,
               shared: SharedModel | None = None) -> list:
    """One :class:`PairRun` per pair (or the engine's message as a str); one assembly.

    ``initial`` maps block names to their initial state (see
    :func:`loopwright.engine.responses.initial_state`); ``shared`` as in
    :func:`frequency_views`.
    """
    from loopwright.engine.responses import initial_state

    shared = shared if shared is not None else SharedModel(diagram)
    model = shared.model
    t = time_grid(diagram, model, t_end, dt, poles=shared.poles)
    x0 = initial_state(model, initial) if initial else None
    stable = shared.stable if kind == "step" else None
    if kind in ("step", "impulse") and len(pairs) > 1:
        together = _input_runs_together(model, kind, pairs, t, stable=stable)
        if together is not None:
            return together
    out = []
    for src, sig in pairs:
        try:
            out.append(pair_time_response(model, kind, src, sig, t, x0=x0, stable=stable))
        except EngineError as err:
            out.append(str(err))
    return out


# ---------------------------------------------------------------------------------------
# pole map


def damping_guides(radius: float, *, ratios=(0.1, 0.2, 0.4, 0.6, 0.8), circles: int = 4) -> dict:
    """Lines of constant damping ratio and circles of constant natural frequency for a
    pole map reaching ``radius`` (rad/s) from the origin.

    A pole ``s = -zeta wn + j wn sqrt(1 - zeta^2)`` lies on the ray at angle
    ``arccos(zeta)`` from the negative real axis (closed form), and on the circle
    ``|s| = wn``.

    Returns
    -------
    dict
        ``{"rays": [(zeta, x (2,), y (2,)), ...], "circles": [(wn, x (k,), y (k,)), ...]}``
        with each ray from the origin into the left half-plane (upper and lower halves
        as separate entries) and each circle as its left half.
    """
    r = float(radius) if np.isfinite(radius) and radius > 0 else 1.0
    rays = []
    for z in ratios:
        th = np.arccos(z)
        for sign in (1.0, -1.0):
            rays.append((float(z), np.array([0.0, -r * np.cos(th)]), np.array([0.0, sign * r * np.sin(th)])))
    # round steps of wn: 1, 2 or 5 times a power of ten
    base = 10.0 ** np.floor(np.log10(r / circles))
    step = next(m * base for m in (1.0, 2.0, 5.0, 10.0) if r / (m * base) <= circles)
    phi = np.linspace(np.pi / 2, 3 * np.pi / 2, 91)
    rings = [(float(k * step), k * step * np.cos(phi), k * step * np.sin(phi)) for k in range(1, circles + 1) if k * step <= r * 1.0001]
    return {"rays": rays, "circles": rings}


# ---------------------------------------------------------------------------------------
# loop break


def disk_exclusion_circle(gain_lower: float, gain_upper: float) -> tuple[float, float]:
    """Centre (on the real axis) and radius of the disk the loop transfer ``L(jw)`` must
    stay out of, for a disk margin with gain interval ``[gain_lower, gain_upper]``.

    Closed form: the loop stays stable for every factor ``f`` in the margin's disk, so
    ``1 + f L`` never vanishes and ``L`` never equals ``-1/f``. The disk of ``f`` is
    symmetric about the real axis and meets it at the two gain limits, so its image under
    ``f -> -1/f`` is the disk through ``-1/gain_lower`` and ``-1/gain_upper``
    (``0`` when the upper gain is unbounded).

    Returns
    -------
    centre, radius : float
    """
    a = -1.0 / gain_lower if gain_lower > 0 else -np.inf
    b = -1.0 / gain_upper if np.isfinite(gain_upper) and gain_upper != 0 else 0.0
    return float((a + b) / 2.0), float(abs(a - b) / 2.0)


@dataclass(frozen=True)
class LoopBreakView:
    """The loop transfer at a break, channel by channel.

    Attributes
    ----------
    at : str
        Where the loop is broken (a signal or ``block.port``).
    channel_names : list of str
    w_rad_s : (k,) ndarray
        Positive frequencies, rad/s (the curve for negative ones is the mirror image).
    curves : list of (k,) complex ndarray
        ``L_i(jw)`` of channel ``i`` with the other channels closed (the scalar loop's own
        ``L`` for a scalar break).
    circles : list of (centre, radius)
        The exclusion disk of each channel's disk margin (``nan`` when unstable).
    margins : LoopMargins or VectorLoopMargins
    loci : (k, q) complex ndarray or None
        Eigenvalues of the whole ``L(jw)`` (vector breaks: all loops at once).
    """

    at: str
    channel_names: list[str]
    w_rad_s: np.ndarray
    curves: list[np.ndarray]
    circles: list[tuple[float, float]]
    margins: object
    loci: np.ndarray | None = None
    critical_w_rad_s: list[float] = field(default_factory=list)


def loop_break_view(diagram, at: str, *, skew: float = 0.0, limits: bool = True, progress=None, interim=None,
                    shared: SharedModel | None = None) -> LoopBreakView:
    """Nyquist curves, exclusion disks and margins of the loop broken at ``at``.

    ``limits=False`` leaves out the performance limits (Bode's sensitivity integral and
    the like, see :func:`margins.margins_at`): most of the cost of a large loop, and the
    app's loop-break view does not show them.

    A scalar break is computed in one pass over one evaluator of ``L``
    (:class:`~loopwright.engine.loop_response.LoopResponse`): the margins' grid is the
    curve's grid. Peak sensitivity and the disk margin are certified by the Hamiltonian
    test (:func:`margins.certify_sensitivity_peaks`); when that test is costly (a large
    loop) and ``interim`` is given, ``interim(view)`` first receives the view with the
    refined grid values (``margins.certified`` False), so it can be drawn at once.
    ``progress(fraction)`` is called between the steps and may stop the work by raising.
    ``shared`` (the snapshot's :class:`SharedModel`): a scalar break's nominal closed-loop
    stability is read from its poles (the loop closed at the break is the diagram itself),
    not from a decomposition of its own.

    Raises
    ------
    UnknownNameError, AnalysisError
        No such break point, or no loop through it.
    """
    from loopwright.engine.loop_response import LoopResponse
    from loopwright.engine.margins import (
        _attach_limits,
        _close_channels,
        _ill_posed,
        _trim_for_margins,
        _vector_margins,
        certify_sensitivity_peaks,
        disk_margin_from_alpha,
        grid_zeros,
        opened_loop,
        scalar_margins,
    )
    from loopwright.engine.responses import auto_frequency_grid, frequency_response

    report = progress if progress is not None else (lambda _f: None)
    if not np.isfinite(skew):
        raise AnalysisError(f"disk-margin skew must be a finite number; got {skew}")
    # the closed loop's block realisations, when another view has assembled it already
    closed = shared.assembled() if shared is not None and shared.diagram is diagram else None
    A, B, C, D = opened_loop(diagram, at, closed=closed)
    report(0.05)
    if D.shape[0] == 1:
        if _ill_posed(D):
            raise AnalysisError("1 + L(inf) = 0: the closed loop has no proper solution at this break")
        resp = LoopResponse(A, B, C, D)
        zeros = ()
        if limits or resp.n <= _ZEROS_MAX_STATES:  # cheap at this size: a grid point on every zero as well
            zeros = grid_zeros(resp)
        costly = interim is not None and resp.n >= _PROGRESSIVE_MIN_STATES
        m, w, L = scalar_margins(resp, skew=skew, zeros=zeros, certify=not costly, progress=report,
                                 closed_loop_poles=_shared_poles(shared))

        def view_of(m):
            crit = _critical_frequencies([m])
            extra = np.setdiff1d(np.asarray(crit, dtype=float), w)
            ww, LL = w, L
            if extra.size:
                ww = np.concatenate([w, extra])
                LL = np.concatenate([L, resp(extra)])
                order = np.argsort(ww, kind="stable")
                ww, LL = ww[order], LL[order]
            circle = disk_exclusion_circle(m.disk.gain_lower, m.disk.gain_upper) if m.closed_loop_stable else (np.nan, np.nan)
            return LoopBreakView(at, [at], ww, [LL], [circle], m, None, crit)

        if not m.certified and m.closed_loop_stable:
            interim(view_of(m))
            (s_peak, s_w), (pk, pk_w) = certify_sensitivity_peaks(
                resp, (m.peak_sensitivity, m.peak_sensitivity_w_rad_s), (1.0 / m.disk.alpha if m.disk.alpha > 0 else np.inf, m.disk.w_rad_s),
                skew=skew, progress=report)
            # a new record: the interim view keeps its own
            m = dataclasses.replace(m, peak_sensitivity=float(s_peak), peak_sensitivity_w_rad_s=float(s_w), certified=True,
                                    disk=disk_margin_from_alpha(1.0 / pk if pk > 0 else np.inf, skew=skew, w_rad_s=pk_w))
        if limits:
            _attach_limits(m, A, B, C, D, response=resp)  # the Bode integral on this loop's evaluator
        report(1.0)
        return view_of(m)

    # a vector break: the margins as the command line gives them, one curve per channel
    A, B, C, D = _trim_for_margins(A, B, C, D)
    margins = _vector_margins(A, B, C, D, at, skew=skew, limits=limits)
    q = D.shape[0]
    per = list(margins.per_channel)
    names = list(margins.channel_names)
    crit = _critical_frequencies(per)
    poles = np.linalg.eigvals(A) if A.size else np.zeros(0)
    w = np.unique(np.concatenate([auto_frequency_grid(poles, points_per_decade=120), np.asarray(crit, dtype=float)]))
    curves = []
    for i in range(q):
        report(0.6 + 0.3 * i / q)
        Ai, Bi, Ci, Di = _close_channels(A, B, C, D, i) if q > 1 else (A, B, C, D)
        with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
            curves.append(frequency_response(Ai, Bi, Ci, Di, w)[:, 0, 0])
    circles = [disk_exclusion_circle(m.disk.gain_lower, m.disk.gain_upper) if m.closed_loop_stable else (np.nan, np.nan) for m in per]
    loci = None
    if q > 1:
        with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
            L = frequency_response(A, B, C, D, w)
        ok = np.all(np.isfinite(L), axis=(1, 2))
        loci = np.full((w.size, q), np.nan + 0j)
        loci[ok] = np.sort_complex(np.linalg.eigvals(L[ok]))
    report(1.0)
    return LoopBreakView(at, names, w, curves, circles, margins, loci, crit)


def _shared_poles(shared: SharedModel | None):
    """The snapshot's closed-loop poles, or None (no shared model, or it does not assemble:
    the loop-break view then decides stability on its own)."""
    if shared is None:
        return None
    try:
        return shared.poles
    except EngineError:
        return None


#: Up to this many states the transmission zeros (one generalised eigenvalue problem) are
#: cheap enough to lay grid points on them too.
_ZEROS_MAX_STATES = 150
#: From this many states on, the certification of the peaks (a 2n x 2n Hamiltonian
#: eigenvalue problem per peak) follows the first drawing when the caller takes an interim view.
_PROGRESSIVE_MIN_STATES = 120


def _critical_frequencies(per) -> list[float]:
    """Where the margins of the channels ``per`` are reached (positive, finite), sorted."""
    return sorted({float(x) for m in per for x in (m.disk.w_rad_s, m.phase_margin_w_rad_s, m.gain_lower_w_rad_s, m.gain_upper_w_rad_s,
                                                   m.peak_sensitivity_w_rad_s, *m.gain_crossovers_w_rad_s, *m.phase_crossovers_w_rad_s)
                   if np.isfinite(x) and x > 0})


# ---------------------------------------------------------------------------------------
# noise budget


@dataclass(frozen=True)
class NoiseBar:
    """One bar of the noise budget: a signal component's RMS, split by source.

    ``parts[source]`` is the source's share of the variance times the RMS, so the parts
    add up to the RMS and each is in proportion to what that source contributes to the
    variance (RMS values themselves do not add).
    """

    name: str
    rms: float
    parts: dict[str, float]
    variance_by_source: dict[str, float]
    reason: str = ""


def noise_bars(budget, names=None) -> list[NoiseBar]:
    """The bars for the components of the signals ``names`` (every line when None).

    A name selects a whole signal (all its components) or one component line.
    """
    wanted = None if names is None else set(names)
    out = []
    for ln in budget.lines:
        if wanted is not None and ln.signal not in wanted and ln.name not in wanted:
            continue
        if np.isfinite(ln.rms):
            parts = {s: float(ln.rms * sh) if np.isfinite(sh) else 0.0 for s, sh in ln.share_by_source.items()}
        else:
            parts = {s: np.nan for s in ln.share_by_source}
        out.append(NoiseBar(ln.name, float(ln.rms), parts, dict(ln.variance_by_source), ln.reason))
    return out
