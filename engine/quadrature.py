"""Adaptive Gauss-Kronrod quadrature of a vectorised integrand on a finite interval.

Each panel is integrated by the 21-point Kronrod rule and its embedded 10-point Gauss rule
(R. Piessens, E. de Doncker-Kapenga, C. W. Ueberhuber and D. K. Kahaner, QUADPACK, Springer
1983, routine QK21; the nodes and weights below are that routine's, as scipy ships them in
``scipy.integrate._quad_vec``). The error estimate of a panel is QUADPACK's:
``resasc * min(1, (200 |K - G| / resasc)^1.5)``, raised to ``50 eps resabs`` where rounding
dominates (``resasc``: the Kronrod integral of ``|f - mean f|``, ``resabs`` of ``|f|``); it
is the estimate scipy's ``quad`` (QAGP) stops on.

Unlike ``quad``, every round evaluates the integrand once, at the nodes of all the panels
still being refined: a frequency response evaluated on a whole grid at once costs little
more than at one point, so the quadrature costs a few calls instead of thousands.
Refinement: while the panels' estimates add up to more than ``max(epsabs, epsrel |I|)``,
the panels with the largest estimates are halved, as many as it takes for the others to
add up to at most half that tolerance: QUADPACK's choice (always the worst panel) made
for many panels at once. Like QUADPACK's it reaches an integrable endpoint singularity
(``ln w`` at ``w = 0`` behind integrators) by halving the panel at the end again and again;
unlike QAGP it does not extrapolate that sequence (Wynn's epsilon algorithm), so such a
singularity costs a few dozen rounds of one panel each.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["QuadratureResult", "adaptive_gauss_kronrod"]

_X = np.array([
    0.995657163025808080735527280689003, 0.973906528517171720077964012084452,
    0.930157491355708226001207180059508, 0.865063366688984510732096688423493,
    0.780817726586416897063717578345042, 0.679409568299024406234327365114874,
    0.562757134668604683339000099272694, 0.433395394129247190799265943165784,
    0.294392862701460198131126603103866, 0.148874338981631210884826001129720,
    0.0,
])
_X = np.concatenate([_X, -_X[-2::-1]])  # 21 Kronrod nodes on [-1, 1]
_G = np.array([
    0.066671344308688137593568809893332, 0.149451349150580593145776339657697,
    0.219086362515982043995534934228163, 0.269266719309996355091226921569469,
    0.295524224714752870173892994651338,
])
_G = np.concatenate([_G, _G[::-1]])  # weights of the 10 Gauss nodes (the odd-numbered Kronrod nodes)
_K = np.array([
    0.011694638867371874278064396062192, 0.032558162307964727478818972459390,
    0.054755896574351996031381300244580, 0.075039674810919952767043140916190,
    0.093125454583697605535065465083366, 0.109387158802297641899210590325805,
    0.123491976262065851077958109831074, 0.134709217311473325928054001771707,
    0.142775938577060080797094273138717, 0.147739104901338491374841515972068,
    0.149445554002916905664936468389821,
])
_K = np.concatenate([_K, _K[-2::-1]])
_EPS = float(np.finfo(float).eps)


@dataclass(frozen=True)
class QuadratureResult:
    """The integral, its error estimate, whether that met the tolerance, and the work done.

    Attributes
    ----------
    value : float
    error : float
        Sum of the panels' QUADPACK error estimates.
    converged : bool
        ``error <= max(epsabs, epsrel |value|)`` within ``max_panels`` panels.
    panels, evaluations, rounds : int
    """

    value: float
    error: float
    converged: bool
    panels: int
    evaluations: int
    rounds: int


def _panel_rules(f, a: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Kronrod integrals and QUADPACK error estimates of the panels ``[a_i, b_i]``."""
    half = 0.5 * (b - a)
    mid = 0.5 * (b + a)
    x = mid[:, None] + half[:, None] * _X[None, :]
    fx = np.asarray(f(x.ravel()), dtype=float).reshape(x.shape)
    kron = half * (fx @ _K)
    gauss = half * (fx[:, 1::2] @ _G)
    resabs = np.abs(half) * (np.abs(fx) @ _K)
    mean = kron / np.where(half != 0.0, 2.0 * half, 1.0)
    resasc = np.abs(half) * (np.abs(fx - mean[:, None]) @ _K)
    err = np.abs(kron - gauss)
    with np.errstate(divide="ignore", invalid="ignore"):
        scaled = np.where((resasc != 0.0) & (err != 0.0), resasc * np.minimum(1.0, (200.0 * err / resasc) ** 1.5), err)
    scaled = np.where(resabs > np.finfo(float).tiny / (50.0 * _EPS), np.maximum(50.0 * _EPS * resabs, scaled), scaled)
    return kron, scaled


def adaptive_gauss_kronrod(f, breakpoints, *, epsabs: float = 1e-11, epsrel: float = 1e-10,
                           max_panels: int = 4000) -> QuadratureResult:
    """``int f(x) dx`` over ``[breakpoints[0], breakpoints[-1]]`` (see the module notes).

    Parameters
    ----------
    f : callable
        ``f(x) -> values`` for a 1-D array ``x`` (all points of a round at once); values
        must be finite (map anything else to a finite value before returning).
    breakpoints : (k,) array_like, k >= 2
        Sorted panel ends to start from (the interval's ends included): put one where the
        integrand has a sharp feature.
    epsabs, epsrel : float
        Tolerance on the total error estimate: ``max(epsabs, epsrel |I|)``.
    max_panels : int
        Refinement stops (``converged`` False) rather than exceed this many panels.

    Returns
    -------
    QuadratureResult

    Examples
    --------
    >>> r = adaptive_gauss_kronrod(np.exp, [0.0, 1.0])
    >>> abs(r.value - (np.e - 1.0)) < 1e-14 and r.converged
    True
    """
    edges = np.unique(np.asarray(breakpoints, dtype=float))
    if edges.size < 2:
        return QuadratureResult(0.0, 0.0, True, 0, 0, 0)
    a, b = edges[:-1], edges[1:]
    val, err = _panel_rules(f, a, b)
    evaluations, rounds = a.size * _X.size, 1
    while True:
        value = float(np.sum(val))
        error = float(np.sum(err))
        tol = max(epsabs, epsrel * abs(value))
        if error <= tol:
            return QuadratureResult(value, error, True, a.size, evaluations, rounds)
        # the largest estimates first, until the panels left as they are add up to at most
        # half the tolerance (at least one panel is halved)
        order = np.argsort(-err, kind="stable")
        left = error - np.cumsum(err[order])
        count = int(np.searchsorted(-left, -0.5 * tol)) + 1
        split = np.zeros(a.size, dtype=bool)
        split[order[: min(count, a.size)]] = True
        lo, hi = a[split], b[split]
        mid = 0.5 * (lo + hi)
        if a.size + lo.size > max_panels or not lo.size or np.any((mid <= lo) | (mid >= hi)):
            # out of panels, or halving no longer changes a panel (rounding width)
            return QuadratureResult(value, error, False, a.size, evaluations, rounds)
        new_a, new_b = np.concatenate([lo, mid]), np.concatenate([mid, hi])
        new_val, new_err = _panel_rules(f, new_a, new_b)
        keep = ~split
        a, b = np.concatenate([a[keep], new_a]), np.concatenate([b[keep], new_b])
        val, err = np.concatenate([val[keep], new_val]), np.concatenate([err[keep], new_err])
        evaluations += new_a.size * _X.size
        rounds += 1
