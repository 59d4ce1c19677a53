"""Planar alignment of an estimated path onto ground truth: SE(2) least squares and first-pose anchoring."""
from __future__ import annotations

import math

import numpy as np

from ..core.errors import InputError
from ..core.motion import wrap_angle
from ..core.se2 import umeyama_se2  # re-exported: the one Umeyama alignment

__all__ = ["umeyama_se2", "anchor_first", "apply_se2", "rotation_2d"]


def rotation_2d(yaw_rad: float) -> np.ndarray:
    """2x2 rotation matrix of a counter-clockwise angle ``yaw_rad`` (REP 103 sign)."""
    c, s = math.cos(yaw_rad), math.sin(yaw_rad)
    return np.array([[c, -s], [s, c]])


def apply_se2(rot: np.ndarray, t: np.ndarray, xy: np.ndarray,
              yaw_rad: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray | None]:
    """Map points (N, 2) and headings (N,) through x' = R x + t, yaw' = yaw + angle(R) (wrapped)."""
    p = np.asarray(xy, dtype=np.float64).reshape(-1, 2)
    r = np.asarray(rot, dtype=np.float64)
    out_xy = np.empty_like(p)          # written out: a (N, 2) @ (2, 2) product on a strided view is slow
    out_xy[:, 0] = r[0, 0] * p[:, 0] + r[0, 1] * p[:, 1] + t[0]
    out_xy[:, 1] = r[1, 0] * p[:, 0] + r[1, 1] * p[:, 1] + t[1]
    if yaw_rad is None:
        return out_xy, None
    angle = math.atan2(rot[1, 0], rot[0, 0])
    return out_xy, wrap_angle(np.asarray(yaw_rad, dtype=np.float64) + angle)


def anchor_first(est_pose: np.ndarray, truth_pose: np.ndarray) -> tuple[np.ndarray, np.ndarray, float]:
    """The SE(2) transform (R, t, angle) that puts the first estimated pose exactly on the first true
    pose: angle = yaw_truth0 - yaw_est0, t = p_truth0 - R p_est0 (poses as rows of x m, y m, yaw rad).

    This is the "anchored" comparison: what a user sees when odometry starts where the base really is.
    """
    est = np.asarray(est_pose, dtype=np.float64).reshape(-1, 3)
    tru = np.asarray(truth_pose, dtype=np.float64).reshape(-1, 3)
    if len(est) == 0 or len(tru) == 0:
        raise InputError("Anchoring needs at least one estimated and one true pose.")
    angle = float(wrap_angle(tru[0, 2] - est[0, 2]))
    rot = rotation_2d(angle)
    t = tru[0, :2] - rot @ est[0, :2]
    return rot, t, angle
