"""``wheel-dr fleet``: every bag under ROOT as one Dask task, per-robot trends, bags.csv / robots.csv / fleet.json / index.html.

Shell-level orchestration: discovery (``discover``), one task per bag (``task.analyse_bag``) on
the engine (``engine``), the resume cache (``cache``), the tables (``tables``) and the page
(``wheel_dr.report.fleet_page``). The four outputs are rendered in memory once every bag is in and
then each written to a temporary name and renamed, so an interrupted run leaves the previous
outputs (or none) and never a half-written file.

Caution: odometry, fitted geometry and slip flags are not safety functions; a wear alert is advice
for maintenance, not a substitute for the machine's own checks and safety assessment.
"""
from __future__ import annotations

import contextlib
import json
import math
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Sequence

from .. import __version__
from ..runs import Progress, SettingsFile, load_settings_file
from ..core.errors import InputError
from ..report.summary import write_text_readable
from .cache import cache_key, load_cached, store_cached
from .discover import FoundBag, content_digest, find_bags, robot_params_path
from .engine import LOCAL, TaskFailure, check_scheduler, open_client, run_tasks
from .task import BagJob, BagResult, analyse_bag
from .tables import BAG_COLUMNS, ROBOT_COLUMNS, RobotSummary, bag_columns, csv_text, order_results, robot_summaries

__all__ = ["run_fleet", "FleetResult", "cmd_fleet", "IN_PROCESS", "OUTPUT_NAMES"]

IN_PROCESS = "in-process"         # no Dask: the plain loop in this process (benchmarks and checks)
OUTPUT_NAMES = ("bags.csv", "robots.csv", "fleet.json", "index.html")


@dataclass
class FleetResult:
    """Results in output order, the robots, what ran where and the files written."""

    results: list[BagResult]
    robots: list[RobotSummary]
    processed: int
    cached: int
    failed: int
    seconds: float
    notes: list[str] = field(default_factory=list)
    paths: dict[str, Path] = field(default_factory=dict)


def _jobs(root: Path, found: Sequence[FoundBag], params: str | None, truth: str | None, joint_topic: str | None,
          imu_topic: str | None, use_imu: bool, segment_m: float) -> tuple[list[BagJob], dict[str, str]]:
    default = load_settings_file(params)
    per_robot: dict[str, SettingsFile] = {}
    sources: dict[str, str] = {}
    jobs = []
    for b in found:
        if b.robot not in per_robot:
            own = robot_params_path(root, b.robot)
            per_robot[b.robot] = load_settings_file(own) if own else default
            sources[b.robot] = str(own) if own else (params or "defaults (and the URDF in each bag)")
        jobs.append(BagJob(b.path, b.rel, b.robot, per_robot[b.robot], truth, joint_topic, imu_topic, use_imu,
                           segment_m))
    return jobs, sources


def _failure_result(job: BagJob, error: str) -> BagResult:
    return BagResult({"robot": job.robot, "bag": job.rel, "fit_note": "not analysed (the task failed)",
                      "error": f"the task failed on the cluster after its retries ({error}); check the workers' "
                               "logs and that they see the same paths."})


def run_fleet(root: str | Path, out: str | Path, *, params: str | None = None, truth: str | None = None,
              scheduler: str | None = LOCAL, workers: int | None = None, robot_pattern: str | None = None,
              alert_pct: float = 0.5, resume: bool = False, progress: bool = True, joint_topic: str | None = None,
              imu_topic: str | None = None, use_imu: bool = True, segment_m: float = 2.0, client: Any = None,
              say: Callable[[str], None] | None = None) -> FleetResult:
    """Analyse every bag under ``root`` and write the four outputs into ``out`` (see the module
    docstring). ``scheduler``: 'local' (a LocalCluster of ``workers`` processes), a scheduler address,
    or IN_PROCESS; ``client``: an already connected ``distributed.Client`` to use instead."""
    t0 = time.perf_counter()
    if not (alert_pct > 0 and math.isfinite(alert_pct)):
        raise InputError(f"--alert-pct {alert_pct:g} is not a positive percentage; give e.g. 0.5.")
    if scheduler != IN_PROCESS and client is None:
        scheduler = check_scheduler(scheduler)
    root_p, out_p = Path(root), Path(out)
    if out_p.exists() and not out_p.is_dir():
        raise InputError(f"output '{out_p}' exists and is not a directory; choose a directory with --out.")
    found, notes = find_bags(root_p, robot_pattern, skip=(out_p,))
    if not found:
        raise InputError(f"no bag under '{root_p}' (rosbag2 directories, .mcap or .bag files in ROOT/<robot>/...); "
                         "check the fleet root.")
    jobs, sources = _jobs(root_p, found, params, truth, joint_topic, imu_topic, use_imu, segment_m)
    cache_dir = out_p / "cache"
    keys: list[str | None] = []
    for j in jobs:
        try:
            keys.append(cache_key(j, content_digest(j.path)))
        except OSError:
            keys.append(None)             # unreadable: the task reports it
    results: list[BagResult | None] = [None] * len(jobs)
    if resume:
        for i, (j, k) in enumerate(zip(jobs, keys)):
            if k is not None:
                results[i] = load_cached(cache_dir, k, j)
    pending = [i for i, r in enumerate(results) if r is None]
    cached = len(jobs) - len(pending)
    bar = Progress(len(jobs), "fleet") if progress else None
    failed = 0
    if bar and cached:
        bar.done = cached - 1
        bar.step(f"{cached} from the cache")

    def done(i: int, res: BagResult) -> None:
        nonlocal failed
        results[i] = res
        if res.row.get("error"):
            failed += 1
        elif keys[i] is not None:
            store_cached(cache_dir, keys[i], res)
        if bar:
            bar.step(f"{failed} failed  {jobs[i].rel}")

    try:
        if pending and scheduler == IN_PROCESS and client is None:
            for i in pending:
                done(i, analyse_bag(jobs[i]))
        elif pending:
            items = [jobs[i] for i in pending]
            ctx = contextlib.nullcontext(client) if client is not None else open_client(scheduler, workers)
            with ctx as cl:
                for k, res in run_tasks(cl, analyse_bag, items):
                    i = pending[k]
                    done(i, _failure_result(jobs[i], res.error) if isinstance(res, TaskFailure) else res)
    finally:
        if bar:
            bar.close()
    final = order_results([r for r in results if r is not None])
    robots = robot_summaries(final, alert_pct)
    fr = FleetResult(final, robots, len(pending), cached, failed, 0.0, notes)
    meta = {"wheel_dr": __version__, "root": str(root_p), "settings": sources, "truth": truth or "auto",
            "alert_pct": alert_pct, "robot_pattern": robot_pattern, "segment_m": segment_m,
            "columns": {"bags": bag_columns(final), "robots": list(ROBOT_COLUMNS)}, "notes": notes}
    fr.paths = write_outputs(out_p, fr, meta)
    fr.seconds = time.perf_counter() - t0
    return fr


def _plain(v: Any) -> Any:
    if isinstance(v, float) and not math.isfinite(v):
        return None
    return v


def fleet_document(fr: FleetResult, meta: dict) -> dict:
    """Everything of a run as one JSON-ready dict (NaN as null)."""
    bags = [{"row": {k: _plain(v) for k, v in r.row.items()}, "start_ns": r.start_ns, "notes": r.notes,
             "frame": r.frame, "path_xy": r.path_xy, "slip_xy": r.slip_xy, "geometry_used": r.geometry_used}
            for r in fr.results]
    robots = []
    for s in fr.robots:
        robots.append({"row": {k: _plain(v) for k, v in s.row.items()}, "distance_m": s.distance_m,
                       "start": s.start,
                       "values": {c: [_plain(v) for v in vs] for c, vs in s.values.items()},
                       "std_errors": {c: [_plain(v) for v in vs] for c, vs in s.std_errors.items()},
                       "trends": {c: {k: _plain(v) for k, v in vars(t).items()} for c, t in s.trends.items()},
                       "reference": {c: _plain(v) for c, v in s.reference.items()}})
    return {"meta": meta, "bags": bags, "robots": robots}


def write_outputs(out: Path, fr: FleetResult, meta: dict) -> dict[str, Path]:
    """Render the four outputs in memory, then write each atomically (temporary name, rename)."""
    from ..report.fleet_page import render_fleet_page
    cols = meta["columns"]["bags"]
    texts = {
        "bags.csv": csv_text([r.row for r in fr.results], cols),
        "robots.csv": csv_text([s.row for s in fr.robots], ROBOT_COLUMNS),
        "fleet.json": json.dumps(fleet_document(fr, meta), indent=1, allow_nan=False, default=str) + "\n",
    }
    texts["index.html"] = render_fleet_page(fr.results, fr.robots, meta)
    out.mkdir(parents=True, exist_ok=True)
    paths = {}
    for name in OUTPUT_NAMES:
        write_text_readable(out / name, texts[name])
        paths[name] = out / name
    return paths


def cmd_fleet(args) -> int:
    """The ``wheel-dr fleet`` subcommand (registered by wheel_dr/cli.py)."""
    from ..cli import SAFETY_NOTE
    if args.workers is not None and args.workers < 1:
        raise InputError(f"--workers {args.workers} is below 1; give the number of worker processes.")
    fr = run_fleet(args.root, args.out, params=args.params, truth=args.truth, scheduler=args.scheduler,
                   workers=args.workers, robot_pattern=args.robot_pattern, alert_pct=args.alert_pct,
                   resume=args.resume, progress=not args.quiet, joint_topic=args.joint_topic,
                   imu_topic=args.imu_topic, use_imu=not args.no_imu, segment_m=args.segment_m)
    for n in fr.notes:
        print(f"note: {n}")
    hours = sum(float(r.row.get("duration_s") or 0.0) for r in fr.results if not r.row.get("error")) / 3600.0
    print(f"{len(fr.results)} bags of {len(fr.robots)} robots ({hours:.2f} bag-hours): {fr.processed} analysed, "
          f"{fr.cached} from the cache, {fr.failed} with errors; {fr.seconds:.1f} s")
    for s in fr.robots:
        a = s.row.get("alert")
        print(f"  {s.row['robot']}: {s.row['bags']} bags, {s.row['distance_m']:.0f} m"
              + (f"; ALERT {a}" if a else "; no geometry alert"))
    for r in fr.results:
        if r.row.get("error"):
            print(f"  error: {r.row['bag']}: {r.row['error']}")
    print(f"wrote {', '.join(str(p) for p in fr.paths.values())}")
    print(f"report: {fr.paths['index.html'].resolve()}")
    print(f"note: {SAFETY_NOTE}")
    return 0
