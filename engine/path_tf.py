"""The transfer function of one path of the assembled model, in the terms an engineer checks.

``path_transfer(model, source, signal)`` reduces the path to a minimal realisation
(:func:`structure.minimal_realization`) and reports its order, poles, transmission zeros
(right-half-plane ones flagged: they limit how fast the path can be made to respond), DC
gain, high-frequency gain ``D`` and, for a scalar path, numerator and denominator
coefficients (descending powers of ``s``). The numerator comes from the identity
``det(sI - A + B C) = det(sI - A) (1 + C (sI - A)^-1 B)`` (closed form), so
``num = poly(A - B C) - poly(A) + D poly(A)`` on the minimal realisation.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from loopwright.engine.eigen import matrix_scale
from loopwright.engine.norms import dc_gain
from loopwright.engine.structure import minimal_realization, transmission_zeros

__all__ = ["PathTransfer", "path_transfer"]


@dataclass
class PathTransfer:
    """One path ``G(s)`` from an input group to a signal.

    Attributes
    ----------
    source, signal : str
    order : int
        States of a minimal realisation.
    poles : complex ndarray
    zeros : complex ndarray
        Transmission zeros (finite).
    rhp_zeros : complex ndarray
        The zeros with ``Re z > 0`` beyond rounding.
    dc_gain : ndarray (p, m)
        ``G(0)``; ``inf`` entries through a pole at the origin.
    hf_gain : ndarray (p, m)
        ``G(inf) = D``.
    num, den : list of float or None
        Coefficients in descending powers of ``s`` (scalar paths only).
    """

    source: str
    signal: str
    order: int
    poles: np.ndarray
    zeros: np.ndarray
    rhp_zeros: np.ndarray
    dc_gain: np.ndarray
    hf_gain: np.ndarray
    num: list[float] | None
    den: list[float] | None

    def as_dict(self) -> dict:
        return {
            "from": self.source,
            "to": self.signal,
            "order": self.order,
            "poles": [[p.real, p.imag] for p in self.poles],
            "zeros": [[z.real, z.imag] for z in self.zeros],
            "rhp_zeros": [[z.real, z.imag] for z in self.rhp_zeros],
            "dc_gain": self.dc_gain,
            "hf_gain": self.hf_gain,
            "num": self.num,
            "den": self.den,
            "coefficients": "descending powers of s",
        }


def path_transfer(model, source: str, signal: str) -> PathTransfer:
    """The path from ``source`` (a source or an injection) to ``signal`` of an assembled model.

    Raises
    ------
    UnknownNameError
        No such input or signal (with suggestions).
    """
    grp = model.resolve_input(source)
    sig = model.resolve_signal(signal)
    A, B, C, D = model.pair(grp, sig)
    Am, Bm, Cm, Dm = minimal_realization(A, B, C, D)
    n = Am.shape[0]
    poles = np.linalg.eigvals(Am) if n else np.zeros(0, complex)
    poles = poles[np.lexsort((poles.imag, poles.real))]
    try:
        zeros = np.asarray(transmission_zeros(Am, Bm, Cm, Dm), dtype=complex) if n else np.zeros(0, complex)
    except (np.linalg.LinAlgError, ValueError):
        zeros = np.zeros(0, complex)
    zeros = zeros[np.isfinite(zeros)]
    num = den = None
    scalar = Dm.shape == (1, 1)
    if scalar:
        den_c = np.real(np.poly(Am)) if n else np.ones(1)
        num_c = (np.real(np.poly(Am - Bm @ Cm)) - den_c + Dm[0, 0] * den_c) if n else Dm[0].copy()
        tiny = 1e-12 * max(np.abs(num_c).max(), 1e-300)
        first = int(np.argmax(np.abs(num_c) > tiny)) if np.any(np.abs(num_c) > tiny) else num_c.size - 1
        num_c = num_c[first:]
        num, den = [float(v) for v in num_c], [float(v) for v in den_c]
        # a SISO minimal realisation has exactly deg(num) finite zeros; the pencil may add
        # huge ones that stand for zeros at infinity
        zeros = zeros[np.argsort(np.abs(zeros), kind="stable")][: max(num_c.size - 1, 0)]
    zeros = zeros[np.lexsort((zeros.imag, zeros.real))] if zeros.size else zeros
    scale = max(matrix_scale(Am), 1e-300)
    rhp = zeros[zeros.real > 1e-8 * np.maximum(scale, np.abs(zeros))] if zeros.size else zeros
    with np.errstate(all="ignore"):
        g0 = np.asarray(dc_gain(A, B, C, D), float)
    finite = g0[np.isfinite(g0)]
    if finite.size:
        g0 = np.where(np.abs(g0) <= 1e-12 * np.abs(finite).max(), 0.0, g0)  # rounding of exact zeros
    return PathTransfer(grp, sig, n, poles, zeros, rhp, g0, np.asarray(Dm, float), num, den)
