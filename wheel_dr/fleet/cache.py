"""The per-bag result cache of ``wheel-dr fleet --resume``: DIR/cache/<key>.json, key = bag content + settings."""
from __future__ import annotations

import dataclasses
import hashlib
import json
import math
from pathlib import Path
from typing import Any

from .. import __version__
from ..params import atomic_write_text
from .discover import content_digest
from .task import BagJob, BagResult

__all__ = ["cache_key", "load_cached", "store_cached", "CACHE_VERSION"]

CACHE_VERSION = 1


def _settings_text(job: BagJob) -> str:
    flat = job.settings.settings.to_flat()
    return json.dumps({"values": {k: list(v) if isinstance(v, tuple) else v for k, v in sorted(flat.items())},
                       "given": sorted(job.settings.given)}, sort_keys=True, default=str)


def cache_key(job: BagJob, digest: str | None = None) -> str:
    """SHA-256 of the bag's content, the settings (every value and which ones the file gives), the
    truth and topic choices, the segment length and the tool's version."""
    h = hashlib.sha256()
    for part in (f"v{CACHE_VERSION}", __version__, digest or content_digest(job.path), _settings_text(job),
                 repr((job.truth, job.joint_topic, job.imu_topic, job.use_imu, float(job.segment_m)))):
        h.update(part.encode() + b"\0")
    return h.hexdigest()


def _plain(v: Any) -> Any:
    if isinstance(v, float) and not math.isfinite(v):
        return None
    return v


def load_cached(cache_dir: Path, key: str, job: BagJob) -> BagResult | None:
    """The cached result for ``key`` with this job's robot and path, or None (missing or unreadable)."""
    p = cache_dir / f"{key}.json"
    try:
        doc = json.loads(p.read_text(encoding="utf-8"))
        res = BagResult(**doc)
    except (OSError, ValueError, TypeError):
        return None
    res.row = {k: (math.nan if v is None else v) for k, v in res.row.items()}
    res.row["robot"], res.row["bag"] = job.robot, job.rel
    return res


def store_cached(cache_dir: Path, key: str, result: BagResult) -> None:
    """Write one result atomically (results of unreadable bags are not cached: they may be re-copied)."""
    if result.row.get("error"):
        return
    doc = dataclasses.asdict(result)
    doc["row"] = {k: _plain(v) for k, v in doc["row"].items()}
    cache_dir.mkdir(parents=True, exist_ok=True)
    atomic_write_text(cache_dir / f"{key}.json", json.dumps(doc, allow_nan=False) + "\n")
