"""Drive models: wheel tables of every kind and differential drive behind the interface.

Sources: the wheel equations of Siegwart, Nourbakhsh & Scaramuzza 2011, sec. 3.2 and Campion,
Bastin & d'Andrea-Novel 1996; the SE(2) exponential of Sola, Deray & Atchuthan 2018, eq. 156
(a constant body twist xi for a time T ends at exp(xi T)); chi-square bounds from scipy.stats
(Bar-Shalom, Li & Kirubarajan 2001, sec. 5.4); integration orders of Euler (1) and the midpoint
rule (2) are textbook numerical analysis (common practice).
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from wheel_dr.core.drive import DifferentialDrive, WheelTable, integrate_body
from wheel_dr.core.errors import SettingsError
from wheel_dr.core.motion import body_increment, integrate
from wheel_dr.core.se2 import Poses

Q = math.pi / 4


def tables() -> dict[str, tuple[WheelTable, tuple[float, float, float]]]:
    """One table per kind (invented geometry) and a constant body twist it can drive."""
    tri = WheelTable("tricycle", ["drive_wheel", "", ""], [0.9, -0.2, -0.2], [0.0, 0.3, -0.3], [0.12, 0.1, 0.1],
                     steer_joints=["drive_steer", "", ""], steer_offset=[0.01, 0, 0], k_wheels=4e-4,
                     steer_sd_rad=0.004)
    car = WheelTable("ackermann", ["", "", "rear_left", "rear_right"], [1.1, 1.1, 0.0, 0.0],
                     [0.35, -0.35, 0.35, -0.35], [0.15] * 4, steer_joints=["steer_left", "steer_right", "", ""],
                     k_wheels=4e-4, steer_sd_rad=0.003)
    mec = WheelTable("mecanum", ["fl", "fr", "rl", "rr"], [0.25, 0.25, -0.25, -0.25], [0.2, -0.2, 0.2, -0.2],
                     [0.05] * 4, roller_angle=[-Q, Q, Q, -Q], k_wheels=4e-4)
    ang = np.radians([0.0, 120.0, 240.0])
    omni = WheelTable("omni", ["w0", "w1", "w2"], 0.2 * np.cos(ang), 0.2 * np.sin(ang), [0.04] * 3,
                      mount_angle=ang + math.pi / 2, roller_angle=[math.pi / 2] * 3, k_wheels=4e-4)
    sw = WheelTable("swerve", ["m0", "m1", "m2", "m3"], [0.3, 0.3, -0.3, -0.3], [0.3, -0.3, 0.3, -0.3],
                    [0.06] * 4, steer_joints=["s0", "s1", "s2", "s3"], steer_offset=[0.02, -0.01, 0.0, 0.03],
                    k_wheels=4e-4, steer_sd_rad=0.003)
    custom = WheelTable("custom", ["left", "right"], [0.0, 0.0], [0.25, -0.25], [0.1, 0.1], k_wheels=4e-4)
    return {"tricycle": (tri, (0.6, 0.2 * 0.4, 0.4)),   # rear axle at x = -0.2: vy = -wz x_rear
            "ackermann": (car, (0.8, 0.0, 0.3)),
            "mecanum": (mec, (0.4, 0.15, 0.3)),
            "omni": (omni, (0.1, 0.05, 1.0)),
            "swerve": (sw, (0.5, 0.3, 0.4)),
            "custom": (custom, (0.5, 0.0, 0.7))}


KINDS = sorted(tables())


def _drive(model, twist, dt, n):
    tw = np.tile(np.asarray(twist, dtype=np.float64), (n, 1))
    spin, steer = model.inverse(tw, np.full(n, dt))
    return model.increment(spin, steer), spin, steer


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("dt", [0.001, 0.01, 0.1])
def test_constant_twist_exact_is_se2_exponential(kind, dt) -> None:
    """Exact scheme == exp(xi T) of the constant twist to 1e-9 at any rate (Sola et al. 2018, eq. 156)."""
    model, twist = tables()[kind]
    total = 4.0
    n = int(round(total / dt))
    body, _, _ = _drive(model, twist, dt, n)
    assert np.allclose(body, np.asarray(twist) * dt, atol=1e-12)
    x, y, th, _ = integrate_body(body, "exact")
    ref = Poses.exp(*(np.asarray(twist) * total))
    assert abs(x[-1] - ref.x[0]) < 1e-9 and abs(y[-1] - ref.y[0]) < 1e-9 and abs(th[-1] - ref.theta[0]) < 1e-9


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("scheme,order", [("euler", 1.0), ("midpoint", 2.0)])
def test_euler_and_midpoint_orders(kind, scheme, order) -> None:
    """End-point error against exp(xi T) falls as dt^1 (Euler) and dt^2 (midpoint) (common practice)."""
    model, twist = tables()[kind]
    total = 4.0
    ref = Poses.exp(*(np.asarray(twist) * total))
    steps = [0.2, 0.1, 0.05, 0.025]
    errs = []
    for dt in steps:
        body, _, _ = _drive(model, twist, dt, int(round(total / dt)))
        x, y, _, _ = integrate_body(body, scheme)
        errs.append(math.hypot(x[-1] - ref.x[0], y[-1] - ref.y[0]))
    slope = np.polyfit(np.log(steps), np.log(errs), 1)[0]
    assert abs(slope - order) < 0.15, slope


@pytest.mark.parametrize("kind", KINDS)
def test_jacobians_match_central_differences(kind) -> None:
    """d tau / d spin (analytic) and d tau / d steer against central differences on consistent data."""
    model, twist = tables()[kind]
    _, spin, steer = _drive(model, twist, 0.02, 1)
    jac = model.jacobian(spin, steer)[0]
    var = model.spin_variance(spin)
    h = 1e-7
    for e in range(spin.shape[1]):
        up, dn = spin.copy(), spin.copy()
        up[0, e] += h
        dn[0, e] -= h
        fd = (model._solve(up, steer, var)[0] - model._solve(dn, steer, var)[0])[0] / (2 * h)
        assert np.allclose(jac[:, e], fd, atol=1e-6), (e, jac[:, e], fd)
    if steer is not None:
        js = model.steer_jacobian(spin, steer)[0]
        for t in range(steer.shape[1]):
            up, dn = steer.copy(), steer.copy()
            up[0, t] += 1e-5
            dn[0, t] -= 1e-5
            fd = (model._solve(spin, up, var)[0] - model._solve(spin, dn, var)[0])[0] / 2e-5
            assert np.allclose(js[:, t], fd, atol=1e-6)


@pytest.mark.parametrize("kind", KINDS)
def test_batch_equals_streaming(kind) -> None:
    """Whole arrays and one sample at a time give the same increments and covariances (1e-12)."""
    model, twist = tables()[kind]
    rng = np.random.default_rng(3)
    tw = np.asarray(twist) * (1.0 + 0.3 * rng.standard_normal((50, 1)))
    spin, steer = model.inverse(tw, np.full(50, 0.01))
    spin = spin + 1e-5 * rng.standard_normal(spin.shape)
    batch = model.increment(spin, steer)
    cov = model.increment_covariance(spin, steer)
    for i in range(50):
        st = None if steer is None else steer[i:i + 1]
        assert np.allclose(model.increment(spin[i:i + 1], st)[0], batch[i], atol=1e-12)
        assert np.allclose(model.increment_covariance(spin[i:i + 1], st)[0], cov[i], atol=1e-14)


@pytest.mark.parametrize("kind", KINDS)
def test_monte_carlo_consistency(kind) -> None:
    """Noisy wheels (variance k |s|) and steering readings (sd): the mean NEES of the increment with its
    predicted covariance lies in the two-sided 95 % chi-square(3N)/N interval (scipy.stats.chi2)."""
    model, twist = tables()[kind]
    n = 4000
    rng = np.random.default_rng(11)
    tw = np.tile(np.asarray(twist), (n, 1))
    spin0, steer0 = model.inverse(tw, np.full(n, 0.05))
    var = model.k[model.spin] * np.abs(spin0)
    spin = spin0 + np.sqrt(var) * rng.standard_normal(spin0.shape)
    steer = None if steer0 is None else steer0 + model.steer_sd_rad * rng.standard_normal(steer0.shape)
    err = model.increment(spin, steer) - model.increment(spin0, steer0)
    cov = model.increment_covariance(spin0, steer0)
    # a rank-deficient covariance (one degree of freedom per step on steered bases) is scored in its range
    vals, vecs = np.linalg.eigh(cov[0])
    keep = vals > 1e-9 * vals.max()
    z = (err @ vecs[:, keep]) / np.sqrt(vals[keep])
    dof = int(keep.sum())
    mean = float(np.mean(np.sum(z * z, axis=1)))
    lo, hi = stats.chi2.ppf([0.025, 0.975], dof * n) / n
    assert lo <= mean <= hi, (mean, lo, hi, dof)


def test_differential_drive_behind_the_interface_keeps_the_numbers() -> None:
    """DifferentialDrive + integrate_body equals core.motion (the regression suite's formulas), every scheme."""
    rng = np.random.default_rng(5)
    dl, dr = 0.01 + 0.003 * rng.standard_normal(200), 0.012 + 0.003 * rng.standard_normal(200)
    model = DifferentialDrive(0.47)
    body = model.increment(np.column_stack([dl, dr]))
    ds, dth = body_increment(dl, dr, 0.47)
    assert np.array_equal(body[:, 0], ds) and np.array_equal(body[:, 2], dth) and not body[:, 1].any()
    for scheme in ("euler", "midpoint", "exact"):
        x, y, th, _ = integrate_body(body, scheme, (1.0, 2.0, 0.3))
        xr, yr, thr, *_ = integrate(ds, dth, scheme, (1.0, 2.0, 0.3))
        assert np.allclose(x, xr, atol=1e-12) and np.allclose(y, yr, atol=1e-12) and np.array_equal(th, thr)
    spin, _ = model.inverse(np.column_stack([ds, np.zeros(200), dth]), np.ones(200))
    assert np.allclose(spin, np.column_stack([dl, dr]), atol=1e-15)


@pytest.mark.parametrize("build,words", [
    (lambda: WheelTable("omni", ["a", "b", "c"], [0, 1], [0, 1, 2], [0.1] * 3, roller_angle=[1.5708] * 3),
     "drive.wheel_x has 2 entries"),
    (lambda: WheelTable("custom", ["a", "a"], [0, 0], [0.2, -0.2], [0.1, 0.1]), "appears twice"),
    (lambda: WheelTable("mecanum", ["a", "b", "c", "d"], [1, 1, -1, -1], [1, -1, 1, -1], [0.1] * 4),
     "mecanum base has four"),
    (lambda: WheelTable("custom", ["", ""], [0, 0], [0.2, -0.2], [0.1, 0.1]), "no wheel has an encoder"),
    (lambda: WheelTable("custom", ["a"], [0.0], [0.0], [0.1]), "rank below 3"),
    (lambda: WheelTable("rover", ["a"], [0.0], [0.0], [0.1]), "not a wheel-table kind"),
])
def test_bad_tables_are_refused_in_one_sentence(build, words) -> None:
    """A table that does not fit its kind or cannot determine the motion: one sentence naming the fix."""
    with pytest.raises(SettingsError) as info:
        build()
    msg = str(info.value)
    assert words in msg and "\n" not in msg and msg.endswith(".")
