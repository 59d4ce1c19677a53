"""Message conventions shared by the node and the analyser: quaternions and 6x6 covariances.

nav_msgs/Odometry carries 6x6 row-major covariances over (x, y, z, rotation about X, Y, Z). A
planar estimator does not observe z, roll or pitch: wheel_dr reports those three variances as
``UNOBSERVED_VARIANCE`` (1e6) with zero correlation, so a fusion filter that does read them gives
them no weight (common practice). The twist covariance is laid out the same way over
(vx, vy, vz, wx, wy, wz); vy is zero by the non-holonomic constraint, reported with variance
``LATERAL_VELOCITY_VARIANCE``.
"""
from __future__ import annotations

import math

import numpy as np

from .noise import UNOBSERVED_VARIANCE

__all__ = [
    "yaw_to_quaternion",
    "quaternion_to_yaw",
    "pose_covariance_6x6",
    "twist_covariance_6x6",
    "planar_covariance_from_6x6",
    "pose_covariance_6x6_array",
    "twist_covariance_6x6_array",
    "LATERAL_VELOCITY_VARIANCE",
]

LATERAL_VELOCITY_VARIANCE = 1e-6  # (m/s)^2: a wheeled base does not slide sideways unless slipping

_POSE_IDX = (0, 1, 5)   # x, y, yaw in the 6x6 layout
_TWIST_IDX = (0, 5)     # vx, wz
_TWIST3_IDX = (0, 1, 5)  # vx, vy, wz


def yaw_to_quaternion(yaw_rad: float) -> tuple[float, float, float, float]:
    """Quaternion (x, y, z, w) of a rotation by ``yaw_rad`` about z (REP 103: counter-clockwise positive)."""
    half = 0.5 * yaw_rad
    return 0.0, 0.0, math.sin(half), math.cos(half)


def quaternion_to_yaw(x: float, y: float, z: float, w: float) -> float:
    """Yaw (rad, about z) of a quaternion; exact for pure-yaw rotations, the z-y-x yaw otherwise."""
    return math.atan2(2.0 * (w * z + x * y), 1.0 - 2.0 * (y * y + z * z))


def pose_covariance_6x6(cov_xyyaw: np.ndarray) -> list[float]:
    """Row-major 36 numbers from a 3x3 (x, y, yaw) covariance; z, roll, pitch unobserved."""
    out = np.zeros((6, 6))
    out[2, 2] = out[3, 3] = out[4, 4] = UNOBSERVED_VARIANCE
    out[np.ix_(_POSE_IDX, _POSE_IDX)] = cov_xyyaw
    return out.ravel().tolist()


def twist_covariance_6x6(cov_vw: np.ndarray) -> list[float]:
    """Row-major 36 numbers from a 2x2 (v, w) covariance (vy tight) or a 3x3 (vx, vy, wz) one;
    vz, wx, wy unobserved."""
    cov = np.asarray(cov_vw, dtype=np.float64)
    out = np.zeros((6, 6))
    out[2, 2] = out[3, 3] = out[4, 4] = UNOBSERVED_VARIANCE
    if cov.shape == (2, 2):
        out[1, 1] = LATERAL_VELOCITY_VARIANCE
        out[np.ix_(_TWIST_IDX, _TWIST_IDX)] = cov
    else:
        out[np.ix_(_TWIST3_IDX, _TWIST3_IDX)] = cov
    return out.ravel().tolist()


def pose_covariance_6x6_array(cov_xyyaw: np.ndarray) -> np.ndarray:
    """(N, 36) row-major 6x6 pose covariances from (N, 3, 3) over (x, y, yaw); the array twin of
    ``pose_covariance_6x6``."""
    cov = np.asarray(cov_xyyaw, dtype=np.float64).reshape(-1, 3, 3)
    out = np.zeros((len(cov), 6, 6))
    out[:, 2, 2] = out[:, 3, 3] = out[:, 4, 4] = UNOBSERVED_VARIANCE
    out[:, np.array(_POSE_IDX)[:, None], np.array(_POSE_IDX)[None, :]] = cov
    return out.reshape(-1, 36)


def twist_covariance_6x6_array(cov_twist: np.ndarray) -> np.ndarray:
    """(N, 36) row-major 6x6 twist covariances from (N, 2, 2) over (v, w) or (N, 3, 3) over
    (vx, vy, wz); the array twin of ``twist_covariance_6x6``."""
    cov = np.asarray(cov_twist, dtype=np.float64)
    k = cov.shape[-1]
    cov = cov.reshape(-1, k, k)
    out = np.zeros((len(cov), 6, 6))
    out[:, 2, 2] = out[:, 3, 3] = out[:, 4, 4] = UNOBSERVED_VARIANCE
    idx = np.array(_TWIST_IDX if k == 2 else _TWIST3_IDX)
    if k == 2:
        out[:, 1, 1] = LATERAL_VELOCITY_VARIANCE
    out[:, idx[:, None], idx[None, :]] = cov
    return out.reshape(-1, 36)


def planar_covariance_from_6x6(cov36) -> np.ndarray:
    """The (x, y, yaw) 3x3 block of a row-major 6x6 pose covariance."""
    full = np.asarray(cov36, dtype=np.float64).reshape(6, 6)
    return full[np.ix_(_POSE_IDX, _POSE_IDX)].copy()
