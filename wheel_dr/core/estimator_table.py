"""The estimator for wheel-table bases (``drive.kind`` other than differential), batch and streaming.

Each accepted step's wheel travel and steering readings go through the drive model
(``core.drive.WheelTable``): a body increment tau = (dx, dy, dtheta) with its covariance C. The
pose integrates tau by the configured scheme (``core.drive.base.odom_increment``); the step noise
in the odom frame is Q = G C G^T with G = d(odom increment) / d(tau):

    euler     G = [[R(th), 0], [0, 0, 1]]
    midpoint  G = [[R(phi), 1/2 R'(phi) (dx, dy)], [0, 0, 1]],   phi = th + dtheta / 2
    exact     G = [[R(th) V, R(th) V' (dx, dy)], [0, 0, 1]],     V = [[a, -b], [b, a]]

(a = sin(dtheta)/dtheta, b = (1 - cos dtheta)/dtheta, V' their derivatives in dtheta: the SE(2)
exponential, Sola, Deray & Atchuthan 2018, eq. 156). The step Jacobian with respect to the
previous pose stays I + (third-column term), so ``noise.propagate_covariance`` (batch) and
``noise.propagate_step_floats`` (streaming) carry the covariance as for differential drive.
The twist is tau / dt with covariance C / dt^2 over (vx, vy, wz); at a chain start, gap or jump
the increment is zero and the twist unobserved.
"""
from __future__ import annotations

import math
from typing import Sequence

import numpy as np

from .drive.base import integrate_body
from .motion import wrap_angle
from .noise import UNOBSERVED_VARIANCE, propagate_covariance, propagate_step_floats
from .se2 import SERIES_BELOW, se2_exp_factors, se2_exp_factors_scalar
from .settings import Settings
from .wheels import SampleStatus, Travel, TravelTracker, count_statuses

def table_slip(model, travel: Travel, tau, cov_b, resid, gyro_z_radps, settings: Settings):
    """Slip of a wheel-table run (no detector yet: all clear)."""
    from .slip import _no_slip

    return _no_slip(len(travel.stamp_ns))


class TableSlipWatch:
    """Streaming twin of ``table_slip``."""

    def __init__(self, model, settings: Settings) -> None:
        from .slip import SlipStep

        self._clear = SlipStep()

    def step(self, stamp_ns, status, dt_s, spin, steer, body, c6, resid, gyro_z_radps):
        return self._clear


__all__ = ["run_table", "TableStepper", "step_noise", "body_step_jacobian", "UNOBSERVED_TWIST3"]

UNOBSERVED_TWIST3 = np.diag([UNOBSERVED_VARIANCE] * 3)
_UNOBSERVED_TWIST3_FLOATS = (UNOBSERVED_VARIANCE, 0.0, 0.0, UNOBSERVED_VARIANCE, 0.0, UNOBSERVED_VARIANCE)


def _exp_factor_derivatives(th: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """d a / d theta and d b / d theta of ``se2_exp_factors`` (series near 0)."""
    th = np.asarray(th, dtype=np.float64)
    small = np.abs(th) < SERIES_BELOW
    ts = np.where(small, 1.0, th)
    t2 = th * th
    da = np.where(small, -th / 3.0 + th * t2 / 30.0, (ts * np.cos(ts) - np.sin(ts)) / (ts * ts))
    db = np.where(small, 0.5 - t2 / 8.0, (ts * np.sin(ts) - 1.0 + np.cos(ts)) / (ts * ts))
    return da, db


def body_step_jacobian(theta_before: np.ndarray, tau: np.ndarray, scheme: str) -> np.ndarray:
    """(M, 3, 3) d(odom increment dx, dy, dtheta) / d(body increment tau) for each step."""
    tau = np.asarray(tau, dtype=np.float64).reshape(-1, 3)
    th = np.asarray(theta_before, dtype=np.float64).reshape(-1)
    bx, by, bt = tau[:, 0], tau[:, 1], tau[:, 2]
    g = np.zeros((len(tau), 3, 3))
    g[:, 2, 2] = 1.0
    if scheme == "exact":
        a, b = se2_exp_factors(bt)
        da, db = _exp_factor_derivatives(bt)
        c, s = np.cos(th), np.sin(th)
        # R V = [[c a - s b, -(c b + s a)], [s a + c b, c a - s b]]
        g[:, 0, 0] = c * a - s * b
        g[:, 0, 1] = -(c * b + s * a)
        g[:, 1, 0] = s * a + c * b
        g[:, 1, 1] = c * a - s * b
        ux, uy = da * bx - db * by, db * bx + da * by      # V' (dx, dy)
        g[:, 0, 2] = c * ux - s * uy
        g[:, 1, 2] = s * ux + c * uy
    else:
        phi = th if scheme == "euler" else th + 0.5 * bt
        c, s = np.cos(phi), np.sin(phi)
        g[:, 0, 0], g[:, 0, 1], g[:, 1, 0], g[:, 1, 1] = c, -s, s, c
        if scheme == "midpoint":
            g[:, 0, 2] = 0.5 * (-s * bx - c * by)
            g[:, 1, 2] = 0.5 * (c * bx - s * by)
    return g


def step_noise(theta_before: np.ndarray, tau: np.ndarray, cov_body: np.ndarray, scheme: str) -> np.ndarray:
    """(M, 3, 3) odom-frame step noise Q = G C G^T of body increments with covariance C."""
    g = body_step_jacobian(theta_before, tau, scheme)
    return g @ np.asarray(cov_body, dtype=np.float64) @ np.swapaxes(g, 1, 2)


def _solve_batch(model, spin: np.ndarray, steer: np.ndarray | None):
    solve = getattr(model, "solve", None)
    if solve is not None:
        return solve(spin, steer)
    return model.increment(spin, steer), model.increment_covariance(spin, steer), model.residual(spin, steer)


def run_table(travel: Travel, settings: Settings, start_pose: Sequence[float] = (0.0, 0.0, 0.0),
              start_cov: np.ndarray | None = None, gyro_z_radps: np.ndarray | None = None):
    """The Trajectory of a wheel-table base from its wheel travel (``estimator.run_travel`` calls this)."""
    from .estimator import Trajectory

    model = settings.drive_model()
    m = len(travel.stamp_ns)
    spin = np.asarray(travel.joint_travel_m, dtype=np.float64).reshape(m, -1)
    steer = travel.steer_rad
    restart = np.asarray(travel.restart, dtype=bool)
    if m:
        tau, cov_b, resid = _solve_batch(model, spin, steer)
        tau = np.array(tau, dtype=np.float64)
        cov_b = np.array(cov_b, dtype=np.float64)
    else:
        tau, cov_b, resid = np.zeros((0, 3)), np.zeros((0, 3, 3)), np.zeros((0, spin.shape[1]))
    tau[restart] = 0.0
    cov_b[restart] = 0.0
    slip = table_slip(model, travel, tau, cov_b, resid, gyro_z_radps, settings)
    if slip.dtheta_rad is not None:
        tau[:, 2] = slip.dtheta_rad
    if slip.noise_scale is not None:
        cov_b = cov_b * slip.noise_scale[:, None, None]
    scheme = settings.integration
    x, y, theta, before = integrate_body(tau, scheme, tuple(start_pose))
    q = step_noise(before, tau, cov_b, scheme)
    cov = propagate_covariance(x, y, q, start_cov, (float(start_pose[0]), float(start_pose[1])))
    moving = ~restart
    safe_dt = np.where(moving, travel.dt_s, 1.0)
    vel = np.where(moving[:, None], tau / safe_dt[:, None], 0.0)
    twist_cov = np.where(moving[:, None, None], cov_b / (safe_dt * safe_dt)[:, None, None], UNOBSERVED_TWIST3)
    return Trajectory(travel.index, travel.stamp_ns, x, y, wrap_angle(theta), theta, cov, vel[:, 0], vel[:, 2],
                      twist_cov, travel.status, travel, slip, count_statuses(travel.status), step_noise=q,
                      vy_mps=vel[:, 1])


def _step_floats(model, spin: list[float], steer: list[float] | None):
    fast = getattr(model, "step_floats", None)
    if fast is not None:
        return fast(spin, steer)
    s = np.asarray([spin], dtype=np.float64)
    st = None if steer is None else np.asarray([steer], dtype=np.float64)
    tau, cov, resid = _solve_batch(model, s, st)
    c = cov[0]
    return (float(tau[0, 0]), float(tau[0, 1]), float(tau[0, 2]),
            (float(c[0, 0]), float(c[0, 1]), float(c[0, 2]), float(c[1, 1]), float(c[1, 2]), float(c[2, 2])),
            tuple(float(v) for v in resid[0]))


def _odom_step_floats(theta: float, bx: float, by: float, bt: float, c6: tuple[float, ...], scheme: str):
    """(dx, dy) in the odom frame and the six entries of Q = G C G^T for one step (floats)."""
    if scheme == "exact":
        a, b = se2_exp_factors_scalar(bt)
        if abs(bt) < SERIES_BELOW:
            t2 = bt * bt
            da, db = -bt / 3.0 + bt * t2 / 30.0, 0.5 - t2 / 8.0
        else:
            cb, sb = math.cos(bt), math.sin(bt)
            da, db = (bt * cb - sb) / (bt * bt), (bt * sb - 1.0 + cb) / (bt * bt)
        c, s = math.cos(theta), math.sin(theta)
        vx, vy = a * bx - b * by, b * bx + a * by
        dx, dy = c * vx - s * vy, s * vx + c * vy
        g00, g01, g10, g11 = c * a - s * b, -(c * b + s * a), s * a + c * b, c * a - s * b
        ux, uy = da * bx - db * by, db * bx + da * by
        g02, g12 = c * ux - s * uy, s * ux + c * uy
    else:
        phi = theta if scheme == "euler" else theta + 0.5 * bt
        c, s = math.cos(phi), math.sin(phi)
        dx, dy = c * bx - s * by, s * bx + c * by
        g00, g01, g10, g11 = c, -s, s, c
        if scheme == "midpoint":
            g02, g12 = 0.5 * (-s * bx - c * by), 0.5 * (c * bx - s * by)
        else:
            g02 = g12 = 0.0
    cxx, cxy, cxt, cyy, cyt, ctt = c6
    # columns of C G^T for the first two rows of G (the third row of G is e3)
    r0 = (cxx * g00 + cxy * g01 + cxt * g02, cxy * g00 + cyy * g01 + cyt * g02, cxt * g00 + cyt * g01 + ctt * g02)
    r1 = (cxx * g10 + cxy * g11 + cxt * g12, cxy * g10 + cyy * g11 + cyt * g12, cxt * g10 + cyt * g11 + ctt * g12)
    q = (g00 * r0[0] + g01 * r0[1] + g02 * r0[2],
         g10 * r0[0] + g11 * r0[1] + g12 * r0[2],
         r0[2],
         g10 * r1[0] + g11 * r1[1] + g12 * r1[2],
         r1[2],
         ctt)
    return dx, dy, q


class TableStepper:
    """Streaming form of ``run_table`` for ``estimator.Estimator`` (floats, no numpy per step)."""

    def __init__(self, settings: Settings) -> None:
        self.model = settings.drive_model()
        self.settings = settings
        self.scheme = settings.integration
        self.slip = TableSlipWatch(self.model, settings)
        self.twist6 = _UNOBSERVED_TWIST3_FLOATS
        self.vy_mps = 0.0

    def reset_twist(self) -> None:
        self.twist6 = _UNOBSERVED_TWIST3_FLOATS
        self.vy_mps = 0.0

    def step(self, est, tracker: TravelTracker, status: SampleStatus, dt: float, gyro_z_radps: float | None):
        """Apply one accepted sample to the estimator ``est`` (pose, covariance, twist); returns the slip step."""
        restart = status != SampleStatus.USED
        spin = tracker.joint_travel_m
        steer = tracker.steer_rad if tracker.steer_rad else None
        if restart:
            bx = by = bt = 0.0
            c6 = (0.0,) * 6
            resid: tuple[float, ...] = (0.0,) * len(spin)
        else:
            bx, by, bt, c6, resid = _step_floats(self.model, spin, steer)
        slip = self.slip.step(tracker.last_stamp_ns, status, dt, spin, steer, (bx, by, bt), c6, resid, gyro_z_radps)
        if slip.dtheta_rad is not None:
            bt = slip.dtheta_rad
        if slip.noise_scale != 1.0:
            c6 = tuple(v * slip.noise_scale for v in c6)
        theta = est.theta_rad
        dx, dy, q = _odom_step_floats(theta, bx, by, bt, c6, self.scheme)
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
            self.twist6 = tuple(v / dt2 for v in c6)
        return slip
