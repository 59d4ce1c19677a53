"""Weighted least-squares trend of a fitted value against distance, and the drift alert built on it.

A straight line y = a + b d through per-recording fits y_i with standard errors s_i, weights
1 / s_i^2 (generalised least squares with a diagonal covariance; e.g. Press et al., Numerical
Recipes, 3rd ed., sec. 15.2 "fitting data to a straight line", from memory). The parameter
covariance is (X^T W X)^-1, as ``numpy.polyfit(..., w=1/s, cov="unscaled")`` returns it, multiplied
by the reduced chi-square when that is above one (the scatter is larger than the standard errors
claim: common practice, as ``scipy.optimize.curve_fit`` does with ``absolute_sigma=False``), so an
overconfident per-recording error never makes the trend look tighter than its scatter.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np

__all__ = ["Trend", "weighted_trend", "drift_alert", "PER_1000_KM"]

PER_1000_KM = 1.0e6          # metres in 1000 km: slope per metre times this is the change per 1000 km


@dataclass(frozen=True)
class Trend:
    """Line through (distance m, value) with standard errors; ``value_at_end`` is the line at the last
    distance (the current estimate), ``slope_per_m`` NaN when fewer than two points or no spread."""

    n: int
    intercept: float
    slope_per_m: float
    intercept_se: float
    slope_se_per_m: float
    value_at_end: float
    value_at_end_se: float
    end_distance_m: float
    reduced_chi2: float
    centre_m: float = math.nan          # weighted mean distance: the line's value there is uncorrelated with the slope
    centre_se: float = math.nan         # standard error of the line at centre_m

    def value_at(self, distance_m):
        """The line at ``distance_m`` (array or float)."""
        return self.intercept + self.slope_per_m * np.asarray(distance_m, dtype=np.float64)

    def value_se_at(self, distance_m):
        """Standard error of the line at ``distance_m``: sqrt(se_c^2 + (d - centre)^2 se_b^2)."""
        x = np.asarray(distance_m, dtype=np.float64) - self.centre_m
        return np.sqrt(self.centre_se ** 2 + x * x * self.slope_se_per_m ** 2)

    @property
    def slope_per_1000km(self) -> float:
        return self.slope_per_m * PER_1000_KM

    @property
    def slope_se_per_1000km(self) -> float:
        return self.slope_se_per_m * PER_1000_KM


def weighted_trend(distance_m: Sequence[float], value: Sequence[float], std_error: Sequence[float]) -> Trend:
    """The weighted straight-line fit of ``value`` against ``distance_m`` (points with a missing value
    or a non-positive / missing standard error are left out). One point gives its value and error
    with no slope; none gives NaNs."""
    d = np.asarray(distance_m, dtype=np.float64)
    y = np.asarray(value, dtype=np.float64)
    s = np.asarray(std_error, dtype=np.float64)
    ok = np.isfinite(d) & np.isfinite(y) & np.isfinite(s) & (s > 0)
    d, y, s = d[ok], y[ok], s[ok]
    nan = math.nan
    n = int(len(d))
    if n == 0:
        return Trend(0, nan, nan, nan, nan, nan, nan, nan, nan)
    w = 1.0 / s ** 2
    end = float(d.max())
    if n == 1 or float(np.ptp(d)) <= 0.0:
        mean = float(np.sum(w * y) / np.sum(w))
        se = float(1.0 / math.sqrt(np.sum(w)))
        if n > 1:
            chi2 = float(np.sum(w * (y - mean) ** 2)) / (n - 1)
            se *= math.sqrt(max(1.0, chi2))
        else:
            chi2 = nan
        return Trend(n, mean, nan, se, nan, mean, se, end, chi2, end, se)
    # centre the distances for a well-conditioned normal matrix, then move back
    dc = float(np.sum(w * d) / np.sum(w))
    x = d - dc
    sw, sxx = float(np.sum(w)), float(np.sum(w * x * x))
    b = float(np.sum(w * x * y) / sxx)
    a_c = float(np.sum(w * y) / sw)
    resid = y - (a_c + b * x)
    chi2 = float(np.sum(w * resid ** 2) / (n - 2)) if n > 2 else nan
    scale = max(1.0, chi2) if n > 2 else 1.0
    var_ac, var_b = scale / sw, scale / sxx          # centred: intercept and slope are uncorrelated
    a = a_c - b * dc
    var_a = var_ac + dc * dc * var_b
    at_end = a_c + b * (end - dc)
    var_end = var_ac + (end - dc) ** 2 * var_b
    return Trend(n, a, b, math.sqrt(var_a), math.sqrt(var_b), at_end, math.sqrt(var_end), end, chi2, dc,
                 math.sqrt(var_ac))


def drift_alert(name: str, reference: float, trend: Trend, alert_pct: float, sigmas: float = 3.0) -> str:
    """A short sentence when the current value (``trend.value_at_end``) is more than ``alert_pct`` %
    away from ``reference`` and that change is beyond ``sigmas`` standard errors (a change the fits
    cannot resolve is not reported); else ''."""
    v, se = trend.value_at_end, trend.value_at_end_se
    if not (math.isfinite(v) and math.isfinite(reference) and reference != 0):
        return ""
    change = v - reference
    pct = 100.0 * change / reference
    if abs(pct) <= alert_pct or (math.isfinite(se) and abs(change) <= sigmas * se):
        return ""
    return f"{name} {reference:.6g} -> {v:.6g} ({pct:+.2f} %, +- {100.0 * se / abs(reference):.2f} %)"
