"""The node over real DDS against bytes that are not messages, overflowing readings, handler faults,
and with ``output.rate_hz`` (1 kHz in, 100 Hz out).

Numbers are the invented "Wombat" tug's (radius 0.1 m, track 0.5 m).
"""
from __future__ import annotations

import math
import signal
import struct
import subprocess
import sys
import time
from pathlib import Path
from typing import Any, Iterator

import numpy as np
import pytest

from test_node import NODE_EXE, Probe, _wait
from wheel_dr.core import Settings, run
from wheel_dr.core.wheels import SampleStatus, samples_from_messages
from wheel_dr.ros.convert import FLAG_FIELDS

NS = "/wombat"
JS_TOPIC = "/wombat_js"
LEFT, RIGHT = "wombat_left_wheel_joint", "wombat_right_wheel_joint"
PARAMS = f"""/**:
  ros__parameters:
    wheels:
      left_joints: [{LEFT}]
      right_joints: [{RIGHT}]
      left_radius: 0.1
      right_radius: 0.1
      track_width: 0.5
      wrap_angle: true
    limits:
      max_gap_s: 0.5
    output:
      diagnostics_period_s: 0.2
      rate_hz: {{rate}}
"""
# The fault-injecting launcher: the real node, with the slip monitor made to fail on samples that
# carry the joint 'boom_joint' (a stand-in for an unknown bug deep in a handler).
FAULTY = """
import sys
from wheel_dr.core import estimator, slip
from wheel_dr.ros import node

_step, _slip_step, state = estimator.Estimator.step, slip.SlipMonitor.step, {"boom": False}

def step(self, stamp_ns, names, *args, **kwargs):
    state["boom"] = "boom_joint" in names
    return _step(self, stamp_ns, names, *args, **kwargs)

def slip_step(self, *args, **kwargs):
    if state["boom"]:
        raise ZeroDivisionError("injected fault")
    return _slip_step(self, *args, **kwargs)

estimator.Estimator.step, slip.SlipMonitor.step = step, slip_step
sys.exit(node.main(sys.argv))
"""


def _start(folder: Path, ros_env: dict[str, str], rate_hz: float, faulty: bool = False, ns: str = NS,
           js_topic: str = JS_TOPIC):
    params = folder / "wombat.yaml"
    params.write_text(PARAMS.format(rate=rate_hz))
    log_path = folder / "node.log"
    log = log_path.open("w")
    if faulty:
        script = folder / "faulty_node.py"
        script.write_text(FAULTY)
        cmd = [sys.executable, str(script)]
    else:
        cmd = [NODE_EXE]
    proc = subprocess.Popen(cmd + ["--ros-args", "--params-file", str(params), "-r", f"joint_states:={js_topic}",
                                   "-r", f"__ns:={ns}"], env=ros_env, stdout=log, stderr=subprocess.STDOUT)
    probe = Probe(ns=ns, js_topic=js_topic)
    _wait(lambda: probe.pub_js.get_subscription_count() > 0 or proc.poll() is not None, 30, "the node")
    assert proc.poll() is None, log_path.read_text()
    _wait(lambda: probe.node.count_publishers(f"{ns}/odom_flags") > 0, 10, "the node's flags publisher")
    probe.handshake([LEFT, RIGHT])
    return proc, probe, log, log_path


def _stop(proc, probe, log) -> None:
    probe.close()
    if proc.poll() is None:
        proc.send_signal(signal.SIGTERM)
    try:
        assert proc.wait(timeout=15) == 0
    finally:
        if proc.poll() is None:
            proc.kill()
        log.close()


@pytest.fixture(scope="module")
def rated(tmp_path_factory: pytest.TempPathFactory, ros_env: dict[str, str]) -> Iterator[dict[str, Any]]:
    proc, probe, log, log_path = _start(tmp_path_factory.mktemp("rated"), ros_env, 100.0)
    try:
        yield {"proc": proc, "probe": probe, "log": log_path}
    finally:
        _stop(proc, probe, log)


def _cdr_joint_state(stamp_ns: int, names: list[str], pos: list[float], endian: str = "<") -> bytes:
    """sensor_msgs/JointState in CDR (OMG XTypes: 4-byte encapsulation, alignment from its end)."""
    out = bytearray(b"\x00\x01\x00\x00" if endian == "<" else b"\x00\x00\x00\x00")

    def align(n: int) -> None:
        while (len(out) - 4) % n:
            out.append(0)

    def string(text: str) -> None:
        align(4)
        data = text.encode() + b"\x00"
        out.extend(struct.pack(endian + "I", len(data)) + data)

    sec, nsec = divmod(stamp_ns, 1_000_000_000)
    out.extend(struct.pack(endian + "iI", sec, nsec))
    string("")
    align(4)
    out.extend(struct.pack(endian + "I", len(names)))
    for n in names:
        string(n)
    for arr in (pos, [], []):
        align(4)
        out.extend(struct.pack(endian + "I", len(arr)))
        if arr:
            align(8)
            out.extend(struct.pack(f"{endian}{len(arr)}d", *arr))
    return bytes(out)


def test_bytes_that_are_not_joint_states_are_counted_as_malformed(rated: dict[str, Any]) -> None:
    """Truncated, huge-count and random byte strings published as joint states: each is a
    malformed sample in /diagnostics, none is a handler error, and the node goes on; a big-endian
    message (CDR allows either byte order) is read like the little-endian one."""
    probe, proc = rated["probe"], rated["proc"]
    before = probe.next_diag()[3]
    good = _cdr_joint_state(probe.stamp_ns + 5_000_000, [LEFT, RIGHT], [0.0, 0.0])
    rng = np.random.default_rng(7)
    huge = bytearray(good)
    huge[20:24] = struct.pack("<I", 0xFFFFFFF0)          # name count far beyond the buffer
    garbage = [good[:7], good[:len(good) - 12], bytes(huge), b"\x00\x01\x00\x00", b"\x00\x01", rng.bytes(64),
               rng.bytes(300), b"\x00\x02" + good[2:]]
    for raw in garbage:
        probe.pub_js.publish(raw)
        time.sleep(0.005)
    probe.stamp_ns += 10_000_000
    probe.pub_js.publish(_cdr_joint_state(probe.stamp_ns, [LEFT, RIGHT], [0.0, 0.0], endian=">"))
    flags = probe.wait_flag(probe.stamp_ns)
    assert flags[FLAG_FIELDS.index("status")] < 10            # the big-endian message was used
    assert proc.poll() is None
    after = probe.next_diag()[3]
    assert int(after["undecodable_messages"]) - int(before["undecodable_messages"]) == len(garbage)
    assert int(after["skipped.malformed"]) - int(before["skipped.malformed"]) == len(garbage)
    assert int(after["handler_errors"]) == 0


def test_overflowing_readings_never_reach_the_pose(rated: dict[str, Any]) -> None:
    """Wrapping joint angles of +1e308 then -1e308: the wrapped difference is NaN (IEEE 754), the
    node restarts the chain; no odometry it publishes holds a NaN and diagnostics stay finite."""
    probe = rated["probe"]
    s = probe.stamp_ns + 1_000_000_000
    values = [[0.0, 0.0], [1e308, 0.0], [-1e308, 0.0], [0.1, 0.1], [0.2, 0.2], [0.3, 0.3]]
    msgs = [probe.js(s + k * 10_000_000, [LEFT, RIGHT], v) for k, v in enumerate(values)]
    probe.stamp_ns = s + (len(values) - 1) * 10_000_000
    with probe.lock:
        start = len(probe.odom)
    probe.send(msgs)
    time.sleep(0.1)
    with probe.lock:
        odom = probe.odom[start:]
    assert odom
    for o in odom:
        numbers = [o.pose.pose.position.x, o.pose.pose.position.y, o.pose.pose.orientation.z,
                   o.twist.twist.linear.x, *o.pose.covariance, *o.twist.covariance]
        assert all(math.isfinite(v) for v in numbers)
    diag = probe.next_diag()[3]
    assert all(math.isfinite(float(diag[k])) for k in ("x_m", "y_m", "yaw_rad"))


def test_rate_hz_publishes_at_the_rate_and_integrates_every_sample(rated: dict[str, Any]) -> None:
    """1 kHz joint states with output.rate_hz 100: one odometry (and flags) message per 10 ms of
    sample stamps, and each equals the core's batch run over all the samples up to it."""
    from std_srvs.srv import Trigger

    probe = rated["probe"]
    assert probe.call(Trigger, f"{NS}/wheel_dr_node/reset", Trigger.Request()).success
    s0 = (probe.stamp_ns // 1_000_000_000 + 2) * 1_000_000_000     # on the 10 ms grid
    n = 400
    w_l, w_r = 3.0, 4.0
    samples = [(s0 + k * 1_000_000, [w_l * k * 1e-3, w_r * k * 1e-3]) for k in range(n)]
    probe.stamp_ns = samples[-1][0]
    with probe.lock:
        o_start, f_start = len(probe.odom), len(probe.flags)
    msgs = [probe.js(s, [LEFT, RIGHT], p) for s, p in samples]
    period = 1e-3
    t0 = time.monotonic()
    for i, m in enumerate(msgs):
        probe.pub_js.publish(m)
        delay = t0 + (i + 1) * period - time.monotonic()
        if delay > 0:
            time.sleep(delay)
    time.sleep(0.5)
    with probe.lock:
        odom = [o for o in probe.odom[o_start:] if o.header.stamp.sec * 1_000_000_000 + o.header.stamp.nanosec >= s0]
        flags = probe.flags[f_start:]
    stamps = [o.header.stamp.sec * 1_000_000_000 + o.header.stamp.nanosec for o in odom]
    assert stamps[0] == s0                                            # the chain start is published
    assert all(st % 10_000_000 == 0 for st in stamps[1:]), stamps[:5]  # then one per 10 ms grid step
    assert 36 <= len(stamps) <= 41 and len(set(stamps)) == len(stamps)
    assert 36 <= len(flags) <= 45                                     # flags follow the output rate
    settings = Settings.from_flat({"wheels.left_joints": [LEFT], "wheels.right_joints": [RIGHT],
                                   "wheels.left_radius": 0.1, "wheels.right_radius": 0.1,
                                   "wheels.track_width": 0.5, "wheels.wrap_angle": True})
    batch = run(samples_from_messages([(s, [LEFT, RIGHT], p, []) for s, p in samples]), settings)
    at = {int(s): i for i, s in enumerate(batch.stamp_ns)}
    for o, st in zip(odom, stamps):
        i = at[st]
        assert o.pose.pose.position.x == pytest.approx(batch.x_m[i], abs=1e-9)
        assert o.pose.pose.position.y == pytest.approx(batch.y_m[i], abs=1e-9)
    assert batch.x_m[at[stamps[-1]]] > 0.1                             # it drove somewhere


def test_a_failing_handler_is_an_error_in_diagnostics_never_used(tmp_path: Path, ros_env: dict[str, str]) -> None:
    """A fault inside the estimator step (injected into the slip monitor): the sample is not
    counted as used, no odometry is published for it, diagnostics report ERROR (level 2) with the
    count, the log says it at most once per throttle period, and the node goes on."""
    proc, probe, log, log_path = _start(tmp_path, ros_env, 0.0, faulty=True, ns="/wombat_faulty",
                                        js_topic="/wombat_faulty_js")
    try:
        before = probe.next_diag()[3]
        s = probe.stamp_ns + 1_000_000_000
        good1 = [probe.js(s + k * 10_000_000, [LEFT, RIGHT], [0.01 * k, 0.01 * k]) for k in range(10)]
        boom = [probe.js(s + (10 + k) * 10_000_000, [LEFT, RIGHT, "boom_joint"], [0.01 * (10 + k)] * 2 + [0.0])
                for k in range(5)]
        good2 = [probe.js(s + (15 + k) * 10_000_000, [LEFT, RIGHT], [0.01 * (15 + k)] * 2) for k in range(10)]
        probe.stamp_ns = s + 24 * 10_000_000
        with probe.lock:
            start = len(probe.odom)
        probe.send(good1 + boom + good2)
        assert proc.poll() is None
        with probe.lock:
            n_diag = len(probe.diag)
        _wait(lambda: any(d[1] == 2 for d in probe.diag[n_diag - 3:]) or None, 5, "an ERROR diagnostics status")
        after = probe.next_diag()[3]
        assert int(after["handler_errors"]) - int(before["handler_errors"]) == len(boom)
        # the first good sample restarts the chain (gap), the other good ones are used; the faulty ones are not
        assert int(after["used"]) - int(before["used"]) == len(good1) + len(good2) - 1
        with probe.lock:
            errors = [d for d in probe.diag if d[1] == 2]
            stamps = {o.header.stamp.sec * 1_000_000_000 + o.header.stamp.nanosec for o in probe.odom[start:]}
        assert errors and "handler errors" in errors[0][2] and "injected fault" in errors[0][2]
        boom_stamps = {m.header.stamp.sec * 1_000_000_000 + m.header.stamp.nanosec for m in boom}
        assert not stamps & boom_stamps
        assert probe.stamp_ns in stamps
        text = log_path.read_text()
        assert text.count("joint_states message could not be processed") == 1, text
    finally:
        _stop(proc, probe, log)
