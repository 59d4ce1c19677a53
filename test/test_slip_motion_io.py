"""The accelerometer, orientation and cmd_vel through the shells: the node's Imu parser and real bags.

Messages are serialised by rclpy and bags written with rosbags (real files, no mocks). The demo cart
"Quokka" and its numbers are invented (demo only).
"""
from __future__ import annotations

import math

import numpy as np
import pytest

from wheel_dr.runs import load_settings_file, replay_run
from wheel_dr.bags import write_bag
from wheel_dr.bags.reader import read_run
from wheel_dr.core import Settings, run
from wheel_dr.core.slip import DETECTOR_ACCEL
from wheel_dr.sim import HeldEvent, Incline, Scenario, pause, simulate, straight


def _imu(**fields):
    from sensor_msgs.msg import Imu

    m = Imu()
    m.header.frame_id = "imu_link"
    for k, v in fields.items():
        obj, attr = m, k.split(".")
        for a in attr[:-1]:
            obj = getattr(obj, a)
        setattr(obj, attr[-1], v)
    return m


def test_imu_parser_reads_acceleration_orientation_and_unknown_marks():
    """sensor_msgs/Imu (message definition): covariance[0] == -1 marks a field unknown. The parser
    returns the z rate, the x acceleration and up_x = 2 (qx qz - qw qy) (scipy Rotation: the world's
    up axis seen in the body frame), bounds-checked on truncated buffers."""
    from rclpy.serialization import serialize_message
    from scipy.spatial.transform import Rotation

    from wheel_dr.ros.convert import parse_imu_gyro_z, parse_imu_motion

    q = Rotation.from_euler("zy", [0.7, -0.09]).as_quat()
    m = _imu(**{"angular_velocity.z": 0.25, "linear_acceleration.x": -1.5})
    m.orientation.x, m.orientation.y, m.orientation.z, m.orientation.w = (float(v) for v in q)
    m.linear_acceleration_covariance[0] = 4e-4
    raw = bytes(serialize_message(m))
    wz, w_ok, ax, a_ok, up = parse_imu_motion(raw)
    assert (wz, w_ok, ax, a_ok) == (0.25, True, -1.5, True)
    assert up == pytest.approx(Rotation.from_quat(q).inv().apply([0, 0, 1])[0], abs=1e-12)
    assert parse_imu_gyro_z(raw) == (0.25, True)            # the older parser still agrees
    m.orientation_covariance[0] = -1.0
    m.linear_acceleration_covariance[0] = -1.0
    _, _, _, a_ok, up = parse_imu_motion(bytes(serialize_message(m)))
    assert not a_ok and math.isnan(up)
    for cut in (0, 3, 15, len(raw) - 8):
        with pytest.raises(ValueError):
            parse_imu_motion(raw[:cut])


def _scenario() -> Scenario:
    return Scenario(name="io", segments=(pause(3.0), straight(6.0, 0.6), pause(2.0)), rate_hz=50.0,
                    k_left_m=2e-5, k_right_m=2e-5, gyro_noise_sd_radps=0.003, accel_noise_sd_mps2=0.02,
                    accel_bias_mps2=0.03, held_events=(HeldEvent(8.0, 2.0, 0.6),),
                    inclines=(Incline(5.0, 2.0, math.radians(4.0), 0.5),))


@pytest.mark.parametrize("fmt", ["mcap", "ros1"])
def test_bag_round_trip_of_accelerometer_orientation_and_command(tmp_path, fmt):
    """What the simulator wrote (/imu with linear_acceleration and orientation, /cmd_vel Twist) the
    reader holds per joint sample (zero-order hold, REP 103 axes)."""
    sim = simulate(_scenario(), 2)
    path = write_bag(sim, tmp_path / ("io.bag" if fmt == "ros1" else "io"), fmt)
    data = read_run(path)
    assert data.cmd_topic == "/cmd_vel"
    np.testing.assert_allclose(data.accel_x_mps2, sim.accel_mps2[:, 0], rtol=0, atol=0)
    np.testing.assert_allclose(data.up_x, sim.up_x, atol=1e-12)
    # cmd_vel at a fifth of the joint rate: the held command is the one sent up to 4 samples earlier
    k = np.arange(len(sim.stamp_ns))
    np.testing.assert_array_equal(data.cmd_v_mps, sim.cmd_v_mps[(k // 5) * 5])
    assert data.cmd_age_s.max() <= 4 / 50 + 1e-9
    # the replay runs the accelerometer detector: the held base is flagged
    params = tmp_path / "quokka.yaml"
    params.write_text("/**:\n  ros__parameters:\n    wheels:\n      left_joints: [quokka_left_wheel_joint]\n"
                      "      right_joints: [quokka_right_wheel_joint]\n      left_radius: 0.0825\n"
                      "      right_radius: 0.0825\n      track_width: 0.412\n")
    res = replay_run(data, load_settings_file(params))
    t = sim.t_s[res.trajectory.index]
    inside = (t > 8.7) & (t <= 10.0)
    assert (res.trajectory.slip.detector[inside] & DETECTOR_ACCEL).astype(bool).mean() >= 0.9


def test_unknown_acceleration_in_the_bag_leaves_the_detector_off(tmp_path):
    """linear_acceleration_covariance[0] == -1 in every message: the reader reports no accelerometer."""
    sim = simulate(_scenario(), 2)
    data = read_run(write_bag(sim, tmp_path / "noacc", "mcap", imu_accel=False, cmd=False))
    assert data.accel_x_mps2 is None and data.cmd_v_mps is None
    s = Settings.from_flat(sim.scenario.nominal_params)
    traj = run(data.samples, s, gyro_z_radps=data.gyro_z_radps, accel_x_mps2=data.accel_x_mps2)
    assert not np.any(traj.slip.detector & DETECTOR_ACCEL)
