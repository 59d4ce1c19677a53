"""Finding a fleet's bags under a root directory, naming their robots and keying them by content."""
from __future__ import annotations

import hashlib
import os
import re
from dataclasses import dataclass
from pathlib import Path

from ..core.errors import InputError

__all__ = ["FoundBag", "find_bags", "robot_params_path", "content_digest", "ROBOT_PARAMS_NAME"]

ROBOT_PARAMS_NAME = "params.yaml"     # ROOT/<robot>/params.yaml wins over --params for that robot


@dataclass(frozen=True)
class FoundBag:
    """One recording found under ROOT: its path, the path as found below ROOT (posix), its robot and
    its kind ('rosbag2', 'mcap' for a bare MCAP file, 'rosbag1')."""

    path: str
    rel: str
    robot: str
    kind: str


def _robot_of(rel: str, pattern: re.Pattern[str] | None) -> str | None:
    if pattern is None:
        parts = rel.split("/")
        return parts[0] if len(parts) > 1 else None
    m = pattern.search(rel)
    if m is None:
        return None
    return m.group(1)


def find_bags(root: str | os.PathLike, robot_pattern: str | None = None,
              skip: tuple[str | os.PathLike, ...] = ()) -> tuple[list[FoundBag], list[str]]:
    """Every bag under ``root`` at any depth: rosbag2 directories (holding metadata.yaml; not searched
    further), bare .mcap files and ROS 1 .bag files. Hidden names (starting with '.') and the
    directories in ``skip`` (the output directory) are not searched. The robot is the first path
    component below ``root``, or group 1 of ``robot_pattern`` searched in the posix path below root.
    Returns the bags sorted by path and one note per bag left out (no robot name)."""
    top = Path(root)
    if not top.is_dir():
        raise InputError(f"fleet root '{top}' is not a directory; give the directory that holds one "
                         "sub-directory of bags per robot.")
    pattern = None
    if robot_pattern is not None:
        try:
            pattern = re.compile(robot_pattern)
        except re.error as exc:
            raise InputError(f"--robot-pattern '{robot_pattern}' is not a regular expression ({exc}); fix it.") from None
        if pattern.groups != 1:
            raise InputError(f"--robot-pattern '{robot_pattern}' has {pattern.groups} groups; give exactly one "
                             "group around the robot's name, e.g. '^([^/]+)/'.")
    skipped = {Path(s).resolve() for s in skip}
    found: list[FoundBag] = []
    notes: list[str] = []

    def add(p: Path, kind: str) -> None:
        rel = p.relative_to(top).as_posix()
        robot = _robot_of(rel, pattern)
        if not robot:
            notes.append(f"{rel}: no robot name (put it in ROOT/<robot>/... or fix --robot-pattern); left out")
            return
        found.append(FoundBag(str(p), rel, robot, kind))

    for dirpath, dirnames, filenames in os.walk(top):
        d = Path(dirpath)
        if d.resolve() in skipped:
            dirnames[:] = []
            continue
        if "metadata.yaml" in filenames and d != top:
            add(d, "rosbag2")
            dirnames[:] = []
            continue
        dirnames[:] = sorted(n for n in dirnames if not n.startswith("."))
        for name in sorted(filenames):
            if name.startswith("."):
                continue
            if name.endswith(".mcap"):
                add(d / name, "mcap")
            elif name.endswith(".bag"):
                add(d / name, "rosbag1")
    found.sort(key=lambda b: b.rel)
    return found, notes


def robot_params_path(root: str | os.PathLike, robot: str) -> Path | None:
    """ROOT/<robot>/params.yaml when it exists."""
    p = Path(root) / robot / ROBOT_PARAMS_NAME
    return p if p.is_file() else None


def content_digest(path: str | os.PathLike) -> str:
    """SHA-256 over a bag's bytes (a rosbag2 directory: every file's relative name and bytes, in name
    order), so a renamed or touched but unchanged bag keeps its key and a re-recorded one does not."""
    p = Path(path)
    h = hashlib.sha256()
    files = [p] if p.is_file() else sorted(f for f in p.rglob("*") if f.is_file())
    for f in files:
        if p.is_dir():
            h.update(f.relative_to(p).as_posix().encode() + b"\0")
        with open(f, "rb") as fh:
            h.update(hashlib.file_digest(fh, "sha256").digest())
    return h.hexdigest()
