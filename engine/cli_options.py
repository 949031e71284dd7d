"""Checked numeric options of the headless CLI.

argparse's ``type=float`` takes ``inf``, ``nan`` and ``1e400`` (which is ``inf`` again);
each numeric option is instead parsed by a checker that states its accepted range, so a
slip is refused by the parser itself: one line, exit status 2, the option and the range
named (``loopwright freq: argument --w-max: must be a number from 1e-12 to 1e+12 rad/s;
got 'inf'``).

The ranges are far beyond any physical loop but bounded, so that a typo cannot overflow a
frequency grid (decades x points per decade), a matrix exponential (``A * ts``) or a
time grid.
"""
from __future__ import annotations

import argparse
import math
from collections.abc import Callable

__all__ = [
    "FREQUENCY_RANGE_RAD_S",
    "TIME_RANGE_S",
    "SAMPLE_PERIOD_RANGE_S",
    "SKEW_RANGE",
    "bounded_float",
    "bounded_int",
]

#: Frequencies (``--w-min``, ``--w-max``, ``--prewarp``): 24 decades around 1 rad/s.
FREQUENCY_RANGE_RAD_S = (1e-12, 1e12)
#: Times (``--t-end``, ``--dt``): from a picosecond to about 30 000 years.
TIME_RANGE_S = (1e-12, 1e12)
#: Sample period of an exported controller: a nanosecond to about 11 days.
SAMPLE_PERIOD_RANGE_S = (1e-9, 1e6)
#: Disk-margin skew; beyond a million the disk is a gain half-line to rounding.
SKEW_RANGE = (-1e6, 1e6)


def _g(x: float) -> str:
    return f"{x:g}"


def bounded_float(low: float, high: float, *, unit: str = "") -> Callable[[str], float]:
    """An argparse ``type`` accepting a finite number in ``[low, high]``."""
    suffix = f" {unit}" if unit else ""

    def parse(text: str) -> float:
        try:
            value = float(text)
        except ValueError:
            value = math.nan
        if not (math.isfinite(value) and low <= value <= high):
            raise argparse.ArgumentTypeError(f"must be a number from {_g(low)} to {_g(high)}{suffix}; got {text!r}")
        return value

    parse.__name__ = "number"
    return parse


def bounded_int(low: int, high: int) -> Callable[[str], int]:
    """An argparse ``type`` accepting a whole number in ``[low, high]``."""

    def parse(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            value = None
        if value is None or not low <= value <= high:
            raise argparse.ArgumentTypeError(f"must be a whole number from {low} to {high}; got {text!r}")
        return value

    parse.__name__ = "whole number"
    return parse
