"""The runtime node as a real process over real DDS: odometry, TF, flags, diagnostics, reset, re-anchor, parameters.

One node process (``.venv/bin/wheel_dr_node --ros-args --params-file F -r joint_states:=/my_js
-r __ns:=/quokka -p use_sim_time:=true``) is shared by the checks of this module; the test
process publishes JointState at 100 Hz and /clock, and listens with its own rclpy node on the
session's isolated DDS domain (random ROS_DOMAIN_ID, localhost-only discovery; test/conftest.py).
Numbers are the invented "Quokka" demo cart's (nominal radii 0.0825 m, track 0.412 m).
"""
from __future__ import annotations

import math
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path
from typing import Any, Callable, Iterator

import numpy as np
import pytest

from wheel_dr.core import JointSamples, Settings, run
from wheel_dr.core.conventions import quaternion_to_yaw
from wheel_dr.core.noise import UNOBSERVED_VARIANCE
from wheel_dr.core.wheels import SampleStatus
from wheel_dr.ros.convert import FLAG_FIELDS, FLAGS_LABEL

__all__: list[str] = []

VENV_BIN = Path(sys.executable).parent
NODE_EXE = str(VENV_BIN / "wheel_dr_node")
NS = "/quokka"
JS_TOPIC = "/my_js"
LEFT, RIGHT = "quokka_left_wheel_joint", "quokka_right_wheel_joint"
RADIUS_M, TRACK_M = 0.0825, 0.412          # Quokka nominal geometry (demo numbers)
ODOM_FRAME, BASE_FRAME = "quokka_odom", "quokka_base"
DIAG_PERIOD_S = 0.2
SIM_EPOCH_NS = 5_000 * 1_000_000_000       # /clock starts here: far from wall time
DT_NS = 10_000_000                         # 100 Hz

PARAMS = f"""# test parameters: Quokka demo cart
/**:
  ros__parameters:
    wheels:
      left_joints: [{LEFT}]
      right_joints: [{RIGHT}]
      left_radius: {RADIUS_M}
      right_radius: {RADIUS_M}
      track_width: {TRACK_M}
    frames:
      odom: {ODOM_FRAME}
      base: {BASE_FRAME}
    integration: exact
    noise:
      model: per_wheel
      k_left: 0.0005
      k_right: 0.0005
    output:
      publish_tf: true
      diagnostics_period_s: {DIAG_PERIOD_S}
"""


def _wait(pred: Callable[[], Any], timeout_s: float, what: str) -> Any:
    end = time.monotonic() + timeout_s
    while time.monotonic() < end:
        got = pred()
        if got:
            return got
        time.sleep(0.01)
    raise AssertionError(f"timed out after {timeout_s} s waiting for {what}")


def stop_node(proc: subprocess.Popen) -> None:
    """End a node process with SIGTERM (killed if it has not ended 15 s later)."""
    if proc.poll() is None:
        proc.send_signal(signal.SIGTERM)
    try:
        proc.wait(timeout=15)
    except subprocess.TimeoutExpired:
        proc.kill()
        proc.wait()


class Probe:
    """The test side: an rclpy node in this process that drives and watches the node under test."""

    def __init__(self, ns: str = NS, js_topic: str = JS_TOPIC) -> None:
        import rclpy
        from diagnostic_msgs.msg import DiagnosticArray
        from geometry_msgs.msg import PoseWithCovarianceStamped
        from nav_msgs.msg import Odometry
        from rclpy.context import Context
        from rclpy.executors import SingleThreadedExecutor
        from rclpy.node import Node
        from rclpy.qos import QoSProfile, qos_profile_sensor_data
        from rosgraph_msgs.msg import Clock
        from sensor_msgs.msg import Imu, JointState
        from std_msgs.msg import Float64MultiArray
        from tf2_msgs.msg import TFMessage

        self.JointState = JointState
        self.context = Context()
        rclpy.init(context=self.context)
        self.node = Node("wheel_dr_test_probe", context=self.context)
        self.lock = threading.Lock()
        self.odom: list[Any] = []
        self.tf: list[Any] = []
        self.flags: list[Any] = []
        self.diag: list[Any] = []
        n = self.node
        self.ns = ns
        n.create_subscription(Odometry, f"{ns}/odom", self._keep(self.odom), 1000)
        n.create_subscription(TFMessage, "/tf", self._keep(self.tf), QoSProfile(depth=1000))
        n.create_subscription(Float64MultiArray, f"{ns}/odom_flags", self._keep(self.flags), 1000)
        n.create_subscription(DiagnosticArray, "/diagnostics", self._keep_diag, 100)
        self.pub_js = n.create_publisher(JointState, js_topic, qos_profile_sensor_data)
        self.pub_imu = n.create_publisher(Imu, f"{ns}/imu", qos_profile_sensor_data)
        self.Imu = Imu
        self.pub_reanchor = n.create_publisher(PoseWithCovarianceStamped, f"{ns}/wheel_dr_node/reanchor", 10)
        self.pub_clock = n.create_publisher(Clock, "/clock", 10)
        self._Clock = Clock
        self._clock_start = time.monotonic()
        n.create_timer(0.02, self._tick_clock)
        self.executor = SingleThreadedExecutor(context=self.context)
        self.executor.add_node(n)
        self._stop = False
        self.thread = threading.Thread(target=self._spin, daemon=True)
        self.thread.start()
        self.stamp_ns = 1_700_000_000 * 1_000_000_000  # synthetic joint-state stamps, always increasing
        self.settings_changes = 0  # accepted parameter changes (each restarts the wheel chain)

    def _spin(self) -> None:
        while not self._stop:
            self.executor.spin_once(timeout_sec=0.05)

    def _keep(self, box: list[Any]) -> Callable[[Any], None]:
        def cb(msg: Any) -> None:
            with self.lock:
                box.append(msg)
        return cb

    def _keep_diag(self, msg: Any) -> None:
        for status in msg.status:
            if status.name.startswith(f"{self.ns}/wheel_dr_node"):
                values = {kv.key: kv.value for kv in status.values}
                level = status.level[0] if isinstance(status.level, bytes) else int(status.level)
                with self.lock:
                    self.diag.append((msg.header.stamp.sec * 1_000_000_000 + msg.header.stamp.nanosec,
                                      level, status.message, values))

    def _tick_clock(self) -> None:
        msg = self._Clock()
        t_ns = SIM_EPOCH_NS + int((time.monotonic() - self._clock_start) * 1e9)
        msg.clock.sec, msg.clock.nanosec = divmod(t_ns, 1_000_000_000)
        self.pub_clock.publish(msg)

    def close(self) -> None:
        self._stop = True
        self.thread.join(timeout=2)
        self.executor.shutdown()
        self.node.destroy_node()
        self.context.try_shutdown()

    # -- driving ---------------------------------------------------------------------------------
    def js(self, stamp_ns: int, names: list[str], positions: list[float], velocities: list[float] | None = None):
        msg = self.JointState()
        msg.header.stamp.sec, msg.header.stamp.nanosec = divmod(stamp_ns, 1_000_000_000)
        msg.name = names
        msg.position = positions
        msg.velocity = velocities or []
        return msg

    def send(self, msgs: list[Any], rate_hz: float = 100.0) -> None:
        """Publish at ``rate_hz``, then wait until the node has flagged the last message."""
        period = 1.0 / rate_hz
        start = time.monotonic()
        for i, msg in enumerate(msgs):
            self.pub_js.publish(msg)
            delay = start + (i + 1) * period - time.monotonic()
            if delay > 0:
                time.sleep(delay)
        last = msgs[-1].header.stamp
        self.wait_flag(last.sec * 1_000_000_000 + last.nanosec)

    def wait_flag(self, stamp_ns: int, timeout_s: float = 10.0) -> list[float]:
        sec, nanosec = divmod(stamp_ns, 1_000_000_000)

        def found():
            with self.lock:
                for f in reversed(self.flags):
                    if f.data[0] == sec and f.data[1] == nanosec:
                        return list(f.data)
            return None
        return _wait(found, timeout_s, f"the flags of the sample stamped {stamp_ns}")

    def arc(self, seconds: float, w_left: float, w_right: float, start_angle: float = 0.0):
        """Samples of constant wheel angular speeds (rad/s) after a synthetic 1 s gap; stamps, positions."""
        self.stamp_ns += 1_000_000_000
        n = int(round(seconds * 1e9 / DT_NS)) + 1
        out = []
        for k in range(n):
            t = k * DT_NS * 1e-9
            out.append((self.stamp_ns + k * DT_NS, [start_angle + w_left * t, start_angle + w_right * t]))
        self.stamp_ns += (n - 1) * DT_NS
        return out

    def handshake(self, names: list[str], timeout_s: float = 20.0) -> None:
        """Send still samples until the node's flags for one come back: both sides have matched."""
        end = time.monotonic() + timeout_s
        while time.monotonic() < end:
            self.stamp_ns += DT_NS
            self.pub_js.publish(self.js(self.stamp_ns, names, [0.0] * len(names)))
            sec, nanosec = divmod(self.stamp_ns, 1_000_000_000)
            time.sleep(0.05)
            with self.lock:
                if any(f.data[0] == sec and f.data[1] == nanosec for f in self.flags[-20:]):
                    return
        raise AssertionError("the node did not answer joint states")

    def next_diag(self, timeout_s: float = 5.0) -> tuple[int, int, str, dict[str, str]]:
        """The first diagnostics status published after this call."""
        with self.lock:
            start = len(self.diag)
        _wait(lambda: len(self.diag) > start + 1, timeout_s, "a diagnostics status")
        with self.lock:
            return self.diag[-1]

    def call(self, srv_type: type, name: str, request: Any, timeout_s: float = 10.0) -> Any:
        client = self.node.create_client(srv_type, name)
        try:
            assert client.wait_for_service(timeout_sec=timeout_s), f"service {name} not available"
            future = client.call_async(request)
            _wait(future.done, timeout_s, f"the response of {name}")
            return future.result()
        finally:
            self.node.destroy_client(client)

    def odom_at(self, stamp_ns: int) -> Any:
        sec, nanosec = divmod(stamp_ns, 1_000_000_000)

        def found():
            with self.lock:
                for o in reversed(self.odom):
                    if o.header.stamp.sec == sec and o.header.stamp.nanosec == nanosec:
                        return o
            return None
        return _wait(found, 5.0, f"odometry stamped {stamp_ns}")


@pytest.fixture(scope="module")
def node_run(tmp_path_factory: pytest.TempPathFactory, ros_env: dict[str, str]) -> Iterator[dict[str, Any]]:
    """The shared node process and the probe; the node is stopped with SIGTERM at the end."""
    folder = tmp_path_factory.mktemp("node")
    params = folder / "quokka.yaml"
    params.write_text(PARAMS)
    log_path = folder / "node.log"
    log = log_path.open("w")
    proc = subprocess.Popen(
        [NODE_EXE, "--ros-args", "--params-file", str(params), "-r", f"joint_states:={JS_TOPIC}",
         "-r", f"__ns:={NS}", "-p", "use_sim_time:=true"],
        env=ros_env, stdout=log, stderr=subprocess.STDOUT)
    probe = Probe()
    try:
        _wait(lambda: probe.pub_js.get_subscription_count() > 0 or proc.poll() is not None, 30,
              "the node to subscribe to /my_js")
        assert proc.poll() is None, f"node exited: {log_path.read_text()}"
        _wait(lambda: probe.node.count_publishers(f"{NS}/odom_flags") > 0, 10, "the node's flags publisher")
        probe.handshake([LEFT, RIGHT])
        yield {"proc": proc, "probe": probe, "log": log_path}
    finally:
        probe.close()
        stop_node(proc)
        log.close()


def _reset(probe: Probe) -> None:
    from std_srvs.srv import Trigger

    response = probe.call(Trigger, f"{NS}/wheel_dr_node/reset", Trigger.Request())
    assert response.success, response.message


def _drive(probe: Probe, samples: list[tuple[int, list[float]]]) -> None:
    probe.send([probe.js(s, [LEFT, RIGHT], p) for s, p in samples])


def test_odom_follows_the_closed_form_arc(node_run: dict[str, Any]) -> None:
    """Constant wheel speeds give a circle of radius R = (b/2)(v_r + v_l)/(v_r - v_l) about (0, R),
    yaw rate (v_r - v_l)/b (REFERENCES.md: common practice; Siegwart, Nourbakhsh & Scaramuzza 2011,
    ch. 3). The node integrates with the exact scheme, so every published pose matches to round-off.
    Frames and stamps as configured (REP 105: pose in odom, child = base); covariance positive
    definite and growing; z, roll, pitch unobserved (wheel_dr.core.conventions); the odometry equals
    the core's batch run over the same samples (the node only converts)."""
    probe = node_run["probe"]
    _reset(probe)
    w_l, w_r = 4.0, 6.0                                   # rad/s
    samples = probe.arc(2.0, w_l, w_r, start_angle=0.3)
    _drive(probe, samples)
    v_l, v_r = RADIUS_M * w_l, RADIUS_M * w_r
    radius_m = 0.5 * TRACK_M * (v_r + v_l) / (v_r - v_l)
    rate = (v_r - v_l) / TRACK_M
    t0 = samples[0][0]
    poses, covs = [], []
    for stamp, _ in samples:
        o = probe.odom_at(stamp)
        assert (o.header.frame_id, o.child_frame_id) == (ODOM_FRAME, BASE_FRAME)
        t = (stamp - t0) * 1e-9
        th = rate * t
        q = o.pose.pose.orientation
        yaw = quaternion_to_yaw(q.x, q.y, q.z, q.w)
        assert o.pose.pose.position.x == pytest.approx(radius_m * math.sin(th), abs=1e-9)
        assert o.pose.pose.position.y == pytest.approx(radius_m * (1 - math.cos(th)), abs=1e-9)
        assert yaw == pytest.approx(th, abs=1e-9)
        cov = np.asarray(o.pose.covariance).reshape(6, 6)
        assert cov[2, 2] == cov[3, 3] == cov[4, 4] == UNOBSERVED_VARIANCE
        covs.append(cov[np.ix_((0, 1, 5), (0, 1, 5))])
        poses.append((o.pose.pose.position.x, o.pose.pose.position.y, yaw))
        if stamp != t0:  # twist in the base frame: v and w of the arc (first sample restarts: zero)
            assert o.twist.twist.linear.x == pytest.approx(0.5 * (v_l + v_r), rel=1e-9)
            assert o.twist.twist.angular.z == pytest.approx(rate, rel=1e-9)
    traces = [np.trace(c) for c in covs]
    assert np.all(np.diff(traces[1:]) > 0), "pose covariance must grow while driving"
    for c in covs[20:]:
        assert np.allclose(c, c.T, atol=0)
        assert np.linalg.eigvalsh(c).min() > 0, "covariance must be positive definite once turning"
    # Same numbers as the core's batch run over the same samples (streaming == batch in the core).
    settings = Settings.from_flat({"wheels.left_joints": [LEFT], "wheels.right_joints": [RIGHT],
                                   "wheels.left_radius": RADIUS_M, "wheels.right_radius": RADIUS_M,
                                   "wheels.track_width": TRACK_M, "integration": "exact"})
    batch = run(JointSamples(np.array([s for s, _ in samples], dtype=np.int64), (LEFT, RIGHT),
                             np.array([p for _, p in samples]), np.zeros((len(samples), 2))), settings)
    assert np.allclose(batch.cov, np.array(covs), rtol=1e-9, atol=1e-15)
    assert np.allclose(batch.pose[:, :2], np.array(poses)[:, :2], atol=1e-12)


def test_tf_equals_the_odometry_pose(node_run: dict[str, Any]) -> None:
    """/tf carries odom -> base (REP 105) with the odometry's stamp, translation and rotation."""
    probe = node_run["probe"]
    samples = probe.arc(0.3, 3.0, 2.0)
    _drive(probe, samples)
    checked = 0
    for stamp, _ in samples:
        o = probe.odom_at(stamp)
        sec, nanosec = divmod(stamp, 1_000_000_000)

        def find():
            with probe.lock:
                for m in reversed(probe.tf):
                    for t in m.transforms:
                        if (t.child_frame_id == BASE_FRAME and t.header.stamp.sec == sec
                                and t.header.stamp.nanosec == nanosec):
                            return t
            return None
        t = _wait(find, 5.0, "the TF of the odometry stamp")
        assert t.header.frame_id == ODOM_FRAME
        p, q = o.pose.pose.position, o.pose.pose.orientation
        assert (t.transform.translation.x, t.transform.translation.y, t.transform.translation.z) == (p.x, p.y, p.z)
        r = t.transform.rotation
        assert (r.x, r.y, r.z, r.w) == (q.x, q.y, q.z, q.w)
        checked += 1
    assert checked == len(samples)
    # output.publish_tf switches TF off at run time; odometry goes on.
    assert _set_parameter(probe, "output.publish_tf", False).successful
    try:
        quiet = probe.arc(0.1, 1.0, 1.0)
        _drive(probe, quiet)
        probe.odom_at(quiet[-1][0])
        time.sleep(0.2)
        stamps = {divmod(st, 1_000_000_000) for st, _ in quiet}
        with probe.lock:
            sent = [t for m in probe.tf for t in m.transforms
                    if (t.header.stamp.sec, t.header.stamp.nanosec) in stamps]
        assert not sent, "TF published although output.publish_tf is false"
    finally:
        assert _set_parameter(probe, "output.publish_tf", True).successful


def test_flags_message_layout_and_status(node_run: dict[str, Any]) -> None:
    """odom_flags: one Float64MultiArray per sample, labelled with FLAG_FIELDS, status codes as sent."""
    probe = node_run["probe"]
    samples = probe.arc(0.1, 1.0, 1.0)
    _drive(probe, samples)
    first = probe.wait_flag(samples[0][0])
    later = probe.wait_flag(samples[-1][0])
    # a 1 s gap before every arc (or a settings change just before): the chain restarts there
    assert first[FLAG_FIELDS.index("status")] in (SampleStatus.GAP, SampleStatus.CHAIN_START)
    assert later[FLAG_FIELDS.index("status")] == SampleStatus.USED
    assert later[FLAG_FIELDS.index("slip")] == 0.0   # straight, steady drive: no slip
    with probe.lock:
        msg = probe.flags[-1]
    assert msg.layout.dim[0].label == FLAGS_LABEL and msg.layout.dim[0].size == len(FLAG_FIELDS)


def test_reset_and_reanchor(node_run: dict[str, Any]) -> None:
    """~/reset zeroes pose and covariance; ~/reanchor sets pose and the (x, y, yaw) covariance block;
    a re-anchor in another frame is refused and changes nothing."""
    from geometry_msgs.msg import PoseWithCovarianceStamped

    probe = node_run["probe"]
    samples = probe.arc(0.5, 5.0, 3.0)
    _drive(probe, samples)
    last_angles = samples[-1][1]
    assert probe.odom_at(samples[-1][0]).pose.pose.position.x > 0.1
    _reset(probe)
    probe.stamp_ns += DT_NS
    _drive(probe, [(probe.stamp_ns, last_angles)])          # no wheel motion
    o = probe.odom_at(probe.stamp_ns)
    assert (o.pose.pose.position.x, o.pose.pose.position.y, o.pose.pose.orientation.z) == (0.0, 0.0, 0.0)
    assert np.asarray(o.pose.covariance).reshape(6, 6)[np.ix_((0, 1, 5), (0, 1, 5))].tolist() == [[0.0] * 3] * 3

    yaw = 1.0
    anchor = PoseWithCovarianceStamped()
    anchor.header.frame_id = ODOM_FRAME
    anchor.pose.pose.position.x, anchor.pose.pose.position.y = 3.0, -2.0
    anchor.pose.pose.orientation.z, anchor.pose.pose.orientation.w = math.sin(yaw / 2), math.cos(yaw / 2)
    cov = np.zeros((6, 6))
    cov[0, 0], cov[1, 1], cov[5, 5], cov[0, 1], cov[1, 0] = 0.04, 0.09, 0.01, 0.01, 0.01
    anchor.pose.covariance = cov.ravel().tolist()
    wrong = PoseWithCovarianceStamped()
    wrong.header.frame_id = "map"
    wrong.pose.pose.position.x = 50.0
    wrong.pose.pose.orientation.w = 1.0
    _wait(lambda: probe.pub_reanchor.get_subscription_count() > 0, 10, "the re-anchor subscription")
    log = node_run["log"]
    probe.pub_reanchor.publish(anchor)
    _wait(lambda: "re-anchored at x=3.000 m, y=-2.000 m" in log.read_text(), 10, "the re-anchor")
    probe.pub_reanchor.publish(wrong)
    _wait(lambda: "re-anchor refused" in log.read_text(), 10, "the refused re-anchor")
    probe.stamp_ns += DT_NS
    _drive(probe, [(probe.stamp_ns, last_angles)])
    o = probe.odom_at(probe.stamp_ns)
    q = o.pose.pose.orientation
    assert (o.pose.pose.position.x, o.pose.pose.position.y) == (3.0, -2.0)
    assert quaternion_to_yaw(q.x, q.y, q.z, q.w) == pytest.approx(yaw, abs=1e-12)
    got = np.asarray(o.pose.covariance).reshape(6, 6)
    assert np.allclose(got[np.ix_((0, 1, 5), (0, 1, 5))], cov[np.ix_((0, 1, 5), (0, 1, 5))], atol=1e-15)
    diag = probe.next_diag()
    assert int(diag[3]["reanchor_refused"]) >= 1


def _set_parameter(probe: Probe, name: str, value: Any) -> Any:
    from rcl_interfaces.msg import Parameter
    from rcl_interfaces.srv import SetParameters
    from rclpy.parameter import Parameter as RclParameter

    request = SetParameters.Request()
    request.parameters = [Parameter(name=name, value=RclParameter(name, value=value).get_parameter_value())]
    result = probe.call(SetParameters, f"{NS}/wheel_dr_node/set_parameters", request).results[0]
    probe.settings_changes += int(result.successful)
    return result


def _get_parameter(probe: Probe, name: str) -> Any:
    from rcl_interfaces.srv import GetParameters

    request = GetParameters.Request(names=[name])
    return probe.call(GetParameters, f"{NS}/wheel_dr_node/get_parameters", request).values[0]


def test_parameters_declared_with_ranges_and_changes_validated(node_run: dict[str, Any]) -> None:
    """Parameters carry descriptions and ranges; a change outside the range (or breaking consistency,
    or of a read-only frame) is refused with the reason and leaves the running settings untouched,
    as the yaw rate of the next drive shows (yaw rate (v_r - v_l)/b, common practice); an accepted
    change is applied to the estimator."""
    from rcl_interfaces.srv import DescribeParameters

    probe = node_run["probe"]
    described = probe.call(DescribeParameters, f"{NS}/wheel_dr_node/describe_parameters",
                           DescribeParameters.Request(names=["wheels.track_width", "frames.odom"])).descriptors
    spec = Settings.spec("wheels.track_width")
    assert described[0].floating_point_range[0].from_value == spec.lo
    assert described[0].floating_point_range[0].to_value == spec.hi
    assert spec.description in described[0].description and spec.range_text() in described[0].description
    assert described[1].read_only

    # Outside the descriptor's closed range rclpy itself refuses (its reason names the parameter and
    # the bounds); on the open bound the settings check refuses with its own sentence.
    refused = _set_parameter(probe, "wheels.track_width", -0.3)
    assert not refused.successful and "wheels.track_width" in refused.reason and "10" in refused.reason
    open_bound = _set_parameter(probe, "slip.clear_fraction", 0.0)
    assert not open_bound.successful and "slip.clear_fraction" in open_bound.reason
    assert "(0, 1)" in open_bound.reason
    both = _set_parameter(probe, "wheels.right_joints", [LEFT])
    assert not both.successful and LEFT in both.reason
    frame = _set_parameter(probe, "frames.odom", "elsewhere")
    assert not frame.successful
    assert _get_parameter(probe, "wheels.track_width").double_value == TRACK_M

    def yaw_rate_after_drive() -> float:
        samples = probe.arc(0.2, 2.0, 4.0)
        _drive(probe, samples)
        return probe.odom_at(samples[-1][0]).twist.twist.angular.z

    rate = yaw_rate_after_drive()
    assert rate == pytest.approx(RADIUS_M * 2.0 / TRACK_M, rel=1e-9)     # old track still in force
    diag = probe.next_diag()
    assert float(diag[3]["param.wheels.track_width"]) == TRACK_M

    accepted = _set_parameter(probe, "wheels.track_width", 0.5)
    assert accepted.successful, accepted.reason
    try:
        assert yaw_rate_after_drive() == pytest.approx(RADIUS_M * 2.0 / 0.5, rel=1e-9)
    finally:
        assert _set_parameter(probe, "wheels.track_width", TRACK_M).successful


def test_bad_input_keeps_the_node_alive_counted_by_kind(node_run: dict[str, Any]) -> None:
    """Bad joint states over DDS (length mismatch, configured joint missing, NaN, stamp zero, stamp
    backwards, huge jump) are counted by kind in /diagnostics and flagged per sample, each kind is
    logged once however often it repeats, and the node keeps running and integrating."""
    probe, proc = node_run["probe"], node_run["proc"]
    _drive(probe, probe.arc(0.05, 1.0, 1.0))
    before = probe.next_diag()[3]
    with probe.lock:
        n_diag = len(probe.diag)
    s0 = probe.stamp_ns
    both = [LEFT, RIGHT]
    bad = []
    for k in range(3):  # each bad kind three times within a second: logged once per kind
        base = s0 + (10 * k + 1) * DT_NS
        bad += [
            probe.js(base + 1, both, [0.0]),                          # lengths differ -> malformed
            probe.js(base + 2, [LEFT], [0.0]),                        # right joint missing
            probe.js(base + 3, both, [float("nan"), 0.0]),            # NaN
            probe.js(0, both, [0.0, 0.0]),                            # stamp zero
            probe.js(s0 - 5 * DT_NS, both, [0.0, 0.0]),               # stamp backwards
        ]
    expected = {"malformed": 3, "missing_joint": 3, "bad_stamp": 3, "non_finite": 3, "stamp_not_increasing": 3}
    probe.stamp_ns = s0 + 40 * DT_NS
    jump = probe.js(probe.stamp_ns, both, [500.0, 500.0])              # 41 m in 0.4 s... per wheel: JUMP
    probe.stamp_ns += DT_NS
    good = probe.js(probe.stamp_ns, both, [500.0, 500.01])
    probe.send(bad + [jump, good])
    assert proc.poll() is None, "the node died on bad input"
    assert probe.wait_flag(probe.stamp_ns)[FLAG_FIELDS.index("status")] == SampleStatus.USED
    after = probe.next_diag()[3]
    for kind, n in expected.items():
        assert int(after[f"skipped.{kind}"]) - int(before[f"skipped.{kind}"]) == n, kind
    assert int(after["restart.jump"]) - int(before["restart.jump"]) == 1
    assert int(after["received"]) - int(before["received"]) == len(bad) + 2
    assert int(after["handler_errors"]) == 0
    with probe.lock:
        warned = [d for d in probe.diag[n_diag:] if d[1] == 1 and "bad input" in d[2]]
    assert warned and "malformed" in warned[0][2]      # WARN level (1) with the kinds named
    time.sleep(0.2)
    log = node_run["log"].read_text()
    for kind in expected:
        assert log.count(f"({kind})") == 1, f"{kind} logged {log.count(f'({kind})')} times:\n{log}"
    status = probe.wait_flag(s0 + DT_NS + 3)[FLAG_FIELDS.index("status")]
    assert status == SampleStatus.NON_FINITE


def test_diagnostics_report_counters_rate_settings_and_sim_time(node_run: dict[str, Any]) -> None:
    """/diagnostics: counters equal what the node was sent; input rate near the 100 Hz sent; settings
    in force listed; stamped with the simulated /clock (use_sim_time); WARN after bad input, OK when
    clean. Counter identity: received = used + restarts + skipped (every sample has one status)."""
    probe = node_run["probe"]
    diag_stamp, level, message, values = probe.next_diag()
    assert abs(diag_stamp - SIM_EPOCH_NS) < 600e9 and abs(diag_stamp - time.time_ns()) > 1e12
    total = int(values["used"]) + int(values["chain_restarts"]) + int(values["skipped"])
    assert total == int(values["received"])
    # The first sample starts the chain, and so does the first one after each accepted settings change.
    assert int(values["restart.chain_start"]) == 1 + probe.settings_changes
    assert values["param.wheels.left_joints"] == f"[{LEFT}]"
    assert values["param.frames.odom"] == ODOM_FRAME and values["tf"] == "on"
    samples = probe.arc(1.2, 2.0, 2.0)
    with probe.lock:
        n_diag = len(probe.diag)
    _drive(probe, samples)
    with probe.lock:
        during = [d for d in probe.diag[n_diag:]]
    rates = [float(d[3]["input_rate_hz"]) for d in during[1:-1]]
    assert rates and all(50.0 < r < 150.0 for r in rates), rates  # 100 Hz sent, scheduling jitter allowed
    assert all(d[1] == 0 for d in during[1:-1]), [d[2] for d in during]
    assert float(during[-1][3]["latency_total_p50_us"]) > 0
    # IMU input (sensor_msgs/Imu) is read: five messages, five counted.
    imu_before = int(probe.next_diag()[3]["imu_received"])
    for k in range(5):
        imu = probe.Imu()
        imu.angular_velocity.z = 0.1 * k
        probe.pub_imu.publish(imu)
        time.sleep(0.01)
    _wait(lambda: int(probe.next_diag()[3]["imu_received"]) - imu_before == 5, 10, "five IMU messages counted")


def test_wheels_speeding_up_while_the_accelerometer_reads_nothing_are_flagged(node_run: dict[str, Any]) -> None:
    """A lifted base: the wheels spin up to 0.5 m/s while the IMU's x acceleration stays at zero
    (level, gyro quiet). The node parses Imu linear_acceleration and flags the accelerometer
    detector (bit 8 of the flags' detector field, wheel_dr.core.slip_motion); a cmd_vel Twist is
    subscribed by type once it is published. Samples before the spin-up are not flagged."""
    from geometry_msgs.msg import Twist

    probe = node_run["probe"]
    pub_cmd = probe.node.create_publisher(Twist, f"{NS}/cmd_vel", 10)
    imu = probe.Imu()
    imu.header.frame_id = "imu_link"
    imu.orientation_covariance[0] = -1.0          # orientation unknown
    imu.angular_velocity_covariance[0] = 1e-4
    imu.linear_acceleration_covariance[0] = 4e-4
    imu.linear_acceleration.z = 9.80665
    cmd = Twist()
    probe.stamp_ns += 1_000_000_000
    angle, speed, stamps = 0.0, 0.0, []
    start = time.monotonic()
    for k in range(300):                          # 1.5 s still, then 0.5 s at 1 m/s^2, then 1 s cruise
        t = k * DT_NS * 1e-9
        speed = 0.0 if t < 1.5 else min(0.5, (t - 1.5) * 1.0)
        angle += speed / RADIUS_M * DT_NS * 1e-9
        probe.stamp_ns += DT_NS
        imu.header.stamp.sec, imu.header.stamp.nanosec = divmod(probe.stamp_ns, 1_000_000_000)
        probe.pub_imu.publish(imu)
        cmd.linear.x = 0.0 if t < 1.5 else 0.5
        if k % 5 == 0:
            pub_cmd.publish(cmd)
        probe.pub_js.publish(probe.js(probe.stamp_ns, [LEFT, RIGHT], [angle, angle]))
        stamps.append(probe.stamp_ns)
        delay = start + (k + 1) * 0.01 - time.monotonic()
        if delay > 0:
            time.sleep(delay)
    last = probe.wait_flag(stamps[-1])
    col = FLAG_FIELDS.index("detector")
    with probe.lock:
        rows = {int(f.data[0]) * 1_000_000_000 + int(f.data[1]): list(f.data) for f in probe.flags[-400:]}
    before = [rows[s] for s in stamps[:140] if s in rows]
    after = [rows[s] for s in stamps[220:] if s in rows]
    assert before and after
    assert not any(int(r[col]) & 8 for r in before)
    assert sum(1 for r in after if int(r[col]) & 8 and r[FLAG_FIELDS.index("slip")] == 1.0) >= 0.9 * len(after)
    assert int(last[col]) & 8
    diag = probe.next_diag()[3]
    assert diag["imu_acceleration"] == "read" and "8 accel" in diag["slip_detector_bits"]
    probe.node.destroy_publisher(pub_cmd)


def test_sigterm_ends_the_node_cleanly(node_run: dict[str, Any]) -> None:
    """SIGTERM: exit code 0, no traceback (runs last in this module)."""
    proc = node_run["proc"]
    proc.send_signal(signal.SIGTERM)
    assert proc.wait(timeout=15) == 0
    log = node_run["log"].read_text()
    assert "Traceback" not in log


# --- start-up failures and the no-TF fallback (own short processes) ---------------------------------
@pytest.mark.parametrize("body, expect", [
    ("/**:\n  ros__parameters:\n    wheels:\n      track_width: -1.0\n", ["wheels.track_width", "[0.001, 10]"]),
    ("/**:\n  ros__parameters:\n    wheels:\n      source: ticks\n      ticks_per_revolution: 1.0e-200\n"
     "      gear_ratio: 1.0e-200\n", ["wheels.ticks_per_revolution", "[1, 1e+09]"]),
    ("/**:\n  ros__parameters:\n    slip:\n      long_window_s: 0.05\n", ["slip.long_window_s", "slip.window_s"]),
    ("/**:\n  ros__parameters:\n    noise:\n      k_lft: 0.1\n", ["noise.k_lft", "not a wheel_dr parameter"]),
    ("/**:\n  ros__parameters:\n    integration: rk4\n", ["integration", "euler, midpoint, exact"]),
    ("/**:\n  ros__parameters:\n    wheels: [track_width: 1\n", ["not valid YAML"]),
])
def test_invalid_params_file_one_line_nonzero_exit(tmp_path: Path, ros_env: dict[str, str], body: str,
                                                   expect: list[str]) -> None:
    """Invalid parameters: exit code 2 and one line on stderr naming the parameter and range (or the
    file problem), no traceback."""
    f = tmp_path / "bad.yaml"
    f.write_text(body)
    out = subprocess.run([NODE_EXE, "--ros-args", "--params-file", str(f)], env=ros_env,
                         capture_output=True, text=True, timeout=60)
    assert out.returncode == 2
    lines = [ln for ln in out.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, out.stderr
    for word in expect:
        assert word in lines[0]
    assert "Traceback" not in out.stderr + out.stdout


def test_without_tf2_msgs_the_node_runs_with_tf_disabled(tmp_path: Path, ros_env: dict[str, str]) -> None:
    """Where tf2_msgs cannot be imported the node warns once and the rest works (odometry and flags
    come back; here with the executor-served input fallback, WHEEL_DR_INPUT_LOOP=executor, so that
    path is exercised too); SIGINT ends it with exit code 0."""
    env = dict(ros_env)
    env["PYTHONPATH"] = ":".join(p for p in env.get("PYTHONPATH", "").split(":") if ".ros_ws" not in p)
    env["WHEEL_DR_INPUT_LOOP"] = "executor"
    log = tmp_path / "node.log"
    with log.open("w") as fh:
        proc = subprocess.Popen([NODE_EXE, "--ros-args", "-r", "__ns:=/no_tf"], env=env, stdout=fh,
                                stderr=subprocess.STDOUT)
        probe = Probe(ns="/no_tf", js_topic="/no_tf/joint_states")
        try:
            _wait(lambda: probe.pub_js.get_subscription_count() > 0 or proc.poll() is not None, 30, "start-up")
            _wait(lambda: probe.node.count_publishers("/no_tf/odom_flags") > 0, 10, "the flags publisher")
            names = ["left_wheel_joint", "right_wheel_joint"]   # the default parameters' joints
            probe.handshake(names)
            samples = probe.arc(0.2, 1.0, 2.0)
            probe.send([probe.js(s, names, p) for s, p in samples])
            odom = probe.odom_at(samples[-1][0])
            assert odom.header.frame_id == "odom" and odom.pose.pose.position.x > 0
            assert proc.poll() is None, log.read_text()
        finally:
            probe.close()
            proc.send_signal(signal.SIGINT)
            rc = proc.wait(timeout=15)
    text = log.read_text()
    assert rc == 0, text
    assert text.count("TF output disabled") == 1 and "TF off" in text
    assert "served by the general executor" in text
    assert "Traceback" not in text

