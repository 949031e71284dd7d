"""``L(jw)`` of a scalar loop, many times over: the grid of the margins and of the Nyquist
curve, then many single points (root and peak refinement).

Two evaluators, chosen by the loop's structure:

* **Cascade.** A loop opened in a ring of coupled loops (or any loop whose state matrix is
  block triangular up to a permutation, :func:`loopwright.engine.responses._triangular_blocks`)
  is evaluated part by part in its own coordinates: from the last part to the first,
  ``x_k = (s I - A_kk)^-1 (B_k + sum_j A_kj x_j)`` with one batched LU per part over all
  frequencies (closed form of block back substitution), or, where a part's eigenvector
  basis is well conditioned (condition number at most 1e4), one division per eigenvalue
  in that basis. The cost per frequency is
  ``sum_k b_k^3`` plus the couplings, instead of the ``n^2`` of a triangular solve of the
  whole Schur form; nothing is approximated and, as the work is done in the model's own
  coordinates, the relative accuracy of small values far down a long chain is kept.
* **Whole model.** Otherwise one complex Schur form serves every frequency
  (:func:`loopwright.engine.responses.reduced_response`, with its iterative refinement).
"""
from __future__ import annotations

import numpy as np

from loopwright.engine.responses import _as_system, _triangular_blocks, reduce_model, reduced_response

__all__ = ["LoopResponse", "densify"]

#: Largest part evaluated by batched LU (b^3 per frequency); a larger one means the whole-model route.
_PART_MAX = 32
#: Entries (states x frequencies) of one batch of the cascade evaluator: its work arrays stay
#: at a quarter of a megabyte (larger ones came fresh from the system on every call, and
#: touching their pages cost more than the arithmetic: 1,000 frequencies of a 50-state loop
#: 0.64 ms in batches, 1.2 ms at once; smaller batches pay the per-part overhead again).
_CHUNK_ENTRIES = 2**14
#: A part's eigenvector basis is used when its condition number is at most this (it costs
#: at most four of the sixteen digits; the margins ask for ten).
_KAPPA_MAX = 1e4


class LoopResponse:
    """``L(jw) = C (jw I - A)^-1 B + D`` of a SISO loop, for many frequencies.

    Parameters
    ----------
    A, B, C, D : array_like
        A SISO realisation (shapes (n, n), (n, 1), (1, n), (1, 1)).

    Attributes
    ----------
    A, B, C, D : ndarray
    d : float
        ``L(inf)``.
    poles : (n,) complex ndarray
        Eigenvalues of ``A`` (per part on the cascade route).
    route : str
        ``"cascade"`` or ``"whole model"``.
    """

    def __init__(self, A, B, C, D=None):
        A, B, C, D = _as_system(A, B, C, D)
        if B.shape[1] != 1 or C.shape[0] != 1:
            raise ValueError(f"LoopResponse needs a SISO loop; got {C.shape[0]}x{B.shape[1]}")
        self.A, self.B, self.C, self.D = A, B, C, D
        self.d = float(D[0, 0])
        self.n = A.shape[0]
        self._reduced = None
        parts = _triangular_blocks(A) if self.n else []
        if len(parts) > 1 and max(p.size for p in parts) <= _PART_MAX:
            self.route = "cascade"
            self._parts = parts
            # part k depends on the parts after it: A[parts[k], parts[j]] for j > k
            # each part in its own eigenvector basis when that basis is well conditioned
            # (then its solve is a division per frequency), else as it is (a batched LU)
            self._T, self._lam = [], []
            for p in parts:
                a = A[np.ix_(p, p)]
                lam, V = np.linalg.eig(a)  # numpy's: less overhead per small call than scipy's
                if np.all(np.isfinite(V)) and np.linalg.cond(V) <= _KAPPA_MAX:
                    self._T.append((V, np.linalg.inv(V)))
                    self._lam.append(lam)
                else:
                    self._T.append(None)
                    self._lam.append(lam)
            self._Akk = [A[np.ix_(p, p)] for p in parts]
            self._links = []
            for k, pk in enumerate(parts):
                links = []
                for j in range(k + 1, len(parts)):
                    blk = A[np.ix_(pk, parts[j])]
                    if np.any(blk):
                        links.append((j, self._to_part(k, self._from_part(j, blk, right=True), left=True).T.copy()))
                self._links.append(links)
            self._Bk = [self._to_part(k, B[p, :], left=True)[:, 0].astype(complex) for k, p in enumerate(parts)]
            self._Ck = [self._from_part(k, C[:, p], right=True)[0].astype(complex) for k, p in enumerate(parts)]
            self.poles = np.concatenate(self._lam).astype(complex)
            # the same, laid out for few array operations per call: the parts one above the
            # other in one column of unknowns per frequency (part k in rows off[k]:off[k+1]),
            # each part's links as one matrix over the contiguous span of the parts it reads
            off = np.concatenate([[0], np.cumsum([p.size for p in parts])])
            self._off = off
            self._span = []
            for k, links in enumerate(self._links):
                if not links:
                    self._span.append(None)
                    continue
                lo, hi = off[min(j for j, _ in links)], off[max(j for j, _ in links) + 1]
                M = np.zeros((hi - lo, parts[k].size), dtype=complex)
                for j, blkT in links:
                    M[off[j] - lo : off[j + 1] - lo] = blkT
                self._span.append((lo, hi, np.ascontiguousarray(M.T)))
            self._C_all = np.concatenate(self._Ck)
        else:
            self.route = "whole model"
            self.poles = self.reduced.poles if self.n else np.zeros(0, complex)

    def _to_part(self, k: int, M: np.ndarray, *, left: bool) -> np.ndarray:
        """``V_k^-1 M`` for part ``k`` in its eigenvector basis (``M`` as is otherwise)."""
        return M if self._T[k] is None else self._T[k][1] @ M

    def _from_part(self, k: int, M: np.ndarray, *, right: bool) -> np.ndarray:
        """``M V_k`` for part ``k`` in its eigenvector basis (``M`` as is otherwise)."""
        return M if self._T[k] is None else M @ self._T[k][0]

    @property
    def reduced(self):
        """The complex Schur reduction of ``A`` (made on first use)."""
        if self._reduced is None:
            self._reduced = reduce_model(self.A)
            self._Bt = self._reduced.input_matrix(self.B)
            self._Ct = self._reduced.output_matrix(self.C)
        return self._reduced

    def _whole(self, w: np.ndarray) -> np.ndarray:
        red = self.reduced
        with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
            return reduced_response(red, self._Bt, self._Ct, self.D, 1j * w, B=self.B, C=self.C)[:, 0, 0]

    def _cascade(self, w: np.ndarray) -> np.ndarray:
        s = 1j * w
        off = self._off
        X = np.empty((off[-1], s.size), dtype=complex)
        # every diagonal part's divisor at once, inverted once: numpy divides complex arrays
        # elementwise several times slower than it inverts one and multiplies
        inv = 1.0 / (s[None, :] - self.poles[:, None])
        for k in range(len(self._parts) - 1, -1, -1):
            a, b = off[k], off[k + 1]
            span = self._span[k]
            if span is None:
                rhs = np.broadcast_to(self._Bk[k][:, None], (b - a, s.size))
            else:
                rhs = span[2] @ X[span[0] : span[1]]
                rhs += self._Bk[k][:, None]
            if self._T[k] is not None:
                np.multiply(rhs, inv[a:b], out=X[a:b])
            else:
                M = s[:, None, None] * np.eye(b - a)[None] - self._Akk[k][None]
                r3 = np.ascontiguousarray(rhs.T)[:, :, None]
                x = np.linalg.solve(M, r3)
                # one step of refinement: makes the solve componentwise backward stable
                # (Skeel 1980), which keeps its relative accuracy where s I - A_kk is nearly
                # singular but badly scaled (integrators next to stiff modes, at low frequency)
                x += np.linalg.solve(M, r3 - M @ x)
                X[a:b] = x[:, :, 0].T
        return self._C_all @ X + self.d

    def __call__(self, w) -> np.ndarray:
        """``L(jw)`` at the frequencies ``w`` (rad/s), shape (k,); ``inf``/``nan`` where
        ``jw`` is a pole."""
        w = np.atleast_1d(np.asarray(w, dtype=float))
        if self.n == 0:
            return np.full(w.shape, complex(self.d))
        if self.route != "cascade":
            return self._whole(w)
        out = np.empty(w.shape, dtype=complex)
        chunk = max(16, _CHUNK_ENTRIES // max(1, self.n))
        for a in range(0, w.size, chunk):
            wc = w[a : a + chunk]
            try:
                with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
                    out[a : a + chunk] = self._cascade(wc)
            except np.linalg.LinAlgError:  # jw exactly on a pole of a part
                out[a : a + chunk] = self._whole(wc)
        return out

    def grid(self, *, zeros=(), points_per_decade: int = 80, decades_beyond: float = 3.0, passes: int = 6):
        """A grid over the loop's dynamics and ``L`` on it.

        :func:`loopwright.engine.views_data.drawing_frequency_grid` on the poles and the
        ``zeros`` given (log-spaced, ``decades_beyond`` beyond them, plus nine points across
        every lightly damped one), then densified (:func:`densify`) where neighbours differ
        by more than 10 degrees in phase or 10 % in magnitude, so that a crossing cannot
        hide between two samples and a peak is sampled near its top.

        Returns
        -------
        w, L : (k,) ndarrays (rad/s; finite values only)
        """
        from loopwright.engine.views_data import drawing_frequency_grid

        roots = np.concatenate([np.atleast_1d(np.asarray(self.poles, dtype=complex)), np.atleast_1d(np.asarray(zeros, dtype=complex))])
        w = drawing_frequency_grid(roots, points_per_decade=points_per_decade, decades_beyond=decades_beyond)
        w, L = densify(self, w, self(w), passes=passes)
        finite = np.isfinite(L)
        return w[finite], L[finite]


def densify(evaluate, w: np.ndarray, L: np.ndarray, *, passes: int = 6) -> tuple[np.ndarray, np.ndarray]:
    """The sorted grid ``w`` and values ``L`` with the geometric midpoint added wherever two
    neighbours differ by more than 10 degrees in phase or 10 % in magnitude, ``passes``
    times at most; ``evaluate(w) -> L`` computes the new points (all of a pass at once)."""
    for _ in range(passes):
        ok = np.isfinite(L)
        with np.errstate(divide="ignore", invalid="ignore"):
            jump = np.abs(np.angle(L[1:] / L[:-1])) > np.radians(10.0)
            jump |= np.abs(np.log(np.abs(L[1:]) + 1e-300) - np.log(np.abs(L[:-1]) + 1e-300)) > 0.1
        jump &= ok[1:] & ok[:-1]
        if not jump.any():
            break
        mid = np.sqrt(w[:-1][jump] * w[1:][jump])
        order = np.argsort(np.concatenate([w, mid]), kind="stable")
        w, L = np.concatenate([w, mid])[order], np.concatenate([L, evaluate(mid)])[order]
    return w, L
