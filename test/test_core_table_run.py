"""The estimator on wheel tables: joint states of every kind through ``run`` (batch) and ``Estimator`` (streaming).

Sources: the SE(2) exponential of Sola, Deray & Atchuthan 2018, eq. 156 (a constant body twist
for a time T ends at exp(xi T)); the wheel equations of Siegwart, Nourbakhsh & Scaramuzza 2011,
sec. 3.2 (inverse kinematics of the same table makes the readings); first-order covariance
propagation P' = F P F^T + G C G^T (Thrun, Burgard & Fox 2005, sec. 5.4, the linearised form;
G itself is checked against central differences in test_core_drive.py).
"""
from __future__ import annotations

import math

import numpy as np
import pytest

from test_core_drive import KINDS, tables
from wheel_dr.core import Settings, run
from wheel_dr.core.estimator import Estimator
from wheel_dr.core.se2 import Poses
from wheel_dr.core.wheels import SampleStatus, samples_from_messages

DT = 0.01
T0 = 1_800_000_000 * 10**9


def settings_of(model, **extra) -> Settings:
    """Settings whose drive.* table is ``model``'s."""
    g = model.geometry()
    values = {k: list(v) if isinstance(v, tuple) else v for k, v in g.items()}
    values.update({"drive.wheel_joints": list(model.wheel_joints), "drive.steer_joints": list(model.steer_joints),
                   "noise.k_wheels": [float(k) for k in model.k], "noise.steer_sd_rad": model.steer_sd_rad})
    values.update(extra)
    return Settings.from_flat(values)


def messages(model, twist, n, dt=DT, names_extra=()):
    """Joint-state messages of a body twist per step (inverse kinematics), spin angles integrated."""
    tw = np.asarray(twist, dtype=np.float64).reshape(-1, 3)
    tw = np.broadcast_to(tw, (n, 3)) if len(tw) == 1 else tw
    spin, steer = model.inverse(tw, np.full(n, dt))
    angle = np.cumsum(spin / model.radius[model.spin], axis=0)
    names = [j for j in model.wheel_joints if j] + [j for j in model.steer_joints if j] + list(names_extra)
    out = []
    for k in range(n):
        pos = list(map(float, angle[k])) + ([] if steer is None else list(map(float, steer[k])))
        out.append((T0 + int(round(k * dt * 1e9)), names, pos + [0.0] * len(names_extra), []))
    return out


@pytest.mark.parametrize("kind", KINDS)
def test_constant_twist_from_joint_states_ends_at_the_se2_exponential(kind) -> None:
    """Joint states of a constant body twist, run through the whole estimator with the exact scheme,
    end at exp(xi T) to 1e-9 (the first sample starts the chain; T = (n - 1) dt)."""
    model, twist = tables()[kind]
    s = settings_of(model)
    n = 401
    traj = run(samples_from_messages(messages(model, twist, n)), s)
    end = Poses.exp(*(np.asarray(twist) * (n - 1) * DT))
    assert traj.x_m[-1] == pytest.approx(float(end.x[0]), abs=1e-9)
    assert traj.y_m[-1] == pytest.approx(float(end.y[0]), abs=1e-9)
    assert traj.theta_rad[-1] == pytest.approx(float(end.theta[0]), abs=1e-9)
    np.testing.assert_allclose(traj.vy_mps[1:], twist[1], rtol=1e-9, atol=1e-12)
    assert traj.twist_cov.shape == (n, 3, 3)


@pytest.mark.parametrize("kind", KINDS)
def test_batch_equals_streaming_sample_by_sample(kind) -> None:
    """``run`` and ``Estimator.step`` give the same pose, covariance, twist and statuses for every kind,
    with a varying twist, a gap, a steering glitch (steered kinds) and a sample missing a joint."""
    model, twist = tables()[kind]
    s = settings_of(model, **{"integration": "midpoint"})
    n = 300
    k = np.arange(n)[:, None]
    tw = np.asarray(twist) * (1.0 + 0.3 * np.sin(0.02 * k))
    if kind in ("tricycle",):
        tw[:, 1] = -tw[:, 2] * -0.2      # base_link ahead of the rear axle at x = -0.2: vy = wz * 0.2
    if kind == "ackermann":
        tw[:, 1] = 0.0
    msgs = messages(model, tw, n)
    msgs = msgs[:100] + [(m[0] + 600_000_000, *m[1:]) for m in msgs[100:]]   # 0.6 s pause: a gap
    msgs[150] = (msgs[150][0], msgs[150][1][:-1], msgs[150][2][:-1], [])   # a joint missing
    if model.steered.any():
        pos = list(msgs[200][2])
        pos[-1] += 1.0                                                   # 1 rad in 10 ms: beyond 10 rad/s
        msgs[200] = (msgs[200][0], msgs[200][1], pos, [])
    traj = run(samples_from_messages(msgs), s)
    est = Estimator(s)
    rows = []
    for st, names, pos, vel in msgs:
        status = est.step(st, names, pos, vel)
        if status < 10:
            rows.append((est.x_m, est.y_m, est.theta_rad, est.cov, est.v_mps, est.vy_mps, est.w_radps, est.twist_cov))
    assert len(rows) == len(traj)
    np.testing.assert_allclose([r[0] for r in rows], traj.x_m, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose([r[1] for r in rows], traj.y_m, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose([r[2] for r in rows], traj.theta_rad, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(np.array([r[3] for r in rows]), traj.cov, rtol=1e-7, atol=1e-15)
    np.testing.assert_allclose([r[5] for r in rows], traj.vy_mps, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(np.array([r[7] for r in rows]), traj.twist_cov, rtol=1e-7, atol=1e-15)
    status = traj.status
    assert status[150] == SampleStatus.MISSING_JOINT
    assert status[100] == SampleStatus.GAP
    if model.steered.any():
        assert status[200] == SampleStatus.JUMP and status[201] == SampleStatus.JUMP
    assert est.counters == traj.counters


def test_differential_kind_ignores_nothing_silently() -> None:
    """A drive table given with drive.kind 'differential' is refused in one sentence naming the fix."""
    from wheel_dr.core.errors import SettingsError

    with pytest.raises(SettingsError, match="drive.kind"):
        Settings.from_flat({"drive.wheel_joints": ["a", "b"]})


def test_an_unknown_table_joint_is_named_with_the_parameter_to_fix() -> None:
    """A table joint the joint states do not carry: one sentence naming the joint and drive.wheel_joints
    (the analyser), and every sample skipped as missing a joint (the node's streaming form)."""
    from wheel_dr.core.errors import InputError

    model, twist = tables()["mecanum"]
    s = settings_of(model)
    msgs = [(m[0], [n.replace("fl", "front_left") for n in m[1]], m[2], m[3]) for m in messages(model, twist, 5)]
    with pytest.raises(InputError) as info:
        run(samples_from_messages(msgs), s)
    assert "'fl'" in str(info.value) and "drive.wheel_joints" in str(info.value)
    est = Estimator(s)
    assert all(est.step(*m) == SampleStatus.MISSING_JOINT for m in msgs)
