#!/usr/bin/env python3
"""Benchmark of the estimator core: batch ``run`` over one hour at 100 Hz, streaming ``step`` per sample.

Usage: .venv/bin/python tools/bench_core.py [--samples 360000] [--stream-samples 36000] [--repeat 3]
                                            [--slip on|off] [--online-only]

The drive is the invented demo cart "Quokka" (radii 0.0829/0.0822 m, track 0.4185 m) turning
gently for an hour; every integration scheme x noise model is timed. Figures are printed, not
asserted (speed targets live here, not in the test suite).

The last section times online self-calibration (``online_calibration.enabled``): the streaming step
with a gyro reading, off and on, the added cost per step (target under 20 us) and the slowest step
(one closing an interval), and the batch run off and on.
"""
from __future__ import annotations

import argparse
import time

import numpy as np

from wheel_dr.core import Estimator, JointSamples, Settings, run
from wheel_dr.core.online_calibration import OnlineCalibrator

__all__ = ["make_drive", "bench_batch", "bench_stream", "main"]

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


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=360_000, help="batch samples (default 1 h at 100 Hz)")
    parser.add_argument("--stream-samples", type=int, default=36_000, help="streaming samples per case")
    parser.add_argument("--repeat", type=int, default=3, help="batch repetitions (best is reported)")
    parser.add_argument("--slip", choices=("on", "off"), default="on", help="run the slip detectors (default on)")
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
