"""Frequency responses of an assembled model evaluated block by block.

The assembled model ``x' = A x + B w``, ``z = C x + D w`` comes from blocks that are
realised on their own and then wired. Its state matrix is therefore the block-diagonal
matrix ``A0`` of the blocks' own state matrices plus a coupling through the blocks' input
ports::

    A = A0 + U V,      B = U W,

where ``U`` (n x q) stacks every stateful block's own input matrix (``q`` = number of
input-port components of stateful blocks, usually small) and ``V``, ``W`` say how those
inputs depend on the states and the model inputs once the wiring is solved. With
``R(s) = (s I - A0)^-1`` (block diagonal) the push-through identity gives the exact response::

    G(s) = C R U (I - V R U)^-1 W + D.

Each block's ``R_i(s) U_i`` is evaluated on its own: a block whose state matrix splits
into small decoupled parts (a plant in modal form: one 2x2 part per mode) costs O(n_i) per
frequency; any other block O(n_i^2) per frequency after its own Schur form. The wiring then
needs one solve of size ``q`` per frequency. Nothing is approximated or reduced.

:func:`path_evaluator` chooses between this and the whole-model route
(:func:`loopwright.engine.responses.reduced_response` after one Schur form of ``A``) by an
operation count.

An estimator's state matrix ``A - L C`` mixes its model's states; its model's own ``A``
(often modal) is used as ``A0`` instead, the ``L C`` term going into the coupling (``L``
is part of the estimator's input matrix, so the factorisation stays exact).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from loopwright.engine.blocks import realize
from loopwright.engine.responses import ReducedModel, reduce_model, reduced_response

__all__ = ["BlockwiseModel", "GroupResponder", "PathEvaluator", "path_evaluator", "whole_model_cost"]

# Flop-count constants: a dense real Schur form with vectors costs about 25 n^3; a solve
# with a triangular matrix of size n for one right-hand side and one frequency costs 4 n^2
# real flops (complex arithmetic), twice that with the refinement step the whole-model
# route may take; a batched LU of a b x b part costs about 8 b^3 / 3 + 8 b^2 per column.
_SCHUR = 25.0
_TRI = 8.0
# numpy's per-call overhead, counted as flops, for each group of parts evaluated per chunk
_CALL = 2.0e4
#: Work (flops) between two progress reports of :meth:`BlockwiseModel.response`: tens of ms.
_REPORT_FLOPS = 5.0e7
# Entries (parts x frequencies x columns) held at once by the modal evaluator.
_MAX_ENTRIES = 2_000_000
# Entries (frequencies x parts) of the 1 / det tables of small parts formed at once: small
# enough to stay in cache between the passes over them, and few rows per product, which
# keeps the BLAS from waking its threads for a tiny product (ten times faster here).
_TABLE_ENTRIES = 20_000
# The coupling factors are trusted only if they reproduce A and B to this relative level.
_FACTOR_TOL = 1e-10
# Parts up to this size are evaluated by batched dense solves; a block with a bigger part
# (or with coupled parts) uses its own Schur form.
_SMALL_PART = 16


def _strong_parts(A: np.ndarray) -> tuple[list[np.ndarray], bool]:
    """State index sets of the strongly connected parts of ``A``'s coupling graph and
    whether the parts are decoupled from each other (``A`` block diagonal after permutation)."""
    n = A.shape[0]
    if n == 0:
        return [], True
    nz = sp.csr_matrix(A != 0)
    ncomp, labels = connected_components(nz, directed=True, connection="strong")
    rows, cols = nz.nonzero()
    decoupled = bool(np.all(labels[rows] == labels[cols]))
    order = np.argsort(labels, kind="stable")
    bounds = np.searchsorted(labels[order], np.arange(ncomp + 1))
    return [order[a:b] for a, b in zip(bounds[:-1], bounds[1:])], decoupled


class _ModalBlock:
    """``(s I - A0_i)^-1`` for a block whose state matrix splits into small decoupled parts.

    Parts of equal size are stacked and solved together (batched LU with pivoting, backward
    stable per part) for every frequency: O(n_i) work per frequency.
    """

    def __init__(self, A: np.ndarray, parts: list[np.ndarray]):
        self.n = A.shape[0]
        self.groups: list[tuple[np.ndarray, np.ndarray]] = []  # (indices (g, b), A parts (g, b, b))
        sizes = np.array([p.size for p in parts])
        for b in np.unique(sizes):
            idx = np.stack([p for p in parts if p.size == b])
            self.groups.append((idx, A[idx[:, :, None], idx[:, None, :]]))
        self.eigenvalues = np.concatenate([np.linalg.eigvals(a).ravel() for _, a in self.groups]) if self.groups else np.zeros(0, complex)

    def cost(self, q: int, rows: int) -> tuple[float, float]:
        """``(setup, per frequency)`` flop estimates for ``q`` columns and ``rows`` output rows."""
        per = 0.0
        for idx, _ in self.groups:
            g, b = idx.shape
            per += g * (8.0 * b**3 / 3 + 8.0 * b * b * q + 8.0 * b * q * rows) + _CALL
        return 0.0, per

    def response(self, rows: np.ndarray, U: np.ndarray, s: np.ndarray) -> np.ndarray:
        """``rows (s I - A0)^-1 U`` at every ``s``: shape (k, r, q)."""
        k, r, q = s.size, rows.shape[0], U.shape[1]
        out = np.zeros((k, r, q), dtype=complex)
        for idx, Ap in self.groups:
            g, b = idx.shape
            Ug = U[idx]  # (g, b, q)
            Rg = rows[:, idx]  # (r, g, b)
            keep = np.any(Ug != 0, axis=(1, 2)) & np.any(Rg != 0, axis=(0, 2))
            if not keep.any():
                continue
            Ap_k, Ug_k, Rg_k = Ap[keep], Ug[keep], Rg[:, keep]
            if b <= 2:
                out += _small_parts_response(Ap_k, Ug_k, Rg_k, s)
                continue
            gk = Ap_k.shape[0]
            eye = np.eye(b)
            chunk = max(1, _MAX_ENTRIES // max(1, gk * b * b))
            for a in range(0, k, chunk):
                sc = s[a : a + chunk]
                M = sc[:, None, None, None] * eye[None, None] - Ap_k[None]  # (kc, g, b, b)
                with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
                    X = _batched_solve(M, np.broadcast_to(Ug_k[None], (sc.size, gk, b, q)))
                    out[a : a + chunk] += np.einsum("rgb,kgbq->krq", Rg_k, X, optimize=True)
        return out


def _small_parts_response(Ap: np.ndarray, Ug: np.ndarray, Rg: np.ndarray, s: np.ndarray) -> np.ndarray:
    """``sum_g Rg[:, g] (s I - Ap[g])^-1 Ug[g]`` for parts of size 1 or 2, shape (k, r, q).

    With the adjugate of a 2x2 matrix, ``(s I - A)^-1 u = ((s - tr A) u + A u) / det(s I - A)``,
    so each part contributes ``(s alpha + beta) / det`` with ``alpha = r u`` and
    ``beta = r (A - tr(A) I) u`` fixed: the sum over parts is two matrix products of the
    table ``1 / det(s_k I - A_g)`` (frequencies x parts) with ``alpha`` and ``beta``. The
    determinant is formed as ``(s - l1)(s - l2)`` from the part's eigenvalues, which keeps
    its relative accuracy next to a lightly damped pole. For 1x1 parts ``alpha = r u``,
    ``beta = 0`` and ``det = s - a``.
    """
    g, b, _ = Ap.shape
    r, q = Rg.shape[0], Ug.shape[2]
    alpha = np.einsum("rgb,gbq->grq", Rg, Ug).reshape(g, r * q)
    if b == 1:
        beta = None
        lam = Ap[:, 0, :1]  # (g, 1)
    else:
        tr = Ap[:, 0, 0] + Ap[:, 1, 1]
        AmT = Ap - tr[:, None, None] * np.eye(2)[None]
        beta = np.einsum("rgb,gbc,gcq->grq", Rg, AmT, Ug).reshape(g, r * q)
        lam = np.linalg.eigvals(Ap)  # (g, 2)
    out = np.empty((s.size, r * q), dtype=complex)
    chunk = max(1, _TABLE_ENTRIES // max(1, g))
    if b == 2 and not np.any(s.real):
        # on the imaginary axis s = j w: det = (det A - w^2) - j w tr A has its real and
        # imaginary parts in real arithmetic (the real part one subtraction, so relative
        # accuracy about eps / (2 zeta) at a resonance of damping zeta), and 1 / det is
        # applied by real matrix products
        w = s.imag
        dA = Ap[:, 0, 0] * Ap[:, 1, 1] - Ap[:, 0, 1] * Ap[:, 1, 0]
        with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
            for a in range(0, s.size, chunk):
                wc = w[a : a + chunk]
                re = dA[None, :] - (wc * wc)[:, None]
                im = -wc[:, None] * tr[None, :]
                mag = re * re + im * im
                P, Q = re / mag, -im / mag  # 1 / det = P + j Q
                Pa, Qa, Pb, Qb = P @ alpha, Q @ alpha, P @ beta, Q @ beta
                # (j w alpha + beta)(P + j Q) = (Pb - w Qa) + j (w Pa + Qb)
                out[a : a + chunk].real = Pb - wc[:, None] * Qa
                out[a : a + chunk].imag = wc[:, None] * Pa + Qb
        return out.reshape(s.size, r, q)
    with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
        for a in range(0, s.size, chunk):
            sc = s[a : a + chunk]
            den = sc[:, None] - lam[None, :, 0]
            if b == 2:
                den = den * (sc[:, None] - lam[None, :, 1])
            inv = 1.0 / den  # (kc, g)
            part = sc[:, None] * (inv @ alpha) if b == 2 else inv @ alpha
            if beta is not None:
                part += inv @ beta
            out[a : a + chunk] = part
    return out.reshape(s.size, r, q)


def _small_parts_pair(Ap: np.ndarray, Ug: np.ndarray, Rg: np.ndarray, s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``sum_g Rg[:, g] R_g Ug[g]`` and ``sum_g Rg[:, g] R_g^2 Ug[g]`` with
    ``R_g = (s I - Ap[g])^-1`` for parts of size 1 or 2, each (k, r, q).

    As in :func:`_small_parts_response`: with ``Ã = A - tr(A) I`` the adjugate is
    ``s I + Ã``, so ``R u = (s alpha + beta) / det`` and
    ``R^2 u = (s^2 alpha + 2 s beta + gamma) / det^2`` with ``alpha = r u``,
    ``beta = r Ã u``, ``gamma = r Ã^2 u`` (for 1x1 parts ``R = 1 / (s - a)``).
    """
    g, b, _ = Ap.shape
    r, q = Rg.shape[0], Ug.shape[2]
    alpha = np.einsum("rgb,gbq->grq", Rg, Ug).reshape(g, r * q)
    if b == 2:
        tr = Ap[:, 0, 0] + Ap[:, 1, 1]
        At = Ap - tr[:, None, None] * np.eye(2)[None]
        AtU = np.einsum("gbc,gcq->gbq", At, Ug)
        beta = np.einsum("rgb,gbq->grq", Rg, AtU).reshape(g, r * q)
        gamma = np.einsum("rgb,gbc,gcq->grq", Rg, At, AtU).reshape(g, r * q)
        lam = np.linalg.eigvals(Ap)
    else:
        lam = Ap[:, 0, :1]
    out1 = np.empty((s.size, r * q), dtype=complex)
    out2 = np.empty((s.size, r * q), dtype=complex)
    chunk = max(1, _TABLE_ENTRIES // max(1, g))
    alpha = alpha.astype(complex)  # one BLAS type for the products below
    if b == 2:
        beta, gamma = beta.astype(complex), gamma.astype(complex)
    with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
        for a in range(0, s.size, chunk):
            sc = s[a : a + chunk][:, None]
            den = sc - lam[None, :, 0]
            if b == 2:
                den *= sc - lam[None, :, 1]
            # 1 / den as conj(den) / |den|^2: numpy's complex division guards against
            # overflow at several times the cost, and |den|^2 stays far inside the range here
            inv = den.conj()
            inv /= den.real * den.real + den.imag * den.imag
            inv2 = inv * inv
            if b == 2:
                out1[a : a + chunk] = sc * (inv @ alpha) + inv @ beta
                out2[a : a + chunk] = sc * sc * (inv2 @ alpha) + 2.0 * sc * (inv2 @ beta) + inv2 @ gamma
            else:
                out1[a : a + chunk] = inv @ alpha
                out2[a : a + chunk] = inv2 @ alpha
    return out1.reshape(s.size, r, q), out2.reshape(s.size, r, q)


def _modal_pair(self, rows: np.ndarray, U: np.ndarray, s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``rows R U`` and ``rows R R U`` with ``R = (s I - A0)^-1``, each (k, r, q)."""
    k, r, q = s.size, rows.shape[0], U.shape[1]
    out1 = np.zeros((k, r, q), dtype=complex)
    out2 = np.zeros((k, r, q), dtype=complex)
    for idx, Ap in self.groups:
        g, b = idx.shape
        Ug, Rg = U[idx], rows[:, idx]
        keep = np.any(Ug != 0, axis=(1, 2)) & np.any(Rg != 0, axis=(0, 2))
        if not keep.any():
            continue
        Ap_k, Ug_k, Rg_k = Ap[keep], Ug[keep], Rg[:, keep]
        if b <= 2:
            first, second = _small_parts_pair(Ap_k, Ug_k, Rg_k, s)
            out1 += first
            out2 += second
            continue
        gk = Ap_k.shape[0]
        eye = np.eye(b)
        chunk = max(1, _MAX_ENTRIES // max(1, gk * b * b))
        for a in range(0, k, chunk):
            sc = s[a : a + chunk]
            M = sc[:, None, None, None] * eye[None, None] - Ap_k[None]
            with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
                X1 = _batched_solve(M, np.broadcast_to(Ug_k[None], (sc.size, gk, b, q)))
                X2 = _batched_solve(M, X1)
                out1[a : a + chunk] += np.einsum("rgb,kgbq->krq", Rg_k, X1, optimize=True)
                out2[a : a + chunk] += np.einsum("rgb,kgbq->krq", Rg_k, X2, optimize=True)
    return out1, out2


def _batched_solve(M: np.ndarray, R: np.ndarray) -> np.ndarray:
    """``M X = R`` for stacks of small matrices; singular ones (``s`` on a pole) give inf/nan.

    1x1 and 2x2 systems use the closed forms (Cramer's rule is forward stable for 2x2,
    Higham, Accuracy and Stability of Numerical Algorithms, 2nd ed., sec. 1.10.1, from
    memory); larger ones LU with partial pivoting.
    """
    b = M.shape[-1]
    if b == 1:
        return R / M
    if b == 2:
        m11, m12, m21, m22 = M[..., 0, 0, None], M[..., 0, 1, None], M[..., 1, 0, None], M[..., 1, 1, None]
        r1, r2 = R[..., 0, :], R[..., 1, :]
        det = m11 * m22 - m12 * m21
        return np.stack([(m22 * r1 - m12 * r2) / det, (m11 * r2 - m21 * r1) / det], axis=-2)
    try:
        return np.linalg.solve(M, R)
    except np.linalg.LinAlgError:
        out = np.empty(R.shape, dtype=complex)
        flatM = M.reshape(-1, *M.shape[-2:])
        flatR = R.reshape(-1, *R.shape[-2:])
        flatO = out.reshape(-1, *R.shape[-2:])
        for i in range(flatM.shape[0]):
            try:
                flatO[i] = np.linalg.solve(flatM[i], flatR[i])
            except np.linalg.LinAlgError:
                flatO[i] = np.inf
        return out


def _modal_eigen(self, C: np.ndarray, B: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Eigenvalues of every part with ``C x`` and ``y^T B`` of their right/left
    eigenvectors (``y^T x = 1``); ``C``, ``B`` restricted to the block's states."""
    vals, cx, yb = [], [], []
    for idx, Ap in self.groups:
        lam, X = np.linalg.eig(Ap)  # (g, b), (g, b, b)
        Y = np.linalg.inv(X)  # rows: left eigenvectors with y^T x = 1
        vals.append(lam.ravel())
        cx.append(np.einsum("pgb,gbe->gep", C[:, idx], X).reshape(-1, C.shape[0]))
        yb.append(np.einsum("geb,gbm->gem", Y, B[idx]).reshape(-1, B.shape[1]))
    return np.concatenate(vals), np.concatenate(cx), np.concatenate(yb)


_ModalBlock.response_pair = _modal_pair
_ModalBlock.eigen = _modal_eigen


class _SchurBlock:
    """``(s I - A0_i)^-1`` through the block's own complex Schur form: O(n_i^2) per frequency."""

    def __init__(self, A: np.ndarray):
        self.n = A.shape[0]
        self.A = A
        self._red: ReducedModel | None = None

    @property
    def red(self) -> ReducedModel:
        if self._red is None:
            self._red = reduce_model(self.A)
        return self._red

    @property
    def eigenvalues(self) -> np.ndarray:
        return self.red.poles

    def cost(self, q: int, rows: int) -> tuple[float, float]:
        n = self.n
        return _SCHUR * n**3, _TRI * n * n * q + 8.0 * n * q * rows

    def eigen(self, C: np.ndarray, B: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Eigenvalues with ``C x`` and ``y^T B`` of their right/left eigenvectors (``y^T x = 1``)."""
        lam, X = np.linalg.eig(self.A)
        return lam, (C @ X).T, np.linalg.solve(X, B)

    def response_pair(self, rows: np.ndarray, U: np.ndarray, s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """``rows R U`` and ``rows R R U`` with ``R = (s I - A0)^-1``, each (k, r, q)."""
        from loopwright.engine.responses import _shifted_solve

        red = self.red
        Ut, Rt = red.input_matrix(U), red.output_matrix(rows)
        with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
            X1 = _shifted_solve(red.T, s, Ut)
            X2 = _shifted_solve(red.T, s, X1)
            return np.einsum("rn,nkq->krq", Rt, X1), np.einsum("rn,nkq->krq", Rt, X2)

    def response(self, rows: np.ndarray, U: np.ndarray, s: np.ndarray) -> np.ndarray:
        red = self.red
        with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
            return reduced_response(red, red.input_matrix(U), red.output_matrix(rows), np.zeros((rows.shape[0], U.shape[1])), s, B=U, C=rows)


def _own_state_matrix(block, diagram, r=None) -> tuple[np.ndarray, np.ndarray]:
    """``(A0, B)`` of one stateful block: its realisation ``r`` (realised here if not
    given), except that an estimator uses its model's ``A`` when that splits into more
    decoupled parts than ``A - L C``."""
    r = realize(block, diagram) if r is None else r
    if block.kind == "estimator":
        n = r.A.shape[0]
        m = dict(r.inputs)["u"]
        L = r.B[:, m:]
        Cm = r.C[n:, :]
        A_model = r.A + L @ Cm
        if len(_strong_parts(A_model)[0]) > len(_strong_parts(r.A)[0]):
            return A_model, r.B
    return r.A, r.B


@dataclass
class _Block:
    states: slice
    channels: slice
    U: np.ndarray  # (n_i, q_i)
    evaluator: object


class BlockwiseModel:
    """The coupling form ``A = A0 + U V``, ``B = U W`` of an assembled model.

    Build with :meth:`from_model`; evaluate paths with :meth:`response`.
    """

    def __init__(self, model, blocks: list[_Block], V: np.ndarray, W: np.ndarray):
        self.model = model
        self.blocks = blocks
        self.V = V
        self.W = W
        self.q = V.shape[0]

    @classmethod
    def from_model(cls, model) -> "BlockwiseModel | None":
        """The coupling form of ``model``, or None when its blocks cannot be separated
        exactly (a block's inputs do not span its coupling, or no block has states)."""
        diagram = model.diagram
        by_name = {b.name: b for b in diagram.blocks.values()}
        A, B = model.A, model.B
        n = A.shape[0]
        if n == 0:
            return None
        blocks: list[_Block] = []
        V_parts, W_parts = [], []
        q = 0
        covered = np.zeros(n, dtype=bool)
        for name, sl in model.states.items():
            blk = by_name.get(name)
            if blk is None:
                return None
            A0, Ui = _own_state_matrix(blk, diagram, model.realizations.get(blk.id))
            if A0.shape[0] != sl.stop - sl.start:
                return None
            covered[sl] = True
            coupling = A[sl, :].copy()
            coupling[:, sl] -= A0
            scale_a = max(1.0, float(np.abs(A0).max(initial=0.0)), float(np.abs(coupling).max(initial=0.0)))
            # V_i, W_i from A - A0 = U V and B = U W, block row by block row (least squares
            # on the block's own input matrix; exact when its inputs span the coupling,
            # which is checked), on the few columns the coupling touches
            pinv = np.linalg.pinv(Ui)
            touched = np.flatnonzero(np.any(coupling != 0, axis=0))
            Vi = np.zeros((Ui.shape[1], n))
            Vi[:, touched] = pinv @ coupling[:, touched]
            Bi = B[sl, :]
            Wi = pinv @ Bi
            if np.abs(Ui @ Vi[:, touched] - coupling[:, touched]).max(initial=0.0) > _FACTOR_TOL * scale_a:
                return None
            if Bi.size and np.abs(Ui @ Wi - Bi).max(initial=0.0) > _FACTOR_TOL * max(1.0, float(np.abs(Bi).max())):
                return None
            parts, decoupled = _strong_parts(A0)
            if decoupled and max((p.size for p in parts), default=0) <= _SMALL_PART:
                ev = _ModalBlock(A0, parts)
            else:
                ev = _SchurBlock(A0)
            qi = Ui.shape[1]
            blocks.append(_Block(sl, slice(q, q + qi), Ui, ev))
            V_parts.append(Vi)
            W_parts.append(Wi)
            q += qi
        if not covered.all():
            return None
        V = np.vstack(V_parts) if V_parts else np.zeros((0, n))
        W = np.vstack(W_parts) if W_parts else np.zeros((0, B.shape[1]))
        return cls(model, blocks, V, W)

    @property
    def block_poles(self) -> np.ndarray:
        """Eigenvalues of the blocks' own state matrices (not of the closed loop)."""
        return np.concatenate([b.evaluator.eigenvalues for b in self.blocks]) if self.blocks else np.zeros(0, complex)

    def cost(self, m: int, p: int, k: int) -> float:
        """Flop estimate of :meth:`response` for ``m`` inputs, ``p`` outputs, ``k`` frequencies."""
        total = 0.0
        rows = self.q + p
        for b in self.blocks:
            setup, per = b.evaluator.cost(b.U.shape[1], rows)
            total += setup + k * per
        q = self.q
        return total + k * (8.0 * q**3 / 3 + 8.0 * q * q * m + 8.0 * p * q * m)

    def block_eigen(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Every block's own eigenvalues ``d_i`` with ``C x_i`` (n, p) and ``y_i^T B`` (n, m)
        of their eigenvectors: the residue of a mode the wiring does not move."""
        vals, cx, yb = [], [], []
        for b in self.blocks:
            lam, c, y = b.evaluator.eigen(self.model.C[:, b.states], self.model.B[b.states])
            vals.append(lam)
            cx.append(c)
            yb.append(y)
        return np.concatenate(vals), np.concatenate(cx), np.concatenate(yb)

    def coupling_terms(self, s, *, outputs: bool = False) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
        """``M(s) = V R(s) U`` and ``N(s) = V R(s)^2 U`` (both (k, q, q); ``dM/ds = -N``), and
        with ``outputs`` also ``C R(s) U`` (k, p, q), where ``R(s) = (s I - A0)^-1``.

        ``det(I - M(s)) prod_i (s - d_i)`` (``d_i`` the blocks' own poles) is the
        characteristic polynomial of the closed loop ``A = A0 + U V``.
        """
        s = np.atleast_1d(np.asarray(s, dtype=complex))
        k, q = s.size, self.q
        C = self.model.C
        lhs = np.vstack([self.V, C]) if outputs else self.V
        M = np.zeros((k, lhs.shape[0], q), dtype=complex)
        N = np.zeros((k, q, q), dtype=complex)
        for b in self.blocks:
            out_rows = lhs[:, b.states]
            used = np.flatnonzero(np.any(out_rows != 0, axis=1))
            if used.size == 0 or not np.any(b.U):
                continue
            first, second = b.evaluator.response_pair(out_rows[used], b.U, s)
            M[:, used, b.channels] = first
            v_used = used < q
            N[:, used[v_used], b.channels] = second[:, v_used]
        return M[:, :q], N, (M[:, q:] if outputs else None)

    def response(self, cols, rows, s, *, progress=None) -> np.ndarray:
        """``G(s)`` of the path from input columns ``cols`` to output rows ``rows``.

        ``progress(fraction)``, when given, is called after each share of the points
        (about :data:`_REPORT_FLOPS` of work each) and may raise to stop the evaluation.

        Returns
        -------
        (k, p, m) complex ndarray
        """
        s = np.atleast_1d(np.asarray(s, dtype=complex))
        if progress is not None:
            p_rows = self.model.C[rows].shape[0]
            m = np.asarray(self.W[:, cols]).shape[1]
            per_point = max(1.0, self.cost(m, p_rows, 1))
            step = max(1, int(_REPORT_FLOPS // per_point))
            parts = []
            for a in range(0, s.size, step):
                parts.append(self.response(cols, rows, s[a : a + step]))
                progress(min(a + step, s.size) / max(1, s.size))
            return np.concatenate(parts) if parts else self.response(cols, rows, s)
        C = self.model.C[rows]
        D = self.model.D[rows][:, cols]
        Wp = self.W[:, cols]
        p, m, q, k = C.shape[0], Wp.shape[1], self.q, s.size
        H = np.zeros((k, q + p, q), dtype=complex)
        lhs = np.vstack([self.V, C])
        for b in self.blocks:
            out_rows = lhs[:, b.states]
            used = np.flatnonzero(np.any(out_rows != 0, axis=1))
            if used.size == 0 or not np.any(b.U):
                continue
            Y = b.evaluator.response(out_rows[used], b.U, s)  # (k, used, q_i)
            H[:, used, b.channels] = Y
        G = np.empty((k, p, m), dtype=complex)
        G[:] = D[None]
        if q == 0:
            return G
        eye = np.eye(q)
        with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
            X = _batched_solve(eye[None] - H[:, :q, :], np.broadcast_to(Wp[None].astype(complex), (k, q, m)))
            G += H[:, q:, :] @ X
        return G


def whole_model_cost(model, m: int, k: int) -> float:
    """Flop estimate of the whole-model route for one path of ``m`` inputs at ``k`` points."""
    n = model.A.shape[0]
    sizes = [p.size for p in _strong_parts(model.A)[0]]
    return _SCHUR * float(sum(b**3 for b in sizes)) + k * _TRI * n * n * m


@dataclass
class PathEvaluator:
    """``evaluate(w_rad_s) -> (k, p, m)`` for one path, and the poles to lay a grid on.

    ``route`` is ``"whole model"`` or ``"block by block"``; ``poles`` are the closed-loop
    poles on the whole-model route and the blocks' own poles on the block-by-block route
    (used only to span the frequency grid; peaks are refined on the response itself).
    """

    route: str
    evaluate: object
    poles: np.ndarray

    def __call__(self, w_rad_s) -> np.ndarray:
        return self.evaluate(w_rad_s)


def path_evaluator(model, input_group: str, signal: str, *, points: int = 1000, blockwise: BlockwiseModel | None = None, reduced: ReducedModel | None = None) -> PathEvaluator:
    """Frequency-response evaluator of one path of ``model``, on the cheaper route.

    Parameters
    ----------
    model : AssembledModel
    input_group, signal : str
        As accepted by ``model.input_slice`` / ``model.signal_slice``.
    points : int
        Expected number of frequencies (weighs the one-off reductions against the work
        per frequency).
    blockwise, reduced : optional
        Already built :class:`BlockwiseModel` / whole-model reduction to reuse.
    """
    cols = model.input_slice(input_group)
    rows = model.signal_slice(signal)
    m, p = cols.stop - cols.start, rows.stop - rows.start
    A, B, C, D = model.pair(input_group, signal)
    if reduced is None and model.A.shape[0]:
        bw = BlockwiseModel.from_model(model) if blockwise is None else blockwise
        if bw is not None and bw.cost(m, p, points) < whole_model_cost(model, m, points):
            return PathEvaluator("block by block", lambda w: bw.response(cols, rows, 1j * np.asarray(w, dtype=float)), bw.block_poles)
    red = reduce_model(A) if reduced is None else reduced
    Bt, Ct = red.input_matrix(B), red.output_matrix(C)

    def evaluate(w):
        with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
            return reduced_response(red, Bt, Ct, D, 1j * np.atleast_1d(np.asarray(w, dtype=float)), B=B, C=C)

    return PathEvaluator("whole model", evaluate, red.poles)


class GroupResponder:
    """Responses of one input group to every signal, on the cheaper route, for the audit.

    :meth:`solve` evaluates at a set of frequencies and returns an opaque result;
    :meth:`outputs` reads some rows of it. On the whole-model route the result is the state
    response in Schur coordinates (outputs are formed only for the rows asked for); block
    by block it is the full output response.
    """

    def __init__(self, model, red: ReducedModel, cols: slice, *, points: int, blockwise: BlockwiseModel | None = None, Ct=None):
        self.model, self.red, self.cols = model, red, cols
        self.Dg = model.D[:, cols]
        m, p = cols.stop - cols.start, model.C.shape[0]
        self.blockwise = None
        if blockwise is not None and blockwise.cost(m, p, points) < points * _TRI * red.n**2 * m:
            self.blockwise = blockwise
        self.Bt = red.input_matrix(model.B[:, cols]) if red.n else np.zeros((0, m), dtype=complex)
        if Ct is None:
            Ct = red.output_matrix(model.C) if red.n else np.zeros((p, 0), dtype=complex)
        self.Ct = Ct

    @property
    def route(self) -> str:
        return "whole model" if self.blockwise is None else "block by block"

    def solve(self, w_rad_s, *, progress=None):
        """The response at ``w_rad_s``; ``progress(fraction)`` after each share of the
        points (tens of milliseconds of work each), which may raise to stop."""
        s = 1j * np.atleast_1d(np.asarray(w_rad_s, dtype=float))
        if progress is not None and s.size > 1:
            m = self.cols.stop - self.cols.start
            if self.blockwise is not None:
                per_point = self.blockwise.cost(m, self.model.C.shape[0], 1)
            else:
                per_point = _TRI * self.red.n**2 * max(1, m)
            step = max(1, int(_REPORT_FLOPS // max(1.0, per_point)))
            if step < s.size:
                parts = []
                for a in range(0, s.size, step):
                    parts.append(self.solve(w_rad_s[a : a + step]))
                    progress(min(a + step, s.size) / s.size)
                return np.concatenate(parts, axis=0 if self.blockwise is not None else 1)
        if self.blockwise is not None:
            return self.blockwise.response(self.cols, slice(0, self.model.C.shape[0]), s)
        from loopwright.engine.responses import _shifted_solve

        with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
            return _shifted_solve(self.red.T, s, self.Bt)

    def outputs(self, solved, rows: slice, points: slice = slice(None)) -> np.ndarray:
        """``(k, p_rows, m)`` response of ``rows`` at the ``points`` of a :meth:`solve` result."""
        if self.blockwise is not None:
            return solved[points, rows, :]
        X = solved[:, points, :]
        n, k, m = X.shape
        Ct = self.Ct[rows]
        with np.errstate(invalid="ignore", over="ignore"):
            # one matrix product (BLAS) rather than einsum's own loop: seconds on a large loop
            Y = (Ct @ X.reshape(n, k * m)).reshape(Ct.shape[0], k, m)
            return np.moveaxis(Y, 0, 1) + self.Dg[rows][None, :, :]
