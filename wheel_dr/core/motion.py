"""Differential-drive kinematics: body increments, the three integration schemes and their Jacobians.

Frames and signs follow REP 103: x forward, y left, yaw counter-clockwise positive. Formulas are
Siegwart, Nourbakhsh & Scaramuzza, "Introduction to Autonomous Mobile Robots", 2nd ed. (2011),
ch. 3 and sec. 5.2.4:

    ds = (ds_r + ds_l) / 2,   dtheta = (ds_r - ds_l) / b

and for a step from heading th:

    euler     dx = ds cos th,                      dy = ds sin th
    midpoint  dx = ds cos(th + dtheta/2),          dy = ds sin(th + dtheta/2)     (RK2)
    exact     dx = ds sinc(dtheta/2) cos(th + dtheta/2), dy = ds sinc(dtheta/2) sin(th + dtheta/2)

The exact form is the constant-curvature arc R (sin(th + dtheta) - sin th) rewritten with
sinc(u) = sin(u)/u, which has no 0/0 on straight steps and loses no precision there.
Every function takes numpy arrays; the ``*_scalar`` twins take floats for the streaming path.
"""
from __future__ import annotations

import math

import numpy as np

__all__ = [
    "body_increment",
    "chord_factor",
    "chord_factor_derivative",
    "pose_increment",
    "pose_increment_scalar",
    "increment_jacobian",
    "integrate",
    "wrap_angle",
    "wrap_angle_scalar",
    "SERIES_BELOW",
]

SERIES_BELOW = 1e-4  # |dtheta/2| below which sinc and its derivative use their Taylor series


def body_increment(ds_left_m, ds_right_m, track_width_m: float):
    """Body travel ds (m) and heading change dtheta (rad) from left and right wheel travel."""
    return 0.5 * (ds_right_m + ds_left_m), (ds_right_m - ds_left_m) / track_width_m


def chord_factor(dtheta_rad: np.ndarray) -> np.ndarray:
    """sinc(dtheta/2) = sin(h)/h with h = dtheta/2: chord length of an arc over its arc length."""
    h = 0.5 * np.asarray(dtheta_rad, dtype=np.float64)
    small = np.abs(h) < SERIES_BELOW
    hs = np.where(small, 1.0, h)
    return np.where(small, 1.0 - h * h / 6.0, np.sin(hs) / hs)


def chord_factor_derivative(dtheta_rad: np.ndarray) -> np.ndarray:
    """d sinc(dtheta/2) / d dtheta = (h cos h - sin h) / (2 h^2), h = dtheta/2 (series near 0)."""
    h = 0.5 * np.asarray(dtheta_rad, dtype=np.float64)
    small = np.abs(h) < SERIES_BELOW
    hs = np.where(small, 1.0, h)
    return np.where(small, -h / 6.0, (hs * np.cos(hs) - np.sin(hs)) / (2.0 * hs * hs))


def _chord_scalar(dtheta: float) -> float:
    h = 0.5 * dtheta
    return 1.0 - h * h / 6.0 if abs(h) < SERIES_BELOW else math.sin(h) / h


def _chord_derivative_scalar(dtheta: float) -> float:
    h = 0.5 * dtheta
    return -h / 6.0 if abs(h) < SERIES_BELOW else (h * math.cos(h) - math.sin(h)) / (2.0 * h * h)


def pose_increment(theta_rad, ds_m, dtheta_rad, scheme: str):
    """Odom-frame increment (dx, dy) of one step from heading ``theta_rad`` under ``scheme``."""
    if scheme == "euler":
        return ds_m * np.cos(theta_rad), ds_m * np.sin(theta_rad)
    phi = theta_rad + 0.5 * dtheta_rad
    length = ds_m if scheme == "midpoint" else ds_m * chord_factor(dtheta_rad)
    return length * np.cos(phi), length * np.sin(phi)


def pose_increment_scalar(theta: float, ds: float, dtheta: float, scheme: str) -> tuple[float, float]:
    """Scalar twin of ``pose_increment`` (same operations, floats)."""
    if scheme == "euler":
        return ds * math.cos(theta), ds * math.sin(theta)
    phi = theta + 0.5 * dtheta
    length = ds if scheme == "midpoint" else ds * _chord_scalar(dtheta)
    return length * math.cos(phi), length * math.sin(phi)


def increment_jacobian(theta_rad, ds_m, dtheta_rad, scheme: str) -> np.ndarray:
    """d(dx, dy, dtheta) / d(ds, dtheta) in the odom frame, shape (..., 3, 2).

    The Jacobian with respect to the previous pose (x, y, theta) is the same for all three schemes:
    [[1, 0, -dy], [0, 1, dx], [0, 0, 1]], because each increment depends on theta only through
    the rotation of a body-frame vector.
    """
    theta = np.asarray(theta_rad, dtype=np.float64)
    ds = np.asarray(ds_m, dtype=np.float64)
    dth = np.asarray(dtheta_rad, dtype=np.float64)
    shape = np.broadcast(theta, ds, dth).shape
    jac = np.zeros(shape + (3, 2))
    jac[..., 2, 1] = 1.0
    if scheme == "euler":
        jac[..., 0, 0] = np.cos(theta)
        jac[..., 1, 0] = np.sin(theta)
        return jac
    phi = theta + 0.5 * dth
    c, s = np.cos(phi), np.sin(phi)
    if scheme == "midpoint":
        g, gp = 1.0, 0.0
    else:
        g, gp = chord_factor(dth), chord_factor_derivative(dth)
    jac[..., 0, 0] = g * c
    jac[..., 1, 0] = g * s
    jac[..., 0, 1] = ds * (gp * c - 0.5 * g * s)
    jac[..., 1, 1] = ds * (gp * s + 0.5 * g * c)
    return jac


def increment_jacobian_scalar(theta: float, ds: float, dtheta: float, scheme: str) -> np.ndarray:
    """Scalar twin of ``increment_jacobian``, shape (3, 2)."""
    jac = np.zeros((3, 2))
    jac[2, 1] = 1.0
    if scheme == "euler":
        jac[0, 0] = math.cos(theta)
        jac[1, 0] = math.sin(theta)
        return jac
    phi = theta + 0.5 * dtheta
    c, s = math.cos(phi), math.sin(phi)
    if scheme == "midpoint":
        g, gp = 1.0, 0.0
    else:
        g, gp = _chord_scalar(dtheta), _chord_derivative_scalar(dtheta)
    jac[0, 0] = g * c
    jac[1, 0] = g * s
    jac[0, 1] = ds * (gp * c - 0.5 * g * s)
    jac[1, 1] = ds * (gp * s + 0.5 * g * c)
    return jac


__all__.append("increment_jacobian_scalar")


def integrate(ds_m: np.ndarray, dtheta_rad: np.ndarray, scheme: str,
              start_pose: tuple[float, float, float] = (0.0, 0.0, 0.0)):
    """Integrate increments from ``start_pose``; returns x, y, theta (unwrapped) after each step and
    the heading before each step. Vectorised: heading by cumulative sum, then positions likewise."""
    x0, y0, th0 = (float(v) for v in start_pose)
    theta = np.cumsum(np.concatenate(([th0], dtheta_rad)))  # same additions as the streaming path
    theta_before = theta[:-1]
    dx, dy = pose_increment(theta_before, ds_m, dtheta_rad, scheme)
    x = np.cumsum(np.concatenate(([x0], dx)))[1:]
    y = np.cumsum(np.concatenate(([y0], dy)))[1:]
    return x, y, theta[1:], theta_before, dx, dy


def wrap_angle(angle_rad):
    """Angle wrapped to (-pi, pi]."""
    return np.pi - np.mod(np.pi - np.asarray(angle_rad, dtype=np.float64), 2.0 * np.pi)


def wrap_angle_scalar(angle: float) -> float:
    """Scalar twin of ``wrap_angle``."""
    return math.pi - (math.pi - angle) % (2.0 * math.pi)
