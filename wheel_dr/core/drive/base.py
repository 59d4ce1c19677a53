"""The drive-model interface and the integration of three-dimensional body increments (dx, dy, dtheta).

A drive model turns one step's wheel measurements into a body increment tau = (dx, dy, dtheta)
in the base frame at the start of the step, with its Jacobian with respect to the measurements
and its covariance; its inverse turns a body twist into wheel readings (simulator, slip); where a
base has more measurements than it needs, the residual says how far they disagree.

Integration (``integrate_body``), odom frame, heading th before the step:

    euler     p' = p + R(th) (dx, dy)
    midpoint  p' = p + R(th + dtheta/2) (dx, dy)
    exact     p' = p + R(th) V(dtheta) (dx, dy)   (the SE(2) exponential, Sola et al. 2018, eq. 156)

For dy = 0 the exact scheme is the constant-curvature chord of the differential-drive core, so
its numbers do not change. Each scheme depends on th only through a rotation, so the step
Jacobian with respect to the previous pose is still I + (third-column term) and the closed-form
covariance of ``core.noise.propagate_covariance`` carries over unchanged; its step noise is the
body covariance moved into the odom frame, Q = J C J^T with J = d(odom increment) / d tau
(``body_to_odom_noise``).
"""
from __future__ import annotations

from abc import ABC, abstractmethod
from typing import Sequence

import math

import numpy as np

from ..se2 import SERIES_BELOW, se2_exp_factors, se2_exp_factors_scalar

__all__ = ["DriveModel", "integrate_body", "odom_increment", "odom_increment_floats", "body_to_odom_noise",
           "body_to_odom_noise_floats"]

_BLOCK = 8192   # steps per block of body_to_odom_noise


class DriveModel(ABC):
    """What the core needs of a drive geometry (see the module docstring)."""

    #: joint name -> role ('spin' or 'steer')
    @abstractmethod
    def joint_roles(self) -> dict[str, str]:
        """Every joint the model reads, with its role: 'spin' (differenced travel) or 'steer' (an angle)."""

    @abstractmethod
    def geometry(self) -> dict[str, object]:
        """Geometry parameters by their dotted parameter names."""

    @abstractmethod
    def increment(self, spin_m: np.ndarray, steer_rad: np.ndarray | None = None) -> np.ndarray:
        """(M, 3) body increments (dx m, dy m, dtheta rad) from (M, S) wheel travel per spin joint
        (metres at the wheel's radius) and (M, T) steering readings (rad)."""

    @abstractmethod
    def jacobian(self, spin_m: np.ndarray, steer_rad: np.ndarray | None = None) -> np.ndarray:
        """(M, 3, S) d increment / d spin travel."""

    @abstractmethod
    def increment_covariance(self, spin_m: np.ndarray, steer_rad: np.ndarray | None = None) -> np.ndarray:
        """(M, 3, 3) covariance of the body increment from the measurement noise model."""

    @abstractmethod
    def inverse(self, twist: np.ndarray, dt_s: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]:
        """Wheel travel (M, S) m and steering readings (M, T) rad (None without steering) that a
        constant body twist (M, 3) of (vx m/s, vy m/s, wz rad/s) gives over dt_s (M,)."""

    def residual(self, spin_m: np.ndarray, steer_rad: np.ndarray | None = None) -> np.ndarray:
        """(M, S) disagreement of the measurements with the fitted increment (zeros when the
        model has no more measurements than it needs)."""
        return np.zeros_like(np.asarray(spin_m, dtype=np.float64))


def odom_increment(theta_before_rad, body: np.ndarray, scheme: str) -> tuple[np.ndarray, np.ndarray]:
    """Odom-frame position increments (dx, dy) of body increments (M, 3) from headings (M,)."""
    body = np.asarray(body, dtype=np.float64).reshape(-1, 3)
    bx, by, bt = body[:, 0], body[:, 1], body[:, 2]
    th = np.asarray(theta_before_rad, dtype=np.float64)
    if scheme == "euler":
        phi = th
    elif scheme == "midpoint":
        phi = th + 0.5 * bt
    elif scheme == "exact":
        a, b = se2_exp_factors(bt)
        bx, by = a * bx - b * by, b * bx + a * by
        phi = th
    else:
        raise ValueError(f"integration scheme '{scheme}' is not one of euler, midpoint, exact")
    c, s = np.cos(phi), np.sin(phi)
    return c * bx - s * by, s * bx + c * by


def odom_increment_floats(theta_before: float, dx: float, dy: float, dth: float, scheme: str) -> tuple[float, float]:
    """Float twin of ``odom_increment`` for one step (the streaming estimator)."""
    if scheme == "exact":
        a, b = se2_exp_factors_scalar(dth)
        dx, dy = a * dx - b * dy, b * dx + a * dy
        phi = theta_before
    elif scheme == "midpoint":
        phi = theta_before + 0.5 * dth
    else:
        phi = theta_before
    c, s = math.cos(phi), math.sin(phi)
    return c * dx - s * dy, s * dx + c * dy


def integrate_body(body: np.ndarray, scheme: str, start_pose: Sequence[float] = (0.0, 0.0, 0.0)):
    """Integrate body increments (M, 3) from ``start_pose``: x, y, theta (unwrapped) after each
    step and the heading before each step (headings by cumulative sum, then positions)."""
    body = np.asarray(body, dtype=np.float64).reshape(-1, 3)
    x0, y0, th0 = (float(v) for v in start_pose)
    theta = np.cumsum(np.concatenate(([th0], body[:, 2])))
    before = theta[:-1]
    dx, dy = odom_increment(before, body, scheme)
    x = np.cumsum(np.concatenate(([x0], dx)))[1:]
    y = np.cumsum(np.concatenate(([y0], dy)))[1:]
    return x, y, theta[1:], before


def _exp_factor_derivatives(dtheta):
    """d a / d dtheta = (cos - a) / dtheta and d b / d dtheta = (sin - b) / dtheta of ``se2_exp_factors``
    (series -dtheta/3 and 1/2 - dtheta^2/8 near 0)."""
    th = np.asarray(dtheta, dtype=np.float64)
    a, b = se2_exp_factors(th)
    small = np.abs(th) < SERIES_BELOW
    ts = np.where(small, 1.0, th)
    da = np.where(small, -th / 3.0, (np.cos(ts) - a) / ts)
    db = np.where(small, 0.5 - th * th / 8.0, (np.sin(ts) - b) / ts)
    return a, b, da, db


def _odom_jacobian_terms(theta_before_rad, dth, scheme: str):
    """(A, B, A', B') with d(odom dx, dy)/d(dx, dy) = [[A, -B], [B, A]] and the dtheta column
    [[A', -B'], [B', A']] (dx, dy), for each scheme of ``odom_increment``."""
    th = np.asarray(theta_before_rad, dtype=np.float64)
    if scheme == "euler":
        zero = np.zeros(np.broadcast(th, dth).shape)
        return np.cos(th) + zero, np.sin(th) + zero, zero, zero
    if scheme == "midpoint":
        phi = th + 0.5 * dth
        c, s = np.cos(phi), np.sin(phi)
        return c, s, -0.5 * s, 0.5 * c
    if scheme == "exact":
        a, b, da, db = _exp_factor_derivatives(dth)
        c, s = np.cos(th), np.sin(th)
        return c * a - s * b, s * a + c * b, c * da - s * db, s * da + c * db
    raise ValueError(f"integration scheme '{scheme}' is not one of euler, midpoint, exact")


def body_to_odom_noise(theta_before_rad, body: np.ndarray, cov: np.ndarray, scheme: str) -> np.ndarray:
    """Step noise Q (M, 3, 3) in the odom frame of body increments tau (M, 3) with covariance (M, 3, 3),
    headings before the steps (M,): Q = J C J^T, J = d(odom increment of ``odom_increment``) / d tau
    = [[A, -B, u_x], [B, A, u_y], [0, 0, 1]] (first-order propagation, common practice). For
    dy = 0 this is the step noise of the differential-drive core (``noise.increment_noise``)."""
    body = np.asarray(body, dtype=np.float64).reshape(-1, 3)
    cov = np.asarray(cov, dtype=np.float64).reshape(-1, 3, 3)
    th_all = np.broadcast_to(np.asarray(theta_before_rad, dtype=np.float64), (len(body),))
    q = np.empty((len(body), 3, 3))
    for s in range(0, len(body), _BLOCK):       # blocks small enough for the temporaries to stay in cache
        e = min(len(body), s + _BLOCK)
        dx, dy, dth = body[s:e, 0], body[s:e, 1], body[s:e, 2]
        a, b, da, db = _odom_jacobian_terms(th_all[s:e], dth, scheme)
        u0, u1 = da * dx - db * dy, db * dx + da * dy
        c = cov[s:e]
        cxx, cxy, cxt, cyy, cyt, ctt = c[:, 0, 0], c[:, 0, 1], c[:, 0, 2], c[:, 1, 1], c[:, 1, 2], c[:, 2, 2]
        r00, r01, r02 = a * cxx - b * cxy + u0 * cxt, a * cxy - b * cyy + u0 * cyt, a * cxt - b * cyt + u0 * ctt
        r10, r11, r12 = b * cxx + a * cxy + u1 * cxt, b * cxy + a * cyy + u1 * cyt, b * cxt + a * cyt + u1 * ctt
        out = q[s:e]
        out[:, 0, 0] = r00 * a - r01 * b + r02 * u0
        out[:, 0, 1] = out[:, 1, 0] = r00 * b + r01 * a + r02 * u1
        out[:, 0, 2] = out[:, 2, 0] = r02
        out[:, 1, 1] = r10 * b + r11 * a + r12 * u1
        out[:, 1, 2] = out[:, 2, 1] = r12
        out[:, 2, 2] = ctt
    return q


def body_to_odom_noise_floats(theta_before: float, dx: float, dy: float, dth: float,
                              cov6: Sequence[float], scheme: str) -> tuple[float, ...]:
    """Float twin of ``body_to_odom_noise`` for one step: cov6 and the result as
    (xx, xy, xyaw, yy, yyaw, yawyaw). No numpy (the streaming hot path)."""
    if scheme == "euler":
        a, b, da, db = math.cos(theta_before), math.sin(theta_before), 0.0, 0.0
    elif scheme == "midpoint":
        phi = theta_before + 0.5 * dth
        c, s = math.cos(phi), math.sin(phi)
        a, b, da, db = c, s, -0.5 * s, 0.5 * c
    elif scheme == "exact":
        fa, fb = se2_exp_factors_scalar(dth)
        if abs(dth) < SERIES_BELOW:
            fda, fdb = -dth / 3.0, 0.5 - dth * dth / 8.0
        else:
            fda, fdb = (math.cos(dth) - fa) / dth, (math.sin(dth) - fb) / dth
        c, s = math.cos(theta_before), math.sin(theta_before)
        a, b, da, db = c * fa - s * fb, s * fa + c * fb, c * fda - s * fdb, s * fda + c * fdb
    else:
        raise ValueError(f"integration scheme '{scheme}' is not one of euler, midpoint, exact")
    u0, u1 = da * dx - db * dy, db * dx + da * dy
    cxx, cxy, cxt, cyy, cyt, ctt = cov6
    r00, r01, r02 = a * cxx - b * cxy + u0 * cxt, a * cxy - b * cyy + u0 * cyt, a * cxt - b * cyt + u0 * ctt
    r11, r12 = b * cxy + a * cyy + u1 * cyt, b * cxt + a * cyt + u1 * ctt
    r10 = b * cxx + a * cxy + u1 * cxt
    return (r00 * a - r01 * b + r02 * u0, r00 * b + r01 * a + r02 * u1, r02,
            r10 * b + r11 * a + r12 * u1, r12, ctt)
