"""Step-response metrics of one input-output pair, with the definitions stated.

Definitions (common practice; the same as python-control's ``step_info``, no source):

* **steady-state value** ``y_f``: the DC gain of the path (exact, from the model) when the
  path is stable; otherwise undefined and the other metrics are not computed.
* **rise time**: from the first time ``y`` reaches ``lo * y_f`` to the first time it
  reaches ``hi * y_f`` (``lo, hi = 10 %, 90 %`` by default), crossings interpolated
  linearly between samples.
* **settling time**: the last time ``|y - y_f|`` leaves the band ``settle * |y_f|``
  (2 % by default), interpolated; ``nan`` when the run ends outside the band.
* **overshoot**: ``100 (y_peak - y_f) / |y_f|`` %, where ``y_peak`` is the largest excursion
  in the direction of ``y_f`` (0 if it never passes ``y_f``).
* **undershoot**: ``100 * (largest excursion in the opposite direction) / |y_f|`` % (the
  dip of a non-minimum-phase path).
* **peak** ``max |y|`` and **peak time** where it occurs (refined by a parabola through the
  three samples around the largest sample).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["StepMetrics", "step_metrics", "DEFINITIONS"]

DEFINITIONS = {
    "steady_state": "DC gain of the path (exact, from the model)",
    "rise_time": "first time y reaches hi*y_f minus first time it reaches lo*y_f (linear interpolation)",
    "settling_time": "last time |y - y_f| leaves settle*|y_f| (linear interpolation); null when not settled by the end",
    "overshoot": "100 (peak excursion beyond y_f) / |y_f| percent",
    "undershoot": "100 (largest excursion opposite to y_f) / |y_f| percent",
    "peak": "max |y| and its time (parabola through the three samples around it)",
    "source": "common practice; the same definitions as python-control step_info",
}


@dataclass(frozen=True)
class StepMetrics:
    """Step metrics of one output for one input; times in s, percentages in %.

    ``settled`` is False when the run ends outside the settling band (then
    ``settling_time_s`` is ``nan``: run longer). ``rise`` and ``settle`` are the fractions
    used.
    """

    steady_state: float
    rise_time_s: float
    settling_time_s: float
    overshoot_pct: float
    undershoot_pct: float
    peak: float
    peak_time_s: float
    settled: bool
    rise: tuple[float, float] = (0.1, 0.9)
    settle: float = 0.02

    def as_dict(self) -> dict:
        return {
            "steady_state": self.steady_state,
            "rise_time_s": self.rise_time_s,
            "settling_time_s": self.settling_time_s,
            "overshoot_pct": self.overshoot_pct,
            "undershoot_pct": self.undershoot_pct,
            "peak": self.peak,
            "peak_time_s": self.peak_time_s,
            "settled": self.settled,
            "rise_fractions": list(self.rise),
            "settle_fraction": self.settle,
        }


def _first_crossing(t: np.ndarray, x: np.ndarray, level: float) -> float:
    """First time the sampled ``x`` reaches ``level`` from below (linear interpolation)."""
    above = np.nonzero(x >= level)[0]
    if above.size == 0:
        return np.nan
    k = int(above[0])
    if k == 0:
        return float(t[0])
    x0, x1 = x[k - 1], x[k]
    return float(t[k - 1] + (level - x0) / (x1 - x0) * (t[k] - t[k - 1])) if x1 != x0 else float(t[k])


def step_metrics(t, y, steady_state: float, *, rise: tuple[float, float] = (0.1, 0.9), settle: float = 0.02) -> StepMetrics:
    """Metrics of a sampled step response (see the module notes for the definitions).

    Parameters
    ----------
    t : (k,) array_like
        Increasing times from the step, s.
    y : (k,) array_like
        The response.
    steady_state : float
        ``y_f``, the path's DC gain (finite, nonzero for rise and overshoot to mean anything).
    rise : (float, float)
        Fractions of ``y_f`` between which the rise time is measured.
    settle : float
        Half-width of the settling band as a fraction of ``|y_f|``.

    Returns
    -------
    StepMetrics
    """
    t = np.asarray(t, dtype=float).ravel()
    y = np.asarray(y, dtype=float).ravel()
    yf = float(steady_state)
    i = int(np.argmax(np.abs(y)))
    peak, tpk = float(abs(y[i])), float(t[i])
    if 0 < i < y.size - 1:
        a, b, c = np.abs(y[i - 1 : i + 2])
        den = a - 2 * b + c
        if den < 0:
            off = 0.5 * (a - c) / den
            h = t[i + 1] - t[i]
            peak, tpk = float(b - 0.25 * (a - c) * off), float(t[i] + off * h)
    if not np.isfinite(yf) or yf == 0.0:
        nan = float("nan")
        return StepMetrics(yf, nan, nan, nan, nan, peak, tpk, False, tuple(rise), settle)
    s = np.sign(yf)
    x = s * y / abs(yf)  # normalised: heads for +1
    tr = _first_crossing(t, x, rise[1]) - _first_crossing(t, x, rise[0])
    over = max(0.0, float(np.max(x)) - 1.0) * 100.0
    under = max(0.0, -float(np.min(x))) * 100.0
    out = np.nonzero(np.abs(x - 1.0) > settle)[0]
    if out.size == 0:
        ts, settled = float(t[0]), True
    elif out[-1] == x.size - 1:
        ts, settled = float("nan"), False
    else:
        k = int(out[-1])
        e0, e1 = abs(x[k] - 1.0), abs(x[k + 1] - 1.0)
        ts = float(t[k] + (e0 - settle) / (e0 - e1) * (t[k + 1] - t[k])) if e0 != e1 else float(t[k + 1])
        settled = True
    return StepMetrics(yf, float(tr), ts, over, under, peak, tpk, settled, tuple(rise), settle)
