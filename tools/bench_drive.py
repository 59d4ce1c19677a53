"""Drive-model figures: wheel-table increments per kind on 360,000 samples against the differential path.

Prints, per kind, the batch time of ``WheelTable.solve`` (increment, covariance with the steering
noise, whitened residual) over 360,000 steps (1 hour at 100 Hz), its ratio to ``DifferentialDrive``
``increment`` + ``increment_covariance``, and the time of one ``step_floats`` call (what a streaming
step spends in the drive model). Wall and CPU (process_time) times. Not part of ``make test``;
``tools/bench_core.py`` times the whole batch path against the differential estimator.
"""
from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "test"))
from test_core_drive import tables  # noqa: E402  (the tests' invented tables, one per kind)

from wheel_dr.core.drive import DifferentialDrive  # noqa: E402

N = 360_000


def _time(fn, repeat: int = 3) -> tuple[float, float]:
    wall = cpu = float("inf")
    for _ in range(repeat):
        w0, c0 = time.perf_counter(), time.process_time()
        fn()
        wall, cpu = min(wall, time.perf_counter() - w0), min(cpu, time.process_time() - c0)
    return wall, cpu


def main() -> None:
    rng = np.random.default_rng(1)
    diff = DifferentialDrive(0.45)
    s = 0.01 + 0.002 * rng.standard_normal((N, 2))
    d_wall, d_cpu = _time(lambda: (diff.increment(s), diff.increment_covariance(s)))
    print(f"differential: batch {d_wall * 1e3:.1f} ms wall, {d_cpu * 1e3:.1f} ms CPU for {N} samples")
    for kind, (model, twist) in tables().items():
        tw = np.asarray(twist) * (1.0 + 0.2 * rng.standard_normal((N, 1)))
        spin, steer = model.inverse(tw, np.full(N, 0.01))
        wall, cpu = _time(lambda: model.solve(spin, steer))
        k = 20_000
        sp = spin[:k].tolist()
        st = [None] * k if steer is None else steer[:k].tolist()
        step = model.step_floats
        w0, c0 = time.perf_counter(), time.process_time()
        for a, b in zip(sp, st):
            step(a, b)
        s_wall, s_cpu = (time.perf_counter() - w0) / k, (time.process_time() - c0) / k
        print(f"{kind:10s}: solve {wall * 1e3:7.1f} ms ({wall / d_wall:5.1f} x differential), CPU {cpu * 1e3:7.1f} ms "
              f"({cpu / d_cpu:5.1f} x); step_floats {s_wall * 1e6:6.1f} us (CPU {s_cpu * 1e6:5.1f} us)")


if __name__ == "__main__":
    main()
