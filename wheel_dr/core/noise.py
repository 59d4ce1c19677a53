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

from .motion import (_chord_derivative_scalar, _chord_scalar, chord_factor, increment_jacobian,
                     increment_jacobian_scalar)

__all__ = [
    "UNOBSERVED_VARIANCE",
    "increment_noise",
    "increment_noise_scalar",
    "motion_model_variances",
    "propagate_covariance",
    "segment_covariance",
    "propagate_step",
    "motion_model_parts",
    "increment_noise_floats",
    "propagate_step_floats",
]

UNOBSERVED_VARIANCE = 1.0e6  # variance reported for quantities the estimator does not observe

_BLOCK = 8192


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
        # Q = J C J^T entry by entry (J's last row is (0, 1)): faster than stacked matmuls
        c00, c01, c11 = c_in[:, 0, 0], c_in[:, 0, 1], c_in[:, 1, 1]
        j00, j01, j10, j11 = jac[:, 0, 0], jac[:, 0, 1], jac[:, 1, 0], jac[:, 1, 1]
        u00, u01 = j00 * c00 + j01 * c01, j00 * c01 + j01 * c11
        u10, u11 = j10 * c00 + j11 * c01, j10 * c01 + j11 * c11
        q = np.empty((m, 3, 3))
        q[:, 0, 0] = u00 * j00 + u01 * j01
        q[:, 0, 1] = q[:, 1, 0] = u00 * j10 + u01 * j11
        q[:, 0, 2] = q[:, 2, 0] = u01
        q[:, 1, 1] = u10 * j10 + u11 * j11
        q[:, 1, 2] = q[:, 2, 1] = u11
        q[:, 2, 2] = c11
        return q, c_in
    rot1, trans, rot2 = motion_model_parts(ds, dth, scheme)
    var = motion_model_variances(rot1, trans, rot2, alphas)
    phi = theta_before_rad + rot1
    c, s = np.cos(phi), np.sin(phi)
    # Q = G diag(var) G^T with G = [[-t s, c, 0], [t c, s, 0], [1, 0, 1]], entry by entry
    v1, vt, v2 = var[:, 0], var[:, 1], var[:, 2]
    v1t = v1 * trans
    q = np.empty((m, 3, 3))
    q[:, 0, 0] = v1t * trans * s * s + vt * c * c
    q[:, 0, 1] = q[:, 1, 0] = (vt - v1t * trans) * s * c
    q[:, 0, 2] = q[:, 2, 0] = -v1t * s
    q[:, 1, 1] = v1t * trans * c * c + vt * s * s
    q[:, 1, 2] = q[:, 2, 1] = v1t * c
    q[:, 2, 2] = v1 + v2
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


def increment_noise_floats(theta_before: float, ds_left: float, ds_right: float, track_width_m: float,
                           scheme: str, model: str, k_left: float, k_right: float,
                           alphas) -> tuple[tuple[float, ...], tuple[float, float, float]]:
    """Float twin of ``increment_noise`` for one step, in the same entry-by-entry arithmetic:
    Q as (xx, xy, xyaw, yy, yyaw, yawyaw) and C as (c00, c01, c11). No numpy (the node's hot path)."""
    b = track_width_m
    ds = 0.5 * (ds_right + ds_left)
    dth = (ds_right - ds_left) / b
    if model == "per_wheel":
        var_r = k_right * abs(ds_right)
        var_l = k_left * abs(ds_left)
        c00 = 0.25 * (var_r + var_l)
        c01 = 0.5 * (var_r - var_l) / b
        c11 = (var_r + var_l) / (b * b)
        if scheme == "euler":
            j00, j10, j01, j11 = math.cos(theta_before), math.sin(theta_before), 0.0, 0.0
        else:
            phi = theta_before + 0.5 * dth
            c, s = math.cos(phi), math.sin(phi)
            if scheme == "midpoint":
                g, gp = 1.0, 0.0
            else:
                g, gp = _chord_scalar(dth), _chord_derivative_scalar(dth)
            j00, j10 = g * c, g * s
            j01, j11 = ds * (gp * c - 0.5 * g * s), ds * (gp * s + 0.5 * g * c)
        u00, u01 = j00 * c00 + j01 * c01, j00 * c01 + j01 * c11
        u10, u11 = j10 * c00 + j11 * c01, j10 * c01 + j11 * c11
        q = (u00 * j00 + u01 * j01, u00 * j10 + u01 * j11, u01, u10 * j10 + u11 * j11, u11, c11)
        return q, (c00, c01, c11)
    if scheme == "euler":
        rot1, trans = 0.0, ds
    else:
        rot1 = 0.5 * dth
        trans = ds if scheme == "midpoint" else ds * _chord_scalar(dth)
    rot2 = dth - rot1
    a1, a2, a3, a4 = alphas
    r1s, ts, r2s = rot1 * rot1, trans * trans, rot2 * rot2
    v1 = a1 * r1s + a2 * ts
    vt = a3 * ts + a4 * (r1s + r2s)
    v2 = a1 * r2s + a2 * ts
    phi = theta_before + rot1
    c, s = math.cos(phi), math.sin(phi)
    v1t = v1 * trans
    q = (v1t * trans * s * s + vt * c * c, (vt - v1t * trans) * s * c, -v1t * s,
         v1t * trans * c * c + vt * s * s, v1t * c, v1 + v2)
    return q, (vt, 0.0, v1 + v2)


def propagate_step_floats(p: tuple[float, ...], dx_m: float, dy_m: float,
                          q: tuple[float, ...]) -> tuple[float, ...]:
    """``propagate_step`` on the six distinct entries (xx, xy, xyaw, yy, yyaw, yawyaw), written out:
    F = I + (-dy, dx, 0) e3^T, so F P F^T adds the yaw column and row scaled by -dy and dx."""
    pxx, pxy, pxt, pyy, pyt, ptt = p
    a, c = -dy_m, dx_m
    return (pxx + 2.0 * a * pxt + a * a * ptt + q[0],
            pxy + a * pyt + c * pxt + a * c * ptt + q[1],
            pxt + a * ptt + q[2],
            pyy + 2.0 * c * pyt + c * c * ptt + q[3],
            pyt + c * ptt + q[4],
            ptt + q[5])


def propagate_step(cov: np.ndarray, dx_m: float, dy_m: float, q: np.ndarray) -> np.ndarray:
    """One step of P' = F P F^T + Q with F = [[1, 0, -dy], [0, 1, dx], [0, 0, 1]]."""
    f = np.array([[1.0, 0.0, -dy_m], [0.0, 1.0, dx_m], [0.0, 0.0, 1.0]])
    return f @ cov @ f.T + q


def _running_sum_columns(q: np.ndarray, ax: np.ndarray, ay: np.ndarray) -> np.ndarray:
    """(n, 15) per-step terms whose running sums give the propagated covariance (see below)."""
    qxt, qyt, qtt = q[:, 0, 2], q[:, 1, 2], q[:, 2, 2]
    sax, say = qtt * ax, qtt * ay
    return np.stack([q[:, 0, 0], q[:, 0, 1], qxt, q[:, 1, 1], qyt, qtt,
                     ax * qxt, ay * qxt, ax * qyt, ay * qyt, sax, say,
                     sax * ax, say * ay, sax * ay], axis=1)


def _assemble(sums: np.ndarray, ax: np.ndarray, ay: np.ndarray) -> tuple[np.ndarray, ...]:
    """xx, xy, xyaw, yy, yyaw, yawyaw of sum_m (I + c_m e3^T) Q_m (I + e3 c_m^T), c_m = a - a_m.

    ``sums`` (n, 15) are sums of ``_running_sum_columns`` over the steps m, ``(ax, ay)`` is a.
    """
    (sxx, sxy, sxt, syy, syt, st, s_axqxt, s_ayqxt, s_axqyt, s_ayqyt, s_sax, s_say,
     s_saxx, s_sayy, s_saxy) = sums.T
    pxx = sxx + 2.0 * (ax * sxt - s_axqxt) + ax * ax * st - 2.0 * ax * s_sax + s_saxx
    pxy = sxy + ax * syt - s_axqyt + ay * sxt - s_ayqxt + ax * ay * st - ax * s_say - ay * s_sax + s_saxy
    pxt = sxt + ax * st - s_sax
    pyy = syy + 2.0 * (ay * syt - s_ayqyt) + ay * ay * st - 2.0 * ay * s_say + s_sayy
    pyt = syt + ay * st - s_say
    return pxx, pxy, pxt, pyy, pyt, st


def _fill(out: np.ndarray, pxx, pxy, pxt, pyy, pyt, ptt) -> None:
    out[:, 0, 0] = pxx
    out[:, 0, 1] = out[:, 1, 0] = pxy
    out[:, 0, 2] = out[:, 2, 0] = pxt
    out[:, 1, 1] = pyy
    out[:, 1, 2] = out[:, 2, 1] = pyt
    out[:, 2, 2] = ptt


def propagate_covariance(x_m: np.ndarray, y_m: np.ndarray, q: np.ndarray,
                         start_cov: np.ndarray | None = None,
                         start_xy: tuple[float, float] = (0.0, 0.0)) -> np.ndarray:
    """Covariance after each step, (M, 3, 3), of P_k = F_k P_{k-1} F_k^T + Q_k (vectorised).

    ``x_m, y_m`` are the positions after each step, ``start_xy`` the position before the first,
    ``start_cov`` the covariance there (zero if omitted). Equal to iterating ``propagate_step``.

    With c = (cx, cy, 0) = (-(y_k - y_j), x_k - x_j, 0), each step's contribution at step k is
    Q_j + c q_j^T + q_j c^T + s_j c c^T (q_j = Q_j e3, s_j = Q_j[2, 2]); expanding c gives the six
    distinct entries from fifteen running sums, computed per block with positions re-based at the
    block's start so the sums stay small.
    """
    m = len(x_m)
    out = np.empty((m, 3, 3))
    cxx, cxy, cxt, cyy, cyt, ctt = _entries(np.zeros((3, 3)) if start_cov is None
                                            else np.asarray(start_cov, dtype=np.float64))
    ref_x, ref_y = float(start_xy[0]), float(start_xy[1])
    x_all = np.asarray(x_m, dtype=np.float64)
    y_all = np.asarray(y_m, dtype=np.float64)
    for s in range(0, m, _BLOCK):
        e = min(m, s + _BLOCK)
        ax = ref_y - y_all[s:e]             # a_j = (-y_j, x_j), re-based at the block's start
        ay = x_all[s:e] - ref_x
        pxx, pxy, pxt, pyy, pyt, ptt = _assemble(np.cumsum(_running_sum_columns(q[s:e], ax, ay), axis=0),
                                                 ax, ay)
        # the covariance carried in from before the block, moved along by (ax, ay)
        pxx = pxx + cxx + 2.0 * ax * cxt + ctt * ax * ax
        pxy = pxy + cxy + ax * cyt + ay * cxt + ctt * ax * ay
        pxt = pxt + cxt + ax * ctt
        pyy = pyy + cyy + 2.0 * ay * cyt + ctt * ay * ay
        pyt = pyt + cyt + ay * ctt
        ptt = ptt + ctt
        _fill(out[s:e], pxx, pxy, pxt, pyy, pyt, ptt)
        cxx, cxy, cxt, cyy, cyt, ctt = pxx[-1], pxy[-1], pxt[-1], pyy[-1], pyt[-1], ptt[-1]
        ref_x, ref_y = float(x_all[e - 1]), float(y_all[e - 1])
    return out


def segment_covariance(x_m: np.ndarray, y_m: np.ndarray, q: np.ndarray, starts: np.ndarray,
                       ends: np.ndarray) -> np.ndarray:
    """(S, 3, 3) covariance at step ``ends[s]`` of the same recursion restarted from zero at step
    ``starts[s]`` (steps starts[s]+1 .. ends[s] contribute), for any set of segments, overlapping or
    not. ``x_m, y_m`` are the positions after each step and ``q`` (M, 3, 3) the step noise, as for
    ``propagate_covariance``; every segment costs a difference of two running sums (positions taken
    about their mean to keep round-off small).
    """
    starts = np.asarray(starts, dtype=np.int64)
    ends = np.asarray(ends, dtype=np.int64)
    if np.any(ends < starts):
        raise ValueError("every segment needs ends >= starts")
    x = np.asarray(x_m, dtype=np.float64)
    y = np.asarray(y_m, dtype=np.float64)
    if len(x) == 0 or len(starts) == 0:
        return np.zeros((len(starts), 3, 3))
    ax_all = -(y - y.mean())
    ay_all = x - x.mean()
    sums = np.cumsum(_running_sum_columns(np.asarray(q, dtype=np.float64), ax_all, ay_all), axis=0)
    seg_sums = sums[ends] - sums[starts]
    out = np.empty((len(starts), 3, 3))
    _fill(out, *_assemble(seg_sums, ax_all[ends], ay_all[ends]))
    return out


def _entries(cov: np.ndarray) -> tuple[float, float, float, float, float, float]:
    """xx, xy, xyaw, yy, yyaw, yawyaw of a symmetric 3x3 (the upper triangle is read)."""
    return (float(cov[0, 0]), float(cov[0, 1]), float(cov[0, 2]), float(cov[1, 1]), float(cov[1, 2]),
            float(cov[2, 2]))
