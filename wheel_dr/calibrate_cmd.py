"""The ``wheel-dr calibrate`` subcommand: fit radii, track and noise from bags, or run the UMBmark square test.

Shell only: it reads bags and files, calls wheel_dr.analysis.calibration / umbmark, prints tables
and writes the tuned parameters file (same structure and names as the input, only fitted values
changed, ``wheel_dr.params.update_params_text``). Errors a user can cause are one sentence, exit 2.

The safety caution it prints is ``wheel_dr.safety.SAFETY_TEXT``.
"""
from __future__ import annotations

import argparse
import datetime as _dt
import math
import sys
from pathlib import Path
from typing import Sequence

from .analysis.calibration import (GEOMETRY_NAMES, CalibrationError, CalibrationResult, CalibrationRun,
                                   RunFigures, TruthError, calibrate, prepare_run)
from .core.path import PlanarPath
from .analysis.umbmark import (CSV_COLUMNS, corrected_geometry, parse_square_csv, refine, simulate_square_test,
                               square_csv_text, umbmark)
from .core.errors import WheelDrError
from .core.settings import NOISE_MODELS, Settings
from .core.wheels import JointSamples
from .params import atomic_write_text, parse_params_text, update_params_text, write_params_text
from .safety import SAFETY_TEXT

__all__ = ["add_parser", "run_calibrate", "main", "load_bag", "default_params_text", "SAFETY_NOTE", "figures_table",
           "result_lines", "header_text", "calibration_section",
           "demo_calibration"]

SAFETY_NOTE = SAFETY_TEXT


def load_bag(path: str | Path, truth: str, joint_topic: str | None = None) -> tuple[JointSamples, PlanarPath]:
    """Joint states and the ground-truth path of one bag (``wheel_dr.bags.read_run``: ``truth`` is a
    topic, a TF pair PARENT->CHILD or a TUM file). Raises TruthError when the bag has no truth."""
    from .bags import read_run

    data = read_run(path, joint_topic=joint_topic, truth=truth, need_truth=True, use_imu=False)
    if data.truth is None or len(data.truth) == 0:
        raise TruthError(f"bag '{path}' has no ground truth for --truth {truth}; record the truth topic (for "
                         "example nav_msgs/Odometry from motion capture) during the drive.")
    return data.samples, data.truth


# ------------------------------------------------------------------------------------------------
# parameters files
# ------------------------------------------------------------------------------------------------
def default_params_text() -> str:
    """Text of config/wheel_dr.yaml (installed or in the source tree), else a generated full file."""
    here = Path(__file__).resolve()
    for cand in (here.parents[1] / "config" / "wheel_dr.yaml",
                 Path(sys.prefix) / "share" / "wheel_dr" / "config" / "wheel_dr.yaml"):
        if cand.is_file():
            return cand.read_text(encoding="utf-8")
    return write_params_text(Settings())


def _read_params(path: str | None) -> tuple[str, Settings, str]:
    if path is None:
        text, label = default_params_text(), "config/wheel_dr.yaml defaults"
    else:
        p = Path(path)
        if not p.is_file():
            raise WheelDrError(f"parameters file '{p}' does not exist; give the path of a YAML file such as "
                               "config/wheel_dr.yaml.")
        text, label = p.read_text(encoding="utf-8"), str(p)
    settings = Settings.from_flat(parse_params_text(text, f"parameters file '{label}'"))
    return text, settings, label


def _rounded(values: dict[str, object]) -> dict[str, object]:
    out: dict[str, object] = {}
    for k, v in values.items():
        if k in ("wheels.left_radius", "wheels.right_radius"):
            out[k] = round(float(v), 7)
        elif k == "wheels.track_width":
            out[k] = round(float(v), 6)
        elif k in ("noise.k_left", "noise.k_right"):
            out[k] = float(f"{float(v):.4g}")
        elif k == "noise.alphas":
            out[k] = tuple(float(f"{float(a):.4g}") for a in v)  # type: ignore[union-attr]
        else:
            out[k] = v
    return out


# ------------------------------------------------------------------------------------------------
# tables
# ------------------------------------------------------------------------------------------------
def _fmt(v: float, spec: str) -> str:
    return "-" if v is None or (isinstance(v, float) and math.isnan(v)) else format(v, spec)


def figures_table(before: Sequence[RunFigures], after: Sequence[RunFigures], title: str) -> list[str]:
    """Lines of a before/after table (ATE m, drift %, mean NEES with its 95 % interval)."""
    lines = [title,
             f"  {'bag':<28} {'ATE before':>10} {'after':>8}  {'drift% before':>13} {'after':>7}  "
             f"{'NEES before':>11} {'after':>7}  {'95% interval':>15}  segs"]
    for b, a in zip(before, after):
        inside = "ok" if a.nees_inside else "OUT"
        lines.append(f"  {b.name[:28]:<28} {_fmt(b.ate_m, '10.3f')} {_fmt(a.ate_m, '8.3f')}  "
                     f"{_fmt(b.drift_pct, '13.2f')} {_fmt(a.drift_pct, '7.2f')}  {_fmt(b.nees_mean, '11.2f')} "
                     f"{_fmt(a.nees_mean, '7.2f')}  [{_fmt(a.nees_lo, '.2f')}, {_fmt(a.nees_hi, '.2f')}] {inside:>3} "
                     f"{a.n_segments:5d}")
    return lines


def result_lines(res: CalibrationResult, bag_names: Sequence[str]) -> list[str]:
    """What was fitted, with standard errors, excitation and the before/after figures."""
    lines = [f"Calibrated on {len(bag_names)} bag(s): {', '.join(bag_names)}; {res.n_segments} segments of "
             f"{res.segment_length_m:g} m"]
    before = res.before.to_flat()
    units = {"wheels.left_radius": "m", "wheels.right_radius": "m", "wheels.track_width": "m"}
    if res.systematic is not None:
        for name, value, se in zip(GEOMETRY_NAMES, res.systematic.geometry, res.systematic.std_error):
            old = float(before[name])
            lines.append(f"  {name:<22} {old:.6f} -> {value:.6f} {units[name]}  (+- {se:.6f}, "
                         f"{100 * (value / old - 1):+.3f} %)")
        lines.append(f"  design condition number {res.systematic.condition:.1f}; residual variance "
                     f"{res.systematic.residual_variance:.2f}")
    if res.noise is not None:
        names = ("noise.k_left", "noise.k_right") if res.noise.model == "per_wheel" else (
            "alpha1", "alpha2", "alpha3", "alpha4")
        old = ([before["noise.k_left"], before["noise.k_right"]] if res.noise.model == "per_wheel"
               else list(before["noise.alphas"]))
        lines.append(f"  noise model {res.noise.model} ({res.noise.n_segments} segments, maximum likelihood; "
                     "standard errors from the joint covariance):")
        for n, o, v, se in zip(names, old, res.noise.theta, res.noise.std_error):
            lines.append(f"    {n:<20} {float(o):.4g} -> {v:.4g}  (+- {se:.2g})")
        sd, sd_se = res.noise.truth_sd, res.noise.truth_sd_se
        how = "fitted" if res.noise.truth_fitted else "given"
        err = (f"  (+- {1000 * sd_se[0]:.2g} mm, {math.degrees(sd_se[1]):.2g} deg)" if res.noise.truth_fitted else "")
        lines.append(f"    truth noise ({how}, not written to the file): {1000 * sd[0]:.3g} mm, "
                     f"{math.degrees(sd[1]):.3g} deg per pose{err}")
    e = res.excitation
    lines.append(f"  drive: {e.travel_m:.0f} m wheel travel, {e.straight_m:.0f} m straight, turns "
                 f"{math.degrees(e.left_turn_rad):.0f} deg left / {math.degrees(e.right_turn_rad):.0f} deg right")
    for p, a in zip(e.problems, e.advice):
        lines.append(f"  warning: {p}; {a}.")
    lines += [f"  note: {n}" for n in res.notes]
    lines += figures_table(res.figures_before, res.figures_after, "Fitted bags (before -> after):")
    if res.holdout_after:
        lines += figures_table(res.holdout_before, res.holdout_after, "Held-out bags (not used in the fit):")
    return lines


def header_text(res: CalibrationResult, bag_names: Sequence[str], holdout_names: Sequence[str],
                start_label: str) -> str:
    """The comment block on top of TUNED.yaml."""
    when = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    lines = [f"description: Tuned by `wheel-dr calibrate` on {when} from {start_label}; fitted "
             f"{', '.join(res.values)}.",
             f"Tuned by `wheel-dr calibrate` on {when}, starting from {start_label}.",
             f"Fitted: {', '.join(res.values)}; every other value is as in the starting file."]
    lines += result_lines(res, bag_names)
    if holdout_names:
        lines.append(f"Held-out bag(s): {', '.join(holdout_names)}")
    lines.append(SAFETY_NOTE)
    return "\n".join(lines)


# ------------------------------------------------------------------------------------------------
# commands
# ------------------------------------------------------------------------------------------------
def _prepare(paths: Sequence[str], args: argparse.Namespace,
             settings: Settings) -> list[tuple[str, JointSamples, PlanarPath, CalibrationRun]]:
    out = []
    for path in paths:
        samples, truth = load_bag(path, args.truth, args.joint_topic)
        name = Path(path).name
        out.append((name, samples, truth, prepare_run(samples, truth, settings, name)))
    return out


def _bags(args: argparse.Namespace) -> int:
    if not args.bags:
        raise CalibrationError("no bag given; name one or more bags (or use --square FILE for the square test).")
    if not args.truth:
        raise TruthError("no ground truth given; name its topic with --truth TOPIC (nav_msgs/Odometry or "
                         "geometry_msgs/PoseStamped), or use --square for the square test without truth.")
    truth_sd = _truth_sd(getattr(args, "truth_sd", None))
    text, settings, label = _read_params(args.params)
    if settings.drive.kind != "differential":       # a wheel table: calibrate_table_cmd
        from .calibrate_table_cmd import run_table_calibration
        return run_table_calibration(args, text, settings, label, truth_sd)
    if getattr(args, "scheduler", None):     # one Dask task per bag; the joint fit stays here
        from .fleet.commands import prepare_on_cluster
        both = prepare_on_cluster(list(args.bags) + list(args.holdout or []), args.truth, args.joint_topic,
                                  settings, args.scheduler, args.workers)
        prepared, held = both[:len(args.bags)], both[len(args.bags):]
    else:
        prepared = _prepare(args.bags, args, settings)
        held = _prepare(args.holdout or [], args, settings)
    runs = [r for *_, r in prepared]
    holdout = [r for *_, r in held]
    res = calibrate(runs, settings, segment_length_m=args.segment_m, noise_segment_m=args.noise_segment_m,
                    fit_geometry=not args.no_geometry, fit_noise_params=not args.no_noise,
                    noise_model=args.noise_model, holdout=holdout, fit_truth_offset=args.truth_offset,
                    truth_sd=truth_sd)
    names = [r.name for r in runs]
    for line in result_lines(res, names):
        print(line)
    if args.write:
        header = header_text(res, names, [r.name for r in holdout], label)
        atomic_write_text(args.write, update_params_text(text, _rounded(res.values), header))
        print(f"Wrote {args.write}: launch the node with --ros-args --params-file {args.write}")
    if args.report:
        _write_report(args.report, prepared, held, res, label, args.write)
    print(SAFETY_NOTE)
    return 0


def _truth_sd(text: str | None) -> tuple[float, float] | None:
    """--truth-sd POS_M,YAW_RAD (one number: the same for both is refused; 0 means an exact truth)."""
    if text is None:
        return None
    parts = [p.strip() for p in str(text).split(",")]
    try:
        values = [float(p) for p in parts]
    except ValueError:
        values = []
    if len(values) == 1 and values[0] == 0.0:
        return (0.0, 0.0)
    if len(values) != 2 or not all(math.isfinite(v) and v >= 0 for v in values):
        raise CalibrationError(f"--truth-sd is '{text}'; give the truth's noise per pose as POSITION_M,HEADING_RAD "
                               "(for example 0.001,0.002), or 0 for an exact truth.")
    return values[0], values[1]


def calibration_section(res: CalibrationResult, runs: Sequence[CalibrationRun], bag_names: Sequence[str],
                        holdout: Sequence[CalibrationRun] = ()) -> tuple[str, str, list]:
    """A report section (title, HTML fragment, (figure, caption) pairs) for ``write_report``'s
    ``extra_sections``: see ``wheel_dr.report.calibration_section``."""
    from .report.calibration_section import calibration_section as section
    return section(res, runs, bag_names, holdout)


def demo_calibration(duration_s: float = 600.0, route_seed: int = 7, seed: int = 11, k_m: float = 2e-5
                     ) -> tuple[CalibrationResult, tuple[str, str, list]]:
    """Calibration for the demo report: the demo cart (invented "Quokka", true geometry differing from
    its nominal one) drives a simulated ten-minute calibration drive with ground truth and a second,
    held-out one; returns the result (``.after`` is the tuned Settings) and a report section for
    ``write_report(..., extra_sections=[section])``. About two seconds."""
    from .demo.scenarios import varied_drive_scenario
    from .sim import simulate

    train_sc = varied_drive_scenario(duration_s, route_seed=route_seed, k_left_m=k_m, k_right_m=k_m)
    held_sc = varied_drive_scenario(duration_s, route_seed=route_seed + 100, k_left_m=k_m, k_right_m=k_m)
    start = Settings.from_flat(train_sc.nominal_params)
    train, held = simulate(train_sc, seed=seed), simulate(held_sc, seed=seed + 1)
    runs = [prepare_run(train.joint_samples(), train.truth_path(), start, "calibration drive (simulated)")]
    hold = [prepare_run(held.joint_samples(), held.truth_path(), start, "held-out drive (simulated)")]
    res = calibrate(runs, start, holdout=hold)
    return res, calibration_section(res, runs, [r.name for r in runs], hold)


def _write_report(out_dir: str, prepared: Sequence[tuple[str, JointSamples, PlanarPath, CalibrationRun]],
                  held: Sequence[tuple[str, JointSamples, PlanarPath, CalibrationRun]], res: CalibrationResult,
                  start_label: str = "the starting file", tuned_path: str | None = None) -> None:
    from .analysis.metrics import evaluate
    from .core.estimator import run as run_estimator
    from .report import write_report

    evaluations = []
    for name, samples, truth, _ in list(prepared) + list(held):
        for label, settings in (("before calibration", res.before), ("after calibration", res.after)):
            traj = run_estimator(samples, settings)
            evaluations.append(evaluate(traj, truth, settings, bag=name, name=label))
    section = calibration_section(res, [r for *_, r in prepared], [n for n, *_ in prepared], [r for *_, r in held])
    described = {"before calibration": f"the starting settings: {start_label}",
                 "after calibration": "the same with the fitted values ("
                                      + ", ".join(res.values) + ")"
                                      + (f", written to {tuned_path}" if tuned_path else ", not written (no --write)")}
    path = write_report(out_dir, evaluations, title="wheel_dr calibration", extra_sections=[section],
                        settings_files=described)
    print(f"Report: {path}")


def _square(args: argparse.Namespace) -> int:
    text, settings, label = _read_params(args.params)
    w = settings.wheels
    nominal = (w.left_radius, w.right_radius, w.track_width)
    if args.square == "synth":
        from .demo.quokka import (QUOKKA_NOMINAL_RADIUS_M, QUOKKA_NOMINAL_TRACK_M, QUOKKA_TRUE_LEFT_RADIUS_M,
                                   QUOKKA_TRUE_RIGHT_RADIUS_M, QUOKKA_TRUE_TRACK_M)
        if args.params is None:
            nominal = (QUOKKA_NOMINAL_RADIUS_M, QUOKKA_NOMINAL_RADIUS_M, QUOKKA_NOMINAL_TRACK_M)
            settings = settings.with_values(dict(zip(GEOMETRY_NAMES, nominal)))
            label = "config/wheel_dr.yaml defaults with the demo cart's nominal geometry"
            text = update_params_text(text, dict(zip(GEOMETRY_NAMES, nominal)))
        true = (QUOKKA_TRUE_LEFT_RADIUS_M, QUOKKA_TRUE_RIGHT_RADIUS_M, QUOKKA_TRUE_TRACK_M)
        errors = simulate_square_test(args.side, nominal, true, runs=args.runs, k_left_m=2e-6, k_right_m=2e-6,
                                      measure_sd_m=0.003, seed=args.seed)
        source = (f"simulated square test (demo cart: true radii {true[0]} / {true[1]} m, track {true[2]} m; "
                  f"{args.runs} runs each way, seed {args.seed})")
        print(f"Square test driven in simulation: {source}")
        print(square_csv_text(errors), end="")
    else:
        p = Path(args.square)
        if not p.is_file():
            raise WheelDrError(f"square-test file '{p}' does not exist; write a CSV with the header "
                               f"'{','.join(CSV_COLUMNS)}' (or use --square synth).")
        errors = parse_square_csv(p.read_text(encoding="utf-8"), f"square-test CSV '{p}'")
        source = f"square-test CSV {p.name}"
    first = umbmark(errors, args.side, nominal[2])
    res = refine(first, *nominal)
    rl, rr, b = corrected_geometry(res, *nominal, first_order=args.first_order)
    lines = [f"UMBmark (Borenstein & Feng 1996), {args.side:g} m square, {res.n_cw} cw / {res.n_ccw} ccw runs, "
             f"from {source}",
             f"  centre of gravity cw  x {res.cg_cw[0]:+.4f} m  y {res.cg_cw[1]:+.4f} m",
             f"  centre of gravity ccw x {res.cg_ccw[0]:+.4f} m  y {res.cg_ccw[1]:+.4f} m",
             f"  E_max,syst {res.e_max_syst_m:.4f} m",
             f"  alpha {math.degrees(res.alpha_rad):+.4f} deg  beta {math.degrees(res.beta_rad):+.4f} deg  "
             f"R {res.radius_m:.2f} m",
             f"  E_d {res.e_d:.6f}  E_b {res.e_b:.6f}   (paper's first-order formulas)",
             f"  E_d {res.e_d_refined:.6f}  E_b {res.e_b_refined:.6f}   (exact square kinematics; "
             f"{'not ' if args.first_order else ''}used for the correction)",
             f"  wheels.left_radius  {nominal[0]:.6f} -> {rl:.6f} m",
             f"  wheels.right_radius {nominal[1]:.6f} -> {rr:.6f} m",
             f"  wheels.track_width  {nominal[2]:.6f} -> {b:.6f} m",
             "  (the square test cannot see a common scale error of both radii: check the mean radius on a "
             "measured straight run)"]
    for line in lines:
        print(line)
    if args.write:
        values = _rounded(dict(zip(GEOMETRY_NAMES, (rl, rr, b))))
        when = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
        header = "\n".join([f"description: Tuned by `wheel-dr calibrate --square` on {when} from {label}.",
                            f"Tuned by `wheel-dr calibrate --square` on {when}, starting from {label}.",
                            f"Fitted: {', '.join(values)}; every other value is as in the starting file."]
                           + lines + [SAFETY_NOTE])
        atomic_write_text(args.write, update_params_text(text, values, header))
        print(f"Wrote {args.write}")
    print(SAFETY_NOTE)
    return 0


def run_calibrate(args: argparse.Namespace) -> int:
    """Entry of the subcommand; a WheelDrError becomes one sentence on stderr and exit status 2."""
    try:
        if args.square and args.bags:
            raise CalibrationError("give either bags with ground truth or --square FILE, not both; run them as two "
                                   "calibrations.")
        if args.square and args.runs < 1:
            raise CalibrationError(f"--runs is {args.runs}; give at least 1 run per direction (5 in the paper).")
        return _square(args) if args.square else _bags(args)
    except WheelDrError as exc:
        msg = str(exc)
        print(f"wheel-dr calibrate: {msg[:1].upper()}{msg[1:]}", file=sys.stderr)
        return 2


def add_parser(subparsers) -> argparse.ArgumentParser:
    """Register ``calibrate`` on the CLI's subparsers (wheel_dr/cli.py calls this)."""
    p = subparsers.add_parser(
        "calibrate", help="fit wheel radii, track and noise from bags with ground truth, or run the square test",
        description="Fit the wheel radii and track (least squares on segment-relative motion against ground "
                    "truth) and the noise parameters (maximum likelihood), and write them into a copy of the "
                    "parameters file; or evaluate the UMBmark square test (Borenstein & Feng 1996). "
                    + SAFETY_NOTE)
    p.add_argument("bags", nargs="*", help="bags with joint states and ground truth, fitted jointly")
    p.add_argument("--truth", help="ground truth: a topic (nav_msgs/Odometry, geometry_msgs/PoseStamped, ...), "
                                   "a TF pair PARENT->CHILD in the bag, or a TUM trajectory file")
    p.add_argument("--joint-topic", help="joint-state topic (default: the bag's only sensor_msgs/JointState topic)")
    p.add_argument("--params", help="starting parameters file (default config/wheel_dr.yaml)")
    p.add_argument("--write", metavar="TUNED.yaml", help="write the tuned parameters file here")
    p.add_argument("--holdout", nargs="+", metavar="BAG", help="bags to report figures on, not used in the fit")
    p.add_argument("--noise-model", choices=NOISE_MODELS, help="noise model to fit (default: the file's)")
    p.add_argument("--no-noise", action="store_true", help="fit the geometry only")
    p.add_argument("--no-geometry", action="store_true", help="fit the noise only (keep radii and track)")
    p.add_argument("--segment-m", type=float, default=2.0,
                   help="segment length (mean wheel travel, m) for the geometry fit and figures (default 2)")
    p.add_argument("--noise-segment-m", type=float, default=0.2,
                   help="segment length (m) for the noise fit (default 0.2; lengthen it when the truth is noisy)")
    p.add_argument("--truth-sd", metavar="POS_M,YAW_RAD",
                   help="the truth's own noise per pose (standard deviations, e.g. 0.001,0.002; 0 = exact); "
                        "default: fitted with the wheel noise")
    p.add_argument("--truth-offset", action="store_true",
                   help="also fit where the truth's body frame sits in base_link (a marker set off the base's "
                        "origin or turned); without it a clear offset is reported")
    p.add_argument("--report", metavar="DIR", help="also write an HTML report page into DIR")
    p.add_argument("--square", metavar="FILE|synth",
                   help="UMBmark square test: CSV with columns direction,x_m,y_m (one row per run; direction cw "
                        "or ccw; x_m, y_m = measured end position minus start, metres, x along the first leg, "
                        "y to the left), or 'synth' to drive the test in the simulator")
    p.add_argument("--side", type=float, default=4.0, help="side of the square (m, default 4 as in the paper)")
    p.add_argument("--runs", type=int, default=5, help="runs per direction for --square synth (default 5)")
    p.add_argument("--seed", type=int, default=1, help="random seed for --square synth")
    p.add_argument("--first-order", action="store_true",
                   help="correct with the paper's first-order E_d, E_b instead of the refined ones")
    p.add_argument("--scheduler", metavar="local|ADDRESS",
                   help="decode and prepare the bags as Dask tasks: 'local' starts a LocalCluster on this machine, "
                        "tcp://HOST:PORT uses a running 'dask scheduler' (workers must see the same paths)")
    p.add_argument("--workers", type=int, metavar="N",
                   help="worker processes of --scheduler local (default: the CPUs available)")
    p.set_defaults(func=run_calibrate)
    return p


def main(argv: list[str] | None = None) -> int:
    """Run the subcommand on its own (``python -m wheel_dr.calibrate_cmd ...``)."""
    parser = argparse.ArgumentParser(prog="wheel-dr")
    sub = parser.add_subparsers(dest="command", required=True)
    add_parser(sub)
    args = parser.parse_args(["calibrate", *(sys.argv[1:] if argv is None else argv)])
    return args.func(args)


if __name__ == "__main__":
    sys.exit(main())
