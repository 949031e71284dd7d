"""Limits of performance at a loop break: what no tuning of this loop can beat.

For a scalar loop transfer ``L`` with ``S = 1/(1 + L)``:

* **Bode's sensitivity integral.** For a stable closed loop and ``L`` of relative degree at
  least 2, ``int_0^inf ln|S(jw)| dw = pi * sum Re(p_i)`` over the open-loop poles ``p_i``
  in the open right half-plane (H. W. Bode, Network Analysis and Feedback Amplifier
  Design, 1945, for the stable case; J. S. Freudenberg and D. P. Looze, IEEE Trans.
  Automatic Control AC-30(6), 1985, with unstable poles; both from memory). The integral
  is evaluated numerically (``w = tan(theta)``, scipy ``quad``) and printed beside the
  theory value: sensitivity pushed down at some frequencies pops up at others.
* **Peak sensitivity from a right-half-plane zero.** ``S(z) = 1`` at every zero ``z`` of
  ``L`` with ``Re z > 0`` and ``S(p) = 0`` at every right-half-plane pole, so by the
  maximum modulus principle ``||S||_inf >= prod_i |z + conj(p_i)| / |z - p_i|`` (closed
  form; S. Skogestad and I. Postlethwaite, Multivariable Feedback Control, 2nd ed., Wiley
  2005, ch. 5, from memory). Without right-half-plane poles the bound is 1.
* **Bandwidth rules of thumb** (common practice, as in Skogestad & Postlethwaite 2005,
  ch. 5, from memory): a real right-half-plane pole ``p`` asks for a gain crossover above
  about ``2 p``; a right-half-plane zero ``z`` keeps it below about ``|z| / 2``. These are
  guides, not theorems, and are printed as such.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.integrate as si

from loopwright.engine.eigen import eigen_sensitivity, matrix_scale, pole_regions
from loopwright.engine.responses import _as_system, reduce_model, reduced_response
from loopwright.engine.structure import minimal_realization, transmission_zeros

__all__ = ["PerformanceLimits", "performance_limits"]

RULES_SOURCE = "rules of thumb, common practice: Skogestad & Postlethwaite, Multivariable Feedback Control, 2005, ch. 5, from memory"


@dataclass
class PerformanceLimits:
    """What the right-half-plane poles and zeros of ``L`` allow.

    Attributes
    ----------
    rhp_poles, rhp_zeros : complex ndarray
        Open-loop poles and transmission zeros of ``L`` with ``Re > 0`` (beyond rounding).
    relative_degree : int
        Pole excess of ``L`` (0 with direct feedthrough).
    bode_integral : float
        ``int_0^inf ln|S(jw)| dw`` evaluated numerically (``nan`` when it does not apply:
        relative degree below 2 or an unstable closed loop).
    bode_integral_theory : float
        ``pi * sum Re(p_i)`` over ``rhp_poles`` (``nan`` when it does not apply).
    bode_integral_theory_error : float
        ``pi * sum`` of the rounding bounds of those poles (eigenvalue condition numbers):
        how far ill-conditioned poles can move the theory value.
    peak_sensitivity_bound : float
        Lower bound of ``||S||_inf`` from the right-half-plane zeros (1 when none limit it).
    crossover_above_rad_s : float
        Rule of thumb: gain crossover above ``2 max|p|`` (0 without right-half-plane poles).
    crossover_below_rad_s : float
        Rule of thumb: gain crossover below ``min|z| / 2`` (``inf`` without right-half-plane zeros).
    gain_crossovers_rad_s : list of float
        This loop's gain crossovers, to compare with the two rules.
    """

    rhp_poles: np.ndarray
    rhp_zeros: np.ndarray
    relative_degree: int
    bode_integral: float
    bode_integral_theory: float
    peak_sensitivity_bound: float
    crossover_above_rad_s: float
    crossover_below_rad_s: float
    gain_crossovers_rad_s: list[float] = field(default_factory=list)
    bode_integral_theory_error: float = 0.0

    def as_dict(self) -> dict:
        return {
            "rhp_poles": [[p.real, p.imag] for p in self.rhp_poles],
            "rhp_zeros": [[z.real, z.imag] for z in self.rhp_zeros],
            "relative_degree": self.relative_degree,
            "bode_integral": self.bode_integral,
            "bode_integral_theory": self.bode_integral_theory,
            "bode_integral_theory_error": self.bode_integral_theory_error,
            "bode_integral_note": "int_0^inf ln|S(jw)| dw = pi * sum Re(p) over right-half-plane poles of L (relative degree >= 2)",
            "peak_sensitivity_bound": self.peak_sensitivity_bound,
            "crossover_above_rad_s": self.crossover_above_rad_s,
            "crossover_below_rad_s": self.crossover_below_rad_s,
            "crossover_rules_source": RULES_SOURCE,
        }

    def lines(self) -> list[str]:
        """Readable sentences ("this loop cannot do better than ...")."""
        out = ["limits of performance:"]
        if np.isfinite(self.bode_integral):
            shaky = self.bode_integral_theory_error > 1e-3 * max(1.0, abs(self.bode_integral_theory))
            what = (
                f"pi * sum Re p = {self.bode_integral_theory:.5g}"
                + (f" +- {self.bode_integral_theory_error:.2g} (ill-conditioned poles)" if shaky else "")
                + f" over {self.rhp_poles.size} right-half-plane pole"
                f"{'s' if self.rhp_poles.size != 1 else ''}"
                if self.rhp_poles.size
                else "0 for a loop without right-half-plane poles"
            )
            out.append(
                f"  Bode sensitivity integral  int_0^inf ln|S(jw)| dw = {_tidy(self.bode_integral):.5g} (theory: {what}): "
                "every band where |S| < 1 is paid for by a band where |S| > 1"
            )
            gap = abs(self.bode_integral - self.bode_integral_theory)
            if gap > 1e-3 * max(1.0, abs(self.bode_integral_theory)) + self.bode_integral_theory_error:
                out.append(
                    f"  the computed integral and the theory differ by {gap:.3g}: the loop's frequency response is not accurate enough "
                    "here (an ill-conditioned realisation, e.g. many integrators in a row); trust neither to more than that"
                )
        elif self.relative_degree < 2:
            out.append(f"  Bode sensitivity integral  not applicable: L has relative degree {self.relative_degree} (needs at least 2)")
        if self.rhp_zeros.size:
            z = ", ".join(_c(v) for v in self.rhp_zeros)
            out.append(
                f"  peak |S| of this loop cannot be below {self.peak_sensitivity_bound:.4g} (right-half-plane zero{'s' if self.rhp_zeros.size > 1 else ''} {z}"
                + (f" with pole{'s' if self.rhp_poles.size > 1 else ''} {', '.join(_c(p) for p in self.rhp_poles)}" if self.rhp_poles.size else "")
                + "; closed form prod |z + conj(p)| / |z - p|)"
            )
        if self.rhp_poles.size or self.rhp_zeros.size:
            parts = []
            if self.rhp_poles.size:
                parts.append(f"gain crossover above about {self.crossover_above_rad_s:.4g} rad/s (2 x the largest right-half-plane pole)")
            if self.rhp_zeros.size:
                parts.append(f"below about {self.crossover_below_rad_s:.4g} rad/s (half the smallest right-half-plane zero)")
            wc = ", ".join(f"{w:.4g}" for w in self.gain_crossovers_rad_s) or "none"
            out.append(f"  bandwidth: {'; '.join(parts)}; this loop crosses over at {wc} rad/s ({RULES_SOURCE})")
            if self.rhp_poles.size and self.rhp_zeros.size and self.crossover_above_rad_s >= self.crossover_below_rad_s:
                out.append("  the two rules conflict: no gain crossover satisfies both, so expect a large peak |S| whatever the tuning")
        return out


def _tidy(x: float) -> float:
    """Round the quadrature's last digits (it is accurate to about 1e-9 absolute) so 5e-15 prints as 0."""
    return round(x, 9) + 0.0


def _c(v: complex) -> str:
    return f"{v.real:.4g}" if abs(v.imag) <= 1e-12 * max(1.0, abs(v)) else f"{v.real:.4g}{v.imag:+.4g}j"


def performance_limits(A, B, C, D=None, *, closed_loop_stable: bool = True, gain_crossovers=()) -> PerformanceLimits:
    """Performance limits of the scalar loop ``L(s) = C (sI - A)^-1 B + D`` (see the module notes).

    Parameters
    ----------
    A, B, C, D : array_like
        A SISO realisation of ``L``.
    closed_loop_stable : bool
        The Bode integral is evaluated only for a stable closed loop.
    gain_crossovers : sequence of float
        The loop's gain crossovers (rad/s), quoted beside the rules of thumb.

    Returns
    -------
    PerformanceLimits
    """
    A, B, C, D = _as_system(A, B, C, D)
    Am, Bm, Cm, Dm = minimal_realization(A, B, C, D)
    n = Am.shape[0]
    sens = eigen_sensitivity(Am)
    poles = sens.values
    scale = matrix_scale(Am)
    in_rhp = pole_regions(poles, scale=scale, bounds=sens.error_bound) == "rhp" if n else np.zeros(0, bool)
    rhp_p = np.sort_complex(poles[in_rhp])
    theory_err = float(np.pi * np.sum(sens.error_bound[in_rhp])) if n else 0.0
    try:
        zeros = transmission_zeros(Am, Bm, Cm, Dm) if n else np.zeros(0, complex)
    except (np.linalg.LinAlgError, ValueError):
        zeros = np.zeros(0, complex)
    zeros = np.asarray(zeros, dtype=complex)
    zeros = zeros[np.isfinite(zeros)]
    rel = _relative_degree(Am, Bm, Cm, Dm)
    # a minimal SISO realisation has exactly n - (relative degree) finite zeros; the rest of what
    # the pencil returns are infinite zeros seen through rounding (huge, often in +- pairs)
    zeros = zeros[np.argsort(np.abs(zeros), kind="stable")][: max(n - rel, 0)]
    # zeros come from a generalised eigenvalue problem: a looser, still scaled, tolerance
    rhp_z = np.sort_complex(zeros[zeros.real > 1e-8 * np.maximum(max(scale, 1e-300), np.abs(zeros))])
    theory = float(np.pi * np.sum(rhp_p.real)) if rel >= 2 and closed_loop_stable else np.nan
    integral = _bode_integral(Am, Bm, Cm, Dm) if rel >= 2 and closed_loop_stable else np.nan
    bound = 1.0
    for z in rhp_z:
        bound = max(bound, float(np.prod([abs(z + np.conj(p)) / abs(z - p) for p in rhp_p])) if rhp_p.size else 1.0)
    return PerformanceLimits(
        rhp_poles=rhp_p,
        rhp_zeros=rhp_z,
        relative_degree=rel,
        bode_integral=float(integral),
        bode_integral_theory=theory,
        peak_sensitivity_bound=bound,
        crossover_above_rad_s=float(2.0 * np.max(np.abs(rhp_p))) if rhp_p.size else 0.0,
        crossover_below_rad_s=float(np.min(np.abs(rhp_z)) / 2.0) if rhp_z.size else np.inf,
        gain_crossovers_rad_s=[float(w) for w in gain_crossovers],
        bode_integral_theory_error=theory_err,
    )


def _relative_degree(A, B, C, D) -> int:
    """Pole excess of a minimal SISO realisation: the first ``k`` with ``C A^(k-1) B != 0``."""
    scale = max(abs(float(D[0, 0])), 1e-300)
    if abs(float(D[0, 0])) > 0:
        return 0
    n = A.shape[0]
    v = B[:, 0].copy()
    ref = max(np.linalg.norm(C) * np.linalg.norm(B), scale)
    an = max(np.linalg.norm(A, 2), 1e-300)
    for k in range(1, n + 1):
        if abs(float(C[0] @ v)) > 1e-10 * ref * an ** (k - 1):
            return k
        v = A @ v
    return n + 1


def _bode_integral(A, B, C, D) -> float:
    """``int_0^inf ln|S(jw)| dw`` with ``w = tan(theta)``; the integrand stays bounded because
    ``ln|S| ~ -L ~ 1/w^2`` at high frequency for relative degree >= 2."""
    red = reduce_model(A)
    Bt, Ct = red.input_matrix(B), red.output_matrix(C)

    def f(theta):
        w = np.tan(theta)
        with np.errstate(all="ignore"):
            L = reduced_response(red, Bt, Ct, D, np.array([1j * w]), B=B, C=C)[0, 0, 0]
            val = -np.log(abs(1.0 + L)) / np.cos(theta) ** 2
        return float(val) if np.isfinite(val) else 0.0

    poles = red.poles
    pts = sorted({float(np.arctan(abs(p))) for p in poles if 0 < np.arctan(abs(p)) < np.pi / 2})
    # full_output returns quad's accuracy remarks instead of raising them as warnings
    total = si.quad(f, 0.0, np.pi / 2, points=pts or None, limit=2000, epsabs=1e-11, epsrel=1e-10, full_output=1)[0]
    return float(total)
