"""The single self-contained HTML page of a comparison (images embedded as base64 PNG)."""
from __future__ import annotations

import base64
import datetime as _dt
import html
import math
from pathlib import Path
from typing import Any, Sequence, Union

from matplotlib.figure import Figure

from ..analysis.metrics import Evaluation, rank
from .plots import colour_of, error_figure, figure_png, nees_figure, rpe_figure, slip_figure, trajectory_figure
from ..safety import SAFETY_TEXT
from .summary import RANK_COLUMNS, format_value, write_text_readable

__all__ = ["write_report", "render_page", "ImageLike", "CAUTION_TEXT"]

ImageLike = Union[bytes, Figure]

CAUTION_TEXT = SAFETY_TEXT

_CSS = """
:root { --ink:#23272a; --paper:#fbfaf6; --band:#27363b; --accent:#c8553d; --soft:#efeadd; --line:#d9d4c7; }
* { box-sizing: border-box; }
body { margin:0; background:var(--paper); color:var(--ink);
       font: 15px/1.45 "Segoe UI", "Noto Sans", "DejaVu Sans", sans-serif; }
header { background:var(--band); color:#f4efe3; padding:18px 28px 14px; border-bottom:5px solid var(--accent); }
header h1 { margin:0; font-size:22px; letter-spacing:.3px; }
header .meta { margin:4px 0 0; font-size:13px; opacity:.8; }
nav { padding:8px 28px; background:var(--soft); border-bottom:1px solid var(--line); font-size:13px; }
nav a { color:var(--band); margin-right:14px; }
main { max-width:1180px; margin:0 auto; padding:8px 28px 40px; }
h2 { border-left:6px solid var(--accent); padding-left:10px; margin-top:34px; font-size:19px; }
h3 { font-size:16px; margin:20px 0 6px; }
.caution { border:1px solid #d8b56a; background:#fbf1dc; padding:10px 14px; margin-top:18px; font-size:13px; }
table.rank { border-collapse:collapse; font-size:13px; margin:6px 0 14px; }
table.rank th, table.rank td { padding:4px 8px; border-bottom:1px solid var(--line); text-align:right; }
table.rank th { background:var(--soft); font-weight:600; }
table.rank td.name, table.rank th.name { text-align:left; }
table.rank td.best { font-weight:700; color:#1d5c47; }
.swatch { display:inline-block; width:11px; height:11px; border-radius:2px; margin-right:6px; vertical-align:-1px; }
.grid { display:flex; flex-wrap:wrap; gap:14px; }
figure { margin:0; background:#fff; border:1px solid var(--line); padding:8px; flex:1 1 520px; max-width:100%; }
figure img { max-width:100%; height:auto; display:block; margin:0 auto; }
figcaption { font-size:12px; color:#555; margin-top:4px; }
dl.read dt { font-weight:600; margin-top:8px; }
dl.read dd { margin-left:18px; font-size:14px; }
.note { font-size:13px; color:#444; }
"""

_READING = [
    ("ATE (anchored)", "RMSE of the position error after putting the first estimated pose on the first true "
     "pose: what a user sees when odometry starts where the base really is (Sturm et al., IROS 2012)."),
    ("ATE (aligned)", "RMSE of the position error after the best rotation and translation of the whole "
     "estimate onto the truth (SE(2), Umeyama 1991, no scale): the shape error, blind to a wrong start heading."),
    ("RPE", "Relative pose error over stretches of fixed travelled distance (the lengths in the RPE chart), as "
     "translation error per distance (%) and heading error per distance (deg/m), averaged over all stretches "
     "and lengths (Geiger et al., CVPR 2012). The drift measure least affected by where the error happened."),
    ("End drift", "Anchored position error at the last pose as a percentage of the true distance travelled."),
    ("NEES", "Normalised estimation error squared e' P^-1 e of the pose error over disjoint stretches, the "
     "covariance restarted at each stretch start, so stretches are independent. A right covariance gives "
     "chi-square(3) values: mean 3, about 95 % of stretches inside the shaded band, and the mean inside its "
     "interval (Bar-Shalom et al. 2001, sec. 5.4). Mean above the interval: the covariance is overconfident; "
     "below: too cautious."),
    ("Slip", "Per sample: precision (flags that were real slip), recall (slip samples flagged), coverage after "
     "the first 0.2 s of each event, false flags (share of non-slip samples flagged) and latency (first flag "
     "after an event starts). Targets from the project: coverage >= 95 %, false flags <= 1 %, latency < 0.2 s."),
]


def _png_of(image: ImageLike) -> bytes:
    if isinstance(image, Figure):
        return figure_png(image)
    if isinstance(image, (bytes, bytearray, memoryview)) and bytes(image[:8]) == b"\x89PNG\r\n\x1a\n":
        return bytes(image)
    raise TypeError(f"An extra report image must be PNG bytes or a matplotlib Figure, not {type(image).__name__}.")


def _img_tag(image: ImageLike, alt: str) -> str:
    png = _png_of(image)
    data = base64.b64encode(png).decode("ascii")
    return f'<img src="data:image/png;base64,{data}" alt="{html.escape(alt)}">'


def _figure_html(image: ImageLike, caption: str) -> str:
    return f"<figure>{_img_tag(image, caption)}<figcaption>{html.escape(caption)}</figcaption></figure>"


def _num(v: Any) -> float:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return math.nan
    return f


def _ranking_table(evals: Sequence[Evaluation], colours: dict[str, str], key: str) -> str:
    lower_better = {k for k, _, _ in RANK_COLUMNS} - {"nees_frac_inside_95", "slip_precision", "slip_recall", "nees_mean"}
    best: dict[str, float] = {}
    for k, _, _ in RANK_COLUMNS:
        vals = [_num(e.metrics.get(k)) for e in evals]
        vals = [v for v in vals if math.isfinite(v)]
        if not vals or min(vals) == max(vals):
            continue                    # nothing to single out when all agree
        if k == "nees_mean":
            best[k] = min(vals, key=lambda v: abs(v - 3.0))
        else:
            best[k] = min(vals) if k in lower_better else max(vals)
    head = "".join(f"<th>{html.escape(t)}</th>" for _, t, _ in RANK_COLUMNS)
    rows = []
    for pos, e in enumerate(evals, 1):
        cells = []
        for k, _, fmt in RANK_COLUMNS:
            v = e.metrics.get(k)
            text = format_value(v, fmt)
            if k == "nees_mean" and math.isfinite(_num(v)):
                text += f" [{_num(e.metrics.get('nees_mean_lo')):.2f}, {_num(e.metrics.get('nees_mean_hi')):.2f}]"
            cls = ' class="best"' if k in best and math.isfinite(_num(v)) and _num(v) == best[k] and len(evals) > 1 else ""
            cells.append(f"<td{cls}>{html.escape(text)}</td>")
        sw = f'<span class="swatch" style="background:{colours.get(e.name, "#888")}"></span>'
        rows.append(f'<tr><td>{pos}</td><td class="name">{sw}{html.escape(e.name)}</td>{"".join(cells)}</tr>')
    return (f'<table class="rank"><thead><tr><th>#</th><th class="name">settings</th>{head}</tr></thead>'
            f'<tbody>{"".join(rows)}</tbody></table>')


def render_page(evaluations: Sequence[Evaluation], *, title: str = "wheel_dr comparison",
                extra_sections: Sequence[tuple[str, str, Sequence[ImageLike]]] = (),
                notes: Sequence[str] = (), ellipse_every: int | None = None,
                rank_key: str = "rpe_trans_pct") -> str:
    """The page as a string (see ``write_report``)."""
    # extra images first: a bad one fails before any figure is drawn
    extra_png = [(t, frag, [_png_of(img) for img in images]) for t, frag, images in extra_sections]
    ordered = rank(evaluations, rank_key)
    names: list[str] = []
    for e in evaluations:
        if e.name not in names:
            names.append(e.name)
    colours = {n: colour_of(k) for k, n in enumerate(names)}
    bags: list[str] = []
    for e in ordered:
        if e.bag not in bags:
            bags.append(e.bag)
    stamp = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    parts = [f"<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
             f"<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
             f"<title>{html.escape(title)}</title><style>{_CSS}</style></head><body>",
             f"<header><h1>{html.escape(title)}</h1><p class=\"meta\">generated {stamp} &middot; "
             f"{len(bags)} recording(s) &middot; {len(names)} settings</p></header>"]
    nav = ['<a href="#ranking">ranking</a>'] + [f'<a href="#bag-{i}">{html.escape(b or "recording")}</a>'
                                                for i, b in enumerate(bags, 1)]
    nav += [f'<a href="#extra-{i}">{html.escape(t)}</a>' for i, (t, _, _) in enumerate(extra_sections, 1)]
    nav.append('<a href="#reading">how to read</a>')
    parts.append(f"<nav>{''.join(nav)}</nav><main>")
    parts.append(f'<div class="caution"><strong>Caution.</strong> {html.escape(CAUTION_TEXT)}</div>')
    for n in notes:
        parts.append(f'<p class="note">{html.escape(n)}</p>')
    key_title = {k: t for k, t, _ in RANK_COLUMNS}.get(rank_key, rank_key)
    parts.append(f'<section id="ranking"><h2>Ranking</h2><p class="note">Per recording, best first by '
                 f'{html.escape(key_title)}; the best value of each column in bold (NEES mean: closest to 3).</p>')
    for b in bags:
        group = [e for e in ordered if e.bag == b]
        m0 = group[0].metrics
        parts.append(f"<h3>{html.escape(b or 'recording')} <span class=\"note\">"
                     f"({_num(m0.get('distance_m')):.1f} m, {_num(m0.get('duration_s')):.0f} s)</span></h3>")
        parts.append(_ranking_table(group, colours, rank_key))
    parts.append("</section>")
    for i, b in enumerate(bags, 1):
        group = [e for e in evaluations if e.bag == b]          # settings order as given (stable colours)
        cols = [colours[e.name] for e in group]
        parts.append(f'<section id="bag-{i}"><h2>{html.escape(b or "recording")}</h2><div class="grid">')
        figs = [
            (trajectory_figure(group, cols, ellipse_every),
             "Paths over ground truth; estimates anchored at the first true pose; ellipses hold 95 % of the "
             "position uncertainty the estimator reports."),
            (error_figure(group, cols), "Anchored position error against distance travelled."),
            (nees_figure(group, cols), "NEES per segment against the chi-square(3) 95 % band."),
            (rpe_figure(group, cols), "RPE translation per segment length."),
            (slip_figure(group, cols), "Slip flags of each settings against the true slip intervals."),
        ]
        for fig, cap in figs:
            parts.append(_figure_html(fig, cap))
        parts.append("</div></section>")
    for i, (t, frag, images) in enumerate(extra_png, 1):
        parts.append(f'<section id="extra-{i}"><h2>{html.escape(t)}</h2>{frag}<div class="grid">')
        for k, img in enumerate(images, 1):
            parts.append(_figure_html(img, f"{t}, figure {k}"))
        parts.append("</div></section>")
    parts.append('<section id="reading"><h2>How to read this page</h2><dl class="read">')
    for term, text in _READING:
        parts.append(f"<dt>{html.escape(term)}</dt><dd>{html.escape(text)}</dd>")
    parts.append("</dl></section></main></body></html>\n")
    return "".join(parts)


def write_report(out_dir: str | Path, evaluations: Sequence[Evaluation], *, title: str = "wheel_dr comparison",
                 extra_sections: Sequence[tuple[str, str, Sequence[ImageLike]]] = (),
                 notes: Sequence[str] = (), ellipse_every: int | None = None,
                 rank_key: str = "rpe_trans_pct") -> Path:
    """Write out_dir/index.html: ranking per recording, then per recording the paths with covariance
    ellipses, error against distance, NEES against its chi-square bounds, RPE per length and the slip
    timeline; then ``extra_sections`` (title, trusted HTML fragment, PNG bytes or Figures), e.g. the
    calibration results. Images are embedded, so the page works opened from disk. Written to a
    temporary name and renamed. Returns the page's path."""
    path = Path(out_dir) / "index.html"
    write_text_readable(path, render_page(evaluations, title=title, extra_sections=extra_sections, notes=notes,
                                        ellipse_every=ellipse_every, rank_key=rank_key))
    return path
