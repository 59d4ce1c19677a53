"""Online self-calibration on wheel tables (wheel_dr.core.online_table), batch form.

Drives of every table kind from test_core_drive's invented tables: the true table has its first
encoder wheel's radius 2 % smaller; the encoders report the true travel over the configured radius
(plus the per-wheel noise), the gyro the true yaw rate plus bias and white noise.
"""
from __future__ import annotations

from functools import lru_cache

import numpy as np
import pytest

from test_core_drive import tables
from wheel_dr.core.drive.table import WheelTable
from wheel_dr.core.online_table import online_table

DT, N = 0.01, 6000


@lru_cache(maxsize=None)
def _drive(kind: str, shrink: float, seed: int = 0):
    t0, _ = tables()[kind]
    r = t0.radius.copy()
    e = int(np.flatnonzero(t0.spin)[0])
    r[e] *= 1.0 - shrink
    true = WheelTable(t0.kind, t0.wheel_joints, t0.x, t0.y, r, steer_joints=t0.steer_joints, mount_angle=t0.mount,
                      roller_angle=t0.roller, steer_offset=t0.offset, k_wheels=t0.k)
    t = np.arange(N) * DT
    if kind in ("tricycle", "ackermann", "custom"):      # bases that cannot move sideways
        tw = np.column_stack([0.5 + 0.3 * np.sin(0.1 * t), np.zeros(N), 0.5 * np.sin(0.23 * t)])
        if kind == "tricycle":
            tw[:, 1] = 0.2 * tw[:, 2]                    # rear axle at x = -0.2: vy = -wz x_rear
    else:
        tw = np.column_stack([0.4 * np.sin(0.11 * t), 0.3 * np.cos(0.07 * t), 0.6 * np.sin(0.19 * t)])
    rng = np.random.default_rng(seed)
    spin_true, steer = true.inverse(tw, np.full(N, DT))
    spin = spin_true * (t0.radius[t0.spin] / r[t0.spin])
    spin = spin + np.sqrt(2e-5 * np.abs(spin)) * rng.standard_normal(spin.shape)
    gyro = tw[:, 2] + 0.003 + 0.005 * rng.standard_normal(N)
    stamp = 1_000_000_000 + np.arange(N, dtype=np.int64) * 10_000_000
    res = online_table(t0, stamp, np.full(N, DT), spin, steer, gyro, None, 0.005)
    delta = np.zeros(len(res.names))
    delta[res.names.index(f"radius[{t0.wheel_joints[e]}]")] = -shrink
    return t0, res, delta


@pytest.mark.parametrize("kind", ["tricycle", "ackermann", "mecanum", "omni", "swerve", "custom"])
def test_the_scale_is_never_observed_and_observed_combinations_match_the_truth(kind):
    """Scaling every radius and position alike turns the same heading (rigid-body kinematics,
    Siegwart et al. 2011, sec. 3.2: the heading rate is a ratio of lengths), so that direction is
    outside the observed span; each observed combination estimates the truth's projection."""
    table, res, delta = _drive(kind, 0.02)
    assert res.observed, "the gyro should observe something of every table"
    size = max(np.max(np.abs(table.x)), np.max(np.abs(table.y)))
    u = []
    for name in res.names:
        kind_, label = name.split("[")[0], name.split("[")[1].rstrip("]")
        i = next(k for k in range(len(table.x)) if label in (table.wheel_joints[k], table.steer_joints[k], f"wheel {k}"))
        u.append(1.0 if kind_ == "radius" else table.x[i] / size if kind_ == "x/L" else
                 table.y[i] / size if kind_ == "y/L" else 0.0)
    u = np.asarray(u) / np.linalg.norm(u)
    span = np.array([c.vector for c in res.observed])
    assert np.linalg.norm(span @ u) < 0.05
    for c in res.observed:      # 4 standard errors plus the linearisation's share (a 2 % change)
        assert abs(c.estimate - c.vector @ delta) < 4 * c.se + 0.1 * abs(c.vector @ delta) + 1e-4


def test_a_tyre_change_alerts_and_a_control_drive_does_not():
    _, changed, _ = _drive("tricycle", 0.02, seed=1)
    assert changed.alert
    _, control, _ = _drive("tricycle", 0.0, seed=2)
    assert not control.alert
    assert abs(control.gyro_bias_radps - 0.003) < 4 * control.gyro_bias_se_radps + 1e-4


def test_a_two_wheel_table_sees_what_the_differential_estimator_sees():
    """Two fixed wheels (a differential drive as a table): two observed combinations, the radius
    ratio (right minus left radius) and the track over the radius (radii against y_left - y_right)."""
    _, res, _ = _drive("custom", 0.02)
    se = sorted(c.se for c in res.observed + res.unobserved)
    assert se[1] < 0.05 and se[2] > 10 * se[1]          # two directions seen, a clear gap to the rest
    names = res.names
    first = np.array([c.vector for c in res.observed + res.unobserved if c.se <= se[1]])
    ratio = np.zeros(len(names))
    ratio[names.index("radius[right]")], ratio[names.index("radius[left]")] = 1.0, -1.0
    assert np.linalg.norm(first @ ratio) / np.linalg.norm(ratio) > 0.95          # inside the two-direction span
