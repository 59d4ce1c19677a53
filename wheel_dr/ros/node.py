"""The wheel_dr runtime node: joint states (and an optional IMU) in; odometry, TF, slip flags and diagnostics out.

A thin rclpy shell around ``wheel_dr.core.Estimator``: it converts messages to the core's inputs,
calls ``Estimator.step`` once per joint-state message and publishes what the core computed.

Interfaces (relative names follow the node's namespace and remaps):

* subscribes ``joint_states`` (sensor_msgs/JointState, sensor-data QoS: best effort, depth 100),
  ``imu`` (sensor_msgs/Imu, optional: the latest z rate, x acceleration and orientation go to the
  slip detectors; fields whose covariance[0] is -1 are unknown) and ``cmd_vel`` (optional,
  geometry_msgs/Twist or TwistStamped, whichever the graph offers: the commanded speed for the
  command detector; subscribed once a publisher appears);
* publishes ``odom`` (nav_msgs/Odometry, frame ``frames.odom`` -> child ``frames.base``, stamped
  with the joint-state stamp), ``/tf`` (tf2_msgs/TFMessage, when ``output.publish_tf``),
  ``odom_flags`` (std_msgs/Float64MultiArray, one per joint-state sample, fields in
  ``wheel_dr.ros.convert.FLAG_FIELDS``) and ``/diagnostics`` (diagnostic_msgs/DiagnosticArray
  every ``output.diagnostics_period_s``);
* service ``~/reset`` (std_srvs/Trigger): pose and covariance to zero;
  with ``online_calibration.enabled``: topic ``~/geometry`` (std_msgs/Float64MultiArray, one per
  estimate interval, fields in ``wheel_dr.core.online_calibration.GEOMETRY_FIELDS``) and service
  ``~/save_geometry`` (std_srvs/Trigger): the running parameters file with the suggested geometry,
  written beside it (``wheel-dr calibrate``'s writer); the geometry alert is a WARN in /diagnostics;
  topic ``~/reanchor`` (geometry_msgs/PoseWithCovarianceStamped in the odom frame): pose and
  (x, y, yaw) covariance set to the given ones.

Parameters are wheel_dr's settings under their dotted names (``wheels.track_width``, ...), declared
with descriptions and ranges; a change at run time is validated by ``Settings.from_flat`` and either
applied (``Estimator.update_settings``) or refused with the reason.

Threads: the joint-state and IMU subscriptions are served by a dedicated wait loop in the main
thread (one wait set with just those two subscriptions, the same primitive rclpy's own
``wait_for_message`` uses), because the general executor rebuilds its wait set over every entity
on each wake-up and costs more than the estimator at 1 kHz. Services, parameters, the re-anchor
topic and the diagnostics timer run in a SingleThreadedExecutor on a second thread; a lock keeps
the estimator consistent between the two.

The safety caution (``wheel_dr.safety.SAFETY_TEXT``) is part of ``--help``.
"""
from __future__ import annotations

import gc
import math
import os
import signal
import sys
import textwrap
import threading
import time
from contextlib import ExitStack
from typing import Any, Sequence

import numpy as np

from ..core.errors import InputError, SettingsError
from ..core.estimator import Estimator
from ..core.settings import Settings
from ..core.wheels import RESTART_KINDS, SKIP_KINDS, SampleStatus
from ..params import NODE_NAME
from ..safety import SAFETY_TEXT
from .convert import (CdrError, RawOdometryWriter, flag_values, key_values, parameter_descriptor, parameter_value,
                      parse_imu_motion, parse_joint_state, pose_from_msg, python_value, DETECTOR_BITS_TEXT)

__all__ = ["OdometryNode", "create", "main", "READ_ONLY_PARAMETERS", "LOG_THROTTLE_S", "ROS_OWNED_PREFIXES"]

READ_ONLY_PARAMETERS = frozenset({"frames.odom", "frames.base"})  # TF consumers expect fixed frames
LOG_THROTTLE_S = 5.0           # a kind of bad input is logged at most once per this many seconds
JOINT_STATE_DEPTH = 100        # sensor-data QoS (best effort, volatile) with room for 100 ms at 1 kHz
WAIT_TIMEOUT_NS = 100_000_000  # the input loop checks for a stop request at least this often
GIL_SWITCH_INTERVAL_S = 0.0005  # Python's default is 5 ms, longer than a 1 kHz sample period
LATENCY_BIN_US = 1             # latency histogram resolution
LATENCY_MAX_US = 50_000        # and range (longer latencies go to the last bin)
INPUT_LOOP_ENV = "WHEEL_DR_INPUT_LOOP"  # "executor": serve the inputs from the executor (fallback, slower)
# Parameters that belong to ROS 2 itself, not to wheel_dr's settings.
ROS_OWNED_PREFIXES = ("use_sim_time", "qos_overrides.", "start_type_description_service")

_SKIP_TEXT = {
    SampleStatus.MALFORMED: "names, positions and velocities have different lengths",
    SampleStatus.BAD_STAMP: "header stamp is zero or negative (the driver must stamp its joint states)",
    SampleStatus.MISSING_JOINT: "a configured wheel joint is not in the message (check wheels.left_joints "
                                "and wheels.right_joints against the driver's joint names)",
    SampleStatus.NON_FINITE: "a needed position or velocity is NaN or infinite",
    SampleStatus.STAMP_NOT_INCREASING: "the stamp repeats or goes backwards",
    SampleStatus.GAP: "gap since the last sample exceeds limits.max_gap_s: increment dropped, chain restarts",
    SampleStatus.JUMP: "a wheel speed exceeds limits.max_wheel_speed_mps (encoder jump or glitch): "
                       "increment dropped, chain restarts",
}


def _is_ros_owned(name: str) -> bool:
    """True for parameters of ROS 2 itself (sim time, QoS overrides), which the settings ignore."""
    return any(name.startswith(p) if p.endswith(".") else name == p for p in ROS_OWNED_PREFIXES)


class _LatencyStats:
    """Receipt -> odom-publish latencies: the current period's list and a histogram since start (µs)."""

    def __init__(self) -> None:
        self.period: list[int] = []
        self.hist = np.zeros(LATENCY_MAX_US // LATENCY_BIN_US + 1, dtype=np.int64)
        self.max_ns = 0

    def add(self, latency_ns: int) -> None:
        self.period.append(latency_ns)

    def take(self) -> list[int]:
        """The period's latencies (ns), starting a new period (cheap: called under the estimator lock)."""
        period, self.period = self.period, []
        return period

    def summarize(self, period: list[int]) -> dict[str, float]:
        """Fold a period into the histogram; return period and total p50/p99/max in µs (executor thread)."""
        out: dict[str, float] = {}
        if period:
            arr = np.asarray(period, dtype=np.float64) * 1e-3
            out["latency_p50_us"] = float(np.percentile(arr, 50))
            out["latency_p99_us"] = float(np.percentile(arr, 99))
            out["latency_max_us"] = float(arr.max())
            idx = np.minimum((arr / LATENCY_BIN_US).astype(np.int64), len(self.hist) - 1)
            np.add.at(self.hist, idx, 1)
            self.max_ns = max(self.max_ns, max(period))
        total = int(self.hist.sum())
        if total:
            cum = np.cumsum(self.hist)
            out["latency_total_count"] = total
            out["latency_total_p50_us"] = float(np.searchsorted(cum, 0.5 * total) * LATENCY_BIN_US)
            out["latency_total_p99_us"] = float(np.searchsorted(cum, 0.99 * total) * LATENCY_BIN_US)
            out["latency_total_max_us"] = self.max_ns * 1e-3
        return out


class OdometryNode:
    """The node's state and callbacks around one rclpy Node (built by ``create``)."""

    def __init__(self, node: Any, settings: Settings, tf_type: type | None, tf_problem: str | None) -> None:
        from diagnostic_msgs.msg import DiagnosticArray
        from geometry_msgs.msg import PoseWithCovarianceStamped
        from nav_msgs.msg import Odometry
        from rclpy.qos import QoSProfile, qos_profile_sensor_data
        from sensor_msgs.msg import Imu, JointState
        from std_msgs.msg import Float64MultiArray
        from std_srvs.srv import Trigger

        self.node = node
        self.log = node.get_logger()
        self.settings = settings
        self._out_period_ns = _output_period_ns(settings)
        self.estimator = Estimator(settings)
        self.lock = threading.Lock()
        self._tf_type = tf_type
        self._writer = RawOdometryWriter(settings.frames.odom, settings.frames.base, tf_type, _flag_wheels(settings))
        self._last_log: dict[str, float] = {}
        self.received = 0
        self.imu_received = 0
        self.handler_errors = 0
        self.undecodable = 0           # joint-state messages whose bytes are not a JointState
        self._period_errors = 0
        self._last_error = ""
        self._next_out_ns = 0          # output.rate_hz: stamp from which the next output is due
        self._flag_slip = False        # slip flag of the last flags message sent
        self.reanchor_refused = 0
        self._gyro_z: float | None = None
        self._gyro_mono = -math.inf
        self._accel_x: float | None = None
        self._up_x: float | None = None
        self._cmd_v: float | None = None
        self._cmd_mono = -math.inf
        self.cmd_received = 0
        self.sub_cmd = None
        self._cmd_type = "none"
        self._period_received = 0
        self._period_start = time.monotonic()
        self._period_slip = 0
        self._last_slip: tuple[int, float, int] | None = None  # stamp_ns, score, detector
        self._period_skipped: dict[str, int] = {}
        self._latency = _LatencyStats()

        node.add_on_set_parameters_callback(self._on_set_parameters)
        self.pub_odom = node.create_publisher(Odometry, "odom", 10)
        self.pub_flags = node.create_publisher(Float64MultiArray, "odom_flags", 10)
        self.pub_diag = node.create_publisher(DiagnosticArray, "/diagnostics", 10)
        self.pub_tf = None
        self.tf_problem = tf_problem
        if tf_type is not None:
            try:
                self.pub_tf = node.create_publisher(tf_type, "/tf", QoSProfile(depth=100))
            except Exception as exc:  # a broken type support: keep running without TF
                self.tf_problem = f"{exc.__class__.__name__}: {exc}"
        if self.tf_problem is not None:
            self.log.warning(f"TF output disabled: tf2_msgs cannot be used in this process ({self.tf_problem}); "
                             "odometry, flags and diagnostics are still published. On a robot, source the ROS 2 "
                             "installation; with the venv, run `make tf-msgs` and `. tools/ros_env.sh`.")
        self.srv_reset = node.create_service(Trigger, "~/reset", self._on_reset)
        self.pub_geometry = node.create_publisher(Float64MultiArray, "~/geometry", 10)
        self.srv_save_geometry = node.create_service(Trigger, "~/save_geometry", self._on_save_geometry)
        self.params_files: list[str] = []   # the --params-file paths the node was started with (set by main)
        self._Float64MultiArray = Float64MultiArray
        self._geometry_applied = 0
        # online_calibration.reference_topic: a localisation pose gives the scale (subscribed once it appears)
        self.sub_reference = None
        self._reference_type = "none"
        self.reference_received = 0
        self.reference_refused = 0
        self._odom_history: list[tuple[int, float, float]] = []   # (stamp_ns, x, y) of recent accepted samples
        self._reference_timer = node.create_timer(1.0, self._find_reference)
        self.sub_reanchor = node.create_subscription(PoseWithCovarianceStamped, "~/reanchor",
                                                     self._on_reanchor, 10)
        self._diag_timer = node.create_timer(settings.output.diagnostics_period_s, self._on_diagnostics)
        self._cmd_timer = node.create_timer(1.0, self._find_cmd_vel)

        js_qos = QoSProfile(depth=JOINT_STATE_DEPTH, reliability=qos_profile_sensor_data.reliability,
                            durability=qos_profile_sensor_data.durability,
                            history=qos_profile_sensor_data.history)
        self._input_group = _never_group()
        # raw=True: the input loop gets serialised bytes and parses only the fields it needs.
        self.sub_js = node.create_subscription(JointState, "joint_states", self._on_joint_state_cb, js_qos,
                                               callback_group=self._input_group, raw=True)
        self.sub_imu = node.create_subscription(Imu, "imu", self._on_imu_cb, js_qos,
                                                callback_group=self._input_group, raw=True)
        self._JointState = JointState
        self._Imu = Imu
        self._DiagnosticArray = DiagnosticArray
        self.log.info(f"wheel_dr odometry: joint states on {self.sub_js.topic_name}, odometry on "
                      f"{self.pub_odom.topic_name} ({settings.frames.odom} -> {settings.frames.base}), "
                      f"TF {'on' if self.pub_tf is not None and settings.output.publish_tf else 'off'}.")

    # -- logging ---------------------------------------------------------------------------------
    def _throttled(self, key: str, level: str, text: str) -> None:
        """Log ``text`` at most once per LOG_THROTTLE_S for each ``key``."""
        now = time.monotonic()
        if now - self._last_log.get(key, -math.inf) < LOG_THROTTLE_S:
            return
        self._last_log[key] = now
        try:
            # rclpy fixes the severity per call site, hence one call per level.
            if level == "info":
                self.log.info(text)
            elif level == "warning":
                self.log.warning(text)
            else:
                self.log.error(text)
        except Exception:  # logging must never stop the node
            pass

    # -- inputs ----------------------------------------------------------------------------------
    def _on_joint_state_cb(self, raw: bytes, info: Any) -> None:
        """Executor form of the joint-state input (used only when the dedicated loop is unavailable)."""
        self.on_joint_state(raw, int(info.get("received_timestamp", 0)))

    def _on_imu_cb(self, raw: bytes) -> None:
        self.on_imu(raw)

    def on_imu(self, raw: bytes) -> None:
        """Keep the latest gyro z rate (rad/s), x acceleration (m/s^2) and up_x (IMU axes assumed
        aligned with the base's; its position is ``imu.position_m``)."""
        try:
            self.imu_received += 1
            wz, provided, ax, accel_ok, up = parse_imu_motion(raw)
            self._accel_x = ax if accel_ok and math.isfinite(ax) else None
            self._up_x = up if math.isfinite(up) else None
            self._gyro_mono = time.monotonic()
            if not provided or not math.isfinite(wz):
                self._gyro_z = None
                return
            self._gyro_z = wz
        except CdrError as exc:  # bytes that are not an Imu: ignored, counted
            self._gyro_z = self._accel_x = self._up_x = None
            self.undecodable += 1
            self._throttled("imu_undecodable", "warning", f"imu message cannot be decoded ({exc}); it is ignored.")
        except Exception as exc:  # never die on a bad message
            self._handler_error("imu", exc)

    def _find_cmd_vel(self) -> None:
        """Subscribe ``cmd_vel`` with the type its publishers use (Twist or TwistStamped), once."""
        try:
            if self.sub_cmd is not None:
                self._cmd_timer.cancel()
                return
            from geometry_msgs.msg import Twist, TwistStamped

            name = self.node.resolve_topic_name("cmd_vel")
            types = dict(self.node.get_topic_names_and_types()).get(name, [])
            if "geometry_msgs/msg/TwistStamped" in types:
                self.sub_cmd = self.node.create_subscription(TwistStamped, "cmd_vel", self.on_cmd_vel, 10)
                self._cmd_type = "geometry_msgs/TwistStamped"
            elif "geometry_msgs/msg/Twist" in types:
                self.sub_cmd = self.node.create_subscription(Twist, "cmd_vel", self.on_cmd_vel, 10)
                self._cmd_type = "geometry_msgs/Twist"
        except Exception as exc:
            self._handler_error("cmd_vel", exc)

    def on_cmd_vel(self, msg: Any) -> None:
        """Keep the latest commanded forward speed (m/s) and when it came."""
        try:
            self.cmd_received += 1
            vx = float(msg.twist.linear.x if hasattr(msg, "twist") else msg.linear.x)
            self._cmd_v = vx if math.isfinite(vx) else None
            self._cmd_mono = time.monotonic()
        except Exception as exc:  # never die on a bad message
            self._handler_error("cmd_vel", exc)

    def on_joint_state(self, raw: bytes, received_ns: int) -> None:
        """One serialised joint-state message: estimator step, then odometry, TF and flags. Never raises."""
        try:
            self._joint_state(raw, received_ns or time.time_ns())
        except Exception as exc:  # never die on a bad message
            self._handler_error("joint_states", exc)

    def _handler_error(self, topic: str, exc: BaseException) -> None:
        """A message handler failed: counted, logged (throttled), diagnostics ERROR for the period."""
        self.handler_errors += 1
        self._period_errors += 1
        self._last_error = f"{exc.__class__.__name__}: {exc}"[:200]
        self._throttled(f"{topic}_handler_error", "error",
                        f"{topic} message could not be processed ({self._last_error}); it is skipped "
                        f"({self.handler_errors} handler errors so far, logged at most every {LOG_THROTTLE_S:g} s).")

    def _joint_state(self, raw: bytes, received_ns: int) -> None:
        self.received += 1
        try:
            sec, nanosec, names, positions, velocities = parse_joint_state(raw)
        except CdrError as exc:  # bytes that are not a JointState: a malformed sample
            self.undecodable += 1
            with self.lock:
                self.estimator.counters["malformed"] += 1
                self._period_received += 1
                self._period_skipped["malformed"] = self._period_skipped.get("malformed", 0) + 1
            self._throttled("undecodable", "warning", f"joint_states message cannot be decoded ({exc}); it is "
                                                      f"skipped as malformed ({self.undecodable} so far).")
            return
        stamp_ns = sec * 1_000_000_000 + nanosec
        gyro, accel, up, cmd = self._gyro_z, self._accel_x, self._up_x, self._cmd_v
        with self.lock:
            self._period_received += 1
            writer = self._writer
            est = self.estimator
            now = time.monotonic()
            if now - self._gyro_mono > self.settings.limits.max_gap_s:
                gyro = accel = up = None  # stale IMU
            if cmd is not None and now - self._cmd_mono > self.settings.slip.command_timeout_s:
                cmd = None  # stale command
            status = est.step(stamp_ns, names, positions, velocities, gyro, accel, up, cmd)
            online = est.online
            geometry = online.values() if online is not None and online.stamp_ns == stamp_ns else None
            if status < 10 and online is not None and online.scale is not None:
                hist = self._odom_history
                hist.append((stamp_ns, est.x_m, est.y_m))
                if len(hist) > ODOM_HISTORY:
                    del hist[:len(hist) - ODOM_HISTORY // 2]
            due = status < 10
            period_ns = self._out_period_ns
            if due and period_ns:
                due = stamp_ns >= self._next_out_ns or status != SampleStatus.USED
                if due:   # next output at the next multiple of the period (by sample stamp)
                    self._next_out_ns = (stamp_ns // period_ns + 1) * period_ns
            if due:
                self.pub_odom.publish(writer.odometry(sec, nanosec, est.x_m, est.y_m, est.yaw_rad, est.cov,
                                                      est.v_mps, est.w_radps, est.twist_cov, est.vy_mps))
                self._latency.add(time.time_ns() - received_ns)
                if self.pub_tf is not None and writer.has_tf and self.settings.output.publish_tf:
                    self.pub_tf.publish(writer.tf())
            slip = est.last_slip if status < 10 else None
            if slip is not None and slip.slip:
                self._period_slip += 1
                self._last_slip = (stamp_ns, float(slip.score), int(slip.detector))
            # between outputs, a change of the slip flag is still sent at once
            flags_due = not period_ns or due or (slip is not None and bool(slip.slip) != self._flag_slip)
            if flags_due and slip is not None:
                self._flag_slip = bool(slip.slip)
            noteworthy = status != SampleStatus.USED and status != SampleStatus.CHAIN_START
            if noteworthy and status != SampleStatus.GAP:  # a gap (the driver paused) is not bad input
                kind = status.name.lower()
                self._period_skipped[kind] = self._period_skipped.get(kind, 0) + 1
        if flags_due:
            self.pub_flags.publish(writer.flags(flag_values(sec, nanosec, int(status), slip, writer.n_wheels)))
        if geometry is not None:
            self._publish_geometry(geometry)
        if noteworthy:
            self._note_status(status)

    def _note_status(self, status: SampleStatus) -> None:
        """Log a skipped or restarting sample, throttled per kind."""
        kind = status.name.lower()
        count = self.estimator.counters.get(kind, 0)
        level = "info" if status == SampleStatus.GAP else "warning"
        what = "skipped" if status in SKIP_KINDS else "accepted with restart"
        self._throttled(kind, level, f"joint_states sample {what} ({kind}): {_SKIP_TEXT[status]}; "
                                     f"{count} such samples so far (logged at most every {LOG_THROTTLE_S:g} s).")

    # -- the dedicated input loop ---------------------------------------------------------------------
    def spin_inputs(self, stop: threading.Event) -> bool:
        """Serve joint_states and imu until ``stop`` is set or the context shuts down (main thread).

        Returns False at once, without serving anything, when the dedicated loop cannot be set up
        (``WHEEL_DR_INPUT_LOOP=executor`` or an rclpy without the wait-set primitive); the caller
        then hands the inputs to the executor (``serve_inputs_from_executor``).
        """
        if os.environ.get(INPUT_LOOP_ENV) == "executor":
            return False
        try:
            from rclpy.guard_condition import GuardCondition
            from rclpy.impl.implementation_singleton import rclpy_implementation as _rclpy

            context = self.node.context
            self._wake = GuardCondition(None, None, context=context)
            wait_set = _rclpy.WaitSet(2, 1, 0, 0, 0, 0, context.handle)
        except (ImportError, AttributeError, TypeError):
            return False
        js, imu = self.sub_js, self.sub_imu
        JointState, Imu = self._JointState, self._Imu
        with ExitStack() as stack:
            stack.enter_context(js.handle)
            stack.enter_context(imu.handle)
            stack.enter_context(self._wake.handle)
            take_js, take_imu = js.handle.take_message, imu.handle.take_message
            while not stop.is_set() and context.ok():
                wait_set.clear_entities()
                i_js = wait_set.add_subscription(js.handle)
                i_imu = wait_set.add_subscription(imu.handle)
                wait_set.add_guard_condition(self._wake.handle)
                wait_set.wait(WAIT_TIMEOUT_NS)
                # Level-triggered: one message per ready subscription per wake-up; more waiting ones
                # make the next wait return at once (saves an empty take per message).
                if wait_set.is_ready("subscription", i_imu):
                    got = take_imu(Imu, True)
                    if got is not None:
                        self.on_imu(got[0])
                if wait_set.is_ready("subscription", i_js):
                    got = take_js(JointState, True)
                    if got is not None:
                        self.on_joint_state(got[0], int(got[1].get("received_timestamp", 0)))
        return True

    def serve_inputs_from_executor(self) -> None:
        """Let the executor serve joint_states and imu (slower fallback of the dedicated loop)."""
        self._input_group.served_by_executor = True
        self.log.warning("joint_states are served by the general executor (fallback; about twice the CPU "
                         "per message of the dedicated input loop).")

    def wake(self) -> None:
        """Make the input loop look at its stop flag now."""
        wake = getattr(self, "_wake", None)
        if wake is not None:
            wake.trigger()

    # -- services and topics on the executor thread -------------------------------------------------
    def _on_reset(self, request: Any, response: Any) -> Any:
        try:
            with self.lock:
                self.estimator.reset()
                self._pose_jumped()
            response.success = True
            response.message = "pose and covariance set to zero"
            self.log.info("reset: pose and covariance set to zero.")
        except Exception as exc:
            response.success = False
            response.message = f"reset failed ({exc.__class__.__name__}: {exc})"
        return response

    def _publish_geometry(self, values: list[float]) -> None:
        """One ~/geometry message (layout label GEOMETRY_LABEL)."""
        from std_msgs.msg import MultiArrayDimension

        from ..core.online_calibration import GEOMETRY_FIELDS, GEOMETRY_LABEL
        msg = self._Float64MultiArray()
        msg.layout.dim = [MultiArrayDimension(label=GEOMETRY_LABEL, size=len(GEOMETRY_FIELDS),
                                              stride=len(GEOMETRY_FIELDS))]
        msg.data = values
        self.pub_geometry.publish(msg)

    def _on_save_geometry(self, request: Any, response: Any) -> Any:
        try:
            response.success, response.message = self.save_geometry()
        except Exception as exc:
            response.success = False
            response.message = f"saving the geometry failed ({exc.__class__.__name__}: {exc})"
        (self.log.info if response.success else self.log.warning)(f"save_geometry: {response.message}")
        return response

    def save_geometry(self) -> tuple[bool, str]:
        """Write the running parameters file with the suggested geometry beside it (or, started without
        one, ``wheel_dr_geometry.yaml`` in the working directory); (success, one sentence)."""
        from ..calibrate_cmd import _rounded
        from ..params import atomic_write_text, update_params_text
        with self.lock:
            online = self.estimator.online
            if online is None and self.estimator.online_table is not None:
                table_online = self.estimator.online_table
                return self._save_table_geometry(table_online.result(), table_online.table)
            if online is None:
                return False, ("online_calibration.enabled is false, so there is no estimate to save; set it to "
                               "true (with an IMU on the imu topic) and drive.")
            left, right, track = online.suggested()
            status = f"radius ratio {online.status_ratio}, track over radius {online.status_track}"
            ratio, ratio_se, tor, tor_se = online.ratio, online.ratio_se, online.track, online.track_se
            sc = online.scale
            scale_line = ("The gyro cannot observe the mean radius (the scale): it is kept as configured; check the "
                          "distance against a known one." if sc is None or not sc.ready else
                          f"Scale (true over configured mean radius) {sc.scale:.5f} +- {sc.se:.5f} from "
                          f"{sc.windows} windows of {self.settings.online_calibration.reference_topic}.")
        text, target, label, when = self._geometry_file()
        values = _rounded({"wheels.left_radius": left, "wheels.right_radius": right, "wheels.track_width": track})
        header = "\n".join([
            f"description: Geometry suggested by the wheel_dr node's online self-calibration on {when} from {label}.",
            f"Online self-calibration on {when}, starting from {label} (every other value is as there).",
            f"Radius ratio {ratio:.6f} +- {ratio_se:.6f}, track over mean radius {tor:.5f} +- {tor_se:.5f} "
            f"({status}).",
            scale_line,
            SAFETY_TEXT])
        atomic_write_text(target, update_params_text(text, values, header))
        return True, (f"wrote {target} (left radius {values['wheels.left_radius']} m, right radius "
                      f"{values['wheels.right_radius']} m, track {values['wheels.track_width']} m; {status})")

    def _geometry_file(self) -> tuple:
        """(text of the running parameters file, path of the file to write beside it, its label, the
        time) for ``save_geometry``; the defaults file and the working directory without one."""
        import datetime as _dt
        from pathlib import Path

        from ..calibrate_cmd import default_params_text
        running = self.params_files[-1] if self.params_files else None
        if running is not None:
            src = Path(running)
            text, target, label = src.read_text(encoding="utf-8"), src.with_name(f"{src.stem}_geometry.yaml"), str(src)
        else:
            text, target, label = default_params_text(), Path.cwd() / "wheel_dr_geometry.yaml", \
                "config/wheel_dr.yaml defaults"
        return text, target, label, _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")

    def _save_table_geometry(self, res, table) -> tuple[bool, str]:
        """``save_geometry`` for a wheel table: the table moved along its observed combinations
        (``TableOnlineResult.suggested``), as drive.* arrays, beside the running file."""
        from ..params import atomic_write_text, update_params_text
        if not res.observed:
            return False, ("the gyro observes no combination of the wheel table yet (too little driving or turning); "
                           "drive with turns and try again.")
        keys = ["drive.wheel_radius", "drive.wheel_x", "drive.wheel_y"]
        if table.steered.any():
            keys.append("drive.steer_offset")
        sugg = res.suggested(table)
        values = {k: [round(float(v), 6) for v in sugg[k]] for k in keys}
        text, target, label, when = self._geometry_file()
        lines = [f"c{k} = {c.text}: {100 * c.estimate:+.3f} % +- {100 * c.se:.3f} %" + (" (alert)" if c.alert else "")
                 for k, c in enumerate(res.observed, start=1)]
        header = "\n".join([
            f"description: Wheel table suggested by the wheel_dr node's online self-calibration on {when} from {label}.",
            f"Online self-calibration on {when}, starting from {label} (every other value is as there).",
            "The table is moved along the combinations the gyro observes only; the scale (all radii and "
            "positions together) is kept as configured."] + lines + [SAFETY_TEXT])
        atomic_write_text(target, update_params_text(text, values, header))
        return True, (f"wrote {target} (wheel table moved along {len(res.observed)} observed combinations; "
                      f"alert {'on' if res.alert else 'off'})")

    def _apply_geometry(self) -> None:
        """online_calibration.apply: while the alert holds, take the suggested geometry as the running one."""
        from rclpy.parameter import Parameter

        with self.lock:
            online = self.estimator.online
            if online is None or not online.alert_any or not self.settings.online_calibration.apply:
                return
            left, right, track = online.suggested()
        result = self.node.set_parameters([Parameter("wheels.left_radius", value=float(left)),
                                           Parameter("wheels.right_radius", value=float(right)),
                                           Parameter("wheels.track_width", value=float(track))])
        if all(r.successful for r in result):
            self._geometry_applied += 1
            self.log.warning(f"online calibration applied: left radius {left:.6f} m, right radius {right:.6f} m, "
                             f"track {track:.6f} m (online_calibration.apply is true).")

    def _pose_jumped(self) -> None:
        """The odometry pose was set (reset, re-anchor): the scale's open window is dropped (lock held)."""
        self._odom_history = []
        online = self.estimator.online
        if online is not None and online.scale is not None:
            online.scale.restart_window()

    def _find_reference(self) -> None:
        """Subscribe online_calibration.reference_topic with the type its publishers use, once."""
        try:
            topic = self.settings.online_calibration.reference_topic
            if self.sub_reference is not None or not topic or not self.settings.online_calibration.enabled:
                return
            from geometry_msgs.msg import PoseStamped, PoseWithCovarianceStamped
            from nav_msgs.msg import Odometry

            try:
                name = self.node.resolve_topic_name(topic)
            except Exception:   # not a valid topic name: say so (throttled), do not count it as a handler error
                self._throttled("reference_name", "warning",
                                f"online_calibration.reference_topic '{topic}' is not a valid topic name; give a "
                                "name such as /localisation/pose, or '' for none.")
                return
            types = dict(self.node.get_topic_names_and_types()).get(name, [])
            for type_name, cls in (("geometry_msgs/msg/PoseWithCovarianceStamped", PoseWithCovarianceStamped),
                                   ("nav_msgs/msg/Odometry", Odometry),
                                   ("geometry_msgs/msg/PoseStamped", PoseStamped)):
                if type_name in types:
                    self.sub_reference = self.node.create_subscription(cls, topic, self.on_reference, 10)
                    self._reference_type = type_name.replace("/msg/", "/")
                    self.log.info(f"online calibration: scale from {name} ({self._reference_type}).")
                    self._reference_timer.cancel()
                    return
        except Exception as exc:
            self._handler_error("reference", exc)

    def on_reference(self, msg: Any) -> None:
        """A pose of the robot's own localisation: its displacement against the odometry's gives the scale."""
        try:
            self.reference_received += 1
            pose = msg.pose.pose if hasattr(msg.pose, "pose") else msg.pose
            cov = getattr(msg.pose, "covariance", None)
            var = 0.5 * (float(cov[0]) + float(cov[7])) if cov is not None else 0.0
            stamp = msg.header.stamp.sec * 1_000_000_000 + msg.header.stamp.nanosec
            x, y = float(pose.position.x), float(pose.position.y)
            with self.lock:
                online = self.estimator.online
                if online is None or online.scale is None:
                    return
                at = _interpolate(self._odom_history, stamp)
                if at is None or not (math.isfinite(x) and math.isfinite(y)):
                    self.reference_refused += 1
                    return
                online.scale.add(x, y, var, at[0], at[1])
        except Exception as exc:  # never die on a bad message
            self._handler_error("reference", exc)

    def _on_reanchor(self, msg: Any) -> None:
        try:
            pose, cov = pose_from_msg(msg, self.settings.frames.odom)
            with self.lock:
                self.estimator.reset(pose, cov)
                self._pose_jumped()
            self.log.info(f"re-anchored at x={pose[0]:.3f} m, y={pose[1]:.3f} m, yaw={pose[2]:.4f} rad.")
        except InputError as exc:
            self.reanchor_refused += 1
            self._throttled("reanchor", "warning", f"re-anchor refused: {exc}")
        except Exception as exc:
            self._handler_error("reanchor", exc)

    def _on_set_parameters(self, params: Sequence[Any]) -> Any:
        from rcl_interfaces.msg import SetParametersResult

        try:
            changes = {p.name: python_value(p.value) for p in params if not _is_ros_owned(p.name)}
            if not changes:
                return SetParametersResult(successful=True)
            new = Settings.from_flat(changes, base=self.settings)
            new.drive_model()        # a wheel table left without geometry is refused here
        except SettingsError as exc:
            self.log.warning(f"parameter change refused: {exc}")
            return SetParametersResult(successful=False, reason=str(exc))
        except Exception as exc:
            return SetParametersResult(successful=False, reason=f"{exc.__class__.__name__}: {exc}")
        old_period = self.settings.output.diagnostics_period_s
        with self.lock:
            frames_changed = (new.frames != self.settings.frames     # compared before the new ones are taken
                              or _flag_wheels(new) != _flag_wheels(self.settings))
            self.settings = new
            self._out_period_ns = _output_period_ns(new)
            self.estimator.update_settings(new)
            if frames_changed:
                self._writer = RawOdometryWriter(new.frames.odom, new.frames.base, self._tf_type, _flag_wheels(new))
        if new.output.diagnostics_period_s != old_period:
            self._diag_timer.cancel()
            self.node.destroy_timer(self._diag_timer)
            self._diag_timer = self.node.create_timer(new.output.diagnostics_period_s, self._on_diagnostics)
        self.log.info("settings changed: " + ", ".join(f"{k}={v!r}" for k, v in changes.items()))
        return SetParametersResult(successful=True)

    def diagnostics_status(self) -> tuple[int, str, dict[str, Any]]:
        """(level, message, values) of the current diagnostics status (0 OK, 1 WARN, 2 ERROR)."""
        now = time.monotonic()
        with self.lock:
            counters = dict(self.estimator.counters)
            settings = self.settings
            pose = self.estimator.pose
            period_received, self._period_received = self._period_received, 0
            period_slip, self._period_slip = self._period_slip, 0
            period_skipped, self._period_skipped = self._period_skipped, {}
            latency_ns = self._latency.take()
            last_slip = self._last_slip
            period_errors, self._period_errors = self._period_errors, 0
            slipping = bool(self.estimator.last_slip is not None and self.estimator.last_slip.slip)
            online = self.estimator.online
            geometry = None
            if online is not None:
                geometry = (online.values(), online.status_ratio, online.status_track, online.dev_ratio,
                            online.dev_track)
            table_online = self.estimator.online_table
            table_result = table_online.result() if table_online is not None else None
        latency = self._latency.summarize(latency_ns)
        elapsed = max(now - self._period_start, 1e-9)
        self._period_start = now
        skipped = {s.name.lower(): counters.get(s.name.lower(), 0) for s in SKIP_KINDS}
        restarts = {s.name.lower(): counters.get(s.name.lower(), 0) for s in RESTART_KINDS}
        values: dict[str, Any] = {
            "input_rate_hz": period_received / elapsed,
            "received": self.received,
            "used": counters.get("used", 0),
            "skipped": sum(skipped.values()),
            **{f"skipped.{k}": v for k, v in skipped.items()},
            "chain_restarts": sum(restarts.values()),
            **{f"restart.{k}": v for k, v in restarts.items()},
            "slipping": slipping,
            "slip_samples_in_period": period_slip,
            "last_slip_stamp_s": "none" if last_slip is None else f"{last_slip[0] * 1e-9:.9f}",
            "last_slip_score": "none" if last_slip is None else last_slip[1],
            "last_slip_detector": "none" if last_slip is None else last_slip[2],
            "imu_received": self.imu_received,
            "imu_acceleration": "read" if self._accel_x is not None else "unknown or none",
            "imu_orientation": "read" if self._up_x is not None else "unknown or none",
            "accel_bias_mps2": ("none" if self.estimator.last_slip.accel_bias_mps2 is None
                                else self.estimator.last_slip.accel_bias_mps2),
            "cmd_vel_type": self._cmd_type,
            "cmd_vel_received": self.cmd_received,
            "slip_detector_bits": DETECTOR_BITS_TEXT,
            "handler_errors": self.handler_errors,
            "handler_errors_in_period": period_errors,
            "last_handler_error": self._last_error or "none",
            "undecodable_messages": self.undecodable,
            "output_rate_hz": settings.output.rate_hz,
            "reanchor_refused": self.reanchor_refused,
            "tf": "on" if (self.pub_tf is not None and settings.output.publish_tf) else
                  ("unavailable" if self.pub_tf is None else "off"),
            "x_m": pose[0], "y_m": pose[1], "yaw_rad": pose[2],
            **latency,
            **{f"param.{k}": v for k, v in settings.to_flat().items()},
        }
        problems = []
        if geometry is None and table_result is None and settings.online_calibration.enabled:
            from ..core.online_calibration import unsupported_reason
            values["online.status"] = unsupported_reason(settings) or "waiting"
        if table_result is not None:   # wheel tables: the combinations the gyro observes (core.online_table)
            values.update({"online.status": "running (wheel table)" if self.imu_received else "waiting for the imu",
                           "online.table.combinations": len(table_result.observed),
                           "online.table.unobserved": len(table_result.unobserved),
                           "online.table.intervals_used": table_result.intervals_used,
                           "online.table.gyro_bias_radps": table_result.gyro_bias_radps,
                           "online.table.gyro_bias_se_radps": table_result.gyro_bias_se_radps,
                           "online.alert": bool(table_result.alert)})
            for k, c in enumerate(table_result.observed, start=1):
                values.update({f"online.table.c{k}": c.text, f"online.table.c{k}_estimate": c.estimate,
                               f"online.table.c{k}_se": c.se, f"online.table.c{k}_alert": bool(c.alert)})
            if table_result.alert:
                what = [f"c{k} ({c.text}) {100 * c.estimate:+.2f} % +- {100 * c.se:.2f} %"
                        for k, c in enumerate(table_result.observed, start=1) if c.alert]
                problems.append("geometry alert: " + " and ".join(what) + " departs from the configured wheel table")
        if geometry is not None:
            from ..core.online_calibration import GEOMETRY_FIELDS
            gv, st_ratio, st_track, dev_ratio, dev_track = geometry
            g = dict(zip(GEOMETRY_FIELDS, gv))
            values.update({"online.radius_ratio": g["radius_ratio"], "online.radius_ratio_se": g["radius_ratio_se"],
                           "online.radius_ratio_status": st_ratio, "online.radius_ratio_departure_pct": 100 * dev_ratio,
                           "online.track_over_radius": g["track_over_radius"],
                           "online.track_over_radius_se": g["track_over_radius_se"],
                           "online.track_over_radius_status": st_track,
                           "online.track_over_radius_departure_pct": 100 * dev_track,
                           "online.gyro_bias_radps": g["gyro_bias_radps"],
                           "online.gyro_bias_se_radps": g["gyro_bias_se_radps"],
                           "online.alert": bool(g["alert"]),
                           "online.suggested_left_radius_m": g["suggested_left_radius_m"],
                           "online.suggested_right_radius_m": g["suggested_right_radius_m"],
                           "online.suggested_track_width_m": g["suggested_track_width_m"],
                           "online.intervals_used": int(g["intervals_used"]),
                           "online.intervals_skipped": int(g["intervals_skipped"]),
                           "online.geometry_applied": self._geometry_applied,
                           "online.reference_topic": self.settings.online_calibration.reference_topic or "none",
                           "online.reference_type": self._reference_type,
                           "online.reference_received": self.reference_received,
                           "online.reference_refused": self.reference_refused})
            if math.isnan(g["scale"]):
                values["online.scale"] = "not observable from the gyro (mean radius kept)"
            else:
                values.update({"online.scale": g["scale"], "online.scale_se": g["scale_se"],
                               "online.scale_windows": int(g["scale_windows"])})
            if g["alert"]:
                what = []
                if g["alert_ratio"]:
                    what.append(f"radius ratio {g['radius_ratio']:.5f} ({100 * dev_ratio:+.2f} %)")
                if g["alert_track"]:
                    what.append(f"track over radius {g['track_over_radius']:.4f} ({100 * dev_track:+.2f} %)")
                if g["alert_scale"]:
                    what.append(f"scale {g['scale']:.5f} ({100 * (g['scale'] - 1):+.2f} %, from {self._reference_type})")
                problems.append("geometry alert: " + " and ".join(what) + " departs from the configured geometry; "
                                f"suggested left radius {g['suggested_left_radius_m']:.6f} m, right radius "
                                f"{g['suggested_right_radius_m']:.6f} m, track {g['suggested_track_width_m']:.6f} m "
                                "(~/save_geometry writes them)")
        if period_slip or slipping:
            problems.append(f"wheel slip flagged ({period_slip} samples this period)")
        if period_received == 0:
            problems.append("no joint states received")
        if period_skipped:
            problems.append("bad input: " + ", ".join(f"{v} {k}" for k, v in sorted(period_skipped.items())))
        level = 1 if problems else 0
        if period_errors:   # a handler failed: the samples it dropped are not counted as used
            problems.insert(0, f"{period_errors} message handler errors this period ({self._last_error})")
            level = 2
        message = "; ".join(problems) if problems else "odometry running"
        return level, message, values

    def _on_diagnostics(self) -> None:
        from diagnostic_msgs.msg import DiagnosticStatus

        try:
            level, message, values = self.diagnostics_status()
            status = DiagnosticStatus(level=bytes([level]), name=f"{self.node.get_fully_qualified_name()}: odometry",
                                      message=message, hardware_id=self.settings.frames.base,
                                      values=key_values(values))
            arr = self._DiagnosticArray()
            arr.header.stamp = self.node.get_clock().now().to_msg()
            arr.status = [status]
            self.pub_diag.publish(arr)
        except Exception as exc:
            self.handler_errors += 1
            self._throttled("diag_error", "error", f"diagnostics could not be published "
                                                   f"({exc.__class__.__name__}: {exc}).")
        try:   # after the status that reported the alert, so it is seen before the geometry changes
            self._apply_geometry()
        except Exception as exc:
            self._throttled("apply_geometry", "error", f"the suggested geometry could not be applied "
                                                       f"({exc.__class__.__name__}: {exc}).")


ODOM_HISTORY = 4000   # odometry positions kept for the reference poses' stamps (40 s at 100 Hz)
REFERENCE_MATCH_NS = 100_000_000   # a reference stamp this far outside the kept odometry is not matched


def _interpolate(history: list[tuple[int, float, float]], stamp_ns: int) -> tuple[float, float] | None:
    """The odometry position at ``stamp_ns``, linear between the kept samples (None when out of reach)."""
    import bisect

    if not history:
        return None
    i = bisect.bisect_left(history, (stamp_ns, -math.inf, -math.inf))
    if i == 0:
        s, x, y = history[0]
        return (x, y) if s - stamp_ns <= REFERENCE_MATCH_NS else None
    if i == len(history):
        s, x, y = history[-1]
        return (x, y) if stamp_ns - s <= REFERENCE_MATCH_NS else None
    s0, x0, y0 = history[i - 1]
    s1, x1, y1 = history[i]
    f = (stamp_ns - s0) / (s1 - s0) if s1 > s0 else 0.0
    return x0 + f * (x1 - x0), y0 + f * (y1 - y0)


def _output_period_ns(settings: Settings) -> int:
    """Output period in nanoseconds from ``output.rate_hz`` (0: one output per input)."""
    rate = settings.output.rate_hz
    return int(round(1e9 / rate)) if rate > 0 else 0


def _flag_wheels(settings: Settings) -> tuple[str, ...]:
    """Encoder wheels of a wheel table, each with a per-wheel field in the flags message (none for differential)."""
    model = settings.drive_model()
    return () if model is None else tuple(j for j in model.wheel_joints if j)


def _never_group() -> Any:
    """A callback group the executor does not serve (its entities are served by the input loop)
    until ``served_by_executor`` is set (the fallback)."""
    from rclpy.callback_groups import CallbackGroup

    class _DedicatedLoopGroup(CallbackGroup):
        served_by_executor = False

        def can_execute(self, entity: Any) -> bool:
            return self.served_by_executor

        def beginning_execution(self, entity: Any) -> bool:
            return self.served_by_executor

        def ending_execution(self, entity: Any) -> None:
            return None

    return _DedicatedLoopGroup()


def _settings_from_overrides(overrides: dict[str, Any]) -> Settings:
    """Validated settings from the node's parameter overrides (params files and -p)."""
    values = {name: python_value(p.value) for name, p in overrides.items() if not _is_ros_owned(name)}
    return Settings.from_flat(values)


def create(node_name: str = NODE_NAME) -> OdometryNode:
    """Build the rclpy node, declare the parameters and start the outputs (rclpy must be initialised).

    Raises SettingsError (one sentence) when the parameters given are invalid.
    """
    from rclpy.node import Node

    node = Node(node_name, start_parameter_services=True)
    try:
        settings = _settings_from_overrides(dict(node._parameter_overrides))
        flat = settings.to_flat()
        for spec in Settings.specs():
            node.declare_parameter(spec.name, parameter_value(flat[spec.name]),
                                   parameter_descriptor(spec, read_only=spec.name in READ_ONLY_PARAMETERS),
                                   ignore_override=True)
        tf_type, tf_problem = _tf_message_type()
        return OdometryNode(node, settings, tf_type, tf_problem)
    except BaseException:
        node.destroy_node()
        raise


def _tf_message_type() -> tuple[type | None, str | None]:
    """tf2_msgs.msg.TFMessage with its type support loaded, or (None, reason)."""
    try:
        from tf2_msgs.msg import TFMessage

        TFMessage.__class__.__import_type_support__()
        if getattr(TFMessage, "_TYPE_SUPPORT", None) is None:
            return None, "its type support did not load"
        return TFMessage, None
    except Exception as exc:
        return None, f"{exc.__class__.__name__}: {exc}"


# --- command line ---------------------------------------------------------------------------------
_USAGE = """usage: wheel_dr_node [--ros-args --params-file FILE [-r joint_states:=TOPIC] [-r __ns:=/NS]
                     [-p use_sim_time:=true] [-p wheels.track_width:=0.41 ...]]

Wheel odometry node of wheel_dr: subscribes joint_states (and imu), publishes odom, /tf,
odom_flags and /diagnostics; service ~/reset, topic ~/reanchor; with online_calibration.enabled
also ~/geometry and ~/save_geometry. See docs/node.md.

""" + textwrap.fill(SAFETY_TEXT, 100)


def _ros_args_params_files(argv: Sequence[str]) -> list[str]:
    """The --params-file paths among the ROS arguments of ``argv``."""
    out: list[str] = []
    in_ros = False
    it = iter(argv[1:])
    for arg in it:
        if arg == "--ros-args":
            in_ros = True
        elif arg == "--":
            in_ros = False
        elif in_ros and arg == "--params-file":
            path = next(it, None)
            if path is not None:
                out.append(path)
    return out


def _precheck_params_files(argv: Sequence[str]) -> str | None:
    """One sentence about the first params file that does not exist or is not valid YAML, else None."""
    import yaml

    for path in _ros_args_params_files(argv):
        if not os.path.isfile(path):
            return f"parameters file '{path}' does not exist; give the path of a YAML file such as config/wheel_dr.yaml."
        try:
            with open(path, encoding="utf-8") as fh:
                yaml.safe_load(fh)
        except (OSError, UnicodeDecodeError) as exc:
            return f"parameters file '{path}' cannot be read ({exc.__class__.__name__}); check its permissions."
        except yaml.YAMLError as exc:
            mark = getattr(exc, "problem_mark", None)
            where = f" at line {mark.line + 1}" if mark is not None else ""
            return f"parameters file '{path}' is not valid YAML{where}; fix its syntax."
    return None


def _fail(text: str) -> int:
    print(f"wheel_dr_node: {text}", file=sys.stderr, flush=True)
    return 2


def main(argv: Sequence[str] | None = None) -> int:
    """Run the node until SIGINT or SIGTERM; exit 0 then, 2 on invalid parameters or arguments."""
    argv = list(sys.argv if argv is None else argv)
    stop = threading.Event()
    holder: dict[str, OdometryNode] = {}

    def on_signal(signum: int, frame: Any) -> None:
        stop.set()
        if "node" in holder:
            holder["node"].wake()

    signal.signal(signal.SIGINT, on_signal)
    signal.signal(signal.SIGTERM, on_signal)
    try:
        return _main(argv, stop, holder)
    except KeyboardInterrupt:
        return 0


def _main(argv: list[str], stop: threading.Event, holder: dict[str, OdometryNode]) -> int:
    problem = _precheck_params_files(argv)
    if problem:
        return _fail(problem)
    import rclpy
    from rclpy.executors import ExternalShutdownException, SingleThreadedExecutor
    from rclpy.signals import SignalHandlerOptions
    from rclpy.utilities import remove_ros_args

    try:
        rest = remove_ros_args(args=argv)[1:]
    except Exception as exc:
        return _fail(f"the ROS arguments cannot be parsed ({str(exc).splitlines()[0]}); check --ros-args.")
    if rest:
        if rest[0] in ("-h", "--help"):
            print(_USAGE)
            return 0
        return _fail(f"unexpected argument '{rest[0]}'; put ROS arguments after --ros-args (see --help).")
    try:
        rclpy.init(args=argv, signal_handler_options=SignalHandlerOptions.NO)
    except Exception as exc:
        first = (str(exc).strip().splitlines() or [exc.__class__.__name__])[0]
        return _fail(f"ROS 2 could not start with these arguments ({first}); check --ros-args and the "
                     "parameters file.")
    executor = None
    thread = None
    try:
        try:
            odo = create()
        except SettingsError as exc:
            return _fail(str(exc))
        holder["node"] = odo
        odo.params_files = _ros_args_params_files(argv)
        executor = SingleThreadedExecutor()
        executor.add_node(odo.node)

        def spin_executor() -> None:
            try:
                while not stop.is_set():
                    executor.spin_once(timeout_sec=0.2)
            except (ExternalShutdownException, KeyboardInterrupt):
                pass
            except Exception as exc:  # report and stop the whole node rather than run half of it
                odo.log.error(f"executor stopped ({exc.__class__.__name__}: {exc}); shutting down.")
                stop.set()
                odo.wake()

        thread = threading.Thread(target=spin_executor, name="wheel_dr_executor", daemon=True)
        thread.start()
        if stop.is_set():
            return 0
        # The executor thread (diagnostics, services) must not hold the interpreter lock for long
        # while a joint state waits; start-up objects are moved out of the garbage collector's way.
        sys.setswitchinterval(GIL_SWITCH_INTERVAL_S)
        gc.freeze()
        if not odo.spin_inputs(stop):
            odo.serve_inputs_from_executor()
            while not stop.wait(0.1):
                pass
        return 0
    finally:
        stop.set()
        if thread is not None:
            thread.join(timeout=2.0)
        if executor is not None:
            executor.shutdown(timeout_sec=1.0)
        if "node" in holder:
            try:
                holder["node"].node.destroy_node()
            except Exception:
                pass
        rclpy.try_shutdown()


if __name__ == "__main__":
    sys.exit(main())
