"""Message <-> core conversion of the node, checked against rclpy's own (de)serialisation and the core.

The node's fast path parses serialised JointState / Imu bytes and writes serialised Odometry,
TFMessage and flags; rclpy.serialization (the reference implementation of the ROS 2 CDR mapping)
must read back exactly what the core computed.
"""
from __future__ import annotations

import math
import random

import numpy as np
import pytest

from wheel_dr.core.conventions import pose_covariance_6x6, twist_covariance_6x6, yaw_to_quaternion
from wheel_dr.core.errors import InputError
from wheel_dr.core.settings import Settings
from wheel_dr.ros.convert import (FLAG_FIELDS, FLAGS_LABEL, RawOdometryWriter, flag_values, ns_to_sec_nanosec,
                                  parameter_descriptor, parse_imu_gyro_z, parse_joint_state, pose_from_msg,
                                  stamp_to_ns)

__all__: list[str] = []

rclpy_serialization = pytest.importorskip("rclpy.serialization")


def _spd(rng: random.Random, n: int) -> np.ndarray:
    a = np.array([[rng.uniform(-1, 1) for _ in range(n)] for _ in range(n)])
    return a @ a.T + 1e-3 * np.eye(n)


def test_joint_state_parser_matches_rclpy() -> None:
    """Every field the estimator reads equals rclpy's deserialisation, for names and frame ids of
    every length mod 8 (CDR alignment) and empty or filled velocity/effort."""
    from sensor_msgs.msg import JointState

    rng = random.Random(3)
    for case in range(200):
        msg = JointState()
        msg.header.stamp.sec = rng.randint(0, 2**31 - 1)
        msg.header.stamp.nanosec = rng.randint(0, 999_999_999)
        msg.header.frame_id = "f" * (case % 9)
        n = rng.randint(0, 5)
        msg.name = ["j" * rng.randint(1, 12) + str(k) for k in range(n)]
        msg.position = [rng.uniform(-1e4, 1e4) for _ in range(n if case % 4 else max(0, n - 1))]
        msg.velocity = [rng.uniform(-50, 50) for _ in range(n)] if case % 3 else []
        msg.effort = [1.0] * (case % 2)
        raw = rclpy_serialization.serialize_message(msg)
        back = rclpy_serialization.deserialize_message(raw, JointState)
        sec, nanosec, names, pos, vel = parse_joint_state(raw)
        assert (sec, nanosec) == (back.header.stamp.sec, back.header.stamp.nanosec)
        assert names == tuple(back.name)
        assert pos == tuple(back.position) and vel == tuple(back.velocity)


def test_imu_gyro_parser_matches_rclpy() -> None:
    """angular_velocity.z, and the sensor_msgs/Imu convention that covariance[0] = -1 means 'not provided'."""
    from sensor_msgs.msg import Imu

    rng = random.Random(5)
    for case in range(50):
        msg = Imu()
        msg.header.frame_id = "imu_link"[: case % 9]
        msg.angular_velocity.x, msg.angular_velocity.y = rng.random(), rng.random()
        msg.angular_velocity.z = rng.uniform(-3, 3)
        msg.orientation.w = 1.0
        if case % 2:
            msg.angular_velocity_covariance[0] = -1.0
        wz, provided = parse_imu_gyro_z(rclpy_serialization.serialize_message(msg))
        assert wz == msg.angular_velocity.z
        assert provided == (case % 2 == 0)


@pytest.mark.parametrize("with_tf", [True, False])
def test_raw_writer_output_reads_back_as_the_core_state(with_tf: bool) -> None:
    """Serialised Odometry / TF / flags from the writer deserialise (rclpy) to the core's numbers:
    frames (REP 105), stamp, pose, quaternion from yaw (REP 103), 6x6 covariances laid out by
    wheel_dr.core.conventions, twist in the base frame."""
    from nav_msgs.msg import Odometry
    from std_msgs.msg import Float64MultiArray
    from tf2_msgs.msg import TFMessage

    rng = random.Random(11)
    writer = RawOdometryWriter("quokka_odom", "quokka_base", TFMessage if with_tf else None)
    assert writer.has_tf == with_tf
    for _ in range(20):
        sec, nanosec = rng.randint(0, 2**31 - 1), rng.randint(0, 999_999_999)
        x, y, yaw = rng.uniform(-100, 100), rng.uniform(-100, 100), rng.uniform(-math.pi, math.pi)
        cov, tcov = _spd(rng, 3), _spd(rng, 2)
        v, w = rng.uniform(-2, 2), rng.uniform(-1, 1)
        odom = rclpy_serialization.deserialize_message(
            writer.odometry(sec, nanosec, x, y, yaw, cov, v, w, tcov), Odometry)
        assert (odom.header.frame_id, odom.child_frame_id) == ("quokka_odom", "quokka_base")
        assert (odom.header.stamp.sec, odom.header.stamp.nanosec) == (sec, nanosec)
        p, q = odom.pose.pose.position, odom.pose.pose.orientation
        assert (p.x, p.y, p.z) == (x, y, 0.0)
        assert (q.x, q.y, q.z, q.w) == yaw_to_quaternion(yaw)
        assert list(odom.pose.covariance) == pose_covariance_6x6(cov)
        assert list(odom.twist.covariance) == twist_covariance_6x6(tcov)
        t = odom.twist.twist
        assert (t.linear.x, t.linear.y, t.linear.z, t.angular.x, t.angular.y, t.angular.z) == (v, 0, 0, 0, 0, w)
        if with_tf:
            tf = rclpy_serialization.deserialize_message(writer.tf(), TFMessage)
            assert len(tf.transforms) == 1
            tr = tf.transforms[0]
            assert (tr.header.frame_id, tr.child_frame_id) == ("quokka_odom", "quokka_base")
            assert (tr.header.stamp.sec, tr.header.stamp.nanosec) == (sec, nanosec)
            assert (tr.transform.translation.x, tr.transform.translation.y, tr.transform.translation.z) == (x, y, 0.0)
            r = tr.transform.rotation
            assert (r.x, r.y, r.z, r.w) == (q.x, q.y, q.z, q.w)
        values = [float(sec), float(nanosec), 3.0, 1.0, 0.0, 1.0, 5.0, rng.random()]
        flags = rclpy_serialization.deserialize_message(writer.flags(values), Float64MultiArray)
        assert list(flags.data) == values
        assert flags.layout.dim[0].label == FLAGS_LABEL and flags.layout.dim[0].size == len(FLAG_FIELDS)


def test_flag_values_of_a_skipped_sample_carry_only_stamp_and_status() -> None:
    from wheel_dr.core.slip import SlipStep

    assert flag_values(4, 5, 13, None) == [4.0, 5.0, 13.0, 0.0, 0.0, 0.0, 0.0, 0.0]
    step = SlipStep(slip=True, left=False, right=True, detector=3, score=2.5)
    assert flag_values(4, 5, 0, step) == [4.0, 5.0, 0.0, 1.0, 0.0, 1.0, 3.0, 2.5]


def test_stamps_convert_exactly() -> None:
    """builtin_interfaces/Time <-> int ns without floating point (sec * 1e9 + nanosec)."""
    from builtin_interfaces.msg import Time

    for ns in (1, 999_999_999, 1_000_000_000, 1_796_152_243_354_359_673, 2**31 * 1_000_000_000 - 1):
        sec, nanosec = ns_to_sec_nanosec(ns)
        assert 0 <= nanosec < 1_000_000_000
        assert stamp_to_ns(Time(sec=sec, nanosec=nanosec)) == ns


def test_parameter_descriptors_carry_description_and_range() -> None:
    """Every wheel_dr parameter's descriptor: its description, the exact allowed range in words, and a
    numeric range for bounded numbers equal to the spec's bounds."""
    for spec in Settings.specs():
        d = parameter_descriptor(spec)
        assert d.name == spec.name and spec.description in d.description
        assert spec.range_text() in d.description
        if spec.kind is float and spec.lo is not None and spec.hi is not None:
            r = d.floating_point_range[0]
            assert (r.from_value, r.to_value) == (spec.lo, spec.hi)
        elif spec.kind is int and spec.lo is not None and spec.hi is not None:
            r = d.integer_range[0]
            assert (r.from_value, r.to_value) == (spec.lo, spec.hi)
        else:
            assert not d.floating_point_range and not d.integer_range
    assert parameter_descriptor(Settings.spec("frames.odom"), read_only=True).read_only


def _anchor(frame: str = "odom", yaw: float = 0.5, cov3: np.ndarray | None = None):
    from geometry_msgs.msg import PoseWithCovarianceStamped

    msg = PoseWithCovarianceStamped()
    msg.header.frame_id = frame
    msg.pose.pose.position.x, msg.pose.pose.position.y = 1.5, -0.25
    msg.pose.pose.orientation.z, msg.pose.pose.orientation.w = math.sin(yaw / 2), math.cos(yaw / 2)
    cov = np.zeros((6, 6))
    block = np.diag([0.1, 0.2, 0.03]) if cov3 is None else cov3
    cov[np.ix_((0, 1, 5), (0, 1, 5))] = block
    msg.pose.covariance = cov.ravel().tolist()
    return msg


def test_reanchor_pose_accepted_and_refused() -> None:
    """The (x, y, yaw) block and yaw come back; wrong frame, NaN, asymmetric or indefinite covariance refused."""
    pose, cov = pose_from_msg(_anchor(), "odom")
    assert pose == (1.5, -0.25, pytest.approx(0.5, abs=1e-15))
    assert np.array_equal(cov, np.diag([0.1, 0.2, 0.03]))
    assert pose_from_msg(_anchor(frame=""), "odom")[0][0] == 1.5
    bad = [
        (_anchor(frame="map"), "frame 'map'"),
        (_anchor(cov3=np.array([[0.1, 0.05, 0], [0.0, 0.2, 0], [0, 0, 0.1]])), "not symmetric"),
        (_anchor(cov3=np.diag([0.1, -0.2, 0.1])), "not positive semi-definite"),
        (_anchor(cov3=np.diag([0.1, np.nan, 0.1])), "NaN"),
    ]
    nan_pose = _anchor()
    nan_pose.pose.pose.position.x = float("nan")
    bad.append((nan_pose, "NaN"))
    for msg, words in bad:
        with pytest.raises(InputError, match=words):
            pose_from_msg(msg, "odom")
