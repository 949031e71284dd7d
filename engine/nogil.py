"""Linear algebra that lets other threads run while it computes.

scipy.linalg's LAPACK wrappers hold Python's interpreter lock for the whole call; numpy's
linalg functions release it. In the app, views compute on worker threads while the window
draws: measured on a 2-core machine, one ``scipy.linalg.eigvals`` of an 800 x 800 matrix on
a worker stalled the window's thread for 474 ms (``numpy.linalg.eigvals``: at most 14 ms),
and a plot waited a quarter of a second to be painted. Where numpy offers the same LAPACK
routine, the engine calls it through here; the answers are those of the same driver
(``geev`` for eigenvalues).
"""
from __future__ import annotations

import numpy as np

__all__ = ["eigenvalues"]


def eigenvalues(M) -> np.ndarray:
    """Eigenvalues of a square matrix (LAPACK ``geev``, balancing included), as a complex array.

    Raises
    ------
    ValueError
        ``M`` holds an infinity or NaN (as scipy's check does).
    numpy.linalg.LinAlgError
        The QR iteration did not converge.
    """
    M = np.asarray(M)
    if M.size and not np.all(np.isfinite(M)):
        raise ValueError("array must not contain infs or NaNs")
    if M.shape[0] == 0:
        return np.zeros(0, dtype=complex)
    return np.asarray(np.linalg.eigvals(M), dtype=complex)
