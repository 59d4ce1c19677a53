"""The wheel-table simulator, its URDF and the `synth --base` / replay round trip, checked against outside facts.

* Inverse kinematics: the simulated wheel readings run back through ``WheelTable.increment``
  give the route's body increments (the rolling and sliding equations of Siegwart, Nourbakhsh &
  Scaramuzza 2011, sec. 3.2).
* A constant twist held for T seconds ends at the SE(2) exponential of T times it (Sola, Deray &
  Atchuthan 2018, eq. 156), evaluated with scipy's matrix exponential.
* Noise: standardised wheel and steering errors are N(0, 1), their sums of squares inside the
  chi-square 99.9 % interval from scipy.stats.
* URDF: a wheel table written as URDF reads back its contact points and radii (the URDF
  specification's joint origins and cylinder radius, wiki.ros.org/urdf/XML).
* Real bags written with rosbags, read back by `wheel-dr replay` in the same process (no mocks).
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from rosbags.highlevel import AnyReader
from scipy.linalg import expm
from scipy.stats import chi2

from wheel_dr.bags.urdf import table_geometry_from_urdf
from wheel_dr.cli import main, params_path_for
from wheel_dr.core import Settings, run
from wheel_dr.core.errors import InputError
from wheel_dr.demo.vehicles import TABLE_KINDS, params_text, table_scenario, vehicle
from wheel_dr.params import load_settings
from wheel_dr.sim.table import TableScenario, TwistLeg, WheelSlip, rolling_travel, simulate_table, table_urdf

REPO = Path(__file__).resolve().parents[1]


def _increment_from_readings(sim):
    """Body increments from what the bag would carry: differenced spin angles x true radius, and per
    step the mean of its two end steering readings (the estimator's convention)."""
    table = sim.scenario.table
    steer = sim.steer_readings()
    step_steer = 0.5 * (steer[1:] + steer[:-1]) if steer.shape[1] else None
    return table.increment(sim.spin_travel_m(), step_steer)


@pytest.mark.parametrize("kind", TABLE_KINDS)
def test_readings_run_back_through_the_table_reproduce_the_route(kind):
    # Siegwart et al. 2011, sec. 3.2: with noise off the wheels' rolling equations and the sliding
    # equations hold exactly, so the table's solution is the route's body increment.
    sim = simulate_table(table_scenario(kind, noise=False, slip=False), seed=1)
    tau = _increment_from_readings(sim)
    assert np.max(np.abs(tau - sim.true_increment[1:])) < 1e-9
    assert sim.distance_m > 5.0 and np.ptp(sim.true_theta_rad) > 1.0          # it did drive and turn
    if kind in ("mecanum", "omni", "swerve"):                                   # holonomic kinds also strafe
        assert np.max(np.abs(sim.true_twist[:, 1])) > 0.25
    else:                                                                       # steered kinds: arcs both ways
        assert sim.true_twist[:, 2].max() > 0.2 and sim.true_twist[:, 2].min() < -0.2
        assert sim.true_twist[:, 0].min() < -0.2                                # and backwards
    if kind == "ackermann":                                                     # a car cannot strafe
        assert np.max(np.abs(sim.true_twist[:, 1])) < 1e-4
    if kind == "tricycle":       # base_link 0.2 m ahead of the rear axle: vy = -wz x_rear = 0.2 wz
        np.testing.assert_allclose(sim.true_twist[:, 1], 0.2 * sim.true_twist[:, 2], atol=1e-4)
    steer = sim.steer_readings()
    if steer.shape[1]:           # steered at rest, never flipped: well inside the estimator's rate limit
        rate = np.abs(np.diff(steer, axis=0)) * sim.scenario.rate_hz
        assert rate.max() < 0.5 * Settings().limits.max_steer_rate_radps
    else:                        # unsteered wheels: the simulator's rolling equations are the core's inverse
        spin, _ = sim.scenario.table.inverse(sim.true_twist[1:], np.diff(sim.stamp_ns) * 1e-9)
        np.testing.assert_allclose(spin, sim.true_spin_m[1:], rtol=0, atol=1e-15)


@pytest.mark.parametrize("kind", TABLE_KINDS)
def test_a_constant_twist_ends_at_the_se2_exponential(kind):
    # Sola, Deray & Atchuthan 2018, eq. 156: holding (vx, vy, wz) for T seconds moves the base by
    # exp(T [[0, -wz, vx], [wz, 0, vy], [0, 0, 0]]); scipy's expm evaluates it independently.
    v = vehicle(kind)
    twist = {"tricycle": (0.5, 0.2 * 0.4, 0.4), "ackermann": (0.5, 0.0, -0.3)}.get(kind, (0.3, -0.2, 0.5))
    sc = TableScenario("constant", v.table("true"), (TwistLeg(3.0, *twist),), blend_s=0.0, lead_in_s=1.0)
    sim = simulate_table(sc)
    vx, vy, wz = twist
    pose = expm(3.0 * np.array([[0.0, -wz, vx], [wz, 0.0, vy], [0.0, 0.0, 0.0]]))
    end = int(round(4.0 * sc.rate_hz))                                   # the leg ends at t = 4 s
    assert abs(sim.true_x_m[end] - pose[0, 2]) < 1e-9 and abs(sim.true_y_m[end] - pose[1, 2]) < 1e-9
    assert abs(sim.true_theta_rad[end] - 3.0 * wz) < 1e-12
    assert sim.true_x_m[-1] == sim.true_x_m[end] and sim.true_theta_rad[-1] == sim.true_theta_rad[end]


def test_noise_has_the_configured_variance_and_one_wheel_slips():
    sc = table_scenario("swerve", laps=3)
    sim = simulate_table(sc, seed=11)
    clean = simulate_table(sc.with_values(k_wheels=0.0, steer_sd_rad=0.0, gyro_bias_radps=0.0,
                                          gyro_noise_sd_radps=0.0, slips=()), seed=11)
    meas, true = sim.spin_travel_m(), clean.true_spin_m[1:]
    slip = sim.slip_wheels[1:]
    k = sc.k_per_wheel()[sc.table.spin]
    moving = np.abs(true) > 1e-4
    ok = moving & ~slip
    z = (meas - true)[ok] / np.sqrt((k[None, :] * np.abs(true))[ok])     # variance k |ds| of the true step
    lo, hi = chi2.ppf([0.0005, 0.9995], z.size)          # chi-square 99.9 % interval (scipy.stats)
    assert lo < np.sum(z * z) < hi
    zs = (sim.steer_readings() - clean.true_steer_rad).ravel() / sc.steer_sd_rad
    lo, hi = chi2.ppf([0.0005, 0.9995], zs.size)
    assert lo < np.sum(zs * zs) < hi
    # gyro: mean error = bias within 4 standard errors of the mean (white noise, common practice)
    err = sim.gyro_z_radps - clean.true_twist[:, 2]
    assert abs(err.mean() - sc.gyro_bias_radps) < 4 * sc.gyro_noise_sd_radps / math.sqrt(len(err))
    # the slip: only the named wheel, only while it moves, labelled with its joint
    (s_ev,) = sc.slips
    col = list(sim.spin_joints).index(s_ev.joint)
    assert slip[:, col].sum() > 100 and not np.delete(slip, col, axis=1).any()
    assert list(sim.slip_joint) == [s_ev.joint] and list(sim.slip_kind) == [s_ev.kind]
    noise_free = simulate_table(sc.with_values(k_wheels=0.0, steer_sd_rad=0.0), seed=11).spin_travel_m()
    ratio = noise_free[slip[:, col], col] / true[slip[:, col], col]
    np.testing.assert_allclose(ratio, 1.0 / (1.0 - s_ev.slip_ratio), rtol=1e-9)   # spin: r w = v / (1 - s)
    first, last = sim.slip_intervals_ns[0]
    t = sim.stamp_ns[1:][slip[:, col]]
    assert (first, last) == (t[0], t[-1])


def test_a_drag_slows_the_wheel_and_bad_scenarios_are_refused():
    v = vehicle("mecanum")
    legs = (TwistLeg(4.0, 0.4),)
    sc = TableScenario("drag", v.table("true"), legs, slips=(WheelSlip(v.slip_joint, 2.0, 1.0, "drag", 0.2),))
    sim = simulate_table(sc)
    col = list(sim.spin_joints).index(v.slip_joint)
    hit = sim.slip_wheels[1:, col]
    np.testing.assert_allclose(sim.spin_travel_m()[hit, col] / sim.true_spin_m[1:][hit, col], 0.8, rtol=1e-9)
    with pytest.raises(ValueError, match="not a spin joint"):
        TableScenario("bad", v.table("true"), legs, slips=(WheelSlip("no_such_joint", 1.0, 1.0),))
    with pytest.raises(ValueError, match="one per wheel"):
        TableScenario("bad", v.table("true"), legs, k_wheels=(1e-5, 1e-5))


@pytest.mark.parametrize("kind", TABLE_KINDS)
def test_urdf_round_trip_gives_the_tables_positions_and_radii(kind):
    # URDF specification: joint origins compose along the chain; the wheel's cylinder carries its radius.
    table = vehicle(kind).table("true")
    text = table_urdf(table, vehicle(kind).robot_name)
    g = table_geometry_from_urdf(text, table.wheel_joints, table.steer_joints)
    np.testing.assert_allclose(g.wheel_x, table.x, rtol=0, atol=1e-12)
    np.testing.assert_allclose(g.wheel_y, table.y, rtol=0, atol=1e-12)
    np.testing.assert_allclose(g.wheel_radius, table.radius, rtol=0, atol=1e-12)
    # a wheel without an encoder is placed by its steering joint (the car's front wheels)
    assert [bool(j) for j in table.wheel_joints] == [j in g.joints for j in table.wheel_joints]


def test_urdf_reader_names_what_is_missing():
    table = vehicle("ackermann").table("nominal")
    text = table_urdf(table, "emu")
    with pytest.raises(InputError, match="joint 'nope' is not in the robot description"):
        table_geometry_from_urdf(text, ["nope"] + list(table.wheel_joints[1:]), table.steer_joints)
    with pytest.raises(InputError, match="names neither a spin nor a steering joint"):
        table_geometry_from_urdf(text, table.wheel_joints, ["", ""] + list(table.steer_joints[2:]))
    with pytest.raises(InputError, match="not valid URDF XML"):
        table_geometry_from_urdf("<robot", table.wheel_joints, table.steer_joints)
    no_radius = text.replace("<cylinder", "<sphere")
    with pytest.raises(InputError, match="has no cylinder radius"):
        table_geometry_from_urdf(no_radius, table.wheel_joints, table.steer_joints)


@pytest.mark.parametrize("kind", TABLE_KINDS)
def test_example_parameters_files_load_and_match_the_vehicle(kind, tmp_path):
    path = REPO / "config" / f"example_{kind}.yaml"
    lines = path.read_text(encoding="utf-8").splitlines()
    assert lines[0].startswith("# description: ") and "invented" in lines[0] + lines[1] + lines[2]
    assert any("not a safety function" in ln for ln in lines if ln.startswith("#"))
    model = load_settings(path).drive_model()
    nominal = vehicle(kind).table("nominal")
    assert model.kind == kind and model.wheel_joints == nominal.wheel_joints
    assert model.steer_joints == nominal.steer_joints
    for a, b in ((model.x, nominal.x), (model.y, nominal.y), (model.radius, nominal.radius),
                 (model.mount, nominal.mount), (model.roller, nominal.roller), (model.offset, nominal.offset)):
        np.testing.assert_array_equal(a, b)
    # the parameters file synth writes (no geometry) plus the vehicle's URDF give the same table
    (tmp_path / "p.yaml").write_text(params_text(kind, geometry=False), encoding="utf-8")
    partial = load_settings(tmp_path / "p.yaml")
    assert not partial.drive.wheel_x
    g = table_geometry_from_urdf(table_urdf(nominal, vehicle(kind).robot_name), partial.drive.wheel_joints,
                                 partial.drive.steer_joints)
    filled = partial.with_values({"drive.wheel_x": list(g.wheel_x), "drive.wheel_y": list(g.wheel_y),
                                  "drive.wheel_radius": list(g.wheel_radius)}).drive_model()
    assert filled.geometry() == model.geometry()


def test_synth_base_mecanum_writes_a_bag_that_replay_reads(tmp_path, capsys):
    bag = tmp_path / "numbat"
    assert main(["synth", str(bag), "--base", "mecanum", "--no-noise", "--no-slip", "--seed", "3"]) == 0
    params = params_path_for(bag)
    assert params.is_file() and (bag / "metadata.yaml").is_file()
    assert "wheel_x" not in params.read_text()                       # positions and radii from the URDF
    out = tmp_path / "replay"
    assert main(["replay", str(bag), "--params", str(params), "--out", str(out)]) == 0
    text = capsys.readouterr().out
    assert "and the URDF on /robot_description (wheel_x, wheel_y, wheel_radius" in text
    shown = float(text.split("wheel distance ")[1].split(" m")[0])      # mean travel of the four wheels
    rows = np.genfromtxt(out / "trajectory.csv", delimiter=",", names=True)
    # the replayed trajectory equals the core run on the simulator's readings with the nominal table
    # given in full (config/example_mecanum.yaml): the URDF filled the same geometry
    sc = table_scenario("mecanum", noise=False, slip=False)
    sim = simulate_table(sc, 3)
    ref = run(sim.joint_samples(), load_settings(REPO / "config" / "example_mecanum.yaml"),
              gyro_z_radps=sim.gyro_z_radps)
    assert len(rows) == len(ref) == len(sim)
    assert abs(shown - np.mean(np.abs(sim.true_spin_m).sum(axis=0))) < 0.1   # nominal radii: within 0.6 %
    np.testing.assert_allclose(rows["x"], ref.x_m, rtol=0, atol=1e-8)
    np.testing.assert_allclose(rows["y"], ref.y_m, rtol=0, atol=1e-8)
    np.testing.assert_allclose(rows["vy"], ref.vy_mps, rtol=0, atol=1e-8)
    # the bag's ground truth carries the lateral speed (nav_msgs/Odometry twist.linear.y, base frame)
    with AnyReader([bag]) as reader:
        conns = [c for c in reader.connections if c.topic == "/ground_truth"]
        truth = [(t, reader.deserialize(raw, c.msgtype).twist.twist.linear.y) for c, t, raw in reader.messages(conns)]
    at = np.searchsorted(sim.stamp_ns, [t for t, _ in truth])
    np.testing.assert_allclose([vy for _, vy in truth], sim.true_vy_mps[at], rtol=0, atol=1e-12)
    assert max(abs(vy) for _, vy in truth) > 0.25
    # and it follows the truth up to the nominal-against-true geometry (radii 0.6 %, y 1 %)
    end = math.hypot(rows["x"][-1] - sim.true_x_m[-1], rows["y"][-1] - sim.true_y_m[-1])
    assert end < 0.03 * sim.distance_m


def test_synth_base_refuses_a_differential_scenario(tmp_path, capsys):
    code = main(["synth", str(tmp_path / "x"), "--base", "omni", "--scenario", "varied"])
    err = capsys.readouterr().err.strip()
    assert code == 2 and len(err.splitlines()) == 1 and "--scenario varied is for differential bases" in err
    assert not (tmp_path / "x").exists() and not params_path_for(tmp_path / "x").exists()
