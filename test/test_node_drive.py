"""The node with a wheel table (a mecanum base) as a real process over real DDS.

Checks: the odometry carries vx, vy and wz with a 3x3 twist covariance in the (vx, vy, wz) rows
and columns of the 6x6 (REP 103 twist in the child frame; the 6x6 order x, y, z, rotation about
x, y, z is that of geometry_msgs/TwistWithCovariance), and equals the core's batch run over the
same samples (the node only converts); the flags message gains one field per wheel; a table
that cannot determine the motion is refused at start-up with one line.

The base is invented for the test: four mecanum wheels at (+-0.25, +-0.2) m, radius 0.05 m,
rollers at +-pi/4 (the X arrangement that can turn on the spot: Siegwart, Nourbakhsh &
Scaramuzza 2011, sec. 3.2 for the wheel equations).
"""
from __future__ import annotations

import math
import subprocess
from pathlib import Path
from typing import Any, Iterator

import numpy as np
import pytest

from test_node import NODE_EXE, Probe, _wait, stop_node
from wheel_dr.core import Settings, run
from wheel_dr.core.wheels import samples_from_messages

NS = "/bilby_test"
JS_TOPIC = "/table_js"
Q = math.pi / 4
JOINTS = ["fl_wheel", "fr_wheel", "rl_wheel", "rr_wheel"]
TABLE = {"drive.kind": "mecanum", "drive.wheel_joints": JOINTS, "drive.wheel_x": [0.25, 0.25, -0.25, -0.25],
         "drive.wheel_y": [0.2, -0.2, 0.2, -0.2], "drive.wheel_radius": [0.05] * 4,
         "drive.roller_angle": [Q, -Q, -Q, Q], "noise.k_wheels": [4e-4]}
DT_NS = 10_000_000


def _yaml(values: dict[str, Any]) -> str:
    tree: dict[str, dict[str, Any]] = {}
    for name, value in values.items():
        sec, key = name.split(".")
        tree.setdefault(sec, {})[key] = value
    lines = ["/**:", "  ros__parameters:"]
    for sec, items in tree.items():
        lines.append(f"    {sec}:")
        for key, value in items.items():
            text = "[" + ", ".join(f"'{v}'" if isinstance(v, str) else repr(v) for v in value) + "]" \
                if isinstance(value, list) else (f"'{value}'" if isinstance(value, str) else repr(value))
            lines.append(f"      {key}: {text}")
    return "\n".join(lines) + "\n"


@pytest.fixture(scope="module")
def table_node(tmp_path_factory: pytest.TempPathFactory, ros_env: dict[str, str]) -> Iterator[dict[str, Any]]:
    folder = tmp_path_factory.mktemp("table_node")
    params = folder / "mecanum.yaml"
    params.write_text(_yaml(TABLE))
    log_path = folder / "node.log"
    log = log_path.open("w")
    proc = subprocess.Popen([NODE_EXE, "--ros-args", "--params-file", str(params), "-r", f"joint_states:={JS_TOPIC}",
                             "-r", f"__ns:={NS}"], env=ros_env, stdout=log, stderr=subprocess.STDOUT)
    probe = Probe(ns=NS, js_topic=JS_TOPIC)
    try:
        _wait(lambda: probe.pub_js.get_subscription_count() > 0 or proc.poll() is not None, 30, "the node")
        assert proc.poll() is None, f"node exited: {log_path.read_text()}"
        _wait(lambda: probe.node.count_publishers(f"{NS}/odom_flags") > 0, 10, "the node's flags publisher")
        probe.handshake(JOINTS)
        yield {"proc": proc, "probe": probe}
    finally:
        probe.close()
        stop_node(proc)
        log.close()


def test_mecanum_odometry_has_vy_and_a_3x3_twist_covariance(table_node: dict[str, Any]) -> None:
    """Strafing while turning: the node's odometry equals the core's batch run sample by sample,
    vy is the commanded lateral speed (inverse kinematics of the same table), and the twist
    covariance fills the (vx, vy, wz) block with vy's variance positive (not pinned as for
    differential drive); the flags carry one field per wheel, labelled by joint."""
    probe: Probe = table_node["probe"]
    settings = Settings.from_flat(TABLE)
    model = settings.drive_model()
    n = 150
    twist = np.tile([0.3, 0.2, 0.4], (n, 1))              # vx, vy (m/s), wz (rad/s)
    spin, _ = model.inverse(twist, np.full(n, DT_NS * 1e-9))
    angle = np.cumsum(spin / 0.05, axis=0)
    probe.stamp_ns += 1_000_000_000
    stamps = [probe.stamp_ns + k * DT_NS for k in range(n)]
    probe.stamp_ns = stamps[-1]
    msgs = [probe.js(s, JOINTS, [float(a) for a in angle[k]]) for k, s in enumerate(stamps)]
    probe.send(msgs)
    traj = run(samples_from_messages([(s, JOINTS, list(map(float, angle[k])), []) for k, s in enumerate(stamps)]),
               settings)
    for k in (5, 60, n - 1):
        odom = probe.odom_at(stamps[k])
        tw = odom.twist.twist
        assert tw.linear.y == pytest.approx(0.2, rel=1e-9)         # the commanded lateral speed
        assert tw.linear.x == pytest.approx(0.3, rel=1e-9) and tw.angular.z == pytest.approx(0.4, rel=1e-9)
        cov = np.asarray(odom.twist.covariance).reshape(6, 6)
        block = cov[np.ix_([0, 1, 5], [0, 1, 5])]
        np.testing.assert_allclose(block, traj.twist_cov[k], rtol=1e-9, atol=1e-15)
        assert block[1, 1] > 0 and np.linalg.eigvalsh(block).min() > 0
        # the core starts at the origin where the node went on from the handshake: compare increments
        assert odom.pose.pose.position.x - probe.odom_at(stamps[0]).pose.pose.position.x == pytest.approx(
            traj.x_m[k] - traj.x_m[0], abs=1e-9)
    flags = probe.wait_flag(stamps[-1])
    assert len(flags) == 8 + len(JOINTS) and all(f in (0.0, 1.0) for f in flags[8:])
    with probe.lock:
        label = probe.flags[-1].layout.dim[0].label
    assert label.endswith(",".join(f"wheel:{j}" for j in JOINTS)), label


@pytest.mark.parametrize("values, words", [
    ({**TABLE, "drive.wheel_joints": ["", "", "", ""]}, ["cannot determine the motion", "no wheel has an encoder"]),
    ({**TABLE, "drive.roller_angle": [0.0] * 4}, ["mecanum", "+-pi/4"]),
    ({**TABLE, "drive.wheel_y": [0.2, -0.2]}, ["drive.wheel_y", "one entry per wheel"]),
])
def test_a_table_that_does_not_fit_is_refused_at_start_up(tmp_path: Path, ros_env: dict[str, str],
                                                          values: dict[str, Any], words: list[str]) -> None:
    """A table the estimator cannot run: exit 2, one line on stderr saying what is missing, no traceback."""
    f = tmp_path / "bad_table.yaml"
    f.write_text(_yaml(values))
    out = subprocess.run([NODE_EXE, "--ros-args", "--params-file", str(f)], env=ros_env,
                         capture_output=True, text=True, timeout=60)
    assert out.returncode == 2, out.stderr
    lines = [ln for ln in out.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, out.stderr
    for word in words:
        assert word in lines[0], lines[0]
    assert "Traceback" not in out.stderr + out.stdout
