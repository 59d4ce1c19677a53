"""Batch ``run`` and streaming ``Estimator.step`` agree to 1e-9 on the same input, bad samples included.

What is held equal (two entry points on the same formulas): pose (x, y, yaw, unwrapped
heading), pose covariance, twist and twist covariance after every accepted sample, the status of
every sample and the counters, for every integration scheme x noise model and each wheel source
(positions, velocities, encoder ticks with a 16-bit rollover, positions wrapping at +-pi).
The drive is the demo cart "Quokka" (invented demo numbers: radii 0.0829/0.0822 m, track 0.4185 m).
"""
from __future__ import annotations

import math

import numpy as np
import pytest

from wheel_dr.core import Estimator, JointSamples, SampleStatus, Settings, run

SCHEMES = ("euler", "midpoint", "exact")
MODELS = ("per_wheel", "motion_model")
SOURCES = ("position", "velocity", "ticks", "wrap_angle")
CASTER = "quokka_caster_swivel_joint"  # not a wheel: must be ignored, NaN or not
TICKS_PER_REV, GEAR, BITS = 2048.0, 12.0, 16   # a 512-line quadrature encoder (4 x 512 counts), 12:1 gear
R_L, R_R, TRACK = 0.0829, 0.0822, 0.4185
START_POSE = (12.5, -3.25, 2.8)
START_COV = np.array([[2.0, 0.4, -0.1], [0.4, 3.0, 0.2], [-0.1, 0.2, 1.0]]) * 1e-3


def build_case(source: str, scheme: str, model: str, seed: int = 0):
    """Settings, batch samples and the equivalent stream of messages of one noisy drive with bad samples."""
    skid = source in ("position", "ticks")
    if skid:
        left = ("quokka_left_front_wheel_joint", "quokka_left_rear_wheel_joint")
        right = ("quokka_right_front_wheel_joint", "quokka_right_rear_wheel_joint")
        names = (right[1], CASTER, left[0], right[0], left[1])  # any order: joints are found by name
    else:
        left, right = ("quokka_left_wheel_joint",), ("quokka_right_wheel_joint",)
        names = (right[0], CASTER, left[0])
    values = {"wheels.left_joints": list(left), "wheels.right_joints": list(right),
              "wheels.left_radius": R_L, "wheels.right_radius": R_R, "wheels.track_width": TRACK,
              "wheels.source": "position" if source == "wrap_angle" else source,
              "wheels.wrap_angle": source == "wrap_angle", "integration": scheme, "noise.model": model,
              "noise.k_left": 4e-4, "noise.k_right": 6e-4, "noise.alphas": [0.05, 0.002, 0.01, 0.003],
              "limits.max_gap_s": 0.5, "limits.max_wheel_speed_mps": 3.0}
    if source == "ticks":
        values.update({"wheels.ticks_per_revolution": TICKS_PER_REV, "wheels.gear_ratio": GEAR,
                       "wheels.counter_bits": BITS})
    settings = Settings.from_flat(values)

    n = 700
    rng = np.random.default_rng(seed)
    t = np.arange(n) * 0.01
    # wheel rates (rad/s): forward, turning both ways, a stop and a reverse stretch
    omega_l = 6.0 * np.sin(0.9 * t) + 2.0 + 0.3 * rng.standard_normal(n)
    omega_r = 6.0 * np.sin(0.9 * t + 0.6) + 2.0 + 0.3 * rng.standard_normal(n)
    omega_l[200:230] = omega_r[200:230] = 0.0
    phi_l = np.concatenate(([0.0], np.cumsum(0.5 * (omega_l[1:] + omega_l[:-1]) * 0.01))) + 40.0
    phi_r = np.concatenate(([0.0], np.cumsum(0.5 * (omega_r[1:] + omega_r[:-1]) * 0.01))) - 17.0
    joint_phi = {left[0]: phi_l, right[0]: phi_r, CASTER: 0.1 * np.sin(t)}
    joint_omega = {left[0]: omega_l, right[0]: omega_r, CASTER: 0.1 * np.cos(t)}
    if skid:  # the rear joints differ a little: averaging matters
        joint_phi[left[1]], joint_omega[left[1]] = 0.98 * phi_l, 0.98 * omega_l
        joint_phi[right[1]], joint_omega[right[1]] = 1.03 * phi_r, 1.03 * omega_r
    pos = np.column_stack([joint_phi[nm] for nm in names])
    vel = np.column_stack([joint_omega[nm] for nm in names])
    stamp = 1_764_000_000_000_000_000 + np.arange(n, dtype=np.int64) * 10_000_000
    stamp[401:] += 2_000_000_000           # a 2 s gap: chain restart
    col = {nm: i for i, nm in enumerate(names)}
    cl, cr = col[left[0]], col[right[0]]
    spike = 3.0                             # rad in 10 ms on a 0.08 m wheel: ~24 m/s, an encoder glitch
    if source == "velocity":
        vel[300, cr] += spike / 0.01
        pos[:] = np.nan                     # positions unusable: must be ignored
    else:
        pos[300, cr] += spike
    if source == "ticks":
        pos = np.floor(pos * TICKS_PER_REV * GEAR / (2 * math.pi)) % (2 ** BITS)
    elif source == "wrap_angle":
        pos = math.pi - np.mod(math.pi - pos, 2 * math.pi)
    if source in ("ticks", "wrap_angle"):     # the counters roll over / the angles wrap in this drive
        half = 2 ** (BITS - 1) if source == "ticks" else math.pi
        assert (np.abs(np.diff(pos[:, [cl, cr]], axis=0)) > half).sum() >= 4
    which = vel if source == "velocity" else pos
    which[50, cl] = np.nan                   # non-finite
    which[60, cr] = np.inf
    which[70, col[CASTER]] = np.nan          # not a wheel joint: sample used
    stamp[100] = stamp[99]                   # repeated stamp
    stamp[130] = stamp[129] - 5_000_000      # stamp going backwards
    stamp[160] = 0                           # stamp zero
    stamp[500] = -5                          # negative stamp
    present = np.ones(pos.shape, dtype=bool)
    present[190, cl] = False                 # a configured joint missing
    present[191, col[right[-1]]] = False
    malformed = np.zeros(n, dtype=bool)
    malformed[220] = True                    # names and values of different lengths

    samples = JointSamples(stamp, names, pos, vel, present, malformed)
    order_rng = np.random.default_rng(seed + 1)
    messages = []
    for k in range(n):
        keep = [j for j in range(len(names)) if present[k, j]]
        if k % 7 == 3:                       # some messages list the joints in another order
            keep = list(order_rng.permutation(keep))
        nm = [names[j] for j in keep]
        p = [float(pos[k, j]) for j in keep]
        v = [float(vel[k, j]) for j in keep]
        if malformed[k]:
            p, v = p[:-1], v[:-1]
        messages.append((int(stamp[k]), nm, p, v))
    return settings, samples, messages


def stream(settings: Settings, messages):
    est = Estimator(settings, START_POSE, START_COV)
    status, rows = [], []
    for stamp_ns, names, positions, velocities in messages:
        s = est.step(stamp_ns, names, positions, velocities)
        status.append(int(s))
        if s < 10:
            rows.append((est.x_m, est.y_m, est.yaw_rad, est.theta_rad, est.cov.copy(), est.v_mps, est.w_radps,
                         est.twist_cov.copy()))
    return est, np.array(status), rows


@pytest.mark.parametrize("source", SOURCES)
@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("scheme", SCHEMES)
def test_batch_equals_streaming(scheme: str, model: str, source: str) -> None:
    settings, samples, messages = build_case(source, scheme, model)
    traj = run(samples, settings, START_POSE, START_COV)
    est, status, rows = stream(settings, messages)

    assert np.array_equal(traj.status, status)
    assert traj.counters == est.counters
    # every bad-sample kind occurs in this drive, so the comparison covers each path
    expected = {"non_finite": 2, "stamp_not_increasing": 2, "bad_stamp": 2, "missing_joint": 2,
                "malformed": 1, "gap": 1, "chain_start": 1}
    for kind, count in expected.items():
        assert est.counters[kind] == count, (kind, est.counters)
    assert est.counters["jump"] >= 1
    assert len(rows) == len(traj)

    x, y, yaw, theta, cov, v, w, tcov = (np.array(c) for c in zip(*rows))
    for name, a, b in (("x", traj.x_m, x), ("y", traj.y_m, y), ("yaw", traj.yaw_rad, yaw),
                       ("theta", traj.theta_rad, theta), ("v", traj.v_mps, v), ("w", traj.w_radps, w)):
        assert np.max(np.abs(a - b)) < 1e-9, f"{name} differs by {np.max(np.abs(a - b)):.3g}"
    assert np.allclose(traj.cov, cov, rtol=1e-9, atol=1e-12)
    assert np.allclose(traj.twist_cov, tcov, rtol=1e-9, atol=1e-12)
    # the drive goes somewhere and the covariance grows, so equality is not trivially of zeros
    assert np.hypot(traj.x_m[-1] - START_POSE[0], traj.y_m[-1] - START_POSE[1]) > 0.5
    assert np.abs(traj.cov[-1] - START_COV).max() > 0.2 * np.abs(START_COV).max()
    # skipped samples leave no entry; accepted ones are in input order
    assert np.array_equal(traj.index, np.flatnonzero(traj.status < 10))
    assert np.all(traj.status[[50, 60, 160, 190, 220, 500]] >= 10)
    assert traj.status[70] == SampleStatus.USED


@pytest.mark.parametrize("source", SOURCES)
def test_batch_equals_streaming_with_slip_inflation(source: str) -> None:
    """Same equality when flagged samples inflate the step noise (slip.response 'inflate')."""
    settings, samples, messages = build_case(source, "exact", "per_wheel", seed=4)
    settings = settings.with_values({"slip.response": "inflate"})
    traj = run(samples, settings, START_POSE, START_COV)
    est, status, rows = stream(settings, messages)
    assert np.array_equal(traj.status, status) and traj.counters == est.counters
    assert np.max(np.abs(traj.x_m - np.array([r[0] for r in rows]))) < 1e-9
    assert np.allclose(traj.cov, np.array([r[4] for r in rows]), rtol=1e-9, atol=1e-12)
    assert np.allclose(traj.twist_cov, np.array([r[7] for r in rows]), rtol=1e-9, atol=1e-12)
