"""Reference norms computed from their definitions, independent of the engine's routes.

Used where a reference library's own answer is fragile: python-control's ``norm(sys, 2)``
returns inf with a warning ("poles close to the imaginary axis") when its gramian has a
rounding-level negative eigenvalue, which happens on some BLAS builds for well-behaved loops.
"""
from __future__ import annotations

import numpy as np
from scipy.integrate import quad

__all__ = ["h2_by_parseval"]


def h2_by_parseval(A, B, C) -> float:
    """H2 norm of the stable, strictly proper ``C (sI - A)^-1 B`` from its definition.

    Closed form (Parseval's theorem): ``||G||_2^2 = (1/pi) int_0^inf ||G(jw)||_F^2 dw``,
    integrated by scipy's adaptive ``quad`` after ``w = tan(t)`` maps ``[0, inf)`` onto
    ``[0, pi/2)``. No Lyapunov equation is solved, so it checks every gramian route.
    """
    A, B, C = (np.atleast_2d(np.asarray(M, dtype=float)) for M in (A, B, C))
    n = A.shape[0]
    eye = np.eye(n)

    def integrand(t: float) -> float:
        w = np.tan(t)
        G = C @ np.linalg.solve(1j * w * eye - A, B)
        return float(np.sum(np.abs(G) ** 2)) / np.cos(t) ** 2

    value, _ = quad(integrand, 0.0, np.pi / 2, limit=500, epsabs=0.0, epsrel=1e-11)
    return float(np.sqrt(value / np.pi))
