"""The small picture on a dynamic block's face: its order and the shape of its magnitude curve.

The canvas draws a dynamic block as its name over a thumbnail of its gain against
frequency (largest singular value for a block with several inputs or outputs), so two
filters can be told apart without opening them. This module computes that thumbnail; the
GUI only draws it. The frequency range spans one decade either side of the block's
characteristic frequencies (the moduli of its non-zero poles and zeros of the realisation),
or 0.1 to 10 rad/s when it has none.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from loopwright.engine.blocks import realize
from loopwright.engine.diagram import Block, Diagram

__all__ = ["BlockSketch", "block_sketch"]


@dataclass(frozen=True)
class BlockSketch:
    """What a dynamic block's face shows.

    Attributes
    ----------
    order : int
        Number of states of the block's realisation.
    w_rad_s : (k,) ndarray
        Frequencies, rad/s, log-spaced.
    magnitude : (k,) ndarray
        Gain at each frequency (absolute value, not dB; largest singular value when the
        block has several inputs or outputs). ``inf`` where a pole sits on the grid.
    """

    order: int
    w_rad_s: np.ndarray
    magnitude: np.ndarray


def _corner_frequencies(A: np.ndarray, B: np.ndarray, C: np.ndarray, D: np.ndarray) -> np.ndarray:
    moduli = [np.abs(np.linalg.eigvals(A))] if A.size else []
    if A.size and B.shape[1] == 1 and C.shape[0] == 1:
        # SISO zeros: eigenvalues of the pencil's finite part, through the transfer
        # function's numerator det([A - sI, B; C, D]) = 0 (generalised eigenvalues).
        from scipy.linalg import eigvals

        n = A.shape[0]
        M = np.block([[A, B], [C, D]])
        N = np.zeros_like(M)
        N[:n, :n] = np.eye(n)
        z = eigvals(M, N)
        moduli.append(np.abs(z[np.isfinite(z)]))
    w = np.concatenate(moduli) if moduli else np.zeros(0)
    return w[w > 1e-12]


def block_sketch(block: Block, *, points: int = 40) -> BlockSketch:
    """The thumbnail of ``block`` (a plant or dynamic block).

    Parameters
    ----------
    block : Block
        A ``plant`` or ``dynamic`` block, state space or transfer function.
    points : int, optional
        Number of frequencies.

    Returns
    -------
    BlockSketch

    Raises
    ------
    ParameterError
        The block's model cannot be read (the message names the block and field).

    Examples
    --------
    >>> b = Block("b1", "dynamic", "F", {"num": [100.0], "den": [1.0, 14.0, 100.0]})
    >>> s = block_sketch(b)
    >>> s.order, float(s.w_rad_s[0]), float(s.w_rad_s[-1])
    (2, 1.0, 100.0)
    >>> round(float(s.magnitude[0]), 3), round(float(s.magnitude[-1]), 4)
    (1.0, 0.01)
    """
    r = realize(block, Diagram())
    A, B, C, D = r.A, r.B, r.C, r.D
    corners = _corner_frequencies(A, B, C, D)
    if corners.size:
        # Rounded first: a corner at 10 computed as 9.999999999 is still one decade.
        lo = np.floor(np.round(np.log10(corners.min()), 6)) - 1.0
        hi = np.ceil(np.round(np.log10(corners.max()), 6)) + 1.0
    else:
        lo, hi = -1.0, 1.0
    w = np.logspace(lo, hi, points)
    n = A.shape[0]
    if n == 0:
        G = np.broadcast_to(D, (points, *D.shape))
    else:
        # (jw I - A) X = B for every frequency at once (batched solve).
        M = 1j * w[:, None, None] * np.eye(n)[None] - A[None]
        with np.errstate(all="ignore"):
            try:
                X = np.linalg.solve(M, np.broadcast_to(B, (points, *B.shape)).astype(complex))
            except np.linalg.LinAlgError:
                X = np.stack([_solve_or_inf(Mk, B) for Mk in M])
            # a pole on the grid leaves inf in X: inf * 0 in the product is nan there, drawn as inf below
            G = C[None] @ X + D[None]
    if G.shape[1] == 1 and G.shape[2] == 1:
        mag = np.abs(G[:, 0, 0])
    else:
        mag = np.linalg.svd(np.nan_to_num(G, nan=np.inf, posinf=1e300), compute_uv=False)[:, 0]
    return BlockSketch(order=n, w_rad_s=w, magnitude=np.where(np.isfinite(mag), mag, np.inf))


def _solve_or_inf(M: np.ndarray, B: np.ndarray) -> np.ndarray:
    try:
        return np.linalg.solve(M, B.astype(complex))
    except np.linalg.LinAlgError:
        return np.full(B.shape, np.inf, dtype=complex)
