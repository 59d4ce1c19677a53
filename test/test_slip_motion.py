"""Slip that no heading test sees: the accelerometer-against-wheels and commanded-against-measured detectors.

Drives come from wheel_dr.sim (the project's simulator: the base follows the route exactly, the
encoders misreport under slip, the accelerometer reads the specific force of its mounting point,
REP 103 axes). The demo cart "Quokka" and its numbers are invented (demo only).
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.spatial.transform import Rotation
from scipy.stats import chi2

from wheel_dr.core import Estimator, Settings, run, wheel_travel
from wheel_dr.core.slip import DETECTOR_ACCEL, DETECTOR_COMMAND, DETECTOR_GYRO, DETECTOR_TRACTION
from wheel_dr.core.slip_motion import MotionInputs, body_speed_variance, detect_motion, up_x_from_quaternion
from wheel_dr.sim import HeldEvent, Incline, Scenario, SlipEvent, arc, pause, simulate, straight, turn_in_place

G = 9.80665
SPIN_40 = 1.0 - 1.0 / 1.4     # slip ratio whose wheel surface speed is 1.4 x the body's (spin)
DRAG_40 = 0.4                 # wheel surface speed 0.6 x the body's (drag)
K_M = 2e-5                    # the demo cart's wheel noise (variance per metre), configured as simulated


def _settings(sc: Scenario, **values) -> Settings:
    flat = dict(sc.nominal_params)
    flat.update({"noise.k_left": K_M, "noise.k_right": K_M, "slip.gyro_noise_radps": 0.005})
    flat.update(values)
    return Settings.from_flat(flat)


def _scenario(segments, seed_name: str = "motion", **fields) -> Scenario:
    base = dict(rate_hz=100.0, k_left_m=K_M, k_right_m=K_M, gyro_bias_radps=0.002, gyro_noise_sd_radps=0.004,
                accel_noise_sd_mps2=0.02, accel_bias_mps2=0.04, accel_mps2=0.8, accel_radps2=2.0)
    base.update(fields)
    return Scenario(name=seed_name, segments=tuple(segments), **base)


def _run(sim, settings: Settings, cmd: bool = True, orientation: bool = True):
    return run(sim.joint_samples(), settings, gyro_z_radps=sim.gyro_z_radps, accel_x_mps2=sim.accel_mps2[:, 0],
               up_x=sim.up_x if orientation else None, cmd_v_mps=sim.cmd_v_mps if cmd else None)


def _straights_with_events(seed: int, kind: str, ratio: float, n_events: int = 3):
    """Straights of 8 to 12 m at 0.5 to 0.9 m/s with pauses; in each straight one both-wheel slip of
    1.5 to 3 s, its ratio ramped in over 0.5 s, placed after the speed has settled."""
    rng = np.random.default_rng(900 + seed)
    segs, events, t = [pause(3.0)], [], 1.0 + 3.0
    for _ in range(n_events):
        v = float(rng.uniform(0.5, 0.9))
        length = float(rng.uniform(8.0, 12.0))
        ramp = v / 0.8
        cruise = (length - v * ramp) / v
        d = float(rng.uniform(1.5, 3.0))
        t0 = t + ramp + float(rng.uniform(0.5, cruise - d - 0.5))
        events.append(SlipEvent(t0, d, "both", kind, ratio, ramp_s=0.5))
        segs += [straight(length, v), pause(2.0)]
        t += 2 * ramp + cruise + 2.0
    return _scenario(segs, f"both_{kind}_{seed}", slip_events=tuple(events))


def _recall_after(traj, sim, onset_delay_s: float):
    t = sim.t_s[traj.index]
    inside = np.zeros(len(t), dtype=bool)
    quiet = np.ones(len(t), dtype=bool)
    for ev in sim.scenario.slip_events:
        inside |= (t >= ev.start_s + onset_delay_s) & (t <= ev.start_s + ev.duration_s)
        quiet &= ~((t >= ev.start_s) & (t <= ev.start_s + ev.duration_s + 0.3))   # the event and a 0.3 s tail
    return traj.slip.slip[inside].mean(), traj.slip.slip[quiet].mean(), inside


# ------------------------------------------------------------------------------------------------
# pieces against their sources
# ------------------------------------------------------------------------------------------------
def test_up_axis_from_the_quaternion_matches_scipy_rotation():
    """up_x = x component of the world z axis seen in the body frame (scipy.spatial.transform, a
    reference library): R^T e_z for the body-to-world rotation R."""
    rot = Rotation.random(200, random_state=3)
    q = rot.as_quat()                                   # x y z w
    want = rot.inv().apply([0.0, 0.0, 1.0])[:, 0]
    np.testing.assert_allclose(up_x_from_quaternion(q[:, 0], q[:, 1], q[:, 2], q[:, 3]), want, atol=1e-12)
    # nose up by 5 deg (REP 103: a negative rotation about y): up_x = sin(5 deg)
    nose_up = Rotation.from_euler("y", -5.0, degrees=True).as_quat()
    assert up_x_from_quaternion(*nose_up) == pytest.approx(math.sin(math.radians(5.0)), abs=1e-12)


@pytest.mark.parametrize("model", ["per_wheel", "motion_model"])
def test_wheel_speed_variance_is_the_core_noise_models_c00(model):
    """The gate's wheel variance is C[0,0] of noise.increment_noise (Siegwart et al. 2011 sec. 5.2.4;
    Thrun et al. 2005 sec. 5.4)."""
    from wheel_dr.core.noise import increment_noise

    rng = np.random.default_rng(5)
    dl, dr = rng.normal(0.01, 0.01, 400), rng.normal(0.01, 0.01, 400)
    s = Settings().with_values({"noise.model": model, "noise.k_left": 3e-4})
    n = s.noise
    _, c_in = increment_noise(np.zeros(400), dl, dr, s.wheels.track_width, s.integration, n.model, n.k_left,
                              n.k_right, n.alphas)
    np.testing.assert_allclose(body_speed_variance(dl, dr, s), c_in[:, 0, 0], rtol=1e-13, atol=1e-300)


def test_simulated_accelerometer_integrates_to_the_true_speed():
    """The simulator's accelerometer (IMU at base_link, no noise, level) integrates to the true speed
    change (each reading the mean over its step: sum a dt = v_end - v_start exactly)."""
    sc = _scenario([pause(1.0), straight(4.0, 0.7), arc(1.5, 0.8, 0.5), pause(1.0)],
                   accel_noise_sd_mps2=0.0, accel_bias_mps2=0.0)
    sim = simulate(sc, 0)
    dt = np.diff(sim.t_s)
    v = np.concatenate(([0.0], np.cumsum(sim.accel_mps2[1:, 0] * dt)))
    np.testing.assert_allclose(v, sim.true_v_mps, atol=1e-9)
    # lateral: centripetal v w (rigid-body kinematics, common practice); vertical: g on a level floor
    np.testing.assert_allclose(sim.accel_mps2[:, 1], sim.true_v_mps * sim.true_w_radps, atol=1e-12)
    np.testing.assert_allclose(sim.accel_mps2[:, 2], G, atol=1e-12)


def test_gate_false_alarm_rate_is_the_chi_square_tail_when_the_noise_model_is_right():
    """Wheels with exactly the configured per-wheel noise, the accelerometer with exactly the configured
    white noise, IMU at base_link, the only tolerance the standard error of the standstill bias
    (sd / sqrt(400 readings)): the accelerometer score exceeds 1 on the share of samples that
    chi-square(1) puts above the gate, 1 - cdf(6.63) = 1 % (Bar-Shalom, Li & Kirubarajan 2001,
    sec. 5.4; scipy.stats.chi2). The gate is checked on the observer pulled to the wheels (the
    flag is kept from setting, so no anchor freezes). Windows overlap, so the band is loose."""
    over = []
    for seed in range(3):
        rng = np.random.default_rng(70 + seed)
        segs = [pause(4.0)]
        for _ in range(12):
            segs += [straight(float(rng.uniform(3.0, 8.0)), float(rng.uniform(0.3, 0.9))), pause(float(rng.uniform(0.5, 2)))]
        sc = _scenario(segs, f"chi2_{seed}", true_left_radius_m=0.0825, true_right_radius_m=0.0825,
                       true_track_m=0.412, accel_bias_mps2=0.0, accel_noise_sd_mps2=0.03, gyro_bias_radps=0.0)
        s = _settings(sc, **{"slip.accel_bias_tolerance_mps2": 0.03 / math.sqrt(400.0),
                             "slip.accel_speed_tolerance_mps": 0.0, "slip.accel_scale_tolerance": 0.0,
                             "imu.accel_noise_mps2": 0.03, "slip.set_delay_s": 10.0})
        sim = simulate(sc, seed)
        tv = wheel_travel(sim.joint_samples(), s)
        i = tv.index
        res = detect_motion(tv.stamp_ns, tv.restart, tv.dt_s, tv.ds_left_m, tv.ds_right_m, None,
                            MotionInputs(sim.accel_mps2[i, 0], sim.up_x[i]), s)
        assert not res.accel.any()
        t = sim.t_s[i]
        evaluated = (t > 6.0) & (res.z_accel > 0.0)
        over.append(res.z_accel[evaluated] > 1.0)
    share = np.concatenate(over).mean()
    expected = 1.0 - chi2.cdf(Settings().slip.accel_gate, 1)
    assert expected == pytest.approx(0.01, abs=1e-4)
    assert 0.6 * expected < share < 1.6 * expected, share


# ------------------------------------------------------------------------------------------------
# simulator events
# ------------------------------------------------------------------------------------------------
@pytest.mark.parametrize("kind,ratio", [("spin", SPIN_40), ("drag", DRAG_40)])
def test_both_wheels_slipping_alike_on_a_straight_is_found(kind, ratio):
    """Both wheels 40 % over (spin) or under (drag) the body's speed, onsets ramped over 0.5 s: the
    traction test (mu g, common practice) and the gyro test do not see it; the accelerometer
    detector flags at least 90 % of the slip time from 0.7 s after each onset, and at most 1 % of
    the time outside the events (and a 0.3 s tail)."""
    for seed in range(3):
        sc = _straights_with_events(seed, kind, ratio)
        sim = simulate(sc, seed)
        traj = _run(sim, _settings(sc), cmd=False)
        recall, false, inside = _recall_after(traj, sim, 0.7)
        assert recall >= 0.9, (seed, recall)
        assert false <= 0.01, (seed, false)
        det = traj.slip.detector[inside]
        assert np.all(det[traj.slip.slip[inside]] & DETECTOR_ACCEL)
        assert not np.any(det & (DETECTOR_GYRO | DETECTOR_TRACTION))
        # without the accelerometer nothing sees it (what the heading tests cannot see)
        plain = run(sim.joint_samples(), _settings(sc), gyro_z_radps=sim.gyro_z_radps)
        assert plain.slip.slip[inside].mean() < 0.1


def test_observer_distance_response_keeps_the_heading_and_fixes_the_distance():
    """slip.distance_source 'observer': flagged samples take the observer's distance; the distance run
    over a both-wheel spin is close to the truth, the heading (wheels' source) is unchanged."""
    sc = _straights_with_events(1, "spin", SPIN_40, n_events=2)
    sim = simulate(sc, 1)
    flag = _run(sim, _settings(sc), cmd=False)
    obs = _run(sim, _settings(sc, **{"slip.distance_source": "observer"}), cmd=False)
    np.testing.assert_array_equal(obs.slip.slip, flag.slip.slip)
    np.testing.assert_array_equal(obs.theta_rad, flag.theta_rad)
    true_dist = sim.distance_m
    d_flag = float(np.sum(np.hypot(np.diff(flag.x_m), np.diff(flag.y_m))))
    d_obs = float(np.sum(np.hypot(np.diff(obs.x_m), np.diff(obs.y_m))))
    assert d_flag - true_dist > 1.0          # the spin runs the wheel odometry ahead
    assert abs(d_obs - true_dist) < 0.2 * (d_flag - true_dist)


def test_pushing_against_a_wall_and_a_lifted_base_are_found():
    """A base driving into a wall keeps its wheels turning (held 3 s at 0.6 m/s); a lifted base spins
    its wheels up from standstill: both flagged by the accelerometer detector, and with cmd_vel the
    command detector says the wheels follow the command while the IMU sees no such motion."""
    sc = _scenario([pause(3.0), straight(10.0, 0.6), pause(4.0)],
                   held_events=(HeldEvent(9.0, 3.0, 0.6), HeldEvent(21.0, 3.0, 0.4, ramp_s=0.4)))
    sim = simulate(sc, 4)
    traj = _run(sim, _settings(sc))
    t = sim.t_s[traj.index]
    for ev in sc.held_events:
        inside = (t >= ev.start_s + 0.7) & (t <= ev.start_s + ev.duration_s)
        assert traj.slip.slip[inside].mean() >= 0.9, ev
        assert (traj.slip.detector[inside] & DETECTOR_ACCEL).astype(bool).mean() >= 0.9
        assert (traj.slip.detector[inside] & DETECTOR_COMMAND).astype(bool).mean() >= 0.5
    quiet = np.ones(len(t), dtype=bool)
    for ev in sc.held_events:
        quiet &= ~((t >= ev.start_s) & (t <= ev.start_s + ev.duration_s + 0.3))
    assert traj.slip.slip[quiet].mean() <= 0.01


# ------------------------------------------------------------------------------------------------
# hard cases that must not fire
# ------------------------------------------------------------------------------------------------
def _stop_and_go(seed: int, accel_mps2: float) -> Scenario:
    rng = np.random.default_rng(300 + seed)
    segs = [pause(3.0)]
    for _ in range(10):
        segs += [straight(float(rng.uniform(1.5, 4.0)) * (1 if rng.random() < 0.8 else -1),
                          float(rng.uniform(0.6, 1.2))), pause(float(rng.uniform(0.5, 1.5)))]
    return _scenario(segs, f"stop_go_{seed}", accel_mps2=accel_mps2)


def _tight_turns(seed: int) -> Scenario:
    rng = np.random.default_rng(400 + seed)
    segs = [pause(3.0)]
    for _ in range(12):
        if rng.random() < 0.7:
            segs.append(arc(float(rng.choice([-1, 1]) * rng.uniform(1.5, 3.0)), float(rng.uniform(0.4, 0.6)),
                            float(rng.uniform(0.6, 0.9))))
        else:
            segs.append(turn_in_place(float(rng.choice([-1, 1]) * rng.uniform(1.5, 3.0)), 2.0))
    return _scenario(segs, f"tight_{seed}", imu_position_m=(0.3, 0.0, 0.1), accel_radps2=6.0)


def _ramp(seed: int) -> Scenario:
    segs = [pause(3.0), straight(20.0, 0.7), pause(1.0), straight(-20.0, 0.7), pause(1.0)]
    return _scenario(segs, f"ramp_{seed}", inclines=(Incline(8.0, 12.0, math.radians(5.0), 1.0),
                                                      Incline(40.0, 12.0, math.radians(-5.0), 1.0)))


HARD = {
    # starts and stops at 90 % of mu g (traction limit, common practice; slip.traction_mu 0.5)
    "braking_accelerating_0.9_mu_g": (lambda sd: _stop_and_go(sd, 0.9 * 0.5 * G), {}, True),
    # a 5 degree ramp up and down, gravity removed with the IMU orientation
    "ramp_5_deg_with_orientation": (_ramp, {}, True),
    # the same without orientation: the slope goes into the allowance
    "ramp_5_deg_allowance": (_ramp, {"imu.max_slope_deg": 5.0}, False),
    # IMU 0.3 m ahead of base_link in tight turns (0.4-0.6 m radius), lever arm from the parameters
    "imu_0.3_m_ahead_tight_turns": (_tight_turns, {"imu.position_m": [0.3, 0.0, 0.1]}, True),
    # accelerometer three times noisier than configured and biased by 0.15 m/s^2 (standstill first)
    "noisy_biased_accelerometer": (lambda sd: _stop_and_go(sd, 0.8).with_values(accel_noise_sd_mps2=0.06,
                                                                              accel_bias_mps2=0.15), {}, True),
}


@pytest.mark.parametrize("name", list(HARD))
def test_hard_cases_do_not_fire(name):
    """No slip in these drives: the accelerometer and command detectors flag at most 1 % of the time."""
    build, values, orientation = HARD[name]
    for seed in range(2):
        sc = build(seed)
        sim = simulate(sc, seed)
        traj = _run(sim, _settings(sc, **values), orientation=orientation)
        ours = (traj.slip.detector & (DETECTOR_ACCEL | DETECTOR_COMMAND)).astype(bool)
        assert ours.mean() <= 0.01, (name, seed, ours.mean(), traj.slip.score.max())


def test_the_lever_arm_correction_is_what_keeps_tight_turns_quiet():
    """Same tight turns with the IMU 0.3 m ahead but configured at base_link: the centripetal term
    w^2 l_x (rigid-body kinematics) is then read as braking and the detector fires."""
    sc = _tight_turns(0)
    sim = simulate(sc, 0)
    traj = _run(sim, _settings(sc))
    assert (traj.slip.detector & DETECTOR_ACCEL).astype(bool).mean() > 0.05


def test_unknown_acceleration_switches_the_detector_off():
    """Imu messages with linear_acceleration_covariance[0] == -1 reach the core as NaN: no accelerometer
    flag, even over a both-wheel spin (sensor_msgs/Imu message definition)."""
    sc = _straights_with_events(0, "spin", SPIN_40, n_events=1)
    sim = simulate(sc, 0)
    nan = np.full(len(sim.stamp_ns), np.nan)
    traj = run(sim.joint_samples(), _settings(sc), gyro_z_radps=sim.gyro_z_radps, accel_x_mps2=nan)
    assert not np.any(traj.slip.detector & DETECTOR_ACCEL)


# ------------------------------------------------------------------------------------------------
# batch == streaming
# ------------------------------------------------------------------------------------------------
@pytest.mark.parametrize("values", [{}, {"slip.distance_source": "observer", "slip.response": "inflate"},
                                    {"noise.model": "motion_model", "slip.response": "gyro",
                                     "imu.position_m": [0.2, 0.05, 0.0]}],
                         ids=["flag", "observer_inflate", "motion_model_gyro"])
def test_batch_equals_streaming_sample_by_sample(values):
    """DESIGN.md: batch and streaming agree; here exactly (same additions in the same order), with
    spin, drag and held events, accelerometer dropouts, a gap and commands."""
    sc = _scenario([pause(3.0), straight(8.0, 0.7), arc(1.2, 1.0, 0.5), straight(6.0, 0.6), pause(3.0)],
                   slip_events=(SlipEvent(6.0, 2.0, "both", "spin", SPIN_40, ramp_s=0.5),
                                SlipEvent(18.0, 1.5, "both", "drag", DRAG_40, ramp_s=0.3)),
                   held_events=(HeldEvent(24.0, 2.0, 0.6),), imu_position_m=(0.2, 0.05, 0.0))
    sim = simulate(sc, 9)
    s = _settings(sc, **values)
    samples = sim.joint_samples()
    keep = np.ones(len(samples), dtype=bool)
    keep[1500:1560] = False                       # a 0.6 s gap restarts the chain
    samples.stamp_ns, samples.position, samples.velocity = (samples.stamp_ns[keep], samples.position[keep],
                                                            samples.velocity[keep])
    acc = sim.accel_mps2[keep, 0].copy()
    acc[700:720] = np.nan                         # accelerometer dropouts
    up, cmd, gyro = sim.up_x[keep], sim.cmd_v_mps[keep].copy(), sim.gyro_z_radps[keep]
    cmd[900:1000] = np.nan                        # stale command
    traj = run(samples, s, gyro_z_radps=gyro, accel_x_mps2=acc, up_x=up, cmd_v_mps=cmd)
    assert traj.counters["gap"] == 1
    assert np.any(traj.slip.detector & DETECTOR_ACCEL) and np.any(traj.slip.detector & DETECTOR_COMMAND)
    est = Estimator(s)
    steps, xs, covs = [], [], []
    for i in range(len(samples)):
        a = None if not np.isfinite(acc[i]) else float(acc[i])
        c = None if not np.isfinite(cmd[i]) else float(cmd[i])
        st = est.step(int(samples.stamp_ns[i]), samples.names, samples.position[i], samples.velocity[i],
                      float(gyro[i]), a, float(up[i]), c)
        if st < 10:
            steps.append(est.last_slip)
            xs.append((est.x_m, est.y_m, est.theta_rad))
            covs.append(est.cov.copy())
    sr = traj.slip
    for field in ("slip", "left", "right", "detector", "score"):
        np.testing.assert_array_equal(np.array([getattr(x, field) for x in steps]), getattr(sr, field), err_msg=field)
    np.testing.assert_array_equal(np.array([x.accel_bias_mps2 for x in steps]), sr.accel_bias_mps2)
    pose = np.array(xs)
    np.testing.assert_allclose(pose[:, 0], traj.x_m, rtol=0, atol=1e-9)
    np.testing.assert_allclose(pose[:, 2], traj.theta_rad, rtol=0, atol=1e-12)
    np.testing.assert_allclose(np.array(covs), traj.cov, rtol=1e-9, atol=1e-15)


def test_motion_inputs_of_another_length_are_per_accepted_sample():
    """MotionInputs are read per accepted sample, as the gyro (run picks them with travel.index)."""
    sc = _straights_with_events(2, "spin", SPIN_40, n_events=1)
    sim = simulate(sc, 2)
    traj = _run(sim, _settings(sc))
    assert isinstance(MotionInputs(), MotionInputs)
    assert len(traj.slip.accel_bias_mps2) == len(traj)
    # the bias estimated at standstill approaches the simulated 0.04 m/s^2 (400 standstill readings
    # of 0.02 m/s^2 noise: standard error 0.001)
    assert traj.slip.accel_bias_mps2[-1] == pytest.approx(0.04, abs=0.005)
