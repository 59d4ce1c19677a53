"""The offline command ``wheel-dr`` (placeholder: only ``demo``, a short built-in drive through the core)."""
from __future__ import annotations

import argparse
import sys

import numpy as np

from .core import JointSamples, Settings, run

__all__ = ["main"]


def _demo(_: argparse.Namespace) -> int:
    settings = Settings.from_flat({"wheels.left_radius": 0.0825, "wheels.right_radius": 0.0825,
                                   "wheels.track_width": 0.412})
    rate_hz, seconds = 100.0, 20.0
    t = np.arange(1, int(rate_hz * seconds) + 1) / rate_hz
    w_left = np.where(t < 10, 6.0, 5.0)
    w_right = np.where(t < 10, 6.0, 7.0)
    pos = np.column_stack([np.cumsum(w_left) / rate_hz, np.cumsum(w_right) / rate_hz])
    samples = JointSamples((t * 1e9).astype(np.int64), ("left_wheel_joint", "right_wheel_joint"), pos,
                           np.column_stack([w_left, w_right]))
    traj = run(samples, settings)
    print("t [s]    x [m]    y [m]  yaw [rad]   sd x [m]  sd y [m]  sd yaw [rad]")
    for i in np.linspace(0, len(traj) - 1, 6).astype(int):
        sd = np.sqrt(np.diag(traj.cov[i]))
        print(f"{traj.t_s[i]:5.2f} {traj.x_m[i]:8.3f} {traj.y_m[i]:8.3f} {traj.yaw_rad[i]:9.3f} "
              f"{sd[0]:10.4f} {sd[1]:9.4f} {sd[2]:12.4f}")
    return 0


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="wheel-dr", description="Offline wheel odometry tools.")
    sub = parser.add_subparsers(dest="command", required=True)
    sub.add_parser("demo", help="run a short built-in drive through the estimator core").set_defaults(func=_demo)
    args = parser.parse_args(argv)
    return args.func(args)


if __name__ == "__main__":
    sys.exit(main())
