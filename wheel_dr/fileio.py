"""Writing files whole: a temporary file beside the target, renamed into place when complete."""
from __future__ import annotations

import os
from pathlib import Path

from .partfiles import make_part_file

__all__ = ["atomic_write_text"]


def atomic_write_text(path: str | os.PathLike, text: str) -> None:
    """Write ``text`` to a temporary file beside ``path`` and rename it into place when complete."""
    p = Path(path)
    fd, tmp = make_part_file(p)   # also removes the parts a killed run left beside p
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)  # mkstemp makes it private; give it the usual mode
        os.replace(tmp, p)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
