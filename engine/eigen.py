"""Poles an engineer can take at their word: where they lie and how far rounding can move them.

Two questions every pole list must answer before it is printed:

* **Where is each pole?** Open left half-plane, the imaginary axis (the origin kept
  apart), or the open right half-plane. Exact zeros come back from an eigenvalue solver
  as ``+-1e-17`` and a Jordan block of ``k`` integrators splits into a small circle of
  radius about ``(eps ||A||)^(1/k)``; :func:`classify_poles` uses a tolerance scaled by
  the size of the matrix and recognises such a circle around the origin by its radius and
  its centre (the mean of a cluster is accurate to rounding even when its members are
  not).
* **How many digits are right?** :func:`eigen_sensitivity` balances the matrix, reduces
  it to complex Schur form ``T`` (:func:`balanced_reduction`, the same reduction the
  app's frequency view evaluates its responses with, so one decomposition serves both),
  takes the left and right eigenvectors of ``T`` by back substitution and the condition
  number ``kappa_i = 1/|y_i^H x_i|`` of each eigenvalue (unit-norm vectors; a unitary
  change of coordinates leaves it unchanged), and bounds the rounding error to first
  order by ``kappa_i * eps * ||A_bal||_F`` (J. H. Wilkinson, The Algebraic Eigenvalue
  Problem, Oxford 1965, ch. 2; the same bound as LAPACK's eigenvalue error estimates,
  from memory). :func:`trustworthy_digits` turns a bound into the number of significant
  digits worth printing.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg as sla

__all__ = [
    "PoleClasses",
    "EigenSensitivity",
    "classify_poles",
    "pole_regions",
    "matrix_scale",
    "axis_tolerance",
    "eigen_sensitivity",
    "balanced_reduction",
    "trustworthy_digits",
    "format_pole",
]

_EPS = float(np.finfo(float).eps)
# Rounding allowance, in units of eps * scale, for a simple eigenvalue on the axis.
_AXIS_ULPS = 1e3
# Eigenvalues closer than this many times the sum of their first-order bounds are treated
# as one cluster (common practice, no source: first-order bounds hold for perturbations
# well below the separation).
_GAP_FACTOR = 10.0


def axis_tolerance(poles, scale: float) -> np.ndarray:
    """How far from the imaginary axis rounding can put each of ``poles`` (simple poles of a
    matrix whose balanced size is ``scale``): ``1e3 eps max(scale, |p|)``. A pole with
    ``|Re p|`` within it is on the axis; the check command, the audit and the margins
    share this rule."""
    return _AXIS_ULPS * _EPS * np.maximum(scale, np.abs(np.asarray(poles)))


@dataclass(frozen=True)
class PoleClasses:
    """How many poles lie where.

    Attributes
    ----------
    open_rhp : int
        Poles with ``Re p > 0`` beyond rounding (the "right-half-plane" poles that
        the Nyquist criterion counts).
    origin : int
        Poles at ``s = 0`` within rounding (integrators).
    imaginary_axis : int
        Poles on the imaginary axis away from the origin (undamped oscillators).
    open_lhp : int
        The rest: ``Re p < 0`` beyond rounding.
    """

    open_rhp: int
    origin: int
    imaginary_axis: int
    open_lhp: int

    @property
    def on_axis(self) -> int:
        """Poles on the imaginary axis, the origin included."""
        return self.origin + self.imaginary_axis

    def phrase(self) -> str:
        """``"2 at the origin, 0 in the right half-plane"`` (axis poles named only when present)."""
        parts = []
        if self.origin:
            parts.append(f"{self.origin} at the origin")
        if self.imaginary_axis:
            parts.append(f"{self.imaginary_axis} elsewhere on the imaginary axis")
        parts.append(f"{self.open_rhp} in the right half-plane")
        return ", ".join(parts)

    def as_dict(self) -> dict:
        return {
            "open_rhp": self.open_rhp,
            "origin": self.origin,
            "imaginary_axis": self.imaginary_axis,
            "open_lhp": self.open_lhp,
        }


def matrix_scale(A) -> float:
    """Size of ``A`` after diagonal balancing (1-norm): the scale rounding errors of its
    eigenvalues are measured against (0 for an empty or zero matrix)."""
    A = np.atleast_2d(np.asarray(A, dtype=float))
    if A.size == 0 or not np.any(A):
        return 0.0
    Ab, _ = sla.matrix_balance(A, permute=False, separate=False)
    return float(np.linalg.norm(Ab, 1))


def classify_poles(poles, *, scale: float, bounds=None) -> PoleClasses:
    """Count poles in the open right half-plane, at the origin, on the rest of the axis.

    Parameters
    ----------
    poles : (n,) array_like of complex
        Eigenvalues as computed (with rounding).
    scale : float
        Size of the matrix they came from (:func:`matrix_scale`).
    bounds : (n,) array_like, optional
        How far rounding may have moved each pole (:attr:`EigenSensitivity.error_bound`).

    Notes
    -----
    A pole is on the axis when ``|Re p| <= 1e3 eps max(scale, |p|)``. A cluster of ``k``
    poles nearest the origin counts as ``k`` poles at the origin when its radius is at
    most ``(1e3 eps)^(1/k) scale`` (how far rounding moves a ``k``-fold defective zero),
    its mean is within ``1e-3`` of its radius of zero (a perturbed Jordan block splits
    symmetrically; real poles near zero do not) and, given ``bounds``, rounding can reach
    zero from every member (``|p|`` within its bound or ``1e3 eps scale``). Without the
    bounds the rule cannot tell lightly damped modes of a stiff matrix (poles at +-1e3 j
    beside a norm of 1e6) from a split multiple zero; with them it can (their bounds are
    1e-9; a split zero's are as large as the split).
    """
    labels = pole_regions(poles, scale=scale, bounds=bounds)
    return PoleClasses(
        open_rhp=int(np.sum(labels == "rhp")),
        origin=int(np.sum(labels == "origin")),
        imaginary_axis=int(np.sum(labels == "axis")),
        open_lhp=int(np.sum(labels == "lhp")),
    )


def pole_regions(poles, *, scale: float, bounds=None) -> np.ndarray:
    """Where each pole lies: ``"origin"``, ``"axis"``, ``"rhp"`` or ``"lhp"`` (same order as
    ``poles``; the rules of :func:`classify_poles`)."""
    p = np.asarray(poles, dtype=complex).ravel()
    n = p.size
    s = max(float(scale), 0.0)
    # with bounds, a pole may count at the origin only if rounding can reach zero from it
    reach = np.full(n, True) if bounds is None else (
        np.abs(p) <= np.maximum(np.asarray(bounds, dtype=float).ravel(), _AXIS_ULPS * _EPS * s))
    order = np.argsort(np.abs(p), kind="stable")
    # the k poles nearest the origin, for every k at once: their radius (the k-th smallest
    # modulus), their mean and whether rounding can reach zero from all of them; the
    # largest k that passes wins
    k = np.arange(1, n + 1)
    radius = np.abs(p[order])
    centre = np.abs(np.cumsum(p[order]) / k)
    with np.errstate(divide="ignore"):
        fits = (radius <= (_AXIS_ULPS * _EPS) ** (1.0 / k) * s) & (centre <= 1e-3 * radius + _AXIS_ULPS * _EPS * s)
    fits = (radius == 0.0) | (fits & np.logical_and.accumulate(reach[order]))
    origin = int(k[fits].max()) if np.any(fits) else 0
    labels = np.empty(n, dtype=object)
    labels[order[:origin]] = "origin"
    rest = order[origin:]
    tol = axis_tolerance(p[rest], s)
    re = p[rest].real
    labels[rest] = np.where(np.abs(re) <= tol, "axis", np.where(re > tol, "rhp", "lhp"))
    return labels.astype(str)


@dataclass(frozen=True)
class EigenSensitivity:
    """Eigenvalues with their condition numbers and first-order rounding bounds.

    Attributes
    ----------
    values : (n,) complex ndarray
        Eigenvalues of the balanced matrix (the same as of the matrix itself).
    condition : (n,) ndarray
        ``kappa_i = 1/|y_i^H x_i|`` for unit left/right eigenvectors; 1 for a normal
        matrix, ``inf`` for a defective eigenvalue.
    error_bound : (n,) ndarray
        ``kappa_i * eps * ||A_bal||_F``: how far rounding in the computation can have
        moved each eigenvalue (first order; a defective or tightly clustered eigenvalue
        can move further, and its ``kappa`` is then huge as a warning), or the cluster
        bound where that is smaller (a defective eigenvalue's first-order bound is
        infinite).
    cluster_bound : (n,) ndarray or None
        For the members of a cluster (eigenvalues closer than ten times their first-order
        bounds): a bound that holds however close they are (Henrici's theorem on the
        cluster's Schur block); ``inf`` for the others.
    """

    values: np.ndarray
    condition: np.ndarray
    error_bound: np.ndarray
    cluster_bound: np.ndarray | None = None

    @property
    def worst_condition(self) -> float:
        return float(self.condition.max()) if self.condition.size else 1.0

    def digits(self, *, max_digits: int = 6) -> np.ndarray:
        """Trustworthy significant digits of each eigenvalue (see :func:`trustworthy_digits`)."""
        return np.array([trustworthy_digits(v, b, max_digits=max_digits) for v, b in zip(self.values, self.error_bound)], dtype=int)

    def trusted(self, *, digits: int = 3) -> bool:
        """Whether every eigenvalue is right to at least ``digits`` significant digits."""
        return bool(np.all(self.digits(max_digits=digits) >= digits))


def balanced_reduction(A):
    """``A`` balanced and reduced to complex Schur form once:
    :class:`~loopwright.engine.responses.ReducedModel` with ``A = S Z T Z^H S^-1``.

    ``S`` is the diagonal of LAPACK's balancing (``gebal``, permutation and scaling; the
    permutation is only a reordering and is not applied). The eigenvalues, their condition
    numbers (:func:`eigen_sensitivity`) and frequency responses
    (:func:`~loopwright.engine.responses.reduced_response`) all come from this one
    decomposition.
    """
    import dataclasses

    from loopwright.engine.responses import reduce_model

    A = np.atleast_2d(np.asarray(A, dtype=float))
    Ab, d = _balanced(A)
    return dataclasses.replace(reduce_model(Ab), scale=d)


def _balanced(A: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``(D^-1 A D, diag(D))`` with ``D`` the scaling of LAPACK's balancing (``gebal``, with
    permutation; the permutation itself is left out: it does not change eigenvalues or
    their condition numbers)."""
    n = A.shape[0]
    if n == 0 or not np.any(A):
        return A, np.ones(n)
    _, (scale, perm) = sla.matrix_balance(A, permute=True, separate=True)
    d = np.empty(n)
    d[perm] = scale  # gebal's similarity is P diag(scale): the scale of state perm[j] is scale[j]
    return A / d[:, None] * d[None, :], d


def eigen_sensitivity(A, *, reduced=None) -> EigenSensitivity:
    """Eigenvalues of ``A`` with condition numbers and rounding bounds (see the module notes).

    Parameters
    ----------
    A : (n, n) array_like
    reduced : ReducedModel, optional
        :func:`balanced_reduction` of ``A``, when it is at hand (the app's views share
        one); made here otherwise.

    Returns
    -------
    EigenSensitivity
    """
    A = np.atleast_2d(np.asarray(A, dtype=float))
    n = A.shape[0]
    if n == 0:
        e = np.zeros(0)
        return EigenSensitivity(e.astype(complex), e, e, e)
    if reduced is None:  # on its own: the Schur form only (no cascade search, no Schur vectors kept)
        Ab, _d = _balanced(A)
        T_real, Z_real = sla.schur(Ab, output="real")
        T = np.triu(sla.rsf2csf(T_real, Z_real)[0])
    else:
        Ab, T, T_real = reduced.A_bal, reduced.T, reduced.T_real
    w = _conjugate_pairs(np.diag(T), T_real)
    kappa = triangular_condition_numbers(T)
    size = max(float(np.linalg.norm(Ab, "fro")), _EPS)
    bound = kappa * _EPS * size
    cluster = _cluster_bounds(T, w, bound, size)
    return EigenSensitivity(w, kappa, np.minimum(bound, cluster), cluster)


def _conjugate_pairs(w: np.ndarray, T_real: np.ndarray) -> np.ndarray:
    """The diagonal ``w`` of a complex Schur form made from the real one ``T_real``, with
    each complex pair exactly conjugate (as LAPACK's ``geev`` returns them for a real
    matrix): the two entries of each 2 x 2 block of ``T_real`` (a nonzero subdiagonal
    entry) are replaced by their conjugate mean; the change is within rounding."""
    w = np.array(w, dtype=complex)
    for k in np.nonzero(np.diag(T_real, -1))[0]:
        mean = 0.5 * (w[k] + np.conj(w[k + 1]))
        w[k], w[k + 1] = mean, np.conj(mean)
    return w


#: Rows of a triangular eigenvector solve done at once (one matrix product for the rest).
_VECTOR_BLOCK = 48
#: A column of eigenvectors is scaled down once an entry exceeds this (no overflow).
_VECTOR_BIG = 1e100


def _triangular_right_vectors(T: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Right eigenvectors of an upper triangular ``T``, one per column, by back substitution,
    and which columns met an eigenvalue equal to their own within rounding.

    Column ``k`` solves ``(T - t_kk I) x = 0`` with ``x[k] = 1`` and ``x[j] = 0`` for
    ``j > k``, for every ``k`` at once, row by row from the bottom (blocks of rows, the
    rows below a block entering through one matrix product). As in LAPACK's ``trevc``
    (from memory), a divisor ``t_jj - t_kk`` smaller than ``eps max(|t_kk|, max|T|)`` is
    replaced by that size (equal eigenvalues: the vector of a defective eigenvalue is then
    huge, and so its condition number), and a column whose entries grow past
    :data:`_VECTOR_BIG` is scaled down as a whole (each column is a vector of its own), so
    nothing overflows; ``x[k]`` then carries the scale.

    Returns
    -------
    X : (n, n) complex ndarray
    tied : (n,) bool ndarray
        Columns where a divisor was replaced.
    """
    n = T.shape[0]
    lam = np.diag(T)
    smin = np.maximum(_EPS * np.maximum(np.abs(lam), float(np.abs(T).max())), np.finfo(float).tiny)
    X = np.zeros((n, n), dtype=complex)
    X[np.arange(n), np.arange(n)] = 1.0
    tied = np.zeros(n, dtype=bool)
    stop = n
    while stop > 0:
        start = max(0, stop - _VECTOR_BLOCK)
        W = X[start:stop, start:]  # a view: the block's rows, the columns that can be nonzero
        if stop < n:
            W[:, stop - start :] = T[start:stop, stop:] @ X[stop:, stop:]
        for i in range(stop - start - 1, -1, -1):
            r = start + i
            cols = slice(i + 1, None)
            num = W[i, cols] + T[r, r + 1 : stop] @ W[i + 1 :, cols] if i + 1 < stop - start else W[i, cols]
            d = lam[r + 1 :] - lam[r]
            tiny = np.abs(d) < smin[r + 1 :]
            if np.any(tiny):
                d = np.where(tiny, smin[r + 1 :], d)
                tied[r + 1 :] |= tiny
            W[i, cols] = num / d
            big = np.abs(W[i, cols]) > _VECTOR_BIG
            if np.any(big):
                k = np.nonzero(big)[0] + r + 1
                X[:, k] /= np.abs(X[r, k])
        stop = start
    return X, tied


def triangular_condition_numbers(T) -> np.ndarray:
    """Condition numbers ``kappa_k = ||x_k|| ||y_k|| / |y_k^H x_k|`` of the eigenvalues
    ``t_kk`` of an upper triangular ``T`` (right and left eigenvectors ``x_k``, ``y_k``);
    ``inf`` for an eigenvalue defective to working precision.

    The left eigenvectors of ``T`` are the right ones of its flipped transpose
    ``J T^T J`` (``J`` the reversal), conjugated and flipped back. Both sets come from
    numpy's ``eig`` (LAPACK ``geev``): on a triangular matrix the QR iteration has nothing
    to do and only the eigenvector back substitution (``trevc``) works, with the
    interpreter lock released, so the window and the other views go on meanwhile.
    Should ``geev`` return the eigenvalues in another order than the diagonal, the
    eigenvectors are taken by our own back substitution instead
    (:func:`_substitution_condition_numbers`).
    """
    T = np.asarray(T, dtype=complex)
    n = T.shape[0]
    if n == 0:
        return np.zeros(0)
    Tf = np.ascontiguousarray(T.T[::-1, ::-1])
    try:
        wx, X = np.linalg.eig(T)
        wy, Yf = np.linalg.eig(Tf)
    except np.linalg.LinAlgError:
        return _substitution_condition_numbers(T)
    if not (np.array_equal(wx, np.diag(T)) and np.array_equal(wy, np.diag(Tf))):
        return _substitution_condition_numbers(T)
    # unit vectors; y_k = conj(J w_(n-1-k)), so y_k^H x_k = sum(J w_(n-1-k) * x_k)
    s = np.abs(np.sum(Yf[::-1, ::-1] * X, axis=0))
    with np.errstate(divide="ignore"):
        kappa = np.where(s > 0, 1.0 / np.maximum(s, 1e-300), np.inf)
    return np.maximum(kappa, 1.0)


def _substitution_condition_numbers(T: np.ndarray) -> np.ndarray:
    """:func:`triangular_condition_numbers` by our own back substitution
    (:func:`_triangular_right_vectors`); ``inf`` for an eigenvalue equal to another within
    rounding whose eigenvectors are orthogonal to within rounding (``kappa > 1/eps``). As
    ``x_k`` is zero below ``k`` and ``y_k`` above it, ``y_k^H x_k = conj(y_k[k]) x_k[k]``."""
    n = T.shape[0]
    X, tied_x = _triangular_right_vectors(T)
    Yf, tied_y = _triangular_right_vectors(np.ascontiguousarray(T.T[::-1, ::-1]))
    Y = np.conj(Yf[::-1, ::-1])
    tied = tied_x | tied_y[::-1]
    idx = np.arange(n)
    with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
        kappa = (np.linalg.norm(X, axis=0) / np.abs(X[idx, idx])) * (np.linalg.norm(Y, axis=0) / np.abs(Y[idx, idx]))
    return np.where(np.isfinite(kappa) & ~(tied & (kappa > 1.0 / _EPS)), np.maximum(kappa, 1.0), np.inf)


def _clusters(values: np.ndarray, bound: np.ndarray, size: float) -> list[np.ndarray]:
    """Groups of two or more eigenvalues closer than ``_GAP_FACTOR`` times their rounding
    bounds (chained).

    A disc's radius is the first-order bound, capped at ``size eps^(1/n)`` (how far an
    ``n``-fold defective eigenvalue of a matrix of that size can move): a defective
    eigenvalue has an infinite first-order bound, and the cap keeps it from swallowing
    eigenvalues far away from it.
    """
    n = values.size
    r = np.minimum(bound, size * _EPS ** (1.0 / n))
    parent = np.arange(n)

    def root(i):
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    # a first-order bound means little unless it is well below the gap: the members of a
    # perturbed k-fold eigenvalue sit on a circle about as wide as their own bounds
    close = np.abs(values[:, None] - values[None, :]) <= _GAP_FACTOR * (r[:, None] + r[None, :])
    for i, j in zip(*np.nonzero(np.triu(close, 1))):
        a, b = root(i), root(j)
        if a != b:
            parent[b] = a
    roots = np.array([root(i) for i in range(n)])
    return [np.flatnonzero(roots == g) for g in np.unique(roots) if np.count_nonzero(roots == g) > 1]


def _cluster_bounds(T: np.ndarray, values: np.ndarray, bound: np.ndarray, size: float) -> np.ndarray:
    """Bounds for the members of clusters of eigenvalues (``inf`` for the others).

    The first-order bound ``kappa eps ||A||`` is infinite for a defective eigenvalue (a
    chain of integrators) and huge in a tight cluster. For a cluster of ``k`` eigenvalues
    the Schur form is reordered to put it first (LAPACK ``ztrsen``, which also returns
    ``1/||P||``, ``P`` the cluster's spectral projector). Decoupling the cluster from the
    rest amplifies a backward error ``n eps ||A||`` by at most ``||P||``, and Henrici's
    theorem bounds how far the eigenvalues of the cluster's triangular block ``D + N``
    then move: by ``max(theta, theta^(1/k))`` with ``theta = ||E|| sum_{j<k} ||N||^j``
    (G. H. Golub and C. F. Van Loan, Matrix Computations, Theorem 7.2.3, from memory),
    applied to ``A / ||A||`` so the bound does not depend on units. Unlike the first-order
    bound it holds however close the members are (a 4-fold defective zero moves by
    about eps^(1/4), where ``kappa`` is infinite), but it is often pessimistic.
    """
    out = np.full(values.size, np.inf)
    bad = bound > 1e3 * _EPS * size
    groups = [g for g in _clusters(values, bound, size) if np.any(bad[g])]
    if not groups:
        return out
    Z = np.eye(T.shape[0], dtype=complex)  # not updated (wantq=0), but the routine takes one
    diag = np.diag(T).copy()
    n = values.size
    for g in groups:
        k = g.size
        free = np.ones(n, dtype=bool)
        select = np.zeros(n, dtype=np.int32)
        for v in values[g]:  # the Schur diagonal entries matching this cluster's members
            i = int(np.argmin(np.where(free, np.abs(diag - v), np.inf)))
            free[i] = False
            select[i] = 1
        if k < n:
            Ts, _, _, _, s, _, info = sla.lapack.ztrsen(select, T, Z, job="E", wantq=0, lwork=max(1, 2 * k * (n - k)))
            if info != 0 or not s > 0:
                continue
            projector = 1.0 / s
        else:
            Ts, projector = T, 1.0
        block = Ts[:k, :k] / size
        nil = np.linalg.norm(np.triu(block, 1), 2)
        # backward error of the Schur form: n eps ||A|| (the modest growth factor of the QR
        # algorithm taken as n; under a k-th root it matters, unlike in first-order bounds)
        theta = projector * n * _EPS * float(np.sum(nil ** np.arange(k)))
        out[g] = size * max(theta, theta ** (1.0 / k))
    return out


def trustworthy_digits(value: complex, bound: float, *, max_digits: int = 6) -> int:
    """Significant digits of ``value`` that an error of ``bound`` leaves intact (0 to
    ``max_digits``): ``floor(log10(|value| / bound))``."""
    mag = abs(complex(value))
    if not np.isfinite(bound):
        return 0
    if bound <= 0 or mag == 0:
        return max_digits if bound <= 0 else 0
    return int(np.clip(np.floor(np.log10(mag / bound)), 0, max_digits))


def format_pole(p: complex, bound: float, *, max_digits: int = 6) -> str:
    """A pole with only its trustworthy digits: ``-4.36 +- 0.21j``, or
    ``-4 (+-8, not trustworthy)`` when rounding may move it by more than its size allows,
    ``0 (+-1.1e-05)`` when it may be zero (rounding may move it further than it lies from 0).

    An imaginary part smaller than the bound is dropped: the pole may be real.
    """
    from loopwright.engine.cli_common import fmt_complex, fmt_num

    digits = trustworthy_digits(p, bound, max_digits=max_digits)
    if digits >= max_digits:
        return fmt_complex(p, digits=max_digits)
    if digits == 0 and abs(complex(p)) <= 0.5 * bound and np.isfinite(bound):
        # rounding cannot tell this pole from zero (an integrator, or a cluster of them);
        # the true pole lies within |p| + bound of 0
        return f"0 (+-{fmt_num(abs(complex(p)) + bound, digits=2)})"
    if digits == 0:
        return f"{fmt_num(p.real, digits=1)} (+-{fmt_num(bound, digits=2)}, not trustworthy)"
    shown = complex(p.real, 0.0) if abs(p.imag) <= bound else p
    return f"{fmt_complex(shown, digits=digits)} (+-{fmt_num(bound, digits=2)})"
