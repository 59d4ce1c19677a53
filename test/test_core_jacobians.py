"""Every Jacobian of the estimator core against central finite differences, and the precision of the
exact (arc) step near a straight line.

Sources (from /work/shared/REFERENCES.md):
* Jacobians checked against central finite differences (common practice); SE(2) naming after Sola,
  Deray & Atchuthan, "A micro Lie theory for state estimation in robotics", arXiv:1812.01537, 2018:
  the Jacobian of a step with respect to the previous pose is F = [[1, 0, -dy], [0, 1, dx], [0, 0, 1]].
* Arc step dx = R (sin(th + dth) - sin th), dy = -R (cos(th + dth) - cos th), R = ds / dth
  (Siegwart, Nourbakhsh & Scaramuzza 2011, ch. 3), evaluated in numpy's extended precision
  (x87 80-bit long double, eps ~ 1.1e-19) as the reference.
* Odometry motion model map (rot1, trans, rot2) -> (trans cos(th + rot1), trans sin(th + rot1),
  rot1 + rot2) and its variances: Thrun, Burgard & Fox, "Probabilistic Robotics", 2005, sec. 5.4,
  tables 5.5/5.6 (from memory, as REFERENCES.md says; variances, see wheel_dr.core.noise).
* Per-wheel model: Siegwart et al. 2011, sec. 5.2.4 (variance k |ds| per wheel, independent).
"""
from __future__ import annotations

import numpy as np
import pytest

from wheel_dr.core import motion
from wheel_dr.core.motion import (SERIES_BELOW, chord_factor, increment_jacobian, increment_jacobian_scalar,
                                  pose_increment, pose_increment_scalar)
from wheel_dr.core.noise import increment_noise, increment_noise_scalar, propagate_step

SCHEMES = ("euler", "midpoint", "exact")
B = 0.412
# dtheta values: zero, tiny, either side of the series switch at |dtheta/2| = SERIES_BELOW, large
SWITCH = 2 * SERIES_BELOW
DTHETAS = [0.0, 1e-12, -3e-9, 1e-6, 0.999 * SWITCH, SWITCH, 1.001 * SWITCH, -1.001 * SWITCH, 3e-3,
           0.4, -1.3, 2.9, 6.0]


def central_difference(fun, x0: np.ndarray, step: float) -> np.ndarray:
    """Jacobian of ``fun`` (vector -> vector) at ``x0`` by central differences."""
    x0 = np.asarray(x0, dtype=np.float64)
    cols = []
    for i in range(len(x0)):
        e = np.zeros_like(x0)
        e[i] = step
        cols.append((np.asarray(fun(x0 + e)) - np.asarray(fun(x0 - e))) / (2 * step))
    return np.column_stack(cols)


def _step(theta: float, scheme: str):
    def f(u: np.ndarray) -> np.ndarray:
        dx, dy = pose_increment(theta, u[0], u[1], scheme)
        return np.array([dx, dy, u[1]])
    return f


@pytest.mark.parametrize("scheme", SCHEMES)
@pytest.mark.parametrize("dtheta", DTHETAS)
def test_increment_jacobian_matches_finite_differences(scheme: str, dtheta: float) -> None:
    """d(dx, dy, dtheta)/d(ds, dtheta) == central differences of pose_increment, across the series switch."""
    for theta in (0.0, 0.8, -2.6):
        for ds in (0.5, -0.03):
            ref = central_difference(_step(theta, scheme), [ds, dtheta], 1e-6)
            jac = increment_jacobian(theta, ds, dtheta, scheme)
            assert np.allclose(jac, ref, rtol=0, atol=1e-9), (theta, ds, jac, ref)
            assert np.allclose(increment_jacobian_scalar(theta, ds, dtheta, scheme), jac, rtol=0, atol=1e-15)
            dx, dy = pose_increment(theta, ds, dtheta, scheme)
            assert np.allclose(pose_increment_scalar(theta, ds, dtheta, scheme), (dx, dy), rtol=0, atol=1e-15)
    # vectorised form: a stack of steps gives the stack of Jacobians
    thetas = np.array([0.0, 0.8, -2.6])
    stack = increment_jacobian(thetas, 0.5, dtheta, scheme)
    assert stack.shape == (3, 3, 2)
    for i, th in enumerate(thetas):
        assert np.allclose(stack[i], increment_jacobian(th, 0.5, dtheta, scheme), rtol=0, atol=1e-15)


@pytest.mark.parametrize("scheme", SCHEMES)
@pytest.mark.parametrize("dtheta", [0.0, 1e-7, 0.3, -2.0])
def test_previous_pose_jacobian_and_propagate_step(scheme: str, dtheta: float) -> None:
    """d(pose after)/d(pose before) == [[1, 0, -dy], [0, 1, dx], [0, 0, 1]] (Sola et al. 2018 notation),
    and propagate_step uses exactly that F: P' = F P F^T + Q."""
    ds = 0.35
    for theta in (0.0, 1.1, -2.9):
        def after(p: np.ndarray) -> np.ndarray:
            dx, dy = pose_increment(p[2], ds, dtheta, scheme)
            return np.array([p[0] + dx, p[1] + dy, p[2] + dtheta])
        f_fd = central_difference(after, [2.0, -1.0, theta], 1e-6)
        dx, dy = pose_increment(theta, ds, dtheta, scheme)
        assert np.allclose(f_fd, [[1, 0, -dy], [0, 1, dx], [0, 0, 1]], rtol=0, atol=1e-9)
        rng = np.random.default_rng(int(1000 * theta) % 97)
        a = rng.standard_normal((3, 3))
        p, q = a @ a.T, np.diag([1e-4, 2e-4, 3e-5])
        assert np.allclose(propagate_step(p, dx, dy, q), f_fd @ p @ f_fd.T + q, rtol=1e-8, atol=1e-12)


def _motion_model_reference(theta: float, dl: float, dr: float, scheme: str, alphas) -> np.ndarray:
    """Q = G diag(var) G^T with G by central differences of the textbook map
    (rot1, trans, rot2) -> (trans cos(th + rot1), trans sin(th + rot1), rot1 + rot2) (Thrun et al. 2005)."""
    a1, a2, a3, a4 = alphas
    ds, dth = 0.5 * (dl + dr), (dr - dl) / B
    rot1 = 0.0 if scheme == "euler" else dth / 2
    trans = ds * np.sinc(dth / (2 * np.pi)) if scheme == "exact" else ds
    rot2 = dth - rot1

    def textbook(u: np.ndarray) -> np.ndarray:
        return np.array([u[1] * np.cos(theta + u[0]), u[1] * np.sin(theta + u[0]), u[0] + u[2]])
    g = central_difference(textbook, [rot1, trans, rot2], 1e-6)
    var = np.array([a1 * rot1**2 + a2 * trans**2, a3 * trans**2 + a4 * (rot1**2 + rot2**2),
                    a1 * rot2**2 + a2 * trans**2])
    return g @ np.diag(var) @ g.T


WHEEL_STEPS = [(0.02, 0.02), (0.02, 0.0200001), (0.01, 0.03), (-0.02, 0.015), (-0.01, -0.012), (0.0, 0.0),
               (0.3, -0.3)]


@pytest.mark.parametrize("scheme", SCHEMES)
@pytest.mark.parametrize("dl,dr", WHEEL_STEPS)
def test_motion_model_noise_uses_textbook_jacobian(scheme: str, dl: float, dr: float) -> None:
    """Motion-model step noise Q == G diag(var) G^T, G by finite differences (Thrun et al. 2005, sec. 5.4)."""
    alphas = (0.05, 0.001, 0.01, 0.002)
    for theta in (0.0, 0.9, -2.2):
        ref = _motion_model_reference(theta, dl, dr, scheme, alphas)
        q, c_in = increment_noise(np.array([theta]), np.array([dl]), np.array([dr]), B, scheme,
                                  "motion_model", 0.0, 0.0, alphas)
        scale = max(np.abs(ref).max(), 1e-30)
        assert np.allclose(q[0], ref, rtol=0, atol=1e-7 * scale), (q[0], ref)
        qs, cs = increment_noise_scalar(theta, dl, dr, B, scheme, "motion_model", 0.0, 0.0, alphas)
        assert np.allclose(qs, q[0], rtol=1e-12, atol=1e-300) and np.allclose(cs, c_in[0], rtol=1e-12, atol=1e-300)


@pytest.mark.parametrize("scheme", SCHEMES)
@pytest.mark.parametrize("dl,dr", WHEEL_STEPS)
def test_per_wheel_noise_uses_wheel_jacobian(scheme: str, dl: float, dr: float) -> None:
    """Per-wheel step noise Q == J diag(k_l |dl|, k_r |dr|) J^T with J = d(dx, dy, dth)/d(dl, dr) by finite
    differences (Siegwart et al. 2011, sec. 5.2.4); the (ds, dth) covariance likewise."""
    k_l, k_r = 3e-4, 7e-4
    wheel_var = np.diag([k_l * abs(dl), k_r * abs(dr)])
    for theta in (0.0, 0.9, -2.2):
        def step(u: np.ndarray) -> np.ndarray:
            ds, dth = 0.5 * (u[0] + u[1]), (u[1] - u[0]) / B
            dx, dy = pose_increment(theta, ds, dth, scheme)
            return np.array([dx, dy, dth])
        j = central_difference(step, [dl, dr], 1e-7)
        body = central_difference(lambda u: np.array([0.5 * (u[0] + u[1]), (u[1] - u[0]) / B]), [dl, dr], 1e-7)
        q, c_in = increment_noise(np.array([theta]), np.array([dl]), np.array([dr]), B, scheme, "per_wheel",
                                  k_l, k_r, (0, 0, 0, 0))
        ref = j @ wheel_var @ j.T
        scale = max(np.abs(ref).max(), 1e-30)
        assert np.allclose(q[0], ref, rtol=0, atol=1e-7 * scale)
        ref_c = body @ wheel_var @ body.T
        assert np.allclose(c_in[0], ref_c, rtol=0, atol=1e-7 * max(np.abs(ref_c).max(), 1e-30))
        qs, cs = increment_noise_scalar(theta, dl, dr, B, scheme, "per_wheel", k_l, k_r, (0, 0, 0, 0))
        assert np.allclose(qs, q[0], rtol=1e-12, atol=1e-300) and np.allclose(cs, c_in[0], rtol=1e-12, atol=1e-300)


# ---- precision of the exact step near a straight line -------------------------------------------

def test_chord_factor_precision_against_extended_precision() -> None:
    """chord_factor(dth) = sin(dth/2)/(dth/2) to ~2 ulp for dth from 1e-12 to 6, including either side of
    the series switch, against the same expression in 80-bit long double (no cancellation there)."""
    assert np.finfo(np.longdouble).eps < 1e-18, "needs x87 extended precision long double"
    dth = np.concatenate([np.logspace(-12, np.log10(6.0), 400), SWITCH * np.array([0.9999, 1.0, 1.0001]),
                          -np.logspace(-9, 0, 50)])
    h = dth.astype(np.longdouble) / 2
    ref = np.sin(h) / h
    rel = np.abs((chord_factor(dth).astype(np.longdouble) - ref) / ref)
    assert float(rel.max()) < 4.5e-16, f"worst relative error {float(rel.max()):.3g}"
    assert chord_factor(np.array([0.0]))[0] == 1.0


def test_chord_factor_derivative_against_extended_precision() -> None:
    """d sinc(dth/2)/d dth against long double: exact series -h/6 + h^3/60 - h^5/1680 + h^7/90720
    (from sin h / h = 1 - h^2/6 + h^4/120 - h^6/5040 + h^8/362880) for |h| < 0.05, the closed form
    (h cos h - sin h)/(2 h^2) above. Absolute error below 1e-12: negligible beside the Jacobian's
    order-one entries (near the switch the float64 closed form cancels to ~1e-8 relative)."""
    dth = np.concatenate([np.logspace(-10, np.log10(6.0), 300), SWITCH * np.array([0.9999, 1.0001]),
                          -np.logspace(-6, 0, 40)])
    h = dth.astype(np.longdouble) / 2
    series = -h / 6 + h**3 / 60 - h**5 / 1680 + h**7 / 90720
    closed = (h * np.cos(h) - np.sin(h)) / (2 * h * h)
    ref = np.where(np.abs(h) < 0.05, series, closed)
    err = np.abs(motion.chord_factor_derivative(dth).astype(np.longdouble) - ref)
    assert float(err.max()) < 1e-12, f"worst absolute error {float(err.max()):.3g}"
    # the derivative is that of chord_factor (central differences in long double)
    step = np.longdouble(1e-6)
    big = np.abs(h) > 1e-2
    hb = h[big]
    fd = (np.sin(hb + step / 2) / (hb + step / 2) - np.sin(hb - step / 2) / (hb - step / 2)) / (2 * step)
    assert np.allclose(motion.chord_factor_derivative(dth[big]), fd.astype(np.float64), rtol=1e-8, atol=0)


@pytest.mark.parametrize("theta", [0.0, 0.7, -2.4, 3.1])
def test_exact_step_near_straight_matches_arc_formula(theta: float) -> None:
    """The exact step equals the arc formula R (sin(th + dth) - sin th), -R (cos(th + dth) - cos th)
    (Siegwart et al. 2011) evaluated in long double, to float64 round-off even where dth is tiny; the
    reference's own cancellation error (~eps_ld / |dth|) is allowed for."""
    ld = np.longdouble
    ds = 0.25
    eps_ld = float(np.finfo(ld).eps)
    for dth in np.concatenate([np.logspace(-7, 0.5, 120), -np.logspace(-7, 0.5, 40)]):
        dx, dy = pose_increment(theta, ds, dth, "exact")
        r = ld(ds) / ld(dth)
        t0, t1 = ld(theta), ld(theta) + ld(dth)
        ref_x = r * (np.sin(t1) - np.sin(t0))
        ref_y = -r * (np.cos(t1) - np.cos(t0))
        tol = ds * (6e-16 + 8 * eps_ld / abs(dth))
        assert abs(float(ld(dx) - ref_x)) < tol and abs(float(ld(dy) - ref_y)) < tol, (dth, dx, dy)
    # and the float64 arc formula is not good enough, which is why the core uses the chord form
    dth = 1e-7
    naive = ds / dth * (np.sin(theta + dth) - np.sin(theta))
    assert abs(naive - pose_increment(theta, ds, dth, "exact")[0]) > 1e-12 or theta == 0.0

