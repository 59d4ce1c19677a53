"""Replay of real bags equals the streaming core sample by sample; the replay outputs read back."""
from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np
import pytest
from rosbags.highlevel import AnyReader

from test_bags_support import write_short_bag
from wheel_dr.runs import load_settings_file, replay_run
from wheel_dr.bags import read_run, read_tum
from wheel_dr.cli import TRAJECTORY_COLUMNS, main
from wheel_dr.core import Estimator, SampleStatus
from wheel_dr.params import atomic_write_text


@pytest.fixture(scope="module")
def bag_and_params(tmp_path_factory):
    d = tmp_path_factory.mktemp("replay")
    bag, sim = write_short_bag(d / "drive", "mcap")
    params = d / "params.yaml"
    atomic_write_text(params, "/**:\n  ros__parameters:\n    wheels:\n"
                      "      left_joints: [quokka_left_wheel_joint]\n      right_joints: [quokka_right_wheel_joint]\n"
                      "      left_radius: 0.0829\n      right_radius: 0.0822\n      track_width: 0.4185\n"
                      "    noise:\n      k_left: 2.0e-05\n      k_right: 2.0e-05\n")
    return bag, params, sim, d


@pytest.mark.parametrize("fmt", ["mcap", "sqlite3", "ros1"])
def test_replay_equals_streaming_estimator(tmp_path, fmt):
    """Each message deserialised by rosbags and fed to Estimator.step (gyro, x acceleration and orientation:
    the latest IMU reading at or before the joint stamp; command: the latest cmd_vel, if not older than
    slip.command_timeout_s) gives the batch replay's pose, covariance and slip flags at every sample."""
    bag, _ = write_short_bag(tmp_path / ("d.bag" if fmt == "ros1" else "d"), fmt)
    sf = load_settings_file(None)
    data = read_run(bag)
    res = replay_run(data, sf)
    traj = res.trajectory
    est = Estimator(res.settings)
    joints, imu, cmds = [], [], []
    with AnyReader([Path(bag)]) as reader:
        conns = [c for c in reader.connections if c.topic in ("/joint_states", "/imu", "/cmd_vel")]
        for c, rec, raw in reader.messages(connections=conns):
            m = reader.deserialize(raw, c.msgtype)
            if c.topic == "/cmd_vel":
                cmds.append((rec, m.linear.x))
                continue
            stamp = m.header.stamp.sec * 10**9 + m.header.stamp.nanosec
            (joints if c.topic == "/joint_states" else imu).append((stamp, m))
    imu.sort(key=lambda p: p[0])
    k, kc = -1, -1
    timeout_ns = res.settings.slip.command_timeout_s * 1e9
    rows = []
    for stamp, m in joints:
        while k + 1 < len(imu) and imu[k + 1][0] <= stamp:
            k += 1
        while kc + 1 < len(cmds) and cmds[kc + 1][0] <= stamp:
            kc += 1
        gyro = imu[k][1].angular_velocity.z if k >= 0 else float("nan")
        accel = up = cmd = None
        if k >= 0:
            i = imu[k][1]
            accel = i.linear_acceleration.x if i.linear_acceleration_covariance[0] != -1 else None
            o = i.orientation
            up = 2.0 * (o.x * o.z - o.w * o.y) if i.orientation_covariance[0] != -1 else None
        if kc >= 0 and stamp - cmds[kc][0] <= timeout_ns:
            cmd = cmds[kc][1]
        status = est.step(stamp, list(m.name), list(m.position), list(m.velocity), gyro, accel, up, cmd)
        if status < 10:
            rows.append((est.x_m, est.y_m, est.yaw_rad, est.cov.copy(), est.last_slip.slip))
    assert len(rows) == len(traj) == len(joints)
    x = np.array([r[0] for r in rows])
    y = np.array([r[1] for r in rows])
    cov = np.array([r[3] for r in rows])
    assert np.allclose(x, traj.x_m, atol=1e-9) and np.allclose(y, traj.y_m, atol=1e-9)
    assert np.allclose(np.array([r[2] for r in rows]), traj.yaw_rad, atol=1e-9)
    assert np.allclose(cov, traj.cov, rtol=1e-7, atol=1e-14)
    assert np.array_equal(np.array([r[4] for r in rows]), traj.slip.slip)
    assert traj.slip.slip.any()                  # the drive does slip, so the comparison means something


def test_replay_outputs_and_geometry_source(bag_and_params, capsys):
    bag, params, sim, d = bag_and_params
    out = d / "out"
    assert main(["replay", str(bag), "--params", str(params), "--out", str(out), "--bag-out", str(d / "copy")]) == 0
    text = capsys.readouterr().out
    assert "geometry: from the parameters file" in text
    with open(out / "trajectory.csv", newline="") as fh:
        rows = list(csv.reader(fh))
    assert tuple(rows[0]) == TRAJECTORY_COLUMNS
    assert rows[0][:11] == ["t", "x", "y", "yaw", "cov_xx", "cov_xy", "cov_xyaw", "cov_yy", "cov_yyaw", "cov_yawyaw",
                            "slip"]
    res = replay_run(read_run(bag), load_settings_file(params))
    traj = res.trajectory
    table = np.array(rows[1:], dtype=np.float64)
    assert len(table) == len(traj)
    assert np.allclose(table[:, 0], traj.stamp_ns * 1e-9, rtol=0, atol=1e-6)
    assert np.allclose(table[:, 1:4], traj.pose, rtol=1e-8, atol=1e-9)
    assert np.allclose(table[:, 9], traj.cov[:, 2, 2], rtol=1e-8, atol=1e-15)
    assert np.array_equal(table[:, 10].astype(bool), traj.slip.slip)
    assert np.array_equal(np.array([int(r[0].replace(".", "")) for r in rows[1:]]), traj.stamp_ns)  # exact ns
    tum = read_tum(out / "trajectory.tum")         # TUM format read back (Sturm et al. 2012)
    assert np.array_equal(tum.stamp_ns, traj.stamp_ns)
    assert np.allclose(tum.x_m, traj.x_m, atol=1e-8) and np.allclose(tum.yaw_rad, traj.yaw_rad, atol=1e-8)
    # the copy keeps every message and adds the recomputed odometry
    copy = read_run(d / "copy")
    assert np.array_equal(copy.samples.position, sim.position_rad)
    assert copy.topics["/wheel_dr/odom"] == "nav_msgs/msg/Odometry"
    odom = read_run(d / "copy", truth="/wheel_dr/odom").truth
    assert np.allclose(odom.x_m, traj.x_m, atol=1e-12) and np.allclose(odom.yaw_rad, traj.yaw_rad, atol=1e-12)
    with AnyReader([d / "copy"]) as reader:
        c = next(c for c in reader.connections if c.topic == "/wheel_dr/odom")
        msgs = [reader.deserialize(raw, c.msgtype) for _, _, raw in reader.messages(connections=[c])]
    cov = np.array(msgs[-1].pose.covariance).reshape(6, 6)
    assert np.allclose(cov[np.ix_([0, 1, 5], [0, 1, 5])], traj.cov[-1])
    assert msgs[-1].header.frame_id == "odom" and msgs[-1].child_frame_id == "base_link"


def test_geometry_from_the_urdf_when_the_file_gives_none(bag_and_params, capsys):
    bag, _, sim, d = bag_and_params
    assert main(["replay", str(bag), "--out", str(d / "urdf_out")]) == 0
    text = capsys.readouterr().out
    assert "the URDF on /robot_description" in text
    assert f"left radius {sim.scenario.nominal_left_radius_m:g} m" in text
    assert f"track {sim.scenario.nominal_track_m:g} m" in text
    assert "picked from the joint-state names" in text


def test_fast_text_fields_parse_back():
    """The numpy-built text fields read back with Python's float() (IEEE 754 double) to 10 significant digits,
    including zeros, rounding up to the next power of ten, extremes and subnormals."""
    from wheel_dr.bags.textout import float_field, join_fields, stamp_field
    rng = np.random.default_rng(0)
    v = np.concatenate([rng.normal(size=20000) * 10.0 ** rng.integers(-300, 300, 20000),
                        [0.0, -0.0, 1.0, 9.99999999995, -9.99999999949, 1e-320, 5e-324, 1.7e308, 0.1, -123.456]])
    back = np.array([float(t) for t in join_fields([float_field(v)]).decode().splitlines()])
    normal = np.abs(v) >= 2.3e-308
    assert np.all(np.abs(back[normal] - v[normal]) <= 5.01e-10 * np.abs(v[normal]))
    assert np.all(np.abs(back[~normal] - v[~normal]) <= 1e-323 + 1e-9 * np.abs(v[~normal]))
    stamps = np.array([1_800_000_000_123_456_789, 5, 999_999_999_999_999_999], dtype=np.int64)
    text = join_fields([stamp_field(stamps)]).decode().splitlines()
    assert [int(t.strip().replace(".", "")) for t in text] == stamps.tolist()


def test_fast_text_fields_print_as_python_and_c_do():
    """Every float is written exactly as Python's ``f"{x:.9e}"`` (the C printf "%.9e" layout: a sign
    only when negative, at least two exponent digits; Python language reference, format
    specification mini-language) and stamps carry no padding, so trajectory.csv reads like any other
    CSV. Values cover eighteen decades, ties of the tenth digit, powers of ten, zero, -0.0 and
    subnormals."""
    from wheel_dr.bags.textout import float_field, join_fields, stamp_field
    rng = np.random.default_rng(3)
    v = np.concatenate([rng.normal(size=20000) * 10.0 ** rng.integers(-9, 9, 20000),
                        rng.normal(size=2000) * 10.0 ** rng.integers(-320, 308, 2000),
                        np.round(rng.uniform(-10, 10, 2000), 10) + 5e-11,        # near ties of the tenth digit
                        [0.0, -0.0, 1.0, 9.9999999995, 3.494150237e-03, 0.5, 1e100, 1e-100, 5e-324]])
    assert join_fields([float_field(v)]).decode().splitlines() == [f"{x:.9e}" for x in v]
    assert join_fields([float_field(np.array([3.494150237e-03, -2.5]))]) == b"3.494150237e-03\n-2.500000000e+00\n"
    assert join_fields([float_field(np.array([np.nan, np.inf, -1.0]))]).decode().splitlines() == \
        ["nan", "inf", "-1.000000000e+00"]
    stamps = np.array([5, 12_000_000_001, 1_700_000_000_123_456_789], dtype=np.int64)
    assert join_fields([stamp_field(stamps)], sep=",") == b"0.000000005\n12.000000001\n1700000000.123456789\n"
