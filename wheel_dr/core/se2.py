"""Planar poses as one vectorised type: a stack of N SE(2) poses with compose, inverse, relative motion,
the SE(2) exponential, quaternion conversion and Umeyama alignment.

In the spirit of scipy's ``Rotation``: one object holds N poses and every operation works on all of
them at once. A pose (x, y, theta) maps a point p of its own frame to R(theta) p + (x, y) in the
outer frame; composition a * b = (t_a + R_a t_b, theta_a + theta_b) (Sola, Deray & Atchuthan,
"A micro Lie theory for state estimation in robotics", 2018, sec. IV and app. C). Headings add
without wrapping, so unwrapped headings stay unwrapped; ``yaw_rad`` gives them wrapped.

The exponential of a body increment tau = (dx, dy, dtheta) (Sola et al. 2018, eq. 156) is the
pose (V (dx, dy), dtheta) with V = [[a, -b], [b, a]], a = sin(dtheta)/dtheta and
b = (1 - cos dtheta)/dtheta (Taylor series below ``SERIES_BELOW``): the end of a constant-twist
motion. For dy = 0 it is the chord of the constant-curvature arc, ds sinc(dtheta/2) along dtheta/2.
"""
from __future__ import annotations

import math

import numpy as np

from .errors import InputError

__all__ = ["Poses", "se2_exp_factors", "se2_exp_factors_scalar", "quaternion_to_yaw_array",
           "yaw_to_quaternion_array", "umeyama_se2", "rotate_covariance"]

SERIES_BELOW = 1e-4


def se2_exp_factors(dtheta_rad):
    """a = sin(dtheta)/dtheta and b = (1 - cos dtheta)/dtheta of the SE(2) exponential (series near 0)."""
    th = np.asarray(dtheta_rad, dtype=np.float64)
    small = np.abs(th) < SERIES_BELOW
    ts = np.where(small, 1.0, th)
    t2 = th * th
    a = np.where(small, 1.0 - t2 / 6.0, np.sin(ts) / ts)
    b = np.where(small, 0.5 * th - th * t2 / 24.0, (1.0 - np.cos(ts)) / ts)
    return a, b


def se2_exp_factors_scalar(dtheta: float) -> tuple[float, float]:
    """Scalar twin of ``se2_exp_factors``."""
    if abs(dtheta) < SERIES_BELOW:
        t2 = dtheta * dtheta
        return 1.0 - t2 / 6.0, 0.5 * dtheta - dtheta * t2 / 24.0
    return math.sin(dtheta) / dtheta, (1.0 - math.cos(dtheta)) / dtheta


def quaternion_to_yaw_array(q) -> np.ndarray:
    """Yaw of quaternions (N, 4) x y z w (the z-y-x yaw; exact for pure-yaw rotations)."""
    q = np.asarray(q, dtype=np.float64).reshape(-1, 4)
    x, y, z, w = q[:, 0], q[:, 1], q[:, 2], q[:, 3]
    return np.arctan2(2.0 * (w * z + x * y), 1.0 - 2.0 * (y * y + z * z))


def yaw_to_quaternion_array(yaw_rad) -> np.ndarray:
    """Quaternions (N, 4) x y z w of rotations by ``yaw_rad`` about z (REP 103: counter-clockwise positive)."""
    half = 0.5 * np.asarray(yaw_rad, dtype=np.float64).reshape(-1)
    out = np.zeros((len(half), 4))
    out[:, 2] = np.sin(half)
    out[:, 3] = np.cos(half)
    return out


def rotate_covariance(cov: np.ndarray, yaw_rad) -> np.ndarray:
    """(N, 3, 3) covariances over (x, y, yaw) rotated by ``yaw_rad``: R P R^T with R = rot_z(yaw)."""
    yaw = np.asarray(yaw_rad, dtype=np.float64).reshape(-1)
    c, s = np.cos(yaw), np.sin(yaw)
    r = np.zeros((len(yaw), 3, 3))
    r[:, 0, 0] = r[:, 1, 1] = c
    r[:, 0, 1] = -s
    r[:, 1, 0] = s
    r[:, 2, 2] = 1.0
    return r @ np.asarray(cov, dtype=np.float64) @ np.swapaxes(r, 1, 2)


class Poses:
    """A stack of N planar poses (x m, y m, theta rad) in one frame; see the module docstring."""

    __slots__ = ("x", "y", "theta")

    def __init__(self, x, y, theta) -> None:
        self.x, self.y, self.theta = np.broadcast_arrays(np.atleast_1d(np.asarray(x, dtype=np.float64)),
                                                         np.atleast_1d(np.asarray(y, dtype=np.float64)),
                                                         np.atleast_1d(np.asarray(theta, dtype=np.float64)))

    # -- construction -------------------------------------------------------------------------
    @classmethod
    def from_array(cls, xyt) -> "Poses":
        """From rows (N, 3) of x, y, theta."""
        a = np.asarray(xyt, dtype=np.float64).reshape(-1, 3)
        return cls(a[:, 0], a[:, 1], a[:, 2])

    @classmethod
    def identity(cls, n: int = 1) -> "Poses":
        """N identity poses."""
        z = np.zeros(n)
        return cls(z, z, z)

    @classmethod
    def from_quaternion(cls, x, y, quat) -> "Poses":
        """Positions and quaternions (N, 4) x y z w (only the yaw is kept)."""
        return cls(x, y, quaternion_to_yaw_array(quat))

    @classmethod
    def exp(cls, dx, dy, dtheta) -> "Poses":
        """The SE(2) exponential of body increments (dx, dy, dtheta): the pose reached by moving at the
        constant body twist (dx, dy, dtheta) per unit time for one unit of time."""
        dx, dy, dtheta = (np.asarray(v, dtype=np.float64) for v in (dx, dy, dtheta))
        a, b = se2_exp_factors(dtheta)
        return cls(a * dx - b * dy, b * dx + a * dy, dtheta)

    @classmethod
    def align(cls, src_xy, dst_xy) -> "Poses":
        """The single pose (rotation and translation, no scale) mapping points ``src_xy`` onto
        ``dst_xy`` in the least-squares sense (Umeyama 1991; see ``umeyama_se2``)."""
        rot, t, angle = umeyama_se2(src_xy, dst_xy)
        return cls(t[0], t[1], angle)

    # -- views ---------------------------------------------------------------------------------
    def __len__(self) -> int:
        return int(self.x.shape[0])

    def __getitem__(self, index) -> "Poses":
        return Poses(self.x[index], self.y[index], self.theta[index])

    def as_array(self) -> np.ndarray:
        """Rows (N, 3) of x, y, theta."""
        return np.column_stack([self.x, self.y, self.theta])

    def as_quaternion(self) -> np.ndarray:
        """Quaternions (N, 4) x y z w of the headings."""
        return yaw_to_quaternion_array(self.theta)

    @property
    def yaw_rad(self) -> np.ndarray:
        """Headings wrapped to (-pi, pi]."""
        return np.pi - np.mod(np.pi - self.theta, 2.0 * np.pi)

    def __repr__(self) -> str:
        return f"Poses(n={len(self)})"

    # -- group operations ------------------------------------------------------------------------
    def compose(self, other: "Poses") -> "Poses":
        """self * other (broadcast: N and N, 1 and N, N and 1)."""
        c, s = np.cos(self.theta), np.sin(self.theta)
        return Poses(self.x + c * other.x - s * other.y, self.y + s * other.x + c * other.y,
                     self.theta + other.theta)

    __mul__ = compose

    def inverse(self) -> "Poses":
        """The inverse poses: (-R^T t, -theta)."""
        c, s = np.cos(self.theta), np.sin(self.theta)
        return Poses(-(c * self.x + s * self.y), s * self.x - c * self.y, -self.theta)

    def between(self, other: "Poses") -> "Poses":
        """self^-1 * other: the motion from each pose of self to the matching pose of other, in the
        frame of self (heading difference unwrapped)."""
        dx, dy = other.x - self.x, other.y - self.y
        c, s = np.cos(self.theta), np.sin(self.theta)
        return Poses(c * dx + s * dy, -s * dx + c * dy, other.theta - self.theta)

    def relative(self, i, j) -> "Poses":
        """Motion from pose i to pose j (index arrays) in the frame of pose i."""
        return self[i].between(self[j])

    def apply(self, xy) -> np.ndarray:
        """Points (N, 2) of each pose's frame mapped into the outer frame (broadcast as ``compose``)."""
        p = np.asarray(xy, dtype=np.float64).reshape(-1, 2)
        c, s = np.cos(self.theta), np.sin(self.theta)
        return np.column_stack([self.x + c * p[:, 0] - s * p[:, 1], self.y + s * p[:, 0] + c * p[:, 1]])


def umeyama_se2(src_xy: np.ndarray, dst_xy: np.ndarray) -> tuple[np.ndarray, np.ndarray, float]:
    """Rotation R (2, 2), translation t (2,) in metres and its angle (rad) minimising
    sum ||dst_i - (R src_i + t)||^2, without scale.

    Implements Umeyama, "Least-squares estimation of transformation parameters between two point
    patterns", IEEE TPAMI 13(4), 1991, eqs. (38)-(42) with c = 1: the SVD U D V^T of the
    cross-covariance Sigma = (1/n) sum (dst_i - mu_d)(src_i - mu_s)^T gives R = U S V^T, with
    S = diag(1, det(U) det(V)) so that R is a proper rotation, and t = mu_d - R mu_s.
    Both point sets are in metres in their own frames; R, t map src coordinates into dst's frame.
    """
    src = np.asarray(src_xy, dtype=np.float64).reshape(-1, 2)
    dst = np.asarray(dst_xy, dtype=np.float64).reshape(-1, 2)
    if src.shape != dst.shape:
        raise InputError(f"Alignment needs as many estimated as true points (got {len(src)} and {len(dst)}); "
                         "interpolate the truth at the estimate's stamps first.")
    if len(src) < 2:
        raise InputError("Alignment needs at least 2 matched points; use a recording where the base moves "
                         "while ground truth is available.")
    mu_s = src.mean(axis=0)
    mu_d = dst.mean(axis=0)
    sigma = (dst - mu_d).T @ (src - mu_s) / len(src)
    if not np.any(np.abs(sigma) > 0.0):
        raise InputError("Alignment is undefined because the points do not spread out; use a recording "
                         "where the base moves.")
    u, _, vt = np.linalg.svd(sigma)
    s = np.diag([1.0, float(np.sign(np.linalg.det(u) * np.linalg.det(vt)) or 1.0)])
    rot = u @ s @ vt
    t = mu_d - rot @ mu_s
    return rot, t, math.atan2(rot[1, 0], rot[0, 0])
