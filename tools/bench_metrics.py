"""Benchmark of the offline metrics and report: evaluate() on a 1 h, 100 Hz run and the page render.

Run: .venv/bin/python tools/bench_metrics.py [--hours 1.0] [--settings 8]
Prints wall times; not part of the test suite.
"""
from __future__ import annotations

import argparse
import tempfile
import time

import numpy as np

from wheel_dr.analysis.metrics import evaluate
from wheel_dr.analysis.path import PlanarPath
from wheel_dr.core import JointSamples, Settings, run
from wheel_dr.core.motion import body_increment, integrate
from wheel_dr.report import write_report, write_summary

__all__ = ["main"]

# demo-scenario geometry ("Quokka" cart; invented numbers, demo only)
RADIUS_M, TRACK_M = 0.0825, 0.412
JOINTS = ("quokka_left_wheel_joint", "quokka_right_wheel_joint")


def _drive(n: int, rate_hz: float, k: float, seed: int = 0) -> tuple[JointSamples, PlanarPath, np.ndarray]:
    rng = np.random.default_rng(seed)
    t = np.arange(n) / rate_hz
    v = 0.5 + 0.1 * np.sin(0.05 * t)
    w = 0.3 * np.sin(0.07 * t)
    dl = (v - 0.5 * w * TRACK_M) / rate_hz
    dr = (v + 0.5 * w * TRACK_M) / rate_hz
    dl[0] = dr[0] = 0.0
    x, y, th, *_ = integrate(*body_increment(dl, dr, TRACK_M), "exact")
    ml = dl + rng.standard_normal(n) * np.sqrt(k * np.abs(dl))
    mr = dr + rng.standard_normal(n) * np.sqrt(k * np.abs(dr))
    pos = np.column_stack([np.cumsum(ml), np.cumsum(mr)]) / RADIUS_M
    stamp = 1_800_000_000_000_000_000 + np.round(t * 1e9).astype(np.int64)
    events = np.array([[stamp[i], stamp[i + 150]] for i in range(1000, n - 200, 20000)], dtype=np.int64)
    return JointSamples(stamp, JOINTS, pos, np.zeros_like(pos)), PlanarPath(stamp, x, y, th), events


def main() -> None:
    """Time evaluate() per settings and the report for a synthetic drive."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--hours", type=float, default=1.0)
    ap.add_argument("--settings", type=int, default=8)
    args = ap.parse_args()
    rate = 100.0
    n = int(args.hours * 3600 * rate)
    k = 2e-4
    samples, truth, events = _drive(n, rate, k)
    evs = []
    t_run = t_eval = 0.0
    for i in range(args.settings):
        r = RADIUS_M * (1.0 + 0.002 * i)
        s = Settings.from_flat({"wheels.left_radius": r, "wheels.right_radius": r, "wheels.track_width": TRACK_M,
                                "noise.k_left": k, "noise.k_right": k, "wheels.left_joints": (JOINTS[0],),
                                "wheels.right_joints": (JOINTS[1],)}, base=Settings())
        t0 = time.perf_counter()
        traj = run(samples, s)
        t1 = time.perf_counter()
        evs.append(evaluate(traj, truth, s, events, bag="bench", name=f"radius_{i}"))
        t2 = time.perf_counter()
        t_run += t1 - t0
        t_eval += t2 - t1
    with tempfile.TemporaryDirectory() as out:
        t0 = time.perf_counter()
        write_summary(out, evs)
        page = write_report(out, evs)
        t_rep = time.perf_counter() - t0
        size = page.stat().st_size
    print(f"samples per run          {n}")
    print(f"core run (mean)          {t_run / args.settings:.3f} s")
    print(f"evaluate (mean)          {t_eval / args.settings:.3f} s   ({evs[0].metrics['nees_segments']} NEES segments, "
          f"{evs[0].metrics['rpe_segments']} RPE segments)")
    print(f"summary + report         {t_rep:.3f} s for {args.settings} settings, page {size / 1e6:.2f} MB")


if __name__ == "__main__":
    main()
