"""Joint states to wheel travel: wraparound, encoder ticks, skid steer, and every bad-sample kind.

Sources (from /work/shared/REFERENCES.md):
* A quadrature encoder of N lines gives 4 N counts per revolution; hardware counters of 16 or
  32 bits roll over and must be unwrapped (common practice).
* Wheel travel ds = r dphi per side, and velocity x dt for drivers without usable positions
  (Siegwart, Nourbakhsh & Scaramuzza 2011, ch. 3; common practice).
* Bad samples (the rules in wheel_dr.core.wheels' docstring): NaN or inf,
  a stamp that repeats, goes backwards or is zero, a gap longer than limits.max_gap_s, a missing
  configured joint, names and values of different lengths, a jump above
  limits.max_wheel_speed_mps; each counted by kind, never raising out of the step.
"""
from __future__ import annotations

import math

import numpy as np
import pytest

from wheel_dr.core import Estimator, InputError, JointSamples, SampleStatus, Settings, run, wheel_travel

L, R = "quokka_left_wheel_joint", "quokka_right_wheel_joint"
RADIUS, TRACK = 0.0825, 0.412
T0 = 1_764_000_000_000_000_000
STEP_NS = 10_000_000


def make_settings(**extra) -> Settings:
    values = {"wheels.left_joints": [L], "wheels.right_joints": [R], "wheels.left_radius": RADIUS,
              "wheels.right_radius": RADIUS, "wheels.track_width": TRACK, "integration": "exact",
              "limits.max_gap_s": 0.5, "limits.max_wheel_speed_mps": 5.0}
    values.update(extra)
    return Settings.from_flat(values)


def samples(pos: np.ndarray, names=(L, R), stamp: np.ndarray | None = None, vel: np.ndarray | None = None,
            **kw) -> JointSamples:
    pos = np.asarray(pos, dtype=np.float64)
    if stamp is None:
        stamp = T0 + np.arange(len(pos), dtype=np.int64) * STEP_NS
    return JointSamples(np.asarray(stamp, dtype=np.int64), tuple(names), pos,
                        np.zeros_like(pos) if vel is None else vel, **kw)


def curved_positions(n: int = 3000) -> np.ndarray:
    """Joint angles (rad) of a long drive turning both ways: several turns of each wheel."""
    t = np.arange(n) * 0.01
    return np.column_stack([9.0 * t + 2.0 * np.sin(0.7 * t), 7.0 * t - 3.0 * np.sin(0.5 * t) + 1.0])


def assert_same_trajectory(a, b, atol: float = 1e-9, cov_rtol: float = 1e-9) -> None:
    assert np.array_equal(a.status, b.status)
    for name in ("x_m", "y_m", "theta_rad", "v_mps", "w_radps"):
        assert np.max(np.abs(getattr(a, name) - getattr(b, name))) < atol, name
    assert np.allclose(a.cov, b.cov, rtol=cov_rtol, atol=1e-15)


# ---- 8. wraparound and tick conversion ----------------------------------------------------------

def test_positions_wrapping_at_pi_give_the_unwrapped_trajectory() -> None:
    """Joint positions reported modulo 2 pi in (-pi, pi] are unwrapped per step (common practice)."""
    pos = curved_positions()
    wrapped = math.pi - np.mod(math.pi - pos, 2 * math.pi)
    assert np.abs(np.diff(wrapped, axis=0)).max() > 6.0, "the input really wraps"
    ref = run(samples(pos), make_settings())
    got = run(samples(wrapped), make_settings(**{"wheels.wrap_angle": True}))
    assert_same_trajectory(ref, got)
    assert ref.theta_rad[-1] != 0 and np.hypot(ref.x_m[-1], ref.y_m[-1]) > 1.0
    # streaming agrees, and without wrap_angle the wrapped input reads as jumps
    est = Estimator(make_settings(**{"wheels.wrap_angle": True}))
    for k in range(len(pos)):
        est.step(int(T0 + k * STEP_NS), [L, R], list(wrapped[k]), [])
    assert abs(est.x_m - ref.x_m[-1]) < 1e-9 and abs(est.theta_rad - ref.theta_rad[-1]) < 1e-9
    plain = run(samples(wrapped), make_settings())
    assert plain.counters["jump"] > 0


@pytest.mark.parametrize("signed", [False, True])
def test_16_bit_tick_counters_rolling_over_give_the_unrolled_trajectory(signed: bool) -> None:
    """16-bit counters (unsigned 0..65535 or two's complement -32768..32767) roll over and are
    unwrapped (common practice): same trajectory as the never-rolling counts."""
    cpr, gear = 4 * 1024.0, 4.5   # 1024-line quadrature encoder, 4.5:1 gear
    counts = np.floor(curved_positions() / (2 * math.pi) * cpr * gear)
    rolled = counts % 65536
    if signed:
        rolled = (rolled + 32768) % 65536 - 32768
    assert np.abs(np.diff(rolled, axis=0)).max() > 30000, "the counters really roll over"
    base = {"wheels.source": "ticks", "wheels.ticks_per_revolution": cpr, "wheels.gear_ratio": gear}
    ref = run(samples(counts), make_settings(**base))
    got = run(samples(rolled), make_settings(**base, **{"wheels.counter_bits": 16}))
    assert_same_trajectory(ref, got, atol=1e-12)
    # and the counts mean what they should: compared with the angles they came from (another
    # rounding route, so the covariance's cross terms agree to ~1e-9 relative, not to the last bit)
    angles = run(samples(counts / (cpr * gear) * 2 * math.pi), make_settings())
    assert_same_trajectory(ref, angles, atol=1e-9, cov_rtol=1e-7)


def test_tick_conversion_four_counts_per_line_and_gear_ratio() -> None:
    """An N-line quadrature encoder gives 4 N counts per motor revolution (common practice); with a
    gear ratio G one wheel revolution is 4 N G counts, i.e. 2 pi r of travel."""
    lines, gear = 500, 15.0
    per_wheel_rev = 4 * lines * gear
    k = np.arange(101)
    counts = np.column_stack([k * per_wheel_rev / 100, k * per_wheel_rev / 100])   # one wheel turn in 1 s
    s = make_settings(**{"wheels.source": "ticks", "wheels.ticks_per_revolution": 4.0 * lines,
                         "wheels.gear_ratio": gear})
    traj = run(samples(counts), s)
    assert traj.x_m[-1] == pytest.approx(2 * math.pi * RADIUS, rel=1e-12)
    assert traj.y_m[-1] == pytest.approx(0.0, abs=1e-15)
    # one left-wheel turn only: heading change -2 pi r / b (Siegwart et al. 2011, dtheta = (ds_r - ds_l)/b)
    counts[:, 1] = 0.0
    traj = run(samples(counts), s)
    assert traj.theta_rad[-1] == pytest.approx(-2 * math.pi * RADIUS / TRACK, rel=1e-12)


def test_velocity_source_integrates_rate_times_dt() -> None:
    """Source 'velocity': travel = r * omega * dt (common practice), positions ignored."""
    n = 201
    vel = np.column_stack([np.full(n, 5.0), np.full(n, 5.0)])
    pos = np.full((n, 2), np.nan)
    traj = run(samples(pos, vel=vel), make_settings(**{"wheels.source": "velocity"}))
    assert traj.counters["used"] == n - 1
    assert traj.x_m[-1] == pytest.approx(RADIUS * 5.0 * 2.0, rel=1e-12)


# ---- skid steer ----------------------------------------------------------------------------------

def test_skid_steer_two_joints_per_side_are_averaged_and_found_by_name() -> None:
    """Several joints a side are averaged (skid steer, common practice); columns are found by name."""
    lf, lr, rf, rr = ("quokka_left_front_wheel_joint", "quokka_left_rear_wheel_joint",
                      "quokka_right_front_wheel_joint", "quokka_right_rear_wheel_joint")
    s = make_settings(**{"wheels.left_joints": [lf, lr], "wheels.right_joints": [rf, rr]})
    k = np.arange(50)[:, None]
    per_joint = {lf: 0.10, lr: 0.12, rf: 0.20, rr: 0.16}   # rad per step
    names = (rr, "quokka_caster_swivel_joint", lf, rf, lr)
    pos = np.column_stack([per_joint.get(nm, 0.05) * k[:, 0] for nm in names])
    travel = wheel_travel(samples(pos, names), s)
    assert np.allclose(travel.ds_left_m[1:], RADIUS * 0.11, rtol=1e-12)
    assert np.allclose(travel.ds_right_m[1:], RADIUS * 0.18, rtol=1e-12)
    assert np.allclose(travel.joint_travel_m[1], RADIUS * np.array([0.10, 0.12, 0.20, 0.16]), rtol=1e-12)
    # any column order gives the same result
    ref = run(samples(pos, names), s)
    perm = [3, 0, 4, 2, 1]
    shuffled = run(samples(pos[:, perm], [names[i] for i in perm]), s)
    assert_same_trajectory(ref, shuffled, atol=0.0 + 1e-15)
    # streaming, with the order changing from message to message
    est = Estimator(s)
    rng = np.random.default_rng(1)
    for i in range(len(pos)):
        p = rng.permutation(5)
        est.step(int(T0 + i * STEP_NS), [names[j] for j in p], list(pos[i, p]), [])
    assert abs(est.x_m - ref.x_m[-1]) < 1e-12 and abs(est.theta_rad - ref.theta_rad[-1]) < 1e-12


# ---- 9. every bad-sample kind ------------------------------------------------------------------

def straight(n: int = 20, rad_per_step: float = 0.1) -> np.ndarray:
    k = np.arange(n, dtype=np.float64)
    return np.column_stack([rad_per_step * k, rad_per_step * k])


SKIPPED = {
    # kind: (status, how to spoil sample 8 in the batch input)
    "nan": SampleStatus.NON_FINITE,
    "inf": SampleStatus.NON_FINITE,
    "stamp_repeat": SampleStatus.STAMP_NOT_INCREASING,
    "stamp_backwards": SampleStatus.STAMP_NOT_INCREASING,
    "stamp_zero": SampleStatus.BAD_STAMP,
    "missing_joint": SampleStatus.MISSING_JOINT,
    "malformed": SampleStatus.MALFORMED,
}


def spoiled(kind: str):
    """Batch samples and the equivalent messages of a straight run with sample 8 spoiled."""
    pos = straight()
    stamp = T0 + np.arange(len(pos), dtype=np.int64) * STEP_NS
    present = np.ones(pos.shape, dtype=bool)
    malformed = np.zeros(len(pos), dtype=bool)
    if kind == "nan":
        pos[8, 0] = np.nan
    elif kind == "inf":
        pos[8, 1] = -np.inf
    elif kind == "stamp_repeat":
        stamp[8] = stamp[7]
    elif kind == "stamp_backwards":
        stamp[8] = stamp[7] - 3 * STEP_NS
    elif kind == "stamp_zero":
        stamp[8] = 0
    elif kind == "missing_joint":
        present[8, 1] = False
    elif kind == "malformed":
        malformed[8] = True
    batch = samples(pos, stamp=stamp, present=present, malformed=malformed)
    messages = []
    for k in range(len(pos)):
        names, values = [L, R], list(pos[k])
        if kind == "missing_joint" and k == 8:
            names, values = [L], values[:1]
        if kind == "malformed" and k == 8:
            values = values[:1]
        messages.append((int(stamp[k]), names, values, []))
    return batch, messages


@pytest.mark.parametrize("kind", sorted(SKIPPED))
def test_skipped_kinds_are_counted_and_leave_the_state(kind: str) -> None:
    """A skipped sample is counted by its kind, changes nothing, and the next sample's increment spans it
    (wheel_dr.core.wheels' rules)."""
    s = make_settings()
    clean = run(samples(straight()), s)
    batch, messages = spoiled(kind)
    traj = run(batch, s)
    assert traj.status[8] == SKIPPED[kind]
    assert traj.counters[SKIPPED[kind].name.lower()] == 1
    assert traj.counters["used"] == len(messages) - 2 and traj.counters["chain_start"] == 1
    assert 8 not in traj.index
    # straight drive, position source: skipping a sample loses no travel
    assert traj.x_m[-1] == pytest.approx(clean.x_m[-1], rel=1e-12)
    est = Estimator(s)
    for k, (stamp, names, values, vel) in enumerate(messages):
        before = (est.x_m, est.y_m, est.theta_rad, est.cov.copy(), est.v_mps, est.stamp_ns)
        status = est.step(stamp, names, values, vel)
        if k == 8:
            assert status == SKIPPED[kind]
            after = (est.x_m, est.y_m, est.theta_rad, est.cov, est.v_mps, est.stamp_ns)
            assert before[:3] == after[:3] and np.array_equal(before[3], after[3]) and before[4:] == after[4:]
    assert est.counters == traj.counters
    assert est.x_m == pytest.approx(clean.x_m[-1], rel=1e-12)


def test_nan_in_a_joint_that_is_not_a_wheel_is_ignored() -> None:
    """Only needed values are checked: a NaN in another joint leaves the sample usable."""
    pos = np.column_stack([straight(), np.full(20, np.nan)])
    traj = run(samples(pos, (L, R, "quokka_caster_swivel_joint")), make_settings())
    assert traj.counters["non_finite"] == 0 and traj.counters["used"] == 19


def test_gap_restarts_the_chain_and_keeps_the_pose() -> None:
    """A gap longer than limits.max_gap_s: the sample is accepted as GAP, the increment across the gap
    is dropped, the pose is kept and the twist reported as zero and unobserved."""
    pos = straight()
    stamp = T0 + np.arange(20, dtype=np.int64) * STEP_NS
    stamp[8:] += 600_000_000                  # 0.61 s > 0.5 s
    pos[8:] += 0.7                            # the wheels turned during the gap
    s = make_settings()
    traj = run(samples(pos, stamp=stamp), s)
    assert traj.status[8] == SampleStatus.GAP and traj.counters["gap"] == 1
    i8 = int(np.flatnonzero(traj.index == 8)[0])
    assert traj.x_m[i8] == traj.x_m[i8 - 1]
    assert traj.v_mps[i8] == 0.0 and traj.twist_cov[i8, 0, 0] >= 1e6
    assert traj.x_m[-1] == pytest.approx(RADIUS * 0.1 * 18, rel=1e-12)   # 19 steps less the gap
    assert traj.counters["used"] == 18
    est = Estimator(s)
    statuses = [est.step(int(stamp[k]), [L, R], list(pos[k]), []) for k in range(20)]
    assert statuses[8] == SampleStatus.GAP and est.counters == traj.counters
    assert est.x_m == pytest.approx(traj.x_m[-1], rel=1e-12)
    # just under the limit is an ordinary step
    stamp2 = T0 + np.arange(20, dtype=np.int64) * STEP_NS
    stamp2[8:] += 480_000_000                 # 0.49 s
    assert run(samples(straight(), stamp=stamp2), s).counters["gap"] == 0


def test_jump_above_wheel_speed_limit_drops_the_increment() -> None:
    """A wheel surface speed above limits.max_wheel_speed_mps is a jump or glitch: accepted as JUMP,
    increment dropped, chain restarts from the new reading."""
    pos = straight()
    pos[8:, 1] += 1.0                         # the right encoder jumps 1 rad in 10 ms: 8.25 m/s > 5 m/s
    s = make_settings()
    traj = run(samples(pos), s)
    assert traj.status[8] == SampleStatus.JUMP and traj.counters["jump"] == 1
    assert traj.x_m[-1] == pytest.approx(RADIUS * 0.1 * 18, rel=1e-12)
    assert abs(traj.theta_rad[-1]) < 1e-15, "the jump does not turn the base"
    est = Estimator(s)
    statuses = [est.step(int(T0 + k * STEP_NS), [L, R], list(pos[k]), []) for k in range(20)]
    assert statuses[8] == SampleStatus.JUMP and est.counters == traj.counters
    # a faster limit accepts the same step as real motion
    fast = run(samples(pos), make_settings(**{"limits.max_wheel_speed_mps": 10.0}))
    assert fast.counters["jump"] == 0 and fast.theta_rad[-1] > 0


@pytest.mark.parametrize("message", [
    ([L, R], ["a", 0.1], []),            # not a number
    ([L, R], [None, 0.1], []),
    ([L, R], [0.1, 0.2], [0.0]),         # velocities of another length
    ([], [], []),                        # empty message
    ([L, L], [0.1, 0.2], []),            # configured joint R missing, L twice
    ([L, R], [0.1], [0.0, 0.0]),         # positions shorter than names
    ([L, R, R], [0.1, 0.2, 0.3], []),    # a joint twice (last entry wins for lookup)
])
def test_step_never_raises_on_odd_messages(message) -> None:
    """A live node never dies on a bad message: step returns a status for any of these."""
    est = Estimator(make_settings())
    est.step(T0, [L, R], [0.0, 0.0], [])
    names, positions, velocities = message
    status = est.step(T0 + STEP_NS, names, positions, velocities)
    assert isinstance(status, SampleStatus)
    assert sum(est.counters.values()) == 2
    assert math.isfinite(est.x_m) and np.all(np.isfinite(est.cov))


def test_batch_names_a_configured_joint_absent_from_every_sample() -> None:
    """Batch input without a configured joint at all is a user error: one sentence naming the joint."""
    with pytest.raises(InputError, match="quokka_right_wheel_joint"):
        run(samples(straight()[:, :1], (L,)), make_settings())
