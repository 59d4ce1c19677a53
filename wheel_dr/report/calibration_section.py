"""The calibration section of a report page: fitted values, notes, before/after tables and figures.

Built from a ``wheel_dr.analysis.calibration.CalibrationResult`` with the page's own table and
figure helpers (``wheel_dr.report.style``) and palette (``wheel_dr.report.plots``), so it reads
like the rest of the page. Returned as (title, HTML fragment, [(figure, caption), ...]) for
``write_report(extra_sections=...)``.
"""
from __future__ import annotations

import html
import math
from typing import Sequence

import numpy as np
from matplotlib.figure import Figure
from matplotlib.ticker import NullFormatter

from ..analysis.calibration import (GEOMETRY_NAMES, CalibrationResult, CalibrationRun, RunFigures, _relative,
                                    geometry_of, make_segments, segment_errors)
from .plots import PALETTE, _style, new_figure
from .style import table_html

__all__ = ["calibration_section", "BEFORE_COLOUR", "AFTER_COLOUR"]

BEFORE_COLOUR = PALETTE[0]
AFTER_COLOUR = PALETTE[1]


def _f(v: float, spec: str) -> str:
    return "-" if v is None or (isinstance(v, float) and not math.isfinite(v)) else format(v, spec)


def _values_table(res: CalibrationResult) -> str:
    before = res.before.to_flat()
    rows: list[list[str]] = []
    if res.systematic is not None:
        for name, value, se in zip(GEOMETRY_NAMES, res.systematic.geometry, res.systematic.std_error):
            old = float(before[name])
            rows.append([name, _f(old, ".6f"), _f(float(value), ".6f"), _f(float(se), ".6f"),
                         f"{100 * (value / old - 1):+.3f} %", "m"])
    if res.noise is not None:
        nf = res.noise
        olds = ([before["noise.k_left"], before["noise.k_right"]] if nf.model == "per_wheel"
                else list(before["noise.alphas"]))
        unit = "m" if nf.model == "per_wheel" else "-"
        for name, old, value, se in zip(nf.names, olds, nf.theta, nf.std_error):
            rel = f"{100 * se / value:.0f} % of the value" if value > 0 and math.isfinite(se) else "-"
            rows.append([name, _f(float(old), ".4g"), _f(float(value), ".4g"), _f(float(se), ".2g"), rel, unit])
        how = "fitted" if nf.truth_fitted else "given"
        rows.append(["truth noise, position (" + how + ")", "-", _f(1000 * float(nf.truth_sd[0]), ".3g"),
                     _f(1000 * float(nf.truth_sd_se[0]), ".2g"), "not written to the file", "mm"])
        rows.append(["truth noise, heading (" + how + ")", "-", _f(math.degrees(float(nf.truth_sd[1])), ".3g"),
                     _f(math.degrees(float(nf.truth_sd_se[1])), ".2g"), "not written to the file", "deg"])
    return table_html(["parameter", "before", "after", "standard error", "change / note", "unit"], rows,
                      "Fitted values. Standard errors come from each fit's joint covariance, so correlation "
                      "between parameters is in them; pairs that cannot be told apart are named below.",
                      text_columns=(0, 4, 5))


def _figures_table(before: Sequence[RunFigures], after: Sequence[RunFigures], caption: str) -> str:
    rows = []
    for b, a in zip(before, after):
        rows.append([b.name, _f(b.ate_m, ".3f"), _f(a.ate_m, ".3f"), _f(b.drift_pct, ".2f"), _f(a.drift_pct, ".2f"),
                     _f(b.nees_mean, ".2f"), _f(a.nees_mean, ".2f"),
                     f"[{_f(a.nees_lo, '.2f')}, {_f(a.nees_hi, '.2f')}]", "inside" if a.nees_inside else "outside",
                     str(a.n_segments)])
    return table_html(["recording", "before", "after", "before", "after", "before", "after", "95 % interval",
                       "after is", "segments"], rows, caption, text_columns=(0, 8),
                      groups=[("", 1), ("ATE aligned, m", 2), ("drift, %", 2), ("NEES mean", 4), ("", 1)])


def _segment_figure(res: CalibrationResult, runs: Sequence[CalibrationRun]) -> Figure:
    fig = new_figure(10.0, 4.0)
    ax1, ax2 = fig.subplots(1, 2)
    for ax in (ax1, ax2):
        _style(ax)
    scheme = res.before.integration
    for label, settings, colour in (("before", res.before, BEFORE_COLOUR), ("after", res.after, AFTER_COLOUR)):
        turn, eyaw, fwd, ex = [], [], [], []
        for run in runs:
            seg = make_segments(run, res.segment_length_m)
            if len(seg) == 0:
                continue
            err = segment_errors(run, seg, geometry_of(settings), scheme, res.mount)
            tru = _relative(run.truth_x_m, run.truth_y_m, run.truth_yaw_rad, seg.start, seg.end)
            turn.append(tru[:, 2])
            eyaw.append(err[:, 2])
            fwd.append(tru[:, 0])
            ex.append(err[:, 0])
        if turn:
            ax1.plot(np.degrees(np.concatenate(turn)), np.degrees(np.concatenate(eyaw)), "o", ms=2.5, alpha=0.7,
                     color=colour, label=f"{label} calibration")
            ax2.plot(np.concatenate(fwd), 100 * np.concatenate(ex), "o", ms=2.5, alpha=0.7, color=colour,
                     label=f"{label} calibration")
    ax1.set_xlabel("turn over the segment, deg (truth)", fontsize=8)
    ax1.set_ylabel("heading error, deg", fontsize=8)
    ax1.set_title("Heading error per segment against its turn", fontsize=9)
    ax2.set_xlabel("forward motion over the segment, m (truth)", fontsize=8)
    ax2.set_ylabel("forward error, cm", fontsize=8)
    ax2.set_title("Forward error per segment against its forward motion", fontsize=9)
    for ax in (ax1, ax2):
        ax.legend(fontsize=7, frameon=False)
    return fig


def _nees_figure(res: CalibrationResult) -> Figure:
    """Mean segment NEES before and after, per recording, against the 95 % interval of the mean."""
    fig = new_figure(7.2, 3.4)
    ax = fig.add_subplot(1, 1, 1)
    _style(ax)
    items = ([("fitted", b, a) for b, a in zip(res.figures_before, res.figures_after)]
             + [("held out", b, a) for b, a in zip(res.holdout_before, res.holdout_after)])
    for k, (kind, b, a) in enumerate(items):
        ax.plot([k + 0.12, k + 0.12], [a.nees_lo, a.nees_hi], color="#b9b2a0", lw=8, solid_capstyle="butt", zorder=1)
        ax.plot([k - 0.12], [max(b.nees_mean, 1e-3)], "o", color=BEFORE_COLOUR, ms=6, zorder=2,
                label="before calibration" if k == 0 else None)
        ax.plot([k + 0.12], [max(a.nees_mean, 1e-3)], "D", color=AFTER_COLOUR, ms=6, zorder=2,
                label="after calibration" if k == 0 else None)
    ax.axhline(3.0, color="#9a9484", lw=0.8, ls=":")
    ax.set_xticks(range(len(items)))
    ax.set_xticklabels([f"{b.name}\n({kind})" for kind, b, _ in items], fontsize=7)
    ax.set_yscale("log")
    lo, hi = ax.get_ylim()
    ticks = [m * 10.0 ** e for e in range(-4, 7) for m in (1.0, 3.0) if lo <= m * 10.0 ** e <= hi]
    ax.set_yticks(ticks, [f"{v:g}" for v in ticks])
    ax.yaxis.set_minor_formatter(NullFormatter())
    ax.set_ylabel("mean NEES of the segments", fontsize=8)
    ax.set_xlim(-0.6, len(items) - 0.4)
    ax.legend(fontsize=7, frameon=False)
    return fig


def calibration_section(res: CalibrationResult, runs: Sequence[CalibrationRun], bag_names: Sequence[str],
                        holdout: Sequence[CalibrationRun] = ()) -> tuple[str, str, list]:
    """(title, HTML fragment, [(figure, caption)]) of a calibration for the report page."""
    esc = html.escape
    e = res.excitation
    seg_m = res.segment_length_m
    intro = (f"<p>Calibrated on {len(bag_names)} recording(s) ({esc(', '.join(bag_names))}): radii and track by "
             f"least squares on the relative motion of {res.n_segments} segments of {seg_m:g} m against ground "
             "truth, each segment whitened by its propagated covariance; the noise by maximum likelihood of the "
             "errors of shorter segments under the covariance the estimator propagates, with the truth's own noise "
             f"as a further term. The drive: {e.travel_m:.0f} m of wheel travel, {e.straight_m:.0f} m straight, "
             f"turns of {math.degrees(e.left_turn_rad):.0f} deg left and {math.degrees(e.right_turn_rad):.0f} deg "
             "right.</p>")
    notes = list(res.notes) + [f"{p}; {a}." for p, a in zip(e.problems, e.advice)]
    notes_html = ("<ul class=\"notes\">" + "".join(f"<li>{esc(n)}</li>" for n in notes) + "</ul>") if notes else ""
    frag = intro + _values_table(res) + notes_html
    frag += _figures_table(res.figures_before, res.figures_after,
                           f"Recordings the fit used: ATE after the best rotation and translation, drift over "
                           f"{seg_m:g} m segments, and the mean segment NEES with its chi-square 95 % interval.")
    if res.holdout_after:
        frag += _figures_table(res.holdout_before, res.holdout_after,
                               "Held-out recordings (not used in the fit): the honest check of the tuned values.")
    figures = [
        (_segment_figure(res, list(runs) + list(holdout)),
         f"Error of each {seg_m:g} m segment before (red) and after (green) calibration, on every recording. Left: "
         "heading error against the segment's turn; a slope is a track width error. Right: forward error against "
         "the segment's forward motion; a slope is a mean radius error. After calibration both clouds should lie "
         "flat around zero."),
        (_nees_figure(res),
         "Mean segment NEES per recording before (red circles) and after (green diamonds) calibration; the grey "
         "bar is the chi-square 95 % interval of the mean for that many segments (log scale). After calibration "
         "the diamond should sit inside its bar, fitted and held-out alike."),
    ]
    return "Calibration", frag, figures
