"""Planar alignment of an estimated path onto ground truth: SE(2) least squares and first-pose anchoring."""
from __future__ import annotations

import math

import numpy as np

from ..core.errors import InputError
from ..core.motion import wrap_angle

__all__ = ["umeyama_se2", "anchor_first", "apply_se2", "rotation_2d"]


def rotation_2d(yaw_rad: float) -> np.ndarray:
    """2x2 rotation matrix of a counter-clockwise angle ``yaw_rad`` (REP 103 sign)."""
    c, s = math.cos(yaw_rad), math.sin(yaw_rad)
    return np.array([[c, -s], [s, c]])


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
