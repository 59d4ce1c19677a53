#!/usr/bin/env python3
"""Slip detection benchmark: detection figures on synthetic Quokka rounds, hard cases, speed.

Prints, per scenario family, flag coverage of slip time after the first 0.2 s of each event, the
fraction of non-slip time flagged (strict, and outside a 0.2 s tail after each event), the worst
detection latency, the heading error over slip events without and with the gyro response, and
the time of ``detect_slip`` on a 360,000-sample run, and the cost of the accelerometer and command
detectors (``detect_slip`` with them on 360,000 samples, the added streaming cost per step). ``--tuning`` uses the seeds the defaults
were chosen on (1-6 and 101-108: the first held-out set, which showed misses at the sensitivity
limit and moved the gate from the 99.5 % to the 99 % quantile); the default is the fresh
held-out set the tests assert on (201-208).
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "test"))

from slip_scenarios import (Drive, SlipEvent, generate, heading_errors, noisy_gyro_drive, random_drive,  # noqa: E402
                            sharp_turns_drive, slip_figures, traction_limit_drive)
from wheel_dr.core import run, wheel_travel  # noqa: E402
from wheel_dr.core.slip import detect_slip  # noqa: E402

TUNING_SEEDS = tuple(range(1, 7)) + tuple(range(101, 109))
HELD_OUT_SEEDS = tuple(range(201, 209))


def family(name: str, drives, seeds, values=None) -> dict[str, float]:
    rows = []
    err_flag, err_gyro = [], []
    for seed in seeds:
        gen = generate(drives(seed), seed)
        s = gen.settings.with_values(values or {})
        traj = run(gen.samples, s, gyro_z_radps=gen.gyro_z_radps)
        rows.append(slip_figures(gen, traj.slip.slip, gen.t_s[traj.index]))
        if gen.gyro_z_radps is not None and gen.events:
            gy = run(gen.samples, s.with_values({"slip.response": "gyro"}), gyro_z_radps=gen.gyro_z_radps)
            err_flag.append(heading_errors(gen, traj))
            err_gyro.append(heading_errors(gen, gy))
    out = {
        "coverage_min": min(r["coverage"] for r in rows),
        "coverage_mean": float(np.mean([r["coverage"] for r in rows])),
        "false_strict_max": max(r["false_strict"] for r in rows),
        "false_outside_tail_max": max(r["false_outside_tail"] for r in rows),
        "latency_max_s": max(r["latency_max_s"] for r in rows),
    }
    if err_flag:
        ef, eg = np.concatenate(err_flag), np.concatenate(err_gyro)
        out["heading_err_flag_mean_rad"] = float(ef.mean())
        out["heading_err_gyro_mean_rad"] = float(eg.mean())
        out["heading_ratio_mean"] = float(ef.mean() / eg.mean())
        out["heading_ratio_worst_event"] = float((ef / eg).min())
    print(f"{name}:")
    for k, v in out.items():
        print(f"  {k:28s} {v:.4f}")
    return out


def sim_family(seeds) -> None:
    """Rounds from wheel_dr.sim (an independent generator), scored by wheel_dr.analysis.metrics."""
    from slip_scenarios import sim_round
    from wheel_dr.analysis.metrics import slip_heading_error, slip_scores, slip_side_scores
    from wheel_dr.core import Settings
    from wheel_dr.sim import simulate

    rows, ratios = [], []
    for seed in seeds:
        sc = sim_round(seed)
        sim = simulate(sc, seed)
        s = Settings.from_flat(sc.nominal_params)
        flag = run(sim.joint_samples(), s, gyro_z_radps=sim.gyro_z_radps)
        gyro = run(sim.joint_samples(), s.with_values({"slip.response": "gyro"}), gyro_z_radps=sim.gyro_z_radps)
        rows.append(slip_scores(flag.stamp_ns, flag.slip.slip, sim.slip_intervals_ns, grace_s=0.2))
        rows[-1].update(slip_side_scores(flag.stamp_ns, flag.slip.left, flag.slip.right, sim.slip_intervals_ns,
                                         list(sim.slip_side)))
        truth = sim.true_theta_rad[flag.index]
        e0 = slip_heading_error(flag.stamp_ns, flag.theta_rad, truth, sim.slip_intervals_ns)
        e1 = slip_heading_error(gyro.stamp_ns, gyro.theta_rad, truth, sim.slip_intervals_ns)
        ratios.append(e0["slip_heading_error_mean_deg"] / e1["slip_heading_error_mean_deg"])
    print(f"simulator rounds (wheel_dr.sim, seeds {', '.join(map(str, seeds))}), scored by analysis.metrics:")
    print(f"  {'events detected':28s} {sum(r['slip_events_detected'] for r in rows)} of {sum(r['slip_events'] for r in rows)}")
    for key, agg in (("slip_coverage_after_grace", min), ("slip_false_flag_frac", max), ("slip_precision", min),
                     ("slip_latency_mean_s", max), ("slip_latency_max_s", max), ("slip_side_correct_frac", min)):
        print(f"  {key + (' (min)' if agg is min else ' (max)'):28s} {agg(r[key] for r in rows):.4f}")
    print(f"  {'heading ratio (min)':28s} {min(ratios):.1f}")


def hard(name: str, drives, seeds) -> None:
    flagged, worst = [], 0.0
    for seed in seeds:
        gen = generate(drives(seed), seed)
        traj = run(gen.samples, gen.settings, gyro_z_radps=gen.gyro_z_radps)
        flagged.append(traj.slip.slip.mean())
        worst = max(worst, float(traj.slip.score.max()))
    print(f"{name}: flagged fraction max {max(flagged):.4f}, highest score {worst:.3f} (flags at > 1)")


def sudden(seed: int, gyro: bool) -> Drive:
    d = random_drive(seed, gyro=gyro)
    d.events = [SlipEvent(e.t0_s, e.duration_s, e.side, e.kind, e.ratio, ramp_s=0.005) for e in d.events]
    return d


def speed() -> None:
    gen = generate(random_drive(3, duration_s=120.0), 3)
    reps = 360_000 // len(gen.samples) + 1
    s = gen.settings
    tv = wheel_travel(gen.samples, s)
    m = len(tv.dt_s)
    idx = np.arange(reps * m) % m
    period = int(tv.stamp_ns[-1] - tv.stamp_ns[0]) + 20_000_000
    stamp = tv.stamp_ns[idx] + (np.arange(reps * m) // m) * period
    big = type(tv)(np.arange(reps * m), stamp, tv.dt_s[idx], tv.ds_left_m[idx], tv.ds_right_m[idx],
                   tv.restart[idx], tv.status[idx], tv.joint_travel_m[idx])
    big.index, big.stamp_ns = big.index[:360_000], big.stamp_ns[:360_000]
    for f in ("dt_s", "ds_left_m", "ds_right_m", "restart", "joint_travel_m"):
        setattr(big, f, getattr(big, f)[:360_000])
    gyro = gen.gyro_z_radps[tv.index][idx][:360_000]
    a = np.random.default_rng(0).random(360_000)
    ref = min(_timed(lambda: a * a) for _ in range(20))
    print(f"machine reference: one 360,000-element multiply takes {ref * 1e3:.2f} ms (load shows here)")
    for resp, g in (("flag", gyro), ("gyro", gyro), ("flag, no IMU", None)):
        sr = s.with_values({"slip.response": resp.split(",")[0]})
        times = [_timed(lambda: detect_slip(big, g, sr)) for _ in range(15)]
        print(f"detect_slip, 360,000 samples, response {resp}: best {min(times) * 1e3:.1f} ms, "
              f"median {np.median(times) * 1e3:.1f} ms of 15 (target well under 200 ms)")


def motion_speed(n_stream: int = 20_000) -> None:
    """The accelerometer and command detectors (wheel_dr.core.slip_motion): detect_slip on 360,000
    samples of a simulated hour with both-wheel spins every 30 s, with and without them, and the
    added streaming cost per Estimator.step."""
    from wheel_dr.core import Estimator, Settings
    from wheel_dr.core.slip_motion import MotionInputs, MotionMonitor
    from wheel_dr.demo.scenarios import varied_drive_scenario
    from wheel_dr.sim import SlipEvent as SimSlip, simulate

    events = tuple(SimSlip(float(t), 1.5, "both", "spin", 0.3, ramp_s=0.5) for t in range(60, 3600, 30))
    sc = varied_drive_scenario(3601.0, rate_hz=100.0, k_left_m=2e-5, k_right_m=2e-5, gyro_bias_radps=0.002,
                               gyro_noise_sd_radps=0.004, accel_noise_sd_mps2=0.02, accel_bias_mps2=0.03)
    sim = simulate(sc.with_values(slip_events=events), 5)
    s = Settings.from_flat({**sc.nominal_params, "noise.k_left": 2e-5, "noise.k_right": 2e-5})
    tv = wheel_travel(sim.joint_samples(), s)
    n = min(360_000, len(tv.dt_s))
    for f in ("index", "stamp_ns", "dt_s", "ds_left_m", "ds_right_m", "restart", "status", "joint_travel_m"):
        setattr(tv, f, getattr(tv, f)[:n])
    i = tv.index
    gyro = sim.gyro_z_radps[i]
    motion = MotionInputs(sim.accel_mps2[i, 0], sim.up_x[i], sim.cmd_v_mps[i])
    print(f"accelerometer and command detectors, {n:,} samples (simulated hour, {len(events)} both-wheel spins):")
    cases = (("gyro only (as before)", None, s), ("with accelerometer, orientation, cmd_vel", motion, s),
             ("same, observer distance", motion, s.with_values({"slip.distance_source": "observer"})))
    times: dict[str, list[float]] = {name: [] for name, _, _ in cases}
    for _ in range(9):                   # interleaved CPU times, so a burst of load hits every case
        for name, mo, st in cases:
            t0 = time.process_time()
            detect_slip(tv, gyro, st, mo)
            times[name].append(time.process_time() - t0)
    base = min(times[cases[0][0]])
    for name, _, _ in cases:
        best = min(times[name])
        print(f"  detect_slip, {name}: best {best * 1e3:.1f} ms, median {np.median(times[name]) * 1e3:.1f} ms "
              f"of 9 (CPU time; {best / base:.2f} x gyro only; target within 1.5 x)")
    res = detect_slip(tv, gyro, s, motion)
    print(f"  flagged {res.slip.mean():.3f} of samples, accelerometer bit on {np.mean(res.detector & 8 > 0):.3f}")
    js = sim.joint_samples()
    m = min(n_stream, len(js))
    acc, up, cmd = sim.accel_mps2[:m, 0].tolist(), sim.up_x[:m].tolist(), sim.cmd_v_mps[:m].tolist()
    g = sim.gyro_z_radps[:m].tolist()
    rows = [(int(js.stamp_ns[k]), js.position[k], js.velocity[k]) for k in range(m)]

    def stream(with_motion: bool) -> float:
        est = Estimator(s)
        t0 = time.process_time()         # CPU time of this process: other jobs on the machine count less
        if with_motion:
            for k, (st_ns, p, v) in enumerate(rows):
                est.step(st_ns, js.names, p, v, g[k], acc[k], up[k], cmd[k])
        else:
            for k, (st_ns, p, v) in enumerate(rows):
                est.step(st_ns, js.names, p, v, g[k])
        return (time.process_time() - t0) / m

    plain, full = [], []
    for _ in range(5):                   # interleaved, so a burst of load hits both
        plain.append(stream(False))
        full.append(stream(True))
    print(f"  Estimator.step per sample (CPU time, best of 5 x {m:,} steps): {min(plain) * 1e6:.1f} us gyro only, "
          f"{min(full) * 1e6:.1f} us with accelerometer and cmd_vel: added {(min(full) - min(plain)) * 1e6:.1f} us "
          "per step (target < 15 us)")
    mon = MotionMonitor(s)
    args = [(int(tv.stamp_ns[k]), bool(tv.restart[k]), float(tv.dt_s[k]), float(tv.ds_left_m[k]),
             float(tv.ds_right_m[k]), float(gyro[k]), acc[k], up[k], cmd[k]) for k in range(m)]
    own = []
    for _ in range(5):
        mon.reset()
        step = mon.step
        t0 = time.process_time()
        for a in args:
            step(*a)
        own.append((time.process_time() - t0) / m)
    print(f"  MotionMonitor.step alone (the detectors' own work per step): {min(own) * 1e6:.1f} us")


def motion_figures(seeds=(11, 12, 13, 14)) -> None:
    """Detection figures of the accelerometer detector on simulator drives (fresh seeds, not the
    tests'): both-wheel spin and drag 40 % with 0.5 s onsets, held bases, and the hard cases."""
    import test_slip_motion as tm
    from wheel_dr.core.slip import DETECTOR_ACCEL, DETECTOR_COMMAND
    from wheel_dr.sim import simulate

    print(f"accelerometer detector on simulator drives (seeds {', '.join(map(str, seeds))}):")
    for kind, ratio in (("spin", tm.SPIN_40), ("drag", tm.DRAG_40)):
        rec, false = [], []
        for sd in seeds:
            sc = tm._straights_with_events(sd, kind, ratio)
            sim = simulate(sc, sd)
            r, f, _ = tm._recall_after(tm._run(sim, tm._settings(sc), cmd=False), sim, 0.7)
            rec.append(r)
            false.append(f)
        print(f"  both wheels {kind} 40 %, 0.5 s onset: recall from 0.7 s min {min(rec):.3f}, "
              f"false flags max {max(false):.4f}")
    for name, (build, values, orient) in tm.HARD.items():
        worst = 0.0
        for sd in seeds:
            sc = build(sd)
            sim = simulate(sc, sd)
            traj = tm._run(sim, tm._settings(sc, **values), orientation=orient)
            worst = max(worst, float(np.mean((traj.slip.detector & (DETECTOR_ACCEL | DETECTOR_COMMAND)) > 0)))
        print(f"  hard case {name}: flagged fraction max {worst:.4f} (target <= 0.01)")


def _timed(fn) -> float:
    t = time.perf_counter()
    fn()
    return time.perf_counter() - t


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--tuning", action="store_true", help="use the seeds the defaults were chosen on")
    parser.add_argument("--speed-only", action="store_true", help="print the timing figures only")
    args = parser.parse_args()
    seeds = TUNING_SEEDS if args.tuning else HELD_OUT_SEEDS
    print("speed, measured first in a fresh process:")
    speed()
    print()
    motion_speed()
    print()
    if args.speed_only:
        return 0
    motion_figures()
    print()
    print(f"seeds {', '.join(map(str, seeds))} ({'tuning' if args.tuning else 'held out'}), default settings, "
          "Quokka nominal geometry, 90 s rounds with 5 slip events each\n")
    family("with IMU (gyro, traction)", lambda sd: random_drive(sd), seeds)
    family("with IMU, sudden slips (5 ms onset)", lambda sd: sudden(sd, True), seeds)
    family("without IMU, sudden slips (traction only)", lambda sd: sudden(sd, False), seeds)
    family("without IMU, 50 ms onset (traction only)", lambda sd: random_drive(sd, gyro=False), seeds)
    family("skid steer 2+2 joints, one joint slips, no IMU",
           lambda sd: random_drive(sd, joints_per_side=2, same_side_events=True, gyro=False), seeds)
    import wheel_dr.sim
    if hasattr(wheel_dr.sim, "simulate"):
        sim_family((1, 2, 3, 4, 5, 6) if args.tuning else (11, 12, 13, 14, 15, 16, 17, 18))
    else:
        print("simulator rounds: wheel_dr.sim has no simulate() in this checkout; skipped")
    print()
    hs = seeds[:4]
    hard("hard case: sharp turns at speed", sharp_turns_drive, hs)
    hard("hard case: starts and stops at 0.9 mu g", traction_limit_drive, hs)
    hard("hard case: noisy biased gyro (standstill first)", lambda sd: noisy_gyro_drive(sd, True), hs)
    hard("hard case: noisy biased gyro (no standstill)", lambda sd: noisy_gyro_drive(sd, False), hs)
    return 0


if __name__ == "__main__":
    sys.exit(main())
