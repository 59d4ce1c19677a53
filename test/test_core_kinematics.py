"""Kinematics of the estimator core against closed forms: circle, straight line, radii, REP 103 signs.

Sources (from /work/shared/REFERENCES.md):
* Siegwart, Nourbakhsh & Scaramuzza, "Introduction to Autonomous Mobile Robots", 2nd ed., 2011,
  ch. 3 and sec. 5.2.4 (differential-drive kinematics, constant-curvature arc), also common
  practice: constant wheel speeds v_l != v_r trace a circle of radius
  R = (b/2)(v_r + v_l)/(v_r - v_l) about (0, R) from the origin facing +x, yaw rate (v_r - v_l)/b.
* Numerical analysis (common practice): explicit Euler has global error O(h), the 2nd-order
  Runge-Kutta (midpoint) rule O(h^2); the test fits the order, not a fixed error.
* REP 103: x forward, y left, yaw counter-clockwise positive (right wheel faster turns left).
* scipy.spatial.transform.Rotation (reference library) for the yaw quaternion.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from wheel_dr.core import Estimator, JointSamples, Settings, quaternion_to_yaw, run, yaw_to_quaternion
from wheel_dr.core.motion import wrap_angle, wrap_angle_scalar

SCHEMES = ("euler", "midpoint", "exact")
LEFT, RIGHT = "quokka_left_wheel_joint", "quokka_right_wheel_joint"


def make_settings(scheme: str, left_radius_m: float = 0.0825, right_radius_m: float = 0.0825,
                  track_width_m: float = 0.412, **extra) -> Settings:
    values = {"wheels.left_joints": [LEFT], "wheels.right_joints": [RIGHT],
              "wheels.left_radius": left_radius_m, "wheels.right_radius": right_radius_m,
              "wheels.track_width": track_width_m, "integration": scheme,
              "limits.max_gap_s": 10.0, "limits.max_wheel_speed_mps": 50.0}
    values.update(extra)
    return Settings.from_flat(values)


def constant_speed_samples(omega_left_radps: float, omega_right_radps: float, step_s: float,
                           duration_s: float) -> JointSamples:
    """Joint positions of wheels turning at constant rates, sampled every ``step_s``."""
    n = int(round(duration_s / step_s)) + 1
    k = np.arange(n)
    stamp_ns = 1_000_000_000 + k * int(round(step_s * 1e9))
    t = (stamp_ns - stamp_ns[0]) * 1e-9
    pos = np.column_stack([omega_left_radps * t, omega_right_radps * t])
    return JointSamples(stamp_ns.astype(np.int64), (LEFT, RIGHT), pos, np.zeros_like(pos))


def circle_pose(v_left_mps: float, v_right_mps: float, b_m: float, t_s: np.ndarray):
    """Closed-form circle (Siegwart et al. 2011, ch. 3): pose at time t from the origin facing +x."""
    w = (v_right_mps - v_left_mps) / b_m
    radius = 0.5 * b_m * (v_right_mps + v_left_mps) / (v_right_mps - v_left_mps)
    th = w * t_s
    return radius * np.sin(th), radius * (1.0 - np.cos(th)), th


# ---- 1. closed-form circle, straight line, order of error ------------------------------------

@pytest.mark.parametrize("step_s", [0.01, 0.05, 0.2, 0.4])
def test_exact_scheme_reproduces_circle_to_round_off_at_any_step(step_s: float) -> None:
    """Exact arc step == closed-form circle (Siegwart et al. 2011, ch. 3) at every sample."""
    r, b = 0.0825, 0.412
    v_l, v_r = 0.35, 0.6
    traj = run(constant_speed_samples(v_l / r, v_r / r, step_s, 12.0), make_settings("exact"))
    x, y, th = circle_pose(v_l, v_r, b, traj.t_s - traj.t_s[0])
    # the drive covers ~ 2 turns, so a per-step error would show; round-off is ~1e-15 per step
    assert np.max(np.abs(traj.x_m - x)) < 1e-10
    assert np.max(np.abs(traj.y_m - y)) < 1e-10
    assert np.max(np.abs(traj.theta_rad - th)) < 1e-10
    # every pose lies on the circle of radius R about (0, R)
    radius = 0.5 * b * (v_r + v_l) / (v_r - v_l)
    assert np.allclose(np.hypot(traj.x_m, traj.y_m - radius), radius, rtol=0, atol=1e-10)
    moving = traj.status[traj.index] == 0
    assert np.allclose(traj.w_radps[moving], (v_r - v_l) / b, rtol=1e-9)
    assert np.allclose(traj.v_mps[moving], 0.5 * (v_r + v_l), rtol=1e-9)


def _final_error(scheme: str, step_s: float, v_l: float, v_r: float) -> float:
    r, b = 0.0825, 0.412
    traj = run(constant_speed_samples(v_l / r, v_r / r, step_s, 8.0), make_settings(scheme))
    x, y, _ = circle_pose(v_l, v_r, b, traj.t_s[-1:] - traj.t_s[0])
    return float(math.hypot(traj.x_m[-1] - x[0], traj.y_m[-1] - y[0]))


@pytest.mark.parametrize("scheme,order", [("euler", 1.0), ("midpoint", 2.0)])
def test_error_order_of_euler_and_midpoint(scheme: str, order: float) -> None:
    """Global error ~ C h^p: Euler p = 1, RK2 midpoint p = 2 (common practice); fitted slope."""
    # 8 s at w = 0.25/0.412 rad/s is ~4.9 rad: not a whole turn, so Euler's leading term is non-zero
    steps = np.array([0.4, 0.2, 0.1, 0.05, 0.025])
    errors = np.array([_final_error(scheme, h, 0.35, 0.6) for h in steps])
    assert np.all(errors > 1e-9), "the error must be measurable above round-off"
    slope = np.polyfit(np.log(steps), np.log(errors), 1)[0]
    assert abs(slope - order) < 0.1, f"{scheme}: fitted order {slope:.3f}, expected {order}"
    # and the exact scheme stays at round-off at the same steps
    assert max(_final_error("exact", h, 0.35, 0.6) for h in steps) < 1e-10


@pytest.mark.parametrize("scheme", SCHEMES)
def test_straight_line_all_schemes(scheme: str) -> None:
    """Equal wheel speeds: straight line along the start heading (Siegwart et al. 2011, ch. 3)."""
    r = 0.0825
    v = 0.8
    samples = constant_speed_samples(v / r, v / r, 0.01, 5.0)
    traj = run(samples, make_settings(scheme))
    t = traj.t_s - traj.t_s[0]
    assert np.allclose(traj.x_m, v * t, rtol=0, atol=1e-12)
    assert np.all(traj.y_m == 0.0) and np.all(traj.yaw_rad == 0.0)
    # from a start heading of 2 rad at (3, -4): x = x0 + v t cos th0, y = y0 + v t sin th0
    th0 = 2.0
    traj = run(samples, make_settings(scheme), start_pose=(3.0, -4.0, th0))
    assert np.allclose(traj.x_m, 3.0 + v * t * math.cos(th0), rtol=0, atol=1e-12)
    assert np.allclose(traj.y_m, -4.0 + v * t * math.sin(th0), rtol=0, atol=1e-12)
    assert np.allclose(traj.theta_rad, th0, rtol=0, atol=1e-15)


@pytest.mark.parametrize("scheme", SCHEMES)
def test_separate_left_and_right_radii_are_honoured(scheme: str) -> None:
    """Equal joint rates on unequal radii: surface speeds r_l w and r_r w give the circle of
    R = (b/2)(r_r + r_l)/(r_r - r_l) (Siegwart et al. 2011, ch. 3; Quokka's worn tyre, demo values)."""
    r_l, r_r, b = 0.0829, 0.0822, 0.4185
    omega = 6.0
    samples = constant_speed_samples(omega, omega, 0.01, 20.0)
    traj = run(samples, make_settings(scheme, r_l, r_r, b))
    t = traj.t_s - traj.t_s[0]
    x, y, th = circle_pose(r_l * omega, r_r * omega, b, t)
    moving = traj.status[traj.index] == 0
    assert np.allclose(traj.w_radps[moving], (r_r - r_l) * omega / b, rtol=1e-9)
    assert np.allclose(traj.theta_rad, th, rtol=0, atol=1e-12)
    assert traj.yaw_rad[-1] < 0, "larger left radius turns right (REP 103: yaw clockwise negative)"
    tol = 1e-10 if scheme == "exact" else 5e-3  # euler/midpoint carry their step error
    assert np.max(np.hypot(traj.x_m - x, traj.y_m - y)) < tol
    # swapping the radii mirrors the path about the x axis
    mirrored = run(samples, make_settings(scheme, r_r, r_l, b))
    assert np.allclose(mirrored.x_m, traj.x_m, rtol=0, atol=1e-12)
    assert np.allclose(mirrored.y_m, -traj.y_m, rtol=0, atol=1e-12)


# ---- 7. REP 103 signs ---------------------------------------------------------------------------

@pytest.mark.parametrize("scheme", SCHEMES)
def test_right_wheel_faster_turns_left(scheme: str) -> None:
    """REP 103: right wheel faster -> yaw increases (counter-clockwise), the base moves to +y."""
    s = make_settings(scheme)
    left_turn = run(constant_speed_samples(4.0, 6.0, 0.01, 1.0), s)
    assert np.all(np.diff(left_turn.theta_rad) > 0)
    assert left_turn.y_m[-1] > 0 and left_turn.w_radps[-1] > 0
    right_turn = run(constant_speed_samples(6.0, 4.0, 0.01, 1.0), s)
    assert np.all(np.diff(right_turn.theta_rad) < 0)
    assert right_turn.y_m[-1] < 0 and right_turn.w_radps[-1] < 0
    # the streaming estimator agrees in sign
    est = Estimator(s)
    for k in range(101):
        est.step(1_000_000_000 + k * 10_000_000, [LEFT, RIGHT], [0.04 * k, 0.06 * k], [])
    assert est.yaw_rad > 0 and est.y_m > 0


def test_yaw_is_wrapped_to_half_open_interval() -> None:
    """Yaw reported in (-pi, pi] (REP 103 radians; the half-open choice is ours, documented);
    the unwrapped heading keeps growing counter-clockwise."""
    assert wrap_angle(math.pi) == math.pi and wrap_angle(-math.pi) == math.pi
    assert wrap_angle_scalar(math.pi) == math.pi and wrap_angle_scalar(-math.pi) == math.pi
    angles = np.linspace(-20.0, 20.0, 4001)
    wrapped = wrap_angle(angles)
    assert np.all(wrapped > -math.pi) and np.all(wrapped <= math.pi)
    # same angle: the difference is a whole number of turns
    turns = (angles - wrapped) / (2 * math.pi)
    assert np.allclose(turns, np.round(turns), atol=1e-12)
    # w = 4 rad/s * 0.0825 m / 0.412 m ~ 0.8 rad/s for 20 s: over two and a half counter-clockwise turns
    traj = run(constant_speed_samples(0.0, 4.0, 0.01, 20.0), make_settings("exact"))
    assert traj.theta_rad[-1] > 4 * math.pi
    assert np.all(traj.yaw_rad > -math.pi) and np.all(traj.yaw_rad <= math.pi)
    assert np.allclose(np.cos(traj.yaw_rad), np.cos(traj.theta_rad), atol=1e-12)
    assert np.allclose(np.sin(traj.yaw_rad), np.sin(traj.theta_rad), atol=1e-12)
    assert np.all(np.diff(traj.theta_rad) > 0)


@pytest.mark.parametrize("yaw", [0.0, 0.3, -1.2, 3.0, math.pi, -3.1])
def test_yaw_quaternion_matches_scipy(yaw: float) -> None:
    """Quaternion of a counter-clockwise yaw about +z equals scipy's (x, y, z, w) (REP 103, reference
    library scipy.spatial.transform.Rotation)."""
    q = np.array(yaw_to_quaternion(yaw))
    ref = Rotation.from_euler("z", yaw).as_quat()
    assert np.allclose(q, ref, atol=1e-15) or np.allclose(q, -ref, atol=1e-15)
    assert math.isclose(wrap_angle_scalar(quaternion_to_yaw(*q)), wrap_angle_scalar(yaw), abs_tol=1e-12)
    # rotating body +x by the quaternion gives (cos yaw, sin yaw): counter-clockwise
    assert np.allclose(Rotation.from_quat(q).apply([1.0, 0.0, 0.0]), [math.cos(yaw), math.sin(yaw), 0.0],
                       atol=1e-15)


def test_odometry_covariance_layout() -> None:
    """nav_msgs/Odometry (message definition): 6x6 row-major over (x, y, z, rot X, rot Y, rot Z); the
    planar (x, y, yaw) block goes to rows/columns 0, 1, 5, and z, roll, pitch are marked unobserved
    with a large variance (common practice, documented in wheel_dr.core.conventions)."""
    from wheel_dr.core import UNOBSERVED_VARIANCE, planar_covariance_from_6x6, pose_covariance_6x6
    cov3 = np.array([[0.04, 0.01, -0.002], [0.01, 0.09, 0.003], [-0.002, 0.003, 0.0025]])
    flat = pose_covariance_6x6(cov3)
    assert len(flat) == 36
    full = np.array(flat).reshape(6, 6)
    assert full[0, 0] == 0.04 and full[1, 1] == 0.09 and full[5, 5] == 0.0025
    assert full[0, 1] == full[1, 0] == 0.01 and full[0, 5] == full[5, 0] == -0.002 and full[1, 5] == 0.003
    assert all(full[i, i] == UNOBSERVED_VARIANCE for i in (2, 3, 4)) and UNOBSERVED_VARIANCE >= 1e3
    assert np.array_equal(full, full.T)
    assert np.array_equal(planar_covariance_from_6x6(flat), cov3)
