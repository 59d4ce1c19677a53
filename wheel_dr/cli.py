"""The offline command ``wheel-dr``: synthesise bags, replay the core over bags, compare settings, the demo.

A shell: it reads files and bags, calls the core and wheel_dr.analysis, writes files and prints.
Errors a user can cause are one sentence on stderr with exit status 2, never a traceback.

The safety caution it prints is ``wheel_dr.safety.SAFETY_TEXT``.
"""
from __future__ import annotations

import argparse
import importlib
import os
import sys
import time
from pathlib import Path
from typing import Sequence

from . import __version__
from .core import errors as _errors
from .core.errors import WheelDrError
from .safety import SAFETY_TEXT

# Heavy modules (numpy, rosbags, the analysis) are imported by the command that needs them, so
# `wheel-dr --help` starts in a fraction of a second and an interrupt while importing is handled.

__all__ = ["main", "build_parser", "SAFETY_NOTE", "write_trajectory_csv", "write_tum", "TRAJECTORY_COLUMNS",
           "write_geometry_csv", "GEOMETRY_COLUMNS"]

SAFETY_NOTE = SAFETY_TEXT

TRAJECTORY_COLUMNS = ("t", "x", "y", "yaw", "cov_xx", "cov_xy", "cov_xyaw", "cov_yy", "cov_yyaw", "cov_yawyaw", "slip",
                      "v", "w", "slip_left", "slip_right", "vy")

GEOMETRY_COLUMNS = ("t", "radius_ratio", "radius_ratio_se", "track_over_radius", "track_over_radius_se", "alert")

SCENARIOS = ("demo", "square-cw", "square-ccw", "varied")


UsageError = _errors.UsageError            # defined with every other error in wheel_dr.core.errors


# Subcommands kept in their own modules, imported only when they run: name -> (module, one-line
# help for `wheel-dr --help`). The module's ``add_parser(subparsers)`` defines the full command.
LAZY_COMMANDS: dict[str, tuple[str, str]] = {
    "calibrate": ("wheel_dr.calibrate_cmd",
                  "fit wheel radii, track and noise from bags with ground truth, or run the square test"),
}


# -- output helpers ------------------------------------------------------------------------------
def _atomic_bytes(path: Path, data: bytes) -> None:
    from .partfiles import make_part_file
    fd, tmp = make_part_file(path)   # also removes the parts a killed run left beside path
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        os.chmod(tmp, 0o644)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def write_trajectory_csv(path: Path, traj) -> None:
    """DIR/trajectory.csv: header row, then one row per joint-state sample used (see TRAJECTORY_COLUMNS).

    t in seconds (the sample stamp, exact to the nanosecond), pose (m, rad) and covariance (m^2,
    m rad, rad^2) in the odom frame, slip 0/1, v (m/s) and w (rad/s) in the base frame, the
    per-side slip flags, then vy (m/s, base frame; 0 for differential drive). Floats have 10 significant digits (wheel_dr.bags.textout).
    """
    from .bags.textout import flag_field, float_field, join_fields, stamp_field
    c = traj.cov
    slip = traj.slip
    fields = [stamp_field(traj.stamp_ns)] + [float_field(v) for v in (
        traj.x_m, traj.y_m, traj.yaw_rad, c[:, 0, 0], c[:, 0, 1], c[:, 0, 2], c[:, 1, 1], c[:, 1, 2], c[:, 2, 2])]
    fields += [flag_field(slip.slip), float_field(traj.v_mps), float_field(traj.w_radps), flag_field(slip.left),
               flag_field(slip.right), float_field(traj.vy_mps)]
    body = join_fields(fields) if len(traj) else b""
    _atomic_bytes(path, (",".join(TRAJECTORY_COLUMNS) + "\n").encode() + body)


def write_tum(path: Path, traj) -> None:
    """The trajectory in the TUM RGB-D benchmark format (Sturm et al. 2012): ``t tx ty tz qx qy qz qw``."""
    import numpy as np

    from .bags.textout import float_field, join_fields, stamp_field
    half = 0.5 * np.asarray(traj.yaw_rad)
    n = len(traj)
    zero = np.full((n, 1), ord("0"), dtype=np.uint8)
    fields = [stamp_field(traj.stamp_ns), float_field(traj.x_m), float_field(traj.y_m), zero, zero, zero,
              float_field(np.sin(half)), float_field(np.cos(half))]
    body = join_fields(fields, " ") if n else b""
    _atomic_bytes(path, b"# timestamp tx ty tz qx qy qz qw (wheel_dr odometry, odom frame)\n" + body)


def write_geometry_csv(path: Path, online) -> None:
    """DIR/geometry_online.csv: header row, then one row per online-calibration interval (GEOMETRY_COLUMNS):
    t in seconds (stamp of the sample closing the interval), radius ratio right/left and track over
    mean radius with their standard errors, alert 0/1 (wheel_dr.core.online_calibration)."""
    from .bags.textout import flag_field, float_field, join_fields, stamp_field
    fields = [stamp_field(online.stamp_ns), float_field(online.radius_ratio), float_field(online.radius_ratio_se),
              float_field(online.track_over_radius), float_field(online.track_over_radius_se),
              flag_field(online.alert)]
    body = join_fields(fields) if len(online) else b""
    _atomic_bytes(path, (",".join(GEOMETRY_COLUMNS) + "\n").encode() + body)


def write_geometry_table_csv(path: Path, series) -> None:
    """DIR/geometry_online_table.csv (wheel tables): header row, then one row per online-calibration
    interval: t in seconds (stamp of the interval's last sample), then per combination k = 1..C the
    gyro observes (``TableOnlineSeries``; its text is in the header comment line) c<k> (relative change
    along it), c<k>_se and c<k>_alert (0 or 1); nan while not yet determined."""
    from .bags.textout import flag_field, float_field, join_fields, stamp_field
    c = len(series.texts)
    cols = ["t"] + [f"c{k + 1}{sfx}" for k in range(c) for sfx in ("", "_se", "_alert")]
    fields = [stamp_field(series.stamp_ns)]
    for k in range(c):
        fields += [float_field(series.estimate[:, k]), float_field(series.se[:, k]), flag_field(series.alert[:, k])]
    head = "".join(f"# c{k + 1} = {t}\n" for k, t in enumerate(series.texts)) + ",".join(cols) + "\n"
    body = join_fields(fields) if len(series) else b""
    _atomic_bytes(path, head.encode() + body)


def _out_dir(path: str | None, default: str) -> Path:
    out = Path(path or default)
    if out.exists() and not out.is_dir():
        raise UsageError(f"output '{out}' exists and is not a directory; choose a directory with --out.")
    out.mkdir(parents=True, exist_ok=True)
    return out


def _say(text: str = "") -> None:
    print(text, flush=True)


# -- synth ---------------------------------------------------------------------------------------
def _replay_table_online(out: Path, traj, settings) -> None:
    series = traj.online_table
    if series is None:
        _say("online calibration: enabled, but the bag has no IMU readings (the gyro observes the geometry); "
             "no geometry_online_table.csv written")
        return
    write_geometry_table_csv(out / "geometry_online_table.csv", series)
    res = series.final
    for k, c in enumerate(res.observed):
        _say(f"online calibration c{k + 1} = {c.text}: {100 * c.estimate:+.3f} % +- {100 * c.se:.3f} %"
             + (" (alert)" if c.alert else ""))
    _say(f"online calibration: {len(res.observed)} combinations observed by the gyro from {res.intervals_used} "
         f"intervals, {len(res.unobserved)} not (the scale needs a distance source); alert "
         f"{'on' if res.alert else 'off'}")
    _say(f"wrote {out / 'geometry_online_table.csv'}")


def _scenario(args: argparse.Namespace):
    from . import sim
    from .demo import scenarios
    fields = {}
    if args.scenario == "demo":
        sc = scenarios.demo_scenario(rate_hz=args.rate, laps=args.laps)
    elif args.scenario in ("square-cw", "square-ccw"):
        sc = scenarios.square_scenario(side_m=args.side, direction=args.scenario.split("-")[1], laps=args.laps,
                                 rate_hz=args.rate, k_left_m=2e-5, k_right_m=2e-5, gyro_bias_radps=0.0015,
                                 gyro_noise_sd_radps=0.004)
    else:
        sc = scenarios.varied_drive_scenario(duration_s=args.duration, rate_hz=args.rate, k_left_m=2e-5, k_right_m=2e-5,
                                       gyro_bias_radps=0.0015, gyro_noise_sd_radps=0.004)
    if args.no_slip:
        fields.update(slip_events=(), floor_patches=())
    if args.no_noise:
        fields.update(k_left_m=0.0, k_right_m=0.0, gyro_noise_sd_radps=0.0, gyro_bias_radps=0.0,
                      accel_noise_sd_mps2=0.0, accel_bias_mps2=0.0)
    return sc.with_values(**fields) if fields else sc


def _cmd_synth(args: argparse.Namespace) -> int:
    from .bags import write_bag
    from .sim import simulate
    if args.rate <= 0 or args.rate > 2000:
        raise UsageError(f"--rate {args.rate:g} is outside (0, 2000] Hz; give a joint-state rate such as 100.")
    fmt = args.format
    out = Path(args.out)
    if fmt == "ros1" and out.suffix != ".bag":
        raise UsageError(f"a ROS 1 bag must be a file ending in .bag; name the output '{out}.bag'.")
    if args.base != "differential":
        return _cmd_synth_table(args, out, fmt)
    sc = _scenario(args)
    result = simulate(sc, args.seed)
    write_bag(result, out, fmt, truth_stride=args.truth_stride, overwrite=args.overwrite)
    _say(f"wrote {out} ({fmt}): scenario {sc.name}, seed {args.seed}, {len(result)} joint states at {sc.rate_hz:g} Hz, "
         f"{result.t_s[-1]:.1f} s, {result.distance_m:.1f} m, {len(result.slip_intervals_ns)} slip intervals")
    _say(f"  true geometry: left radius {sc.true_left_radius_m} m, right radius {sc.true_right_radius_m} m, "
         f"track {sc.true_track_m} m (URDF carries the nominal {sc.nominal_left_radius_m} / "
         f"{sc.nominal_right_radius_m} / {sc.nominal_track_m} m)")
    return 0


BASE_KINDS = ("differential", "tricycle", "ackermann", "mecanum", "omni", "swerve")


def params_path_for(out: Path) -> Path:
    """The parameters file ``synth --base KIND`` writes beside bag ``out``: OUT.params.yaml (a .bag suffix dropped)."""
    stem = out.name[:-4] if out.suffix == ".bag" else out.name
    return out.with_name(f"{stem}.params.yaml")


def _cmd_synth_table(args: argparse.Namespace, out: Path, fmt: str) -> int:
    """synth --base KIND for a wheel table: the kind's invented vehicle on its default route."""
    from .bags import write_bag
    from .demo.vehicles import params_text, table_scenario, vehicle
    from .sim.table import simulate_table
    if args.scenario != "demo":
        raise UsageError(f"--scenario {args.scenario} is for differential bases; a --base {args.base} drives its "
                         "kind's default route (leave --scenario out).")
    params = params_path_for(out)
    if params.exists() and not args.overwrite:
        raise UsageError(f"output '{params}' already exists; remove it or add --overwrite.")
    v = vehicle(args.base)
    sc = table_scenario(args.base, rate_hz=args.rate, laps=args.laps, noise=not args.no_noise, slip=not args.no_slip)
    result = simulate_table(sc, args.seed)
    write_bag(result, out, fmt, truth_stride=args.truth_stride, overwrite=args.overwrite, imu_accel=False, cmd=False)
    about = f"{v.name} ({args.base}) for the synthesised bag: joints and noise; positions and radii from its URDF."
    _atomic_bytes(params, params_text(args.base, geometry=False, description=about).encode())
    _say(f"wrote {out} ({fmt}): {v.name}, {v.role} ({args.base}, invented), seed {args.seed}, {len(result)} joint "
         f"states at {sc.rate_hz:g} Hz, {result.t_s[-1]:.1f} s, {result.distance_m:.1f} m, "
         f"{len(result.slip_intervals_ns)} slip intervals")
    _say(f"wrote {params} (kind, joints and noise; wheel positions and radii come from the URDF in the bag); "
         f"config/example_{args.base}.yaml gives the same vehicle's full nominal table")
    _say(f"  replay: wheel-dr replay {out} --params {params}")
    return 0


# -- replay --------------------------------------------------------------------------------------
def _cmd_replay(args: argparse.Namespace) -> int:
    import numpy as np

    from .runs import load_settings_file, replay_run
    from .bags.reader import read_run
    sf = load_settings_file(args.params)
    t0 = time.perf_counter()
    data = read_run(args.bag, args.joint_topic, args.imu_topic, "none", use_imu=not args.no_imu)
    t_read = time.perf_counter() - t0
    res = replay_run(data, sf)
    traj = res.trajectory
    out = _out_dir(args.out, "out/replay")
    write_trajectory_csv(out / "trajectory.csv", traj)
    write_tum(out / "trajectory.tum", traj)
    _say(f"bag {data.path} ({data.storage}): {len(data)} joint states on {data.joint_topic} "
         f"({data.decode} decoding, {t_read:.2f} s), stamps from {data.stamps_from}")
    _say(f"  IMU: {data.imu_topic} ({data.imu_count} readings)" if data.imu_topic else "  IMU: none")
    _say(f"settings: {sf.path or 'defaults'}")
    for note in res.notes + data.notes:
        _say(f"  {note}")
    used = int(np.count_nonzero(traj.status < 10))
    skipped = {k: v for k, v in traj.counters.items() if v and k not in ("used",)}
    dist = float(np.sum(np.abs(traj.travel.ds_left_m + traj.travel.ds_right_m)) / 2)
    if res.settings.drive.kind != "differential" and traj.travel.joint_travel_m is not None:
        dist = float(np.mean(np.sum(np.abs(traj.travel.joint_travel_m), axis=0)))   # tables: mean wheel travel
    _say(f"samples used {used} of {len(data)}; " + ", ".join(f"{k} {v}" for k, v in skipped.items()))
    _say(f"end pose x {traj.x_m[-1]:.3f} m, y {traj.y_m[-1]:.3f} m, yaw {traj.yaw_rad[-1]:.4f} rad "
         f"(sd {np.sqrt(traj.cov[-1, 0, 0]):.3f} m, {np.sqrt(traj.cov[-1, 1, 1]):.3f} m, "
         f"{np.sqrt(traj.cov[-1, 2, 2]):.4f} rad); wheel distance {dist:.1f} m; "
         f"slip flagged on {100.0 * np.mean(traj.slip.slip):.1f} % of samples")
    _say(f"wrote {out / 'trajectory.csv'} and {out / 'trajectory.tum'}")
    if res.settings.online_calibration.enabled:
        from .core.online_calibration import unsupported_reason
        online = traj.online
        why = unsupported_reason(res.settings)
        if why is not None:
            _say(f"online calibration: {why}; no geometry_online.csv written")
        elif res.settings.drive.kind != "differential":
            _replay_table_online(out, traj, res.settings)
        elif online is None:
            _say("online calibration: enabled, but the bag has no IMU readings (the gyro observes the geometry); "
                 "no geometry_online.csv written")
        else:
            write_geometry_csv(out / "geometry_online.csv", online)
            left, right, track = online.suggested()
            alerts = int(np.count_nonzero(online.alert))
            last = (f"radius ratio {online.radius_ratio[-1]:.5f} +- {online.radius_ratio_se[-1]:.5f}, track over "
                    f"radius {online.track_over_radius[-1]:.4f} +- {online.track_over_radius_se[-1]:.4f}"
                    if len(online) else "no interval closed")
            _say(f"online calibration: {last}; alert on {alerts} of {len(online)} intervals; suggested left radius "
                 f"{left:.6f} m, right radius {right:.6f} m, track {track:.6f} m (mean radius kept: the gyro cannot "
                 "see the scale)")
            _say(f"wrote {out / 'geometry_online.csv'}")
    if args.bag_out:
        from .bags.copy import copy_with_odometry
        target = copy_with_odometry(data.path, args.bag_out, traj, res.settings, topic=args.odom_topic,
                                    overwrite=args.overwrite)
        _say(f"wrote {target} (copy of the bag with the recomputed odometry on {args.odom_topic})")
    _say(f"note: {SAFETY_NOTE}")
    return 0


# -- compare -------------------------------------------------------------------------------------
def _cmd_compare(args: argparse.Namespace, title: str = "wheel_dr comparison", notes: Sequence[str] = (),
                 extra_sections: Sequence = (), extra_runs: Sequence[tuple[Sequence[str], Sequence[str]]] = ()) -> int:
    """compare; ``extra_runs`` (bags, parameters files) are compared on their own (another vehicle) and
    added to the same summary and page."""
    from .runs import compare_bags, load_settings_file
    from .report import ranking_text, write_report, write_summary
    sfs = [load_settings_file(p) for p in (args.params or [None])]
    out = _out_dir(args.out, "out/compare")
    t0 = time.perf_counter()
    res = compare_bags(args.bags, sfs, truth=args.truth, joint_topic=args.joint_topic, imu_topic=args.imu_topic,
                       use_imu=not args.no_imu, jobs=args.jobs, progress=not args.quiet,
                       scheduler=getattr(args, "scheduler", None), workers=getattr(args, "workers", None))
    for more_bags, more_params in extra_runs:
        more_sfs = [load_settings_file(p) for p in more_params]
        more = compare_bags(list(more_bags), more_sfs, truth=args.truth, use_imu=not args.no_imu, jobs=args.jobs,
                            progress=not args.quiet)
        res.evaluations += more.evaluations
        res.notes.update(more.notes)
        res.bag_info.update(more.bag_info)
        sfs += more_sfs
    for label, info in res.bag_info.items():
        _say(f"bag {label}: {info['samples']} joint states ({info['decode']} decoding, {info['decode_s']:.2f} s), "
             f"IMU {info['imu_topic'] or 'none'}, truth {info['truth']}, {info['slip_labels']} slip labels")
        for note in res.notes.get(label, []):
            _say(f"  {note}")
    meta = {"wheel_dr": __version__, "bags": list(res.bag_info), "settings": [sf.path or "defaults" for sf in sfs],
            "truth": args.truth or "auto", "bag_info": res.bag_info}
    t1 = time.perf_counter()
    csv_path, json_path = write_summary(out, res.evaluations, meta=meta)
    page = write_report(out, res.evaluations, title=title, notes=list(notes), settings_files=sfs,
                        extra_sections=list(extra_sections))
    t2 = time.perf_counter()
    _say(ranking_text(res.evaluations))
    _say(f"wrote {csv_path}, {json_path}")
    _say(f"time: decoding and {len(res.evaluations)} runs with metrics {t1 - t0:.1f} s, tables and report {t2 - t1:.1f} s")
    _say(f"report: {page.resolve()}")
    return 0


# -- fleet -------------------------------------------------------------------------------------
def _cmd_fleet(args: argparse.Namespace) -> int:
    from .fleet.run import cmd_fleet
    return cmd_fleet(args)


def _add_scheduler_flags(p: argparse.ArgumentParser, default: str | None) -> None:
    p.add_argument("--scheduler", metavar="local|ADDRESS", default=default,
                   help="run on Dask: 'local' starts a LocalCluster of worker processes on this machine, "
                   "tcp://HOST:PORT connects to a running 'dask scheduler' (workers must see the same paths)"
                   + (" (default local)" if default else "; without it a process pool of --jobs is used"))
    p.add_argument("--workers", type=int, metavar="N",
                   help="worker processes of --scheduler local (default: the CPUs available)")


# -- demo ----------------------------------------------------------------------------------------
def _config_dir() -> Path:
    here = Path(__file__).resolve().parent.parent / "config"
    if (here / "demo_nominal.yaml").is_file():
        return here
    share = Path(sys.prefix) / "share" / "wheel_dr" / "config"
    if (share / "demo_nominal.yaml").is_file():
        return share
    raise UsageError("the demo settings files (config/demo_*.yaml) are not installed; run from the wheel_dr "
                     "source tree or reinstall the package.")


DEMO_CONFIGS = ("demo_nominal.yaml", "demo_corrected.yaml", "demo_motion_model.yaml", "demo_gyro.yaml")
DEMO_CACHE_VERSION = 2
DEMO_SECOND_CONFIG = "example_mecanum.yaml"     # the demo's second vehicle, the Numbat trolley
DEMO_SECOND_CACHE_VERSION = 1


def _demo_second_vehicle(out: Path, cfg: Path) -> tuple[Path, tuple]:
    """The demo's second vehicle (the invented Numbat mecanum trolley): its cached bag and its report section."""
    import numpy as np

    from .bags import write_bag
    from .demo.vehicles import NUMBAT_SEED, numbat_scenario, vehicle
    from .report.vehicle_section import table_vehicle_section
    from .sim.table import simulate_table
    sc = numbat_scenario()
    bag = out / "cache" / f"{sc.name}_s{NUMBAT_SEED}_v{DEMO_SECOND_CACHE_VERSION}"
    sim = simulate_table(sc, NUMBAT_SEED)      # a fraction of a second: also feeds the section's figure
    if not (bag / "metadata.yaml").is_file():
        _say(f"synthesising the second demo vehicle (Numbat mecanum trolley, germination lab) into {bag}")
        write_bag(sim, bag, "mcap", overwrite=True, imu_accel=False, cmd=False)
    else:
        _say(f"using the cached drive of the second demo vehicle {bag}")
    v = vehicle("mecanum")
    nominal = sc.nominal_table
    resid = nominal.residual(sim.spin_travel_m())
    t0 = sim.stamp_ns[0]
    spans = [((a - t0) * 1e-9, (b - t0) * 1e-9, j) for (a, b), j in zip(sim.slip_intervals_ns.tolist(),
                                                                       sim.slip_joint.tolist())]
    intro = (f"A second invented vehicle of the seed bank: the {v.name}, {v.role}, a mecanum base "
             f"(four wheels, rollers at 45 degrees) that strafes along the shelves, turns on the spot and backs up "
             f"(the default mecanum route twice, {sim.t_s[-1]:.0f} s, {sim.distance_m:.1f} m); its rear-left wheel "
             f"spins on spilled seed for 1.5 s. Replayed with config/{DEMO_SECOND_CONFIG} (nominal table); its true "
             "radii and track differ a little.")
    section = table_vehicle_section(f"Second vehicle: the {v.name} trolley ({nominal.kind})", intro, nominal,
                                    sc.table, sim.t_s[1:], np.asarray(resid), spans, recording=bag.name)
    return bag, section


def _cmd_demo(args: argparse.Namespace) -> int:
    from .bags import write_bag
    from .demo.scenarios import DEMO_SEED, demo_scenario
    from .sim import simulate
    out = _out_dir(args.out, "out/demo")
    cfg = _config_dir()
    bag = out / "cache" / f"ferncliff_night_round_s{DEMO_SEED}_v{DEMO_CACHE_VERSION}"
    if not (bag / "metadata.yaml").is_file():
        _say(f"synthesising the demo drive (Quokka cart, Ferncliff Seed Bank night round) into {bag}")
        write_bag(simulate(demo_scenario(), DEMO_SEED), bag, "mcap", overwrite=True)
    else:
        _say(f"using the cached demo drive {bag}")
    sections = []
    if not args.no_calibration:
        from . import calibrate_cmd
        _say("calibrating the demo cart from a simulated ten-minute drive (wheel-dr calibrate)")
        _, section = calibrate_cmd.demo_calibration()
        sections.append(section)
    second_bag, second_section = _demo_second_vehicle(out, cfg)
    sections.append(second_section)
    from .online_demo import online_demo_section
    _say("watching the geometry online while the demo cart's left tyre softens (online_calibration.enabled)")
    sections.append(online_demo_section(cfg, DEMO_SEED))
    ns = argparse.Namespace(bags=[str(bag)], params=[str(cfg / c) for c in DEMO_CONFIGS], truth="/ground_truth",
                            joint_topic=None, imu_topic=None, no_imu=False, jobs=args.jobs, quiet=args.quiet,
                            out=str(out))
    return _cmd_compare(ns, title="wheel_dr demo: the Quokka cart's night round (invented scenario)",
                        notes=["Demo data: the 'Quokka' cart, the 'Numbat' trolley and the 'Ferncliff Seed Bank' are "
                               "invented; the numbers are demo-only."],
                        extra_sections=sections, extra_runs=[([str(second_bag)], [str(cfg / DEMO_SECOND_CONFIG)])])


# -- parser --------------------------------------------------------------------------------------
def _add_topic_flags(p: argparse.ArgumentParser) -> None:
    p.add_argument("--joint-topic", metavar="TOPIC",
                   help="joint-state topic (default: the bag's only sensor_msgs/JointState topic)")
    p.add_argument("--imu-topic", metavar="TOPIC", help="IMU topic (default: the bag's only sensor_msgs/Imu topic)")
    p.add_argument("--no-imu", action="store_true", help="ignore the IMU (no gyro for the slip detectors)")


OWN_COMMANDS = ("synth", "replay", "compare", "demo", "fleet")


def default_jobs() -> int:
    """Worker processes by default: the CPUs this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)


def build_parser(command: str | None = None) -> argparse.ArgumentParser:
    """The ``wheel-dr`` argument parser with every subcommand.

    ``command`` is the subcommand about to run, if known: the subcommands of LAZY_COMMANDS are
    imported only when they are that command (otherwise they are listed with their one-line help).
    """
    parser = argparse.ArgumentParser(
        prog="wheel-dr", description="Offline wheel odometry: replay the wheel_dr estimator over bags, compare "
        "settings against ground truth, synthesise test drives. " + SAFETY_NOTE,
        formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--version", action="version", version=f"wheel-dr {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    p = sub.add_parser("synth", help="simulate a drive and write it as a real bag",
                       description="Simulate a differential-drive run (the invented 'Quokka' cart) and write a bag: "
                       "/joint_states, /imu (gyro and accelerometer with bias and noise, orientation), /cmd_vel "
                       "(geometry_msgs/Twist, the commanded speed), /ground_truth (nav_msgs/Odometry), "
                       "/robot_description (URDF, nominal geometry) and /ground_truth/slip (true slip intervals, "
                       "diagnostic_msgs/DiagnosticArray). True radii and track differ from nominal. With --base KIND a wheel-table "
                       "vehicle of that kind instead (plus OUT.params.yaml). Deterministic for a given --seed.")
    p.add_argument("out", help="output bag: a directory for rosbag2, a file ending in .bag for --format ros1")
    p.add_argument("--scenario", choices=SCENARIOS, default="demo",
                   help="demo: the night round through the seed-bank aisles with a mopped patch (default); "
                   "square-cw / square-ccw: the UMBmark square; varied: a long drive for calibration")
    p.add_argument("--format", choices=("mcap", "sqlite3", "ros1"), default="mcap", help="bag format (default mcap)")
    p.add_argument("--seed", type=int, default=2027, help="random seed (default 2027)")
    p.add_argument("--rate", type=float, default=100.0, help="joint-state and IMU rate in Hz (default 100)")
    p.add_argument("--laps", type=int, default=1, help="laps of the route (demo, squares; default 1)")
    p.add_argument("--side", type=float, default=4.0, help="square side in m (default 4)")
    p.add_argument("--duration", type=float, default=600.0, help="length of the varied drive in s (default 600)")
    p.add_argument("--truth-stride", type=int, default=5, help="ground truth every n-th joint sample (default 5)")
    p.add_argument("--no-slip", action="store_true", help="no slip events")
    p.add_argument("--no-noise", action="store_true", help="no random wheel error and a perfect gyro and accelerometer")
    p.add_argument("--overwrite", action="store_true", help="replace an existing output")
    p.add_argument("--base", choices=BASE_KINDS, default="differential",
                   help="drive kind: differential (the Quokka cart, default) or a wheel table, each an invented "
                   "vehicle on its kind's default route (tricycle Wombat, ackermann Emu, mecanum Numbat, omni "
                   "Bilby, swerve Quoll; spin and steering joints in one JointState, one wheel slipping); "
                   "also writes OUT.params.yaml beside the bag")
    p.set_defaults(func=_cmd_synth)

    p = sub.add_parser("replay", help="run the estimator over a bag and write the trajectory",
                       description="Run the wheel_dr core over the joint states of a bag (rosbag2 mcap or sqlite3, "
                       "or ROS 1) and write DIR/trajectory.csv (t, x, y, yaw, the covariance cov_xx ... cov_yawyaw, "
                       "slip, then v, w, slip_left, slip_right; one row per sample used) and "
                       "DIR/trajectory.tum (TUM RGB-D benchmark format). Geometry comes from the parameters file, "
                       "else from the URDF on /robot_description; the source is printed.")
    p.add_argument("bag", help="rosbag2 directory or ROS 1 .bag file")
    p.add_argument("--params", metavar="FILE", help="ROS 2 parameters file (default: built-in defaults)")
    p.add_argument("--out", metavar="DIR", help="output directory (default out/replay)")
    p.add_argument("--bag-out", metavar="BAG",
                   help="also write a copy of the bag with the recomputed odometry (nav_msgs/Odometry) added")
    p.add_argument("--odom-topic", default="/wheel_dr/odom", help="topic of the recomputed odometry in --bag-out")
    p.add_argument("--overwrite", action="store_true", help="replace an existing --bag-out")
    _add_topic_flags(p)
    p.set_defaults(func=_cmd_replay)

    p = sub.add_parser("compare", help="compare settings files on bags against ground truth",
                       description="Decode each bag once, run every settings file on it and compare with ground truth: "
                       "ATE (anchored and Umeyama-aligned), RPE per distance, end-point drift, NEES consistency "
                       "and slip precision/recall where the bag has slip labels. Writes DIR/summary.csv, "
                       "DIR/summary.json and DIR/index.html (plots embedded) and prints a ranking. Bags run in "
                       "parallel processes.")
    p.add_argument("bags", nargs="+", metavar="BAG", help="rosbag2 directories or ROS 1 .bag files")
    p.add_argument("--params", action="append", metavar="FILE",
                   help="a settings file to compare; repeat for each (default: built-in defaults)")
    p.add_argument("--truth", metavar="TOPIC|PARENT->CHILD|FILE",
                   help="ground truth: a nav_msgs/Odometry, PoseStamped or PoseWithCovarianceStamped topic, a TF "
                   "frame pair in the bag (e.g. map->base_link), or a TUM trajectory file (default: the bag's only "
                   "pose topic)")
    p.add_argument("--out", metavar="DIR", help="output directory (default out/compare)")
    p.add_argument("--jobs", type=int, default=default_jobs(), help="worker processes (default: CPUs available)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    _add_scheduler_flags(p, None)
    _add_topic_flags(p)
    p.set_defaults(func=_cmd_compare)

    p = sub.add_parser("fleet", help="analyse every robot's bags on a Dask cluster: geometry trends, wear alerts",
                       description="Find every bag under ROOT (rosbag2 directories, .mcap and ROS 1 .bag files at any "
                       "depth; ROOT/<robot>/... names the robot), and per bag as one Dask task: decode, replay "
                       "with the robot's settings (ROOT/<robot>/params.yaml wins over --params), compare with its "
                       "truth, fit the wheel radii and track with standard errors, score slip. Per robot: a "
                       "weighted trend of the geometry against distance and an alert when a value moved beyond "
                       "--alert-pct. Writes DIR/bags.csv, DIR/robots.csv, DIR/fleet.json and DIR/index.html. "
                       + SAFETY_NOTE)
    p.add_argument("root", metavar="ROOT", help="fleet directory: ROOT/<robot>/<bags at any depth>")
    p.add_argument("--params", metavar="FILE", help="ROS 2 parameters file for robots without their own "
                   "ROOT/<robot>/params.yaml (default: built-in defaults and the URDF in each bag)")
    p.add_argument("--truth", metavar="TOPIC|PARENT->CHILD",
                   help="ground truth in each bag: a pose topic or a TF pair such as map->base_link (a robot's own "
                   "localisation is a fine truth for trends); bags without it are replayed but not fitted "
                   "(default: the bag's only pose topic)")
    p.add_argument("--out", metavar="DIR", default="out/fleet", help="output directory (default out/fleet)")
    _add_scheduler_flags(p, "local")
    p.add_argument("--robot-pattern", metavar="REGEX",
                   help="regular expression with one group, searched in the path below ROOT, naming the robot "
                   "(default: the first path component)")
    p.add_argument("--alert-pct", type=float, default=0.5,
                   help="alert when a radius or the track moved by more than this from the parameters file "
                   "(percent, default 0.5)")
    p.add_argument("--resume", action="store_true",
                   help="reuse results cached in DIR/cache (keyed by bag content and settings): only new or "
                   "changed bags are analysed")
    p.add_argument("--segment-m", type=float, default=2.0,
                   help="segment length (m of wheel travel) of the geometry fit (default 2)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    _add_topic_flags(p)
    p.set_defaults(func=_cmd_fleet)

    p = sub.add_parser("demo", help="synthesise the demo drive and compare four shipped settings files",
                       description="Synthesise the demo scenario (the invented 'Quokka' cart on its night round "
                       "through the 'Ferncliff Seed Bank'; cached under DIR/cache), compare "
                       "config/demo_nominal.yaml, config/demo_corrected.yaml, config/demo_motion_model.yaml and "
                       "config/demo_gyro.yaml (gyro substitution while slipping) against its ground truth, add a calibration section (the demo cart calibrated from a simulated "
                       "ten-minute drive), add the second vehicle (the invented 'Numbat' mecanum trolley, replayed with "
                       "config/example_mecanum.yaml, its own recording and section), write the report and print where "
                       "the page is.")
    p.add_argument("--out", metavar="DIR", help="output directory (default out/demo)")
    p.add_argument("--jobs", type=int, default=default_jobs(), help="worker processes (default: CPUs available)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.add_argument("--no-calibration", action="store_true",
                   help="leave out the calibration section (a simulated calibration drive fitted by wheel-dr calibrate)")
    p.set_defaults(func=_cmd_demo)

    for name, (module, help_text) in LAZY_COMMANDS.items():
        if command == name:
            importlib.import_module(module).add_parser(sub)
        else:
            sub.add_parser(name, help=help_text, add_help=False)
    return parser


def _rosbags_errors() -> tuple[type[BaseException], ...]:
    from rosbags.highlevel import AnyReaderError
    from rosbags.rosbag1 import ReaderError as Reader1Error, WriterError as Writer1Error
    from rosbags.rosbag2 import ReaderError as Reader2Error, WriterError as Writer2Error
    from rosbags.serde import SerdeError
    return AnyReaderError, Reader1Error, Writer1Error, Reader2Error, Writer2Error, SerdeError


def main(argv: list[str] | None = None) -> int:
    """Entry point of ``wheel-dr``; returns the exit status (2 for errors a user can cause, 130 on Ctrl-C)."""
    tokens = sys.argv[1:] if argv is None else list(argv)
    first = next((t for t in tokens if not t.startswith("-")), None)
    import signal

    interrupted = []

    def _on_sigint(signum: int, frame: object) -> None:
        interrupted.append(signum)
        signal.default_int_handler(signum, frame)

    try:
        signal.signal(signal.SIGINT, _on_sigint)
    except ValueError:          # not the main thread: keep the interpreter's handler
        pass
    name = f"wheel-dr {first}" if first else "wheel-dr"
    try:
        return _main(tokens, first)
    except KeyboardInterrupt:   # also while modules are still importing
        print(f"{name}: interrupted; outputs not completed were not written.", file=sys.stderr)
        return 130
    except (ImportError, RuntimeError):
        # An interrupt inside a compiled module's import (numpy re-raises it as ImportError) or
        # inside a lock's wait (threading then fails to release it) surfaces as another error:
        # still an interrupt, not a broken install.
        if not interrupted:
            raise
        print(f"{name}: interrupted; outputs not completed were not written.", file=sys.stderr)
        return 130


def _main(tokens: list[str], first: str | None) -> int:
    import warnings

    # The CLI prints its own sentences only: floating-point warnings of numerical code on extreme
    # inputs (overflow, invalid values) are not messages for a user; results stay checked.
    warnings.filterwarnings("ignore", category=RuntimeWarning)
    parser = build_parser(first)
    args = parser.parse_args(tokens)
    from .core.errors import WheelDrError
    try:
        return int(args.func(args) or 0)
    except (WheelDrError, UsageError) as exc:
        print(f"wheel-dr {args.command}: error: {exc}", file=sys.stderr)
        return 2
    except BrokenPipeError:
        return 141
    except _rosbags_errors() as exc:
        print(f"wheel-dr {args.command}: error: a bag cannot be read or written ({_bag_problem(exc)}); check that "
              "the bag is complete and the output path is new.", file=sys.stderr)
        return 2
    except OSError as exc:
        print(f"wheel-dr {args.command}: error: {exc.strerror or 'the system refused the operation'} "
              f"({exc.filename or 'file'}); check the path and its permissions.", file=sys.stderr)
        return 2


def _bag_problem(exc: BaseException) -> str:
    from .bags.reader import _why
    return _why(exc)


if __name__ == "__main__":
    sys.exit(main())
