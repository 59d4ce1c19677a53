#!/usr/bin/env python3
"""Benchmark of the estimator core: batch ``run`` over one hour at 100 Hz, streaming ``step`` per sample.

Usage: .venv/bin/python tools/bench_core.py [--samples 360000] [--stream-samples 36000] [--repeat 3]
                                            [--slip on|off] [--kinds-only]

The drive is the invented demo cart "Quokka" (radii 0.0829/0.0822 m, track 0.4185 m) turning
gently for an hour; every integration scheme x noise model is timed. Figures are printed, not
asserted (speed targets live here, not in the test suite).

A second section times the wheel-table drive models, one invented table per kind (the tables of
test/test_core_drive.py): the batch path ``WheelTable.solve`` + ``integrate_body`` + the step noise
(``body_to_odom_noise``) + ``propagate_covariance`` over ``--samples`` steps against the
differential ``run`` on as many samples (exact scheme, per-wheel noise), their ratio (target: 3x or
less), and the streaming ``WheelTable.step_floats`` per call (target: under 100 us).
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

from wheel_dr.core import Estimator, JointSamples, Settings, run
from wheel_dr.core.drive import integrate_body
from wheel_dr.core.drive.base import body_to_odom_noise
from wheel_dr.core.noise import propagate_covariance

__all__ = ["make_drive", "bench_batch", "bench_stream", "bench_kinds", "main"]

KINDS = ("tricycle", "ackermann", "mecanum", "omni", "swerve")

LEFT, RIGHT = "quokka_left_wheel_joint", "quokka_right_wheel_joint"
SCHEMES = ("euler", "midpoint", "exact")
MODELS = ("per_wheel", "motion_model")


def make_drive(n: int, rate_hz: float = 100.0) -> JointSamples:
    """Joint positions (rad) of an n-sample drive at ``rate_hz`` with varying curvature."""
    t = np.arange(n) / rate_hz
    omega_l = 5.0 + 2.0 * np.sin(0.05 * t)
    omega_r = 5.0 + 2.0 * np.cos(0.031 * t)
    dt = 1.0 / rate_hz
    pos = np.column_stack([np.cumsum(omega_l) * dt, np.cumsum(omega_r) * dt])
    stamp_ns = 1_764_000_000_000_000_000 + np.arange(n, dtype=np.int64) * int(round(1e9 / rate_hz))
    return JointSamples(stamp_ns, (LEFT, RIGHT), pos, np.column_stack([omega_l, omega_r]))


def settings_for(scheme: str, model: str, slip: bool = True) -> Settings:
    return Settings.from_flat({"wheels.left_joints": [LEFT], "wheels.right_joints": [RIGHT],
                               "wheels.left_radius": 0.0829, "wheels.right_radius": 0.0822,
                               "wheels.track_width": 0.4185, "integration": scheme, "noise.model": model,
                               "slip.enabled": slip})


def bench_batch(samples: JointSamples, settings: Settings, repeat: int) -> float:
    """Best wall time (s) of ``run`` over ``samples``."""
    best = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        traj = run(samples, settings)
        best = min(best, time.perf_counter() - t0)
    assert len(traj) == len(samples)
    return best


def bench_stream(samples: JointSamples, settings: Settings) -> float:
    """Mean wall time (s) of one ``Estimator.step``."""
    est = Estimator(settings)
    names = list(samples.names)
    pos = samples.position.tolist()
    vel = samples.velocity.tolist()
    stamps = samples.stamp_ns.tolist()
    t0 = time.perf_counter()
    for k in range(len(stamps)):
        est.step(stamps[k], names, pos[k], vel[k])
    elapsed = time.perf_counter() - t0
    return elapsed / len(stamps)


def kind_tables() -> dict:
    """The invented tables of the drive-model tests, one per kind, with a twist each can drive."""
    sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "test"))
    from test_core_drive import tables  # noqa: E402  (the tests' invented geometry)
    return tables()


def table_path(model, spin: np.ndarray, steer: np.ndarray | None, scheme: str = "exact") -> np.ndarray:
    """The batch pose-and-covariance path of a table kind: solve, integrate, step noise, propagation."""
    tau, cov, _ = model.solve(spin, steer)
    x, y, _, before = integrate_body(tau, scheme)
    q = body_to_odom_noise(before, tau, cov, scheme)
    return propagate_covariance(x, y, q)


def _best(fn, repeat: int) -> tuple[float, float]:
    """Best wall time and best CPU time (process_time, less sensitive to other work on the machine), s."""
    wall = cpu = float("inf")
    for _ in range(repeat):
        w0, c0 = time.perf_counter(), time.process_time()
        fn()
        wall, cpu = min(wall, time.perf_counter() - w0), min(cpu, time.process_time() - c0)
    return wall, cpu


def bench_kinds(n: int, stream_n: int, repeat: int, slip: bool) -> None:
    """Print, per table kind, the batch time of ``table_path`` on n steps, its ratio to the
    differential ``run`` on n samples and the mean time of one ``step_floats`` call (wall and CPU)."""
    drive = make_drive(n)
    diff = settings_for("exact", "per_wheel", slip)
    d_wall, d_cpu = _best(lambda: run(drive, diff), repeat)
    rng = np.random.default_rng(7)
    t = np.arange(n) / 100.0
    print(f"wheel-table kinds: solve + integrate_body + body_to_odom_noise + propagate_covariance on {n} "
          f"steps (exact scheme, best of {repeat}) against the differential run on {n} samples "
          f"(exact, per_wheel, slip detectors {'on' if slip else 'off'}): {d_wall:.3f} s wall, {d_cpu:.3f} s CPU; "
          f"streaming step_floats over {min(stream_n, n)} steps")
    print(f"{'kind':<10} {'batch s':>8} {'x diff':>7} {'CPU s':>7} {'x diff':>7} {'stream us/step':>15} {'CPU us':>7}")
    for kind in KINDS:
        model, twist = kind_tables()[kind]
        gain = 1.0 + 0.3 * np.column_stack([np.sin(0.05 * t), np.cos(0.031 * t), np.sin(0.02 * t)])
        spin, steer = model.inverse(np.asarray(twist) * gain, np.full(n, 0.01))
        spin = spin + 1e-5 * rng.standard_normal(spin.shape)
        wall, cpu = _best(lambda: table_path(model, spin, steer), repeat)
        m = min(stream_n, n)
        sp = spin[:m].tolist()
        st = [None] * m if steer is None else steer[:m].tolist()
        step = model.step_floats

        def stream() -> None:
            for a, b in zip(sp, st):
                step(a, b)

        s_wall, s_cpu = _best(stream, repeat)
        print(f"{kind:<10} {wall:8.3f} {wall / d_wall:7.2f} {cpu:7.3f} {cpu / d_cpu:7.2f} "
              f"{1e6 * s_wall / m:15.1f} {1e6 * s_cpu / m:7.1f}")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=360_000, help="batch samples (default 1 h at 100 Hz)")
    parser.add_argument("--stream-samples", type=int, default=36_000, help="streaming samples per case")
    parser.add_argument("--repeat", type=int, default=3, help="batch repetitions (best is reported)")
    parser.add_argument("--slip", choices=("on", "off"), default="on", help="run the slip detectors (default on)")
    parser.add_argument("--kinds-only", action="store_true", help="only the wheel-table section")
    args = parser.parse_args(argv)
    if args.kinds_only:
        bench_kinds(args.samples, args.stream_samples, args.repeat, args.slip == "on")
        return 0
    batch_drive = make_drive(args.samples)
    stream_drive = make_drive(args.stream_samples)
    print(f"wheel_dr core benchmark: batch run of {args.samples} samples ({args.samples / 100 / 3600:.2f} h at "
          f"100 Hz, best of {args.repeat}); streaming step over {args.stream_samples} samples; "
          f"slip detectors {args.slip}")
    print(f"{'scheme':<9} {'model':<13} {'batch s':>9} {'batch us/sample':>16} {'samples/s':>12} "
          f"{'stream us/step':>15}")
    for scheme in SCHEMES:
        for model in MODELS:
            s = settings_for(scheme, model, args.slip == "on")
            batch_s = bench_batch(batch_drive, s, args.repeat)
            step_s = bench_stream(stream_drive, s)
            print(f"{scheme:<9} {model:<13} {batch_s:9.3f} {1e6 * batch_s / args.samples:16.3f} "
                  f"{args.samples / batch_s:12.0f} {1e6 * step_s:15.1f}")
    print()
    bench_kinds(args.samples, args.stream_samples, args.repeat, args.slip == "on")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
