"""Limits of performance at a loop break: what no tuning of this loop can beat.

For a scalar loop transfer ``L`` with ``S = 1/(1 + L)``:

* **Bode's sensitivity integral.** For a stable closed loop and ``L`` of relative degree at
  least 2, ``int_0^inf ln|S(jw)| dw = pi * sum Re(p_i)`` over the open-loop poles ``p_i``
  in the open right half-plane (H. W. Bode, Network Analysis and Feedback Amplifier
  Design, 1945, for the stable case; J. S. Freudenberg and D. P. Looze, IEEE Trans.
  Automatic Control AC-30(6), 1985, with unstable poles; both from memory). The integral
  is evaluated numerically (``w = tan(theta)``, adaptive Gauss-Kronrod panels on a
  vectorised integrand: :func:`bode_sensitivity_integral`) and printed beside the
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
import scipy.linalg as sla

from loopwright.engine.eigen import axis_tolerance, eigen_sensitivity, matrix_scale, pole_regions
from loopwright.engine.quadrature import QuadratureResult, adaptive_gauss_kronrod
from loopwright.engine.responses import _as_system
from loopwright.engine.structure import minimal_realization, transmission_zeros

__all__ = ["PerformanceLimits", "bode_sensitivity_integral", "clearly_stable", "limits_of_realization", "performance_limits"]

_EPS = float(np.finfo(float).eps)

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
    """Round the integral to 1e-7 absolute, so that rounding prints as 0.

    The quadrature itself meets 1e-11 (:func:`bode_sensitivity_integral`); what limits the
    printed value is ``L`` near ``w = 0`` behind integrators, where ``|L| ~ 1/w^k`` passes
    1e15 and any evaluator keeps only a few digits of it (measured on the conveyor sample
    against exact rational arithmetic: 6 % at ``w = 1e-9``): that sliver of the axis moves
    the integral by about 1e-8."""
    return round(x, 7) + 0.0


def _c(v: complex) -> str:
    return f"{v.real:.4g}" if abs(v.imag) <= 1e-12 * max(1.0, abs(v)) else f"{v.real:.4g}{v.imag:+.4g}j"


def performance_limits(A, B, C, D=None, *, closed_loop_stable: bool = True, gain_crossovers=(), response=None) -> PerformanceLimits:
    """Performance limits of the scalar loop ``L(s) = C (sI - A)^-1 B + D`` (see the module notes).

    Parameters
    ----------
    A, B, C, D : array_like
        A SISO realisation of ``L``.
    closed_loop_stable : bool
        The Bode integral is evaluated only for a stable closed loop.
    gain_crossovers : sequence of float
        The loop's gain crossovers (rad/s), quoted beside the rules of thumb.
    response : callable, optional
        ``response(w) -> L(jw)`` at an array of frequencies (rad/s), e.g. a
        :class:`~loopwright.engine.loop_response.LoopResponse` of the same loop in another
        realisation; by default one of ``(A, B, C, D)`` as given, not of its minimal
        realisation: a cascade evaluates ``L`` part by part with componentwise refinement,
        while a minimal realisation mixes the parts into one Schur form, which beside a
        double integrator loses digits that the Bode integral's low-frequency end needs.

    Returns
    -------
    PerformanceLimits
    """
    A, B, C, D = _as_system(A, B, C, D)
    poles = _eigenvalues(A)
    if clearly_stable(poles, matrix_scale(A)):
        # every hidden mode is stable: it adds no right-half-plane pole, and its decoupling
        # zero lies in the left half-plane, so the minimal realization would change nothing here
        realization, minimal = (A, B, C, D), False
    else:
        realization, minimal, poles = minimal_realization(A, B, C, D), True, None
    if response is None:
        from loopwright.engine.loop_response import LoopResponse

        response = LoopResponse(A, B, C, D)
    try:
        zeros = transmission_zeros(*realization, minimal=minimal) if realization[0].shape[0] else np.zeros(0, complex)
    except (np.linalg.LinAlgError, ValueError):
        zeros = np.zeros(0, complex)
    return limits_of_realization(*realization, zeros=zeros, poles=poles, closed_loop_stable=closed_loop_stable,
                                 gain_crossovers=gain_crossovers, response=response)


def clearly_stable(poles, scale: float) -> bool:
    """Whether every pole lies left of the axis by far more than rounding can move a
    simple eigenvalue (``Re p < -sqrt(eps) max(scale, |p|)``: a damping ratio above about
    1.5e-8), so that a realisation with these poles has no unstable hidden mode."""
    p = np.asarray(poles, dtype=complex).ravel()
    return bool(np.all(p.real < -np.sqrt(_EPS) * np.maximum(scale, np.abs(p))))


def limits_of_realization(A, B, C, D, *, zeros, poles=None, closed_loop_stable: bool = True, gain_crossovers=(),
                          response=None) -> PerformanceLimits:
    """:func:`performance_limits` of a realisation that is minimal or :func:`clearly_stable`,
    with its transmission zeros already computed (``zeros``, as
    :func:`loopwright.engine.structure.transmission_zeros` returns them), so that a caller
    which needs them for other work computes them once.

    ``poles``: the eigenvalues of ``A`` when the caller has them (any backward-stable
    computation; default: computed here). They place the quadrature's panel ends and, when
    none lies right of the axis tolerance, spare the rounding analysis of the poles.
    """
    A, B, C, D = _as_system(A, B, C, D)
    n = A.shape[0]
    scale = matrix_scale(A)
    poles = _eigenvalues(A) if poles is None else np.asarray(poles, dtype=complex).ravel()
    rhp_p, theory_err = np.zeros(0, complex), 0.0
    # a pole counts in the right half-plane only beyond the axis tolerance (whatever its
    # rounding bound says about the origin): without such a pole the condition numbers and
    # cluster bounds of eigen_sensitivity (several times the eigenvalues' cost) change nothing
    if n and np.any(poles.real > axis_tolerance(poles, scale)):
        sens = eigen_sensitivity(A)
        poles = sens.values
        in_rhp = pole_regions(poles, scale=scale, bounds=sens.error_bound) == "rhp"
        rhp_p = _in_pair_order(poles[in_rhp])
        theory_err = float(np.pi * np.sum(sens.error_bound[in_rhp]))
    zeros = np.asarray(zeros, dtype=complex).ravel()
    zeros = zeros[np.isfinite(zeros)]
    rel = _relative_degree(A, B, C, D)
    # a minimal SISO realisation has exactly n - (relative degree) finite zeros; the rest of what
    # the pencil returns are infinite zeros seen through rounding (huge, often in +- pairs)
    zeros = zeros[np.argsort(np.abs(zeros), kind="stable")][: max(n - rel, 0)]
    # zeros come from a generalised eigenvalue problem: a looser, still scaled, tolerance
    rhp_z = _in_pair_order(zeros[zeros.real > 1e-8 * np.maximum(max(scale, 1e-300), np.abs(zeros))])
    applies = rel >= 2 and closed_loop_stable
    theory = float(np.pi * np.sum(rhp_p.real)) if applies else np.nan
    integral = bode_sensitivity_integral(A, B, C, D, response=response, poles=poles).value if applies else np.nan
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


def _in_pair_order(z: np.ndarray) -> np.ndarray:
    """Roots sorted by real part, then imaginary part, with real parts equal to 10 significant
    digits taken as equal: the two members of a conjugate pair, computed with real parts a
    rounding apart, then always come negative imaginary part first (``np.sort_complex``
    would order them by that rounding, which differs between realisations)."""
    z = np.asarray(z, dtype=complex).ravel()
    if z.size < 2:
        return z
    unit = 1e-10 * max(float(np.abs(z).max()), 1e-300)
    return z[np.lexsort((z.imag, np.round(z.real / unit)))]


def _eigenvalues(A: np.ndarray) -> np.ndarray:
    """The eigenvalues exactly as :func:`loopwright.engine.eigen.eigen_sensitivity` computes
    them (the same balancing and the same LAPACK call, so the same bits), without its
    condition numbers and cluster bounds."""
    if A.shape[0] == 0:
        return np.zeros(0, complex)
    Ab, _ = sla.matrix_balance(A, permute=True, separate=False)
    return np.asarray(sla.eig(Ab, left=True, right=True)[0], dtype=complex)


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


def bode_sensitivity_integral(A, B, C, D=None, *, response=None, poles=None, epsabs: float = 1e-11,
                               epsrel: float = 1e-10) -> QuadratureResult:
    """``int_0^inf ln|S(jw)| dw`` of the scalar loop ``L = C (sI - A)^-1 B + D``, ``S = 1/(1 + L)``.

    Method: ``w = tan(theta)`` maps the half-line onto ``[0, pi/2)``; for relative degree
    at least 2, ``ln|S| ~ -L ~ 1/w^2`` at high frequency, so the integrand
    ``-ln|1 + L(j tan theta)| / cos^2 theta`` stays bounded up to ``pi/2``. It is integrated
    by adaptive Gauss-Kronrod panels (:func:`loopwright.engine.quadrature.adaptive_gauss_kronrod`),
    started with a panel end at ``arctan |p|`` for every pole ``p`` (where lightly damped
    modes make the integrand sharp); each round evaluates ``L`` at the nodes of every panel
    being refined at once. ``ln|1 + L|`` is formed as ``log1p(2 Re L + |L|^2) / 2``, which
    keeps its relative accuracy where ``|L|`` is tiny (the factor ``1/cos^2 theta`` then
    multiplies it by ``w^2``).

    Accuracy: the panels' QUADPACK error estimates add up to at most
    ``max(epsabs, epsrel |I|)`` (the same tolerances and the same estimator as scipy's
    ``quad``, which the engine used before) when ``converged``. That bounds the quadrature
    of the values of ``L`` as evaluated; their own rounding enters the integral in
    proportion, and is largest near ``w = 0`` behind integrators, where ``|L| ~ 1/w^k``
    (about 1e-8 absolute on the conveyor sample's double integrator: see ``_tidy``).

    Parameters
    ----------
    A, B, C, D : array_like
        A SISO realisation of ``L`` (only used when ``response`` or ``poles`` is missing).
    response : callable, optional
        ``response(w) -> L(jw)`` for an array ``w`` (rad/s); default: a
        :class:`~loopwright.engine.loop_response.LoopResponse` of ``(A, B, C, D)``.
    poles : array_like, optional
        The loop's poles (default: those of the evaluator).

    Returns
    -------
    QuadratureResult
        ``value`` is the integral (non-finite values of ``L``, at a pole on the axis, count as
        zero, as ``ln|S| -> -inf`` there is integrable).
    """
    if response is None or poles is None:
        from loopwright.engine.loop_response import LoopResponse

        A, B, C, D = _as_system(A, B, C, D)
        evaluator = LoopResponse(A, B, C, D)
        response = evaluator if response is None else response
        poles = evaluator.poles if poles is None else poles

    def integrand(theta: np.ndarray) -> np.ndarray:
        w = np.tan(theta)
        with np.errstate(all="ignore"):
            L = np.asarray(response(w), dtype=complex).ravel()
            ln_abs = 0.5 * np.log1p(2.0 * L.real + L.real * L.real + L.imag * L.imag)
            val = -ln_abs / np.cos(theta) ** 2
        return np.where(np.isfinite(val), val, 0.0)

    at = np.arctan(np.abs(np.asarray(poles, dtype=complex).ravel()))
    at = at[(at > 0.0) & (at < np.pi / 2)]
    return adaptive_gauss_kronrod(integrand, np.concatenate([[0.0], np.unique(at), [np.pi / 2]]), epsabs=epsabs, epsrel=epsrel)
