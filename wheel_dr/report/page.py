"""The single self-contained HTML page of a comparison (images embedded as base64 PNG)."""
from __future__ import annotations

import datetime as _dt
import html
import math
from pathlib import Path
from typing import Any, Mapping, Sequence, Union

from ..analysis.metrics import Evaluation, rank
from ..safety import SAFETY_TEXT
from .describe import settings_description
from .plots import colour_of, error_figure, nees_figure, rpe_figure, slip_figure, trajectory_figure
from .style import CSS, ImageLike, figure_html, img_tag, page_end, page_start, png_of, table_html
from .summary import RANK_COLUMNS, format_value, write_text_readable

__all__ = ["write_report", "render_page", "ImageLike", "CAUTION_TEXT", "SettingsLike"]

CAUTION_TEXT = SAFETY_TEXT

# the page's building blocks under their earlier names (other pages may use them)
_CSS = CSS
_png_of = png_of
_img_tag = img_tag
_figure_html = figure_html

# a settings entry: an object with .name and .path (wheel_dr.runs.SettingsFile), a
# (name, path) pair, or a mapping name -> description
SettingsLike = Union[Any, tuple[str, Union[str, Path, None]]]

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
     "chi-square(3) values (Bar-Shalom et al. 2001, sec. 5.4): mean 3 with the mean inside its 95 % interval, "
     "median 2.37, and about 95 % of stretches inside the band [0.22, 9.35]. Mean above the interval: the "
     "covariance is overconfident; below: too cautious."),
    ("NEES mean, median and share in band", "Read the three together. The mean is pulled up by a few stretches "
     "far out (a slip the model does not cover, a bump); the median and the share inside the band are not. A "
     "large mean with a median near 2.4 and a share near 95 % says the covariance is right on most of the run and "
     "a few stretches break the model; a median and share far off say the noise settings themselves are wrong."),
    ("NEES with and without slip flags", "The consistency table scores the stretches in which the estimator "
     "itself flagged slip apart from the rest. The unflagged stretches show whether the covariance is right "
     "where the model holds; the flagged ones show how far a slip breaks it (with the 'inflate' or 'gyro' "
     "response they should come closer to the band). Slip the estimator did not flag stays among the "
     "unflagged stretches."),
    ("Slip", "Per sample: precision (flags that were real slip), recall (slip samples flagged), coverage after "
     "the first 0.2 s of each event, false flags (share of non-slip samples flagged) and latency (first flag "
     "after an event starts). Good detectors reach coverage >= 95 %, false flags <= 1 % and latency < 0.2 s; "
     "slip yaw err is the heading error an event leaves, much smaller with gyro substitution."),
]


def _num(v: Any) -> float:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return math.nan
    return f


_TARGET = {"nees_mean": 3.0, "nees_median": 2.366}     # chi-square(3) mean and median (scipy)


def _ranking_table(evals: Sequence[Evaluation], colours: dict[str, str], key: str) -> str:
    lower_better = {k for k, _, _ in RANK_COLUMNS} - {"nees_frac_inside_95", "slip_precision", "slip_recall",
                                                      *_TARGET}
    best: dict[str, float] = {}
    for k, _, _ in RANK_COLUMNS:
        vals = [_num(e.metrics.get(k)) for e in evals]
        vals = [v for v in vals if math.isfinite(v)]
        if not vals or min(vals) == max(vals):
            continue                    # nothing to single out when all agree
        if k in _TARGET:
            best[k] = min(vals, key=lambda v: abs(v - _TARGET[k]))
        else:
            best[k] = min(vals) if k in lower_better else max(vals)
    head = "".join(f"<th>{html.escape(t)}</th>" for _, t, _ in RANK_COLUMNS)
    rows = []
    for pos, e in enumerate(evals, 1):
        cells = []
        for k, _, fmt in RANK_COLUMNS:
            v = e.metrics.get(k)
            text = html.escape(format_value(v, fmt))
            if k == "nees_mean" and math.isfinite(_num(v)):
                text += _interval_html(e.metrics, "nees")
            cls = ' class="best"' if k in best and math.isfinite(_num(v)) and _num(v) == best[k] and len(evals) > 1 else ""
            cells.append(f"<td{cls}>{text}</td>")
        sw = f'<span class="swatch" style="background:{colours.get(e.name, "#888")}"></span>'
        rows.append(f'<tr><td>{pos}</td><td class="name">{sw}{html.escape(e.name)}</td>{"".join(cells)}</tr>')
    return (f'<table class="rank"><thead><tr><th>#</th><th class="name">settings</th>{head}</tr></thead>'
            f'<tbody>{"".join(rows)}</tbody></table>')


def _interval_html(m: Mapping[str, Any], prefix: str) -> str:
    lo, hi = _num(m.get(f"{prefix}_mean_lo")), _num(m.get(f"{prefix}_mean_hi"))
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return ""
    return f'<span class="sub">[{lo:.2f}, {hi:.2f}]</span>'


def _consistency_table(evals: Sequence[Evaluation], colours: dict[str, str]) -> str:
    """NEES of all stretches, of those without a slip flag of the estimator, and of the flagged ones."""
    groups = [("", 1), ("all stretches", 4), ("no slip flagged by the estimator", 4), ("slip flagged", 4)]
    header = ["settings"] + ["n", "mean", "median", "in 95 % band"] * 3
    rows = []
    for e in evals:
        m = e.metrics
        sw = f'<span class="swatch" style="background:{colours.get(e.name, "#888")}"></span>'
        cells = [sw + html.escape(e.name)]
        for prefix in ("nees", "nees_unflagged", "nees_flagged"):
            n = m.get(f"{prefix}_segments")
            mean = html.escape(format_value(m.get(f"{prefix}_mean"), "{:.2f}"))
            if prefix != "nees_flagged":
                mean += _interval_html(m, prefix)
            cells += [html.escape(format_value(n, "{:d}")), mean,
                      html.escape(format_value(m.get(f"{prefix}_median"), "{:.2f}")),
                      html.escape(format_value(m.get(f"{prefix}_frac_inside_95"), "{:.0%}"))]
        rows.append(cells)
    seg = _num(evals[0].metrics.get("nees_segment_m")) if evals else math.nan
    caption = (f"NEES over stretches of {seg:g} m, the covariance restarted at each (mean with its 95 % interval "
               "below it). A right covariance gives a mean near 3 inside its interval, a median near 2.37 and "
               "about 95 % of the stretches in the band.")
    return table_html(header, rows, caption, text_columns=(0,), groups=groups, raw=True)


def _settings_entries(settings_files: Sequence[SettingsLike] | Mapping[str, str]) -> list[tuple[str, str, str]]:
    """(name, file, description) of each settings entry."""
    out = []
    if isinstance(settings_files, Mapping):
        return [(str(n), "", str(d)) for n, d in settings_files.items()]
    for entry in settings_files:
        if isinstance(entry, tuple):
            name, path = entry
        else:
            name, path = getattr(entry, "name"), getattr(entry, "path", None)
        out.append((str(name), _shown_path(path), settings_description(path)))
    return out


def _shown_path(path: Any) -> str:
    """The file as the user would name it: relative to the working directory when it lies below it."""
    if not path:
        return "(built-in defaults)"
    p = Path(path)
    try:
        return str(p.resolve().relative_to(Path.cwd().resolve()))
    except (ValueError, OSError):
        return str(p)


def _settings_table(entries: list[tuple[str, str, str]], colours: dict[str, str]) -> str:
    with_files = any(path for _, path, _ in entries)
    rows = []
    for name, path, desc in entries:
        sw = f'<span class="swatch" style="background:{colours.get(name, "#888")}"></span>'
        rows.append([sw + html.escape(name)] + ([html.escape(path)] if with_files else []) + [html.escape(desc)])
    if with_files:
        return table_html(["settings", "file", "description (from the file's header)"], rows,
                          text_columns=(0, 1, 2), raw=True)
    return table_html(["settings", "description"], rows, text_columns=(0, 1), raw=True)


def _extra_images(title: str, images: Sequence[Any]) -> list[tuple[bytes, str]]:
    """(PNG, caption) of a section's images; a bare image gets a caption naming its section."""
    out = []
    for k, item in enumerate(images, 1):
        if isinstance(item, tuple):
            img, cap = item
        else:
            img, cap = item, f"{title}: figure {k}."
        out.append((png_of(img), str(cap)))
    return out


def render_page(evaluations: Sequence[Evaluation], *, title: str = "wheel_dr comparison",
                extra_sections: Sequence[tuple[str, str, Sequence[Any]]] = (),
                notes: Sequence[str] = (), ellipse_every: int | None = None,
                rank_key: str = "rpe_trans_pct",
                settings_files: Sequence[SettingsLike] | Mapping[str, str] = ()) -> str:
    """The page as a string (see ``write_report``)."""
    # extra images first: a bad one fails before any figure is drawn
    extra_png = [(t, frag, _extra_images(t, images)) for t, frag, images in extra_sections]
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
    entries = _settings_entries(settings_files)
    nav = ([("#settings", "settings")] if entries else []) + [("#ranking", "ranking"), ("#consistency", "consistency")]
    nav += [(f"#bag-{i}", b or "recording") for i, b in enumerate(bags, 1)]
    nav += [(f"#extra-{i}", t) for i, (t, _, _) in enumerate(extra_sections, 1)]
    nav.append(("#reading", "how to read"))
    parts = [page_start(title, f"generated {stamp} \u00b7 {len(bags)} recording(s) \u00b7 {len(names)} settings",
                        nav)]
    caution = " ".join(SAFETY_TEXT.split())
    for n in notes:
        if " ".join(str(n).split()) != caution:           # the caution box above already says it
            parts.append(f'<p class="note">{html.escape(n)}</p>')
    if entries:
        parts.append('<section id="settings"><h2>Settings compared</h2>' + _settings_table(entries, colours)
                     + "</section>")
    key_title = {k: t for k, t, _ in RANK_COLUMNS}.get(rank_key, rank_key)
    parts.append(f'<section id="ranking"><h2>Ranking</h2><p class="note">Per recording, best first by '
                 f'{html.escape(key_title)}; the best value of each column in bold (NEES mean: closest to 3, '
                 f'median: closest to 2.37).</p>')
    for b in bags:
        group = [e for e in ordered if e.bag == b]
        m0 = group[0].metrics
        parts.append(f"<h3>{html.escape(b or 'recording')} <span class=\"note\">"
                     f"({_num(m0.get('distance_m')):.1f} m, {_num(m0.get('duration_s')):.0f} s)</span></h3>")
        parts.append(_ranking_table(group, colours, rank_key))
    parts.append("</section>")
    parts.append('<section id="consistency"><h2>Consistency of the covariance</h2><p class="note">Stretches in '
                 "which the estimator itself flagged slip are scored apart from the rest: the rest show whether the "
                 "covariance is right where the model holds (see how to read).</p>")
    for b in bags:
        group = [e for e in ordered if e.bag == b]
        parts.append(f"<h3>{html.escape(b or 'recording')}</h3>" + _consistency_table(group, colours))
    parts.append("</section>")
    for i, b in enumerate(bags, 1):
        group = [e for e in evaluations if e.bag == b]          # settings order as given (stable colours)
        cols = [colours[e.name] for e in group]
        parts.append(f'<section id="bag-{i}"><h2>{html.escape(b or "recording")}</h2><div class="grid">')
        figs = [
            (trajectory_figure(group, cols, ellipse_every),
             "Paths over ground truth; estimates anchored at the first true pose; ellipses hold 95 % of the "
             "position uncertainty the estimator reports."),
            (error_figure(group, cols), "Anchored position error against distance travelled (solid) and the "
             "estimator's own 2-sigma radius (dashed)."),
            (nees_figure(group, cols), "NEES per stretch against the chi-square(3) 95 % band; open markers are "
             "stretches the estimator flagged as slipping."),
            (rpe_figure(group, cols), "RPE translation per stretch length."),
            (slip_figure(group, cols), "Slip flags of each settings against the true slip intervals."),
        ]
        for fig, cap in figs:
            parts.append(figure_html(fig, cap))
        parts.append("</div></section>")
    for i, (t, frag, images) in enumerate(extra_png, 1):
        parts.append(f'<section id="extra-{i}"><h2>{html.escape(t)}</h2>{frag}<div class="grid">')
        for png, cap in images:
            parts.append(figure_html(png, cap))
        parts.append("</div></section>")
    parts.append('<section id="reading"><h2>How to read this page</h2><dl class="read">')
    for term, text in _READING:
        parts.append(f"<dt>{html.escape(term)}</dt><dd>{html.escape(text)}</dd>")
    parts.append("</dl></section>" + page_end())
    return "".join(parts)


def write_report(out_dir: str | Path, evaluations: Sequence[Evaluation], *, title: str = "wheel_dr comparison",
                 extra_sections: Sequence[tuple[str, str, Sequence[Any]]] = (),
                 notes: Sequence[str] = (), ellipse_every: int | None = None,
                 rank_key: str = "rpe_trans_pct",
                 settings_files: Sequence[SettingsLike] | Mapping[str, str] = ()) -> Path:
    """Write out_dir/index.html: ranking per recording, then per recording the paths with covariance
    ellipses, error against distance, NEES against its chi-square bounds, RPE per length and the slip
    timeline; then ``extra_sections`` (title, trusted HTML fragment, images: PNG bytes or Figures, or
    (image, caption) pairs), e.g. the calibration results. ``settings_files`` lists the settings with
    the description each file gives in its header (``wheel_dr.report.describe``). The caution is
    shown once (a note repeating it is dropped). Images are embedded, so the page works opened from
    disk. Written to a temporary name and renamed. Returns the page's path."""
    path = Path(out_dir) / "index.html"
    write_text_readable(path, render_page(evaluations, title=title, extra_sections=extra_sections, notes=notes,
                                        ellipse_every=ellipse_every, rank_key=rank_key,
                                        settings_files=settings_files))
    return path
