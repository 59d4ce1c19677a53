"""Covariance of the estimator core: closed-form straight-run growth, Monte Carlo, motion-model
variances, and the blocked closed-form propagation against the plain recursion.

Sources (from /work/shared/REFERENCES.md):
* Per-wheel proportional error: Siegwart, Nourbakhsh & Scaramuzza, "Introduction to Autonomous
  Mobile Robots", 2nd ed., 2011, sec. 5.2.4; Chong & Kleeman, ICRA 1997. Straight-run check
  values derived from that model (small steps, k_l = k_r = k, zero start covariance):
  var x = kL/2, var yaw = 2kL/b^2, var y = 2kL^3/(3b^2), cov(y, yaw) = kL^2/b^2, cov(x, .) = 0.
* Odometry motion model: Thrun, Burgard & Fox, "Probabilistic Robotics", 2005, sec. 5.4,
  tables 5.5 and 5.6 (from memory, as REFERENCES.md says): rot1, trans, rot2 with
      a1 rot1^2 + a2 trans^2,  a3 trans^2 + a4 (rot1^2 + rot2^2),  a1 rot2^2 + a2 trans^2,
  read by wheel_dr as *variances* (see wheel_dr.core.noise's docstring).
* Monte Carlo as the model-independent check (REFERENCES.md, "Uncertainty models").
"""
from __future__ import annotations

import numpy as np
import pytest

from wheel_dr.core import JointSamples, Settings, run
from wheel_dr.core.motion import integrate
from wheel_dr.core.noise import increment_noise, propagate_covariance, propagate_step

LEFT, RIGHT = "quokka_left_wheel_joint", "quokka_right_wheel_joint"
SCHEMES = ("euler", "midpoint", "exact")


def make_settings(scheme: str = "exact", model: str = "per_wheel", **extra) -> Settings:
    values = {"wheels.left_joints": [LEFT], "wheels.right_joints": [RIGHT],
              "wheels.left_radius": 0.0825, "wheels.right_radius": 0.0825, "wheels.track_width": 0.412,
              "integration": scheme, "noise.model": model,
              "limits.max_gap_s": 10.0, "limits.max_wheel_speed_mps": 50.0}
    values.update(extra)
    return Settings.from_flat(values)


def samples_from_travel(ds_left_m: np.ndarray, ds_right_m: np.ndarray, radius_m: float,
                        step_s: float) -> JointSamples:
    """Joint positions whose differences give the wheel travel per step (first sample: chain start)."""
    pos = np.column_stack([np.concatenate(([0.0], np.cumsum(ds_left_m))),
                           np.concatenate(([0.0], np.cumsum(ds_right_m)))]) / radius_m
    stamp = 1_000_000_000 + np.arange(len(pos), dtype=np.int64) * int(round(step_s * 1e9))
    return JointSamples(stamp, (LEFT, RIGHT), pos, np.zeros_like(pos))


# ---- 2. straight-run covariance of the per-wheel model ----------------------------------------

@pytest.mark.parametrize("scheme", SCHEMES)
def test_straight_run_covariance_matches_closed_form(scheme: str) -> None:
    """Per-wheel model, straight run of L = 10 m in 10^4 steps (Siegwart et al. 2011, sec. 5.2.4;
    values derived from that model, REFERENCES.md)."""
    k, b, n, length = 1e-3, 0.412, 10_000, 10.0
    ds = np.full(n, length / n)
    traj = run(samples_from_travel(ds, ds, 0.0825, 0.01),
               make_settings(scheme, "per_wheel", **{"noise.k_left": k, "noise.k_right": k}))
    assert traj.x_m[-1] == pytest.approx(length, rel=1e-12)
    p = traj.cov[-1]
    rtol = 1e-3  # discretisation error of the small-step sums is O(1/n)
    assert p[0, 0] == pytest.approx(k * length / 2, rel=rtol)
    assert p[2, 2] == pytest.approx(2 * k * length / b**2, rel=rtol)
    assert p[1, 1] == pytest.approx(2 * k * length**3 / (3 * b**2), rel=rtol)
    assert p[1, 2] == pytest.approx(k * length**2 / b**2, rel=rtol)
    scale = np.sqrt(np.outer(np.diag(p), np.diag(p)))
    assert abs(p[0, 1]) < 1e-9 * scale[0, 1] and abs(p[0, 2]) < 1e-9 * scale[0, 2]
    # halfway the same laws hold with L/2 (growth, not just the end value)
    h = traj.cov[n // 2]
    assert h[1, 1] == pytest.approx(2 * k * (length / 2) ** 3 / (3 * b**2), rel=rtol)


# ---- 3. Monte Carlo ------------------------------------------------------------------------------

def _curved_drive(n: int = 300, step_s: float = 0.05):
    t = np.arange(n) * step_s
    v_l = 0.30 + 0.15 * np.sin(0.4 * t)
    v_r = 0.45 - 0.10 * np.cos(0.3 * t)
    return v_l * step_s, v_r * step_s


def _increment(theta: np.ndarray, ds: np.ndarray, dth: np.ndarray, scheme: str):
    """Odom-frame step of each scheme, written independently of the core (Siegwart et al. 2011):
    exact = chord 2 R sin(dth/2) along th + dth/2 (numpy's normalised sinc, no 0/0)."""
    if scheme == "euler":
        return ds * np.cos(theta), ds * np.sin(theta)
    chord = ds if scheme == "midpoint" else ds * np.sinc(dth / (2 * np.pi))
    return chord * np.cos(theta + dth / 2), chord * np.sin(theta + dth / 2)


def _whitened_eigenvalues(empirical: np.ndarray, propagated: np.ndarray) -> np.ndarray:
    """Eigenvalues of L^-1 C L^-T (L L^T = propagated): all 1 when the covariances agree."""
    chol = np.linalg.cholesky(propagated)
    inv = np.linalg.inv(chol)
    return np.linalg.eigvalsh(inv @ empirical @ inv.T)


@pytest.mark.parametrize("scheme", SCHEMES)
def test_monte_carlo_per_wheel(scheme: str) -> None:
    """Empirical covariance of 8000 noisy replays (each wheel's step travel drawn with variance
    k |ds|, Siegwart et al. 2011 sec. 5.2.4) matches the propagated one within 10 %."""
    b, k_l, k_r = 0.412, 1e-4, 2e-4
    dl, dr = _curved_drive()
    settings = make_settings(scheme, "per_wheel", **{"noise.k_left": k_l, "noise.k_right": k_r})
    traj = run(samples_from_travel(dl, dr, 0.0825, 0.05), settings)
    propagated = traj.cov[-1]
    rng = np.random.default_rng(20261201)
    runs = 8000
    nl = dl + np.sqrt(k_l * np.abs(dl)) * rng.standard_normal((runs, len(dl)))
    nr = dr + np.sqrt(k_r * np.abs(dr)) * rng.standard_normal((runs, len(dr)))
    ds, dth = 0.5 * (nl + nr), (nr - nl) / b
    theta = np.cumsum(dth, axis=1)
    dx, dy = _increment(theta - dth, ds, dth, scheme)
    final = np.column_stack([dx.sum(axis=1), dy.sum(axis=1), theta[:, -1]])
    # the nominal replay is the estimator's own pose
    nominal_dth = (dr - dl) / b
    ndx, ndy = _increment(np.cumsum(nominal_dth) - nominal_dth, 0.5 * (dl + dr), nominal_dth, scheme)
    assert np.allclose([ndx.sum(), ndy.sum()], [traj.x_m[-1], traj.y_m[-1]], atol=1e-12)
    eig = _whitened_eigenvalues(np.cov(final, rowvar=False), propagated)
    assert np.all(np.abs(eig - 1.0) < 0.10), f"whitened eigenvalues {eig}"


@pytest.mark.parametrize("scheme", SCHEMES)
def test_monte_carlo_motion_model(scheme: str) -> None:
    """Empirical covariance of 8000 noisy replays sampled as in Thrun et al. 2005, table 5.6
    (rot1, trans, rot2 perturbed with the sec. 5.4 expressions read as variances) matches the
    propagated one within 10 %."""
    b = 0.412
    alphas = (0.05, 0.002, 0.01, 0.005)
    a1, a2, a3, a4 = alphas
    dl, dr = _curved_drive()
    settings = make_settings(scheme, "motion_model", **{"noise.alphas": list(alphas)})
    traj = run(samples_from_travel(dl, dr, 0.0825, 0.05), settings)
    ds, dth = 0.5 * (dl + dr), (dr - dl) / b
    # noise-free parts of each scheme's step: the chord's direction and length
    rot1 = np.zeros_like(dth) if scheme == "euler" else dth / 2
    trans = ds * np.sinc(dth / (2 * np.pi)) if scheme == "exact" else ds
    rot2 = dth - rot1
    rng = np.random.default_rng(5)
    runs = 8000
    shape = (runs, len(ds))
    r1 = rot1 + np.sqrt(a1 * rot1**2 + a2 * trans**2) * rng.standard_normal(shape)
    tr = trans + np.sqrt(a3 * trans**2 + a4 * (rot1**2 + rot2**2)) * rng.standard_normal(shape)
    r2 = rot2 + np.sqrt(a1 * rot2**2 + a2 * trans**2) * rng.standard_normal(shape)
    theta_after = np.cumsum(r1 + r2, axis=1)
    theta_before = theta_after - (r1 + r2)
    x = (tr * np.cos(theta_before + r1)).sum(axis=1)
    y = (tr * np.sin(theta_before + r1)).sum(axis=1)
    final = np.column_stack([x, y, theta_after[:, -1]])
    eig = _whitened_eigenvalues(np.cov(final, rowvar=False), traj.cov[-1])
    assert np.all(np.abs(eig - 1.0) < 0.10), f"whitened eigenvalues {eig}"


@pytest.mark.parametrize("scheme", SCHEMES)
def test_motion_model_sampled_part_variances(scheme: str) -> None:
    """Increments drawn from the core's step noise Q, split back into rot1, trans, rot2 as in Thrun
    et al. 2005, table 5.5 (rot1 = atan2(dy, dx) - th, trans = |(dx, dy)|, rot2 = dth - rot1), have
    the variances a1 rot1^2 + a2 trans^2, a3 trans^2 + a4 (rot1^2 + rot2^2), a1 rot2^2 + a2 trans^2
    (sec. 5.4, read as variances) and are uncorrelated."""
    alphas = (0.02, 0.001, 0.001, 0.0002)
    a1, a2, a3, a4 = alphas
    b, theta = 0.412, 0.7
    dl, dr = 0.08, 0.14
    ds, dth = 0.5 * (dl + dr), (dr - dl) / b
    q, _ = increment_noise(np.array([theta]), np.array([dl]), np.array([dr]), b, scheme, "motion_model",
                           0.0, 0.0, alphas)
    rot1 = 0.0 if scheme == "euler" else dth / 2
    trans = ds * np.sinc(dth / (2 * np.pi)) if scheme == "exact" else ds
    rot2 = dth - rot1
    mean = np.array([trans * np.cos(theta + rot1), trans * np.sin(theta + rot1), dth])
    rng = np.random.default_rng(11)
    draws = rng.multivariate_normal(mean, q[0], size=200_000)
    s_rot1 = np.arctan2(draws[:, 1], draws[:, 0]) - theta
    s_trans = np.hypot(draws[:, 0], draws[:, 1])
    s_rot2 = draws[:, 2] - s_rot1
    parts = np.column_stack([s_rot1, s_trans, s_rot2])
    assert np.allclose(parts.mean(axis=0), [rot1, trans, rot2], atol=2e-3)
    expected = np.array([a1 * rot1**2 + a2 * trans**2, a3 * trans**2 + a4 * (rot1**2 + rot2**2),
                         a1 * rot2**2 + a2 * trans**2])
    cov = np.cov(parts, rowvar=False)
    assert np.allclose(np.diag(cov), expected, rtol=0.03), (np.diag(cov), expected)
    corr = cov / np.sqrt(np.outer(np.diag(cov), np.diag(cov)))
    assert np.all(np.abs(corr[np.triu_indices(3, 1)]) < 0.02)


# ---- 5. blocked closed-form propagation == the recursion ----------------------------------------

@pytest.mark.parametrize("model", ["per_wheel", "motion_model"])
def test_propagate_covariance_equals_iterated_steps(model: str) -> None:
    """noise.propagate_covariance (blocked cumulative sums) equals iterating P' = F P F^T + Q
    (first-order propagation, Siegwart et al. 2011 sec. 5.2.4) over 10,000 steps (more than two
    blocks of 4096), from a correlated start covariance far from the origin."""
    rng = np.random.default_rng(3)
    m, b = 10_000, 0.412
    t = np.arange(m) * 0.01
    dl = 0.01 * (0.5 + 0.4 * np.sin(0.2 * t)) + 1e-4 * rng.standard_normal(m)
    dr = 0.01 * (0.5 + 0.4 * np.cos(0.13 * t)) + 1e-4 * rng.standard_normal(m)
    dl[::997] = 0.0  # some stand-still steps
    dr[::997] = 0.0
    ds, dth = 0.5 * (dl + dr), (dr - dl) / b
    start = (4321.5, -8765.25, 2.5)
    x, y, _, theta_before, dx, dy = integrate(ds, dth, "exact", start)
    q, _ = increment_noise(theta_before, dl, dr, b, "exact", model, 3e-4, 1e-4, (0.05, 0.001, 0.01, 0.001))
    a = rng.standard_normal((3, 3))
    start_cov = a @ a.T * 1e-2 + np.diag([0.3, 0.2, 0.05])
    closed = propagate_covariance(x, y, q, start_cov, start[:2])
    p = start_cov.copy()
    scale = 0.0
    worst = 0.0
    for k in range(m):
        p = propagate_step(p, dx[k], dy[k], q[k])
        scale = max(scale, np.abs(p).max())
        worst = max(worst, float(np.abs(closed[k] - p).max() / np.abs(p).max()))
    assert worst < 1e-9, f"largest relative difference {worst:.3g}"
    assert scale > 10 * np.abs(start_cov).max(), "the drive must grow the covariance well beyond the start"
