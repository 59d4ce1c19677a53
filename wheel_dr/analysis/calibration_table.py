"""Calibration of wheel-table bases (tricycle, car-like, mecanum, omni, swerve) against ground truth.

The method is the differential calibration's (``wheel_dr.analysis.calibration``): least squares on
segment-relative motion (Antonelli, Chiaverini & Fusco, IEEE T-RO 21(5), 2005, from memory; the
idea of judging odometry by where closed stretches of a drive end, Borenstein & Feng 1996):

1. A candidate geometry rebuilds the ``WheelTable`` (positions, steering offsets) and rescales the
   encoder wheels' travel (given at the CONFIGURED radius: travel at radius r is the given travel
   times r / r_configured), integrates the whole drive with ``integrate_body`` and the estimator's
   scheme, and cuts it into consecutive segments of about ``segment_length_m`` of mean wheel travel
   (none crosses a chain restart or a stretch without truth).
2. Each segment's relative motion (dx, dy in the segment's start frame, dyaw) of odometry minus that
   of the truth, whitened by the covariance propagated over the segment from the table's own
   increment covariance (``noise.k_wheels``, ``noise.steer_sd_rad``) plus the truth's noise, is
   minimised by ``scipy.optimize.least_squares``. Standard errors are s^2 (J^T J)^-1 from the
   Jacobian at the solution and the residual variance s^2; the covariance is then re-propagated at
   the fitted geometry and the fit repeated once; segments beyond the chi-square(3) 99.9 % quantile
   (scaled by s^2: slip, truth glitches) are set aside.

Fitted per kind (dotted names with the wheel index in the table):

* tricycle: each encoder wheel's radius, the steered wheel's x (the wheelbase, the fixed axle
  staying where it is), the steering offset;
* ackermann (car-like): each encoder wheel's radius (the rear wheels), the steered wheels' common x
  (the wheelbase), each steered wheel's offset;
* mecanum: one radius for all four wheels and half-length + half-width: with the usual X pattern
  of rollers only their sum enters the kinematics, so it is fitted as one number and both
  ``drive.wheel_x`` and ``drive.wheel_y`` are scaled about the wheels' centre, keeping their ratio;
* omni: one radius and the wheels' distance from their centre (positions scaled about the centre);
* swerve: one radius and each module's steering offset.

Units: metres, radians, nanosecond stamps; frames REP 103 / REP 105.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Sequence

import numpy as np
from scipy import optimize, stats

from ..core import errors as _errors
from ..core.drive import WheelTable, integrate_body
from ..core.noise import segment_covariance as _segment_propagate
from ..core.se2 import Poses, rotate_covariance, umeyama_se2
from .calibration import TIED_CORRELATION, correlation_notes

__all__ = ["TableParameter", "TableExcitation", "TableFigures", "TableCalibration", "TABLE_KINDS",
           "KIND_ADVICE", "table_parameters", "apply_parameters", "table_excitation", "calibrate_table",
           "MECANUM_SUM_NOTE", "offset_modes", "table_figures"]

CalibrationError = _errors.CalibrationError
TruthError = _errors.TruthError
ExcitationError = _errors.ExcitationError

TABLE_KINDS = ("tricycle", "ackermann", "mecanum", "omni", "swerve")
EXACT_TRUTH_S = 50e-6          # a truth stamp this close to a joint stamp is taken as "at" it
OUTLIER_QUANTILE = 0.999
_MIN_VARIANCE = 1e-14
WINDOW_M = 0.25                # windows of wheel travel over which rotations are counted
STRAIGHT_RAD = 0.03            # steering within this of straight ahead counts as straight
STEER_BINS_RAD = (0.03, 0.15, 0.35, math.inf)   # "several steering angles": travel in >= 2 bins each way
MODULE_BIN_RAD = math.pi / 6   # swerve: module angles in bins of 30 deg over [-90, 90) deg

#: What to drive for each kind (the excitation check's advice).
KIND_ADVICE = {
    "tricycle": "turn both ways at several steering angles (gentle arcs, tight arcs, full lock) and drive "
                "straight runs of a few metres",
    "ackermann": "turn both ways at several steering angles (gentle arcs, tight arcs, full lock) and drive "
                 "straight runs of a few metres",
    "mecanum": "drive forwards and backwards, drive sideways both ways and rotate in place both ways",
    "omni": "drive straight in several directions and rotate in place both ways",
    "swerve": "drive with the modules at several angles (forwards, diagonally both ways, sideways) and "
              "rotate in place both ways",
}

MECANUM_SUM_NOTE = ("on a mecanum base only half-length + half-width is observable (with the usual X pattern of "
                    "rollers only their sum enters the kinematics): it was fitted as one number and both "
                    "drive.wheel_x and drive.wheel_y were scaled about the wheels' centre, keeping their ratio "
                    "as configured; take the ratio from the drawing")


# ------------------------------------------------------------------------------------------------
# parameters
# ------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class TableParameter:
    """One fitted number: ``name`` (dotted, with wheel indices), what it moves (``what``: 'radius',
    'x', 'offset', 'sum' (mecanum half-length + half-width), 'distance' (omni)), the wheels it
    applies to, its unit and its start value."""

    name: str
    what: str
    wheels: tuple[int, ...]
    unit: str
    start: float


def _centre(model: WheelTable) -> tuple[float, float]:
    return float(np.mean(model.x)), float(np.mean(model.y))


def _idx(wheels: Sequence[int]) -> str:
    return ",".join(str(i) for i in wheels)


def _arms(model: WheelTable) -> np.ndarray:
    """|wz coefficient| of each roller wheel's travel about the wheels' centre (m): with rollers at
    +-pi/4 it is half-length + half-width in the usual X pattern, |half-length - half-width| in the
    other one."""
    cx, cy = _centre(model)
    ang = model.mount + model.roller - 0.5 * math.pi
    return np.abs((np.sin(ang) * (model.x - cx) - np.cos(ang) * (model.y - cy)) / np.sin(model.roller))


def _half_sizes(model: WheelTable) -> tuple[float, float]:
    cx, cy = _centre(model)
    return float(np.mean(np.abs(model.x - cx))), float(np.mean(np.abs(model.y - cy)))


def _mecanum_name(model: WheelTable) -> str:
    a, b = _half_sizes(model)
    arms = _arms(model)
    if np.allclose(arms, a + b, rtol=1e-6, atol=1e-9):
        return "drive.half_length+half_width"
    if np.allclose(arms, abs(a - b), rtol=1e-6, atol=1e-9):
        return "drive.half_length-half_width"
    return "drive.wheel_arm"


def offset_modes(model: WheelTable) -> tuple[np.ndarray, np.ndarray]:
    """Swerve steering offsets: orthonormal bases (T, k) of the combinations the motion shows and
    (T, T - k) of those it does not.

    A module's offset error e_i turns its rolling direction; the rolling equations change only in
    second order (the module's velocity is along its rolling direction), and the sliding equations
    change by -e_i (signed rolling speed of module i). The least-squares motion moves only by the
    part of that vector outside the left null space of the sliding rows, and for a motion about any
    centre c the vector lies in it exactly when sum e_i = 0 and sum e_i p_i = 0 (p_i the module
    positions): so only the span of (1, x_i, y_i) over the modules is seen (first order)."""
    idx = model.steered
    a = np.column_stack([np.ones(int(idx.sum())), model.x[idx], model.y[idx]])
    u, sv, _ = np.linalg.svd(a, full_matrices=True)
    k = int(np.sum(sv > 1e-9 * max(sv[0], 1.0)))
    return u[:, :k], u[:, k:]


def table_parameters(model: WheelTable) -> list[TableParameter]:
    """The parameters fitted for ``model``'s kind (see the module docstring)."""
    kind = model.kind
    enc = [int(i) for i in np.flatnonzero(model.spin)]
    ste = [int(i) for i in np.flatnonzero(model.steered)]
    out: list[TableParameter] = []
    if kind in ("tricycle", "ackermann"):
        out += [TableParameter(f"drive.wheel_radius[{i}]", "radius", (i,), "m", float(model.radius[i])) for i in enc]
        out.append(TableParameter(f"drive.wheel_x[{_idx(ste)}]", "x", tuple(ste), "m", float(model.x[ste[0]])))
        out += [TableParameter(f"drive.steer_offset[{i}]", "offset", (i,), "rad", float(model.offset[i])) for i in ste]
    elif kind in ("mecanum", "omni", "swerve"):
        out.append(TableParameter(f"drive.wheel_radius[{_idx(enc)}]", "radius", tuple(enc), "m",
                                  float(model.radius[enc[0]])))
        cx, cy = _centre(model)
        every = tuple(range(len(model.x)))
        if kind == "mecanum":
            out.append(TableParameter(_mecanum_name(model), "sum", every, "m", float(np.mean(_arms(model)))))
        elif kind == "omni":
            d = float(np.mean(np.hypot(model.x - cx, model.y - cy)))
            out.append(TableParameter("drive.wheel_distance", "distance", every, "m", d))
        else:
            out += [TableParameter(f"drive.steer_offset[{i}]", "offset", (i,), "rad", float(model.offset[i]))
                    for i in ste]
    else:
        raise CalibrationError(f"the base's drive.kind '{kind}' has no per-kind calibration (only {', '.join(TABLE_KINDS)} have "
                               "one); set the table's values from its drawing, or give the base's kind.")
    return out


@dataclass
class _Geometry:
    """Arrays of one candidate geometry (copies)."""

    x: np.ndarray
    y: np.ndarray
    radius: np.ndarray
    offset: np.ndarray

    def arrays(self) -> dict[str, tuple[float, ...]]:
        return {"drive.wheel_x": tuple(float(v) for v in self.x), "drive.wheel_y": tuple(float(v) for v in self.y),
                "drive.wheel_radius": tuple(float(v) for v in self.radius),
                "drive.steer_offset": tuple(float(v) for v in self.offset)}


def apply_parameters(model: WheelTable, params: Sequence[TableParameter], values: Sequence[float]) -> _Geometry:
    """The model's geometry arrays with ``values`` of ``params`` put in (only those entries change;
    a common radius or a scale keeps the ratios between the entries it covers)."""
    g = _Geometry(model.x.copy(), model.y.copy(), model.radius.copy(), model.offset.copy())
    cx, cy = _centre(model)
    for p, v in zip(params, values):
        idx = list(p.wheels)
        v = float(v)
        if p.what == "radius":
            g.radius[idx] = model.radius[idx] * (v / p.start)
        elif p.what == "x":
            g.x[idx] = v
        elif p.what == "offset":
            g.offset[idx] = v
        elif p.what in ("sum", "distance"):
            f = v / p.start
            g.x[idx] = cx + f * (model.x[idx] - cx)
            g.y[idx] = cy + f * (model.y[idx] - cy)
        else:                                   # pragma: no cover - table_parameters makes only these
            raise ValueError(p.what)
    return g


def _fit_map(model: WheelTable, params: Sequence[TableParameter]) -> np.ndarray:
    """(P, K) map from the fitted unknowns u to the parameters: values = start + A u. Lengths and radii
    are fitted relative to their start, angles in radians; a swerve's steering offsets through the
    combinations the motion shows (``offset_modes``), the others staying as configured."""
    cols = []
    offsets = [k for k, p in enumerate(params) if p.what == "offset"]
    modes = None
    if model.kind == "swerve" and offsets:
        seen, unseen = offset_modes(model)
        if unseen.shape[1]:
            modes = seen
    for k, p in enumerate(params):
        if p.what == "offset" and modes is not None:
            continue
        c = np.zeros(len(params))
        c[k] = 1.0 if p.what == "offset" else (abs(p.start) if p.start != 0 else 1.0)
        cols.append(c)
    if modes is not None:
        for j in range(modes.shape[1]):
            c = np.zeros(len(params))
            c[offsets] = modes[:, j]
            cols.append(c)
    return np.column_stack(cols)


def _rebuild(model: WheelTable, g: _Geometry) -> WheelTable:
    """A copy of ``model`` with the geometry ``g`` (same joints, angles and noise)."""
    return WheelTable(model.kind, model.wheel_joints, g.x, g.y, g.radius, steer_joints=model.steer_joints,
                      mount_angle=model.mount, roller_angle=model.roller, steer_offset=g.offset,
                      k_wheels=model.k, steer_sd_rad=model.steer_sd_rad)


# ------------------------------------------------------------------------------------------------
# input
# ------------------------------------------------------------------------------------------------
@dataclass
class _Run:
    spin: np.ndarray          # (M, E) m at the configured radii, 0 at restarts
    steer: np.ndarray | None  # (M, T) rad
    stamp_ns: np.ndarray
    restart: np.ndarray
    truth: np.ndarray         # (M, 3) truth at the stamps (x, y, unwrapped yaw)
    valid: np.ndarray         # (M,) truth usable at this stamp


def _prepare(model: WheelTable, travel, truth_t_s, truth_xy_yaw, max_truth_gap_s: float) -> _Run:
    e, t = int(model.spin.sum()), int(model.steered.sum())
    spin = np.asarray(getattr(travel, "joint_travel_m", None) if getattr(travel, "joint_travel_m", None) is not None
                      else np.zeros((0, e)), dtype=np.float64)
    stamp = np.asarray(travel.stamp_ns, dtype=np.int64).reshape(-1)
    m = len(stamp)
    if spin.ndim != 2 or spin.shape != (m, e):
        raise CalibrationError(f"the wheel travel has shape {spin.shape} but the table has {e} wheels with an encoder "
                               f"and the drive {m} samples; name the spin joints in drive.wheel_joints.")
    steer = None
    if t:
        raw = getattr(travel, "steer_rad", None)
        steer = np.asarray(raw if raw is not None else np.zeros((0, t)), dtype=np.float64)
        if steer.shape != (m, t):
            raise CalibrationError(f"the steering readings have shape {steer.shape} but the table has {t} steered "
                                   f"wheels and the drive {m} samples; name the steering joints in drive.steer_joints.")
    restart = np.asarray(travel.restart, dtype=bool).reshape(-1)
    if m < 2:
        raise CalibrationError("the recording has fewer than 2 usable joint-state samples; check the joint names "
                               "in the parameters file.")
    ok = np.isfinite(spin).all(axis=1) & (np.isfinite(steer).all(axis=1) if steer is not None else True)
    restart = restart | ~ok
    spin = np.where(restart[:, None], 0.0, np.nan_to_num(spin))
    if steer is not None:
        steer = np.nan_to_num(steer)
    ts = np.asarray(truth_t_s, dtype=np.float64).reshape(-1)
    tp = np.asarray(truth_xy_yaw, dtype=np.float64).reshape(-1, 3) if len(ts) else np.zeros((0, 3))
    if len(ts) != len(tp):
        raise TruthError(f"the ground truth has {len(ts)} stamps but {len(tp)} poses; give one pose per stamp.")
    fin = np.isfinite(ts) & np.isfinite(tp).all(axis=1)
    ts, tp = ts[fin], tp[fin]
    order = np.argsort(ts, kind="stable")
    ts, tp = ts[order], tp[order]
    keep = np.concatenate(([True], np.diff(ts) > 0)) if len(ts) else np.zeros(0, dtype=bool)
    ts, tp = ts[keep], tp[keep]
    if len(ts) < 2:
        raise TruthError(f"the ground truth has {len(ts)} usable poses; record the truth topic during the whole "
                         "drive (give it with --truth).")
    yaw = np.unwrap(tp[:, 2])
    st = stamp.astype(np.float64) * 1e-9
    inside = (st >= ts[0]) & (st <= ts[-1])
    hi = np.clip(np.searchsorted(ts, st, side="left"), 1, len(ts) - 1)
    gap = ts[hi] - ts[hi - 1]
    near = np.minimum(np.abs(ts[hi] - st), np.abs(ts[hi - 1] - st))
    exact = near <= EXACT_TRUTH_S
    valid = inside & ((gap <= max_truth_gap_s) | exact)
    if exact.sum() >= max(100, 0.02 * m):
        valid &= exact                              # truth at (some of) the joint stamps: end segments there only
    if valid.sum() < 2:
        raise TruthError(f"the ground truth does not overlap the joint states in time (truth {ts[0]:.1f} to "
                         f"{ts[-1]:.1f} s, joints {st[0]:.1f} to {st[-1]:.1f} s); record both during the same drive "
                         "with the same clock.")
    base = ts[0]
    truth = np.column_stack([np.interp(st - base, ts - base, tp[:, 0]), np.interp(st - base, ts - base, tp[:, 1]),
                             np.interp(st - base, ts - base, yaw)])
    return _Run(spin, steer, stamp, restart, truth, valid)


def _measure(run: _Run) -> np.ndarray:
    """Cumulative mean |travel| of the encoder wheels (m)."""
    return np.cumsum(np.mean(np.abs(run.spin), axis=1))


def _segments(run: _Run, length_m: float) -> tuple[np.ndarray, np.ndarray]:
    """Consecutive segments of ``length_m`` mean wheel travel with truth at both ends, no restart inside."""
    m = _measure(run)
    n = len(m)
    rc = np.cumsum(run.restart)
    vidx = np.flatnonzero(run.valid)
    starts, ends = [], []

    def next_valid(k: int) -> int:
        p = np.searchsorted(vidx, k)
        return int(vidx[p]) if p < len(vidx) else n

    i = next_valid(0)
    while i < n:
        j = next_valid(int(np.searchsorted(m, m[i] + length_m, side="left")))
        if j >= n:
            break
        if rc[j] != rc[i]:
            i = next_valid(int(np.searchsorted(rc, rc[i] + 1, side="left")))
            continue
        starts.append(i)
        ends.append(j)
        i = j
    return np.asarray(starts, dtype=np.int64), np.asarray(ends, dtype=np.int64)


# ------------------------------------------------------------------------------------------------
# odometry of a candidate geometry
# ------------------------------------------------------------------------------------------------
def _odometry(model: WheelTable, run: _Run, params, values, scheme: str, with_cov: bool = False):
    g = apply_parameters(model, params, values)
    table = _rebuild(model, g)
    spin = run.spin * (g.radius / model.radius)[model.spin]
    tau = table.increment(spin, run.steer)
    tau[run.restart] = 0.0
    x, y, th, before = integrate_body(tau, scheme)
    q = None
    if with_cov:
        cb = table.increment_covariance(spin, run.steer)
        cb[run.restart] = 0.0
        c, s = np.cos(before), np.sin(before)
        rot = np.zeros((len(c), 3, 3))
        rot[:, 0, 0] = rot[:, 1, 1] = c
        rot[:, 0, 1] = -s
        rot[:, 1, 0] = s
        rot[:, 2, 2] = 1.0
        q = rot @ cb @ np.swapaxes(rot, 1, 2)
    return x, y, th, tau, q


def _errors_of(x, y, th, run: _Run, start, end) -> np.ndarray:
    odo = Poses(x, y, th).relative(start, end).as_array()
    t = run.truth
    tru = Poses(t[:, 0], t[:, 1], t[:, 2]).relative(start, end).as_array()
    err = odo - tru
    err[:, 2] = np.remainder(err[:, 2] + math.pi, 2.0 * math.pi) - math.pi
    return err


def _segment_covs(x, y, th, q, run: _Run, start, end, truth_var) -> np.ndarray:
    cov = rotate_covariance(_segment_propagate(x, y, q, start, end), -th[start])
    sxy, syaw = float(truth_var[0]), float(truth_var[1])
    if sxy > 0 or syaw > 0:       # the truth's noise at both ends (first order, as in calibration.truth_noise_basis)
        t = run.truth
        tru = Poses(t[:, 0], t[:, 1], t[:, 2]).relative(start, end).as_array()
        cov[:, 0, 0] += 2.0 * sxy
        cov[:, 1, 1] += 2.0 * sxy
        v = np.column_stack([tru[:, 1], -tru[:, 0], -np.ones(len(start))])
        cov += syaw * v[:, :, None] * v[:, None, :]
        cov[:, 2, 2] += syaw
    cov = 0.5 * (cov + np.swapaxes(cov, 1, 2))
    lam, vec = np.linalg.eigh(cov)
    lam = np.maximum(lam, np.maximum(lam[:, -1:] * 1e-9, _MIN_VARIANCE))
    return (vec * lam[:, None, :]) @ np.swapaxes(vec, 1, 2)


# ------------------------------------------------------------------------------------------------
# excitation
# ------------------------------------------------------------------------------------------------
@dataclass
class TableExcitation:
    """What the drive contains (nominal geometry) and whether it suffices for ``kind``; ``advice``
    says what to drive. ``figures`` holds the kind's measures (m of travel, rad of rotation, counts)."""

    kind: str
    travel_m: float
    n_segments: int
    figures: dict[str, float]
    condition: float
    ok: bool
    problems: list[str]
    advice: list[str]

    def message(self) -> str:
        """One sentence: what is wrong and what to drive."""
        return (f"the drive does not excite the {self.kind} geometry enough ({'; '.join(self.problems)}); "
                f"{'; '.join(self.advice)}, then calibrate again.")


def _windows(measure: np.ndarray, value: np.ndarray) -> np.ndarray:
    """Change of the cumulative ``value`` over windows of WINDOW_M of ``measure``."""
    if len(measure) == 0:
        return np.zeros(0)
    edges = np.unique(np.clip(np.searchsorted(measure, np.arange(0.0, measure[-1] + WINDOW_M, WINDOW_M)),
                              0, len(measure) - 1))
    return np.diff(value[edges])


def table_excitation(model: WheelTable, runs: Sequence[_Run], n_segments: int, condition: float = math.nan,
                     min_travel_m: float = 30.0, min_segments: int = 15, min_straight_m: float = 10.0,
                     min_turn_rad: float = 2.0 * math.pi, min_bin_m: float = 2.0, min_sideways_m: float = 5.0,
                     max_condition: float = 1000.0) -> TableExcitation:
    """The drive's content for ``model``'s kind against these minima (the numbers are this project's
    choice; the reasons are common practice: a radius is fixed by distance, a wheelbase or a wheel
    distance by turning, a steering offset by driving straight and turning both ways, and the
    combinations are told apart only when the drive mixes them)."""
    kind = model.kind
    travel = 0.0
    left = right = straight = forward = sideways = 0.0
    bins_l: dict[int, float] = {}
    bins_r: dict[int, float] = {}
    module_bins: dict[int, float] = {}
    for run in runs:
        tau = model.increment(run.spin, run.steer)
        tau[run.restart] = 0.0
        wheel = np.mean(np.abs(run.spin), axis=1)
        meas = np.cumsum(wheel)
        travel += float(meas[-1]) if len(meas) else 0.0
        dth = _windows(meas, np.cumsum(tau[:, 2]))
        left += float(dth[dth > 0].sum())
        right += float(-dth[dth < 0].sum())
        forward += float(np.abs(tau[:, 0]).sum())
        sideways += float(np.abs(tau[:, 1]).sum())
        if run.steer is not None:
            rel = run.steer - model.offset[model.steered]
            if kind in ("tricycle", "ackermann"):
                a = np.mean(rel, axis=1)
                straight += float(wheel[np.abs(a) < STRAIGHT_RAD].sum())
                for k in range(len(STEER_BINS_RAD) - 1):
                    lo, hi = STEER_BINS_RAD[k], STEER_BINS_RAD[k + 1]
                    bins_l[k] = bins_l.get(k, 0.0) + float(wheel[(a >= lo) & (a < hi)].sum())
                    bins_r[k] = bins_r.get(k, 0.0) + float(wheel[(-a >= lo) & (-a < hi)].sum())
            else:
                ang = np.remainder(rel + 0.5 * math.pi, math.pi) - 0.5 * math.pi
                col = np.cumsum(model.spin) - 1          # encoder column of each wheel
                spin_t = np.column_stack([np.abs(run.spin[:, col[i]]) if model.spin[i] else wheel
                                          for i in np.flatnonzero(model.steered)])
                b = np.floor((ang + 0.5 * math.pi) / MODULE_BIN_RAD).astype(int)
                for k in np.unique(b):
                    module_bins[int(k)] = module_bins.get(int(k), 0.0) + float(spin_t[b == k].sum()) / rel.shape[1]
    problems: list[str] = []
    figures = {"turn_left_rad": left, "turn_right_rad": right, "forward_m": forward, "sideways_m": sideways}
    if travel < min_travel_m or n_segments < min_segments:
        problems.append(f"only {travel:.1f} m of wheel travel in {n_segments} usable segments with truth")
    for side, amount in (("left", left), ("right", right)):
        if amount < min_turn_rad:
            what = "rotation in place or on arcs" if kind in ("mecanum", "omni", "swerve") else "turns"
            problems.append(f"only {math.degrees(amount):.0f} deg of {side} {what} "
                            f"(at least {math.degrees(min_turn_rad):.0f} deg)")
    if kind in ("tricycle", "ackermann"):
        nl = sum(v >= min_bin_m for v in bins_l.values())
        nr = sum(v >= min_bin_m for v in bins_r.values())
        figures.update(straight_m=straight, steer_angles_left=float(nl), steer_angles_right=float(nr))
        if straight < min_straight_m:
            problems.append(f"only {straight:.1f} m straight ahead (at least {min_straight_m:.0f} m)")
        for side, n in (("left", nl), ("right", nr)):
            if n < 2:
                problems.append(f"turns {side} at only {n} of the steering-angle ranges "
                                f"{', '.join(f'{math.degrees(v):.0f}' for v in STEER_BINS_RAD[:-1])} deg "
                                "and beyond (at least 2)")
    elif kind == "mecanum":
        if forward < min_straight_m:
            problems.append(f"only {forward:.1f} m of forward or backward motion (at least {min_straight_m:.0f} m)")
        if sideways < min_sideways_m:
            problems.append(f"only {sideways:.1f} m of sideways motion (at least {min_sideways_m:.0f} m)")
    elif kind == "omni":
        if math.hypot(forward, sideways) < min_straight_m:
            problems.append(f"only {math.hypot(forward, sideways):.1f} m of translation "
                            f"(at least {min_straight_m:.0f} m)")
    elif kind == "swerve":
        n = sum(v >= min_bin_m for v in module_bins.values())
        figures["module_angles"] = float(n)
        if n < 3:
            problems.append(f"the modules rolled at only {n} of six 30-degree angle ranges (at least 3)")
    ill = not math.isnan(condition) and not (condition <= max_condition)
    if ill:
        number = f" (condition number {condition:.0f})" if math.isfinite(condition) else ""
        problems.append(f"the fitted parameters cannot be told apart{number}")
    short = travel < min_travel_m or n_segments < min_segments
    advice = []
    if short:
        advice.append(f"drive at least {min_travel_m:.0f} m with ground truth recorded")
    if problems:
        advice.append(KIND_ADVICE[kind])
    return TableExcitation(kind, travel, n_segments, figures, condition, not problems, problems, advice)


# ------------------------------------------------------------------------------------------------
# the fit
# ------------------------------------------------------------------------------------------------
@dataclass
class TableFigures:
    """ATE (m, Umeyama-aligned), drift % (segment translation errors over the true path length) and
    the RMS segment heading error (rad) of one geometry."""

    ate_m: float
    drift_pct: float
    heading_rms_rad: float
    n_segments: int


@dataclass
class TableCalibration:
    """Everything ``calibrate_table`` found.

    ``names``/``start``/``values``/``std_error``/``cov`` are over ``parameters``; ``arrays`` holds the
    full arrays (dotted parameter names) of the fitted geometry, with only the fitted entries
    changed; ``changed`` names the arrays that differ from the configured ones; ``model`` is the
    fitted WheelTable."""

    kind: str
    parameters: list[TableParameter]
    start: np.ndarray
    values: np.ndarray
    std_error: np.ndarray
    cov: np.ndarray
    residual_variance: float
    condition: float
    n_segments: int
    n_outliers: int
    excitation: TableExcitation
    arrays: dict[str, tuple[float, ...]]
    changed: tuple[str, ...]
    model: WheelTable
    notes: list[str] = field(default_factory=list)
    before: list[TableFigures] = field(default_factory=list)
    after: list[TableFigures] = field(default_factory=list)
    segment_length_m: float = 2.0
    success: bool = True
    configured: dict[str, tuple[float, ...]] = field(default_factory=dict)   # the arrays as configured

    @property
    def names(self) -> list[str]:
        return [p.name for p in self.parameters]

    def value(self, name: str) -> float:
        """Fitted value of the parameter called ``name``."""
        return float(self.values[self.names.index(name)])

    def file_values(self) -> dict[str, tuple[float, ...]]:
        """The changed arrays as dotted name -> values (radii to 0.1 um, lengths to 1 um, angles to 1 urad)."""
        digits = {"drive.wheel_radius": 7, "drive.wheel_x": 6, "drive.wheel_y": 6, "drive.steer_offset": 6}
        out: dict[str, tuple[float, ...]] = {}
        for k in self.changed:     # entries not fitted keep their configured value exactly
            out[k] = tuple(c if v == c else float(round(v, digits[k])) for v, c in zip(self.arrays[k], self.configured[k]))
        return out


def _figures(x, y, th, run: _Run, start, end) -> TableFigures:
    v = run.valid
    t = run.truth
    try:
        rot, tr, _ = umeyama_se2(np.column_stack([x[v], y[v]]), t[v, :2])
        res = t[v, :2] - (np.column_stack([x[v], y[v]]) @ rot.T + tr)
        ate = float(np.sqrt(np.mean(np.sum(res * res, axis=1))))
    except _errors.InputError:
        ate = math.nan
    if len(start) == 0:
        return TableFigures(ate, math.nan, math.nan, 0)
    err = _errors_of(x, y, th, run, start, end)
    step = np.hypot(np.diff(t[:, 0]), np.diff(t[:, 1]))
    cum = np.concatenate(([0.0], np.cumsum(step)))
    length = float(np.sum(cum[end] - cum[start]))
    drift = 100.0 * float(np.sum(np.hypot(err[:, 0], err[:, 1]))) / length if length > 0 else math.nan
    return TableFigures(ate, drift, float(np.sqrt(np.mean(err[:, 2] ** 2))), len(start))


def calibrate_table(model: WheelTable, travel, truth_t_s, truth_xy_yaw, *, scheme: str = "exact",
                    segment_length_m: float = 2.0, truth_sd: Sequence[float] = (0.0, 0.0),
                    max_truth_gap_s: float = 0.5, iterations: int = 1, reject_outliers: bool = True,
                    more_runs: Sequence[tuple[object, object, object]] = ()) -> TableCalibration:
    """Fit ``model``'s kind parameters (``table_parameters``) by least squares on segment-relative motion.

    ``travel`` has ``joint_travel_m`` (M, E) spin travel in metres at the configured radii (0 at
    restarts), ``steer_rad`` (M, T), ``stamp_ns`` (M,) and ``restart`` (M,); the truth is given as
    stamps in seconds (N,) and poses (N, 3) of x m, y m, yaw rad in any fixed frame. ``more_runs``
    adds further (travel, truth_t_s, truth_xy_yaw) recordings fitted jointly. ``truth_sd`` is the
    truth's noise per pose (position m, heading rad). Raises ExcitationError (the message says what
    to drive for the kind) and TruthError/CalibrationError for unusable input.
    """
    if not (segment_length_m > 0 and math.isfinite(segment_length_m)):
        raise CalibrationError(f"the segment length is {segment_length_m:g} m; give a positive length (default 2 m).")
    sd = np.asarray(truth_sd, dtype=np.float64).reshape(-1)
    if sd.shape != (2,) or not np.all(np.isfinite(sd)) or np.any(sd < 0):
        raise CalibrationError(f"the truth's noise is {tuple(truth_sd)}; give two standard deviations, position (m) "
                               "and heading (rad), both zero or more.")
    truth_var = sd ** 2
    params = table_parameters(model)
    start = np.array([p.start for p in params])
    runs = [_prepare(model, tr, t, p, max_truth_gap_s)
            for tr, t, p in [(travel, truth_t_s, truth_xy_yaw), *more_runs]]
    segs = [_segments(r, segment_length_m) for r in runs]
    n_seg = int(sum(len(s[0]) for s in segs))
    pre = table_excitation(model, runs, n_seg)
    if not pre.ok:
        raise ExcitationError(pre.message())
    amap = _fit_map(model, params)         # u = 0 at the start

    def values_of(u: np.ndarray) -> np.ndarray:
        return start + amap @ u

    masks = [np.ones(len(s[0]), dtype=bool) for s in segs]
    u = np.zeros(amap.shape[1])
    whites: list[np.ndarray] = []

    def residuals(uu: np.ndarray) -> np.ndarray:
        parts = []
        for r, (st, en), wt, mk in zip(runs, segs, whites, masks):
            if not mk.any():
                continue
            x, y, th, _, _ = _odometry(model, r, params, values_of(uu), scheme)
            e = _errors_of(x, y, th, r, st[mk], en[mk])
            parts.append(np.einsum("skl,sl->sk", wt[mk], e).ravel())
        return np.concatenate(parts) if parts else np.zeros(0)

    def fit(u0: np.ndarray):
        if sum(int(mk.sum()) for mk in masks) * 3 <= amap.shape[1]:
            raise ExcitationError(table_excitation(model, runs, 0).message())
        return optimize.least_squares(residuals, u0, method="trf", diff_step=1e-6, x_scale=1e-3,
                                      xtol=1e-12, ftol=1e-12, gtol=1e-12, max_nfev=100)

    res = None
    for _ in range(max(1, iterations)):    # covariances at the current geometry, then the fit
        whites = []
        for r, (st, en) in zip(runs, segs):
            x, y, th, _, q = _odometry(model, r, params, values_of(u), scheme, with_cov=True)
            whites.append(np.linalg.inv(np.linalg.cholesky(_segment_covs(x, y, th, q, r, st, en, truth_var))))
        res = fit(u)
        u = res.x
    assert res is not None
    if reject_outliers:
        s2 = float(2.0 * res.cost / max(len(res.fun) - amap.shape[1], 1))
        gate = float(stats.chi2.ppf(OUTLIER_QUANTILE, 3)) * max(s2, 1e-300)
        new = []
        for r, (st, en), wt in zip(runs, segs, whites):
            x, y, th, _, _ = _odometry(model, r, params, values_of(u), scheme)
            w = np.einsum("skl,sl->sk", wt, _errors_of(x, y, th, r, st, en))
            new.append(np.sum(w * w, axis=1) <= gate)
        if not all(m.all() for m in new):
            masks = new
            res = fit(u)
            u = res.x
    jac = res.jac
    n_res = len(res.fun)
    dof = max(n_res - amap.shape[1], 1)
    s2 = float(2.0 * res.cost / dof)
    norms = np.linalg.norm(jac, axis=0)
    svn = np.linalg.svd(jac / np.where(norms > 0, norms, 1.0), compute_uv=False)
    cond = float(svn[0] / svn[-1]) if svn[-1] > 0 else math.inf
    try:
        cov_u = s2 * np.linalg.inv(jac.T @ jac)
    except np.linalg.LinAlgError:
        cov_u = np.full((amap.shape[1], amap.shape[1]), math.inf)
    cov = amap @ cov_u @ amap.T
    se = np.sqrt(np.maximum(np.diag(cov), 0.0))
    values = values_of(u)
    n_kept = int(sum(mk.sum() for mk in masks))
    exc = table_excitation(model, runs, n_kept, cond)
    if not exc.ok:
        raise ExcitationError(exc.message())
    g = apply_parameters(model, params, values)
    fitted = _rebuild(model, g)
    configured = _Geometry(model.x, model.y, model.radius, model.offset).arrays()
    arrays = g.arrays()
    changed = tuple(k for k in arrays if arrays[k] != configured[k])
    notes: list[str] = []
    if model.kind == "mecanum":
        name = params[-1].name
        if name == "drive.half_length+half_width":
            notes.append(MECANUM_SUM_NOTE + ".")
        else:
            a, b = _half_sizes(model)
            notes.append(f"the rollers (drive.roller_angle) do not form the usual X pattern: each wheel's turning arm is "
                         f"{'|half-length - half-width|' if name.endswith('-half_width') else 'not a + b'} "
                         f"({float(np.mean(_arms(model))):.4f} m instead of {a + b:.4f} m), so the base can hardly "
                         "rotate and only that arm is observable; check the roller angles' signs. It was fitted as "
                         f"{name} and drive.wheel_x and drive.wheel_y were scaled, keeping their ratio.")
    if model.kind == "swerve":
        _, unseen = offset_modes(model)
        if unseen.shape[1]:
            ste = [int(i) for i in np.flatnonzero(model.steered)]
            pattern = ", ".join(f"{v:+.2f} x drive.steer_offset[{i}]" for i, v in zip(ste, unseen[:, 0]))
            notes.append(f"with {len(ste)} modules {unseen.shape[1]} combination(s) of the steering offsets cannot be "
                         f"seen in the motion (those that sum to zero with zero moment about the modules' centre, "
                         f"such as {pattern}); they were left as configured. They do not change the odometry to "
                         "first order but make the modules scrub: settle them by aligning the modules mechanically.")
    if model.kind in ("tricycle", "ackermann"):
        notes.append("the fixed axle's position and the track are taken as configured (only the steered "
                     "wheels' x moves with the wheelbase).")
    if model.kind == "omni":
        notes.append("every wheel's distance from the wheels' centre was scaled by one factor (their angles "
                     "around the centre are taken as configured).")
    tied = correlation_notes([p.name for p in params], cov, TIED_CORRELATION)
    if model.kind == "swerve":      # offset pairs are tied through the unseen combinations, said above
        tied = [t for t in tied if t.split(" cannot ")[0].count("drive.steer_offset[") < 2]
    notes += tied
    n_out = n_seg - n_kept
    if n_out:
        notes.append(f"{n_out} of {n_seg} segments were set aside as outliers (beyond the chi-square 99.9 % "
                     "quantile of the fit's residual scale: slip or truth glitches).")
    before, after = [], []
    for r, (st, en) in zip(runs, segs):
        xb, yb, tb, _, _ = _odometry(model, r, params, start, scheme)
        xa, ya, ta, _, _ = _odometry(model, r, params, values, scheme)
        before.append(_figures(xb, yb, tb, r, st, en))
        after.append(_figures(xa, ya, ta, r, st, en))
    out = TableCalibration(model.kind, params, start, values, se, cov, s2, cond, n_kept, n_out, exc, arrays,
                           changed, fitted, notes, before, after, float(segment_length_m), bool(res.success),
                           configured)
    return out


def table_figures(model: WheelTable, result: TableCalibration, travel, truth_t_s, truth_xy_yaw, *,
                  scheme: str = "exact", max_truth_gap_s: float = 0.5) -> tuple[TableFigures, TableFigures]:
    """Figures (ATE, drift %, heading RMS) of a recording the fit did not see, before and after:
    ``model`` is the configured table, ``result`` the fit (the honest check of a calibration)."""
    run = _prepare(model, travel, truth_t_s, truth_xy_yaw, max_truth_gap_s)
    st, en = _segments(run, result.segment_length_m)
    out = []
    for values in (result.start, result.values):
        x, y, th, _, _ = _odometry(model, run, result.parameters, values, scheme)
        out.append(_figures(x, y, th, run, st, en))
    return out[0], out[1]
