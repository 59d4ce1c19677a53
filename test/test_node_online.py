"""The node's online self-calibration as a real process over real DDS: the geometry alert reaches
/diagnostics (WARN, with the suggested values), ~/geometry carries the estimate in its documented
layout, and ~/save_geometry writes a parameters file that a second node then starts with.

The drive is simulated (wheel_dr.sim) with the invented demo cart "Quokka": its left tyre is already
3 % smaller than configured (a soft tyre), the gyro biased and noisy; a PoseStamped "localisation"
(the simulator's truth) on online_calibration.reference_topic makes the scale observable. Expected values come from the
core's batch run over the same samples (heading model of Siegwart et al. 2011, sec. 3.2.1).
"""
from __future__ import annotations

import math
import subprocess
import time
from pathlib import Path
from typing import Any

import pytest

from test_node import NODE_EXE, Probe, _wait, stop_node
from wheel_dr.core import run
from wheel_dr.core.online_calibration import GEOMETRY_FIELDS, GEOMETRY_LABEL
from wheel_dr.demo.scenarios import varied_route
from wheel_dr.params import load_settings
from wheel_dr.sim import Scenario, simulate

NS = "/quokka_online"
JS_TOPIC = "/online_js"
LEFT, RIGHT = "quokka_left_wheel_joint", "quokka_right_wheel_joint"
RADIUS_M, TRACK_M = 0.0825, 0.412       # Quokka nominal geometry (demo numbers)

PARAMS = f"""# test parameters: Quokka demo cart, online self-calibration on
/**:
  ros__parameters:
    wheels:
      left_joints: [{LEFT}]
      right_joints: [{RIGHT}]
      left_radius: {RADIUS_M}
      right_radius: {RADIUS_M}
      track_width: {TRACK_M}
    noise:
      k_left: 2.0e-05
      k_right: 2.0e-05
    slip:
      gyro_noise_radps: 0.005
    output:
      diagnostics_period_s: 0.2
    online_calibration:
      enabled: true
      horizon_m: 10.0
      alert_pct: 1.0
      reference_topic: /localisation/pose
"""


def _start(params: Path, log_path: Path, env: dict[str, str]) -> subprocess.Popen:
    return subprocess.Popen([NODE_EXE, "--ros-args", "--params-file", str(params), "-r", f"joint_states:={JS_TOPIC}",
                             "-r", f"__ns:={NS}"], env=env, stdout=log_path.open("w"), stderr=subprocess.STDOUT)


_stop = stop_node     # the shared SIGTERM-then-kill ending of a node process (test_node.py)


def _drive(probe: Probe, sim, pub_ref=None) -> None:
    """The simulated drive, 500 samples a second: each IMU reading just before its joint state; with
    ``pub_ref`` a PoseStamped "localisation" at 10 Hz (the simulator's truth), a little after."""
    from geometry_msgs.msg import PoseStamped

    names = [LEFT, RIGHT]
    start = time.monotonic()
    for k in range(len(sim.stamp_ns)):
        stamp = int(sim.stamp_ns[k])
        imu = probe.Imu()
        imu.header.stamp.sec, imu.header.stamp.nanosec = divmod(stamp, 1_000_000_000)
        imu.angular_velocity.z = float(sim.gyro_z_radps[k])
        imu.linear_acceleration_covariance[0] = -1.0       # no accelerometer
        imu.orientation_covariance[0] = -1.0
        probe.pub_imu.publish(imu)
        time.sleep(0.0005)
        probe.pub_js.publish(probe.js(stamp, names, sim.position_rad[k].tolist()))
        if pub_ref is not None and k % 5 == 4:
            ref = PoseStamped()
            ref.header.frame_id = "map"
            ref.header.stamp.sec, ref.header.stamp.nanosec = divmod(int(sim.stamp_ns[k - 1]), 1_000_000_000)
            ref.pose.position.x, ref.pose.position.y = float(sim.true_x_m[k - 1]), float(sim.true_y_m[k - 1])
            ref.pose.orientation.w = 1.0
            pub_ref.publish(ref)
        delay = start + (k + 1) / 500.0 - time.monotonic()
        if delay > 0:
            time.sleep(delay)
    probe.wait_flag(int(sim.stamp_ns[-1]))


def _soft_tyre_drive(seconds: float = 60.0):
    sc = Scenario(name="soft_tyre", segments=varied_route(3, seconds), rate_hz=50.0,
                  true_left_radius_m=RADIUS_M * 0.97, true_right_radius_m=RADIUS_M, true_track_m=TRACK_M,
                  k_left_m=2e-5, k_right_m=2e-5, gyro_bias_radps=0.002, gyro_noise_sd_radps=0.005)
    return simulate(sc, 0)


def test_alert_reaches_diagnostics_and_save_geometry_writes_a_file_the_node_starts_with(
        tmp_path: Path, ros_env: dict[str, str]) -> None:
    from geometry_msgs.msg import PoseStamped
    from std_msgs.msg import Float64MultiArray
    from std_srvs.srv import Trigger

    sim = _soft_tyre_drive()
    params = tmp_path / "quokka.yaml"
    params.write_text(PARAMS)
    proc = _start(params, tmp_path / "node.log", ros_env)
    probe = Probe(ns=NS, js_topic=JS_TOPIC)
    pub_ref = probe.node.create_publisher(PoseStamped, "/localisation/pose", 10)
    geometry: list[Any] = []
    probe.node.create_subscription(Float64MultiArray, f"{NS}/wheel_dr_node/geometry",
                                   lambda m: geometry.append(m), 1000)
    second = None
    try:
        _wait(lambda: probe.pub_js.get_subscription_count() > 0 and probe.pub_imu.get_subscription_count() > 0
              or proc.poll() is not None, 30, "the node to subscribe")
        assert proc.poll() is None, (tmp_path / "node.log").read_text()
        _wait(lambda: probe.node.count_publishers(f"{NS}/odom_flags") > 0, 10, "the node's flags publisher")
        probe.handshake([LEFT, RIGHT])
        _wait(lambda: pub_ref.get_subscription_count() > 0, 10, "the node to subscribe to the reference topic")
        _drive(probe, sim, pub_ref)

        # the core's batch run over the same drive alerts too (what the node should see)
        settings = load_settings(params)
        batch = run(sim.joint_samples(), settings, gyro_z_radps=sim.gyro_z_radps).online
        assert batch.alert[-1] and batch.alert_ratio[-1]

        def warned():
            with probe.lock:
                return next((d for d in reversed(probe.diag) if d[1] == 1 and "geometry alert" in d[2]), None)
        _, level, message, values = _wait(warned, 10, "a WARN diagnostics status with the geometry alert")
        assert "radius ratio" in message and "suggested left radius" in message
        assert values["online.alert"] == "true"
        assert values["online.radius_ratio_status"] == "alert"
        ratio = float(values["online.radius_ratio"])
        truth = 1.0 / 0.97
        assert abs(ratio / truth - 1) < 0.01                       # within the alert size of the truth
        assert abs(ratio - batch.radius_ratio[-1]) < 5 * float(values["online.radius_ratio_se"])

        # the reference makes the scale observable: true over configured mean radius
        true_scale = 0.5 * (0.97 + 1.0)
        assert values["online.reference_type"] == "geometry_msgs/PoseStamped"
        assert int(values["online.scale_windows"]) >= 20
        assert abs(float(values["online.scale"]) / true_scale - 1) < 0.005

        # ~/geometry: the documented layout
        assert geometry, "no ~/geometry message"
        last = geometry[-1]
        assert last.layout.dim[0].label == GEOMETRY_LABEL and last.layout.dim[0].size == len(GEOMETRY_FIELDS)
        g = dict(zip(GEOMETRY_FIELDS, last.data))
        assert g["alert"] == 1.0 and g["configured_radius_ratio"] == 1.0
        assert math.isclose(0.5 * (g["suggested_left_radius_m"] + g["suggested_right_radius_m"]),
                            RADIUS_M * g["scale"], rel_tol=1e-9)     # the mean radius scaled by the reference

        # ~/save_geometry writes <stem>_geometry.yaml beside the running file
        response = probe.call(Trigger, f"{NS}/wheel_dr_node/save_geometry", Trigger.Request())
        assert response.success, response.message
        saved = tmp_path / "quokka_geometry.yaml"
        assert saved.is_file() and str(saved) in response.message
        new = load_settings(saved)
        assert new.wheels.right_radius / new.wheels.left_radius == pytest.approx(g["radius_ratio"], rel=2e-5)
        assert new.online_calibration.enabled and new.noise.k_left == 2e-5     # the rest as in the running file
        assert abs(new.wheels.left_radius / (RADIUS_M * 0.97) - 1) < 0.01       # the true radii, scale included
        assert abs(new.wheels.right_radius / RADIUS_M - 1) < 0.01
        assert saved.read_text().startswith("# description: Geometry suggested")
    finally:
        _stop(proc)

    # a second node starts with the written file and runs that geometry
    try:
        second = _start(saved, tmp_path / "node2.log", ros_env)
        _wait(lambda: probe.pub_js.get_subscription_count() > 0 or second.poll() is not None, 30,
              "the second node to subscribe")
        assert second.poll() is None, (tmp_path / "node2.log").read_text()

        def with_params():
            with probe.lock:
                return next((d for d in reversed(probe.diag) if "param.wheels.left_radius" in d[3]
                             and float(d[3]["param.wheels.left_radius"]) != RADIUS_M), None)
        _, _, _, values = _wait(with_params, 20, "diagnostics of the node started from the saved file")
        assert float(values["param.wheels.left_radius"]) == pytest.approx(new.wheels.left_radius, rel=1e-5)
        assert float(values["param.wheels.right_radius"]) == pytest.approx(new.wheels.right_radius, rel=1e-5)
        assert float(values["param.wheels.track_width"]) == pytest.approx(new.wheels.track_width, rel=1e-5)
    finally:
        if second is not None:
            _stop(second)
        probe.close()


def test_apply_takes_the_suggested_geometry_as_the_running_one(tmp_path: Path, ros_env: dict[str, str]) -> None:
    """online_calibration.apply: true: once the alert has been reported (WARN), the node sets the suggested
    radii and track as its running parameters (the mean radius kept: no distance source here)."""
    sim = _soft_tyre_drive(50.0)
    params = tmp_path / "apply.yaml"
    params.write_text(PARAMS.replace("      reference_topic: /localisation/pose\n", "      apply: true\n"))
    proc = _start(params, tmp_path / "node.log", ros_env)
    probe = Probe(ns=NS, js_topic=JS_TOPIC)
    try:
        _wait(lambda: probe.pub_js.get_subscription_count() > 0 and probe.pub_imu.get_subscription_count() > 0
              or proc.poll() is not None, 30, "the node to subscribe")
        assert proc.poll() is None, (tmp_path / "node.log").read_text()
        _wait(lambda: probe.node.count_publishers(f"{NS}/odom_flags") > 0, 10, "the node's flags publisher")
        probe.handshake([LEFT, RIGHT])
        _drive(probe, sim)

        def applied():
            with probe.lock:
                return next((d for d in reversed(probe.diag) if int(d[3].get("online.geometry_applied", 0)) >= 1),
                            None)
        _, _, _, values = _wait(applied, 10, "diagnostics after the geometry was applied")
        with probe.lock:
            assert any(d[1] == 1 and "geometry alert" in d[2] for d in probe.diag)    # reported first
        left, right = float(values["param.wheels.left_radius"]), float(values["param.wheels.right_radius"])
        assert right / left == pytest.approx(1.0 / 0.97, rel=0.01)                # the soft tyre, seen
        assert 0.5 * (left + right) == pytest.approx(RADIUS_M, rel=1e-6)            # the scale kept
        assert float(values["param.wheels.track_width"]) != TRACK_M
    finally:
        _stop(proc)
        probe.close()
