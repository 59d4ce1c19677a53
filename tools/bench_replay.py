"""Benchmark: replay and an 8-settings compare of a 1-hour, 100 Hz bag against a naive per-message loop.

Run: ``.venv/bin/python tools/bench_replay.py [--minutes 60] [--keep DIR] [--online]``. Prints the figures.

* bag: a simulated varied drive (wheel_dr.sim), 100 Hz joint states and IMU, truth at 10 Hz, mcap;
* naive: deserialise every joint-state message with rosbags, integrate (exact arc step) and propagate
  the per-wheel covariance per message in plain Python (what a straightforward script would do);
* replay: ``wheel-dr replay BAG`` (bulk decode, the core's batch run, trajectory.csv and .tum);
* compare: ``wheel-dr compare BAG --params x8`` (decode once, 8 runs, metrics, summary, HTML page).

Aims: replay at least 5x faster than the naive loop (aim 20x); compare with 8 settings
under 2x one replay.

``--online`` times only ``wheel-dr replay`` of the bag with ``online_calibration.enabled`` false and true
(best of 3 each; with it on, DIR/geometry_online.csv is written too). Aim: on within 1.5x of off.
"""
from __future__ import annotations

import argparse
import contextlib
import io
import math
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from rosbags.highlevel import AnyReader  # noqa: E402

from wheel_dr.bags import read_run, write_bag  # noqa: E402
from wheel_dr.cli import main  # noqa: E402
from wheel_dr.core import Settings, run  # noqa: E402
from wheel_dr.params import atomic_write_text  # noqa: E402
from wheel_dr.demo.scenarios import varied_drive_scenario  # noqa: E402
from wheel_dr.sim import simulate  # noqa: E402

JOINTS = "      left_joints: [quokka_left_wheel_joint]\n      right_joints: [quokka_right_wheel_joint]\n"
GEOMETRY = {"nominal": (0.0825, 0.0825, 0.412), "true": (0.0829, 0.0822, 0.4185)}
VARIANTS = [  # name, geometry, integration, noise model, k
    ("nominal_exact", "nominal", "exact", "per_wheel", 2e-5),
    ("true_exact", "true", "exact", "per_wheel", 2e-5),
    ("true_midpoint", "true", "midpoint", "per_wheel", 2e-5),
    ("true_euler", "true", "euler", "per_wheel", 2e-5),
    ("true_k_small", "true", "exact", "per_wheel", 5e-6),
    ("true_k_large", "true", "exact", "per_wheel", 1e-4),
    ("true_motion_model", "true", "exact", "motion_model", 0.0),
    ("nominal_motion_model", "nominal", "exact", "motion_model", 0.0),
]


def params_text(geometry: str, integration: str, model: str, k: float) -> str:
    lr, rr, b = GEOMETRY[geometry]
    return ("/**:\n  ros__parameters:\n    wheels:\n" + JOINTS + f"      left_radius: {lr}\n      right_radius: {rr}\n"
            f"      track_width: {b}\n    integration: {integration}\n    noise:\n      model: {model}\n"
            f"      k_left: {k:.6e}\n      k_right: {k:.6e}\n      alphas: [0.05, 0.04, 0.004, 0.001]\n")


def naive_replay(bag: Path, settings: Settings) -> tuple[float, float, list[list[float]]]:
    """Per message: rosbags deserialisation, exact arc step and per-wheel covariance propagation in Python."""
    w = settings.wheels
    b = w.track_width
    kl, kr = settings.noise.k_left, settings.noise.k_right
    x = y = th = 0.0
    p = [[0.0] * 3 for _ in range(3)]
    last = None
    with AnyReader([bag]) as reader:
        conns = [c for c in reader.connections if c.msgtype == "sensor_msgs/msg/JointState"]
        for c, _, raw in reader.messages(connections=conns):
            m = reader.deserialize(raw, c.msgtype)
            i_l = m.name.index(w.left_joints[0])
            i_r = m.name.index(w.right_joints[0])
            pos = (m.position[i_l], m.position[i_r])
            if last is None:
                last = pos
                continue
            dl = (pos[0] - last[0]) * w.left_radius
            dr = (pos[1] - last[1]) * w.right_radius
            last = pos
            ds = 0.5 * (dl + dr)
            dth = (dr - dl) / b
            h = 0.5 * dth
            g = 1.0 - h * h / 6.0 if abs(h) < 1e-4 else math.sin(h) / h
            phi = th + h
            c_, s_ = math.cos(phi), math.sin(phi)
            dx, dy = ds * g * c_, ds * g * s_
            # input covariance of (ds, dth) from the per-wheel model, Jacobian of (dx, dy, dth) w.r.t. it
            vr, vl = kr * abs(dr), kl * abs(dl)
            c00, c01, c11 = 0.25 * (vr + vl), 0.5 * (vr - vl) / b, (vr + vl) / (b * b)
            gp = -h / 6.0 if abs(h) < 1e-4 else (h * math.cos(h) - math.sin(h)) / (2 * h * h)
            j = [[g * c_, ds * (gp * c_ - 0.5 * g * s_)], [g * s_, ds * (gp * s_ + 0.5 * g * c_)], [0.0, 1.0]]
            cin = [[c00, c01], [c01, c11]]
            q = [[sum(j[a][u] * cin[u][v] * j[bb][v] for u in range(2) for v in range(2)) for bb in range(3)]
                 for a in range(3)]
            f = [[1.0, 0.0, -dy], [0.0, 1.0, dx], [0.0, 0.0, 1.0]]
            fp = [[sum(f[a][k] * p[k][bb] for k in range(3)) for bb in range(3)] for a in range(3)]
            p = [[sum(fp[a][k] * f[bb][k] for k in range(3)) + q[a][bb] for bb in range(3)] for a in range(3)]
            x += dx
            y += dy
            th += dth
    return x, y, p


def timed(fn):
    t0 = time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, out


def main_bench() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--minutes", type=float, default=60.0, help="length of the simulated drive (default 60)")
    ap.add_argument("--keep", help="keep the bag and outputs in this directory")
    ap.add_argument("--online", action="store_true", help="time only replay with online calibration off and on")
    args = ap.parse_args()
    work = Path(args.keep) if args.keep else Path(tempfile.mkdtemp(prefix="wheel_dr_bench_"))
    work.mkdir(parents=True, exist_ok=True)
    try:
        bag = work / "hour_bag"
        if not (bag / "metadata.yaml").is_file():
            sc = varied_drive_scenario(args.minutes * 60.0, rate_hz=100.0, k_left_m=2e-5, k_right_m=2e-5,
                                       gyro_bias_radps=0.0015, gyro_noise_sd_radps=0.004)
            t_sim, sim = timed(lambda: simulate(sc, 1))
            t_write, _ = timed(lambda: write_bag(sim, bag, "mcap", truth_stride=10, overwrite=True))
            print(f"bag: {len(sim)} joint states ({sim.t_s[-1] / 60:.1f} min at 100 Hz) + IMU + truth at 10 Hz; "
                  f"simulated in {t_sim:.2f} s, written in {t_write:.2f} s")
        files = []
        for name, geom, integ, model, k in VARIANTS:
            f = work / f"{name}.yaml"
            atomic_write_text(f, params_text(geom, integ, model, k))
            files.append(f)
        settings = Settings.from_flat({"wheels.left_joints": ["quokka_left_wheel_joint"],
                                       "wheels.right_joints": ["quokka_right_wheel_joint"],
                                       "wheels.left_radius": 0.0829, "wheels.right_radius": 0.0822,
                                       "wheels.track_width": 0.4185, "noise.k_left": 2e-5, "noise.k_right": 2e-5})
        if args.online:
            return bench_online(bag, files[1], work)
        t_naive, (nx, ny, npcov) = timed(lambda: naive_replay(bag, settings))
        # breakdown of the fast path
        t_decode, data = timed(lambda: read_run(bag))
        t_core, traj = timed(lambda: run(data.samples, settings, gyro_z_radps=data.gyro_z_radps))
        sink = io.StringIO()
        with contextlib.redirect_stdout(sink):
            t_replay, code = timed(lambda: main(["replay", str(bag), "--params", str(files[1]), "--out",
                                                 str(work / "replay")]))
            assert code == 0
            t_replay_noimu, code = timed(lambda: main(["replay", str(bag), "--params", str(files[1]), "--no-imu",
                                                       "--out", str(work / "replay_noimu")]))
            assert code == 0
            cmp_args = ["compare", str(bag), "--out", str(work / "compare"), "--quiet"]
            for f in files:
                cmp_args += ["--params", str(f)]
            t_compare, code = timed(lambda: main(cmp_args))
            assert code == 0
        # the same two commands as fresh processes, as a user runs them (start-up and imports included)
        cli = [sys.executable, "-m", "wheel_dr.cli"]
        t_replay_proc, _ = timed(lambda: subprocess.run(cli + ["replay", str(bag), "--params", str(files[1]), "--out",
                                                               str(work / "replay_p")], check=True,
                                                        capture_output=True))
        t_compare_proc, _ = timed(lambda: subprocess.run(cli + cmp_args[:3] + ["compare_p"] + cmp_args[4:],
                                                         check=True, capture_output=True, cwd=work))
        agree = math.hypot(traj.x_m[-1] - nx, traj.y_m[-1] - ny)
        cov_rel = abs(traj.cov[-1, 0, 0] - npcov[0][0]) / max(npcov[0][0], 1e-30)
        print(f"naive loop (rosbags deserialise + Python integrate/propagate per message): {t_naive:7.2f} s")
        print(f"  its end pose differs from the core's by {agree:.1e} m, var(x) by {cov_rel:.1e} relative")
        print(f"fast path breakdown: read_run (bulk decode of joint states + IMU + truth) {t_decode:.2f} s, "
              f"core run {t_core:.2f} s")
        print("in this process (imports already loaded):")
        print(f"  wheel-dr replay (IMU, CSV + TUM written):       {t_replay:7.2f} s  -> {t_naive / t_replay:5.1f}x faster "
              "than naive (target >= 5x, aim 20x)")
        print(f"  wheel-dr replay --no-imu:                       {t_replay_noimu:7.2f} s  -> "
              f"{t_naive / t_replay_noimu:5.1f}x faster than naive")
        print(f"  wheel-dr compare, 8 settings (metrics, report): {t_compare:7.2f} s  -> {t_compare / t_replay:5.2f}x "
              "one replay (target < 2x)")
        print("as fresh processes (python -m wheel_dr.cli ...):")
        print(f"  wheel-dr replay:                                {t_replay_proc:7.2f} s  -> "
              f"{t_naive / t_replay_proc:5.1f}x faster than naive")
        print(f"  wheel-dr compare, 8 settings:                   {t_compare_proc:7.2f} s  -> "
              f"{t_compare_proc / t_replay_proc:5.2f}x one replay")
    finally:
        if not args.keep:
            shutil.rmtree(work, ignore_errors=True)
    return 0


def bench_online(bag: Path, params: Path, work: Path) -> int:
    """Replay with online calibration off and on (best of 3 each), in this process."""
    on = work / "online_on.yaml"
    atomic_write_text(on, params.read_text() + "    online_calibration:\n      enabled: true\n")
    best = {}
    sink = io.StringIO()
    for label, f in (("off", params), ("on", on)):
        times = []
        for _ in range(3):
            with contextlib.redirect_stdout(sink):
                t, code = timed(lambda: main(["replay", str(bag), "--params", str(f), "--out", str(work / f"r_{label}")]))
            assert code == 0
            times.append(t)
        best[label] = min(times)
    assert (work / "r_on" / "geometry_online.csv").is_file()
    core_data = read_run(bag)
    s_on = Settings.from_flat({"wheels.left_joints": ["quokka_left_wheel_joint"],
                               "wheels.right_joints": ["quokka_right_wheel_joint"],
                               "online_calibration.enabled": True})
    t_core_off, _ = timed(lambda: run(core_data.samples, s_on.replace(**{"online_calibration.enabled": False}),
                                      gyro_z_radps=core_data.gyro_z_radps))
    t_core_on, traj = timed(lambda: run(core_data.samples, s_on, gyro_z_radps=core_data.gyro_z_radps))
    print(f"wheel-dr replay, online calibration off: {best['off']:7.2f} s (best of 3)")
    print(f"wheel-dr replay, online calibration on:  {best['on']:7.2f} s (best of 3; {len(traj.online)} intervals) "
          f"-> {best['on'] / best['off']:.2f}x off (target within 1.5x)")
    print(f"  core run alone: off {t_core_off:.2f} s, on {t_core_on:.2f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main_bench())
