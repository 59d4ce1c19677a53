"""Offline orchestration: decode each bag once, run K settings files on it, evaluate against truth.

Shell-level glue between the bag reader, the core and the metrics: no numbers are changed here.
Geometry for a settings file comes from the file where it gives the radii / track, else from the
URDF in the bag's robot description (``wheel_dr.bags.urdf``), else the defaults; the source is
reported. Several bags run in parallel worker processes; with fewer bags than workers a bag is
decoded once in the parent and its settings runs are spread over forked workers that inherit it.
"""
from __future__ import annotations

import multiprocessing
import os
import sys
import time
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Sequence

import numpy as np

from .bags.reader import RunData, TruthSpec, read_run
from .bags.urdf import geometry_from_urdf
from .core import Settings, Trajectory, run
from .core.errors import InputError, WheelDrError
from .params import load_settings, parse_params_text

__all__ = ["SettingsFile", "load_settings_file", "settings_for_run", "replay_run", "ReplayResult",
           "compare_bags", "CompareResult", "Progress", "GEOMETRY_KEYS", "default_jobs"]

GEOMETRY_KEYS = ("wheels.left_radius", "wheels.right_radius", "wheels.track_width")
JOINT_KEYS = ("wheels.left_joints", "wheels.right_joints")


@dataclass(frozen=True)
class SettingsFile:
    """A parameters file loaded for the offline tool: its name, validated settings and the dotted
    names the file itself gives (the rest are defaults)."""

    name: str
    path: str | None
    settings: Settings
    given: frozenset[str]


def load_settings_file(path: str | os.PathLike | None) -> SettingsFile:
    """Load ``path`` (None: the defaults) keeping track of which parameters the file sets."""
    if path is None:
        return SettingsFile("defaults", None, Settings(), frozenset())
    settings = load_settings(path)
    given = frozenset(parse_params_text(Path(path).read_text(encoding="utf-8"), f"parameters file '{path}'"))
    return SettingsFile(Path(path).stem, str(path), settings, given)


def settings_for_run(sf: SettingsFile, data: RunData) -> tuple[Settings, list[str]]:
    """The settings to run on ``data`` and one line per choice made (geometry and joint sources)."""
    s = sf.settings
    if s.drive.kind != "differential":
        return _table_settings_for_run(sf, data)
    notes: list[str] = []
    values: dict[str, object] = {}
    names = data.samples.names
    if not any(k in sf.given for k in JOINT_KEYS):
        want = tuple(s.wheels.left_joints) + tuple(s.wheels.right_joints)
        if not all(n in names for n in want):
            left = [n for n in names if "left" in n.lower()]
            right = [n for n in names if "right" in n.lower()]
            if len(left) == 1 and len(right) == 1:
                values["wheels.left_joints"] = left
                values["wheels.right_joints"] = right
                notes.append(f"joints: {left[0]} (left), {right[0]} (right), picked from the joint-state names "
                             "(the parameters give none)")
    missing = [k for k in GEOMETRY_KEYS if k not in sf.given]
    if values:
        s = s.with_values(values)
    if not missing:
        notes.append(f"geometry: from the parameters file ({sf.path})")
    elif data.urdf:
        g = geometry_from_urdf(data.urdf, s.wheels.left_joints, s.wheels.right_joints, s.frames.base)
        found = {"wheels.left_radius": g.left_radius_m, "wheels.right_radius": g.right_radius_m,
                 "wheels.track_width": g.track_width_m}
        s = s.with_values({k: found[k] for k in missing})
        where = "the parameters file and " if len(missing) < 3 else ""
        notes.append(f"geometry: {where}the URDF on {data.urdf_topic} ({', '.join(k.split('.')[1] for k in missing)}: "
                     "wheel link cylinder radius, track from the wheel joints' origins)")
    else:
        notes.append("geometry: defaults (the parameters give no radii or track and the bag has no robot "
                     "description); pass --params with wheels.left_radius, right_radius, track_width")
    w = s.wheels
    notes.append(f"  left radius {w.left_radius:.6g} m, right radius {w.right_radius:.6g} m, "
                 f"track {w.track_width:.6g} m")
    return s, notes


def _table_settings_for_run(sf: SettingsFile, data: RunData) -> tuple[Settings, list[str]]:
    """Settings and notes for a wheel-table base (``drive.kind`` other than differential)."""
    s = sf.settings
    model = s.drive_model()          # names the empty geometry array when the table is incomplete
    where = f"the parameters file ({sf.path})" if sf.path else "the defaults"
    notes = [f"geometry: {s.drive.kind} wheel table from {where}"]
    for i, joint in enumerate(model.wheel_joints):
        steer = model.steer_joints[i]
        notes.append(f"  wheel {i} {joint or '(no encoder)'}{f' steered by {steer}' if steer else ''}: "
                     f"x {model.x[i]:.6g} m, y {model.y[i]:.6g} m, radius {model.radius[i]:.6g} m")
    return s, notes


@dataclass
class ReplayResult:
    """One settings file run over one bag."""

    settings: Settings
    trajectory: Trajectory
    notes: list[str]
    seconds: float


def replay_run(data: RunData, sf: SettingsFile) -> ReplayResult:
    """Run the core over a decoded bag with one settings file (gyro held per sample when present)."""
    t0 = time.perf_counter()
    settings, notes = settings_for_run(sf, data)
    cmd = data.cmd_v_mps
    if cmd is not None and data.cmd_age_s is not None:
        cmd = np.where(data.cmd_age_s <= settings.slip.command_timeout_s, cmd, np.nan)   # stale commands count as none
    traj = run(data.samples, settings, gyro_z_radps=data.gyro_z_radps, accel_x_mps2=data.accel_x_mps2,
               up_x=data.up_x, cmd_v_mps=cmd)
    if len(traj) == 0:
        raise InputError(f"no joint-state sample of '{data.path}' could be used (every one was skipped: "
                         f"{', '.join(f'{k} {v}' for k, v in traj.counters.items() if v)}); check the joint names "
                         "and stamps in the bag.")
    return ReplayResult(settings, traj, notes, time.perf_counter() - t0)


# -- progress --------------------------------------------------------------------------------------
class Progress:
    """A plain-text progress bar on stderr (redrawn in place on a terminal, one line per step otherwise)."""

    def __init__(self, total: int, label: str, stream=None, width: int = 28) -> None:
        self.total = max(1, int(total))
        self.label = label
        self.done = 0
        self.stream = stream if stream is not None else sys.stderr
        self.width = width
        self.start = time.perf_counter()
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)())
        if self.tty:
            self._draw("")

    def _draw(self, what: str) -> None:
        frac = self.done / self.total
        bar = "#" * int(round(frac * self.width))
        text = (f"{self.label} [{bar:<{self.width}}] {self.done}/{self.total} "
                f"{time.perf_counter() - self.start:5.1f} s {what}")
        if self.tty:
            self.stream.write("\r" + text[:118].ljust(118))
        else:
            self.stream.write(text.rstrip() + "\n")
        self.stream.flush()

    def step(self, what: str = "") -> None:
        self.done += 1
        self._draw(what)

    def close(self) -> None:
        if self.tty:
            self.stream.write("\n")
            self.stream.flush()


# -- compare ---------------------------------------------------------------------------------------
@dataclass
class CompareResult:
    """Evaluations (one per bag and settings file, in bag then settings order) and notes per bag."""

    evaluations: list
    notes: dict[str, list[str]] = field(default_factory=dict)
    decode_s: dict[str, float] = field(default_factory=dict)
    bag_info: dict[str, dict] = field(default_factory=dict)


def default_jobs() -> int:
    """Worker processes by default: the CPUs this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)


def _bag_label(path: str, all_paths: Sequence[str]) -> str:
    name = Path(path).name or str(path)
    if sum(1 for p in all_paths if (Path(p).name or str(p)) == name) > 1:
        return str(path)
    return name


def _read(path: str, opts: dict) -> RunData:
    return read_run(path, opts.get("joint_topic"), opts.get("imu_topic"), opts.get("truth"), need_truth=True,
                    use_imu=opts.get("use_imu", True))


def _evaluate_one(data: RunData, sf: SettingsFile, label: str, opts: dict):
    from .analysis.metrics import evaluate
    res = replay_run(data, sf)
    ev = evaluate(res.trajectory, data.truth, res.settings, data.slip_truth_ns, bag=label, name=sf.name,
                  **({"slip_side": list(data.slip_side)} if data.slip_side is not None and len(data.slip_side) else {}))
    return ev, res.notes


def _info(data: RunData, decode_s: float) -> dict:
    return {"samples": len(data), "joint_topic": data.joint_topic, "imu_topic": data.imu_topic,
            "truth": data.truth_source, "slip_labels": 0 if data.slip_truth_ns is None else len(data.slip_truth_ns),
            "decode": data.decode, "decode_s": round(decode_s, 3), "storage": data.storage}


def _whole_bag(path: str, label: str, sfs: Sequence[SettingsFile], opts: dict):
    """Worker: decode one bag and run every settings file on it."""
    t0 = time.perf_counter()
    data = _read(path, opts)
    dt = time.perf_counter() - t0
    out = [_evaluate_one(data, sf, label, opts) for sf in sfs]
    return label, [e for e, _ in out], [n for _, ns in out for n in ns], _info(data, dt)


_SHARED: dict[str, RunData] = {}   # decoded bags inherited by forked workers


def _shared_task(label: str, k: int, sfs: Sequence[SettingsFile], opts: dict):
    return label, k, _evaluate_one(_SHARED[label], sfs[k], label, opts)


def compare_bags(bags: Sequence[str], settings_files: Sequence[SettingsFile], *, truth: str | TruthSpec | None = None,
                 joint_topic: str | None = None, imu_topic: str | None = None, use_imu: bool = True,
                 jobs: int | None = None, progress: bool = True,
                 on_note: Callable[[str], None] | None = None, scheduler: str | None = None,
                 workers: int | None = None) -> CompareResult:
    """Decode every bag once and evaluate every settings file on it (see the module docstring).

    ``scheduler`` ('local' or a Dask scheduler address) runs one task per bag on that Dask cluster
    (``wheel_dr.fleet.commands``) instead of the process pool; ``workers`` sizes a local cluster."""
    if not bags:
        raise InputError("no bag given; name one or more bags to compare.")
    if not settings_files:
        raise InputError("no settings given; add --params FILE once per settings file to compare.")
    names = [sf.name for sf in settings_files]
    if len(set(names)) != len(names):
        raise InputError("two settings files have the same name; give files with different names.")
    opts = {"joint_topic": joint_topic, "imu_topic": imu_topic, "truth": truth, "use_imu": use_imu}
    if scheduler:
        from .fleet.commands import compare_on_cluster
        return compare_on_cluster(bags, settings_files, opts, scheduler, workers, progress)
    jobs = default_jobs() if jobs is None else max(1, int(jobs))
    labels = [_bag_label(b, bags) for b in bags]
    result = CompareResult([])
    k = len(settings_files)
    evals: dict[str, list] = {lb: [None] * k for lb in labels}
    bar = Progress(len(bags) * k, "compare", ) if progress else None
    ctx = multiprocessing.get_context("fork")
    try:
        if len(bags) >= jobs or jobs == 1 or len(bags) * k == 1:
            if jobs == 1 or len(bags) == 1:
                for path, label in zip(bags, labels):
                    t0 = time.perf_counter()
                    data = _read(path, opts)
                    dt = time.perf_counter() - t0
                    result.bag_info[label] = _info(data, dt)
                    notes: list[str] = []
                    for i, sf in enumerate(settings_files):
                        ev, ns = _evaluate_one(data, sf, label, opts)
                        evals[label][i] = ev
                        notes += [f"{sf.name}: {n}" for n in ns]
                        if bar:
                            bar.step(f"{label} / {sf.name}")
                    result.notes[label] = notes
            else:
                with ProcessPoolExecutor(max_workers=min(jobs, len(bags)), mp_context=ctx) as pool:
                    futs = [pool.submit(_whole_bag, path, label, settings_files, opts) for path, label in zip(bags, labels)]
                    for fut in as_completed(futs):
                        label, evs, ns, info = fut.result()
                        evals[label] = evs
                        result.notes[label] = ns
                        result.bag_info[label] = info
                        if bar:
                            bar.done += k - 1
                            bar.step(label)
        else:
            for path, label in zip(bags, labels):
                t0 = time.perf_counter()
                _SHARED[label] = _read(path, opts)
                result.bag_info[label] = _info(_SHARED[label], time.perf_counter() - t0)
            with ProcessPoolExecutor(max_workers=min(jobs, len(bags) * k), mp_context=ctx) as pool:
                futs = [pool.submit(_shared_task, label, i, settings_files, opts) for label in labels for i in range(k)]
                for fut in as_completed(futs):
                    label, i, (ev, ns) = fut.result()
                    evals[label][i] = ev
                    result.notes.setdefault(label, []).extend(f"{settings_files[i].name}: {n}" for n in ns)
                    if bar:
                        bar.step(f"{label} / {settings_files[i].name}")
    finally:
        _SHARED.clear()
        if bar:
            bar.close()
    order = {f"{sf.name}: ": i for i, sf in enumerate(settings_files)}
    for label, notes in result.notes.items():
        notes.sort(key=lambda n: next((i for pre, i in order.items() if n.startswith(pre)), 0))
    result.evaluations = [e for lb in labels for e in evals[lb]]
    return result
