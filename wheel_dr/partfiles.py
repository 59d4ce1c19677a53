"""Temporary ``.NAME.PID.XXXX.part`` files and folders beside an output, and cleaning up those a killed run left."""
from __future__ import annotations

import os
import shutil
import tempfile
from pathlib import Path

__all__ = ["part_prefix", "make_part_dir", "make_part_file", "clean_stale_parts"]


def part_prefix(target: Path) -> str:
    """Name prefix of this process's temporary files for ``target`` (the process id marks the owner)."""
    return f".{target.name}.{os.getpid()}."


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:   # exists, owned by someone else
        return True
    return True


def clean_stale_parts(target: Path) -> list[Path]:
    """Remove ``.NAME.PID.*.part`` beside ``target`` whose process is gone (a run killed mid-write).

    Returns what was removed. Parts of running processes, and names of any other form, are kept.
    """
    removed: list[Path] = []
    folder = target.parent
    head = f".{target.name}."
    try:
        entries = list(folder.iterdir())
    except OSError:
        return removed
    for entry in entries:
        name = entry.name
        if not (name.startswith(head) and name.endswith(".part")):
            continue
        pid_text = name[len(head):].split(".", 1)[0]
        if not pid_text.isdigit() or int(pid_text) == os.getpid() or _alive(int(pid_text)):
            continue
        try:
            if entry.is_dir() and not entry.is_symlink():
                shutil.rmtree(entry)
            else:
                entry.unlink()
            removed.append(entry)
        except OSError:
            continue
    return removed


def make_part_dir(target: Path) -> Path:
    """A new temporary folder beside ``target`` (stale ones of killed runs are removed first)."""
    target.parent.mkdir(parents=True, exist_ok=True)
    clean_stale_parts(target)
    return Path(tempfile.mkdtemp(prefix=part_prefix(target), suffix=".part", dir=target.parent))


def make_part_file(target: Path) -> tuple[int, str]:
    """(fd, path) of a new temporary file beside ``target`` (stale ones of killed runs are removed first)."""
    target.parent.mkdir(parents=True, exist_ok=True)
    clean_stale_parts(target)
    return tempfile.mkstemp(prefix=part_prefix(target), suffix=".part", dir=target.parent)
