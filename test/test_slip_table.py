"""Slip and wheel-fault detection on wheel-table bases (wheel_dr.core.slip_table).

Data are made with ``WheelTable.inverse`` (the rolling equations of Siegwart, Nourbakhsh &
Scaramuzza 2011, sec. 3.2) from body twists, with white per-wheel noise of the model's own variance
k |s| (Siegwart et al. 2011, sec. 5.2.4) and a gyro with white noise. Sources of the checks:
chi-square gates and their quantiles from scipy.stats (Bar-Shalom, Li & Kirubarajan 2001, sec. 5.4);
degrees of mobility of the kinds (Campion, Bastin & d'Andrea-Novel 1996; Siegwart et al. 2011,
sec. 3.3); the mu g traction limit is common practice. Geometry is invented (demo only).
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from wheel_dr.core.drive import WheelTable
from wheel_dr.core.settings import Settings
from wheel_dr.core.slip import DETECTOR_GYRO, DETECTOR_NAMES, DETECTOR_RESIDUAL, DETECTOR_TRACTION
from wheel_dr.core.slip_table import (TableSlipMonitor, detect_slip_table, residual_dof, residual_gate,
                                      residual_statistic)
from wheel_dr.core.wheels import SampleStatus, Travel

Q = math.pi / 4
DT = 0.01                       # 100 Hz joint states
# noise.k_wheels (m): 6 mm standard deviation per metre of travel, so a 5 mm step's noise is a tenth
# of it; the chi-square holds while the noise is small against the step (the table's weights are
# evaluated at the measured travel: at a third of the step, as with k = 4e-4 m, the tail is
# 2 to 3 % instead of 1 %, docs/slip.md)
K = 4e-5


def tables() -> dict[str, WheelTable]:
    """One invented table per kind (Quokka cart variants), several with redundant encoders."""
    ang4 = np.radians([45.0, 135.0, 225.0, 315.0])
    return {
        # steered, driven front wheel with an encoder and two rear encoders: E = 3
        "tricycle": WheelTable("tricycle", ["front", "rear_l", "rear_r"], [0.8, -0.1, -0.1], [0.0, 0.28, -0.28],
                               [0.11, 0.09, 0.09], steer_joints=["front_steer", "", ""], steer_offset=[0.02, 0, 0],
                               k_wheels=K),
        # the same with the front encoder only: no redundancy
        "tricycle_front": WheelTable("tricycle", ["front", "", ""], [0.8, -0.1, -0.1], [0.0, 0.28, -0.28],
                                     [0.11, 0.09, 0.09], steer_joints=["front_steer", "", ""],
                                     steer_offset=[0.02, 0, 0], k_wheels=K),
        # car-like with its two rear encoders only
        "ackermann": WheelTable("ackermann", ["", "", "rl", "rr"], [1.0, 1.0, 0.0, 0.0], [0.32, -0.32, 0.32, -0.32],
                                [0.14] * 4, steer_joints=["sl", "sr", "", ""], k_wheels=K),
        "mecanum": WheelTable("mecanum", ["fl", "fr", "rl", "rr"], [0.24, 0.24, -0.24, -0.24],
                              [0.21, -0.21, 0.21, -0.21], [0.05] * 4, roller_angle=[Q, -Q, -Q, Q], k_wheels=K),
        # four omni wheels on the diagonals
        "omni": WheelTable("omni", ["o0", "o1", "o2", "o3"], 0.22 * np.cos(ang4), 0.22 * np.sin(ang4), [0.04] * 4,
                           mount_angle=ang4 + math.pi / 2, roller_angle=[math.pi / 2] * 4, k_wheels=K),
        "swerve": WheelTable("swerve", ["m0", "m1", "m2", "m3"], [0.3, 0.3, -0.3, -0.3], [0.27, -0.27, 0.27, -0.27],
                             [0.06] * 4, steer_joints=["s0", "s1", "s2", "s3"], steer_offset=[0.02, -0.01, 0.0, 0.03],
                             k_wheels=K),
        # two fixed wheels on one axle: as many encoders as degrees of freedom, no residual test
        "custom": WheelTable("custom", ["left", "right"], [0.0, 0.0], [0.25, -0.25], [0.1, 0.1], k_wheels=K),
    }


KINDS = sorted(tables())
REDUNDANT = [k for k in KINDS if k not in ("custom", "tricycle_front")]
# the body twist each kind can drive without its fixed wheels sliding: vy = -wz x of the fixed axle
REAR_X = {"tricycle": -0.1, "tricycle_front": -0.1, "ackermann": 0.0, "custom": 0.0}


def _twists(kind: str, n: int, varying: bool, seed: int = 0) -> np.ndarray:
    t = np.arange(n) * DT
    if varying:
        rng = np.random.default_rng(seed)
        ph = rng.uniform(0, 2 * math.pi, 3)
        vx = 0.5 + 0.25 * np.sin(2 * math.pi * t / 7.0 + ph[0])
        vy = 0.15 * np.sin(2 * math.pi * t / 5.0 + ph[1])
        wz = 0.35 * np.sin(2 * math.pi * t / 9.0 + ph[2])
    else:
        vx, vy, wz = np.full(n, 0.5), np.full(n, 0.12), np.full(n, 0.3)
    if kind in REAR_X:
        vy = -wz * REAR_X[kind]
    ramp = np.clip(t / 1.5, 0.0, 1.0)   # start gently (well below mu g)
    return np.column_stack([vx, vy, wz]) * ramp[:, None]


def _make(kind: str, seconds: float = 40.0, varying: bool = True, seed: int = 1, still_s: float = 1.0,
          slip: tuple | None = None, gyro_offset: tuple | None = None, gaps: tuple = ()):
    """A drive of ``kind``: ``still_s`` standing, then ``seconds`` of driving.

    ``slip`` = (wheel, t0, t1, extra m/s, ramp s): extra spin added to one encoder wheel (in its
    direction of rolling); ``gyro_offset`` = (t0, t1, rad/s) added to the gyro; ``gaps`` = sample
    indices where the chain restarts. Returns travel, body, body_cov, gyro, model, truth.
    """
    model = tables()[kind]
    rng = np.random.default_rng(seed)
    n0, n1 = int(round(still_s / DT)), int(round(seconds / DT))
    m = n0 + n1
    tw = np.vstack([np.zeros((n0, 3)), _twists(kind, n1, varying, seed)])
    spin, steer = model.inverse(tw, np.full(m, DT))
    if steer is not None:
        # standing still the steering holds the angle it starts driving with
        steer[:n0] = steer[n0]
    spin = spin + np.sqrt(model.spin_variance(spin)) * rng.standard_normal(spin.shape) * (np.abs(spin) > 0)
    t = np.arange(m) * DT
    truth = np.zeros(m, dtype=bool)
    if slip is not None:
        wheel, t0, t1, extra, ramp = slip
        shape = np.clip((t - t0) / ramp, 0.0, 1.0) * np.clip((t1 - t) / ramp, 0.0, 1.0)
        spin[:, wheel] += np.sign(spin[:, wheel]) * extra * DT * shape
        truth = (t >= t0) & (t <= t1)
    restart = np.zeros(m, dtype=bool)
    restart[0] = True
    restart[list(gaps)] = True
    spin[restart] = 0.0
    body = model.increment(spin, steer)
    body_cov = model.increment_covariance(spin, steer)
    gyro = tw[:, 2] + 0.01 * rng.standard_normal(m) + 0.004   # slip.gyro_noise_radps, a small bias
    if gyro_offset is not None:
        g0, g1, off = gyro_offset
        gyro = gyro + np.where((t >= g0) & (t <= g1), off, 0.0)
    stamp = (np.arange(m) * round(DT * 1e9)).astype(np.int64)
    travel = Travel(np.arange(m), stamp, np.where(restart, 0.0, DT), np.zeros(m), np.zeros(m), restart,
                    np.where(restart, int(SampleStatus.GAP), int(SampleStatus.USED)).astype(np.int8), spin, steer)
    return travel, body, body_cov, gyro, model, truth


# ------------------------------------------------------------------------------------------------
# degrees of freedom and gate
# ------------------------------------------------------------------------------------------------
def test_residual_degrees_of_freedom_are_encoders_minus_the_degree_of_mobility() -> None:
    """Degree of mobility (Campion et al. 1996; Siegwart et al. 2011, sec. 3.3): 3 for mecanum and omni
    (omnidirectional), 1 for steered bases within a step (tricycle, car-like, swerve: the steering sets
    the instantaneous centre), 2 for two fixed wheels on one axle."""
    mobility = {"mecanum": 3, "omni": 3, "tricycle": 1, "ackermann": 1, "swerve": 1, "custom": 2,
                "tricycle_front": 1}
    for kind, model in tables().items():
        assert residual_dof(model) == int(model.spin.sum()) - mobility[kind], kind


def test_residual_gate_is_the_chi_square_quantile() -> None:
    """99 % chi-square quantiles from scipy.stats (Bar-Shalom et al. 2001, sec. 5.4); the default
    slip.gyro_gate 6.63 is the rounded 1-dof one, so 0.1 % tolerance."""
    s = Settings()
    for kind, model in tables().items():
        d = residual_dof(model)
        if d <= 0:
            assert residual_gate(model, s) == math.inf
        else:
            assert residual_gate(model, s) == pytest.approx(stats.chi2.ppf(0.99, d), rel=1e-3), kind


def test_residual_detector_has_its_own_bit_and_name() -> None:
    """Bit 32, beside the existing ones (1, 2, 4 and 8, 16 of slip_motion), named 'residual'."""
    assert DETECTOR_RESIDUAL == 32 and DETECTOR_NAMES[DETECTOR_RESIDUAL] == "residual"
    bits = list(DETECTOR_NAMES)
    assert len(set(bits)) == len(bits) and all(b & (b - 1) == 0 for b in bits)


# ------------------------------------------------------------------------------------------------
# clean drives: false alarms bounded by the chi-square tail
# ------------------------------------------------------------------------------------------------
@pytest.mark.parametrize("kind", REDUNDANT)
def test_clean_constant_drive_exceeds_the_gate_at_the_chi_square_tail(kind) -> None:
    """Constant twist: the window statistic is chi-square with E - dof degrees of freedom, so it
    exceeds the 99 % quantile (scipy.stats.chi2) on 1 % of the windows (Bar-Shalom et al. 2001,
    sec. 5.4). Windows overlap (10 samples), so about 1300 independent ones in 130 s: tolerance
    0.4 % to 1.8 % (more than 3 standard deviations of the count)."""
    travel, _, _, _, model, _ = _make(kind, seconds=130.0, varying=False, seed=5)
    stat, _ = residual_statistic(model, travel, Settings())
    ok = np.isfinite(stat)
    assert ok.mean() > 0.95
    rate = float(np.mean(stat[ok] > stats.chi2.ppf(0.99, residual_dof(model))))
    assert 0.004 <= rate <= 0.018, rate


@pytest.mark.parametrize("kind", KINDS)
def test_clean_varying_drive_flags_rarely(kind) -> None:
    """Varying twists (the fitted directions change within a window, which only lightens the tail):
    the statistic exceeds the 99 % quantile on at most 1.8 % of the windows, and the latched flags
    cover at most 5 % of the samples: a set flag clears only once the score has stayed under
    slip.clear_fraction (the statistic under a quarter of the gate) for slip.clear_delay_s, so a
    false alarm lasts a few windows."""
    travel, body, cov, gyro, model, _ = _make(kind, seconds=60.0, varying=True, seed=6)
    s = Settings()
    if residual_dof(model) > 0:
        stat, _ = residual_statistic(model, travel, s)
        ok = np.isfinite(stat)
        assert float(np.mean(stat[ok] > stats.chi2.ppf(0.99, residual_dof(model)))) <= 0.018
    res = detect_slip_table(model, travel, body, cov, gyro, s)
    assert res.wheel_flags.shape == travel.joint_travel_m.shape
    assert float(res.slip.mean()) <= 0.05, (kind, res.slip.mean(), np.unique(res.detector))


# ------------------------------------------------------------------------------------------------
# a slipping wheel is flagged and named
# ------------------------------------------------------------------------------------------------
SLIP_WHEEL = {"tricycle": 1, "ackermann": 1, "mecanum": 2, "omni": 1, "swerve": 3}


@pytest.mark.parametrize("kind", REDUNDANT)
def test_residual_test_flags_and_names_a_spinning_wheel(kind) -> None:
    """One wheel spinning 0.4 m/s faster than it rolls for 3 s, ramped over 0.5 s (below the mu g
    traction limit, common practice), no IMU: the residual detector flags it (recall after 0.3 s
    at least 90 %); with two or more redundant equations it names that wheel alone on at least 90 %
    of the flagged samples (the largest residual of a single fault is its own after whitening,
    Bar-Shalom et al. 2001, sec. 5.4); with one (a single parity equation, where every wheel's
    fault points the same way) it flags every wheel. Flags after the slip stay at the clean
    drive's false-alarm level (at most 5 %)."""
    wheel = SLIP_WHEEL[kind]
    travel, body, cov, _, model, truth = _make(kind, seconds=20.0, seed=8, slip=(wheel, 8.0, 11.0, 0.4, 0.5))
    res = detect_slip_table(model, travel, body, cov, None, Settings())
    t = travel.stamp_ns * 1e-9
    core = (t >= 8.3) & (t <= 11.0)
    assert res.slip[core].mean() >= 0.9, res.slip[core].mean()
    inside = core & res.slip
    assert np.all(res.detector[inside] & DETECTOR_RESIDUAL)
    assert res.wheel_flags[inside, wheel].mean() >= 0.9
    others = np.delete(res.wheel_flags, wheel, axis=1)
    y = model.y[model.spin]
    if residual_dof(model) >= 2:
        assert others[inside].any(axis=1).mean() <= 0.1
        if y[wheel] > 0:
            assert res.left[inside].mean() >= 0.9 and res.right[inside].mean() <= 0.1
        elif y[wheel] < 0:
            assert res.right[inside].mean() >= 0.9 and res.left[inside].mean() <= 0.1
    else:
        assert others[inside].all()
        assert res.left[inside].all() and res.right[inside].all()
    assert res.slip[t > 11.5].mean() <= 0.05


@pytest.mark.parametrize("kind", ["ackermann", "mecanum", "omni"])
def test_gyro_narrows_the_wheels_of_a_single_parity_equation(kind) -> None:
    """With one parity equation and an IMU, the gyro is a second redundant measurement: only the
    wheels whose fault would also explain the heading difference (chi-square gate, Bar-Shalom et al.
    2001, sec. 5.4) are flagged. On the car-like base the two rear wheels turn the heading opposite
    ways, so the wheel itself is named; on mecanum and four-wheel omni bases a wheel and its diagonal
    partner have the same signature in both equations, so the pair is named (two of four)."""
    wheel = SLIP_WHEEL[kind]
    travel, body, cov, gyro, model, _ = _make(kind, seconds=20.0, seed=8, slip=(wheel, 8.0, 11.0, 0.4, 0.5))
    res = detect_slip_table(model, travel, body, cov, gyro, Settings())
    t = travel.stamp_ns * 1e-9
    core = (t >= 8.3) & (t <= 11.0)
    assert res.slip[core].mean() >= 0.9
    inside = core & res.slip
    assert res.wheel_flags[inside, wheel].mean() >= 0.9
    count = res.wheel_flags[inside].sum(axis=1)
    if kind == "ackermann":
        assert (count == 1).mean() >= 0.75
    else:
        assert (count == 2).mean() >= 0.9


@pytest.mark.parametrize("kind", KINDS)
def test_traction_test_names_a_wheel_that_spins_up_faster_than_mu_g(kind) -> None:
    """A wheel whose surface speed jumps by 1.5 m/s in 50 ms (30 m/s^2, beyond 0.5 g; common
    practice: rolling contact cannot accelerate faster than about mu g), no IMU. Without
    redundant encoders the traction detector alone flags that wheel and no other; with them the
    residual detector is usually first (a spike on a wheel already flagged starts nothing), and
    either way that wheel is flagged within 0.1 s, with a score over 1."""
    wheel = SLIP_WHEEL.get(kind, 0)
    travel, body, cov, _, model, _ = _make(kind, seconds=20.0, seed=9, slip=(wheel, 8.0, 10.0, 1.5, 0.05))
    res = detect_slip_table(model, travel, body, cov, None, Settings())
    t = travel.stamp_ns * 1e-9
    onset = (t >= 8.1) & (t <= 8.4)
    assert res.wheel_flags[onset, wheel].all()
    assert res.score[onset].max() > 1.0
    if residual_dof(model) <= 0:
        assert np.all(res.detector[onset] == DETECTOR_TRACTION)
        others = np.delete(res.wheel_flags, wheel, axis=1)
        assert not others[onset].any()
        assert not res.slip[(t > 1.0) & (t < 7.9)].any()
    else:
        assert np.all(res.detector[onset] & (DETECTOR_TRACTION | DETECTOR_RESIDUAL))


@pytest.mark.parametrize("kind", KINDS)
def test_gyro_test_flags_a_heading_disagreement(kind) -> None:
    """The gyro reads 0.4 rad/s more than the base turns for 3 s: the chi-square test on the model's
    heading increment and its variance (Bar-Shalom et al. 2001, sec. 5.4) flags every wheel (the
    gyro cannot say which) with the gyro bit, and not before."""
    travel, body, cov, gyro, model, _ = _make(kind, seconds=20.0, seed=10, gyro_offset=(8.0, 11.0, 0.4))
    res = detect_slip_table(model, travel, body, cov, gyro, Settings())
    t = travel.stamp_ns * 1e-9
    core = (t >= 8.2) & (t <= 11.0)
    assert res.slip[core].mean() >= 0.95
    assert np.all(res.detector[core & res.slip] & DETECTOR_GYRO)
    assert res.wheel_flags[core & res.slip].all()
    assert res.left[core & res.slip].all() and res.right[core & res.slip].all()
    assert not np.any(res.detector[(t > 1.5) & (t < 7.5)] & DETECTOR_GYRO)


def test_gyro_response_takes_the_gyro_increment_on_flagged_samples() -> None:
    """slip.response 'gyro' (gyrodometry, Borenstein & Feng 1996): flagged samples integrate the
    bias-corrected gyro increment (w_z - bias) dt, the others the model's dtheta; 'inflate'
    scales the step noise of flagged samples only."""
    travel, body, cov, gyro, model, _ = _make("mecanum", seconds=15.0, seed=11, gyro_offset=(6.0, 8.0, 0.4))
    res = detect_slip_table(model, travel, body, cov, gyro, Settings().with_values({"slip.response": "gyro"}))
    f = res.slip
    assert f.any() and (~f).any()
    np.testing.assert_allclose(res.dtheta_rad[f], (gyro[f] - res.gyro_bias_radps[f]) * DT, rtol=1e-12)
    np.testing.assert_array_equal(res.dtheta_rad[~f], body[~f, 2])
    inf = detect_slip_table(model, travel, body, cov, gyro, Settings().with_values({"slip.response": "inflate"}))
    np.testing.assert_array_equal(inf.noise_scale, np.where(inf.slip, Settings().slip.inflate_factor, 1.0))


# ------------------------------------------------------------------------------------------------
# batch == streaming
# ------------------------------------------------------------------------------------------------
def _stream(model, travel, body, cov, gyro, settings, drop=()):
    mon = TableSlipMonitor(model, settings)
    out = []
    for i in range(len(travel.dt_s)):
        st = SampleStatus.GAP if travel.restart[i] else SampleStatus.USED
        spin = travel.joint_travel_m[i:i + 1]
        steer = None if travel.steer_rad is None else travel.steer_rad[i:i + 1]
        resid = model.residual(spin, steer)[0].tolist()
        c = cov[i]
        out.append(mon.step(st, int(travel.stamp_ns[i]), float(travel.dt_s[i]), spin[0].tolist(),
                            None if steer is None else steer[0].tolist(), body[i].tolist(),
                            [c[0, 0], c[0, 1], c[0, 2], c[1, 1], c[1, 2], c[2, 2]], resid,
                            None if (gyro is None or i in drop) else float(gyro[i])))
    return out


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("response", ["inflate", "gyro"])
def test_batch_equals_streaming_sample_by_sample(kind, response) -> None:
    """DESIGN.md: batch and streaming agree sample by sample: flags, wheel flags, detectors exactly,
    scores and increments to 1e-9 (the streaming form gets its residuals one row at a time).
    With a spinning wheel, a gyro disagreement, IMU dropouts (NaN / None, inside the slip) and a
    chain restart."""
    travel, body, cov, gyro, model, _ = _make(kind, seconds=14.0, seed=12, slip=(0, 4.0, 6.0, 1.0, 0.05),
                                              gyro_offset=(9.0, 10.5, 0.5), gaps=(700,))
    drop = set(range(520, 560))
    gyro = gyro.copy()
    gyro[list(drop)] = np.nan
    settings = Settings().with_values({"slip.response": response})
    res = detect_slip_table(model, travel, body, cov, gyro, settings)
    steps = _stream(model, travel, body, cov, gyro, settings, drop)
    assert res.slip.any() and res.detector.any()
    for field in ("slip", "left", "right", "detector"):
        np.testing.assert_array_equal(np.array([getattr(x, field) for x in steps]), getattr(res, field),
                                      err_msg=field)
    np.testing.assert_array_equal(np.array([x.wheel_flags for x in steps]), res.wheel_flags)
    np.testing.assert_allclose(np.array([x.score for x in steps]), res.score, rtol=1e-9, atol=1e-12)
    read = np.array([x.gyro_bias_radps is not None for x in steps])
    assert (~read).sum() == len(drop)
    np.testing.assert_allclose(np.array([x.gyro_bias_radps for x in steps if x.gyro_bias_radps is not None]),
                               res.gyro_bias_radps[read], rtol=1e-12)
    scale = np.array([x.noise_scale for x in steps])
    np.testing.assert_array_equal(scale, res.noise_scale)
    assert (scale > 1.0).any()
    if response == "gyro":
        dth = np.array([body[i, 2] if x.dtheta_rad is None else x.dtheta_rad for i, x in enumerate(steps)])
        np.testing.assert_allclose(dth, res.dtheta_rad, rtol=1e-9, atol=1e-15)


def test_monitor_never_raises_on_bad_values_and_resets() -> None:
    """A live node never dies on a bad message: NaN, inf and non-numbers count as no reading;
    ``reset`` forgets the state (the next sample starts a fresh chain)."""
    model = tables()["swerve"]
    mon = TableSlipMonitor(model, Settings())
    bad = [math.nan, math.inf, "x", None, 10 ** 400, 1e308]
    for i, b in enumerate(bad):
        st = mon.step(SampleStatus.USED, (i + 1) * 10_000_000, DT, [b, 0.01, 0.01, 0.01], [b, 0.0, 0.0, 0.0],
                      [0.01, 0.0, b], [1e-6, 0.0, 0.0, 1e-6, 0.0, b], [b, 0.0, 0.0, 0.0], b)
        assert not st.slip and len(st.wheel_flags) == 4
    mon.reset()
    assert mon.step(SampleStatus.GAP, 0, 0.0, [0.0] * 4, [0.0] * 4, [0.0] * 3, [0.0] * 6, [0.0] * 4,
                    None).score == 0.0


def test_steered_table_without_steering_readings_is_refused_in_one_sentence() -> None:
    """Bad input gets one clear sentence naming the thing and the fix."""
    travel, body, cov, gyro, model, _ = _make("swerve", seconds=2.0)
    travel.steer_rad = None
    with pytest.raises(ValueError, match="steer_rad"):
        detect_slip_table(model, travel, body, cov, gyro, Settings())


def test_disabled_detection_never_flags() -> None:
    """slip.enabled false: no flags in either form, one (false) flag per encoder wheel."""
    travel, body, cov, gyro, model, _ = _make("mecanum", seconds=12.0, slip=(1, 4.0, 6.0, 1.0, 0.05),
                                              gyro_offset=(8.0, 10.0, 0.5))
    on = detect_slip_table(model, travel, body, cov, gyro, Settings())
    assert on.slip.any()
    off_settings = Settings().with_values({"slip.enabled": False})
    off = detect_slip_table(model, travel, body, cov, gyro, off_settings)
    assert not off.slip.any() and off.wheel_flags.shape == (len(travel.dt_s), 4) and not off.wheel_flags.any()
    st = TableSlipMonitor(model, off_settings).step(SampleStatus.USED, 10, DT, [0.01] * 4, None, [0.01, 0, 0],
                                                    [0.0] * 6, [0.0] * 4, 0.0)
    assert not st.slip and st.wheel_flags == (False,) * 4
