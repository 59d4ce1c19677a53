"""`wheel-dr replay` with online calibration on writes DIR/geometry_online.csv (read back with the csv
module against the core's batch result); without an IMU it says so and writes none. The drive is a
simulated demo cart "Quokka" (invented numbers) whose left tyre softens by 3 % during the drive."""
from __future__ import annotations

import csv

import numpy as np
import pytest

from wheel_dr.bags import write_bag
from wheel_dr.cli import GEOMETRY_COLUMNS, main
from wheel_dr.demo.scenarios import varied_route
from wheel_dr.params import atomic_write_text
from wheel_dr.runs import load_settings_file, replay_run
from wheel_dr.bags import read_run
from wheel_dr.sim import RadiusChange, Scenario, simulate

PARAMS = ("/**:\n  ros__parameters:\n    wheels:\n"
          "      left_joints: [quokka_left_wheel_joint]\n      right_joints: [quokka_right_wheel_joint]\n"
          "      left_radius: 0.0825\n      right_radius: 0.0825\n      track_width: 0.412\n"
          "    noise:\n      k_left: 2.0e-05\n      k_right: 2.0e-05\n    slip:\n      gyro_noise_radps: 0.005\n"
          "    online_calibration:\n      enabled: true\n      horizon_m: 15.0\n      alert_pct: 1.0\n")


@pytest.fixture(scope="module")
def bag(tmp_path_factory):
    d = tmp_path_factory.mktemp("online_io")
    sc = Scenario(name="soft", segments=varied_route(3, 90.0), rate_hz=50.0, true_left_radius_m=0.0825,
                  true_right_radius_m=0.0825, true_track_m=0.412, k_left_m=2e-5, k_right_m=2e-5,
                  gyro_bias_radps=0.002, gyro_noise_sd_radps=0.005,
                  radius_changes=(RadiusChange(20.0, "left", -0.03, ramp_s=10.0),))
    path = write_bag(simulate(sc, 1), d / "drive", "mcap")
    params = d / "online.yaml"
    atomic_write_text(params, PARAMS)
    return path, params, d


def test_replay_writes_geometry_online_csv(bag, capsys):
    path, params, d = bag
    out = d / "out"
    assert main(["replay", str(path), "--params", str(params), "--out", str(out)]) == 0
    text = capsys.readouterr().out
    assert "online calibration: radius ratio" in text and "geometry_online.csv" in text
    with open(out / "geometry_online.csv", newline="") as fh:
        rows = list(csv.reader(fh))
    assert tuple(rows[0]) == GEOMETRY_COLUMNS == ("t", "radius_ratio", "radius_ratio_se", "track_over_radius",
                                                  "track_over_radius_se", "alert")
    online = replay_run(read_run(path), load_settings_file(params)).trajectory.online
    table = np.array(rows[1:], dtype=np.float64)
    assert len(table) == len(online) > 10 * 80                   # at least 10 rows a second
    stamp_ns = np.array([int(r[0].replace(".", "")) for r in rows[1:]])     # exact seconds.nanoseconds
    assert np.array_equal(stamp_ns, online.stamp_ns) and np.all(np.diff(stamp_ns) <= 100_000_000)
    assert np.allclose(table[:, 1], online.radius_ratio, rtol=1e-9)
    assert np.allclose(table[:, 4], online.track_over_radius_se, rtol=1e-9)
    assert np.array_equal(table[:, 5].astype(bool), online.alert)
    assert online.alert.any() and not online.alert[stamp_ns - stamp_ns[0] < 20_000_000_000].any()


def test_replay_without_imu_says_why_no_geometry_is_written(bag, capsys):
    path, params, d = bag
    out = d / "out_no_imu"
    assert main(["replay", str(path), "--params", str(params), "--out", str(out), "--no-imu"]) == 0
    assert "no IMU readings" in capsys.readouterr().out
    assert not (out / "geometry_online.csv").exists()
