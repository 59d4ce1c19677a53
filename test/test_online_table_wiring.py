"""Online calibration on wheel tables, end to end: the streaming form (``TableOnlineCalibrator``,
stepped by the estimator per accepted sample) against the batch form (``run`` attaches
``Trajectory.online_table``), the alert on a changed tyre, and `wheel-dr replay` writing
DIR/geometry_online_table.csv (read back with the csv module of the standard library).

Drives: the table simulator (``wheel_dr.sim.table``) on the invented vehicles' routes
(``wheel_dr.demo.vehicles.table_scenario``), with the true table equal to the nominal one except,
where said, one encoder wheel's radius 1.5 % smaller; the gyro has a bias and white noise.
"""
from __future__ import annotations

import csv
from functools import lru_cache

import numpy as np
import pytest

from test_core_table_run import settings_of
from wheel_dr.cli import main
from wheel_dr.core import run
from wheel_dr.core.drive.table import WheelTable
from wheel_dr.core.estimator import Estimator
from wheel_dr.demo.vehicles import table_scenario
from wheel_dr.sim.table import simulate_table

CHANGED = {"mecanum": "numbat_front_left_wheel_joint", "tricycle": "wombat_rear_left_wheel_joint"}


@lru_cache(maxsize=None)
def _drive(kind: str, shrink: float, seed: int):
    sc = table_scenario(kind, slip=True)
    nom = sc.nominal_table
    r = nom.radius.copy()
    r[list(nom.wheel_joints).index(CHANGED[kind])] *= 1.0 - shrink
    true = WheelTable(nom.kind, nom.wheel_joints, nom.x, nom.y, r, steer_joints=nom.steer_joints,
                      mount_angle=nom.mount, roller_angle=nom.roller, steer_offset=nom.offset, k_wheels=nom.k,
                      steer_sd_rad=nom.steer_sd_rad)
    sim = simulate_table(sc.with_values(table=true), seed=seed)
    settings = settings_of(nom, **{"online_calibration.enabled": True})
    batch = run(sim.joint_samples(), settings, gyro_z_radps=sim.gyro_z_radps).online_table
    est = Estimator(settings)
    names = list(sim.joint_names)
    for k in range(len(sim.stamp_ns)):
        est.step(int(sim.stamp_ns[k]), names, [float(v) for v in sim.position_rad[k]], [],
                 float(sim.gyro_z_radps[k]))
    return nom, batch, est.online_table.result()


@pytest.mark.parametrize("kind", ["mecanum", "tricycle"])
def test_streaming_equals_batch_at_the_end(kind):
    """The issue's "batch (replay) equal to streaming (node)": the same intervals, the same sums, so
    the same eigen split; compared to 1e-9 relative, or 1e-9 of a standard error for an estimate near 0
    (float summation order and the float versus numpy path of the table only, common practice)."""
    _, series, stream = _drive(kind, 0.015, 1)
    batch = series.final
    assert stream.names == batch.names
    assert stream.intervals_used == batch.intervals_used > 100
    assert len(stream.observed) == len(batch.observed) >= 1
    for a, b in zip(stream.observed, batch.observed):
        assert a.estimate == pytest.approx(b.estimate, rel=1e-9, abs=1e-9 * b.se)   # near 0: in standard errors
        assert a.se == pytest.approx(b.se, rel=1e-9)
        assert abs(float(a.vector @ b.vector)) == pytest.approx(1.0, abs=1e-9)
        assert a.alert == b.alert
    assert stream.gyro_bias_radps == pytest.approx(batch.gyro_bias_radps, rel=1e-9, abs=1e-12)
    # the series' last row is the final result (the projection of the final information on its own eigenvectors)
    np.testing.assert_allclose(series.estimate[-1], [c.estimate for c in batch.observed], rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(series.se[-1], [c.se for c in batch.observed], rtol=1e-9)


def test_a_smaller_tyre_alerts():
    """A 1.5 % smaller radius moves the heading the wheels report against the gyro's (rolling without
    slip, Siegwart, Nourbakhsh & Scaramuzza 2011, sec. 3.2): on the mecanum trolley the observed
    combination that carries it alerts, and the estimates are the truth's projection on the observed
    combinations within 4 standard errors plus the linearisation's share (from memory: a first-order
    model errs by about the change squared; 10 % of it allowed)."""
    nom, _, changed = _drive("mecanum", 0.015, 1)
    assert changed.alert
    delta = np.zeros(len(changed.names))
    delta[changed.names.index(f"radius[{CHANGED['mecanum']}]")] = -0.015
    hit = [c for c in changed.observed if c.alert]
    assert hit and any(abs(c.vector @ delta) > 0.005 for c in hit)
    for c in changed.observed:
        assert abs(c.estimate - c.vector @ delta) < 4 * c.se + 0.1 * abs(c.vector @ delta) + 1e-4
    # the suggested table moves the changed wheel's radius the right way (smaller)
    i = list(nom.wheel_joints).index(CHANGED["mecanum"])
    assert changed.suggested(nom)["drive.wheel_radius"][i] < nom.radius[i]


@pytest.mark.parametrize("kind", ["mecanum", "tricycle"])
def test_a_control_drive_does_not_alert(kind):
    """The same drive (slip event included, gyro bias and noise) with the true table equal to the
    nominal: no alert (each observed combination within 4 standard errors of 0, the alert's own
    rule; a false alarm per combination is rarer than 1e-4, normal tail, common practice)."""
    _, _, control = _drive(kind, 0.0, 2)
    assert control.observed
    assert not control.alert
    assert all(abs(c.estimate) < 4 * c.se for c in control.observed)


def test_replay_writes_geometry_online_table_csv(tmp_path, capsys):
    """`wheel-dr synth --base mecanum` writes a bag and its parameters; with online_calibration on,
    replay writes one row per interval (at least 10 Hz by the stamps) with c<k>, c<k>_se, c<k>_alert
    per observed combination (csv module of the Python standard library reads it)."""
    bag = tmp_path / "numbat"
    assert main(["synth", str(bag), "--base", "mecanum"]) == 0
    params = tmp_path / "on.yaml"
    params.write_text((tmp_path / "numbat.params.yaml").read_text(encoding="utf-8")
                      + "    online_calibration:\n      enabled: true\n", encoding="utf-8")
    out = tmp_path / "out"
    capsys.readouterr()
    assert main(["replay", str(bag), "--params", str(params), "--out", str(out)]) == 0
    text = capsys.readouterr().out
    assert "geometry_online_table.csv" in text and "combinations observed by the gyro" in text
    with open(out / "geometry_online_table.csv", newline="") as fh:
        lines = [ln for ln in fh if not ln.startswith("#")]
    rows = list(csv.DictReader(lines))
    cols = list(rows[0].keys())
    c = (len(cols) - 1) // 3
    assert c >= 1 and cols == ["t"] + [f"c{k}{s}" for k in range(1, c + 1) for s in ("", "_se", "_alert")]
    t = np.array([float(r["t"]) for r in rows])
    assert np.all(np.diff(t) > 0) and np.max(np.diff(t)) <= 0.1 + 1e-6     # interval_s 0.1 s: >= 10 Hz
    last = rows[-1]
    assert all(r[f"c{k}_alert"] in ("0", "1") for r in rows for k in range(1, c + 1))
    assert all(np.isfinite(float(last[f"c{k}_se"])) and float(last[f"c{k}_se"]) < 0.01 for k in range(1, c + 1))
    # without the setting no table CSV
    out2 = tmp_path / "off"
    assert main(["replay", str(bag), "--params", str(tmp_path / "numbat.params.yaml"), "--out", str(out2)]) == 0
    assert not (out2 / "geometry_online_table.csv").exists()


def test_node_reports_the_table_alert_and_saves_a_table_that_loads(tmp_path, ros_env):
    """The node as a real process over real DDS (pattern of test_node_online.py): the mecanum drive
    with the 1.5 % smaller front-left tyre, published ten times faster than its stamps (the node
    goes by the stamps), gives a WARN with the table's alert in /diagnostics, the same combinations
    as the core's batch run over the same samples (equal within a standard error: the node may miss
    a message, common practice), and ~/save_geometry writes a parameters file that loads and moves
    the changed wheel's radius down."""
    import time

    from std_srvs.srv import Trigger

    from test_node import Probe, _wait
    from test_node_online import _stop
    from wheel_dr.demo.vehicles import params_text
    from wheel_dr.params import load_settings

    ns, js_topic = "/numbat_online", "/online_js"
    sc = table_scenario("mecanum", slip=True)
    nom = sc.nominal_table
    r = nom.radius.copy()
    i = list(nom.wheel_joints).index(CHANGED["mecanum"])
    r[i] *= 1.0 - 0.015
    true = WheelTable(nom.kind, nom.wheel_joints, nom.x, nom.y, r, roller_angle=nom.roller, k_wheels=nom.k)
    sim = simulate_table(sc.with_values(table=true), seed=1)
    params = tmp_path / "numbat.yaml"
    params.write_text(params_text("mecanum") + "    slip:\n      gyro_noise_radps: 0.004\n    output:\n"
                      "      diagnostics_period_s: 0.2\n    online_calibration:\n      enabled: true\n",
                      encoding="utf-8")
    batch = run(sim.joint_samples(), load_settings(params), gyro_z_radps=sim.gyro_z_radps).online_table.final
    assert batch.alert
    proc = _start_ns(params, tmp_path / "node.log", ros_env, ns, js_topic)
    probe = Probe(ns=ns, js_topic=js_topic)
    names = list(sim.joint_names)
    try:
        _wait(lambda: probe.pub_js.get_subscription_count() > 0 and probe.pub_imu.get_subscription_count() > 0
              or proc.poll() is not None, 30, "the node to subscribe")
        assert proc.poll() is None, (tmp_path / "node.log").read_text()
        _wait(lambda: probe.node.count_publishers(f"{ns}/odom_flags") > 0, 10, "the node's flags publisher")
        probe.handshake(names)
        start = time.monotonic()
        for k in range(len(sim.stamp_ns)):
            stamp = int(sim.stamp_ns[k])
            imu = probe.Imu()
            imu.header.stamp.sec, imu.header.stamp.nanosec = divmod(stamp, 1_000_000_000)
            imu.angular_velocity.z = float(sim.gyro_z_radps[k])
            imu.linear_acceleration_covariance[0] = -1.0
            imu.orientation_covariance[0] = -1.0
            probe.pub_imu.publish(imu)
            time.sleep(0.0003)
            probe.pub_js.publish(probe.js(stamp, names, sim.position_rad[k].tolist()))
            delay = start + (k + 1) / 1000.0 - time.monotonic()
            if delay > 0:
                time.sleep(delay)
        probe.wait_flag(int(sim.stamp_ns[-1]))

        def warned():
            with probe.lock:
                return next((d for d in reversed(probe.diag) if d[1] == 1 and "geometry alert" in d[2]
                             and "online.table.c1" in d[3]), None)
        _, _, message, values = _wait(warned, 10, "a WARN diagnostics status with the table's geometry alert")
        assert "wheel table" in message
        assert int(values["online.table.combinations"]) == len(batch.observed)
        node = {values[f"online.table.c{k}"]: float(values[f"online.table.c{k}_estimate"])
                for k in range(1, len(batch.observed) + 1)}
        hit = [c for c in batch.observed if c.alert]
        # The node's alerting combinations agree with the batch run's within 3 standard errors (a
        # missed message or an IMU reading paired one sample late moves the combinations' texts
        # and estimates slightly, so match each by its estimate, not by its rounded text).
        flagged = [float(values[f"online.table.c{k}_estimate"]) for k in range(1, len(batch.observed) + 1)
                   if values[f"online.table.c{k}_alert"] in ("true", "1")]
        assert hit and flagged and all(any(abs(e - c.estimate) < 3 * c.se for c in hit) for e in flagged), (
            node, [(c.text, c.estimate, c.se) for c in hit])
        response = probe.call(Trigger, f"{ns}/wheel_dr_node/save_geometry", Trigger.Request())
        assert response.success, response.message
        saved = tmp_path / "numbat_geometry.yaml"
        new = load_settings(saved)
        assert new.drive.wheel_radius[i] < nom.radius[i]
        assert new.online_calibration.enabled and new.drive.kind == "mecanum"
    finally:
        _stop(proc)
        probe.close()


def _start_ns(params, log, env, ns, js_topic):
    """test_node_online._start with this test's namespace and joint-state topic."""
    import subprocess

    from test_node import NODE_EXE
    return subprocess.Popen([NODE_EXE, "--ros-args", "--params-file", str(params), "-r", f"joint_states:={js_topic}",
                             "-r", f"__ns:={ns}"], env=env, stdout=log.open("w"), stderr=subprocess.STDOUT)
