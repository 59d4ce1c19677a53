"""Benchmark of calibration: run time on a ten-minute 100 Hz drive and recovered figures over several drives.

Prints, per drive: time to prepare and calibrate (60k samples), the errors of the fitted radii and
track against the simulator's truth (targets 0.1 % and 0.2 %), of the fitted k (target 10 %), and
the held-out mean NEES against its chi-square 95 % interval. Not part of the test suite.

    .venv/bin/python tools/bench_calibration.py [--drives 6] [--k 3e-6]
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "test"))


from wheel_dr.analysis.calibration import calibrate, geometry_of, noise_vector, prepare_run  # noqa: E402
from wheel_dr.core import Settings  # noqa: E402
from wheel_dr.demo.scenarios import varied_drive_scenario, varied_route  # noqa: E402  (the tests' varied route)
from wheel_dr.sim import Scenario, simulate  # noqa: E402


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--drives", type=int, default=6)
    ap.add_argument("--k", type=float, default=3e-6, help="k_left (k_right is 1.5 times it), metres")
    ap.add_argument("--routes", choices=("tests", "sim"), default="tests",
                    help="the tests' varied routes, or wheel_dr.demo.scenarios.varied_drive_scenario (route seeds 7, 8, ...)")
    args = ap.parse_args()
    k = np.array([args.k, 1.5 * args.k])
    print(f"k_left {k[0]:.2g} m, k_right {k[1]:.2g} m; errors in % of the truth; NEES of the held-out drive")
    print(" drive  samples  prep s  fit s   left r   right r    track   se track  k_left  k_right  NEES  [95 % interval]")
    worst = np.zeros(5)
    times = []
    for d in range(args.drives):
        if args.routes == "sim":
            sc = varied_drive_scenario(600.0, route_seed=7 + d, k_left_m=k[0], k_right_m=k[1])
            held = varied_drive_scenario(600.0, route_seed=107 + d, k_left_m=k[0], k_right_m=k[1])
        else:
            sc = Scenario(name="bench", segments=varied_route(d), k_left_m=k[0], k_right_m=k[1])
            held = Scenario(name="held", segments=varied_route(d + 100), k_left_m=k[0], k_right_m=k[1])
        train, hold = simulate(sc, seed=2 * d + 1), simulate(held, seed=2 * d + 2)
        start = Settings.from_flat({**sc.nominal_params, "noise.k_left": 5e-4, "noise.k_right": 5e-4})
        t0 = time.perf_counter()
        run = prepare_run(train.joint_samples(), train.truth_path(), start, "train")
        hrun = prepare_run(hold.joint_samples(), hold.truth_path(), start, "held")
        t1 = time.perf_counter()
        res = calibrate([run], start, holdout=[hrun])
        t2 = time.perf_counter()
        times.append(t2 - t1)
        truth = np.array([sc.true_left_radius_m, sc.true_right_radius_m, sc.true_track_m])
        g = 100 * (geometry_of(res.after) / truth - 1)
        kk = 100 * (noise_vector(res.after) / k - 1)
        h = res.holdout_after[0]
        worst = np.maximum(worst, np.abs(np.concatenate([g, kk])))
        print(f" {d:5d} {len(train):8d} {t1 - t0:7.3f} {t2 - t1:6.2f} {g[0]:+8.3f} {g[1]:+9.3f} {g[2]:+8.3f} "
              f"{100 * res.systematic.relative_std_error[2]:9.3f} {kk[0]:+7.1f} {kk[1]:+8.1f} {h.nees_mean:5.2f}  "
              f"[{h.nees_lo:.2f}, {h.nees_hi:.2f}] {'ok' if h.nees_inside else 'OUT'}")
    print(f"worst |error| %: left r {worst[0]:.3f}, right r {worst[1]:.3f}, track {worst[2]:.3f}, "
          f"k_left {worst[3]:.1f}, k_right {worst[4]:.1f}; fit time median {np.median(times):.2f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
