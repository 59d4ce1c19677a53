"""Benchmark: the fleet task over 32 simulated bags in a plain loop and on Dask with 1 and 2 workers.

Run: ``.venv/bin/python tools/bench_fleet.py [--bags 32] [--minutes 3] [--rate 50] [--repeats 3] [--keep DIR]``.
Prints the figures.

* bags: ``--bags`` varied drives (wheel_dr.sim) of ``--minutes`` each at ``--rate`` Hz with truth,
  four invented carts (wheel_dr.fleet.demo), rosbag2 mcap / sqlite3 and ROS 1;
* loop: ``wheel_dr.fleet.task.analyse_bag`` over every bag, one after another in this process;
* dask 1 / dask 2: the same tasks through ``wheel_dr.fleet.engine.run_tasks`` on a LocalCluster of
  1 and 2 single-threaded worker processes, started and warmed (modules imported) before timing;
  the start-up and a whole ``wheel-dr fleet`` run (cluster, tasks, outputs) are printed apart.
  The three run in rounds, interleaved; the fastest round of each counts.

BLAS threads are pinned to one in this process too (as Dask's nanny pins them in its workers), so
the loop and a worker do the same single-threaded work and the difference is Dask's own cost.

Targets: 2 workers at least 1.6x as fast as 1 worker on a 2-core machine; Dask's overhead per bag
(dask 1 minus loop) under 15 % of the loop's time per bag.
"""
from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):   # before numpy loads
    os.environ.setdefault(_var, "1")
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from wheel_dr.fleet.demo import DemoRobot, build_demo_fleet  # noqa: E402
from wheel_dr.fleet.discover import find_bags  # noqa: E402
from wheel_dr.fleet.engine import open_client, run_tasks  # noqa: E402
from wheel_dr.fleet.run import _jobs, run_fleet  # noqa: E402
from wheel_dr.fleet.task import analyse_bag  # noqa: E402

ROBOTS = (DemoRobot("quokka-2", left_off=0.0005, fmt="mcap"),
          DemoRobot("potoroo", radius_m=0.076, track_m=0.384, wear_per_km=0.01, fmt="sqlite3"),
          DemoRobot("bettong", radius_m=0.09, track_m=0.45, fmt="ros1"),
          DemoRobot("potoroo", radius_m=0.08, track_m=0.40, track_off=0.002, fmt="mcap"))


def _warm() -> int:
    import wheel_dr.analysis.calibration  # noqa: F401
    import wheel_dr.analysis.metrics  # noqa: F401
    import wheel_dr.bags.reader  # noqa: F401
    return os.getpid()


def _timed(client, jobs) -> float:
    t0 = time.perf_counter()
    n = sum(1 for _ in run_tasks(client, analyse_bag, jobs))
    assert n == len(jobs)
    return time.perf_counter() - t0


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--bags", type=int, default=32)
    ap.add_argument("--minutes", type=float, default=3.0)
    ap.add_argument("--rate", type=float, default=50.0)
    ap.add_argument("--repeats", type=int, default=3, help="rounds of loop / 1 worker / 2 workers; the "
                    "fastest round of each counts (other load on the machine only ever slows a round)")
    ap.add_argument("--keep", metavar="DIR", help="build (or reuse) the bags in DIR and keep them")
    args = ap.parse_args()
    work = Path(args.keep) if args.keep else Path(tempfile.mkdtemp(prefix="wheel_dr_bench_fleet_"))
    try:
        per_robot = -(-args.bags // len(ROBOTS))
        t0 = time.perf_counter()
        build_demo_fleet(work / "fleet", ROBOTS, bags_per_robot=per_robot, duration_s=60.0 * args.minutes,
                         rate_hz=args.rate)
        print(f"built {len(ROBOTS) * per_robot} bags in {time.perf_counter() - t0:.1f} s under {work / 'fleet'}")
        found, _ = find_bags(work / "fleet")
        found = found[:args.bags]
        jobs, _ = _jobs(work / "fleet", found, None, None, None, None, True, 2.0)
        _warm()
        results = [analyse_bag(j) for j in jobs]
        bad = [r.row["bag"] for r in results if r.row.get("error")]
        hours = sum(float(r.row["duration_s"]) for r in results if not r.row.get("error")) / 3600.0
        print(f"{len(jobs)} bags, {hours:.2f} bag-hours, {len(bad)} with errors {bad or ''}; "
              f"{os.cpu_count()} CPUs, load average {os.getloadavg()[0]:.1f} (the machine is shared with other "
              "work: figures vary between runs)")
        times: dict[str, list[float]] = {"loop": [], "dask1": [], "dask2": []}
        t0 = time.perf_counter()
        with open_client("local", 1) as c1, open_client("local", 2) as c2:
            start_s = time.perf_counter() - t0
            c1.run(_warm)
            c2.run(_warm)
            for _ in range(max(1, args.repeats)):
                t0 = time.perf_counter()
                for j in jobs:
                    analyse_bag(j)
                times["loop"].append(time.perf_counter() - t0)
                times["dask1"].append(_timed(c1, jobs))
                times["dask2"].append(_timed(c2, jobs))
        t0 = time.perf_counter()
        fr = run_fleet(work / "fleet", work / "out", scheduler="local", workers=2, progress=False)
        whole_s = time.perf_counter() - t0
        n = len(jobs)
        loop_s, dask1_s, dask2_s = (min(times[k]) for k in ("loop", "dask1", "dask2"))
        print(f"{'':<22}{'best s':>9}{'s per bag':>11}{'s per bag-hour':>16}   all rounds s")
        for name, key in (("in-process loop", "loop"), ("dask, 1 worker", "dask1"), ("dask, 2 workers", "dask2")):
            t = min(times[key])
            print(f"{name:<22}{t:9.2f}{t / n:11.3f}{t / hours:16.2f}   {' '.join(f'{x:.1f}' for x in times[key])}")
        speedup = dask1_s / dask2_s
        overhead = (dask1_s - loop_s) / n
        print(f"2 workers vs 1 worker: {speedup:.2f}x (target >= 1.6x) {'ok' if speedup >= 1.6 else 'MISSED'}")
        print(f"Dask overhead per bag (1 worker minus loop): {1000 * overhead:.1f} ms = "
              f"{100 * overhead / (loop_s / n):.1f} % of the loop's {1000 * loop_s / n:.0f} ms per bag "
              f"(target < 15 %) {'ok' if overhead < 0.15 * loop_s / n else 'MISSED'}")
        print(f"start-up of both clusters (not in the figures above): {start_s:.1f} s")
        print(f"whole `wheel-dr fleet --workers 2` run (start-up, {fr.processed} tasks, outputs): {whole_s:.1f} s; "
              f"load average now {os.getloadavg()[0]:.1f}")
    finally:
        if not args.keep:
            shutil.rmtree(work, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
