"""``wheel-dr calibrate`` for wheel-table bases (``drive.kind`` tricycle, ackermann, mecanum, omni, swerve).

Shell only: ``wheel_dr.calibrate_cmd`` dispatches here when the parameters file's ``drive.kind`` is a
table kind. It reads the bags, turns the joint states into the table's travel
(``wheel_dr.core.wheels.wheel_travel``), calls ``wheel_dr.analysis.calibration_table.calibrate_table``,
prints what was fitted and writes the tuned parameters file with only the fitted entries of the
drive arrays changed (``wheel_dr.params.update_params_text``). Errors a user can cause are one
sentence, exit 2 (raised as WheelDrError and reported by ``calibrate_cmd.run_calibrate``).
"""
from __future__ import annotations

import argparse
import datetime as _dt
import math
from pathlib import Path
from typing import Sequence

import numpy as np

from .analysis.calibration_table import TABLE_KINDS, TableCalibration, TableFigures, calibrate_table, table_figures
from .core.errors import CalibrationError, SettingsError
from .core.settings import Settings
from .core.wheels import wheel_travel
from .params import atomic_write_text, parse_params_text, update_params_text
from .safety import SAFETY_TEXT

__all__ = ["run_table_calibration", "table_result_lines"]


def _refuse(args: argparse.Namespace, kind: str) -> None:
    """Options of the differential calibration that the table calibration does not offer: one sentence each."""
    unsupported = [("--no-geometry", getattr(args, "no_geometry", False)),
                   ("--noise-model", getattr(args, "noise_model", None)),
                   ("--truth-offset", getattr(args, "truth_offset", False)),
                   ("--report", getattr(args, "report", None)),
                   ("--scheduler", getattr(args, "scheduler", None))]
    for flag, value in unsupported:
        if value:
            raise CalibrationError(f"{flag} is not available for a {kind} base (drive.kind '{kind}'): the wheel-table "
                                   "calibration fits the geometry only; drop the option, and check the tuned file on a "
                                   "drive of its own with wheel-dr compare.")


def _fmt_value(unit: str, v: float) -> str:
    return f"{v:+.6f} rad ({math.degrees(v):+.3f} deg)" if unit == "rad" else f"{v:.6f} m"


def _figures_table(title: str, names: Sequence[str], before: Sequence[TableFigures],
                   after: Sequence[TableFigures]) -> list[str]:
    lines = [title, f"  {'bag':<28} {'ATE before':>10} {'after':>8}  {'drift% before':>13} {'after':>7}  "
                    f"{'heading rms deg before':>22} {'after':>7}  segs"]
    for name, b, a in zip(names, before, after):
        lines.append(f"  {name[:28]:<28} {b.ate_m:10.3f} {a.ate_m:8.3f}  {b.drift_pct:13.2f} {a.drift_pct:7.2f}  "
                     f"{math.degrees(b.heading_rms_rad):22.3f} {math.degrees(a.heading_rms_rad):7.3f}  {a.n_segments:4d}")
    return lines


def table_result_lines(res: TableCalibration, bag_names: Sequence[str],
                       holdout: Sequence[tuple[str, TableFigures, TableFigures]] = ()) -> list[str]:
    """What was fitted, with standard errors, the drive's content and the before/after figures
    (``holdout``: (bag name, before, after) of recordings the fit did not see)."""
    lines = [f"Calibrated the {res.kind} table on {len(bag_names)} bag(s): {', '.join(bag_names)}; "
             f"{res.n_segments} segments of {res.segment_length_m:g} m"]
    for p, v, se in zip(res.parameters, res.values, res.std_error):
        if p.unit == "rad":
            lines.append(f"  {p.name:<32} {_fmt_value('rad', p.start)} -> {_fmt_value('rad', v)}  (+- {se:.6f} rad)")
        else:
            change = f", {100 * (v / p.start - 1):+.3f} %" if p.start else ""
            lines.append(f"  {p.name:<32} {p.start:.6f} -> {v:.6f} m  (+- {se:.6f}{change})")
    lines.append(f"  condition number {res.condition:.1f}; residual variance {res.residual_variance:.2f}")
    f = res.excitation.figures
    drive = (f"  drive: {res.excitation.travel_m:.0f} m wheel travel, rotation {math.degrees(f['turn_left_rad']):.0f} deg "
             f"left / {math.degrees(f['turn_right_rad']):.0f} deg right, {f['forward_m']:.0f} m forward or back, "
             f"{f['sideways_m']:.0f} m sideways")
    if "straight_m" in f:
        drive += (f", {f['straight_m']:.0f} m straight ahead, steering-angle ranges {f['steer_angles_left']:.0f} left / "
                  f"{f['steer_angles_right']:.0f} right")
    if "module_angles" in f:
        drive += f", modules at {f['module_angles']:.0f} of six angle ranges"
    lines.append(drive)
    lines += [f"  note: {n}" for n in res.notes]
    lines.append("  noise.k_wheels and noise.steer_sd_rad are not fitted for wheel tables (kept as in the file).")
    lines += _figures_table("Fitted bags (before -> after):", bag_names, res.before, res.after)
    if holdout:
        lines += _figures_table("Held-out bags (not used in the fit):", [n for n, _, _ in holdout],
                                [b for _, b, _ in holdout], [a for _, _, a in holdout])
    return lines


def run_table_calibration(args: argparse.Namespace, text: str, settings: Settings, label: str,
                          truth_sd: tuple[float, float] | None) -> int:
    """Fit the table's geometry from ``args.bags`` and print (and with ``--write``, write) the result."""
    from .calibrate_cmd import load_bag

    kind = settings.drive.kind
    if kind not in TABLE_KINDS:
        raise CalibrationError(f"the base's drive.kind '{kind}' has no per-kind calibration (only {', '.join(TABLE_KINDS)} have "
                               "one); set the table's values from its drawing, or give the base's kind.")
    _refuse(args, kind)
    model = settings.drive_model()

    def recording(path: str):
        samples, truth = load_bag(path, args.truth, args.joint_topic)
        travel = wheel_travel(samples, settings)
        poses = np.column_stack([np.asarray(truth.x_m, dtype=np.float64), np.asarray(truth.y_m, dtype=np.float64),
                                 np.asarray(truth.yaw_rad, dtype=np.float64)])
        return travel, np.asarray(truth.stamp_ns, dtype=np.int64) * 1e-9, poses

    recordings = [recording(p) for p in args.bags]
    held = [recording(p) for p in (getattr(args, "holdout", None) or [])]
    res = calibrate_table(model, *recordings[0], scheme=settings.integration, segment_length_m=args.segment_m,
                          truth_sd=truth_sd or (0.0, 0.0), max_truth_gap_s=settings.limits.max_gap_s,
                          more_runs=recordings[1:])
    names = [Path(p).name for p in args.bags]
    holdout = [(Path(p).name, *table_figures(model, res, *rec, scheme=settings.integration,
                                             max_truth_gap_s=settings.limits.max_gap_s))
               for p, rec in zip(args.holdout or [], held)]
    lines = table_result_lines(res, names, holdout)
    for line in lines:
        print(line)
    if args.write:
        values = res.file_values()
        when = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
        fitted = ", ".join(res.names)
        header = "\n".join([f"description: Tuned by `wheel-dr calibrate` on {when} from {label}; fitted {fitted}.",
                            f"Tuned by `wheel-dr calibrate` on {when}, starting from {label}.",
                            f"Fitted: {fitted} (entries of {', '.join(values) or 'no array'}); every other value "
                            "is as in the starting file."] + lines + [SAFETY_TEXT])
        new_text = update_params_text(text, values, header)
        try:        # the tuned file must load as it is written
            Settings.from_flat(parse_params_text(new_text, f"tuned parameters for '{args.write}'"))
        except SettingsError as exc:
            raise CalibrationError(f"the fitted values do not make a valid parameters file ({exc}); check the "
                                   "drive and the starting table, nothing was written.") from None
        atomic_write_text(args.write, new_text)
        print(f"Wrote {args.write}: launch the node with --ros-args --params-file {args.write}")
    print(SAFETY_TEXT)
    return 0
