"""Summary tables of a comparison: summary.csv, summary.json and the ranking text for the terminal."""
from __future__ import annotations

import csv
import io
import json
import math
import os
from pathlib import Path
from typing import Any, Mapping, Sequence

from ..analysis.metrics import Evaluation, rank
from ..fileio import atomic_write_text

__all__ = ["write_summary", "ranking_text", "RANK_COLUMNS", "format_value", "write_text_readable"]

# (metric key, column title, format) shown in the ranking, in this order
RANK_COLUMNS: tuple[tuple[str, str, str], ...] = (
    ("ate_anchored_rmse_m", "ATE anch. m", "{:.3f}"),
    ("ate_aligned_rmse_m", "ATE align. m", "{:.3f}"),
    ("rpe_trans_pct", "RPE %", "{:.2f}"),
    ("rpe_rot_degpm", "RPE deg/m", "{:.3f}"),
    ("drift_endpoint_pct", "end drift %", "{:.2f}"),
    ("nees_mean", "NEES mean", "{:.2f}"),
    ("nees_median", "NEES median", "{:.2f}"),
    ("nees_frac_inside_95", "NEES in 95%", "{:.0%}"),
    ("slip_precision", "slip P", "{:.0%}"),
    ("slip_recall", "slip R", "{:.0%}"),
    ("slip_false_flag_frac", "false flags", "{:.1%}"),
    ("slip_latency_mean_s", "latency s", "{:.2f}"),
    ("slip_heading_error_mean_deg", "slip yaw err deg", "{:.2f}"),
)


def format_value(value: Any, fmt: str) -> str:
    """A metric as text; missing or NaN as '-'."""
    if value is None:
        return "-"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float) and not math.isfinite(value):
        return "-"
    try:
        return fmt.format(value)
    except (TypeError, ValueError):
        return str(value)


def write_text_readable(path: Path, text: str) -> None:
    """Write ``text`` atomically (temp name, then rename) and leave it readable like any new file
    (the temporary file is created private; rw-r--r-- is restored)."""
    atomic_write_text(path, text)
    os.chmod(path, 0o644)


def _row_of(item: Evaluation | Mapping[str, Any]) -> dict[str, Any]:
    return item.summary_row() if isinstance(item, Evaluation) else dict(item)


def write_summary(out_dir: str | Path, rows: Sequence[Evaluation | Mapping[str, Any]],
                  meta: Mapping[str, Any] | None = None) -> tuple[Path, Path]:
    """Write out_dir/summary.csv (one row per bag and settings, columns the union of the rows' keys in
    first-seen order; empty cell for missing or NaN) and out_dir/summary.json ({"meta": ..., "rows": [...]},
    NaN as null). Both go to a temporary name and are renamed when complete. Returns both paths."""
    out = Path(out_dir)
    flat = [_row_of(r) for r in rows]
    columns: list[str] = []
    for r in flat:
        for k in r:
            if k not in columns:
                columns.append(k)
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(columns)
    for r in flat:
        writer.writerow(["" if _missing(r.get(c)) else _csv_cell(r.get(c)) for c in columns])
    csv_path, json_path = out / "summary.csv", out / "summary.json"
    write_text_readable(csv_path, buf.getvalue())
    doc = {"meta": dict(meta or {}), "rows": [{k: (None if _missing(v) else v) for k, v in r.items()} for r in flat]}
    write_text_readable(json_path, json.dumps(doc, indent=1, allow_nan=False, default=str) + "\n")
    return csv_path, json_path


def _missing(v: Any) -> bool:
    return v is None or (isinstance(v, float) and not math.isfinite(v))


def _csv_cell(v: Any) -> Any:
    if isinstance(v, bool):
        return int(v)
    if isinstance(v, float):
        return repr(v)
    return v


def ranking_text(evaluations: Sequence[Evaluation], key: str = "rpe_trans_pct") -> str:
    """A fixed-width ranking table per bag (best ``key`` first) for the terminal."""
    lines: list[str] = []
    ordered = rank(evaluations, key)
    name_w = max([len("settings")] + [len(e.name) for e in ordered])
    head = f"{'#':>2}  {'settings':<{name_w}}  " + "  ".join(f"{t:>{max(len(t), 7)}}" for _, t, _ in RANK_COLUMNS)
    bag = object()
    pos = 0
    for e in ordered:
        if e.bag != bag:
            bag = e.bag
            pos = 0
            if lines:
                lines.append("")
            lines.append(f"bag: {e.bag}  ({e.metrics.get('distance_m', float('nan')):.1f} m, "
                         f"{e.metrics.get('duration_s', float('nan')):.0f} s)  ranked by {key}")
            lines.append(head)
        pos += 1
        cells = "  ".join(f"{format_value(e.metrics.get(k), f):>{max(len(t), 7)}}" for k, t, f in RANK_COLUMNS)
        lines.append(f"{pos:>2}  {e.name:<{name_w}}  {cells}")
    return "\n".join(lines) + "\n"
