"""Report figures (matplotlib, Agg canvas, no pyplot state): paths with ellipses, error, NEES, slip, RPE."""
from __future__ import annotations

import io
import math
from typing import Sequence

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.collections import LineCollection
from matplotlib.figure import Figure

from ..analysis.consistency import chi2_bounds
from ..analysis.metrics import Evaluation

__all__ = ["PALETTE", "TRUTH_COLOUR", "new_figure", "figure_png", "trajectory_figure", "error_figure",
           "nees_figure", "slip_figure", "rpe_figure", "colour_of"]

# wheel_dr's own palette: earthy, high-contrast on a warm paper background
PALETTE = ("#c8553d", "#2a7f62", "#3d5a80", "#e09f3e", "#8e5572", "#1f9bb0", "#6b705c", "#b5179e")
TRUTH_COLOUR = "#23272a"
PAPER = "#fbfaf6"
GRID = "#d9d4c7"
ELLIPSE_PROB_2D = 0.95
_ELLIPSE_SCALE = math.sqrt(-2.0 * math.log(1.0 - ELLIPSE_PROB_2D))  # chi2(2) quantile, closed form


def colour_of(k: int) -> str:
    """Colour of the k-th settings entry."""
    return PALETTE[k % len(PALETTE)]


def new_figure(width_in: float = 7.2, height_in: float = 4.2) -> Figure:
    """A Figure on its own Agg canvas (does not touch pyplot's global state or backend)."""
    fig = Figure(figsize=(width_in, height_in), dpi=110, facecolor=PAPER, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _style(ax) -> None:
    ax.set_facecolor(PAPER)
    ax.grid(True, color=GRID, linewidth=0.6)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.tick_params(labelsize=8)


def figure_png(fig: Figure) -> bytes:
    """PNG bytes of a figure."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", facecolor=fig.get_facecolor())  # layout is constrained: one draw
    return buf.getvalue()


def _ellipse_lines(x: np.ndarray, y: np.ndarray, cxx: np.ndarray, cxy: np.ndarray, cyy: np.ndarray,
                   points: int = 40) -> np.ndarray:
    """(E, points, 2) outlines of the 95 % position ellipses (x, y covariance blocks)."""
    cov = np.stack([np.stack([cxx, cxy], -1), np.stack([cxy, cyy], -1)], -2)
    w, v = np.linalg.eigh(cov)
    w = np.clip(w, 0.0, None)
    a = np.linspace(0.0, 2.0 * math.pi, points)
    circle = np.stack([np.cos(a), np.sin(a)], -1)                          # (P, 2)
    axes = v * (np.sqrt(w) * _ELLIPSE_SCALE)[:, None, :]                   # columns scaled
    return np.stack([x, y], -1)[:, None, :] + np.einsum("eij,pj->epi", axes, circle)


def trajectory_figure(evals: Sequence[Evaluation], colours: Sequence[str], ellipse_every: int | None = None) -> Figure:
    """Truth and each anchored estimate in the truth frame, with 95 % position ellipses of the
    estimator's own covariance at every ``ellipse_every``-th plotted point (about 12 by default)."""
    fig = new_figure(7.2, 6.0)
    ax = fig.add_subplot(1, 1, 1)
    _style(ax)
    if evals:
        s0 = evals[0].series
        ax.plot(s0["truth_x_m"], s0["truth_y_m"], color=TRUTH_COLOUR, lw=2.2, label="ground truth", zorder=5)
        ax.plot(s0["truth_x_m"][:1], s0["truth_y_m"][:1], "o", color=TRUTH_COLOUR, ms=6, zorder=6)
    for ev, col in zip(evals, colours):
        s = ev.series
        ax.plot(s["est_x_m"], s["est_y_m"], color=col, lw=1.4, label=ev.name or "estimate", zorder=4)
        n = len(s["est_x_m"])
        every = ellipse_every or max(1, n // 10)
        sel = np.arange(every, n, every)
        if len(sel):
            lines = _ellipse_lines(s["est_x_m"][sel], s["est_y_m"][sel], s["cov_xx"][sel], s["cov_xy"][sel],
                                   s["cov_yy"][sel])
            ax.add_collection(LineCollection(lines, colors=col, linewidths=0.6, alpha=0.5, zorder=3))
    # frame the paths, not the ellipses (far-grown ellipses are clipped at the edge)
    xs = [np.asarray(evals[0].series["truth_x_m"])] if evals else []
    ys = [np.asarray(evals[0].series["truth_y_m"])] if evals else []
    xs += [np.asarray(ev.series["est_x_m"]) for ev in evals]
    ys += [np.asarray(ev.series["est_y_m"]) for ev in evals]
    if xs:
        x_all, y_all = np.concatenate(xs), np.concatenate(ys)
        ok = np.isfinite(x_all) & np.isfinite(y_all)
        if ok.any():
            x0, x1 = float(x_all[ok].min()), float(x_all[ok].max())
            y0, y1 = float(y_all[ok].min()), float(y_all[ok].max())
            pad = 0.08 * max(x1 - x0, y1 - y0, 0.5)
            ax.set_xlim(x0 - pad, x1 + pad)
            ax.set_ylim(y0 - pad, y1 + pad)
    ax.set_aspect("equal", adjustable="box")
    ax.set_xlabel("x [m] (truth frame, estimates anchored at the first pose)", fontsize=8)
    ax.set_ylabel("y [m]", fontsize=8)
    ax.set_title(f"Paths over ground truth, {int(ELLIPSE_PROB_2D * 100)} % position ellipses", fontsize=10)
    ax.legend(fontsize=8, frameon=True, facecolor=PAPER, edgecolor=GRID, loc="best")
    return fig


def error_figure(evals: Sequence[Evaluation], colours: Sequence[str]) -> Figure:
    """Anchored position error against true distance travelled, with the estimator's own 2-sigma
    radius (sqrt of the covariance trace, times 2) dashed."""
    fig = new_figure()
    ax = fig.add_subplot(1, 1, 1)
    _style(ax)
    for ev, col in zip(evals, colours):
        s = ev.series
        ax.plot(s["dist_m"], s["err_anchored_m"], color=col, lw=1.4, label=ev.name or "estimate")
        ax.plot(s["dist_m"], 2.0 * np.sqrt(np.clip(s["cov_xx"] + s["cov_yy"], 0, None)), color=col, lw=0.9,
                ls="--", alpha=0.8)
    ax.set_xlabel("distance travelled [m]", fontsize=8)
    ax.set_ylabel("position error [m]", fontsize=8)
    ax.set_title("Position error (solid) and the estimator's 2-sigma radius (dashed)", fontsize=10)
    ax.legend(fontsize=8, frameon=False)
    return fig


def nees_figure(evals: Sequence[Evaluation], colours: Sequence[str]) -> Figure:
    """Segment NEES against distance on a log axis, the chi-square(3) 95 % band per segment shaded,
    segments the estimator flagged as slipping as open markers, and each settings' mean NEES with its
    95 % interval at the right edge."""
    fig = new_figure()
    ax = fig.add_subplot(1, 1, 1)
    _style(ax)
    lo, hi = chi2_bounds(3, 0.95)
    ax.axhspan(lo, hi, color="#e7e1cf", zorder=0, label=f"chi2(3) 95 %: [{lo:.3g}, {hi:.3g}]")
    ax.axhline(3.0, color="#9a9484", lw=0.8, ls=":", zorder=1)
    xmax = 1.0
    for ev, col in zip(evals, colours):
        v = np.asarray(ev.nees_segments)
        d = np.asarray(ev.series.get("nees_dist_m", np.zeros(0)))
        flagged = np.asarray(ev.series.get("nees_flagged", np.zeros(len(v), dtype=bool)), dtype=bool)
        if len(flagged) != len(v):
            flagged = np.zeros(len(v), dtype=bool)
        if len(v):
            med = ev.metrics.get("nees_median", float("nan"))
            ax.plot(d[~flagged], np.clip(v[~flagged], 1e-3, None), "o", ms=3, color=col, alpha=0.75,
                    label=f"{ev.name or 'estimate'}: mean {ev.metrics['nees_mean']:.3g}, median {med:.3g}")
            if flagged.any():
                ax.plot(d[flagged], np.clip(v[flagged], 1e-3, None), "o", ms=4.5, mfc="none", mew=0.9, color=col,
                        alpha=0.9)
            xmax = max(xmax, float(np.max(d)))
    if any(np.any(np.asarray(ev.series.get("nees_flagged", []), dtype=bool)) for ev in evals):
        ax.plot([], [], "o", ms=4.5, mfc="none", mew=0.9, color="#6b705c",
                label="open marker: segment the estimator flagged as slipping")
    for k, (ev, col) in enumerate(zip(evals, colours)):
        mm, mlo, mhi = ev.metrics.get("nees_mean"), ev.metrics.get("nees_mean_lo"), ev.metrics.get("nees_mean_hi")
        if mm is not None and np.isfinite(mm):
            xk = xmax * (1.03 + 0.025 * k)
            ax.plot([xk, xk], [mlo, mhi], color=col, lw=3, alpha=0.45, solid_capstyle="butt")
            ax.plot([xk], [max(mm, 1e-3)], "D", color=col, ms=6)
    ax.set_yscale("log")
    ax.set_xlabel("distance travelled at segment end [m]", fontsize=8)
    ax.set_ylabel("NEES (3 dof)", fontsize=8)
    ax.set_title("Consistency: NEES per segment (covariance restarted), means with 95 % intervals at right",
                 fontsize=9)
    ax.legend(fontsize=7, frameon=False, loc="upper left")
    return fig


def _slip_rows(ax, evals: Sequence[Evaluation], colours: Sequence[str], span: tuple[float, float],
               with_labels: bool) -> None:
    rows = len(evals) + 1
    top = rows - 1
    truth = np.asarray(evals[0].series.get("slip_truth_s", np.zeros((0, 2)))).reshape(-1, 2) if evals else np.zeros((0, 2))
    min_w = 0.002 * float(span[1] - span[0] or 1.0)     # a single flagged sample still shows
    for s, e in truth:
        ax.axvspan(s, e, color="#f0d9a8", alpha=0.6, zorder=0)
    ax.broken_barh([(s, max(e - s, min_w)) for s, e in truth], (top - 0.35, 0.7), facecolors=TRUTH_COLOUR)
    labels = ["true slip"]
    for k, (ev, col) in enumerate(zip(evals, colours)):
        iv = np.asarray(ev.series.get("flag_intervals_s", np.zeros((0, 2)))).reshape(-1, 2)
        ax.broken_barh([(s, max(e - s, min_w)) for s, e in iv], (top - 1 - k - 0.35, 0.7), facecolors=col)
        labels.append(ev.name or "estimate")
    ax.set_yticks(range(top, -1, -1))
    ax.set_yticklabels(labels if with_labels else [""] * len(labels), fontsize=8)
    ax.set_ylim(-0.7, top + 0.7)
    ax.set_xlim(float(span[0]), float(span[1]))


def slip_figure(evals: Sequence[Evaluation], colours: Sequence[str], zoom_events: int = 4) -> Figure:
    """Slip timeline: true slip intervals on the top row and shaded through, each settings' flags
    below; under it, up to ``zoom_events`` events enlarged (1 s before to 2 s after) to read latency."""
    rows = len(evals) + 1
    span = tuple(evals[0].series.get("span_s", np.array([0.0, 1.0]))) if evals else (0.0, 1.0)
    truth = np.asarray(evals[0].series.get("slip_truth_s", np.zeros((0, 2)))).reshape(-1, 2) if evals else np.zeros((0, 2))
    zooms = truth[:zoom_events]
    height = 0.45 * rows + 1.0
    fig = new_figure(7.2, height * (2.0 if len(zooms) else 1.0))
    grid = fig.add_gridspec(2 if len(zooms) else 1, max(1, len(zooms)))
    ax = fig.add_subplot(grid[0, :])
    _style(ax)
    ax.grid(False)
    _slip_rows(ax, evals, colours, span, True)
    ax.set_xlabel("time since the first sample [s]", fontsize=8)
    title = "Slip timeline: flags against true slip intervals (shaded)"
    if len(truth) > len(zooms):
        title += f"; first {len(zooms)} of {len(truth)} events enlarged"
    ax.set_title(title, fontsize=10)
    for k, (s, e) in enumerate(zooms):
        zx = fig.add_subplot(grid[1, k])
        _style(zx)
        zx.grid(False)
        _slip_rows(zx, evals, colours, (s - 1.0, e + 2.0), k == 0)
        zx.set_xlabel(f"event {k + 1} [s]", fontsize=8)
    return fig


def rpe_figure(evals: Sequence[Evaluation], colours: Sequence[str]) -> Figure:
    """RPE translation (%) per segment length, one bar group per length."""
    fig = new_figure(7.2, 3.6)
    ax = fig.add_subplot(1, 1, 1)
    _style(ax)
    lengths = sorted({length for ev in evals for length in ev.rpe_by_length})
    width = 0.8 / max(1, len(evals))
    for k, (ev, col) in enumerate(zip(evals, colours)):
        vals = [ev.rpe_by_length.get(length, (np.nan, np.nan, 0))[0] for length in lengths]
        ax.bar(np.arange(len(lengths)) + (k - (len(evals) - 1) / 2) * width, vals, width * 0.92, color=col,
               label=ev.name or "estimate")
    ax.set_xticks(range(len(lengths)))
    ax.set_xticklabels([f"{length:g} m" for length in lengths], fontsize=8)
    ax.set_ylabel("RPE translation [%]", fontsize=8)
    ax.set_title("Relative translation error per segment length", fontsize=10)
    ax.legend(fontsize=8, frameon=False)
    return fig
