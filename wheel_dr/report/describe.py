"""What a parameters file is for, in one line, taken from the file itself (for the report's settings list).

A parameters file describes itself in its comment header, the comment lines above the first YAML
line. A line ``# description: TEXT`` there (continued by the comment lines right after it that are
indented by two or more spaces after the '#') is the description; without one, the header's first
paragraph is used. A file
without a header gets a sentence saying how to add one.
"""
from __future__ import annotations

import re
from pathlib import Path

__all__ = ["settings_description", "header_comment_lines", "NO_DESCRIPTION"]

NO_DESCRIPTION = "no description in the file (add a '# description: ...' comment line at its top)"
_KEY = re.compile(r"^description\s*:\s*", re.IGNORECASE)


def header_comment_lines(text: str) -> list[str]:
    """The comment lines above the first YAML line with the '#' removed (indentation after it kept)."""
    out: list[str] = []
    for line in text.splitlines():
        stripped = line.strip()
        if not stripped:
            if out:
                out.append("")
            continue
        if not stripped.startswith("#"):
            break
        out.append(stripped[1:].rstrip())
    return out


def _paragraph(lines: list[str]) -> str:
    words: list[str] = []
    for line in lines:
        if not line.strip():
            break
        words.append(line.strip())
    return " ".join(words).strip()


def settings_description(path: str | Path | None) -> str:
    """One-paragraph description of the parameters file at ``path`` (None: the built-in defaults)."""
    if path is None:
        return "the built-in defaults (no parameters file given)"
    try:
        text = Path(path).read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError):
        return NO_DESCRIPTION
    lines = header_comment_lines(text)
    for k, line in enumerate(lines):
        if _KEY.match(line.strip()):
            words = [_KEY.sub("", line.strip(), count=1)]
            for more in lines[k + 1:]:
                if not more.startswith("   ") or not more.strip():   # '#' + at least two spaces of indent
                    break
                words.append(more.strip())
            return " ".join(w for w in words if w) or NO_DESCRIPTION
    return _paragraph(lines) or NO_DESCRIPTION
