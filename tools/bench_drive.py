"""Drive-model figures: wheel-table increments per kind on 360,000 samples against the differential path.

Prints, per kind, the batch time of ``increment`` + ``increment_covariance`` over 360,000 steps
(1 hour at 100 Hz), its ratio to ``DifferentialDrive``, and the time of one single-sample call
(what a streaming step would spend in the drive model). Not part of ``make test``.
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


def _time(fn, repeat: int = 3) -> float:
    best = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def main() -> None:
    rng = np.random.default_rng(1)
    diff = DifferentialDrive(0.45)
    s = 0.01 + 0.002 * rng.standard_normal((N, 2))
    t_diff = _time(lambda: (diff.increment(s), diff.increment_covariance(s)))
    print(f"differential: batch {t_diff * 1e3:.1f} ms for {N} samples")
    for kind, (model, twist) in tables().items():
        tw = np.asarray(twist) * (1.0 + 0.2 * rng.standard_normal((N, 1)))
        spin, steer = model.inverse(tw, np.full(N, 0.01))
        t = _time(lambda: (model.increment(spin, steer), model.increment_covariance(spin, steer)), repeat=1)
        one_s, one_st = spin[:1], None if steer is None else steer[:1]
        k = 2000
        t0 = time.perf_counter()
        for _ in range(k):
            model.increment(one_s, one_st)
            model.increment_covariance(one_s, one_st)
        step = (time.perf_counter() - t0) / k
        print(f"{kind:10s}: batch {t * 1e3:8.1f} ms ({t / t_diff:6.1f} x differential), "
              f"single step {step * 1e6:7.1f} us")


if __name__ == "__main__":
    main()
