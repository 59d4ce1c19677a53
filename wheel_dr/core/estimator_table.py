"""The estimator for wheel-table bases (``drive.kind`` other than differential), batch and streaming.

Each accepted step's wheel travel and steering readings go through the drive model
(``core.drive.WheelTable``): a body increment tau = (dx, dy, dtheta) with its covariance C. The
pose integrates tau by the configured scheme (``core.drive.base.odom_increment``); the step noise
in the odom frame is Q = G C G^T with G = d(odom increment) / d(tau)
(``core.drive.base.body_to_odom_noise`` and its float twin). The step Jacobian with respect to the
previous pose stays I + (third-column term), so ``noise.propagate_covariance`` (batch) and
``noise.propagate_step_floats`` (streaming) carry the covariance as for differential drive.
The twist is tau / dt with covariance C / dt^2 over (vx, vy, wz); at a chain start, gap or jump
the increment is zero and the twist unobserved. Slip and faults: ``core.slip_table`` (gyro,
per-wheel traction and residual tests), with the responses of the differential core.
"""
from __future__ import annotations

from typing import Sequence

import numpy as np

from .drive.base import body_to_odom_noise, body_to_odom_noise_floats, integrate_body, odom_increment_floats
from .motion import wrap_angle
from .noise import UNOBSERVED_VARIANCE, propagate_covariance, propagate_step_floats
from .online_calibration import supported
from .online_table import TableOnlineCalibrator, run_series
from .settings import Settings
from .slip_table import TableSlipMonitor, detect_slip_table
from .wheels import SampleStatus, Travel, TravelTracker, count_statuses

__all__ = ["run_table", "TableStepper", "UNOBSERVED_TWIST3"]

UNOBSERVED_TWIST3 = np.diag([UNOBSERVED_VARIANCE] * 3)
_UNOBSERVED_TWIST3_FLOATS = (UNOBSERVED_VARIANCE, 0.0, 0.0, UNOBSERVED_VARIANCE, 0.0, UNOBSERVED_VARIANCE)
_ZERO6 = (0.0,) * 6
_USED = SampleStatus.USED


def run_table(travel: Travel, settings: Settings, start_pose: Sequence[float] = (0.0, 0.0, 0.0),
              start_cov: np.ndarray | None = None, gyro_z_radps: np.ndarray | None = None):
    """The Trajectory of a wheel-table base from its wheel travel (``estimator.run_travel`` calls this)."""
    from .estimator import Trajectory

    model = settings.drive_model()
    m = len(travel.stamp_ns)
    spin = np.asarray(travel.joint_travel_m, dtype=np.float64).reshape(m, -1)
    steer = travel.steer_rad
    restart = np.asarray(travel.restart, dtype=bool)
    tau, cov_b, resid = model.solve(spin, steer)
    tau[restart] = 0.0
    cov_b[restart] = 0.0
    resid[restart] = 0.0
    slip = detect_slip_table(model, travel, tau, cov_b, gyro_z_radps, settings, resid=resid)
    if slip.dtheta_rad is not None:
        tau[:, 2] = slip.dtheta_rad
    if slip.noise_scale is not None:
        cov_b = cov_b * slip.noise_scale[:, None, None]
    scheme = settings.integration
    x, y, theta, before = integrate_body(tau, scheme, tuple(start_pose))
    q = body_to_odom_noise(before, tau, cov_b, scheme)
    cov = propagate_covariance(x, y, q, start_cov, (float(start_pose[0]), float(start_pose[1])))
    moving = ~restart
    safe_dt = np.where(moving, travel.dt_s, 1.0)
    vel = np.where(moving[:, None], tau / safe_dt[:, None], 0.0)
    twist_cov = np.where(moving[:, None, None], cov_b / (safe_dt * safe_dt)[:, None, None], UNOBSERVED_TWIST3)
    online = None
    if gyro_z_radps is not None and supported(settings):
        online = run_series(model, travel, gyro_z_radps, slip.slip, settings)
    return Trajectory(travel.index, travel.stamp_ns, x, y, wrap_angle(theta), theta, cov, vel[:, 0], vel[:, 2],
                      twist_cov, travel.status, travel, slip, count_statuses(travel.status), step_noise=q,
                      vy_mps=vel[:, 1], online_table=online)


class TableStepper:
    """Streaming form of ``run_table`` for ``estimator.Estimator`` (floats, no numpy per step)."""

    def __init__(self, settings: Settings) -> None:
        self.model = settings.drive_model()
        self.settings = settings
        self.scheme = settings.integration
        self.slip = TableSlipMonitor(self.model, settings)
        self.twist6 = _UNOBSERVED_TWIST3_FLOATS
        self.vy_mps = 0.0
        # online self-calibration of the table (online_calibration.enabled), stepped at the end of ``step``
        self.online = TableOnlineCalibrator(settings) if supported(settings) else None

    def reset_twist(self) -> None:
        self.twist6 = _UNOBSERVED_TWIST3_FLOATS
        self.vy_mps = 0.0

    def step(self, est, tracker: TravelTracker, status: SampleStatus, dt: float, gyro_z_radps: float | None):
        """Apply one accepted sample to the estimator ``est`` (pose, covariance, twist); returns the slip step."""
        restart = status != _USED
        spin = tracker.joint_travel_m
        steer = tracker.steer_rad or None
        if restart:
            bx = by = bt = 0.0
            c6 = _ZERO6
            resid: tuple[float, ...] = (0.0,) * len(spin)
        else:
            bx, by, bt, c6, resid = self.model.step_floats(spin, steer)
        slip = self.slip.step(status, tracker.last_stamp_ns, dt, spin, steer, (bx, by, bt), c6, resid, gyro_z_radps)
        if slip.dtheta_rad is not None:
            bt = slip.dtheta_rad
        scale = slip.noise_scale
        if scale != 1.0:
            c6 = (c6[0] * scale, c6[1] * scale, c6[2] * scale, c6[3] * scale, c6[4] * scale, c6[5] * scale)
        theta = est.theta_rad
        scheme = self.scheme
        dx, dy = odom_increment_floats(theta, bx, by, bt, scheme)
        q = body_to_odom_noise_floats(theta, bx, by, bt, c6, scheme)
        est._p = propagate_step_floats(est._p, dx, dy, q)
        est.x_m += dx
        est.y_m += dy
        est.theta_rad = theta + bt
        if restart:
            est.v_mps, est.w_radps = 0.0, 0.0
            self.reset_twist()
        else:
            est.v_mps, est.w_radps, self.vy_mps = bx / dt, bt / dt, by / dt
            dt2 = dt * dt
            self.twist6 = (c6[0] / dt2, c6[1] / dt2, c6[2] / dt2, c6[3] / dt2, c6[4] / dt2, c6[5] / dt2)
        if self.online is not None:
            self.online.step(tracker.last_stamp_ns, restart, dt, spin, steer, gyro_z_radps, slip.slip)
        return slip
