"""The fleet's tables: bags.csv rows in order, robots.csv rows with trends and alerts, and their fixed columns."""
from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass, field
from typing import Any, Sequence

from ..analysis.calibration import GEOMETRY_NAMES
from ..analysis.trend import Trend, drift_alert, weighted_trend
from .task import GEOMETRY_COLUMNS, BagResult

__all__ = ["BAG_COLUMNS", "METRIC_COLUMNS", "ROBOT_COLUMNS", "RobotSummary", "order_results", "bag_columns",
           "robot_summaries", "csv_text"]

# the metrics `compare` reports (wheel_dr.analysis.metrics.evaluate, Evaluation.summary_row), under its names;
# its distance_m and duration_s are the bag's own columns, slip_flag_frac has its own place
METRIC_COLUMNS = (
    "n_samples", "ate_anchored_rmse_m", "ate_aligned_rmse_m", "ate_aligned_yaw_rmse_deg", "align_yaw_deg",
    "rpe_trans_pct", "rpe_rot_degpm", "rpe_segments", "endpoint_error_m", "drift_endpoint_pct", "nees_segments",
    "nees_mean", "nees_mean_lo", "nees_mean_hi", "nees_frac_inside_95", "nees_consistent", "nees_dropped",
    "nees_segment_m", "slip_truth", "slip_precision", "slip_recall", "slip_coverage_after_grace",
    "slip_false_flag_frac", "slip_latency_mean_s", "slip_latency_max_s", "slip_events", "slip_events_detected",
    "slip_heading_error_mean_deg", "slip_heading_error_max_deg", "slip_side_correct_frac",
    "rpe_trans_pct_1m", "rpe_rot_degpm_1m", "rpe_segments_1m", "rpe_trans_pct_2m", "rpe_rot_degpm_2m",
    "rpe_segments_2m", "rpe_trans_pct_5m", "rpe_rot_degpm_5m", "rpe_segments_5m", "rpe_trans_pct_10m",
    "rpe_rot_degpm_10m", "rpe_segments_10m")
HEAD_COLUMNS = ("robot", "bag", "start", "duration_s", "distance_m")
TAIL_COLUMNS = (("slip_flag_frac",) + GEOMETRY_COLUMNS + tuple(f"{c}_se" for c in GEOMETRY_COLUMNS)
                + ("fit_note", "error"))
BAG_COLUMNS = HEAD_COLUMNS + METRIC_COLUMNS + TAIL_COLUMNS

ROBOT_COLUMNS = (("robot", "bags", "fitted_bags", "first_start", "last_start", "distance_m")
                 + tuple(x for c in GEOMETRY_COLUMNS for x in (c, f"{c}_se", f"{c}_trend_per_1000km",
                                                               f"{c}_trend_per_1000km_se", f"params_{c[4:]}"))
                 + ("alert",))


def order_results(results: Sequence[BagResult]) -> list[BagResult]:
    """Robots by name, each robot's bags by start time (unreadable ones last), then by path."""
    return sorted(results, key=lambda r: (r.row["robot"], r.start_ns is None, r.start_ns or 0, r.row["bag"]))


def bag_columns(results: Sequence[BagResult]) -> list[str]:
    """BAG_COLUMNS, with any further metric a newer ``evaluate`` reports placed after the known ones."""
    extra: list[str] = []
    for r in results:
        for k in r.row:
            if k not in BAG_COLUMNS and k not in extra:
                extra.append(k)
    n = len(HEAD_COLUMNS) + len(METRIC_COLUMNS)
    return list(BAG_COLUMNS[:n]) + extra + list(BAG_COLUMNS[n:])


@dataclass
class RobotSummary:
    """One robots.csv row plus what the page plots: per fitted bag its cumulative distance (m, at the
    bag's middle), start, values and standard errors, and the trend of each geometry value."""

    row: dict[str, Any]
    distance_m: list[float] = field(default_factory=list)
    start: list[str] = field(default_factory=list)
    values: dict[str, list[float]] = field(default_factory=dict)
    std_errors: dict[str, list[float]] = field(default_factory=dict)
    trends: dict[str, Trend] = field(default_factory=dict)
    reference: dict[str, float] = field(default_factory=dict)


def _f(v: Any) -> float:
    try:
        return float(v)
    except (TypeError, ValueError):
        return math.nan


def robot_summaries(ordered: Sequence[BagResult], alert_pct: float) -> list[RobotSummary]:
    """Per robot (``ordered`` as from ``order_results``): totals, the latest fit, a weighted trend of
    every geometry value against cumulative distance and the alert against the geometry the bags
    were replayed with (the robot's parameters file, else its URDF)."""
    out: list[RobotSummary] = []
    robots: list[str] = []
    for r in ordered:
        if r.row["robot"] not in robots:
            robots.append(r.row["robot"])
    for robot in robots:
        mine = [r for r in ordered if r.row["robot"] == robot]
        good = [r for r in mine if not r.row.get("error")]
        s = RobotSummary({"robot": robot, "bags": len(mine)})
        cum = 0.0
        fitted = []
        for r in good:
            d = _f(r.row.get("distance_m"))
            d = d if math.isfinite(d) else 0.0
            if math.isfinite(_f(r.row.get(GEOMETRY_COLUMNS[0]))):
                fitted.append((cum + 0.5 * d, r))
            cum += d
        s.row["fitted_bags"] = len(fitted)
        s.row["first_start"] = good[0].row["start"] if good else ""
        s.row["last_start"] = good[-1].row["start"] if good else ""
        s.row["distance_m"] = cum
        s.distance_m = [d for d, _ in fitted]
        s.start = [r.row["start"] for _, r in fitted]
        ref_src = good[-1].geometry_used if good and good[-1].geometry_used else []
        alerts = []
        for k, c in enumerate(GEOMETRY_COLUMNS):
            vals = [_f(r.row.get(c)) for _, r in fitted]
            ses = [_f(r.row.get(f"{c}_se")) for _, r in fitted]
            s.values[c], s.std_errors[c] = vals, ses
            tr = weighted_trend(s.distance_m, vals, ses)
            s.trends[c] = tr
            s.row[c] = vals[-1] if vals else math.nan
            s.row[f"{c}_se"] = ses[-1] if ses else math.nan
            s.row[f"{c}_trend_per_1000km"] = tr.slope_per_1000km
            s.row[f"{c}_trend_per_1000km_se"] = tr.slope_se_per_1000km
            ref = ref_src[k] if k < len(ref_src) else math.nan
            s.reference[c] = ref
            s.row[f"params_{c[4:]}"] = ref
            a = drift_alert(c[4:], ref, tr, alert_pct)
            if a:
                alerts.append(a)
        if alerts:
            suggested = ", ".join(f"{n}: {_rounded(n, s.trends[c].value_at_end)}"
                                  for n, c in zip(GEOMETRY_NAMES, GEOMETRY_COLUMNS)
                                  if math.isfinite(s.trends[c].value_at_end))
            s.row["alert"] = f"moved beyond {alert_pct:g} %: {'; '.join(alerts)}; suggested {suggested}"
        else:
            s.row["alert"] = ""
        out.append(s)
    return out


def _rounded(name: str, v: float) -> str:
    return f"{v:.7f}" if name.endswith("radius") else f"{v:.6f}"


def _cell(v: Any) -> Any:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return ""
    if isinstance(v, bool):
        return int(v)
    if isinstance(v, float):
        return repr(v)
    return v


def csv_text(rows: Sequence[dict[str, Any]], columns: Sequence[str]) -> str:
    """CSV with a header of ``columns``; a missing or NaN value is an empty cell, floats in full precision."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(columns)
    for r in rows:
        w.writerow([_cell(r.get(c)) for c in columns])
    return buf.getvalue()
