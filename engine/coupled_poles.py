"""Closed-loop poles, residues and H2 norms from the coupling form, without a dense
factorisation of the closed loop.

The assembled model's state matrix is ``A = A0 + U V`` (:mod:`loopwright.engine.blockwise_response`):
``A0`` block diagonal (each block cheap to evaluate on its own: a modal plant costs O(n)
per point), ``U V`` of small rank ``q``. Its characteristic polynomial is

    p(s) = det(s I - A) = prod_i (s - d_i) * det(I - M(s)),    M(s) = V (s I - A0)^-1 U,

with ``d_i`` the eigenvalues of the blocks' own state matrices, so

    p'(s) / p(s) = sum_i 1 / (s - d_i) + trace((I - M(s))^-1 N(s)),    N(s) = V (s I - A0)^-2 U.

**Poles** (:func:`closed_loop_poles`): all ``n`` roots of ``p`` at once by the
Ehrlich-Aberth iteration (O. Aberth, "Iteration methods for finding all zeros of a
polynomial simultaneously", Math. Comp. 27 (122), 1973; D. A. Bini, "Numerical
computation of polynomial zeros by means of Aberth's method", Numer. Algorithms 13, 1996),
started next to the blocks' own poles, where most closed-loop poles of a loop with few
coupling channels stay. Each sweep costs one block-by-block evaluation of ``M`` and ``N``
per unconverged root plus O(n^2) for the mutual repulsion, instead of the O(n^3) of a
dense Schur form. The answer is accepted only if every root converged (Newton correction
below ``1e-13 |s|``, in practice at rounding level) and the roots add up to ``trace(A)``;
otherwise the caller uses the dense route. Simple roots come out to about machine
precision relative to their own size (the iteration works with the exact factored
polynomial, not with ``A``'s entries, so a stiff modal plant does not cost accuracy);
multiple roots converge slowly and usually make the check fail.

**Residues** at a simple pole ``l``: with ``z``, ``w`` right and left null vectors of
``I - M(l)``, ``G(s) = C (s I - A)^-1 U W`` has the residue
``(C R(l) U z)(w^T W) / (w^T N(l) z)`` (``B = U W``).

**H2 norms** (:func:`h2_by_residues`) of a stable, strictly proper path follow from the
residue theorem applied to ``trace(G(-s)^T G(s))`` on the left half plane:

    ||G||_2^2 = sum_k trace(G(-l_k)^T Res_k),

with ``G(-l_k)`` evaluated block by block. This is exact in exact arithmetic; in floating
point the terms can cancel when poles are nearly multiple (nearly defective), so the sum
is accepted only if it is at least ``1e-6`` of the sum of the terms' magnitudes (about
ten digits left), otherwise the caller falls back to a Lyapunov solve.
"""
from __future__ import annotations

import numpy as np

__all__ = ["closed_loop_poles", "residue_factors", "h2_by_residues"]

_TOL = 1e-13
_MAX_SWEEPS = 150
_TRACE_TOL = 1e-9
_CANCELLATION = 1e-6
# A closed-loop pole this close (relative) to a block's own pole is that block's mode.
_OWN_MODE = 1e-12
# A moved pole this close (relative) to another pole is treated as a multiple pole.
_MULTIPLE = 1e-9
# Roots whose mutual-repulsion sums are formed at once (memory: rows x n complex).
_CHUNK = 512


def _log_derivative(bw, d: np.ndarray, s: np.ndarray) -> np.ndarray:
    """``p'(s) / p(s)`` at every point of ``s``."""
    M, N, _ = bw.coupling_terms(s)
    q = M.shape[1]
    with np.errstate(all="ignore"):
        own = np.zeros(s.size, dtype=complex)
        for a in range(0, s.size, _CHUNK):
            own[a : a + _CHUNK] = np.sum(1.0 / (s[a : a + _CHUNK, None] - d[None, :]), axis=1)
        if q:
            F = np.eye(q)[None] - M
            try:
                X = np.linalg.solve(F, N)
            except np.linalg.LinAlgError:
                X = np.full(N.shape, np.nan, dtype=complex)
            own += np.trace(X, axis1=1, axis2=2)
    return own


def closed_loop_poles(bw, *, progress=None) -> np.ndarray | None:
    """All eigenvalues of the closed loop ``A = A0 + U V`` (see the module docstring), or
    None when the iteration does not certify them (then use a dense eigenvalue solver).

    Parameters
    ----------
    bw : BlockwiseModel
    progress : callable, optional
        ``progress(fraction)`` several times a sweep; it may raise to stop the iteration.
        The fraction is an estimate (the number of sweeps is not known beforehand): the
        share of roots converged, or ``sweeps / (sweeps + 10)`` when that is more.

    Returns
    -------
    (n,) complex ndarray or None
    """
    d = bw.block_poles.astype(complex)
    n = d.size
    A = bw.model.A
    if n == 0 or n != A.shape[0] or not np.all(np.isfinite(d)):
        return None
    scale = max(1.0, float(np.abs(d).max()))
    # start next to each block pole (not on it: M has a pole there), each offset turned by
    # its own angle so that equal block poles start apart
    theta = 2.0 * np.pi * (np.arange(n) + 0.5) / n + 0.4
    offset = (1e-3 * np.abs(d.real) + 1e-6 * np.abs(d) + 1e-9 * scale) * np.exp(1j * theta)
    z = d + offset
    active = np.ones(n, dtype=bool)
    shown = 0.0

    def report(sweep: float) -> None:
        nonlocal shown
        if progress is not None:
            shown = max(shown, 1.0 - np.count_nonzero(active) / n, sweep / (sweep + 10.0))
            progress(shown)

    for sweep in range(_MAX_SWEEPS):
        idx = np.flatnonzero(active)
        if idx.size == 0:
            break
        zk = z[idx]
        with np.errstate(all="ignore"):
            if progress is None:
                logd = _log_derivative(bw, d, zk)
            else:  # in pieces, so that a stop is noticed within a fraction of a sweep
                logd = np.empty(zk.size, dtype=complex)
                step = max(1, zk.size // 8)
                for a in range(0, zk.size, step):
                    logd[a : a + step] = _log_derivative(bw, d, zk[a : a + step])
                    report(sweep + min(a + step, zk.size) / zk.size)
            ratio = 1.0 / logd  # Newton correction p / p'
            rep = np.empty(idx.size, dtype=complex)
            for a in range(0, idx.size, _CHUNK):
                diff = zk[a : a + _CHUNK, None] - z[None, :]
                diff[np.arange(diff.shape[0]), idx[a : a + _CHUNK]] = np.inf  # leave out j = k
                rep[a : a + _CHUNK] = np.sum(1.0 / diff, axis=1)
            step = ratio / (1.0 - ratio * rep)
        bad = ~np.isfinite(step)
        if bad.any():
            # an iterate on a block pole: the root is that pole to rounding (a mode the
            # wiring moves by less than an ulp); anything else is a failure
            near = np.min(np.abs(zk[bad, None] - d[None, :]), axis=1) <= 4 * np.finfo(float).eps * np.abs(zk[bad])
            if not near.all():
                return None
            step[bad] = 0.0
        z[idx] = zk - step
        done = np.abs(step) <= _TOL * np.maximum(np.abs(z[idx]), 1e-3 * scale * _TOL)
        active[idx[done]] = False
        report(sweep + 1.0)
    if active.any():
        return None
    if abs(np.sum(z).real - np.trace(A)) > _TRACE_TOL * max(1.0, float(np.sum(np.abs(z)))):
        return None
    # a real model's poles come in conjugate pairs: snap each to its partner's mirror
    return _conjugate_pairs(z, scale)


def _conjugate_pairs(z: np.ndarray, scale: float) -> np.ndarray:
    """Make the computed roots exactly closed under conjugation (pairs averaged; roots
    with a rounding-level imaginary part made real)."""
    out = z.copy()
    tiny = 1e-12 * np.maximum(np.abs(z), 1e-12 * scale)
    real = np.abs(z.imag) <= tiny
    out[real] = z[real].real
    upper = np.flatnonzero(~real & (z.imag > 0))
    lower = np.flatnonzero(~real & (z.imag < 0))
    if upper.size != lower.size:
        return out
    taken = np.zeros(lower.size, dtype=bool)
    for i in upper[np.argsort(-np.abs(z[upper].imag))]:
        cand = np.flatnonzero(~taken)
        j = cand[np.argmin(np.abs(z[lower[cand]] - np.conj(z[i])))]
        taken[j] = True
        mean = 0.5 * (z[i] + np.conj(z[lower[j]]))
        out[i], out[lower[j]] = mean, np.conj(mean)
    return out


def residue_factors(bw, poles: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
    """Rank-one residues of every output at every pole: ``Res_k = a_k b_k^T`` with
    ``a_k`` (p,) the output side and ``b_k`` (m,) the input side (all model inputs).

    Returns ``(a, b)`` of shapes (n, p) and (n, m), or None if a residue is not finite.
    """
    M, N, CRU = bw.coupling_terms(poles, outputs=True)
    vals, cx, yb = bw.block_eigen()
    q = M.shape[1]
    F = np.eye(q)[None] - M
    on_block_pole = ~(np.all(np.isfinite(F), axis=(1, 2)) & np.all(np.isfinite(N), axis=(1, 2)) & np.all(np.isfinite(CRU), axis=(1, 2)))
    F[on_block_pole] = np.eye(q)
    N = np.where(on_block_pole[:, None, None], 1.0, N)
    CRU = np.where(on_block_pole[:, None, None], 0.0, CRU)
    with np.errstate(all="ignore"):
        U, _, Vh = np.linalg.svd(F)
        z = Vh[:, -1, :].conj()  # F z ~ 0
        w = U[:, :, -1].conj()  # w^T F ~ 0
        denom = np.einsum("kq,kqr,kr->k", w, N, z)
        a = np.einsum("kpq,kq->kp", CRU, z) / denom[:, None]
        b = w @ bw.W
        # a pole on (or within rounding of) a block's own pole: that mode is not moved by
        # the wiring and the formula above divides rounding by rounding; its residue is
        # the block mode's own (C x)(y^T B)
        j = np.argmin(np.abs(poles[:, None] - vals[None, :]), axis=1)
        own = on_block_pole | (np.abs(poles - vals[j]) <= _OWN_MODE * np.abs(poles)) | ~np.all(np.isfinite(a), axis=1) | ~np.isfinite(denom)
        j = _distinct_modes(poles, vals, own, j)
        if j is None:
            return None
        a[own] = cx[j[own]]
        b[own] = yb[j[own]]
    if not (np.all(np.isfinite(a)) and np.all(np.isfinite(b))):
        return None
    return a, b


def _distinct_modes(poles: np.ndarray, vals: np.ndarray, own: np.ndarray, nearest: np.ndarray) -> np.ndarray | None:
    """Give each unmoved pole its own block mode, or None when the residues of simple poles
    do not apply.

    Two blocks may share an eigenvalue (a controller pole at -1 beside a plant mode at -1
    the wiring leaves alone): each closed-loop copy must take the residue of a different
    mode, or one mode is counted twice and the other not at all. A pole moved by the wiring
    that coincides with another pole is a multiple pole; its residue is not rank one and
    the caller falls back to a Lyapunov solve.
    """
    j = nearest.copy()
    taken = np.zeros(vals.size, dtype=bool)
    for k in np.flatnonzero(own):
        dist = np.abs(vals - poles[k])
        dist[taken] = np.inf
        pick = int(np.argmin(dist))
        if not dist[pick] <= max(_OWN_MODE * abs(poles[k]), 4 * np.finfo(float).eps * abs(vals[pick])):
            return None
        j[k], taken[pick] = pick, True
    moved = np.flatnonzero(~own)
    if moved.size:
        gap = np.abs(poles[moved, None] - poles[None, :])
        gap[np.arange(moved.size), moved] = np.inf
        if np.any(gap.min(axis=1) <= _MULTIPLE * np.maximum(np.abs(poles[moved]), np.finfo(float).tiny)):
            return None
    return j


def h2_by_residues(bw, poles: np.ndarray, factors, groups: dict, signals: dict, *, progress=None) -> dict:
    """H2 norm of every path ``group -> signal`` by the residue sum (module docstring).

    ``groups``/``signals`` map names to column/row slices of the model. Returns
    ``(group, signal) -> float``, or ``None`` for a path where rounding could have cancelled
    too much of the sum. ``G(-l_k)`` is evaluated once for all paths; ``progress`` as in
    :meth:`BlockwiseModel.response` (it may raise to stop).
    """
    a, b = factors
    cols = np.concatenate([np.arange(sl.start, sl.stop) for sl in groups.values()]) if groups else np.zeros(0, int)
    G = bw.response(cols, slice(None), -poles, progress=progress)  # (n, p, m_groups)
    out: dict = {}
    at = 0
    for grp, gsl in groups.items():
        width = gsl.stop - gsl.start
        Gg = G[:, :, at : at + width]
        bg = b[:, gsl]
        at += width
        with np.errstate(all="ignore"):
            # terms[k, i] = sum_j G(-l_k)[i, j] a_k[i] b_k[j], per output row i
            per_row = np.einsum("kpm,kp,km->kp", Gg, a, bg)
        for sig, rsl in signals.items():
            terms = per_row[:, rsl].sum(axis=1)
            total = np.sum(terms)
            size = float(np.sum(np.abs(terms)))
            if not np.isfinite(size):
                out[grp, sig] = None
            elif size == 0.0:
                out[grp, sig] = 0.0
            elif abs(total.real) < _CANCELLATION * size or abs(total.imag) > 1e-8 * size:
                out[grp, sig] = None
            else:
                out[grp, sig] = float(np.sqrt(max(total.real, 0.0)))
    return out
