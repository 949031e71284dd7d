"""Full steady-state covariance of a vector signal driven by the diagram's white-noise sources.

With every white source ``s`` of intensity ``W_s`` (``E[w(t) w(u)^T] = W_s delta(t - u)``),
the stationary state covariance solves ``A X + X A^T + sum_s B_s W_s B_s^T = 0`` (closed
form of a linear system driven by white noise; the same convention as the noise budget),
and a signal ``z = C x`` has covariance ``C X C^T``. A component with direct feedthrough
from a white source is itself white: its variance is infinite and so is reported.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from loopwright.engine.errors import AnalysisError
from loopwright.engine.noise import white_sources
from loopwright.engine.norms import is_stable_matrix, lyapunov_from_schur
from loopwright.engine.responses import reduce_model

__all__ = ["SignalCovariance", "signal_covariances"]


@dataclass
class SignalCovariance:
    """Steady-state covariance of one signal.

    Attributes
    ----------
    signal : str
    components : list of str
        Component names (``y[1]``, ``y[2]``, ...), the order of the matrix.
    matrix : ndarray (k, k)
        ``E[z z^T]`` in steady state (units of the signal squared); rows and columns of a
        white component are ``inf``.
    correlation : ndarray (k, k)
        ``matrix`` normalised by the standard deviations (``nan`` where undefined).
    """

    signal: str
    components: list[str]
    matrix: np.ndarray
    correlation: np.ndarray

    def as_dict(self) -> dict:
        return {"components": self.components, "matrix": self.matrix, "correlation": self.correlation}


def signal_covariances(model, signals=None) -> dict[str, SignalCovariance]:
    """Covariance of each named signal (default: every signal wider than one component).

    Raises
    ------
    AnalysisError
        The closed loop is not stable (no stationary covariance) or no source states a
        white-noise intensity.
    """
    srcs = white_sources(model)
    if not srcs:
        raise AnalysisError("no source states a white-noise intensity: there is no noise covariance to compute")
    n = model.A.shape[0]
    if n and not is_stable_matrix(model.A):
        raise AnalysisError("the closed loop is not stable: no stationary covariance exists")
    names = [s for s, sl in model.signals.items() if sl.stop - sl.start > 1] if signals is None else [model.resolve_signal(s) for s in signals]
    Q = np.zeros((n, n))
    red = reduce_model(model.A) if n else None
    S = red.scale if n else np.ones(0)
    for name, W in srcs.items():
        Bw = model.B[:, model.inputs[name]] / S[:, None] if n else np.zeros((0, W.shape[0]))
        Q += Bw @ W @ Bw.T
    X = lyapunov_from_schur(red.T_real, red.Z_real, Q) if n else np.zeros((0, 0))
    X = 0.5 * (X + X.T)
    out = {}
    for sig in names:
        sl = model.signals[sig]
        Cs = model.C[sl] * S[None, :] if n else np.zeros((sl.stop - sl.start, 0))
        M = Cs @ X @ Cs.T
        white = np.zeros(sl.stop - sl.start, dtype=bool)
        for name, W in srcs.items():
            Dd = model.D[sl, model.inputs[name]]
            white |= np.einsum("ij,jk,ik->i", Dd, W, Dd) > 0
        M[white, :] = np.inf
        M[:, white] = np.inf
        sd = np.sqrt(np.maximum(np.diag(M), 0.0))
        with np.errstate(invalid="ignore", divide="ignore"):
            R = M / np.outer(sd, sd)
        R[~np.isfinite(R)] = np.nan
        out[sig] = SignalCovariance(sig, list(model.output_names[sl]), M, R)
    return out
