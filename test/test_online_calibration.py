"""Online self-calibration (wheel_dr.core.online_calibration): alert timing, accuracy, no false alerts,
consistent standard errors, batch equal to streaming.

The drives are simulated (wheel_dr.sim) with the demo cart "Quokka" (invented numbers); the gyro reads
the true yaw rate plus a bias and white noise. Truth comes from the simulator's true geometry: the
heading change of a differential drive is (R_r phi_r - R_l phi_l) / B (Siegwart et al. 2011,
sec. 3.2.1), so the observable quantities are R_r / R_l and B / mean(R_l, R_r).
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from wheel_dr.core import Estimator, Settings, run
from wheel_dr.core.online_calibration import OnlineCalibrator, online_calibration, suggested_geometry
from wheel_dr.core.slip import detect_slip
from wheel_dr.core.wheels import wheel_travel
from wheel_dr.demo.scenarios import varied_route
from wheel_dr.sim import RadiusChange, Scenario, SlipEvent, pause, simulate, straight

R0, B0 = 0.0825, 0.412          # demo cart nominal radius and track (invented, wheel_dr.demo.quokka)
K_M = 2e-5                      # wheel travel variance per metre, simulated and configured alike
GYRO_SD, GYRO_BIAS = 0.005, 0.003   # gyro white noise per reading and bias (rad/s), MEMS-like (common practice)
CHANGE_S = 300.0


def _scenario(duration_s=600.0, route_seed=3, **kw) -> Scenario:
    base = dict(true_left_radius_m=R0, true_right_radius_m=R0, true_track_m=B0, k_left_m=K_M, k_right_m=K_M,
                gyro_bias_radps=GYRO_BIAS, gyro_noise_sd_radps=GYRO_SD)
    base.update(kw)
    segs = kw.pop("segments", None) or varied_route(route_seed, duration_s)
    base.pop("segments", None)
    return Scenario(name="online", segments=tuple(segs), **base)


def _settings(sc: Scenario, **extra) -> Settings:
    values = {**sc.nominal_params, "noise.k_left": K_M, "noise.k_right": K_M, "slip.gyro_noise_radps": GYRO_SD,
              "online_calibration.enabled": True}
    values.update(extra)
    return Settings.from_flat(values)


def _batch(sim, settings, use_flags=True):
    tr = wheel_travel(sim.joint_samples(), settings)
    g = sim.gyro_z_radps[tr.index]
    flags = detect_slip(tr, g, settings).slip if use_flags else None
    return online_calibration(tr, g, flags, settings)


@pytest.fixture(scope="module")
def softening_tyre():
    """Ten minutes at 100 Hz; the left tyre loses 1.5 % of its radius halfway through."""
    sc = _scenario(radius_changes=(RadiusChange(CHANGE_S, "left", -0.015),))
    sim = simulate(sc, 0)
    return sim, _batch(sim, _settings(sc))


def test_alert_comes_within_60_s_of_a_tyre_change_and_not_before(softening_tyre):
    sim, res = softening_tyre
    t = res.t_s - sim.stamp_ns[0] * 1e-9
    assert not res.alert[t < CHANGE_S].any()
    first = t[np.flatnonzero(res.alert)[0]]
    assert CHANGE_S < first <= CHANGE_S + 60.0
    assert res.alert_ratio[t > first].all()        # held while the tyre stays soft (hysteresis)


def test_final_estimates_match_the_changed_geometry(softening_tyre):
    _, res = softening_tyre
    r_left = R0 * (1 - 0.015)
    ratio = R0 / r_left
    track = B0 / (0.5 * (R0 + r_left))
    assert abs(res.radius_ratio[-1] / ratio - 1) < 0.003
    assert abs(res.track_over_radius[-1] / track - 1) < 0.005
    # the gyro bias is estimated with them (simulated bias GYRO_BIAS)
    assert abs(res.gyro_bias_radps[-1] - GYRO_BIAS) < 4 * res.gyro_bias_se_radps[-1] + 2e-4
    # suggested values keep the configured mean radius (the gyro cannot see the scale)
    left, right, track_m = res.suggested()
    assert math.isclose(0.5 * (left + right), R0, rel_tol=1e-12)
    assert math.isclose(right / left, res.radius_ratio[-1], rel_tol=1e-12)
    assert math.isclose(track_m / R0, res.track_over_radius[-1], rel_tol=1e-12)


def test_control_drive_without_change_gives_no_alert():
    sc = _scenario()
    res = _batch(simulate(sc, 1), _settings(sc))
    assert not res.alert.any()
    assert res.excited_ratio[-1]          # it could have seen a change: silence is not blindness


def test_slip_events_without_change_give_no_alert():
    events = tuple(SlipEvent(30.0 + 50.0 * i, 1.0, side=("left", "right")[i % 2], kind=("spin", "drag")[i % 2],
                             slip_ratio=0.3) for i in range(11))
    sc = _scenario(slip_events=events)
    sim = simulate(sc, 2)
    settings = _settings(sc)
    res = _batch(sim, settings)
    assert not res.alert.any()
    assert res.intervals_skipped > 50            # the flagged intervals were left out


def test_gyro_bias_alone_gives_no_alert():
    sc = _scenario(gyro_bias_radps=0.02)        # a large bias (about 1 deg/s)
    res = _batch(simulate(sc, 3), _settings(sc))
    assert not res.alert.any()
    assert abs(res.gyro_bias_radps[-1] - 0.02) < 1e-3


def test_a_drive_that_never_turns_reports_too_little_excitation_not_an_alert():
    segs = [straight(8.0, 0.6), pause(1.0), straight(-8.0, 0.6), pause(1.0)] * 12
    sc = _scenario(segments=segs, radius_changes=(RadiusChange(30.0, "both", -0.02),))  # needs turning to see
    res = _batch(simulate(sc, 4), _settings(sc))
    assert not res.alert.any()
    assert not res.excited_track[-1]             # track over radius needs turning
    assert res.excited_ratio[-1]                 # the ratio is seen on straight runs


def test_standard_errors_are_consistent_over_40_seeds():
    """Mean square of the normalised errors of the final estimates is inside the chi-square interval:
    sum of 40 squared standard normals ~ chi2(40) (scipy.stats.chi2), 99 % two-sided per quantity."""
    sc = Scenario(name="nees", segments=varied_route(5, 150.0), true_left_radius_m=0.0829,
                  true_right_radius_m=0.0822, true_track_m=0.4185, k_left_m=K_M, k_right_m=K_M,
                  gyro_bias_radps=-0.002, gyro_noise_sd_radps=GYRO_SD)
    settings = _settings(sc)
    ratio, track = 0.0822 / 0.0829, 0.4185 / (0.5 * (0.0829 + 0.0822))
    zr, zt = [], []
    for seed in range(40):
        res = _batch(simulate(sc, 100 + seed), settings)
        zr.append((res.radius_ratio[-1] - ratio) / res.radius_ratio_se[-1])
        zt.append((res.track_over_radius[-1] - track) / res.track_over_radius_se[-1])
    lo, hi = stats.chi2.ppf([0.005, 0.995], 40) / 40
    assert lo < np.mean(np.square(zr)) < hi
    assert lo < np.mean(np.square(zt)) < hi


def test_batch_equals_streaming_sample_by_sample():
    """The same intervals, estimates and alerts from the batch form and the per-sample form (exactly:
    both sum the same floats in the same order and share the interval update)."""
    sc = _scenario(duration_s=120.0, radius_changes=(RadiusChange(40.0, "left", -0.03),),
                   slip_events=(SlipEvent(20.0, 1.0, "right", "spin", 0.3),))
    sim = simulate(sc, 5)
    settings = _settings(sc, **{"online_calibration.horizon_m": 15.0, "online_calibration.alert_pct": 1.0})
    gyro = sim.gyro_z_radps.copy()
    gyro[500:520] = np.nan                                   # an IMU dropout
    traj = run(sim.joint_samples(), settings, gyro_z_radps=gyro)
    res = traj.online
    assert res is not None and len(res) > 1000 and res.alert.any()
    est = Estimator(settings)
    names = list(sim.joint_names)
    rows = []
    for k in range(len(sim.stamp_ns)):
        g = None if math.isnan(gyro[k]) else float(gyro[k])
        est.step(int(sim.stamp_ns[k]), names, sim.position_rad[k].tolist(), sim.velocity_radps[k].tolist(), g)
        on = est.online
        if on.stamp_ns == int(sim.stamp_ns[k]):
            rows.append((on.stamp_ns, on.ratio, on.ratio_se, on.track, on.track_se, on.bias, on.bias_se, on.alert,
                         on.on_ratio, on.on_track, on.excited_ratio, on.excited_track))
    assert len(rows) == len(res)
    got = np.array(rows, dtype=np.float64)
    want = np.column_stack([res.stamp_ns, res.radius_ratio, res.radius_ratio_se, res.track_over_radius,
                            res.track_over_radius_se, res.gyro_bias_radps, res.gyro_bias_se_radps, res.alert,
                            res.alert_ratio, res.alert_track, res.excited_ratio, res.excited_track]).astype(np.float64)
    assert np.array_equal(got, want)


def test_off_by_default_and_without_gyro():
    sc = _scenario(duration_s=20.0)
    sim = simulate(sc, 6)
    assert run(sim.joint_samples(), Settings.from_flat(sc.nominal_params), gyro_z_radps=sim.gyro_z_radps).online is None
    assert run(sim.joint_samples(), _settings(sc)).online is None
    assert Estimator(Settings()).online is None


def test_suggested_geometry_keeps_the_mean_radius():
    left, right, track = suggested_geometry(1.02, 5.0, 0.08, 0.09)
    assert math.isclose(0.5 * (left + right), 0.085, rel_tol=1e-12)
    assert math.isclose(right / left, 1.02, rel_tol=1e-12)
    assert math.isclose(track, 5.0 * 0.085, rel_tol=1e-12)


def test_streaming_never_raises_on_a_bad_gyro_value():
    sc = _scenario(duration_s=5.0)
    oc = OnlineCalibrator(_settings(sc))
    for i, g in enumerate((0.1, "x", float("inf"), None, 1e9, 0.0)):
        oc.step(1_000_000_000 + i * 50_000_000, False, 0.05, 0.01, 0.012, g, False)
    assert math.isfinite(oc.ratio)


def test_a_distance_source_makes_the_scale_observable():
    """Both tyres 2 % smaller than configured: the gyro cannot see it (ratio unchanged, and the track over
    radius moves only with turning); a pose source (the simulator's truth with 1 cm noise, 10 Hz) gives the
    scale, so all of left radius, right radius and track are suggested (scale = true / configured mean radius)."""
    sc = _scenario(duration_s=240.0, true_left_radius_m=R0 * 0.98, true_right_radius_m=R0 * 0.98)
    sim = simulate(sc, 7)
    settings = _settings(sc, **{"online_calibration.reference_topic": "/localisation/pose"})
    est = Estimator(settings)
    rng = np.random.default_rng(7)
    names = list(sim.joint_names)
    for k in range(len(sim.stamp_ns)):
        est.step(int(sim.stamp_ns[k]), names, sim.position_rad[k].tolist(), sim.velocity_radps[k].tolist(),
                 float(sim.gyro_z_radps[k]))
        if k % 10 == 0:
            x, y = sim.true_x_m[k] + 0.01 * rng.standard_normal(), sim.true_y_m[k] + 0.01 * rng.standard_normal()
            est.online.scale.add(x, y, 1e-4, est.x_m, est.y_m)
    scale = est.online.scale
    assert scale.ready and scale.windows > 50
    assert abs(scale.scale - 0.98) < max(4 * scale.se, 1e-3)
    left, right, track = est.online.suggested()
    assert abs(left / (R0 * 0.98) - 1) < 0.005 and abs(right / (R0 * 0.98) - 1) < 0.005
    assert abs(track / B0 - 1) < 0.01
    assert scale.on and est.online.alert_any          # a 2 % scale change alerts once it is seen
    # a relocalisation jump is a rejected window, not a change of scale
    before = scale.scale
    scale.add(est.x_m + 50.0, est.y_m, 1e-4, est.x_m + 1.5, est.y_m)
    assert scale.rejected >= 1 and scale.scale == before
