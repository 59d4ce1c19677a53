"""The report pages' look in one place: style sheet, page head and foot, tables and figures with captions.

Every wheel_dr page (comparison, calibration, and any other page that wants to match them) builds
its HTML from these helpers, so tables, figures and captions read the same everywhere. Images are
embedded as base64 PNG, so a page works opened from disk.
"""
from __future__ import annotations

import base64
import html
from typing import Sequence, Union

from matplotlib.figure import Figure

from ..safety import SAFETY_TEXT
from .plots import figure_png

__all__ = ["CSS", "ImageLike", "png_of", "img_tag", "figure_html", "table_html", "page_start", "page_end",
           "caution_html"]

ImageLike = Union[bytes, Figure]

CSS = """
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
table.rank caption { caption-side:top; text-align:left; font-size:13px; font-weight:600; padding:4px 0; }
table.rank th, table.rank td { padding:4px 8px; border-bottom:1px solid var(--line); text-align:right;
                               vertical-align:top; }
table.rank th { background:var(--soft); font-weight:600; }
table.rank th.group { text-align:center; border-left:1px solid var(--line); }
table.rank td.name, table.rank th.name, table.rank td.text { text-align:left; }
table.rank td.best { font-weight:700; color:#1d5c47; }
table.rank td.edge, table.rank th.edge { border-left:1px solid var(--line); }
table.rank .sub { display:block; font-size:11px; color:#666; font-weight:400; white-space:nowrap; }
table.rank td.name { white-space:nowrap; }
.swatch { display:inline-block; width:11px; height:11px; border-radius:2px; margin-right:6px; vertical-align:-1px; }
.grid { display:flex; flex-wrap:wrap; gap:14px; }
figure { margin:0; background:#fff; border:1px solid var(--line); padding:8px; flex:1 1 520px; max-width:100%; }
figure img { max-width:100%; height:auto; display:block; margin:0 auto; }
figcaption { font-size:12px; color:#555; margin-top:4px; }
dl.read dt { font-weight:600; margin-top:8px; }
dl.read dd { margin-left:18px; font-size:14px; }
.note { font-size:13px; color:#444; }
ul.notes { font-size:13px; color:#444; padding-left:20px; }
"""


def png_of(image: ImageLike) -> bytes:
    """PNG bytes of a matplotlib Figure, or the bytes themselves when they are a PNG already."""
    if isinstance(image, Figure):
        return figure_png(image)
    if isinstance(image, (bytes, bytearray, memoryview)) and bytes(image[:8]) == b"\x89PNG\r\n\x1a\n":
        return bytes(image)
    raise TypeError(f"An extra report image must be PNG bytes or a matplotlib Figure, not {type(image).__name__}.")


def img_tag(image: ImageLike, alt: str) -> str:
    """An <img> with the PNG embedded."""
    data = base64.b64encode(png_of(image)).decode("ascii")
    return f'<img src="data:image/png;base64,{data}" alt="{html.escape(alt)}">'


def figure_html(image: ImageLike, caption: str) -> str:
    """A figure with its caption (the caption says what is shown; it is also the image's alt text)."""
    return f"<figure>{img_tag(image, caption)}<figcaption>{html.escape(caption)}</figcaption></figure>"


def table_html(header: Sequence[str], rows: Sequence[Sequence[str]], caption: str = "",
               text_columns: Sequence[int] = (0,), groups: Sequence[tuple[str, int]] = (),
               raw: bool = False) -> str:
    """A table in the page's style: numbers right-aligned, ``text_columns`` left-aligned.

    ``groups`` (title, span) adds a header row above ``header`` that groups its columns (the spans
    must add up to the number of columns). Cells are escaped unless ``raw`` (trusted HTML)."""
    esc = (lambda s: s) if raw else html.escape
    cap = f"<caption>{html.escape(caption)}</caption>" if caption else ""
    text = set(text_columns)
    starts: set[int] = set()
    head = ""
    if groups:
        col = 0
        cells = []
        for title, span in groups:
            if col:
                starts.add(col)
            cls = ' class="group"' if title else ""
            cells.append(f'<th colspan="{span}"{cls}>{html.escape(title)}</th>')
            col += span
        head = f"<tr>{''.join(cells)}</tr>"

    def cls(k: int, base: str = "") -> str:
        names = [n for n in (base, "name" if k in text else "", "edge" if k in starts else "") if n]
        return f' class="{" ".join(names)}"' if names else ""

    head += "<tr>" + "".join(f"<th{cls(k)}>{html.escape(h)}</th>" for k, h in enumerate(header)) + "</tr>"
    body = "".join("<tr>" + "".join(f"<td{cls(k)}>{esc(c)}</td>" for k, c in enumerate(r)) + "</tr>" for r in rows)
    return f'<table class="rank">{cap}<thead>{head}</thead><tbody>{body}</tbody></table>'


def caution_html() -> str:
    """The safety caution box (wheel_dr.safety.SAFETY_TEXT), shown once near the top of every page."""
    return f'<div class="caution"><strong>Caution.</strong> {html.escape(SAFETY_TEXT)}</div>'


def page_start(title: str, meta: str, nav: Sequence[tuple[str, str]] = ()) -> str:
    """Doctype, head with the style sheet, the header band, the navigation bar (href, label) and
    the opening of <main> followed by the caution box."""
    links = "".join(f'<a href="{html.escape(h)}">{html.escape(t)}</a>' for h, t in nav)
    return (f"<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            f"<title>{html.escape(title)}</title><style>{CSS}</style></head><body>"
            f"<header><h1>{html.escape(title)}</h1><p class=\"meta\">{html.escape(meta)}</p></header>"
            f"<nav>{links}</nav><main>{caution_html()}")


def page_end() -> str:
    """Closes what ``page_start`` opened."""
    return "</main></body></html>\n"
