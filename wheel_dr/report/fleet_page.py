"""The fleet's self-contained HTML page: fleet table, alerts, geometry trends per robot, where wheels slip."""
from __future__ import annotations

import datetime as _dt
import html
import math
from typing import Any, Sequence

import numpy as np

from .page import _CSS, CAUTION_TEXT, _figure_html
from .plots import GRID, TRUTH_COLOUR, _style, colour_of, new_figure

__all__ = ["render_fleet_page"]

_FLEET_CSS = """
.alert { border-left:5px solid var(--accent); background:#fbe9e4; padding:6px 12px; margin:6px 0; font-size:14px; }
td.err { color:#9b2d1a; text-align:left; max-width:420px; }
td.txt { text-align:left; }
"""

_READING = [
    ("Fitted geometry", "Per recording with ground truth: wheel radii and track by least squares on "
     "segment-relative motion against the truth (as wheel-dr calibrate fits them), with standard errors. A "
     "drive that does not excite a value (too straight, turns one way only) is not fitted; the bag table says why."),
    ("Trend", "A straight line through each robot's fits against cumulative wheel distance, weighted by "
     "1/standard error squared; the shaded band is one standard error of the line. Tyre wear shows as a "
     "falling radius. The slope is given per 1000 km in robots.csv."),
    ("Alert", "The line's current value differs from the geometry the robot's parameters file (or its URDF) "
     "gives by more than the alert percentage, and by more than three standard errors. The suggested values "
     "are the line's current values; confirm them with a calibration drive before changing the file."),
    ("Slip map", "Where the slip monitor flagged samples, in the truth frame (the floor's own frame when the "
     "truth is a map localisation): clusters mark places where wheels slip (wet floor, a threshold, a ramp)."),
]


def _fmt(v: Any, spec: str) -> str:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return "-"
    return format(f, spec) if math.isfinite(f) else "-"


def _robot_figure(s, colour: str):
    from ..fleet.task import GEOMETRY_COLUMNS
    fig = new_figure(9.6, 3.0)
    axes = fig.subplots(1, len(GEOMETRY_COLUMNS))
    for ax, c in zip(np.atleast_1d(axes), GEOMETRY_COLUMNS):
        _style(ax)
        d_km = np.asarray(s.distance_m, dtype=float) / 1000.0
        v = np.asarray(s.values.get(c, []), dtype=float) * 1000.0
        se = np.asarray(s.std_errors.get(c, []), dtype=float) * 1000.0
        if len(d_km):
            ax.errorbar(d_km, v, yerr=se, fmt="o", ms=3.5, color=colour, ecolor=colour, elinewidth=0.8,
                        capsize=2, label="per-bag fit")
        tr = s.trends.get(c)
        if tr is not None and math.isfinite(tr.slope_per_m) and len(d_km) > 1:
            xs = np.linspace(0.0, max(float(d_km.max()), 1e-9), 50) * 1000.0
            line = tr.value_at(xs) * 1000.0
            band = tr.value_se_at(xs) * 1000.0
            ax.plot(xs / 1000.0, line, color=colour, lw=1.2, label="trend")
            ax.fill_between(xs / 1000.0, line - band, line + band, color=colour, alpha=0.15, lw=0)
        ref = s.reference.get(c, math.nan)
        if math.isfinite(ref):
            ax.axhline(ref * 1000.0, color=TRUTH_COLOUR, lw=0.9, ls="--", label="parameters file")
        ax.set_title(c[4:].replace("_", " ") + " (mm)", fontsize=9, loc="left")
        ax.set_xlabel("cumulative distance (km)", fontsize=8)
        if len(d_km):       # the bags' dates on top, at their distances (at most six labels)
            top = ax.twiny()
            top.set_xlim(ax.get_xlim())
            keep = np.unique(np.linspace(0, len(d_km) - 1, min(6, len(d_km))).round().astype(int))
            top.set_xticks(d_km[keep])
            top.set_xticklabels([str(s.start[i])[5:10] for i in keep], fontsize=7)
            top.tick_params(length=2, pad=1)
            for side in ("right",):
                top.spines[side].set_visible(False)
    np.atleast_1d(axes)[0].legend(fontsize=7, loc="best")
    return fig


def _slip_figure(results: Sequence[Any], robots: Sequence[str]):
    fig = new_figure(7.2, 5.0)
    ax = fig.subplots()
    _style(ax)
    for k, robot in enumerate(robots):
        col = colour_of(k)
        first = True
        for r in results:
            if r.row["robot"] != robot or not r.path_xy:
                continue
            p = np.asarray(r.path_xy, dtype=float)
            ax.plot(p[:, 0], p[:, 1], color=GRID, lw=0.7, zorder=1)
            if r.slip_xy:
                q = np.asarray(r.slip_xy, dtype=float)
                ax.plot(q[:, 0], q[:, 1], ".", ms=3, color=col, zorder=2, label=robot if first else None)
                first = False
    frames = sorted({r.frame for r in results if r.frame})
    ax.set_xlabel(f"x (m, frame {', '.join(frames) or '-'})", fontsize=8)
    ax.set_ylabel("y (m)", fontsize=8)
    ax.set_aspect("equal", adjustable="datalim")
    if ax.get_legend_handles_labels()[0]:
        ax.legend(fontsize=7, title="slip flagged", title_fontsize=7)
    return fig


def render_fleet_page(results: Sequence[Any], robots: Sequence[Any], meta: dict, *,
                      title: str = "wheel_dr fleet") -> str:
    """The page as a string (results and robots as ``wheel_dr.fleet.run`` orders them)."""
    esc = html.escape
    names = [s.row["robot"] for s in robots]
    stamp = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    parts = [f"<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
             f"<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
             f"<title>{esc(title)}</title><style>{_CSS}{_FLEET_CSS}</style></head><body>",
             f"<header><h1>{esc(title)}</h1><p class=\"meta\">generated {stamp} &middot; {len(results)} recording(s) "
             f"&middot; {len(robots)} robot(s) &middot; alert beyond {_fmt(meta.get('alert_pct'), 'g')} %</p></header>"]
    nav = ['<a href="#fleet">fleet</a>'] + [f'<a href="#robot-{i}">{esc(n)}</a>' for i, n in enumerate(names, 1)]
    nav += ['<a href="#slip">slip map</a>', '<a href="#bags">recordings</a>', '<a href="#reading">how to read</a>']
    parts.append(f"<nav>{''.join(nav)}</nav><main>")
    parts.append(f'<div class="caution"><strong>Caution.</strong> {esc(CAUTION_TEXT)} A wear alert is advice '
                 'for maintenance, not a safety function.</div>')
    for n in meta.get("page_notes", []):
        parts.append(f'<p class="note">{esc(n)}</p>')
    parts.append('<section id="fleet"><h2>Fleet</h2>')
    for s in robots:
        if s.row.get("alert"):
            parts.append(f'<div class="alert"><strong>{esc(s.row["robot"])}</strong>: {esc(s.row["alert"])}</div>')
    head = ("<tr><th class=\"name\">robot</th><th>bags</th><th>fitted</th><th>first</th><th>last</th><th>km</th>"
            "<th>left radius mm</th><th>right radius mm</th><th>track mm</th><th>left radius trend mm/1000 km</th>"
            "<th>right radius trend</th><th>track trend</th><th class=\"name\">alert</th></tr>")
    body = []
    for k, s in enumerate(robots):
        r = s.row
        sw = f'<span class="swatch" style="background:{colour_of(k)}"></span>'
        body.append(
            f"<tr><td class=\"name\">{sw}{esc(r['robot'])}</td><td>{r['bags']}</td><td>{r['fitted_bags']}</td>"
            f"<td>{esc(str(r['first_start'])[:16])}</td><td>{esc(str(r['last_start'])[:16])}</td>"
            f"<td>{_fmt(r['distance_m'] / 1000.0, '.3f')}</td>"
            + "".join(f"<td>{_fmt(r[c] * 1000.0, '.3f')} &plusmn; {_fmt(r[c + '_se'] * 1000.0, '.3f')}</td>"
                      for c in ("fit_left_radius", "fit_right_radius", "fit_track_width"))
            + "".join(f"<td>{_fmt(r[c + '_trend_per_1000km'] * 1000.0, '.2f')} &plusmn; "
                      f"{_fmt(r[c + '_trend_per_1000km_se'] * 1000.0, '.2f')}</td>"
                      for c in ("fit_left_radius", "fit_right_radius", "fit_track_width"))
            + f"<td class=\"txt\">{esc(r['alert'] or 'none')}</td></tr>")
    parts.append(f'<table class="rank">{head}{"".join(body)}</table></section>')
    for i, s in enumerate(robots, 1):
        parts.append(f'<section id="robot-{i}"><h2>{esc(s.row["robot"])}</h2><div class="grid">')
        parts.append(_figure_html(_robot_figure(s, colour_of(i - 1)),
                                  "Fitted geometry per bag (one standard error) against cumulative wheel distance, "
                                  "the weighted trend with its one-standard-error band, and the parameters file's value."))
        parts.append("</div></section>")
    parts.append('<section id="slip"><h2>Where the wheels slip</h2><div class="grid">')
    parts.append(_figure_html(_slip_figure(results, names), "Paths (grey) and the positions where slip was flagged, "
                              "coloured by robot, in the truth frame."))
    parts.append("</div></section>")
    head = ("<tr><th class=\"name\">robot</th><th class=\"name\">bag</th><th>start</th><th>m</th><th>ATE m</th>"
            "<th>RPE %</th><th>slip flagged</th><th>left radius mm</th><th>right radius mm</th><th>track mm</th>"
            "<th class=\"name\">note or error</th></tr>")
    body = []
    for r in results:
        w = r.row
        err = w.get("error") or ""
        note = err or w.get("fit_note") or ""
        body.append(
            f"<tr><td class=\"name\">{esc(w['robot'])}</td><td class=\"name\">{esc(w['bag'])}</td>"
            f"<td>{esc(str(w.get('start') or '-')[:19])}</td><td>{_fmt(w.get('distance_m'), '.1f')}</td>"
            f"<td>{_fmt(w.get('ate_anchored_rmse_m'), '.3f')}</td><td>{_fmt(w.get('rpe_trans_pct'), '.2f')}</td>"
            f"<td>{_fmt(100.0 * float(w.get('slip_flag_frac') or math.nan), '.1f')} %</td>"
            + "".join(f"<td>{_fmt(float(w.get(c) or math.nan) * 1000.0, '.3f')}</td>"
                      for c in ("fit_left_radius", "fit_right_radius", "fit_track_width"))
            + f"<td class=\"{'err' if err else 'txt'}\">{esc(note)}</td></tr>")
    parts.append(f'<section id="bags"><h2>Recordings</h2><table class="rank">{head}{"".join(body)}</table></section>')
    parts.append('<section id="reading"><h2>How to read this page</h2><dl class="read">')
    for term, text in _READING:
        parts.append(f"<dt>{esc(term)}</dt><dd>{esc(text)}</dd>")
    parts.append("</dl></section></main></body></html>\n")
    return "".join(parts)
