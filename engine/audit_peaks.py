"""Peak gain and its frequency of every signal of one input group, refined all at once.

The path audit samples each input group's response to every signal on one frequency
grid, then refines each signal's peak: each signal keeps a bracket of samples around its
best point, and each pass puts 5 new frequencies inside every distinct bracket (or
extends the grid outward when the peak sits at an end), solves once for all of them and
evaluates each signal only at its own points.

A diagram with thousands of signals (a long chain of gains) has thousands of brackets, so
the bookkeeping runs on arrays (one row per signal) rather than one signal at a time; the
arithmetic of every sample is the same as one signal at a time would do: the same
frequencies, solved together in the same order, each signal's output formed by a matrix
product of the same shape (:func:`numpy.matmul` over a stack), so the peaks and their
frequencies do not depend on how many other signals are refined alongside. Neighbouring
signals whose rows are equal (a chain of unit gains) are refined once per run of them.
"""
from __future__ import annotations

import functools

import numpy as np

from loopwright.engine.blockwise_response import GroupResponder
from loopwright.engine.norms import sigma_max

__all__ = ["refine_peaks", "grid_gains"]

# New points of a pass: above a peak at the top of the grid, below a peak between DC and
# the lowest grid point (both as factors of the end point), 5 inside a bracket.
_UP = np.logspace(0.1, 1.5, 5)
_DOWN = np.logspace(-1.5, -0.1, 5)
_NEW = 5
# Two frequencies closer than this (relative) are the same point.
_SAME = 1e-12
# Entries of the gathered state responses held at once when forming outputs.
_CHUNK_ENTRIES = 2_000_000


def grid_gains(Y: np.ndarray, sig_items) -> np.ndarray:
    """Largest singular value of every signal's response at every grid point, (signals, k).

    ``Y`` is (k, p, m), ``sig_items`` the ``(signal, row slice)`` pairs; each row is
    :func:`~loopwright.engine.norms.sigma_max` of that signal's rows.
    """
    k = Y.shape[0]
    out = np.empty((len(sig_items), k))
    starts = np.array([sl.start for _sig, sl in sig_items], dtype=int)
    widths = np.array([sl.stop - sl.start for _sig, sl in sig_items], dtype=int)
    scalar = np.flatnonzero(widths == 1)
    if scalar.size and Y.shape[2] == 1:
        # one entry each: sigma_max is its modulus, as sqrt(|y|^2) (a sum of one term)
        rows = starts[scalar]
        every_row = rows.size == Y.shape[1] and bool(np.all(rows == np.arange(rows.size)))
        mag = np.abs((Y[:, :, 0] if every_row else Y[:, rows, 0]).T)  # (every row in order: no gathered copy)
        np.square(mag, out=mag)
        out[scalar] = np.sqrt(mag, out=mag)
    elif scalar.size:
        # one row each: sigma_max is the 2-norm over the group's inputs
        out[scalar] = np.sqrt(np.sum(np.abs(Y[:, starts[scalar], :]) ** 2, axis=2)).T
    for j in np.flatnonzero(widths != 1):
        out[j] = sigma_max(Y[:, sig_items[j][1], :])
    return out


def _group_outputs(responder, solved, rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
    """Response of single-row signals, each at its own points: (b, c, m) for ``rows`` (b,)
    and ``cols`` (b, c) (column indices into the ``solved`` points).

    Each entry equals ``responder.outputs(solved, slice(r, r + 1), slice(c0, c0 + c))``
    for its signal: on the whole-model route the output row times the state response is a
    (1, n) by (n, c m) product per signal, formed as a stack of such products.
    """
    if not isinstance(responder, GroupResponder) or responder.blockwise is not None:
        return solved[cols, rows[:, None], :]  # the response is already per output row: read it
    X = solved  # (n, points, m): state response in Schur coordinates
    n, _k, m = X.shape
    b, c = cols.shape
    out = np.empty((b, c, m), dtype=complex)
    step = max(1, _CHUNK_ENTRIES // max(1, n * c * m))
    for a in range(0, b, step):
        sel = slice(a, a + step)
        Xs = np.ascontiguousarray(np.moveaxis(X[:, cols[sel], :], 0, 1)).reshape(-1, n, c * m)
        with np.errstate(invalid="ignore", over="ignore"):
            Ys = responder.Ct[rows[sel]][:, None, :] @ Xs  # (b, 1, c m)
            out[sel] = Ys.reshape(-1, c, m) + responder.Dg[rows[sel]][:, None, :]
    return out


def _first_appearance_groups(keys: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Equal rows of ``keys`` (r, c) grouped: ``(group of each row, first row of each
    group)``, groups numbered in the order their first row appears."""
    r = keys.shape[0]
    order = np.lexsort(keys.T[::-1])
    sk = keys[order]
    new = np.ones(r, dtype=bool)
    new[1:] = np.any(sk[1:] != sk[:-1], axis=1)
    label_sorted = np.cumsum(new) - 1
    label = np.empty(r, dtype=int)
    label[order] = label_sorted
    first = np.full(label_sorted[-1] + 1, r, dtype=int)
    np.minimum.at(first, label, np.arange(r))
    rank = np.empty(first.size, dtype=int)
    by_first = np.argsort(first, kind="stable")
    rank[by_first] = np.arange(first.size)
    return rank[label], first[by_first]


def _initial_brackets(grid: np.ndarray, g: np.ndarray):
    """Each signal's bracket around its best grid point ``g`` (signals, k):
    ``(gmax, wi, below, above, count, active)``.

    ``gmax`` is the largest gain of the row's samples, ``wi`` the lowest frequency where it
    is reached, ``below``/``above`` the nearest sampled frequencies under and over ``wi``
    (``-inf``/``inf``: none), ``count`` the number of samples; non-finite gains count as
    ``-inf``. ``active`` is False for a signal with no finite gain.
    """
    gv = np.where(np.isfinite(g), g, -np.inf)
    best = np.argmax(gv, axis=1)
    s = g.shape[0]
    active = np.isfinite(gv[np.arange(s), best])
    spans = {}
    for i in np.unique(best[active]):
        lo, hi = max(i - 1, 0), min(i + 2, grid.size)
        # neighbours must be distinct points: step past near-duplicates of the peak
        while lo > 0 and abs(grid[lo] - grid[i]) <= _SAME * grid[i]:
            lo -= 1
        while hi < grid.size and abs(grid[hi - 1] - grid[i]) <= _SAME * grid[i]:
            hi += 1
        w0 = grid[lo:hi]
        keep = np.concatenate([[True], np.diff(w0) > _SAME * np.abs(w0[1:])])
        spans[int(i)] = np.arange(lo, hi)[keep]
    room = max((v.size for v in spans.values()), default=1)
    W = np.full((s, room), np.inf)  # samples in no particular order, padded with inf / -inf
    G = np.full((s, room), -np.inf)
    count = np.zeros(s, dtype=int)
    for i, idx in spans.items():
        who = np.flatnonzero(active & (best == i))
        W[who, : idx.size] = grid[idx]
        G[who, : idx.size] = gv[who][:, idx]
        count[who] = idx.size
    gmax, wi, below, above = _peak_and_neighbours(list(W.T), list(G.T))
    return gmax, wi, below, above, count, active


def _peak_and_neighbours(ws: list[np.ndarray], gs: list[np.ndarray]):
    """``(gmax, wi, below, above)`` of rows whose samples are the columns ``ws`` (frequencies)
    and ``gs`` (gains; ``-inf`` for none): the largest gain, the lowest frequency reaching
    it, and the nearest frequencies under and over that one (``-inf``/``inf``: none).

    Reduced column by column (one elementwise operation over every row per column): a
    reduction along a row of a handful of entries costs numpy far more per row.
    """
    gmax = functools.reduce(np.maximum, gs)
    wi = functools.reduce(np.minimum, [np.where(g == gmax, w, np.inf) for w, g in zip(ws, gs)])
    below = functools.reduce(np.maximum, [np.where(w < wi, w, -np.inf) for w in ws])
    above = functools.reduce(np.minimum, [np.where(w > wi, w, np.inf) for w in ws])
    return gmax, wi, below, above


def _fold_in(gmax, wi, below, above, pts, kept, values):
    """The peak and bracket of rows after adding the samples ``pts[kept]`` (gains ``values``):
    ``(gmax, wi, below, above)``, as the same reductions over every sample would give.

    Only the new samples and the old peak and neighbours can be the new ones: the new
    points lie strictly between the old neighbours (or beyond the end of the samples, on
    the side where the old peak has none), where the old peak was the only sample, and an
    old sample as large as the new largest gain lies at or above the old peak frequency
    (the old peak was the lowest such). So a row's update reads 8 numbers, not all its samples.
    """
    gn = np.where(kept, np.where(np.isfinite(values), values, -np.inf), -np.inf)
    g2 = functools.reduce(np.maximum, list(gn.T), gmax)
    lowest_new = functools.reduce(np.minimum, [np.where(g == g2, w, np.inf) for w, g in zip(pts.T, gn.T)])
    w2 = np.where(gmax == g2, np.minimum(wi, lowest_new), lowest_new)
    lo = [below, wi, above] + list(np.where(kept, pts, -np.inf).T)
    hi = [below, wi, above] + list(np.where(kept, pts, np.inf).T)
    b2 = functools.reduce(np.maximum, [np.where(w < w2, w, -np.inf) for w in lo])
    a2 = functools.reduce(np.minimum, [np.where(w > w2, w, np.inf) for w in hi])
    return g2, w2, b2, a2


def _linspace_inner(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``np.linspace(a_j, b_j, 7)[1:-1]`` for every row j, with the same rounding."""
    delta = b - a
    step = delta / 6.0
    k = np.arange(1.0, 6.0)
    with np.errstate(invalid="ignore", over="ignore"):
        pts = k[None, :] * step[:, None] + a[:, None]
        zero = step == 0  # numpy's route for a step that underflows
        if zero.any():
            pts[zero] = (k / 6.0)[None, :] * delta[zero, None] + a[zero, None]
    return pts


def _new_points(wi, below, above, count, grid):
    """The points each row of a bracket asks for in this pass: ``(points, kept)``, (r, 5).

    ``wi`` is the row's peak frequency (the lowest among equal largest gains, as a search
    in ascending order finds first), ``below``/``above`` its neighbours in frequency
    (``-inf``/``inf``: none), ``count`` its number of samples.
    """
    top = grid[-1]
    low = grid[1] if grid.size > 1 else -np.inf
    up = (above == np.inf) & (wi >= top)  # still rising at the top: look further up
    # between DC and the lowest grid point
    down = ~up & (below == -np.inf) & (count > 1) & (wi > 0) & (wi <= low)
    inside = ~up & ~down & (below > -np.inf) & (above < np.inf)
    pts = np.zeros((wi.shape[0], _NEW))
    pts[up] = wi[up, None] * _UP[None, :]
    pts[down] = wi[down, None] * _DOWN[None, :]
    pts[inside] = _linspace_inner(below[inside], above[inside])
    # drop points that coincide with samples already taken (linspace may reproduce an
    # existing point up to rounding, which would make it its own neighbour). A new point
    # lies above every sample, below every sample, or between the peak's two neighbours;
    # rounding is monotone, so no sample is closer to it than the peak and those neighbours.
    # (one comparison per near point over every row: an all() over a last axis of 3 costs more)
    kept = np.repeat((up | down | inside)[:, None], _NEW, axis=1)
    tol = _SAME * np.abs(pts)
    with np.errstate(invalid="ignore"):
        for near in (np.where(inside, below, wi), wi, np.where(inside, above, wi)):
            kept &= np.abs(pts - near[:, None]) > tol
    return pts, kept


def refine_peaks(responder, grid: np.ndarray, Y: np.ndarray, sig_items, passes: int, progress=None) -> dict:
    """Peak gain and its frequency for every signal of one input group.

    Parameters
    ----------
    responder
        ``solve(w)`` gives an opaque response at frequencies ``w``; ``outputs(solved,
        rows, points)`` its (k, rows, m) outputs (the audit's responders).
    grid : (k,) ndarray
        Ascending frequencies (rad/s) of ``Y``.
    Y : (k, p, m) ndarray
        The group's response on ``grid``.
    sig_items : list of (str, slice)
        Each signal and its rows.
    passes : int
        Refinement passes.
    progress : callable, optional
        ``progress(fraction)`` after each pass (may raise to stop).

    Returns
    -------
    dict
        signal -> (peak, w_rad_s); (0.0, 0.0) for a signal with no finite gain.
        Neighbouring signals whose rows are equal share one refinement (see
        :func:`_runs_of_equal_rows`): the answers are those of each signal on its own.
    """
    runs = _runs_of_equal_rows(responder, Y, sig_items)
    if runs is not None:
        # one refinement per run of equal rows (thousands of unit gains in series: a
        # handful), each signal then takes its run's answer
        first, run_of = runs
        names = [sig for sig, _sl in sig_items]
        kept = _refine_each(responder, grid, Y, [sig_items[i] for i in first.tolist()], passes, progress)
        answers = [kept[names[i]] for i in first.tolist()]
        return dict(zip(names, [answers[r] for r in run_of.tolist()]))
    return _refine_each(responder, grid, Y, sig_items, passes, progress)


def _runs_of_equal_rows(responder, Y: np.ndarray, sig_items) -> tuple[np.ndarray, np.ndarray] | None:
    """Runs of neighbouring single-row signals that the refinement cannot tell apart, or
    None when every signal is a run of its own (or the route forms outputs otherwise).

    Two signals in neighbouring rows are in one run when their rows are equal in
    everything the refinement reads on the whole-model route: the output row ``Ct`` in
    Schur coordinates, the feedthrough row ``Dg`` and the grid response ``Y``. Their
    refinements then ask for the same points and form the same products, so one
    refinement per run gives every member's answer bit for bit. (Block by block, the
    response at a new point is not formed from the signal's own row: no runs there.)

    Returns
    -------
    first : (r,) ndarray
        Index into ``sig_items`` of each run's first signal.
    run_of : (s,) ndarray
        The run of every signal.
    """
    if not isinstance(responder, GroupResponder) or responder.blockwise is not None or len(sig_items) < 2:
        return None
    starts = np.array([sl.start for _sig, sl in sig_items], dtype=int)
    widths = np.array([sl.stop - sl.start for _sig, sl in sig_items], dtype=int)
    p = Y.shape[1]
    # row r equal to row r - 1 (NaN never equal: such rows stay alone)
    same = np.zeros(p, dtype=bool)
    if p > 1:
        Ct, Dg = responder.Ct, responder.Dg
        same[1:] = np.all(Ct[1:] == Ct[:-1], axis=1) & np.all(Dg[1:] == Dg[:-1], axis=1)
        same[1:] &= np.all(Y[:, 1:, :] == Y[:, :-1, :], axis=(0, 2))
    joins = np.zeros(len(sig_items), dtype=bool)
    joins[1:] = (widths[1:] == 1) & (widths[:-1] == 1) & (starts[1:] == starts[:-1] + 1) & same[np.minimum(starts[1:], p - 1)]
    if not joins.any():
        return None
    run_of = np.cumsum(~joins) - 1
    return np.flatnonzero(~joins), run_of


def _refine_each(responder, grid: np.ndarray, Y: np.ndarray, sig_items, passes: int, progress=None) -> dict:
    """:func:`refine_peaks` with every signal refined on its own row of the arrays."""
    names = [sig for sig, _sl in sig_items]
    starts = np.array([sl.start for _sig, sl in sig_items], dtype=int)
    scalar = np.array([sl.stop - sl.start == 1 for _sig, sl in sig_items], dtype=bool)
    gmax, wi, below, above, count, active = _initial_brackets(grid, grid_gains(Y, sig_items))
    live = np.flatnonzero(active)  # rows still asking for points (a row that asks for none never will again)
    for done in range(passes):
        if progress is not None:
            progress(done / passes)
        pts, kept = _new_points(wi[live], below[live], above[live], count[live], grid)
        asks = kept.any(axis=1)
        live, pts, kept = live[asks], pts[asks], kept[asks]
        if live.size == 0:
            break
        # each row's kept points moved to the front; equal lists share one plan
        front = np.argsort(~kept, axis=1, kind="stable")
        pts = np.take_along_axis(pts, front, axis=1)
        kept = np.take_along_axis(kept, front, axis=1)
        keys = np.where(kept, pts, -1.0)
        plan, first = _first_appearance_groups(keys)
        sizes = kept[first].sum(axis=1)
        offsets = np.concatenate([[0], np.cumsum(sizes)])
        solved = responder.solve(keys[first][kept[first]])
        values = np.full(pts.shape, -np.inf)
        for c in np.unique(sizes):
            who = np.flatnonzero(sizes[plan] == c)
            cols = offsets[plan[who]][:, None] + np.arange(c)[None, :]
            one = scalar[live[who]]
            if one.any():
                out = _group_outputs(responder, solved, starts[live[who[one]]], cols[one])
                values[who[one], :c] = np.sqrt(np.sum(np.abs(out) ** 2, axis=2))
            for q in who[~one]:
                sl = sig_items[live[q]][1]
                at = slice(offsets[plan[q]], offsets[plan[q]] + c)
                values[q, :c] = sigma_max(responder.outputs(solved, sl, at))
        gmax[live], wi[live], below[live], above[live] = _fold_in(gmax[live], wi[live], below[live], above[live], pts, kept, values)
        count[live] += kept.sum(axis=1)
    # the peak: the lowest frequency among equal largest gains
    return {sig: (g, w) if a else (0.0, 0.0) for sig, g, w, a in zip(names, gmax.tolist(), wi.tolist(), active.tolist())}
