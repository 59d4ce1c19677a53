"""The estimator: joint states in, pose, covariance, twist and slip flags out, batch and streaming.

``run`` processes a whole recording with numpy (no Python loop per sample for the pose, and the
covariance by the closed form in ``noise.propagate_covariance``); ``Estimator.step`` processes one
sample at a time for the node. Both apply the same rules and formulas and are tested equal.

A run starts at ``start_pose`` (default the origin, heading +x) with ``start_cov`` (default zero).
At a chain start, gap or jump the increment is zero, the twist is reported as zero with variance
``UNOBSERVED_VARIANCE``.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Sequence

import numpy as np

from .motion import body_increment, integrate, pose_increment_scalar, wrap_angle, wrap_angle_scalar
from .online_calibration import OnlineCalibrationResult, OnlineCalibrator, online_calibration, supported
from .online_table import TableOnlineCalibrator, TableOnlineSeries
from .noise import (UNOBSERVED_VARIANCE, increment_noise, increment_noise_floats, propagate_covariance,
                    propagate_step_floats)
from .estimator_table import TableStepper, run_table
from .settings import Settings
from .slip import SlipMonitor, SlipResult, SlipStep, detect_slip
from .slip_motion import MotionInputs
from .wheels import JointSamples, SampleStatus, Travel, TravelTracker, count_statuses, wheel_travel

__all__ = ["Trajectory", "run", "run_travel", "Estimator"]

_COUNTER_KEY = {s: s.name.lower() for s in SampleStatus}   # counter name of each status (no string work per sample)
_UNOBSERVED_TWIST = np.diag([UNOBSERVED_VARIANCE, UNOBSERVED_VARIANCE])
_UNOBSERVED_TWIST_FLOATS = (UNOBSERVED_VARIANCE, 0.0, UNOBSERVED_VARIANCE)


def _sym3(p: tuple[float, ...]) -> np.ndarray:
    xx, xy, xt, yy, yt, tt = p
    return np.array([[xx, xy, xt], [xy, yy, yt], [xt, yt, tt]])


@dataclass
class Trajectory:
    """Estimator output, one entry per accepted sample (``index`` points into the input samples).

    Pose (x, y in metres, yaw in rad wrapped to (-pi, pi]) and covariance (M, 3, 3) over
    (x, y, yaw) are in the odom frame; twist (v m/s, w rad/s) and its covariance (M, 2, 2) in the
    base frame. For wheel tables (``drive.kind`` other than differential) ``v_mps`` is vx,
    ``vy_mps`` the lateral speed and ``twist_cov`` (M, 3, 3) over (vx, vy, wz); differential
    bases have ``vy_mps`` zero.
    """

    index: np.ndarray
    stamp_ns: np.ndarray
    x_m: np.ndarray
    y_m: np.ndarray
    yaw_rad: np.ndarray
    theta_rad: np.ndarray          # unwrapped heading
    cov: np.ndarray
    v_mps: np.ndarray
    w_radps: np.ndarray
    twist_cov: np.ndarray
    status: np.ndarray             # (N,) SampleStatus of every input sample
    travel: Travel
    slip: SlipResult
    counters: dict[str, int] = field(default_factory=dict)
    # (M, 3, 3) step noise Q_k (odom frame) the covariance was propagated with; metrics use it to
    # restart the covariance at segment starts (NEES). None when not recorded.
    step_noise: np.ndarray | None = None
    # online self-calibration (online_calibration.enabled with a gyro), one entry per interval; else None
    online: OnlineCalibrationResult | None = None
    vy_mps: np.ndarray | None = None   # (M,) lateral speed, base frame (zeros for differential drive)
    # wheel tables with online_calibration.enabled and a gyro: the table estimate's course; else None
    online_table: TableOnlineSeries | None = None

    def __post_init__(self) -> None:
        if self.vy_mps is None:
            self.vy_mps = np.zeros(len(self.stamp_ns))

    def __len__(self) -> int:
        return int(len(self.stamp_ns))

    @property
    def t_s(self) -> np.ndarray:
        """Stamps in seconds (float64)."""
        return self.stamp_ns * 1e-9

    @property
    def pose(self) -> np.ndarray:
        """(M, 3) array of x, y, yaw."""
        return np.column_stack([self.x_m, self.y_m, self.yaw_rad])


def run(samples: JointSamples, settings: Settings, start_pose: Sequence[float] = (0.0, 0.0, 0.0),
        start_cov: np.ndarray | None = None, gyro_z_radps: np.ndarray | None = None,
        accel_x_mps2: np.ndarray | None = None, up_x: np.ndarray | None = None,
        cmd_v_mps: np.ndarray | None = None) -> Trajectory:
    """Estimate over a whole run. ``gyro_z_radps`` (N,), if given, is the IMU z rate held at each sample;
    ``accel_x_mps2``, ``up_x`` and ``cmd_v_mps`` (N,) the accelerometer x reading, the up axis' x
    component (``slip_motion.up_x_from_quaternion``) and the commanded speed, NaN where unknown."""
    travel = wheel_travel(samples, settings)

    def pick(a: np.ndarray | None) -> np.ndarray | None:
        return None if a is None else np.asarray(a, dtype=np.float64)[travel.index]

    return run_travel(travel, settings, start_pose, start_cov, pick(gyro_z_radps), pick(accel_x_mps2),
                      pick(up_x), pick(cmd_v_mps))


def run_travel(travel: Travel, settings: Settings, start_pose: Sequence[float] = (0.0, 0.0, 0.0),
               start_cov: np.ndarray | None = None, gyro_z_radps: np.ndarray | None = None,
               accel_x_mps2: np.ndarray | None = None, up_x: np.ndarray | None = None,
               cmd_v_mps: np.ndarray | None = None) -> Trajectory:
    """Estimate from wheel travel already computed (IMU and command given per accepted sample)."""
    if settings.drive.kind != "differential":
        return run_table(travel, settings, start_pose, start_cov, gyro_z_radps)
    b = settings.wheels.track_width
    dl, dr, dt = travel.ds_left_m, travel.ds_right_m, travel.dt_s
    ds, dth = body_increment(dl, dr, b)
    motion = None if accel_x_mps2 is None else MotionInputs(accel_x_mps2, up_x, cmd_v_mps)
    slip = detect_slip(travel, gyro_z_radps, settings, motion)
    if slip.dtheta_rad is not None:
        dth = slip.dtheta_rad
    if slip.ds_m is not None:
        ds = slip.ds_m
    scheme = settings.integration
    x, y, theta, theta_before, _, _ = integrate(ds, dth, scheme, tuple(start_pose))
    n = settings.noise
    q, c_in = increment_noise(theta_before, dl, dr, b, scheme, n.model, n.k_left, n.k_right, n.alphas)
    if slip.noise_scale is not None:
        q = q * slip.noise_scale[:, None, None]
        c_in = c_in * slip.noise_scale[:, None, None]
    cov = propagate_covariance(x, y, q, start_cov, (float(start_pose[0]), float(start_pose[1])))
    moving = ~travel.restart
    safe_dt = np.where(moving, dt, 1.0)
    v = np.where(moving, ds / safe_dt, 0.0)
    w = np.where(moving, dth / safe_dt, 0.0)
    twist_cov = np.where(moving[:, None, None], c_in / (safe_dt * safe_dt)[:, None, None], _UNOBSERVED_TWIST)
    online = None
    if gyro_z_radps is not None and supported(settings):
        online = online_calibration(travel, gyro_z_radps, slip.slip, settings)
    return Trajectory(travel.index, travel.stamp_ns, x, y, wrap_angle(theta), theta, cov, v, w, twist_cov,
                      travel.status, travel, slip, count_statuses(travel.status), step_noise=q, online=online)


class Estimator:
    """Streaming estimator for the node: one joint-state sample per ``step``; never raises on bad data.

    The covariances are kept as floats (their distinct entries) and handed out as arrays by the
    ``cov`` and ``twist_cov`` properties, so a step costs no numpy call.
    """

    def __init__(self, settings: Settings, start_pose: Sequence[float] = (0.0, 0.0, 0.0),
                 start_cov: np.ndarray | None = None) -> None:
        self.settings = settings
        self._tracker = TravelTracker(settings)
        self._slip = SlipMonitor(settings)
        self._table = TableStepper(settings) if settings.drive.kind != "differential" else None
        self.counters: dict[str, int] = {s.name.lower(): 0 for s in SampleStatus}
        self.last_slip = SlipStep()  # slip outcome of the last accepted sample (none yet: all clear)
        # online self-calibration (None unless online_calibration.enabled); ``online.step`` per accepted sample
        self.online = OnlineCalibrator(settings) if supported(settings) and self._table is None else None
        self.reset(start_pose, start_cov)

    # -- state ---------------------------------------------------------------------------------
    def reset(self, pose: Sequence[float] = (0.0, 0.0, 0.0), cov: np.ndarray | None = None) -> None:
        """Put the pose and covariance at ``pose`` / ``cov`` (zero by default); the wheel chain goes on."""
        self.x_m, self.y_m, self.theta_rad = (float(v) for v in pose)
        self.cov = np.zeros((3, 3)) if cov is None else cov
        self.v_mps = 0.0
        self.w_radps = 0.0
        self._twist = _UNOBSERVED_TWIST_FLOATS
        if self._table is not None:
            self._table.reset_twist()

    @property
    def cov(self) -> np.ndarray:
        """(3, 3) pose covariance over (x, y, yaw), odom frame (a new array)."""
        return _sym3(self._p)

    @cov.setter
    def cov(self, value: np.ndarray) -> None:
        c = np.array(value, dtype=np.float64).reshape(3, 3)
        self._p = (float(c[0, 0]), float(c[0, 1]), float(c[0, 2]), float(c[1, 1]), float(c[1, 2]), float(c[2, 2]))

    @property
    def twist_cov(self) -> np.ndarray:
        """(2, 2) covariance of (v, w), base frame (a new array); (3, 3) over (vx, vy, wz) for wheel tables."""
        if self._table is not None:
            return _sym3(self._table.twist6)
        t00, t01, t11 = self._twist
        return np.array([[t00, t01], [t01, t11]])

    @property
    def online_table(self) -> TableOnlineCalibrator | None:
        """Wheel tables with online_calibration.enabled: the streaming table estimate (else None)."""
        return None if self._table is None else self._table.online

    @property
    def vy_mps(self) -> float:
        """Lateral speed (m/s, base frame); 0 for differential drive."""
        return 0.0 if self._table is None else self._table.vy_mps

    def update_settings(self, settings: Settings) -> None:
        """Use new settings from the next sample on; pose and covariance are kept, the chain restarts."""
        old = self.settings.online_calibration
        self.settings = settings
        self._tracker = TravelTracker(settings)
        self._slip = SlipMonitor(settings)
        self._table = TableStepper(settings) if settings.drive.kind != "differential" else None
        if not supported(settings) or self._table is not None:   # tables: TableStepper.online
            self.online = None
        elif self.online is None or settings.online_calibration != old:
            self.online = OnlineCalibrator(settings)
        else:
            self.online.update_settings(settings)   # a geometry change: the online estimate goes on

    @property
    def yaw_rad(self) -> float:
        """Heading wrapped to (-pi, pi]."""
        return wrap_angle_scalar(self.theta_rad)

    @property
    def pose(self) -> tuple[float, float, float]:
        """(x, y, yaw) in the odom frame."""
        return self.x_m, self.y_m, self.yaw_rad

    @property
    def stamp_ns(self) -> int | None:
        """Stamp of the last accepted sample."""
        return self._tracker.last_stamp_ns

    # -- one sample ------------------------------------------------------------------------------
    def step(self, stamp_ns: int, names: Sequence[str], positions: Sequence[float],
             velocities: Sequence[float], gyro_z_radps: float | None = None, accel_x_mps2: float | None = None,
             up_x: float | None = None, cmd_v_mps: float | None = None) -> SampleStatus:
        """Process one joint-state sample; returns its status (skipped kinds leave the state as it was).

        ``accel_x_mps2`` (m/s^2), ``up_x`` and ``cmd_v_mps`` (m/s) are the latest accelerometer x
        reading, the up axis' x component from the IMU orientation and the commanded speed (None: unknown).
        """
        status, dt, dl, dr = self._tracker.step(stamp_ns, names, positions, velocities)
        if status >= 10:
            self.counters[_COUNTER_KEY[status]] += 1
            return status
        if self._table is not None:
            self.last_slip = self._table.step(self, self._tracker, status, dt, gyro_z_radps)
            self.counters[_COUNTER_KEY[status]] += 1
            return status
        s = self.settings
        b = s.wheels.track_width
        restart = status != SampleStatus.USED
        ds, dth = body_increment(dl, dr, b)
        slip = self._slip.step(self._tracker, status, dt, dl, dr, gyro_z_radps, accel_x_mps2, up_x, cmd_v_mps)
        self.last_slip = slip
        if slip.dtheta_rad is not None:
            dth = slip.dtheta_rad
        if slip.ds_m is not None:
            ds = slip.ds_m
        theta = self.theta_rad
        dx, dy = pose_increment_scalar(theta, ds, dth, s.integration)
        n = s.noise
        q, c_in = increment_noise_floats(theta, dl, dr, b, s.integration, n.model, n.k_left, n.k_right, n.alphas)
        scale = slip.noise_scale
        if scale != 1.0:
            q = tuple(v * scale for v in q)
            c_in = tuple(v * scale for v in c_in)
        self._p = propagate_step_floats(self._p, dx, dy, q)
        self.x_m += dx
        self.y_m += dy
        self.theta_rad = theta + dth
        if restart:
            self.v_mps, self.w_radps, self._twist = 0.0, 0.0, _UNOBSERVED_TWIST_FLOATS
        else:
            self.v_mps, self.w_radps = ds / dt, dth / dt
            dt2 = dt * dt
            self._twist = (c_in[0] / dt2, c_in[1] / dt2, c_in[2] / dt2)
        if self.online is not None:
            self.online.step(stamp_ns, restart, dt, dl, dr, gyro_z_radps, slip.slip)
        self.counters[_COUNTER_KEY[status]] += 1   # counted once the sample is fully applied
        return status
