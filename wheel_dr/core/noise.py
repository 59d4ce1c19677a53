"""Uncertainty of wheel increments and its first-order propagation into the (x, y, yaw) covariance.

Models (``noise.model``):

* ``per_wheel``: each step's wheel travel has variance k_r |ds_r| and k_l |ds_l| (k in metres),
  independent (Siegwart et al. 2011, sec. 5.2.4; Chong & Kleeman, ICRA 1997).
* ``motion_model``: the odometry motion model (Thrun, Burgard & Fox, "Probabilistic Robotics",
  2005, sec. 5.4). A step is read as rot1, trans, rot2 with the *variances*

      var(rot1)  = a1 rot1^2 + a2 trans^2
      var(trans) = a3 trans^2 + a4 (rot1^2 + rot2^2)
      var(rot2)  = a1 rot2^2 + a2 trans^2

  where rot1 is the direction of the step's chord relative to the heading before the step
  (0 for euler, dtheta/2 for midpoint and exact), trans its signed length (negative when
  reversing, so reversing does not turn into a half turn) and rot2 = dtheta - rot1.

Propagation: P_k = F_k P_{k-1} F_k^T + Q_k with F_k = [[1, 0, -dy], [0, 1, dx], [0, 0, 1]]
(the Jacobian of the step with respect to the previous pose) and Q_k the step noise mapped into
the odom frame. Because every F_k is the identity plus a term in the third column only, the
product of F's from step j to step k is I + c e3^T with c = (-(y_k - y_j), x_k - x_j, 0): the
whole recursion has a closed form in cumulative sums, which ``propagate_covariance`` evaluates in
blocks (positions re-based per block to keep round-off small).
"""
from __future__ import annotations

import math

import numpy as np

from .motion import chord_factor, increment_jacobian, increment_jacobian_scalar, _chord_scalar

__all__ = [
    "UNOBSERVED_VARIANCE",
    "increment_noise",
    "increment_noise_scalar",
    "motion_model_variances",
    "propagate_covariance",
    "propagate_step",
    "motion_model_parts",
]

UNOBSERVED_VARIANCE = 1.0e6  # variance reported for quantities the estimator does not observe

_BLOCK = 4096


def motion_model_parts(ds_m, dtheta_rad, scheme: str):
    """rot1, trans, rot2 of a step under ``scheme`` (see the module docstring)."""
    ds = np.asarray(ds_m, dtype=np.float64)
    dth = np.asarray(dtheta_rad, dtype=np.float64)
    if scheme == "euler":
        rot1 = np.zeros_like(dth)
        trans = ds
    else:
        rot1 = 0.5 * dth
        trans = ds if scheme == "midpoint" else ds * chord_factor(dth)
    return rot1, trans, dth - rot1


def motion_model_variances(rot1, trans, rot2, alphas) -> np.ndarray:
    """(..., 3) variances of rot1, trans, rot2 (Thrun et al. 2005, sec. 5.4, read as variances)."""
    a1, a2, a3, a4 = alphas
    r1s, ts, r2s = np.square(rot1), np.square(trans), np.square(rot2)
    return np.stack([a1 * r1s + a2 * ts, a3 * ts + a4 * (r1s + r2s), a1 * r2s + a2 * ts], axis=-1)


def increment_noise(theta_before_rad, ds_left_m, ds_right_m, track_width_m: float, scheme: str,
                    model: str, k_left: float, k_right: float, alphas) -> tuple[np.ndarray, np.ndarray]:
    """Step noise Q (M, 3, 3) in the odom frame and the (ds, dtheta) covariance C (M, 2, 2).

    C divided by dt^2 is the covariance of the twist (v, w).
    """
    dl = np.asarray(ds_left_m, dtype=np.float64)
    dr = np.asarray(ds_right_m, dtype=np.float64)
    b = track_width_m
    ds = 0.5 * (dr + dl)
    dth = (dr - dl) / b
    m = ds.shape[0]
    if model == "per_wheel":
        var_r = k_right * np.abs(dr)
        var_l = k_left * np.abs(dl)
        c_in = np.empty((m, 2, 2))
        c_in[:, 0, 0] = 0.25 * (var_r + var_l)
        c_in[:, 0, 1] = c_in[:, 1, 0] = 0.5 * (var_r - var_l) / b
        c_in[:, 1, 1] = (var_r + var_l) / (b * b)
        jac = increment_jacobian(theta_before_rad, ds, dth, scheme)
        q = jac @ c_in @ np.swapaxes(jac, -1, -2)
        return q, c_in
    rot1, trans, rot2 = motion_model_parts(ds, dth, scheme)
    var = motion_model_variances(rot1, trans, rot2, alphas)
    phi = theta_before_rad + rot1
    c, s = np.cos(phi), np.sin(phi)
    g = np.zeros((m, 3, 3))
    g[:, 0, 0] = -trans * s
    g[:, 0, 1] = c
    g[:, 1, 0] = trans * c
    g[:, 1, 1] = s
    g[:, 2, 0] = 1.0
    g[:, 2, 2] = 1.0
    q = (g * var[:, None, :]) @ np.swapaxes(g, -1, -2)
    c_in = np.zeros((m, 2, 2))
    c_in[:, 0, 0] = var[:, 1]
    c_in[:, 1, 1] = var[:, 0] + var[:, 2]
    return q, c_in


def increment_noise_scalar(theta_before: float, ds_left: float, ds_right: float, track_width_m: float,
                           scheme: str, model: str, k_left: float, k_right: float,
                           alphas) -> tuple[np.ndarray, np.ndarray]:
    """Scalar twin of ``increment_noise`` for one step: Q (3, 3) and C (2, 2)."""
    b = track_width_m
    ds = 0.5 * (ds_right + ds_left)
    dth = (ds_right - ds_left) / b
    if model == "per_wheel":
        var_r = k_right * abs(ds_right)
        var_l = k_left * abs(ds_left)
        cross = 0.5 * (var_r - var_l) / b
        c_in = np.array([[0.25 * (var_r + var_l), cross], [cross, (var_r + var_l) / (b * b)]])
        jac = increment_jacobian_scalar(theta_before, ds, dth, scheme)
        return jac @ c_in @ jac.T, c_in
    if scheme == "euler":
        rot1, trans = 0.0, ds
    else:
        rot1 = 0.5 * dth
        trans = ds if scheme == "midpoint" else ds * _chord_scalar(dth)
    rot2 = dth - rot1
    a1, a2, a3, a4 = alphas
    v1 = a1 * rot1 * rot1 + a2 * trans * trans
    vt = a3 * trans * trans + a4 * (rot1 * rot1 + rot2 * rot2)
    v2 = a1 * rot2 * rot2 + a2 * trans * trans
    phi = theta_before + rot1
    c, s = math.cos(phi), math.sin(phi)
    g = np.array([[-trans * s, c, 0.0], [trans * c, s, 0.0], [1.0, 0.0, 1.0]])
    q = (g * np.array([v1, vt, v2])) @ g.T
    return q, np.array([[vt, 0.0], [0.0, v1 + v2]])


def propagate_step(cov: np.ndarray, dx_m: float, dy_m: float, q: np.ndarray) -> np.ndarray:
    """One step of P' = F P F^T + Q with F = [[1, 0, -dy], [0, 1, dx], [0, 0, 1]]."""
    f = np.array([[1.0, 0.0, -dy_m], [0.0, 1.0, dx_m], [0.0, 0.0, 1.0]])
    return f @ cov @ f.T + q


def _transport(cov: np.ndarray, c: np.ndarray) -> np.ndarray:
    """(I + c e3^T) A (I + e3 c^T) for stacks: A (..., 3, 3), c (..., 3)."""
    col = cov[..., :, 2]
    return (cov + c[..., :, None] * col[..., None, :] + col[..., :, None] * c[..., None, :]
            + cov[..., 2, 2][..., None, None] * c[..., :, None] * c[..., None, :])


def propagate_covariance(x_m: np.ndarray, y_m: np.ndarray, q: np.ndarray,
                         start_cov: np.ndarray | None = None,
                         start_xy: tuple[float, float] = (0.0, 0.0)) -> np.ndarray:
    """Covariance after each step, (M, 3, 3), of P_k = F_k P_{k-1} F_k^T + Q_k (vectorised).

    ``x_m, y_m`` are the positions after each step, ``start_xy`` the position before the first,
    ``start_cov`` the covariance there (zero if omitted). Equal to iterating ``propagate_step``.
    """
    m = len(x_m)
    out = np.empty((m, 3, 3))
    carry = np.zeros((3, 3)) if start_cov is None else np.asarray(start_cov, dtype=np.float64)
    ref_x, ref_y = float(start_xy[0]), float(start_xy[1])
    for s in range(0, m, _BLOCK):
        e = min(m, s + _BLOCK)
        a = np.zeros((e - s, 3))
        a[:, 0] = -(np.asarray(y_m[s:e]) - ref_y)
        a[:, 1] = np.asarray(x_m[s:e]) - ref_x
        qb = q[s:e]
        qc = qb[:, :, 2]                      # q_j = Q_j e3
        ss = qb[:, 2, 2]                      # s_j = Q_j[2, 2]
        sum_q = np.cumsum(qb, axis=0)
        sum_qc = np.cumsum(qc, axis=0)
        sum_s = np.cumsum(ss)
        sum_sa = np.cumsum(ss[:, None] * a, axis=0)
        sum_aq = np.cumsum(a[:, :, None] * qc[:, None, :], axis=0)      # sum a_j q_j^T
        sum_saa = np.cumsum(ss[:, None, None] * a[:, :, None] * a[:, None, :], axis=0)
        ak = a
        block = (sum_q
                 + ak[:, :, None] * sum_qc[:, None, :] - sum_aq
                 + sum_qc[:, :, None] * ak[:, None, :] - np.swapaxes(sum_aq, 1, 2)
                 + sum_s[:, None, None] * ak[:, :, None] * ak[:, None, :]
                 - ak[:, :, None] * sum_sa[:, None, :] - sum_sa[:, :, None] * ak[:, None, :]
                 + sum_saa)
        block += _transport(carry[None, :, :], ak)   # carry is at the block's reference point
        out[s:e] = block
        carry = block[-1]
        ref_x, ref_y = float(x_m[e - 1]), float(y_m[e - 1])
    # keep the stack exactly symmetric
    return 0.5 * (out + np.swapaxes(out, 1, 2))
