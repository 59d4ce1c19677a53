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


# -- the closed-form solve and the float step --------------------------------------------------------

def extra_tables() -> dict[str, WheelTable]:
    """Custom tables for the other solve paths (invented): steered omni wheels (constant sliding rows,
    turning rolling rows) and a steered standard wheel among omni wheels (two degrees of freedom)."""
    ang = np.radians([0.0, 120.0, 240.0])
    steered_omni = WheelTable("custom", ["w0", "w1", "w2"], 0.2 * np.cos(ang), 0.2 * np.sin(ang), [0.04] * 3,
                              steer_joints=["s0", "", ""], mount_angle=ang + math.pi / 2,
                              roller_angle=[math.pi / 2] * 3, k_wheels=4e-4, steer_sd_rad=0.003)
    caster = WheelTable("custom", ["w0", "w1", "w2", "front"], [0.2, -0.1, -0.1, 0.3], [0.0, 0.17, -0.17, 0.0],
                        [0.04] * 3 + [0.08], steer_joints=["", "", "", "front_steer"],
                        mount_angle=[math.pi / 2, math.pi / 2 + 2.1, math.pi / 2 - 2.1, 0.0],
                        roller_angle=[math.pi / 2] * 3 + [0.0], k_wheels=4e-4, steer_sd_rad=0.003)
    return {"steered_omni": steered_omni, "caster": caster}


ALL_MODELS = {**{k: v[0] for k, v in tables().items()}, **extra_tables()}


def _noisy_steps(model: WheelTable, n: int, seed: int):
    """Spins and steering readings of a varying twist with noise on both (the sliding rows of steered
    bases then disagree slightly, as real readings do)."""
    rng = np.random.default_rng(seed)
    tw = np.array([0.5, 0.2, 0.4]) * (1.0 + 0.5 * rng.standard_normal((n, 3)))
    spin, steer = model.inverse(tw, np.full(n, 0.02))
    spin = spin + 3e-5 * rng.standard_normal(spin.shape)
    if steer is not None:
        steer = steer + 0.004 * rng.standard_normal(steer.shape)
    return spin, steer


def _reference(model: WheelTable, spin, steer):
    """The weighted least-squares increment with the sliding equations held exactly, from numpy's SVD
    and lstsq and the equations of the module docstring (Siegwart et al. 2011, sec. 3.2): null space of
    the sliding rows kept at the table's structural rank, rolling rows weighted by 1 / (k max(|s|,
    |s|_mean / 4)) (the module's robust weight rule); covariance N H^-1 N^T; whitened residual."""
    n = len(spin)
    psi = np.tile(model.mount, (n, 1))
    if steer is not None:
        psi[:, model.steered] += steer - model.offset[model.steered]

    def rows(angle, x, y):
        return np.stack([np.cos(angle), np.sin(angle), np.sin(angle) * x - np.cos(angle) * y], axis=-1)

    std, enc = model.standard, model.spin
    rank = np.linalg.matrix_rank(rows(model.mount + math.pi / 2, model.x, model.y)[std], tol=1e-9) if std.any() else 0
    scale = np.where(std, 1.0, np.sin(model.roller))[enc]
    out_tau, out_cov, out_res = np.zeros((n, 3)), np.zeros((n, 3, 3)), np.zeros(spin.shape)
    for i in range(n):
        r = rows(psi[i, enc] + np.where(std, 0.0, model.roller - math.pi / 2)[enc], model.x[enc], model.y[enc])
        null = np.linalg.svd(rows(psi[i, std] + math.pi / 2, model.x[std], model.y[std]))[2][rank:].T if rank \
            else np.eye(3)
        a = np.abs(spin[i])
        w = 1.0 / (scale ** 2 * (model.k[enc] * np.maximum(a, 0.25 * a.mean())))
        b = spin[i] * scale
        sw = np.sqrt(w)
        z = np.linalg.lstsq((r @ null) * sw[:, None], b * sw, rcond=None)[0]
        out_tau[i] = null @ z
        out_cov[i] = null @ np.linalg.inv((r @ null).T @ ((r @ null) * w[:, None])) @ null.T
        out_res[i] = (b - r @ out_tau[i]) * sw
    return out_tau, out_cov, out_res


def _rel(a, ref) -> float:
    return float(np.max(np.abs(np.asarray(a) - ref)) / max(np.max(np.abs(ref)), 1e-300))


@pytest.mark.parametrize("name", sorted(ALL_MODELS))
def test_solve_equals_numpy_reference_and_step_floats_equals_solve(name) -> None:
    """solve == numpy SVD + lstsq + inv reference (increment, wheel-noise covariance, whitened residual)
    to 1e-9; the steering part equals sd^2 J_s J_s^T with J_s from central differences of the reference
    (common practice); step_floats == solve and increment / increment_covariance / residual == solve."""
    model = ALL_MODELS[name]
    spin, steer = _noisy_steps(model, 60, 21)
    tau, cov, res = model.solve(spin, steer)
    ref_tau, ref_cov, ref_res = _reference(model, spin, steer)
    if steer is not None and model.steer_sd_rad > 0:
        h = 1e-4
        js = np.zeros((len(spin), 3, steer.shape[1]))
        for t in range(steer.shape[1]):
            d = np.zeros_like(steer)
            d[:, t] = h
            f = [_reference(model, spin, steer + k * d)[0] for k in (-2, -1, 1, 2)]
            js[:, :, t] = (8 * (f[2] - f[1]) - (f[3] - f[0])) / (12 * h)   # five-point central difference
        ref_cov = ref_cov + model.steer_sd_rad ** 2 * js @ np.swapaxes(js, 1, 2)
    assert _rel(tau, ref_tau) < 1e-9 and _rel(cov, ref_cov) < 1e-9
    assert np.max(np.abs(res - ref_res)) < 1e-9 * max(1.0, np.max(np.abs(ref_res)))
    assert np.array_equal(model.increment(spin, steer), tau)
    assert np.array_equal(model.increment_covariance(spin, steer), cov)
    assert np.array_equal(model.residual(spin, steer), res)
    big = np.tile(np.arange(len(spin)), 300)              # several blocks of the vectorised solve
    for got, want in zip(model.solve(spin[big], None if steer is None else steer[big]), (tau, cov, res)):
        assert np.allclose(got, want[big], rtol=1e-13, atol=1e-300)
    for i in range(len(spin)):
        dx, dy, dth, c6, r = model.step_floats(spin[i].tolist(), None if steer is None else steer[i].tolist())
        assert all(type(v) is float for v in (dx, dy, dth, *c6, *r))
        assert _rel([dx, dy, dth], tau[i]) < 1e-9
        assert _rel(c6, cov[i][[0, 0, 0, 1, 1, 2], [0, 1, 2, 1, 2, 2]]) < 1e-9
        assert np.max(np.abs(np.asarray(r) - res[i])) < 1e-9 * max(1.0, np.max(np.abs(res[i])))


@pytest.mark.parametrize("name", sorted(n for n, m in ALL_MODELS.items() if m.steered.any()))
def test_analytic_steering_jacobian_matches_central_differences(name) -> None:
    """steer_jacobian (analytic) == five-point central differences of solve's increment (h = 3e-4 rad,
    truncation error O(h^4); common practice) to 1e-8, on readings whose sliding rows disagree."""
    model = ALL_MODELS[name]
    spin, steer = _noisy_steps(model, 40, 5)
    js = model.steer_jacobian(spin, steer)
    h = 3e-4
    for t in range(steer.shape[1]):
        d = np.zeros_like(steer)
        d[:, t] = h
        f = [model.solve(spin, steer + k * d)[0] for k in (-2, -1, 1, 2)]
        fd = (8 * (f[2] - f[1]) - (f[3] - f[0])) / (12 * h)
        assert _rel(js[:, :, t], fd) < 1e-8, (t, _rel(js[:, :, t], fd))


@pytest.mark.parametrize("name", sorted(ALL_MODELS))
def test_zero_motion_gives_zero_increment_and_finite_covariance(name) -> None:
    """All spins 0 (a chain restart or standstill), any steering: increment exactly 0, covariance and
    residual finite, symmetric and positive semi-definite (common practice), batch and float step alike;
    a non-finite reading gives NaNs for its step (batch and float step) instead of an exception."""
    model = ALL_MODELS[name]
    n_e, n_t = int(model.spin.sum()), int(model.steered.sum())
    spin = np.zeros((3, n_e))
    steer = None if not n_t else np.array([[0.0] * n_t, [0.3] * n_t, [-1.2] * n_t])
    tau, cov, res = model.solve(spin, steer)
    assert np.array_equal(tau, np.zeros((3, 3))) and np.isfinite(cov).all() and np.isfinite(res).all()
    assert np.allclose(cov, np.swapaxes(cov, 1, 2)) and (np.linalg.eigvalsh(cov) > -1e-12 * np.abs(cov).max()).all()
    for i in range(3):
        dx, dy, dth, c6, r = model.step_floats([0.0] * n_e, None if steer is None else steer[i].tolist())
        assert (dx, dy, dth) == (0.0, 0.0, 0.0) and all(math.isfinite(v) for v in (*c6, *r))
    with np.errstate(all="raise"):          # no division by zero, not even a floating-point warning
        model.solve(spin, steer)
        moving, moving_steer = _noisy_steps(model, 3, 2)
        mixed = np.vstack([moving, spin])        # a restart inside a batch
        mixed_steer = None if steer is None else np.vstack([moving_steer, steer])
        assert np.array_equal(model.solve(mixed, mixed_steer)[0][3:], tau)
    bad = model.step_floats([float("nan")] + [0.01] * (n_e - 1), None if not n_t else [float("inf")] * n_t)
    assert all(math.isnan(v) for v in (*bad[:3], *bad[3], *bad[4]))
    mixed[0, 0] = np.nan
    if steer is not None:
        mixed_steer[1, 0] = np.inf
    got = model.solve(mixed, mixed_steer)[0]
    bad = 1 if steer is None else 2
    assert np.isnan(got[:bad]).all() and np.allclose(got[bad:], model.solve(mixed[bad:], None if steer is None
                                                                            else mixed_steer[bad:])[0], rtol=1e-12)


@pytest.mark.parametrize("scheme", ["euler", "midpoint", "exact"])
def test_body_to_odom_noise_is_first_order_propagation(scheme) -> None:
    """Q = J C J^T with J from central differences of odom_increment (common practice), to 1e-8; for a
    differential base (dy = 0) equal to noise.increment_noise's per-wheel step noise (Chong & Kleeman
    1997; Siegwart et al. 2011, sec. 5.2.4); the float twin equals the batch form."""
    from wheel_dr.core.drive.base import body_to_odom_noise, body_to_odom_noise_floats, odom_increment
    from wheel_dr.core.noise import increment_noise
    rng = np.random.default_rng(8)
    m = 40
    tau = rng.standard_normal((m, 3)) * [0.05, 0.02, 0.2]
    tau[:4, 2] = 1e-6 * rng.standard_normal(4)       # the series branch of the exponential's factors
    th = rng.uniform(-3.0, 3.0, m)
    low = rng.standard_normal((m, 3, 3))
    cov = low @ np.swapaxes(low, 1, 2)
    q = body_to_odom_noise(th, tau, cov, scheme)
    jac = np.zeros((m, 3, 3))
    h = 1e-6
    for i in range(3):
        up, dn = tau.copy(), tau.copy()
        up[:, i] += h
        dn[:, i] -= h
        jac[:, :2, i] = (np.column_stack(odom_increment(th, up, scheme)) -
                         np.column_stack(odom_increment(th, dn, scheme))) / (2 * h)
    jac[:, 2, 2] = 1.0
    assert _rel(q, jac @ cov @ np.swapaxes(jac, 1, 2)) < 1e-8
    for i in range(m):
        qf = body_to_odom_noise_floats(th[i], *tau[i], cov[i][[0, 0, 0, 1, 1, 2], [0, 1, 2, 1, 2, 2]], scheme)
        assert _rel(qf, q[i][[0, 0, 0, 1, 1, 2], [0, 1, 2, 1, 2, 2]]) < 1e-12
    big = np.tile(np.arange(m), 500)                      # several blocks: each row as computed alone
    q_big = body_to_odom_noise(th[big], tau[big], cov[big], scheme)
    assert np.array_equal(q_big, q[big])
    dl, dr = 0.01 + 0.003 * rng.standard_normal(m), 0.012 + 0.003 * rng.standard_normal(m)
    diff = DifferentialDrive(0.47, k_left=3e-4, k_right=6e-4)
    s = np.column_stack([dl, dr])
    q_diff = body_to_odom_noise(th, diff.increment(s), diff.increment_covariance(s), scheme)
    ref = increment_noise(th, dl, dr, 0.47, scheme, "per_wheel", 3e-4, 6e-4, (0.0, 0.0, 0.0, 0.0))[0]
    assert _rel(q_diff, ref) < 1e-9


@pytest.mark.parametrize("name", sorted(n for n, m in ALL_MODELS.items() if m.steered.any()))
def test_solve_follows_the_svd_when_steering_readings_disagree_widely(name) -> None:
    """Steering readings with 1 rad of noise (sliding rows far from consistent, eigenvalues of C^T C
    close together on some steps): solve's increment still equals the numpy SVD + lstsq reference to
    1e-9 and step_floats equals solve."""
    model = ALL_MODELS[name]
    rng = np.random.default_rng(4)
    spin, steer = _noisy_steps(model, 300, 17)
    steer = steer + rng.standard_normal(steer.shape)
    tau = model.solve(spin, steer)[0]
    ref = _reference(model, spin, steer)[0]
    assert np.max(np.linalg.norm(tau - ref, axis=1) / np.linalg.norm(ref, axis=1)) < 1e-9
    fl = np.array([model.step_floats(a.tolist(), b.tolist())[:3] for a, b in zip(spin, steer)])
    assert np.max(np.linalg.norm(fl - tau, axis=1) / np.linalg.norm(tau, axis=1)) < 1e-9
