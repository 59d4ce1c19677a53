#!/usr/bin/env python3
"""Benchmark of the estimator core: batch ``run`` over one hour at 100 Hz, streaming ``step`` per sample.

Usage: .venv/bin/python tools/bench_core.py [--samples 360000] [--stream-samples 36000] [--repeat 3]
                                            [--slip on|off] [--kinds-only] [--online-only]

The drive is the invented demo cart "Quokka" (radii 0.0829/0.0822 m, track 0.4185 m) turning
gently for an hour; every integration scheme x noise model is timed. Figures are printed, not
asserted (speed targets live here, not in the test suite).

A second section times the wheel-table kinds on the invented vehicles of ``wheel_dr.demo.vehicles``
(their simulated drive, laps repeated to ``--samples``, with the gyro): the whole estimator
``run`` (wheel travel, ``WheelTable.solve``, slip detectors, integration, covariance) against the
differential ``run`` on as many samples with its gyro, their ratio (target: 3x or less), the
streaming ``Estimator.step`` per sample and the drive model's own ``WheelTable.step_floats`` per
call (target: a streaming step under 100 us). Wall and CPU time are both printed (CPU time is less
sensitive to other work on the machine).
The last section times online self-calibration (``online_calibration.enabled``): the streaming step
with a gyro reading, off and on, the added cost per step (target under 20 us) and the slowest step
(one closing an interval), and the batch run off and on.
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

from wheel_dr.core import Estimator, JointSamples, Settings, run
from wheel_dr.demo.vehicles import params_text, table_scenario
from wheel_dr.params import parse_params_text
from wheel_dr.sim.table import simulate_table
from wheel_dr.core.online_calibration import OnlineCalibrator

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


def _best(fn, repeat: int) -> tuple[float, float]:
    """Best wall time and best CPU time (process_time, less sensitive to other work on the machine), s."""
    wall = cpu = float("inf")
    for _ in range(repeat):
        w0, c0 = time.perf_counter(), time.process_time()
        fn()
        wall, cpu = min(wall, time.perf_counter() - w0), min(cpu, time.process_time() - c0)
    return wall, cpu


def _vehicle_drive(kind: str, n: int):
    """Settings (the vehicle's example table), samples and gyro of about ``n`` samples of its drive."""
    one = simulate_table(table_scenario(kind, laps=1), seed=7)
    laps = max(1, int(np.ceil(n / len(one))))
    sim = simulate_table(table_scenario(kind, laps=laps), seed=7) if laps > 1 else one
    settings = Settings.from_flat(parse_params_text(params_text(kind)))
    samples = sim.joint_samples()
    keep = slice(0, min(n, len(samples)))
    samples = JointSamples(samples.stamp_ns[keep], samples.names, samples.position[keep], samples.velocity[keep])
    return settings, samples, sim.gyro_z_radps[keep]


def bench_kinds(n: int, stream_n: int, repeat: int, slip: bool) -> None:
    """Print, per table kind, the whole estimator's batch time on its vehicle's drive, the ratio to
    the differential ``run`` on as many samples (both with a gyro), and the streaming time per sample
    of ``Estimator.step`` and of the model's ``step_floats`` (wall and CPU)."""
    drive = make_drive(n)
    diff = settings_for("exact", "per_wheel", slip)
    gyro_d = np.full(n, 0.01)
    d_wall, d_cpu = _best(lambda: run(drive, diff, gyro_z_radps=gyro_d), repeat)
    print(f"wheel-table kinds: the estimator's run over {n} samples of each invented vehicle's drive (exact "
          f"scheme, gyro, slip detectors {'on' if slip else 'off'}, best of {repeat}) against the differential "
          f"run on {n} samples with a gyro: {d_wall:.3f} s wall, {d_cpu:.3f} s CPU; streaming over "
          f"{stream_n} samples")
    print(f"{'kind':<10} {'batch s':>8} {'x diff':>7} {'CPU s':>7} {'x diff':>7} {'step us':>8} {'CPU us':>7} "
          f"{'model us':>9}")
    for kind in KINDS:
        settings, samples, gyro = _vehicle_drive(kind, n)
        if not slip:
            settings = settings.replace(**{"slip.enabled": False})
        wall, cpu = _best(lambda: run(samples, settings, gyro_z_radps=gyro), repeat)
        m = min(stream_n, len(samples))
        names = list(samples.names)
        pos, vel = samples.position[:m].tolist(), samples.velocity[:m].tolist()
        stamps, gy = samples.stamp_ns[:m].tolist(), gyro[:m].tolist()

        def stream() -> None:
            est = Estimator(settings)
            step = est.step
            for k in range(m):
                step(stamps[k], names, pos[k], vel[k], gy[k])

        s_wall, s_cpu = _best(stream, 1)
        model = settings.drive_model()
        traj = run(samples, settings)
        spin = traj.travel.joint_travel_m[:m].tolist()
        steer = [None] * m if traj.travel.steer_rad is None else traj.travel.steer_rad[:m].tolist()

        def model_steps() -> None:
            for a, b in zip(spin, steer):
                model.step_floats(a, b)

        f_wall, _ = _best(model_steps, 1)
        print(f"{kind:<10} {wall:8.3f} {wall / d_wall:7.2f} {cpu:7.3f} {cpu / d_cpu:7.2f} "
              f"{1e6 * s_wall / m:8.1f} {1e6 * s_cpu / m:7.1f} {1e6 * f_wall / len(spin):9.1f}")


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
    parser.add_argument("--online-only", action="store_true", help="run only the online calibration section")
    args = parser.parse_args(argv)
    if args.online_only:
        return bench_online(args)
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
    return bench_online(args)


def bench_online(args: argparse.Namespace) -> int:
    """Online self-calibration: streaming step with a gyro, off and on; batch run off and on."""
    rate = 100.0
    drive = make_drive(args.stream_samples, rate)
    t = np.arange(len(drive)) / rate
    omega_l, omega_r = drive.velocity[:, 0], drive.velocity[:, 1]
    gyro = ((0.0822 * omega_r - 0.0829 * omega_l) / 0.4185 + 0.002 + 0.004 * np.sin(7.0 * t)).tolist()
    names = list(drive.names)
    pos, vel, stamps = drive.position.tolist(), drive.velocity.tolist(), drive.stamp_ns.tolist()
    print(f"online calibration: streaming step over {len(stamps)} samples at {rate:g} Hz with a gyro "
          f"(one interval closes every {int(rate * 0.1)} samples); batch run over {args.samples} samples")
    s_off = settings_for("exact", "per_wheel", args.slip == "on")
    s_on = s_off.replace(**{"online_calibration.enabled": True})
    best = {False: float("inf"), True: float("inf")}
    for _ in range(3):                     # interleaved, so that load on the machine hits both alike
        for enabled in (False, True):
            est = Estimator(s_on if enabled else s_off)
            t0 = time.perf_counter()
            for k in range(len(stamps)):
                est.step(stamps[k], names, pos[k], vel[k], gyro[k])
            best[enabled] = min(best[enabled], (time.perf_counter() - t0) / len(stamps))
    # the added work alone: the online calibrator's step over the same accepted samples
    inputs = [(stamps[0], True, 0.0, 0.0, 0.0, gyro[0], False)]     # the accepted samples as the estimator sees them
    for k in range(1, len(stamps)):
        inputs.append((stamps[k], False, (stamps[k] - stamps[k - 1]) * 1e-9, (pos[k][0] - pos[k - 1][0]) * 0.0829,
                       (pos[k][1] - pos[k - 1][1]) * 0.0822, gyro[k], False))
    alone, slowest = float("inf"), 0.0
    for _ in range(5):
        oc = OnlineCalibrator(s_on)
        step = oc.step
        t0 = time.perf_counter()
        for args_k in inputs:
            step(*args_k)
        alone = min(alone, (time.perf_counter() - t0) / len(inputs))
    oc = OnlineCalibrator(s_on)
    for args_k in inputs:
        a = time.perf_counter()
        oc.step(*args_k)
        slowest = max(slowest, time.perf_counter() - a)
    off, on = best[False], best[True]
    print(f"  Estimator.step, off: {1e6 * off:6.1f} us/step; on: {1e6 * on:6.1f} us/step (best of 3, interleaved)")
    print(f"  added cost: the online calibrator's step alone {1e6 * alone:5.2f} us/step mean (target under 20 us); "
          f"slowest step (one closing an interval) {1e6 * slowest:.0f} us")
    batch = make_drive(args.samples, rate)
    tb = np.arange(len(batch)) / rate
    g_b = (0.0822 * batch.velocity[:, 1] - 0.0829 * batch.velocity[:, 0]) / 0.4185 + 0.002 + 0.004 * np.sin(7.0 * tb)
    for enabled in (False, True):
        s = settings_for("exact", "per_wheel", args.slip == "on").replace(**{"online_calibration.enabled": enabled})
        best = float("inf")
        for _ in range(args.repeat):
            t0 = time.perf_counter()
            traj = run(batch, s, gyro_z_radps=g_b)
            best = min(best, time.perf_counter() - t0)
        extra = f" ({len(traj.online)} intervals)" if enabled else ""
        print(f"  batch run, online {'on ' if enabled else 'off'}: {best:7.3f} s{extra}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
