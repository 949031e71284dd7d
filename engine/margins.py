"""Loop-break margins: gain-margin interval, phase and delay margins, peak sensitivity and
disk margins, for a loop transfer ``L`` given as state space or as a sampled response.

Conventions (as in tests/REFERENCES.md): at a loop break ``L = -G(break -> signal)``
with every source at zero; ``S = (I + L)^-1``, ``T = I - S``.

* **Gain margin** is the interval ``(g_lower, g_upper)`` of real factors ``g > 0`` for
  which the loop with ``g L`` stays stable. The closed loop can only change stability at a
  gain ``g = -1/L(jw)`` where ``L(jw)`` is real and negative (``w`` in ``[0, inf]``); those
  frequencies are found on a dense grid and refined with ``brentq``, and each interval
  between them is then classified by the closed-loop pole count (eigenvalues of
  ``A - g B (I + g D)^-1 C``), never by guessing. Open-loop unstable loops thus get a
  finite lower margin.
* **Phase margin** is ``PM_i = angle L(jw_i) + 180 deg`` wrapped into (-180, 180] at the
  gain crossover with the smallest ``|PM_i|``; the **delay margin** is
  ``min_i ((angle L(jw_i) + 180) mod 360) * pi/180 / w_i``.
* **Disk margin** with skew ``sigma``: ``alpha = 1 / ||S + (sigma - 1)/2 ||_inf``, gain
  interval ``[(1 - alpha(1 - sigma)/2) / (1 + alpha(1 + sigma)/2),
  (1 + alpha(1 - sigma)/2) / (1 - alpha(1 + sigma)/2)]`` and phase
  ``arccos((1 + g_lo g_hi) / (g_lo + g_hi))``, which becomes ``arccos(g_lo)`` when the upper
  gain is unbounded (Blight, Dailey & Gangsaas 1994; Seiler, Packard & Gahinet 2020,
  from memory).
* For a vector loop: loop-at-a-time margins (break one component, the others closed) and
  the **all-loops-at-once** disk margin ``alpha = 1 / ||S + (sigma - 1)/2 I||_inf`` with
  the full matrix ``S``. This is the margin against an *unstructured* complex
  perturbation of the whole loop; it is a lower bound of the margin against independent
  per-channel (diagonal) perturbations, which would need a structured singular value.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.linalg as sla
import scipy.optimize as sopt

from loopwright.engine.eigen import PoleClasses, classify_poles, matrix_scale
from loopwright.engine.errors import AnalysisError
from loopwright.engine.loop_response import LoopResponse, densify
from loopwright.engine.norms import certify_peak, is_stable_matrix, peak_gain
from loopwright.engine.responses import _as_system, auto_frequency_grid
from loopwright.engine.structure import minimal_realization, structural_trim, transmission_zeros

__all__ = [
    "DiskMargin",
    "GainCrossover",
    "PhaseCrossover",
    "LoopMargins",
    "VectorLoopMargins",
    "disk_margin_from_alpha",
    "sensitivity_system",
    "closed_loop_matrix",
    "loop_margins",
    "scalar_margins",
    "certify_sensitivity_peaks",
    "vector_loop_margins",
    "margins_from_response",
    "loop_transfer",
    "opened_loop",
    "margins_at",
    "sensitivity_maps",
]


@dataclass(frozen=True)
class DiskMargin:
    """A disk margin: size ``alpha``, skew, the gain interval it implies and the phase.

    ``w_rad_s`` is where ``|S + (sigma - 1)/2|`` peaks (the critical frequency).
    ``gain_lower`` is exactly ``0`` and ``gain_upper`` exactly ``inf`` when the disk
    leaves that side unbounded within the accuracy of ``alpha`` (``lower_unbounded`` /
    ``upper_unbounded`` say so; JSON carries ``0`` / ``"inf"`` and the flags).
    """

    alpha: float
    skew: float
    gain_lower: float
    gain_upper: float
    phase_deg: float
    w_rad_s: float

    @property
    def lower_unbounded(self) -> bool:
        return self.gain_lower == 0.0

    @property
    def upper_unbounded(self) -> bool:
        return bool(np.isinf(self.gain_upper))

    @property
    def gain_db(self) -> tuple[float, float]:
        return _db(self.gain_lower), _db(self.gain_upper)


@dataclass(frozen=True)
class GainCrossover:
    """One gain crossover ``|L(jw)| = 1``.

    Attributes
    ----------
    w_rad_s : float
        Crossover frequency.
    phase_margin_deg : float
        ``angle L(jw) + 180`` wrapped into (-180, 180]: the phase *lag* that would put
        ``L`` on -1 there (negative: a phase *lead* of that size would).
    delay_margin_s : float
        ``((angle L(jw) + 180) mod 360) * pi/180 / w``: the smallest delay that puts
        ``L e^{-jw tau}`` on -1 at this crossover (``inf`` at ``w = 0``).
    sets_phase_margin, sets_delay_margin : bool
        This crossover gives the reported phase margin / delay margin.
    """

    w_rad_s: float
    phase_margin_deg: float
    delay_margin_s: float
    sets_phase_margin: bool = False
    sets_delay_margin: bool = False

    def as_dict(self) -> dict:
        return {
            "w_rad_s": self.w_rad_s,
            "phase_margin_deg": self.phase_margin_deg,
            "delay_margin_s": self.delay_margin_s,
            "sets_phase_margin": self.sets_phase_margin,
            "sets_delay_margin": self.sets_delay_margin,
        }


@dataclass(frozen=True)
class PhaseCrossover:
    """One phase crossover: ``L(jw)`` real and negative (``w`` may be 0 or ``inf``).

    Attributes
    ----------
    w_rad_s : float
    gain_factor : float
        ``1/|L(jw)|``: the factor ``g`` that puts ``g L(jw)`` on -1 (the closed loop
        changes stability there).
    sets_lower, sets_upper : bool
        This crossover bounds the gain margin from below / from above.
    """

    w_rad_s: float
    gain_factor: float
    sets_lower: bool = False
    sets_upper: bool = False

    @property
    def gain_factor_db(self) -> float:
        return _db(self.gain_factor)

    def as_dict(self) -> dict:
        return {
            "w_rad_s": self.w_rad_s,
            "gain_factor": self.gain_factor,
            "gain_factor_db": self.gain_factor_db,
            "sets_lower": self.sets_lower,
            "sets_upper": self.sets_upper,
        }


@dataclass
class LoopMargins:
    """Margins of one scalar loop. Frequencies in rad/s, phases in degrees, delays in s.

    ``gain_lower``/``gain_upper`` are absolute factors (``0``/``inf`` when unbounded on
    that side, ``nan`` when the nominal closed loop is unstable). ``*_w_rad_s`` give the
    frequency at which each bound is reached.

    ``open_loop_unstable_poles`` counts poles of ``L`` in the *open* right half-plane
    (the ``P`` of the Nyquist criterion); poles on the imaginary axis are counted apart
    (``open_loop_poles``: origin, rest of the axis). ``crossovers`` lists every gain
    crossover with its phase and delay margin, ``phase_crossings`` every phase crossover
    with its gain factor, each marked when it sets a margin. ``notes`` are the sentences
    an engineer needs to read the numbers (e.g. a stable loop with a negative phase
    margin). ``limits`` holds the performance limits of the loop (Bode's sensitivity
    integral, bandwidth bounds from right-half-plane poles and zeros) when computed.
    """

    closed_loop_stable: bool
    open_loop_unstable_poles: int
    gain_lower: float
    gain_upper: float
    gain_lower_w_rad_s: float
    gain_upper_w_rad_s: float
    phase_margin_deg: float
    phase_margin_w_rad_s: float
    delay_margin_s: float
    gain_crossovers_w_rad_s: list[float]
    phase_margins_deg: list[float]
    phase_crossovers_w_rad_s: list[float]
    peak_sensitivity: float
    peak_sensitivity_w_rad_s: float
    disk: DiskMargin
    message: str = ""
    open_loop_poles: PoleClasses | None = None
    crossovers: list[GainCrossover] = field(default_factory=list)
    phase_crossings: list[PhaseCrossover] = field(default_factory=list)
    delay_margin_w_rad_s: float = np.nan
    notes: list[str] = field(default_factory=list)
    limits: object | None = None  # PerformanceLimits (loopwright.engine.limits), when computed
    #: False while peak sensitivity and the disk margin are refined grid values not yet
    #: certified by the Hamiltonian test (the loop-break view's first pass)
    certified: bool = True

    @property
    def gain_margin_db(self) -> tuple[float, float]:
        return _db(self.gain_lower), _db(self.gain_upper)

    @property
    def modulus_margin(self) -> float:
        """``1/||S||_inf``: the distance from ``L(jw)`` to the critical point -1."""
        return 0.0 if not np.isfinite(self.peak_sensitivity) else 1.0 / self.peak_sensitivity

    def as_dict(self) -> dict:
        """Plain values for JSON (keys carry the units)."""
        return {
            "closed_loop_stable": self.closed_loop_stable,
            "open_loop_unstable_poles": self.open_loop_unstable_poles,
            "gain_margin": [self.gain_lower, self.gain_upper],
            "gain_margin_db": list(self.gain_margin_db),
            "gain_margin_w_rad_s": [self.gain_lower_w_rad_s, self.gain_upper_w_rad_s],
            "phase_margin_deg": self.phase_margin_deg,
            "phase_margin_w_rad_s": self.phase_margin_w_rad_s,
            "delay_margin_s": self.delay_margin_s,
            "gain_crossovers_w_rad_s": list(self.gain_crossovers_w_rad_s),
            "phase_margins_deg": list(self.phase_margins_deg),
            "phase_crossovers_w_rad_s": list(self.phase_crossovers_w_rad_s),
            "peak_sensitivity": self.peak_sensitivity,
            "peak_sensitivity_w_rad_s": self.peak_sensitivity_w_rad_s,
            "modulus_margin": self.modulus_margin,
            "disk_margin": _disk_dict(self.disk),
            "message": self.message,
            "open_loop_poles": None if self.open_loop_poles is None else self.open_loop_poles.as_dict(),
            "delay_margin_w_rad_s": self.delay_margin_w_rad_s,
            "gain_crossovers": [c.as_dict() for c in self.crossovers],
            "phase_crossovers": [c.as_dict() for c in self.phase_crossings],
            "notes": list(self.notes),
            "limits": None if self.limits is None else self.limits.as_dict(),
        }


@dataclass
class VectorLoopMargins:
    """Margins of a loop break on a vector signal.

    ``per_channel[i]`` breaks component ``i`` with the other components closed.
    ``all_at_once`` is the unstructured (full-block) disk margin of the whole loop.
    """

    closed_loop_stable: bool
    per_channel: list[LoopMargins]
    all_at_once: DiskMargin
    peak_sensitivity: float
    peak_sensitivity_w_rad_s: float
    channel_names: list[str] = field(default_factory=list)

    def as_dict(self) -> dict:
        return {
            "closed_loop_stable": self.closed_loop_stable,
            "channels": {name: m.as_dict() for name, m in zip(self.channel_names, self.per_channel)},
            "disk_margin_all_loops": _disk_dict(self.all_at_once),
            "disk_margin_all_loops_note": "1/||S + (skew-1)/2 I||_inf with the full matrix S: margin against an unstructured "
            "perturbation of all loops at once (a lower bound for independent per-loop perturbations)",
            "peak_sensitivity": self.peak_sensitivity,
            "peak_sensitivity_w_rad_s": self.peak_sensitivity_w_rad_s,
        }


def _db(g: float) -> float:
    if g == 0:
        return -np.inf
    if not np.isfinite(g):
        return g
    return float(20.0 * np.log10(g))


def _disk_dict(d: DiskMargin) -> dict:
    return {
        "alpha": d.alpha,
        "skew": d.skew,
        "gain": [d.gain_lower, d.gain_upper],
        "gain_db": list(d.gain_db),
        "gain_unbounded": [d.lower_unbounded, d.upper_unbounded],
        "phase_deg": d.phase_deg,
        "w_rad_s": d.w_rad_s,
    }


# Relative accuracy of alpha (peak_gain's tolerance is 1e-10; one order of slack).
_ALPHA_RTOL = 1e-9


def disk_margin_from_alpha(alpha: float, *, skew: float = 0.0, w_rad_s: float = np.nan) -> DiskMargin:
    """Gain interval and phase margin implied by a disk of size ``alpha`` and skew ``sigma``.

    Uses the ``arccos(g_lo)`` limit when the upper gain is unbounded (the limit of the
    disk-margin phase formula, tests/REFERENCES.md#reactor-lqr).

    Examples
    --------
    >>> d = disk_margin_from_alpha(1.0, skew=1.0)
    >>> round(d.gain_lower, 12), d.gain_upper, round(d.phase_deg, 9)
    (0.5, inf, 60.0)
    """
    a, s = float(alpha), float(skew)
    if not np.isfinite(a) or a <= 0:
        return DiskMargin(max(a, 0.0) if np.isfinite(a) else np.inf, s, 1.0, 1.0, 0.0, w_rad_s) if a <= 0 or np.isnan(a) else DiskMargin(np.inf, s, 0.0, np.inf, 180.0, w_rad_s)
    num_lo = 1.0 - a * (1.0 - s) / 2.0
    den = 1.0 - a * (1.0 + s) / 2.0
    # alpha is known to about _ALPHA_RTOL (a peak-gain computation); a bound whose
    # numerator or denominator is zero within that is unbounded, not a huge number
    lo = 0.0 if num_lo <= _ALPHA_RTOL * (1.0 + a) else num_lo / (1.0 + a * (1.0 + s) / 2.0)
    hi = (1.0 + a * (1.0 - s) / 2.0) / den if den > _ALPHA_RTOL * (1.0 + a) else np.inf
    if np.isinf(hi):
        c = lo
    else:
        c = (1.0 + lo * hi) / (lo + hi)
    phase = float(np.degrees(np.arccos(np.clip(c, -1.0, 1.0))))
    return DiskMargin(a, s, float(lo), float(hi), phase, w_rad_s)


def closed_loop_matrix(A, B, C, D, g: float = 1.0) -> np.ndarray:
    """State matrix of the loop ``g L`` closed negatively: ``A - g B (I + g D)^-1 C``."""
    A, B, C, D = _as_system(A, B, C, D)
    M = np.eye(D.shape[0]) + g * D
    return A - g * B @ np.linalg.solve(M, C)


def sensitivity_system(A, B, C, D, *, offset: float = 0.0):
    """State space of ``S + offset I`` with ``S = (I + L)^-1``; ``L`` square.

    Returns
    -------
    (A_S, B_S, C_S, D_S) : ndarrays
    """
    A, B, C, D = _as_system(A, B, C, D)
    q = D.shape[0]
    Mi = np.linalg.inv(np.eye(q) + D)
    return A - B @ Mi @ C, B @ Mi, -Mi @ C, Mi + offset * np.eye(q)


def _ill_posed(D: np.ndarray) -> bool:
    q = D.shape[0]
    return abs(np.linalg.det(np.eye(q) + D)) < 1e-12 * max(1.0, np.linalg.norm(D, 1)) ** q


def _wrap180(x):
    """Wrap degrees into (-180, 180]."""
    y = np.mod(np.asarray(x, dtype=float) + 180.0, 360.0) - 180.0
    return np.where(y == -180.0, 180.0, y)


def loop_margins(A, B, C, D=None, *, skew: float = 0.0) -> LoopMargins:
    """All margins of a scalar loop transfer ``L(s) = C (sI - A)^-1 B + D``.

    Parameters
    ----------
    A, B, C, D : array_like
        A SISO realisation of ``L`` (shapes (n, n), (n, 1), (1, n), (1, 1)).
    skew : float
        Skew ``sigma`` of the disk margin (0: balanced disk; 1: gains above nominal only
        trusted less, as for LQR's ``[1/2, inf)``).

    Returns
    -------
    LoopMargins

    Raises
    ------
    AnalysisError
        ``L`` is not scalar, or ``1 + L(inf) = 0`` (the closed loop is not proper).
    """
    A, B, C, D = _as_system(A, B, C, D)
    if B.shape[1] != 1 or C.shape[0] != 1:
        raise AnalysisError(f"loop_margins needs a scalar loop; L is {C.shape[0]}x{B.shape[1]} (use vector_loop_margins)")
    if _ill_posed(D):
        raise AnalysisError("1 + L(inf) = 0: the closed loop has no proper solution at this break")
    resp = LoopResponse(A, B, C, D)
    m, _w, _L = scalar_margins(resp, skew=skew, zeros=_zeros_of(A, B, C, D, minimal=True), certify=True)
    return m


def scalar_margins(resp: LoopResponse, *, skew: float = 0.0, zeros=(), certify: bool = True, progress=None, closed_loop_poles=None):
    """Margins of the scalar loop ``resp`` (a :class:`~loopwright.engine.loop_response.LoopResponse`),
    and the grid they were found on.

    Crossings are bracketed on one grid (:meth:`LoopResponse.grid`, laid on the poles and
    the ``zeros`` given) and refined with ``brentq``. Peak sensitivity and the disk margin
    are first the grid's highest local maxima of ``|S|`` and ``|S + (skew - 1)/2|``, each
    refined by a bounded search in log-frequency (to about 1e-10 relative); with
    ``certify`` they are then certified by the Hamiltonian test
    (:func:`loopwright.engine.norms.certify_peak`) started there, and
    ``LoopMargins.certified`` says so. ``progress(fraction)`` is called between the steps
    (it may stop the work by raising). ``closed_loop_poles``: the eigenvalues of the loop
    closed at nominal gain, when they are known already (the app's views share one
    decomposition of the closed loop); they decide its stability instead of a decomposition
    of its own.

    Returns
    -------
    margins : LoopMargins
    w, L : (k,) ndarrays
        The grid (rad/s) and ``L(jw)`` on it.
    """
    report = progress if progress is not None else (lambda _f: None)
    A, B, C, D = resp.A, resp.B, resp.C, resp.D
    n = A.shape[0]
    Ljw = resp
    ol_classes = classify_poles(resp.poles, scale=matrix_scale(A)) if n else PoleClasses(0, 0, 0, 0)
    grid, L = resp.grid(zeros=zeros)
    report(0.1)

    d = resp.d
    L0 = Ljw(0.0)[0] if n == 0 or _nonsingular_poles(resp.poles, A) else complex(np.nan)
    wc, pms, pm, pm_w, delays, dm, crit = _crossings(Ljw, grid, L, d, L0)
    report(0.2)
    # classify the intervals between critical gains by closed-loop pole count
    edges = [0.0] + [g for g, _ in crit] + [np.inf]

    def stable_at(g):
        if abs(1.0 + g * d) < 1e-14:
            return False
        known = closed_loop_poles if g == 1.0 and closed_loop_poles is not None and len(closed_loop_poles) == n else None
        return is_stable_matrix(closed_loop_matrix(A, B, C, D, g), eigenvalues=known)

    nominal = stable_at(1.0)
    msg = ""
    if nominal:
        lo_g, hi_g, lo_w, hi_w = _nearest_critical_gains(crit)
        nominal = all(g != 1.0 for g, _ in crit)
        if lo_g == 0.0:
            lo_w = np.nan
    if not nominal:
        lo_g = hi_g = lo_w = hi_w = np.nan
        stable_ranges = []
        for a, b in zip(edges[:-1], edges[1:]):
            mid = np.sqrt(a * b) if a > 0 and np.isfinite(b) else (b / 2.0 if a == 0 and np.isfinite(b) else (2.0 * a if a > 0 else 1.0))
            report(0.3)
            if stable_at(mid):
                stable_ranges.append((a, b))
        msg = "the closed loop is unstable at nominal gain" + (
            "; it is stable for gains in " + ", ".join(f"({a:.6g}, {b:.6g})" for a, b in stable_ranges) if stable_ranges else ""
        )

    # --- sensitivity and disk margins ---------------------------------------------------
    certified = True
    if nominal:
        S = 1.0 / (1.0 + L)
        (s_peak, s_w), (pk_d, pk_d_w) = _refined_peaks(Ljw, grid, S, (0.0, (skew - 1.0) / 2.0), L0, d)
        report(0.4)
        certified = False
        if certify:
            (s_peak, s_w), (pk_d, pk_d_w) = certify_sensitivity_peaks(resp, (s_peak, s_w), (pk_d, pk_d_w), skew=skew, progress=report)
            certified = True
        disk = disk_margin_from_alpha(1.0 / pk_d if pk_d > 0 else np.inf, skew=skew, w_rad_s=pk_d_w)
    else:
        s_peak, s_w = np.inf, np.nan
        disk = DiskMargin(0.0, skew, 1.0, 1.0, 0.0, np.nan)
        dm = np.nan if not nominal else dm
    m = _margins_record(bool(nominal), ol_classes, (lo_g, hi_g, lo_w, hi_w), (wc, pms, pm, pm_w, delays, dm, crit), (s_peak, s_w), disk, msg)
    m.certified = certified
    return m, grid, L


def certify_sensitivity_peaks(resp: LoopResponse, sens: tuple[float, float], disk: tuple[float, float], *, skew: float = 0.0,
                              progress=None) -> tuple[tuple[float, float], tuple[float, float]]:
    """Certify the peak of ``|S|`` and of ``|S + (skew - 1)/2|`` of a loop whose closed loop
    is stable, each from its refined grid value ``(peak, w)``: the Hamiltonian test of
    :func:`loopwright.engine.norms.certify_peak` (one ``2n x 2n`` eigenvalue computation
    when the start is the peak, a few level-set steps when it is not).

    Returns
    -------
    (peak, w), (peak, w) : the certified values, for ``S`` and for the disk.
    """
    report = progress if progress is not None else (lambda _f: None)
    As, Bs, Cs, Ds = sensitivity_system(resp.A, resp.B, resp.C, resp.D)
    offset = (skew - 1.0) / 2.0

    def S_eval(w, c=0.0):
        with np.errstate(all="ignore"):
            L = resp(w)
            # at a pole of L on the axis S vanishes
            return (np.where(np.isfinite(L), 1.0 / (1.0 + L), 0.0) + c)[:, None, None]

    report(0.45)
    # the starts come from _refined_peaks (a zoomed local maximum, w = 0 compared)
    ps = certify_peak(As, Bs, Cs, Ds, sens[0], sens[1], evaluate=S_eval, check=lambda: report(0.5), refined_start=True)
    report(0.7)
    pd = certify_peak(As, Bs, Cs, Ds + offset, disk[0], disk[1], evaluate=lambda w: S_eval(w, offset), check=lambda: report(0.75),
                      refined_start=True)
    report(0.95)
    return (ps.value, ps.w_rad_s), (pd.value, pd.w_rad_s)


#: Local maxima of the grid refined by a bounded search (the highest first).
_PEAKS_REFINED = 6


def _refined_peaks(Ljw, grid: np.ndarray, S: np.ndarray, offsets, L0: complex, d: float) -> list[tuple[float, float]]:
    """Peak over w of ``|S(jw) + offset|`` for each of ``offsets``: the grid's highest local
    maxima, each refined by a bounded search in log-frequency between its neighbours, and
    the ends ``w = 0`` and ``w -> inf``. The searches of every offset run together (one
    call of ``Ljw`` per round serves all of them). Returns one ``(peak, w)`` per offset."""
    offsets = [float(c) for c in offsets]
    found, lo, hi, who = [], [], [], []
    for i, c in enumerate(offsets):
        mags = np.abs(S + c)
        mags = np.where(np.isfinite(mags), mags, -np.inf)
        best, w_best = -np.inf, np.nan
        if mags.size:
            inner = np.nonzero((mags[1:-1] >= mags[:-2]) & (mags[1:-1] >= mags[2:]))[0] + 1
            inner = inner[np.argsort(-mags[inner])][:_PEAKS_REFINED]
            k = int(np.argmax(mags))
            best, w_best = float(mags[k]), float(grid[k])
            lo.append(np.log(grid[inner - 1]))
            hi.append(np.log(grid[inner + 1]))
            who.append(np.full(inner.size, i))
        found.append([best, w_best])
    if who and sum(x.size for x in who):
        who = np.concatenate(who)
        shift = np.asarray(offsets)[who]

        def f(xs, rows):
            with np.errstate(all="ignore"):
                v = np.abs(1.0 / (1.0 + Ljw(np.exp(xs.ravel())).reshape(xs.shape)) + shift[rows, None])
            return np.where(np.isfinite(v), v, -np.inf)

        xs, vs = _zoom_max(f, np.concatenate(lo), np.concatenate(hi))
        for i in range(len(offsets)):
            mine = np.nonzero(who == i)[0]
            if mine.size:
                j = mine[int(np.argmax(vs[mine]))]
                if vs[j] > found[i][0]:
                    found[i] = [float(vs[j]), float(np.exp(xs[j]))]
    out = []
    for c, (best, w_best) in zip(offsets, found):
        with np.errstate(all="ignore"):
            at0 = abs(1.0 / (1.0 + L0) + c)
        if np.isfinite(at0) and at0 >= best:
            best, w_best = float(at0), 0.0
        at_inf = abs(1.0 / (1.0 + d) + c)
        if at_inf > best:
            best, w_best = float(at_inf), np.inf
        out.append((best, w_best))
    return out


def _zoom_max(f, lo: np.ndarray, hi: np.ndarray, *, xtol: float = 1e-10, rtol: float = 1e-13, points: int = 9):
    """Maximum of ``f`` on each interval ``[lo_i, hi_i]`` at once; returns the best points
    and values seen. ``f(xs, rows)`` maps the (r, points) array of sample points of the
    intervals ``rows`` to their values.

    Each round samples ``points`` evenly spaced interior points of every interval in one
    call of ``f`` and keeps the two spacings around the best sample, so an interval shrinks
    by ``(points + 1) / 2`` per call (golden-section search: by 1.618 per call). An
    interval is done when it is narrower than ``xtol`` or when its samples all lie within
    ``rtol`` of its best value: near a smooth maximum the values flatten with the square of
    the width, so the best sample is then within about ``rtol`` of the maximum (the
    Hamiltonian certificate that follows asks for 1e-10). For a loop evaluated block by
    block the cost of a call is mostly its fixed overhead, not the number of points, so
    fewer, wider calls are what is cheap. The grid neighbours bracket a local maximum;
    sampling keeps the best point seen, so the answer is never below the bracket's samples
    (common practice, no source).
    """
    a, b = lo.astype(float).copy(), hi.astype(float).copy()
    best_x, best_v = np.full(a.shape, np.nan), np.full(a.shape, -np.inf)
    done = np.zeros(a.shape, dtype=bool)
    t = np.arange(1, points + 1) / (points + 1)
    while True:
        live = ~done & ((b - a) > xtol)
        if not live.any():
            break
        rows = np.nonzero(live)[0]
        xs = a[live, None] + (b - a)[live, None] * t[None, :]
        vs = np.asarray(f(xs, rows), dtype=float).reshape(xs.shape)
        k = np.argmax(vs, axis=1)
        r = np.arange(xs.shape[0])
        xk, vk = xs[r, k], vs[r, k]
        step = (b - a)[live] / (points + 1)
        better = vk > best_v[live]
        best_x[live] = np.where(better, xk, best_x[live])
        best_v[live] = np.where(better, vk, best_v[live])
        with np.errstate(invalid="ignore"):
            flat = np.isfinite(vk) & (vk - vs.min(axis=1) <= rtol * np.abs(vk))
        done[live] = flat
        a[live], b[live] = xk - step, xk + step
    return best_x, best_v


def _nonsingular_poles(poles: np.ndarray, A: np.ndarray) -> bool:
    """``A`` is invertible: no eigenvalue within rounding of the origin."""
    if poles.size == 0:
        return True
    return bool(np.min(np.abs(poles)) > 1e-12 * max(1.0, float(np.max(np.abs(poles))), float(np.linalg.norm(A, 1))))


def _margins_record(stable: bool, ol_classes: PoleClasses, gains, crossings, sensitivity, disk: DiskMargin, message: str) -> LoopMargins:
    """:class:`LoopMargins` from the pieces both routes compute: ``gains`` is
    ``(lower, upper, w_lower, w_upper)``, ``crossings`` what :func:`_crossings` returns and
    ``sensitivity`` ``(peak, w)``."""
    lo_g, hi_g, lo_w, hi_w = gains
    wc, pms, pm, pm_w, delays, dm, crit = crossings
    out = LoopMargins(
        closed_loop_stable=stable,
        open_loop_unstable_poles=ol_classes.open_rhp,
        gain_lower=float(lo_g),
        gain_upper=float(hi_g),
        gain_lower_w_rad_s=float(lo_w),
        gain_upper_w_rad_s=float(hi_w),
        phase_margin_deg=pm,
        phase_margin_w_rad_s=pm_w,
        delay_margin_s=dm,
        gain_crossovers_w_rad_s=[float(x) for x in wc],
        phase_margins_deg=[float(x) for x in pms],
        phase_crossovers_w_rad_s=[float(x) for x in sorted({w for _, w in crit})],
        peak_sensitivity=float(sensitivity[0]),
        peak_sensitivity_w_rad_s=float(sensitivity[1]),
        disk=disk,
        message=message,
        open_loop_poles=ol_classes,
    )
    return _with_tables(out, delays, crit)


def _crossings(Ljw, grid: np.ndarray, L: np.ndarray, d: float, L0: complex):
    """Gain crossovers (``|L| = 1``), phase and delay margins, and critical gains ``-1/L(jw)``
    where ``L(jw)`` is real and negative (the DC value ``L0`` and ``L(inf) = d`` included),
    bracketed on ``grid`` (where ``L`` was evaluated) and refined together (:func:`_refine_roots`).

    Returns ``(wc, pms, pm, pm_w, delays, dm, crit)``, ``crit`` sorted ``(gain, w)`` pairs.
    """
    # A value of L near the rounding level of its largest is no crossing: its sign is noise
    # (an L(0) of exactly 0 came out as -7e-18 on one route, a "gain margin" of 1e17 at DC;
    # behind a plant pole at -1e-5 it came out as -4e-12 with |L| up to 2.5: the rounding of
    # C x with x of size 2e5). Critical gains beyond 1e10 (200 dB) are counted as none (no
    # loop is designed on such a margin), and beyond 1e10 times the loop's largest gain when
    # that is below 1. Not beyond 1e10 times a largest gain above 1: with integrators in
    # the loop that is only how far down in frequency the grid reached (a 1/s^3 loop
    # sampled to 1e-5 rad/s put the floor at 2,600 and hid a crossing at |L| = 900).
    finite = np.abs(L[np.isfinite(L)])
    floor = 1e-10 * min(1.0, float(finite.max())) if finite.size else 0.0

    def negative_axis_possible(La, Lb):
        # a sign change of Im L counts only where L crosses the negative real axis above
        # the floor: not between two samples below the floor (far above the loop's
        # bandwidth Im L changes sign with every rounding error), nor where both samples
        # lie right of the imaginary axis less than a quarter turn apart (a crossing of
        # the positive real axis; the grid keeps neighbours within 10 degrees)
        with np.errstate(all="ignore"):
            tiny = (np.abs(La) <= floor) & (np.abs(Lb) <= floor)
            right = (La.real > 0) & (Lb.real > 0) & (np.abs(np.angle(Lb / La)) < 0.5 * np.pi)
        return ~(tiny | right)

    # both kinds of root refined together: one evaluation of L per pass serves both
    wc, wx = _refine_roots(Ljw, grid, L, (lambda v: np.log(np.abs(v) + 1e-300), lambda v: v.imag),
                           keep=(None, negative_axis_possible))
    wc, wx = np.array(wc), np.asarray(wx)
    at_roots = Ljw(np.concatenate([wc, wx])) if wc.size + wx.size else np.zeros(0, complex)
    L_wc, L_wx = at_roots[: wc.size], at_roots[wc.size:]
    if wc.size:
        phase = np.degrees(np.angle(L_wc))
        pms = _wrap180(phase + 180.0)
        i = int(np.argmin(np.abs(pms)))
        pm, pm_w = float(pms[i]), float(wc[i])
        with np.errstate(divide="ignore"):
            delays = np.where(wc > 0, np.radians(np.mod(phase + 180.0, 360.0)) / wc, np.inf)
        dm = float(np.min(delays))
    else:
        pms, delays = np.zeros(0), np.zeros(0)
        pm, pm_w, dm = np.inf, np.nan, np.inf
    crit: list[tuple[float, float]] = []
    for w, val in zip(wx, L_wx):
        if val.real < 0 and abs(val.imag) <= 1e-6 * abs(val) and abs(val) > floor:
            crit.append((-1.0 / val.real, float(w)))
    if np.isfinite(L0) and L0.real < 0 and abs(L0.imag) <= 1e-9 * abs(L0) and abs(L0) > floor:
        crit.append((-1.0 / L0.real, 0.0))
    if d < 0 and abs(d) > floor:
        crit.append((-1.0 / d, np.inf))
    crit.sort()
    return wc, pms, pm, pm_w, delays, dm, crit


def _with_tables(m: LoopMargins, delays, crit) -> LoopMargins:
    """Fill ``crossovers``, ``phase_crossings``, ``delay_margin_w_rad_s`` and ``notes``."""
    wc, pms = np.asarray(m.gain_crossovers_w_rad_s, float), np.asarray(m.phase_margins_deg, float)
    delays = np.asarray(delays, float)
    i_pm = int(np.argmin(np.abs(pms))) if pms.size else -1
    i_dm = int(np.argmin(delays)) if delays.size and np.isfinite(m.delay_margin_s) else -1
    m.crossovers = [
        GainCrossover(float(w), float(p), float(d), k == i_pm, k == i_dm) for k, (w, p, d) in enumerate(zip(wc, pms, delays))
    ]
    m.delay_margin_w_rad_s = float(wc[i_dm]) if i_dm >= 0 else np.nan
    stable = m.closed_loop_stable
    m.phase_crossings = sorted(
        (
            PhaseCrossover(
                float(w), float(g),
                sets_lower=bool(stable and g == m.gain_lower and m.gain_lower > 0),
                sets_upper=bool(stable and g == m.gain_upper and np.isfinite(m.gain_upper)),
            )
            for g, w in crit
        ),
        key=lambda c: c.w_rad_s,
    )
    m.notes = _reading_notes(m)
    return m


def _reading_notes(m: LoopMargins) -> list[str]:
    """Sentences that keep signed or unusual margins from being misread."""
    notes = []
    P = m.open_loop_unstable_poles
    if m.closed_loop_stable and np.isfinite(m.phase_margin_deg) and m.phase_margin_deg < 0:
        notes.append(
            f"the closed loop is stable although the phase margin is negative: L has {P} open-loop pole"
            f"{'s' if P != 1 else ''} in the right half-plane and its Nyquist plot encircles -1 {P} time"
            f"{'s' if P != 1 else ''} counter-clockwise, as stability requires; the minus sign means a phase lead (not a lag) of "
            f"{abs(m.phase_margin_deg):.3g} deg at {m.phase_margin_w_rad_s:.4g} rad/s would put L on -1 (a lag needs "
            f"{360 + m.phase_margin_deg:.4g} deg there, which is what the delay margin counts)"
        )
    if m.closed_loop_stable and P and m.gain_lower > 0:
        notes.append(
            f"L has {P} open-loop pole{'s' if P != 1 else ''} in the right half-plane: lowering the loop gain below "
            f"x{m.gain_lower:.4g} loses stability"
        )
    return notes


def _nearest_critical_gains(crit) -> tuple[float, float, float, float]:
    """The gain-margin interval around 1 from the critical gains ``(g, w)`` where ``g L(jw) = -1``.

    Returns ``(g_lower, g_upper, w_lower, w_upper)``; ``0`` / ``inf`` (with ``nan``
    frequencies) when nothing bounds that side.
    """
    lo_g, hi_g, lo_w, hi_w = 0.0, np.inf, np.nan, np.nan
    for g, w in crit:
        if g < 1.0 and g >= lo_g:
            lo_g, lo_w = g, w
        if g > 1.0 and g < hi_g:
            hi_g, hi_w = g, w
    return lo_g, hi_g, lo_w, hi_w


#: Where each pass of :func:`_refine_roots` samples a bracket of width ``W`` around its
#: regula-falsi point (offsets in units of ``W``): a ladder of ever closer points on both
#: sides, so one pass shrinks the bracket to the first rung the estimate is good to.
_ROOT_LADDER = np.array([1e-1, 1e-2, 1e-4, 1e-7, 1e-10, 1e-13])


def _refine_roots(Ljw, grid: np.ndarray, L: np.ndarray, parts, keep=None) -> list[list[float]]:
    """Roots on ``(grid[0], grid[-1])`` of each function ``g(L(jw))`` of ``parts``, bracketed by
    sign changes of ``g(L)`` on the grid (``L`` is ``Ljw(grid)``); one sorted list per part.
    ``keep`` (optional, one per part, None for all): ``keep(L_left, L_right)`` is a mask of
    the brackets worth refining (a root its caller would discard need not be found).

    All brackets of all parts are refined together, one call of ``Ljw`` per pass (in log
    frequency, where a width is a relative width in frequency): each pass samples every
    bracket at its regula-falsi point, at a ladder of points on both sides of it
    (:data:`_ROOT_LADDER`) and at its midpoint, and keeps the narrowest sign change. A
    smooth root is found in a few passes (the estimate's error falls with the square of
    the width, and the ladder turns an estimate good to ``1e-7 W`` into a bracket about that
    wide; near the end rounding sets the pace); the midpoint halves the bracket at worst, as
    bisection does. The result is
    good to a relative width of about 1e-15 in frequency (as ``brentq`` with
    ``xtol = rtol = 1e-15``). For a loop evaluated block by block the cost of a call is
    mostly its fixed overhead, so a few wide calls are what is cheap.
    """
    found: list[list[float]] = []
    brackets, owner = [], []
    for k, g in enumerate(parts):
        v = np.asarray(g(L), dtype=float)
        found.append([float(grid[i]) for i in np.nonzero(v == 0)[0]])
        idx = np.nonzero(np.sign(v[:-1]) * np.sign(v[1:]) < 0)[0]
        if keep is not None and keep[k] is not None and idx.size:
            idx = idx[np.asarray(keep[k](L[idx], L[idx + 1]), dtype=bool)]
        brackets.append((idx, v))
        owner.append(np.full(idx.size, k))
    idx = np.concatenate([b[0] for b in brackets])
    if idx.size:
        owner = np.concatenate(owner)
        a, b = np.log(grid[idx]), np.log(grid[idx + 1])
        fa = np.concatenate([v[i] for i, v in brackets])
        fb = np.concatenate([v[i + 1] for i, v in brackets])
        offsets = np.concatenate([-_ROOT_LADDER, [0.0], _ROOT_LADDER[::-1]])
        for _ in range(200):
            live = np.abs(b - a) > 1e-15 + 4.0 * np.finfo(float).eps * np.maximum(np.abs(a), np.abs(b))
            if not live.any():
                break
            la, lb_, lfa, lfb = a[live], b[live], fa[live], fb[live]
            width = lb_ - la
            mid = 0.5 * (la + lb_)
            with np.errstate(all="ignore"):
                xs = lb_ - lfb * width / (lfb - lfa)
            xs = np.where(np.isfinite(xs) & (xs > la) & (xs < lb_), xs, mid)
            pts = np.concatenate([xs[:, None] + offsets[None, :] * width[:, None], mid[:, None]], axis=1)
            pts = np.sort(np.clip(pts, la[:, None], lb_[:, None]), axis=1)
            Lx = Ljw(np.exp(pts.ravel())).reshape(pts.shape)
            vals = np.empty(pts.shape)
            who = owner[live]
            for k, g in enumerate(parts):
                mine = who == k
                if mine.any():
                    vals[mine] = np.asarray(g(Lx[mine]), dtype=float)
            xx = np.concatenate([la[:, None], pts, lb_[:, None]], axis=1)
            ff = np.concatenate([lfa[:, None], vals, lfb[:, None]], axis=1)
            # the first sample that is a root, or the first change of sign, per bracket;
            # a non-finite sample (a pole on the axis) is skipped as no change
            zero = ff == 0.0
            change = np.sign(ff[:, :-1]) * np.sign(ff[:, 1:]) < 0
            rows = np.arange(xx.shape[0])
            has_zero = zero.any(axis=1)
            jz = np.argmax(zero, axis=1)
            jc = np.argmax(change, axis=1)
            has_change = change.any(axis=1)
            new_a = np.where(has_zero, xx[rows, jz], np.where(has_change, xx[rows, jc], la))
            new_b = np.where(has_zero, xx[rows, jz], np.where(has_change, xx[rows, jc + 1], lb_))
            new_fa = np.where(has_zero, 0.0, np.where(has_change, ff[rows, jc], lfa))
            new_fb = np.where(has_zero, 0.0, np.where(has_change, ff[rows, jc + 1], lfb))
            # no change of sign left between finite samples (the ends' change ran into a
            # pole on the axis): no root to report there
            stuck = ~has_zero & ~has_change
            new_a = np.where(stuck, np.nan, new_a)
            new_b = np.where(stuck, np.nan, new_b)
            a[live], b[live], fa[live], fb[live] = new_a, new_b, new_fa, new_fb
        ok = np.isfinite(a) & np.isfinite(b)
        best = np.exp(np.where(np.abs(fa) < np.abs(fb), a, b))
        for k in range(len(parts)):
            found[k] += [float(r) for r in best[ok & (owner == k)]]
    return [sorted(set(r)) for r in found]


def _close_channels(A, B, C, D, keep: int):
    """Scalar loop seen at channel ``keep`` of a square loop ``L`` with the others closed.

    With ``G = -L`` (the break's transfer), closing channel ``j`` means ``b_j = z_j``.
    """
    q = D.shape[0]
    J = [j for j in range(q) if j != keep]
    G_C, G_D = -C, -D
    if not J:
        return A, B, C, D
    Dj = G_D[np.ix_(J, J)]
    M = np.eye(len(J)) - Dj
    # b_J = M^-1 (C_J x + D_Ji b_i)
    K1 = np.linalg.solve(M, G_C[J, :])
    K2 = np.linalg.solve(M, G_D[np.ix_(J, [keep])])
    Ac = A + B[:, J] @ K1
    Bc = B[:, [keep]] + B[:, J] @ K2
    Cg = G_C[[keep], :] + G_D[np.ix_([keep], J)] @ K1
    Dg = G_D[np.ix_([keep], [keep])] + G_D[np.ix_([keep], J)] @ K2
    return Ac, Bc, -Cg, -Dg


def vector_loop_margins(A, B, C, D=None, *, skew: float = 0.0, channel_names=None) -> VectorLoopMargins:
    """Margins of a square vector loop ``L`` (q x q).

    Returns loop-at-a-time margins for each channel (the others closed) and the
    all-loops-at-once (unstructured) disk margin ``1/||S + (skew - 1)/2 I||_inf``.
    """
    A, B, C, D = _as_system(A, B, C, D)
    q = D.shape[0]
    if D.shape[1] != q:
        raise AnalysisError(f"a loop transfer must be square; got {D.shape[0]}x{D.shape[1]}")
    if _ill_posed(D):
        raise AnalysisError("det(I + L(inf)) = 0: the closed loop has no proper solution at this break")
    stable = is_stable_matrix(closed_loop_matrix(A, B, C, D))
    chans = [loop_margins(*_close_channels(A, B, C, D, i), skew=skew) for i in range(q)]
    if stable:
        As, Bs, Cs, Ds = sensitivity_system(A, B, C, D)
        ps = peak_gain(As, Bs, Cs, Ds)
        pk = peak_gain(As, Bs, Cs, Ds + (skew - 1.0) / 2.0 * np.eye(q))
        disk = disk_margin_from_alpha(1.0 / pk.value if pk.value > 0 else np.inf, skew=skew, w_rad_s=pk.w_rad_s)
        s_peak, s_w = ps.value, ps.w_rad_s
    else:
        disk = DiskMargin(0.0, skew, 1.0, 1.0, 0.0, np.nan)
        s_peak, s_w = np.inf, np.nan
    names = list(channel_names) if channel_names is not None else [f"[{i + 1}]" for i in range(q)]
    return VectorLoopMargins(bool(stable), chans, disk, float(s_peak), float(s_w), names)


def margins_from_response(
    w_rad_s,
    L_jw,
    *,
    open_loop_unstable_poles: int = 0,
    poles_at_origin: int = 0,
    skew: float = 0.0,
) -> LoopMargins:
    """Margins of a scalar loop known only by samples ``L(jw)`` (e.g. a sampled-data loop).

    Crossings are located on the grid and refined by interpolation (linear in log
    frequency for ``log|L|`` and for ``Im L``); peak sensitivity and the disk margin are
    the grid maxima refined by a parabola through the three points around the peak.
    Stability of ``g L`` is decided by counting encirclements of ``-1/g`` by the Nyquist
    contour built from the samples (mirrored for negative frequencies, with the arc of
    ``poles_at_origin`` integrators), ``Z = P + N_clockwise``.

    Parameters
    ----------
    w_rad_s : (k,) array_like
        Increasing frequencies in rad/s (dense enough that the phase moves less than
        180 deg between samples).
    L_jw : (k,) array_like of complex
    open_loop_unstable_poles : int
        ``P``: open-loop poles in the open right half-plane.
    poles_at_origin : int
        Integrators in the loop (poles at ``s = 0``).
    skew : float

    Returns
    -------
    LoopMargins
    """
    w = np.asarray(w_rad_s, dtype=float).ravel()
    L = np.asarray(L_jw, dtype=complex).ravel()
    if w.shape != L.shape or w.size < 3:
        raise AnalysisError(f"need matching w and L samples (at least 3); got {w.size} and {L.size}")
    ok = np.isfinite(L) & (w >= 0)
    w, L = w[ok], L[ok]
    order = np.argsort(w)
    w, L = w[order], L[order]
    lw = np.log(np.maximum(w, 1e-300))
    mag = np.abs(L)
    ph = np.unwrap(np.angle(L))
    # gain crossovers
    lm = np.log(mag + 1e-300)
    wc, phc = [], []
    for i in np.nonzero(np.sign(lm[:-1]) * np.sign(lm[1:]) < 0)[0]:
        t = lm[i] / (lm[i] - lm[i + 1])
        wc.append(float(np.exp(lw[i] + t * (lw[i + 1] - lw[i]))) if w[i] > 0 else float(w[i] + t * (w[i + 1] - w[i])))
        phc.append(float(ph[i] + t * (ph[i + 1] - ph[i])))
    wc_a, phc_a = np.array(wc), np.degrees(np.array(phc))
    pms = _wrap180(phc_a + 180.0) if wc else np.zeros(0)
    if wc:
        i = int(np.argmin(np.abs(pms)))
        pm, pm_w = float(pms[i]), float(wc_a[i])
        dm = float(np.min(np.radians(np.mod(phc_a + 180.0, 360.0)) / np.where(wc_a > 0, wc_a, np.nan)))
    else:
        pm, pm_w, dm = np.inf, np.nan, np.inf
    # critical gains
    crit = []
    im = L.imag
    for i in np.nonzero(np.sign(im[:-1]) * np.sign(im[1:]) < 0)[0]:
        t = im[i] / (im[i] - im[i + 1])
        re = L[i].real + t * (L[i + 1].real - L[i].real)
        wx = float(np.exp(lw[i] + t * (lw[i + 1] - lw[i]))) if w[i] > 0 else float(w[i] + t * (w[i + 1] - w[i]))
        if re < 0:
            crit.append((-1.0 / re, wx))
    # a sample exactly on the negative real axis is a crossing the sign test cannot see (the
    # Nyquist-frequency end z = -1 of a sampled loop, where a real model's response is real)
    for i in np.nonzero(im[1:] == 0)[0] + 1:
        if L[i].real < 0:
            crit.append((-1.0 / L[i].real, float(w[i])))
    # the lowest sample stands for w -> 0 when the loop has no integrator and is (nearly)
    # real there
    if poles_at_origin == 0 and L[0].real < 0 and abs(L[0].imag) <= (1e-9 if w[0] == 0 else 1e-3) * abs(L[0]):
        crit.append((-1.0 / L[0].real, float(w[0])))
    crit.sort()
    contour = _nyquist_contour(w, L, poles_at_origin)

    def stable_at(g):
        q = -1.0 / g
        z = contour - q
        ang = np.angle(z)
        dang = np.diff(np.concatenate([ang, ang[:1]]))
        dang = np.mod(dang + np.pi, 2 * np.pi) - np.pi
        ccw = int(np.round(np.sum(dang) / (2 * np.pi)))
        return open_loop_unstable_poles - ccw == 0

    nominal = stable_at(1.0)
    if nominal:
        lo_g, hi_g, lo_w, hi_w = _nearest_critical_gains(crit)
        msg = ""
    else:
        lo_g = hi_g = lo_w = hi_w = np.nan
        msg = "the closed loop is unstable at nominal gain (Nyquist count)"
    S = 1.0 / (1.0 + L)
    s_peak, s_w = _grid_peak(w, np.abs(S))
    dpk, dw = _grid_peak(w, np.abs(S + (skew - 1.0) / 2.0))
    if nominal:
        disk = disk_margin_from_alpha(1.0 / dpk if dpk > 0 else np.inf, skew=skew, w_rad_s=dw)
    else:
        disk = DiskMargin(0.0, skew, 1.0, 1.0, 0.0, np.nan)
        s_peak, s_w, dm = np.inf, np.nan, np.nan
    out = LoopMargins(
        bool(nominal), int(open_loop_unstable_poles), float(lo_g), float(hi_g), float(lo_w), float(hi_w),
        pm, pm_w, dm, [float(x) for x in wc_a], [float(x) for x in pms], sorted({wx for _, wx in crit}),
        float(s_peak), float(s_w), disk, msg,
        open_loop_poles=PoleClasses(int(open_loop_unstable_poles), int(poles_at_origin), 0, 0),
    )
    with np.errstate(divide="ignore", invalid="ignore"):
        delays = np.radians(np.mod(phc_a + 180.0, 360.0)) / np.where(wc_a > 0, wc_a, np.nan) if wc else np.zeros(0)
    return _with_tables(out, np.where(np.isnan(delays), np.inf, delays), crit)


def _grid_peak(w: np.ndarray, g: np.ndarray) -> tuple[float, float]:
    i = int(np.argmax(g))
    if 0 < i < g.size - 1:
        x = np.log(np.maximum(w[i - 1 : i + 2], 1e-300)) if w[i - 1] > 0 else w[i - 1 : i + 2]
        y = g[i - 1 : i + 2]
        den = (x[0] - x[1]) * (x[0] - x[2]) * (x[1] - x[2])
        if den != 0:
            a = (x[2] * (y[1] - y[0]) + x[1] * (y[0] - y[2]) + x[0] * (y[2] - y[1])) / den
            b = (x[2] ** 2 * (y[0] - y[1]) + x[1] ** 2 * (y[2] - y[0]) + x[0] ** 2 * (y[1] - y[2])) / den
            if a < 0:
                xv = -b / (2 * a)
                c = y[1] - a * x[1] ** 2 - b * x[1]
                yv = a * xv * xv + b * xv + c
                if yv >= g[i] and x[0] <= xv <= x[2]:
                    return float(yv), float(np.exp(xv) if w[i - 1] > 0 else xv)
    return float(g[i]), float(w[i])


def _nyquist_contour(w: np.ndarray, L: np.ndarray, k: int) -> np.ndarray:
    pos = L[w > 0] if k > 0 else L
    neg = np.conj(pos[::-1])
    parts = [neg]
    if k > 0 and pos.size:
        theta = np.linspace(-np.pi / 2, np.pi / 2, 60 * k + 1)
        parts.append(pos[0] * np.exp(1j * k * (np.pi / 2 - theta)))
    parts.append(pos)
    return np.concatenate(parts)


# ---------------------------------------------------------------------------------------
# diagram level


def loop_transfer(diagram, signal: str):
    """``L = -G(break -> returned signal)`` of the diagram opened at ``signal``.

    ``signal`` names a signal (every consumer is cut) or one input port ``"block.port"``
    (only that consumer is cut; see :func:`loopwright.engine.interconnect.assemble`).

    Returns
    -------
    (A, B, C, D) : ndarrays
        Realisation of ``L`` (all states of the diagram; hidden ones are harmless).

    Raises
    ------
    UnknownNameError
        No such signal or input port (with suggestions).
    """
    from loopwright.engine.interconnect import assemble

    model = assemble(diagram, break_at=signal)
    A, B, C, D = model.pair(f"break:{signal}", model.break_return)
    return A, B, -C, -D


def margins_at(diagram, signal: str, *, skew: float = 0.0, limits: bool = True, route: str = "auto"):
    """Margins of the loop broken at ``signal``: :class:`LoopMargins` for a scalar signal,
    :class:`VectorLoopMargins` for a vector one.

    ``signal`` may name one component of a vector signal or port, ``"P.u[2]"``: that
    channel is opened and the other components stay closed (the loop-at-a-time margin of
    that channel), and the result is a :class:`LoopMargins`. With ``limits`` the scalar
    results carry :class:`~loopwright.engine.limits.PerformanceLimits` (Bode's sensitivity
    integral, the right-half-plane pole and zero bounds).

    ``route``: ``"auto"`` takes the block-by-block route (:func:`_margins_block_by_block`)
    for a scalar loop where an operation count says it is cheaper, else the loop-evaluator
    route (:func:`_scalar_margins_at`: the loop as opened, its states off the loop dropped
    where that is exact, evaluated part by part where its structure allows, as the
    loop-break view does); ``"whole model"`` the minimal realization of the loop evaluated
    through one Schur form (:func:`loop_margins`), ``"block by block"`` the block-by-block
    route whenever it applies. Every route falls back to the whole model where it cannot
    certify its answer. The block-by-block route carries no performance limits (they need
    the loop's zeros, an O(n^3) computation).
    """
    if not np.isfinite(skew):
        raise AnalysisError(f"disk-margin skew must be a finite number; got {skew}")
    if route not in ("auto", "whole model", "block by block"):
        raise ValueError(f"route must be 'auto', 'whole model' or 'block by block', not {route!r}")
    from loopwright.engine.interconnect import assemble

    base, component = _split_component(diagram, signal)
    opened = assemble(diagram, break_at=base)
    if component is None and route != "whole model":
        fast = _margins_block_by_block(diagram, opened, base, skew=skew, force=route == "block by block")
        if fast is not None:
            return fast
    if route == "whole model":
        A, B, C, D = _break_loop(opened, signal, base, component, trim=_trim_for_margins)
        if D.shape[0] == 1:
            m = loop_margins(A, B, C, D, skew=skew)
            if limits:
                _attach_limits(m, A, B, C, D)
            return m
        return _vector_margins(A, B, C, D, signal, skew=skew, limits=limits)
    A, B, C, D = _break_loop(opened, signal, base, component, trim=_structural_trim)
    if D.shape[0] == 1:
        return _scalar_margins_at(A, B, C, D, skew=skew, limits=limits)
    return _vector_margins(*_trim_for_margins(A, B, C, D), signal, skew=skew, limits=limits)


def _scalar_margins_at(A, B, C, D, *, skew: float, limits: bool) -> LoopMargins:
    """Certified margins of the scalar loop ``(A, B, C, D)`` (as opened, states off the loop
    dropped where exact) from one evaluator of ``L``, and its performance limits.

    ``L(jw)`` is evaluated by one :class:`LoopResponse` of this realisation (part by part
    when it is block triangular: a loop opened in a ring of loops) for the margins' grid,
    their refinement, the Hamiltonian certificates' evaluations and the Bode integral's
    quadrature. The limits' algebra (right-half-plane poles and zeros, relative degree)
    needs the minimal realization; its zeros then also place the margins' grid points (the
    zeros of this realisation add only the hidden modes, which are poles of it anyway).
    """
    if _ill_posed(D):
        raise AnalysisError("1 + L(inf) = 0: the closed loop has no proper solution at this break")
    from loopwright.engine.limits import clearly_stable

    resp = LoopResponse(A, B, C, D)
    poles = resp.poles
    if limits and not clearly_stable(poles, matrix_scale(A)):
        # the limits need the minimal realization (its hidden modes may be unstable)
        realization, poles = minimal_realization(A, B, C, D), None
        zeros = _zeros_of(*realization, minimal=False)
    else:
        # hidden modes are stable, or no limits asked: no minimal realization needed (see
        # limits.performance_limits)
        realization = (A, B, C, D)
        zeros = grid_zeros(resp)
    m, _w, _L = scalar_margins(resp, skew=skew, zeros=zeros, certify=True)
    if limits:
        _attach_limits(m, *realization, response=resp, zeros=zeros, poles=poles)
    return m


def grid_zeros(resp: LoopResponse) -> np.ndarray:
    """The zeros of the loop ``resp`` that place the margins' grid points
    (:meth:`LoopResponse.grid`): of the realisation as given when every pole is clearly
    stable (they add only its hidden modes, poles of it anyway, and cost no staircase of
    rank decisions), else of its minimal realization; none where they cannot be computed."""
    from loopwright.engine.limits import clearly_stable

    A = resp.A
    return _zeros_of(resp.A, resp.B, resp.C, resp.D, minimal=not (A.size and clearly_stable(resp.poles, matrix_scale(A))))


def _zeros_of(A, B, C, D, *, minimal: bool) -> np.ndarray:
    """:func:`transmission_zeros`, or none where they cannot be computed."""
    try:
        return transmission_zeros(A, B, C, D, minimal=minimal) if A.size else np.zeros(0)
    except (np.linalg.LinAlgError, ValueError):
        return np.zeros(0)


def _vector_margins(A, B, C, D, signal: str, *, skew: float, limits: bool) -> VectorLoopMargins:
    """:func:`vector_loop_margins` of the loop ``L`` broken at the vector ``signal``, its
    channels named ``signal[i]``, each with its performance limits when ``limits``."""
    names = [f"{signal}[{i + 1}]" for i in range(D.shape[0])]
    vm = vector_loop_margins(A, B, C, D, skew=skew, channel_names=names)
    if limits and D.shape[1] == D.shape[0]:
        for i, m in enumerate(vm.per_channel):
            _attach_limits(m, *_close_channels(A, B, C, D, i))
    return vm


def _break_loop(opened, signal: str, base: str, component, *, trim):
    """``L`` of the loop opened at ``base`` (an assembled model), trimmed by ``trim``, checked
    for a loop through it, and with the other channels closed when ``component`` is given."""
    A, B, C, D = opened.pair(f"break:{base}", opened.break_return)
    C, D = -C, -D  # L = -G(break -> returned signal), as loop_transfer
    A, B, C, D = trim(A, B, C, D)
    if not np.any(D) and (A.shape[0] == 0 or not np.any(B) or not np.any(C)):
        raise AnalysisError(
            f"no feedback loop passes through {signal!r}: a signal injected there never comes back, so there are no margins to compute"
        )
    if component is not None:
        q = D.shape[0]
        if not 1 <= component <= q:
            raise AnalysisError(f"{signal!r}: {base!r} has {q} component{'s' if q != 1 else ''}; pick [1] to [{q}]")
        if D.shape[1] != q:
            raise AnalysisError(f"a loop transfer must be square; got {D.shape[0]}x{D.shape[1]}")
        A, B, C, D = _close_channels(A, B, C, D, component - 1)
    return A, B, C, D


def opened_loop(diagram, signal: str, *, closed=None):
    """``L`` at the break ``signal`` (as :func:`margins_at` reads it: a signal, a port or one
    component ``"P.u[2]"``), from one assembly, with the states off the loop dropped where
    that is exact (:func:`structural_trim`; unstable ones are kept). ``closed``: the model
    already assembled from this ``diagram`` object, whose block realisations are used again.

    Returns
    -------
    (A, B, C, D) : ndarrays
    """
    from loopwright.engine.interconnect import assemble

    base, component = _split_component(diagram, signal)
    opened = assemble(diagram, break_at=base, like=closed)
    return _break_loop(opened, signal, base, component, trim=_structural_trim)


def _structural_trim(A, B, C, D):
    """Drop the states structurally off the loop when they are all stable (the first step of
    :func:`_trim_for_margins`, without its minimal realization)."""
    keep = structural_trim(A, B, C)
    if keep.size < A.shape[0]:
        drop = np.setdiff1d(np.arange(A.shape[0]), keep)
        if is_stable_matrix(A[np.ix_(drop, drop)]):
            A, B, C = A[np.ix_(keep, keep)], B[keep], C[:, keep]
    return A, B, C, D


# Below this many states the whole-model route takes well under a second and also gives
# the performance limits; the block-by-block route is for big loops.
_BLOCKWISE_MIN_STATES = 200
#: Sweeps of the coupling-form pole iteration counted by the route's operation count.
_ABERTH_SWEEPS = 20
#: Largest group of mutually driven blocks of an opened loop whose poles are taken from a
#: dense eigenvalue computation (25 n^3 flops: a few ms) rather than the pole iteration.
_DENSE_GROUP = 200


def _margins_block_by_block(diagram, opened, base: str, *, skew: float, force: bool) -> LoopMargins | None:
    """Margins of a scalar loop from its block-by-block frequency response, or None where
    this route does not apply or cannot certify its answer (the caller then takes the
    whole-model route).

    Method (exact; no reduced model). The loop opened at ``base`` and the nominal closed
    loop are both assembled; their poles come from the coupling form
    (:func:`loopwright.engine.coupled_poles.closed_loop_poles`, O(n q^2 + n^2) per sweep
    instead of the O(n^3) of the minimal realization and Schur forms of the other route).
    The route handles a closed loop whose poles all lie clearly left of the axis (the check
    command's tolerance, :mod:`loopwright.engine.eigen`); the gain margins are then the
    nearest critical gains ``-1/L(jw)`` around 1, as on the other route. ``L(jw)`` is
    evaluated block by block (:mod:`loopwright.engine.blockwise_response`) on a grid laid
    on the open- and closed-loop poles, densified where the phase or the magnitude moves
    fast between neighbours; crossovers are refined with ``brentq`` as on the other route.
    Peak sensitivity and the disk margin are grid-and-refine values (bounded Brent search
    in log-frequency around the grid's peak), not Hamiltonian certificates.
    """
    from loopwright.engine.blockwise_response import BlockwiseModel, whole_model_cost
    from loopwright.engine.coupled_poles import closed_loop_poles
    from loopwright.engine.eigen import axis_tolerance

    cols, rows = opened.input_slice(f"break:{base}"), opened.signal_slice(opened.break_return)
    if (cols.stop - cols.start, rows.stop - rows.start) != (1, 1):
        return None
    n = opened.A.shape[0]
    points = 4000
    if n == 0 or (n < _BLOCKWISE_MIN_STATES and not force):
        return None
    bw_open = BlockwiseModel.from_model(opened)
    if bw_open is None:
        return None
    # the other route: structural trim, stability test and minimal realization (about
    # three dense O(n^3) factorisations), one Schur form, eigenvalues per critical gain
    # and a Hamiltonian peak search of order 2n for S and for the disk
    dense = 5.0 * whole_model_cost(opened, 1, points) + 2 * 25.0 * (2.0 * n) ** 3
    # the poles of the open and of the closed loop by the coupling form: a batched solve of
    # size q per root and sweep (tens of sweeps), which a loop with many coupling channels
    # (a ring of observer-based loops: q grows with n) makes dearer than a dense eigensolver
    poles = 2.0 * _ABERTH_SWEEPS * n * (8.0 * bw_open.q**3 / 3.0 + 8.0 * bw_open.q**2)
    if not force and (n < _BLOCKWISE_MIN_STATES or bw_open.cost(1, 1, points) + 60.0 * n * n + poles >= dense):
        return None
    d = -float(opened.D[rows, cols][0, 0])
    if _ill_posed(np.array([[d]])):
        return None
    closed_A, bw_closed = _closed_coupling_form(opened, bw_open, cols, rows, d)
    ol = _open_loop_poles(bw_open)
    cl = closed_loop_poles(bw_closed)
    if ol is None or cl is None:
        return None
    scale = matrix_scale(closed_A)  # the open loop differs by a coupling of low rank: one balancing serves both
    if np.any(cl.real >= -axis_tolerance(cl, scale)):
        return None  # unstable or marginal: the other route classifies the gain intervals

    def Ljw(w):
        w = np.atleast_1d(np.asarray(w, dtype=float))
        with np.errstate(all="ignore"):
            return -bw_open.response(cols, rows, 1j * w)[:, 0, 0]

    grid = auto_frequency_grid(np.concatenate([ol, cl]), points_per_decade=80, decades_beyond=3.0)
    grid, L = densify(Ljw, grid, Ljw(grid))  # where neighbours differ by more than 10 deg or 10 % in |L|
    finite = np.isfinite(L)
    grid, L = grid[finite], L[finite]
    if d == 0.0 and not np.any(L != 0.0):
        return None  # nothing comes back: the other route says so in its own words
    ol_classes = classify_poles(ol, scale=scale)

    L0 = Ljw(0.0)[0]
    wc, pms, pm, pm_w, delays, dm, crit = _crossings(Ljw, grid, L, d, L0)
    if any(g == 1.0 for g, _ in crit):
        return None
    lo_g, hi_g, lo_w, hi_w = _nearest_critical_gains(crit)
    if lo_g == 0.0:
        lo_w = np.nan

    def peak(offset: float) -> tuple[float, float]:
        """Peak over w of |1/(1 + L) + offset|: the grid's best point, refined in log w."""
        mags = np.abs(1.0 / (1.0 + L) + offset)
        i = int(np.argmax(mags))
        best, w_best = float(mags[i]), float(grid[i])
        if 0 < i < grid.size - 1:
            f = lambda lw: -float(np.abs(1.0 / (1.0 + Ljw(np.exp(lw))[0]) + offset))  # noqa: E731
            r = sopt.minimize_scalar(f, bounds=(np.log(grid[i - 1]), np.log(grid[i + 1])), method="bounded", options={"xatol": 1e-12})
            if -r.fun > best:
                best, w_best = float(-r.fun), float(np.exp(r.x))
        if np.isfinite(L0) and abs(1.0 / (1.0 + L0) + offset) >= best:
            best, w_best = float(abs(1.0 / (1.0 + L0) + offset)), 0.0
        at_inf = abs(1.0 / (1.0 + d) + offset)
        return (at_inf, np.inf) if at_inf > best else (best, w_best)

    s_peak, s_w = peak(0.0)
    pk_d, pk_d_w = peak((skew - 1.0) / 2.0)
    disk = disk_margin_from_alpha(1.0 / pk_d if pk_d > 0 else np.inf, skew=skew, w_rad_s=pk_d_w)
    crossings = (wc, pms, pm, pm_w, delays, dm, crit)
    return _margins_record(True, ol_classes, (lo_g, hi_g, lo_w, hi_w), crossings, (s_peak, s_w), disk, "")


def _closed_coupling_form(opened, bw_open, cols: slice, rows: slice, d: float):
    """The closed loop's state matrix and coupling form, from the loop opened at a scalar break.

    Closing the break feeds the returned signal ``r = C_r x + D_rb b`` back into the break
    input ``b``: ``b = C_r x / (1 - D_rb) = C_r x / (1 + d)`` with ``d = L(inf) = -D_rb``,
    so ``A_closed = A + B_b C_r / (1 + d)``, and with ``B_b = U W_b`` the coupling form
    ``A0 + U V`` keeps its blocks and gets ``V + W_b C_r / (1 + d)`` (exact: the same model
    a second assembly of the closed diagram would give, without that assembly and the
    factorisation of its coupling).

    Returns
    -------
    A_closed : (n, n) ndarray
    bw_closed : BlockwiseModel
        Valid for the closed loop's poles (:func:`loopwright.engine.coupled_poles.closed_loop_poles`);
        its ``model`` carries the closed loop's state matrix only.
    """
    from types import SimpleNamespace

    from loopwright.engine.blockwise_response import BlockwiseModel

    back = np.asarray(opened.C[rows], dtype=float) / (1.0 + d)  # (1, n)
    A_closed = opened.A + np.asarray(opened.B[:, cols], dtype=float) @ back
    V_closed = bw_open.V + np.asarray(bw_open.W[:, cols], dtype=float) @ back
    states_only = SimpleNamespace(A=A_closed, B=opened.B, C=opened.C)
    return A_closed, BlockwiseModel(states_only, bw_open.blocks, V_closed, bw_open.W)


def _open_loop_poles(bw) -> np.ndarray | None:
    """Poles of the opened loop from its coupling form, block by block where the opening
    leaves the blocks in a cascade.

    Block ``i``'s states are driven by block ``j``'s where ``V[channels_i, states_j]`` is not
    zero. Ordered by the strongly connected groups of that graph, ``A`` is block
    triangular, so its eigenvalues are those of the groups' diagonal blocks: a block driven
    by no state of its own group has its own poles (``A[i, i] = A0_i``, already known to its
    evaluator), a small group the eigenvalues of its dense diagonal block (at most
    :data:`_DENSE_GROUP` states). A larger group needs the pole iteration on the whole
    coupling form (:func:`loopwright.engine.coupled_poles.closed_loop_poles`), which is
    then used for everything; None where it does not converge.
    """
    from scipy.sparse import csr_matrix
    from scipy.sparse.csgraph import connected_components

    from loopwright.engine.coupled_poles import closed_loop_poles

    blocks = bw.blocks
    k = len(blocks)
    drives = np.zeros((k, k), dtype=bool)  # drives[j, i]: block j's states enter block i's inputs
    for i, bi in enumerate(blocks):
        rows_i = bw.V[bi.channels]
        for j, bj in enumerate(blocks):
            drives[j, i] = bool(np.any(rows_i[:, bj.states]))
    _, labels = connected_components(csr_matrix(drives), directed=True, connection="strong")
    A = bw.model.A
    parts = []
    for g in np.unique(labels):
        members = np.flatnonzero(labels == g)
        if members.size == 1 and not drives[members[0], members[0]]:
            parts.append(np.asarray(blocks[members[0]].evaluator.eigenvalues, dtype=complex))
            continue
        idx = np.concatenate([np.arange(blocks[i].states.start, blocks[i].states.stop) for i in members])
        if idx.size > _DENSE_GROUP:
            return closed_loop_poles(bw)
        parts.append(sla.eigvals(A[np.ix_(idx, idx)]).astype(complex))
    return np.concatenate(parts) if parts else np.zeros(0, complex)


def _attach_limits(m: LoopMargins, A, B, C, D, *, response=None, zeros=None, poles=None) -> None:
    """Set ``m.limits`` to the performance limits of the loop ``(A, B, C, D)`` (None where
    they cannot be computed). With ``zeros`` the realisation is taken as minimal or clearly
    stable and those as its transmission zeros, ``poles`` (optional) as its poles
    (:func:`loopwright.engine.limits.limits_of_realization`); ``response`` evaluates ``L``
    for the Bode integral (any realisation of the same loop)."""
    from loopwright.engine.limits import limits_of_realization, performance_limits

    try:
        if zeros is None:
            m.limits = performance_limits(A, B, C, D, closed_loop_stable=m.closed_loop_stable,
                                          gain_crossovers=m.gain_crossovers_w_rad_s, response=response)
        else:
            m.limits = limits_of_realization(A, B, C, D, zeros=zeros, poles=poles, closed_loop_stable=m.closed_loop_stable,
                                             gain_crossovers=m.gain_crossovers_w_rad_s, response=response)
    except (np.linalg.LinAlgError, ValueError):
        m.limits = None  # the margins stand on their own; the limits are an extra


def _split_component(diagram, signal: str) -> tuple[str, int | None]:
    """``"P.u[2]"`` -> ``("P.u", 2)`` when ``P.u`` is a break point and the text is not itself one."""
    import re

    match = re.fullmatch(r"(.+)\[(\d+)\]", signal)
    if not match:
        return signal, None
    wires = {w.name for w in diagram.wires.values()}
    if signal in wires:
        return signal, None
    return match.group(1), int(match.group(2))


def _trim_for_margins(A, B, C, D):
    """Drop the states that neither reach nor see the loop.

    States off the loop structurally go first (exactly); if any of them is unstable the
    whole model is kept, so the closed loop is still reported unstable. The numerically
    hidden states are then removed only when every remaining state is stable.
    """
    keep = structural_trim(A, B, C)
    if keep.size < A.shape[0]:
        drop = np.setdiff1d(np.arange(A.shape[0]), keep)
        if not is_stable_matrix(A[np.ix_(drop, drop)]):
            return A, B, C, D
        A, B, C = A[np.ix_(keep, keep)], B[keep], C[:, keep]
    if is_stable_matrix(A):
        return minimal_realization(A, B, C, D)
    return A, B, C, D


def sensitivity_maps(diagram, plant: str) -> dict:
    """The four closed-loop maps around a plant block, from injections.

    With ``u`` the signal into the plant and ``y`` the signal out of it:
    ``S = G(inject:y -> y)``, ``T = I - S``, ``PS = G(inject:u -> y)``,
    ``CS = -G(inject:y -> u)``. For the standard loop ``e = r - y``, ``u = C e`` these are
    ``(I + PC)^-1``, ``PC (I + PC)^-1``, ``P (I + CP)^-1`` and ``C (I + PC)^-1``.

    Returns
    -------
    dict
        ``{"S": (A,B,C,D), "T": ..., "PS": ..., "CS": ..., "u": name, "y": name}``.
    """
    from loopwright.engine.diagram import PortRef
    from loopwright.engine.interconnect import assemble

    blk = diagram.block_by_name(plant)
    if blk.kind not in ("plant", "dynamic"):
        raise AnalysisError(f"block {plant!r} is a {blk.kind}; the four maps need a plant block", block_ids=[blk.id])
    w_in = diagram.wire_into(PortRef(blk.id, "u"))
    w_out = diagram.wire_from(PortRef(blk.id, "y"))
    if w_in is None or w_out is None:
        raise AnalysisError(f"plant {plant!r} must have wired input and output to close a loop around it", block_ids=[blk.id])
    model = assemble(diagram)
    u, y = w_in.name, w_out.name
    S = model.pair(f"inject:{y}", y)
    A, Bs, Cs, Ds = S
    q = Ds.shape[0]
    T = (A, Bs, -Cs, np.eye(q) - Ds)
    PS = model.pair(f"inject:{u}", y)
    Acs, Bcs, Ccs, Dcs = model.pair(f"inject:{y}", u)
    CS = (Acs, Bcs, -Ccs, -Dcs)
    return {"S": S, "T": T, "PS": PS, "CS": CS, "u": u, "y": y}

