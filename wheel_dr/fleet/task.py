"""One fleet task: a bag decoded once, replayed, compared with its truth, its geometry fitted, slip scored.

Runs on a Dask worker (or in the client's process for the in-process loop). It reuses the offline
tool's own steps (``wheel_dr.bags.read_run``, ``wheel_dr.runs.replay_run``,
``wheel_dr.analysis.metrics.evaluate``, ``wheel_dr.analysis.calibration.prepare_run`` and
``calibrate``) and returns only a summary row and a few small arrays (a downsampled path and the
positions where slip was flagged), never the samples. A bag that cannot be read gives a row with
its error instead of an exception, so one bad recording never stops a fleet.
"""
from __future__ import annotations

import datetime as _dt
import math
import time
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..analysis.calibration import GEOMETRY_NAMES
from ..runs import SettingsFile

__all__ = ["BagJob", "BagResult", "analyse_bag", "GEOMETRY_COLUMNS", "MAX_PATH_POINTS", "MAX_SLIP_POINTS",
           "iso_utc"]

GEOMETRY_COLUMNS = tuple(f"fit_{n.split('.', 1)[1]}" for n in GEOMETRY_NAMES)  # fit_left_radius, ...
MAX_PATH_POINTS = 400
MAX_SLIP_POINTS = 300


@dataclass(frozen=True)
class BagJob:
    """Everything a worker needs for one bag (small and picklable: paths and settings, no data)."""

    path: str
    rel: str
    robot: str
    settings: SettingsFile
    truth: str | None = None
    joint_topic: str | None = None
    imu_topic: str | None = None
    use_imu: bool = True
    segment_m: float = 2.0


@dataclass
class BagResult:
    """What comes back from a worker: the bags.csv row (``row``), notes and small arrays (lists)."""

    row: dict[str, Any]
    start_ns: int | None = None
    notes: list[str] = field(default_factory=list)
    path_xy: list[list[float]] = field(default_factory=list)      # downsampled, truth frame if any
    slip_xy: list[list[float]] = field(default_factory=list)      # where slip was flagged, same frame
    frame: str = ""
    seconds: float = 0.0
    geometry_used: list[float] = field(default_factory=list)   # the radii / track the replay ran with


def iso_utc(stamp_ns: int) -> str:
    """A nanosecond stamp as ISO 8601 UTC to the millisecond, e.g. 2027-01-15T08:00:00.000Z."""
    t = _dt.datetime.fromtimestamp(stamp_ns // 1_000_000_000, tz=_dt.timezone.utc)
    return t.strftime("%Y-%m-%dT%H:%M:%S") + f".{(stamp_ns % 1_000_000_000) // 1_000_000:03d}Z"


def _every(n: int, at_most: int) -> np.ndarray:
    if n <= at_most:
        return np.arange(n)
    return np.unique(np.linspace(0, n - 1, at_most).round().astype(np.int64))


def _xy_list(x: np.ndarray, y: np.ndarray) -> list[list[float]]:
    return [[round(float(a), 4), round(float(b), 4)] for a, b in zip(x, y) if math.isfinite(a) and math.isfinite(b)]


def _truth_usable(job: BagJob) -> tuple[str | None, str]:
    """The truth to ask the reader for: the given one when the bag has it, else none (with a note)."""
    from ..bags.reader import POSE_TYPES, TF_TYPE, bag_topics, parse_truth_spec
    spec = parse_truth_spec(job.truth)
    if spec.kind not in ("topic", "tf"):
        return job.truth, ""
    topics = bag_topics(job.path)
    if spec.kind == "topic" and topics.get(spec.topic, ("", 0))[0] not in POSE_TYPES:
        return "none", f"no truth: the bag has no pose topic {spec.topic}"
    if spec.kind == "tf" and not any(t == TF_TYPE for t, _ in topics.values()):
        return "none", f"no truth: the bag has no TF topic for {spec.describe()}"
    return job.truth, ""


def _fit(data, settings, rel: str, segment_m: float) -> tuple[dict[str, float], str, list[str]]:
    from ..analysis.calibration import CalibrationError, calibrate, prepare_run
    empty = {c: math.nan for c in GEOMETRY_COLUMNS} | {f"{c}_se": math.nan for c in GEOMETRY_COLUMNS}
    if data.truth is None or len(data.truth) < 2:
        return empty, "no ground truth in the bag to fit the geometry against", []
    try:
        run = prepare_run(data.samples, data.truth, settings, rel)
        try:
            res = calibrate([run], settings, segment_length_m=segment_m, fit_noise_params=False)
        except ValueError:
            # with the file's noise every segment can fall beyond the outlier gate after a first fit
            # pulled by slip; fitting the noise as well widens the gate to what the drive shows
            res = calibrate([run], settings, segment_length_m=segment_m, fit_noise_params=True)
    except CalibrationError as exc:       # ExcitationError and TruthError say what to drive / record
        return empty, str(exc), []
    except (ValueError, np.linalg.LinAlgError) as exc:   # e.g. every segment set aside as an outlier
        return empty, (f"the geometry fit failed ({type(exc).__name__}: {str(exc).strip()[:100]}); too few "
                       "segments without slip or truth glitches: drive more on a dry floor"), []
    fit = res.systematic
    if fit is None or not fit.success:
        return empty, "the geometry least squares did not converge", res.notes
    out = dict(empty)
    for c, v, se in zip(GEOMETRY_COLUMNS, fit.geometry, fit.std_error):
        out[c] = float(v)
        out[f"{c}_se"] = float(se)
    return out, "", list(res.notes)


_ALLOCATOR_TUNED = False
MMAP_THRESHOLD_BYTES = 64 << 20


def tune_allocator() -> None:
    """Undo a small fixed glibc trim threshold in this process (once).

    Dask's nanny starts workers with MALLOC_TRIM_THRESHOLD_=65536 (memory goes back to the system
    sooner). Any such setting also switches off glibc's dynamic mmap threshold, so every numpy
    array above 128 KiB is a fresh mmap with page faults on first touch, which doubles the time of
    this task. Raising the mmap and trim thresholds with mallopt(3) restores heap reuse; memory
    is still returned above 64 MiB of free heap. No-op without glibc or without that variable."""
    global _ALLOCATOR_TUNED
    if _ALLOCATOR_TUNED:
        return
    _ALLOCATOR_TUNED = True
    import os
    if "MALLOC_TRIM_THRESHOLD_" not in os.environ:
        return
    try:
        import ctypes
        libc = ctypes.CDLL("libc.so.6")
        m_trim_threshold, m_mmap_threshold = -1, -3         # <malloc.h>
        libc.mallopt(m_mmap_threshold, MMAP_THRESHOLD_BYTES)
        libc.mallopt(m_trim_threshold, MMAP_THRESHOLD_BYTES)
    except (OSError, AttributeError):
        pass


def analyse_bag(job: BagJob) -> BagResult:
    """The whole per-bag analysis (see the module docstring); never raises for a bad bag."""
    tune_allocator()
    t0 = time.perf_counter()
    row: dict[str, Any] = {"robot": job.robot, "bag": job.rel}
    try:
        res = _analyse(job, row, t0)
        res.row["fit_note"] = _relative(res.row["fit_note"], job)
        res.notes = [_relative(n, job) for n in res.notes]
        return res
    except Exception as exc:     # a corrupt bag may fail anywhere in a third-party reader: report, go on
        from ..core.errors import WheelDrError
        text = str(exc).strip() if isinstance(exc, WheelDrError) else \
            f"the bag cannot be read ({type(exc).__name__}: {str(exc).strip()[:160]}); re-copy or re-record it."
        row["error"] = _relative(text.splitlines()[0], job) if text else type(exc).__name__
        row["fit_note"] = "not analysed (the bag could not be read)"
        return BagResult(row, seconds=time.perf_counter() - t0)


def _relative(text: str, job: BagJob) -> str:
    """Messages name the bag by its path below ROOT, so results do not depend on where ROOT is mounted."""
    return text.replace(job.path, job.rel)


def _analyse(job: BagJob, row: dict[str, Any], t0: float) -> BagResult:
    from ..analysis.metrics import evaluate
    from ..runs import replay_run
    from ..bags.reader import read_run
    truth, truth_note = _truth_usable(job)
    data = read_run(job.path, job.joint_topic, job.imu_topic, truth, use_imu=job.use_imu)
    res = replay_run(data, job.settings)
    traj = res.trajectory
    notes = list(res.notes) + list(data.notes) + ([truth_note] if truth_note else [])
    stamps = np.asarray(traj.stamp_ns, dtype=np.int64)
    start_ns = int(stamps[0])
    row["start"] = iso_utc(start_ns)
    row["duration_s"] = float((stamps[-1] - stamps[0]) * 1e-9)
    row["distance_m"] = float(np.sum(np.abs(traj.travel.ds_left_m + traj.travel.ds_right_m)) / 2)
    flags = np.asarray(traj.slip.slip, dtype=bool)
    if data.truth is not None and len(data.truth) >= 2:
        side = {"slip_side": list(data.slip_side)} if data.slip_side is not None and len(data.slip_side) else {}
        ev = evaluate(traj, data.truth, res.settings, data.slip_truth_ns, bag=job.rel, name=job.settings.name, **side)
        metrics = ev.summary_row()
        for k in ("bag", "settings", "duration_s", "distance_m"):   # the bag's own columns above
            metrics.pop(k, None)
        row.update(metrics)
        at = data.truth.interpolate(stamps)
        px, py, frame = at.x_m, at.y_m, data.truth.frame_id or "truth"
    else:
        px, py, frame = np.asarray(traj.x_m), np.asarray(traj.y_m), res.settings.frames.odom
    row["slip_flag_frac"] = float(np.mean(flags)) if len(flags) else math.nan
    geometry, fit_note, fit_notes = _fit(data, res.settings, job.rel, job.segment_m)
    row.update(geometry)
    row["fit_note"] = fit_note
    row["error"] = ""
    pick = _every(len(stamps), MAX_PATH_POINTS)
    flagged = np.flatnonzero(flags)
    spick = flagged[_every(len(flagged), MAX_SLIP_POINTS)]
    return BagResult(row, start_ns, notes + fit_notes, _xy_list(px[pick], py[pick]),
                     _xy_list(px[spick], py[spick]), frame, time.perf_counter() - t0,
                     [float(getattr(res.settings.wheels, n.split(".", 1)[1])) for n in GEOMETRY_NAMES])
