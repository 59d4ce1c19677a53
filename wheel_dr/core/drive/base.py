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
covariance of ``core.noise.propagate_covariance`` carries over unchanged.
"""
from __future__ import annotations

from abc import ABC, abstractmethod
from typing import Sequence

import numpy as np

from ..se2 import se2_exp_factors

__all__ = ["DriveModel", "integrate_body", "odom_increment"]


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
