"""The online self-calibration section of a report page: the estimates over time with their bands and the
alert intervals, and a table of the last estimate and the suggested geometry.

Built from a ``wheel_dr.core.online_calibration.OnlineCalibrationResult`` with the page's own figure
and table helpers; returned as (title, HTML fragment, [(figure, caption)]) for
``write_report(extra_sections=...)``.
"""
from __future__ import annotations

import html
from typing import Sequence

import numpy as np
from matplotlib.figure import Figure

from ..core.online_calibration import OnlineCalibrationResult
from .plots import PALETTE, _style, new_figure
from .style import table_html

__all__ = ["online_section", "online_figure", "alert_intervals"]

BAND_SE = 2.0     # the bands are +- this many standard errors (about 95 %)


def alert_intervals(res: OnlineCalibrationResult) -> list[tuple[float, float]]:
    """[start, end] times (s since the first interval) over which the alert held."""
    if not len(res):
        return []
    t = res.t_s - res.t_s[0]
    a = np.asarray(res.alert, dtype=bool)
    edges = np.flatnonzero(np.diff(np.concatenate(([False], a, [False])).astype(np.int8)))
    return [(float(t[s]), float(t[min(e, len(t)) - 1])) for s, e in zip(edges[0::2], edges[1::2])]


def online_figure(res: OnlineCalibrationResult, truth_ratio: np.ndarray | None = None,
                  truth_track: np.ndarray | None = None) -> Figure:
    """Radius ratio and track over mean radius against time, bands of BAND_SE standard errors, the
    configured values dashed, the truth (if given, per interval) dotted, alert intervals shaded."""
    fig = new_figure(10.0, 5.2)
    ax1, ax2 = fig.subplots(2, 1, sharex=True)
    t_min = (res.t_s - res.t_s[0]) / 60.0 if len(res) else np.zeros(0)
    spans = alert_intervals(res)
    for ax, est, se, ref, truth, label in (
            (ax1, res.radius_ratio, res.radius_ratio_se, res.configured_ratio, truth_ratio, "radius ratio R_r / R_l"),
            (ax2, res.track_over_radius, res.track_over_radius_se, res.configured_track_over_radius, truth_track,
             "track / mean radius")):
        _style(ax)
        for a, b in spans:
            ax.axvspan(a / 60.0, b / 60.0, color=PALETTE[3], alpha=0.18, lw=0)
        ax.fill_between(t_min, est - BAND_SE * se, est + BAND_SE * se, color=PALETTE[2], alpha=0.25, lw=0)
        ax.plot(t_min, est, color=PALETTE[2], lw=1.4, label="estimate")
        ax.axhline(ref, color=PALETTE[6], lw=1.0, ls="--", label="configured")
        if truth is not None:
            ax.plot(t_min, truth, color=PALETTE[0], lw=1.0, ls=":", label="truth (simulation)")
        ax.set_ylabel(label)
        if len(est) > 20:                          # keep the prior's start from flattening the plot
            lo = float(np.min((est - BAND_SE * se)[len(est) // 20:]))
            hi = float(np.max((est + BAND_SE * se)[len(est) // 20:]))
            lo, hi = min(lo, ref), max(hi, ref)
            pad = 0.1 * (hi - lo) or 1e-3 * abs(ref)
            ax.set_ylim(lo - pad, hi + pad)
    ax2.set_xlabel("time, min")
    ax1.legend(loc="best", fontsize=8, frameon=False)
    return fig


def online_section(res: OnlineCalibrationResult, notes: Sequence[str] = (), truth_ratio: np.ndarray | None = None,
                   truth_track: np.ndarray | None = None, title: str = "Online self-calibration"
                   ) -> tuple[str, str, list]:
    """A report section for ``write_report(extra_sections=...)``."""
    rows = []
    if len(res):
        left, right, track = res.suggested()
        rows.append(["radius ratio R_r / R_l", f"{res.configured_ratio:.5f}", f"{res.radius_ratio[-1]:.5f}",
                     f"{res.radius_ratio_se[-1]:.5f}", f"{100 * (res.radius_ratio[-1] / res.configured_ratio - 1):+.2f} %",
                     "alert" if res.alert_ratio[-1] else ("ok" if res.excited_ratio[-1] else "too little excitation")])
        rows.append(["track / mean radius", f"{res.configured_track_over_radius:.4f}",
                     f"{res.track_over_radius[-1]:.4f}", f"{res.track_over_radius_se[-1]:.4f}",
                     f"{100 * (res.track_over_radius[-1] / res.configured_track_over_radius - 1):+.2f} %",
                     "alert" if res.alert_track[-1] else ("ok" if res.excited_track[-1] else "too little excitation")])
        rows.append(["gyro z bias, rad/s", "-", f"{res.gyro_bias_radps[-1]:.5f}", f"{res.gyro_bias_se_radps[-1]:.5f}",
                     "-", "-"])
        suggested = (f"Suggested geometry (configured mean radius kept; the gyro cannot observe the scale): left "
                     f"radius {left:.6f} m, right radius {right:.6f} m, track {track:.6f} m.")
    else:
        suggested = "No interval closed: no estimate."
    table = table_html(["quantity", "configured", "last estimate", "standard error", "departure", "status"], rows,
                       "Last estimate of the online self-calibration.", text_columns=(0, 5))
    spans = alert_intervals(res)
    alert_text = ("; ".join(f"{a / 60:.1f} to {b / 60:.1f} min" for a, b in spans) if spans else "never")
    parts = [f"<p>{html.escape(n)}</p>" for n in notes]
    parts.append(f"<p>{html.escape(suggested)} Alert held: {html.escape(alert_text)}. Merged intervals "
                 f"used {res.intervals_used}, skipped {res.intervals_skipped} (slip flags or the residual gate).</p>")
    parts.append(table)
    caption = (f"Online estimates against time with bands of {BAND_SE:g} standard errors; dashed: the configured "
               "geometry; shaded: the alert held.")
    return title, "".join(parts), [(online_figure(res, truth_ratio, truth_track), caption)]
