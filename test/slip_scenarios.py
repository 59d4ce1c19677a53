"""Small drive generator for the slip tests: wheel joint states and gyro with known slip intervals.

Physics (common practice, REP 103 signs): the base follows commanded (v, w) through acceleration
limits; each wheel's ground speed is v -+ w b/2 (b the true track); a slipping wheel's surface
speed is its ground speed times (1 + ratio) when spinning or (1 - ratio) when dragging, blended in
and out over ``RAMP_S``. Wheel angles are surface travel over the true radius plus a small
rolling random walk, quantised to encoder counts; the gyro reads the true yaw rate plus bias and
white noise. Numbers are the invented "Quokka" demo cart (demo only).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from wheel_dr.core import JointSamples, Settings

__all__ = ["SlipEvent", "Drive", "Generated", "generate", "random_drive", "quokka_settings", "slip_figures",
           "heading_errors",
           "sim_round",
           "sharp_turns_drive", "traction_limit_drive", "noisy_gyro_drive",
           "QUOKKA_LEFT", "QUOKKA_RIGHT", "RAMP_S"]

QUOKKA_LEFT = ("quokka_left_wheel_joint",)
QUOKKA_RIGHT = ("quokka_right_wheel_joint",)
NOMINAL_RADIUS_M = 0.0825
NOMINAL_TRACK_M = 0.412
TRUE_LEFT_RADIUS_M = 0.0829
TRUE_RIGHT_RADIUS_M = 0.0822
TRUE_TRACK_M = 0.4185
RAMP_S = 0.05            # default time a slip blends in and out over
INNER_HZ = 1000.0        # integration rate of the truth
COUNTS_PER_REV = 4096 * 16  # encoder counts per wheel revolution (4096-count encoder, 16:1 gear)


@dataclass
class SlipEvent:
    """A wheel slipping from ``t0_s`` for ``duration_s``: side 'left'/'right', kind 'spin'/'drag'."""

    t0_s: float
    duration_s: float
    side: str
    kind: str
    ratio: float
    joint: int | None = None   # which joint of the side (skid steer), None for all of them
    ramp_s: float = RAMP_S     # the slip blends in and out over this time


@dataclass
class Drive:
    """Commanded segments (duration s, v m/s, w rad/s), limits and sensors of one synthetic run."""

    segments: list[tuple[float, float, float]]
    events: list[SlipEvent] = field(default_factory=list)
    accel_mps2: float = 1.0
    yaw_accel_radps2: float = 4.0
    rate_hz: float = 50.0
    jitter_s: float = 3e-4
    gyro: bool = True
    gyro_bias_radps: float = 0.01
    gyro_noise_radps: float = 0.01
    gyro_lag_s: float = 0.0       # the gyro reading is this old at the sample stamp
    wheel_accel_mps2: float | None = None  # also limit each wheel's ground acceleration to this
    counts_per_rev: int = COUNTS_PER_REV   # encoder resolution per wheel revolution
    rolling_k_m: float = 2e-6     # variance of the true rolling random walk per metre
    joints_per_side: int = 1


@dataclass
class Generated:
    """Samples, gyro and truth at every sample."""

    samples: JointSamples
    gyro_z_radps: np.ndarray | None
    t_s: np.ndarray
    truth_left: np.ndarray
    truth_right: np.ndarray
    theta_true_rad: np.ndarray
    events: list[SlipEvent]
    settings: Settings

    @property
    def truth_any(self) -> np.ndarray:
        return self.truth_left | self.truth_right


def quokka_settings(joints_per_side: int = 1, **values) -> Settings:
    """Nominal Quokka geometry (the estimator does not know the true radii and track)."""
    if joints_per_side == 1:
        left, right = QUOKKA_LEFT, QUOKKA_RIGHT
    else:
        left = tuple(f"quokka_left_{i}_wheel_joint" for i in range(joints_per_side))
        right = tuple(f"quokka_right_{i}_wheel_joint" for i in range(joints_per_side))
    flat = {"wheels.left_joints": left, "wheels.right_joints": right,
            "wheels.left_radius": NOMINAL_RADIUS_M, "wheels.right_radius": NOMINAL_RADIUS_M,
            "wheels.track_width": NOMINAL_TRACK_M}
    flat.update(values)
    return Settings.from_flat(flat)


def _rate_limit(target: np.ndarray, limit: float, dt: float) -> np.ndarray:
    out = np.empty_like(target)
    cur = 0.0
    step = limit * dt
    for i, x in enumerate(target.tolist()):
        cur += min(step, max(-step, x - cur))
        out[i] = cur
    return out


def generate(drive: Drive, seed: int, settings: Settings | None = None) -> Generated:
    """Simulate ``drive`` (truth at 1 kHz) and sample joint states and gyro at ``drive.rate_hz``."""
    rng = np.random.default_rng(seed)
    dt_i = 1.0 / INNER_HZ
    total = sum(s[0] for s in drive.segments)
    n_i = int(round(total * INNER_HZ)) + 1
    t = np.arange(n_i) * dt_i
    bounds = np.cumsum([0.0] + [s[0] for s in drive.segments])
    seg = np.clip(np.searchsorted(bounds, t, side="right") - 1, 0, len(drive.segments) - 1)
    v_cmd = np.array([s[1] for s in drive.segments])[seg]
    w_cmd = np.array([s[2] for s in drive.segments])[seg]
    v = _rate_limit(v_cmd, drive.accel_mps2, dt_i)
    w = _rate_limit(w_cmd, drive.yaw_accel_radps2, dt_i)
    b = TRUE_TRACK_M
    if drive.wheel_accel_mps2 is not None:
        wl = _rate_limit(v - 0.5 * b * w, drive.wheel_accel_mps2, dt_i)
        wr = _rate_limit(v + 0.5 * b * w, drive.wheel_accel_mps2, dt_i)
        v, w = 0.5 * (wl + wr), (wr - wl) / b
    nj = drive.joints_per_side
    ground = np.empty((n_i, 2 * nj))
    ground[:, :nj] = (v - 0.5 * b * w)[:, None]
    ground[:, nj:] = (v + 0.5 * b * w)[:, None]
    surface = ground.copy()
    truth = np.zeros((n_i, 2), dtype=bool)
    for ev in drive.events:
        s0 = 0 if ev.side == "left" else nj
        cols = range(s0, s0 + nj) if ev.joint is None else [s0 + ev.joint]
        ramp = np.clip((t - ev.t0_s) / ev.ramp_s, 0, 1) * np.clip((ev.t0_s + ev.duration_s - t) / ev.ramp_s, 0, 1)
        factor = 1.0 + ev.ratio * ramp if ev.kind == "spin" else 1.0 - ev.ratio * ramp
        for c in cols:
            surface[:, c] *= factor
        truth[:, 0 if ev.side == "left" else 1] |= (t >= ev.t0_s) & (t < ev.t0_s + ev.duration_s)
    travel = np.cumsum(surface * dt_i, axis=0)
    walk = rng.standard_normal(surface.shape) * np.sqrt(drive.rolling_k_m * np.abs(surface) * dt_i)
    travel = travel + np.cumsum(walk, axis=0)
    radius = np.array([TRUE_LEFT_RADIUS_M] * nj + [TRUE_RIGHT_RADIUS_M] * nj)
    angle = travel / radius
    theta = np.cumsum(w * dt_i)

    # sample
    n = int(total * drive.rate_hz)
    t_s = 1.0 + np.arange(n) / drive.rate_hz  # first 1 s of truth is before the recording
    t_s = t_s[t_s < total]
    t_read = t_s + rng.normal(0.0, drive.jitter_s, len(t_s))
    t_read = np.clip(t_read, 0.0, total)
    pos = np.column_stack([np.interp(t_read, t, angle[:, c]) for c in range(2 * nj)])
    step = 2 * math.pi / drive.counts_per_rev
    pos = np.round(pos / step) * step
    stamp_ns = (1_700_000_000 * 10**9 + np.round(t_s * 1e9)).astype(np.int64)
    s = settings or quokka_settings(nj)
    names = tuple(s.wheels.left_joints) + tuple(s.wheels.right_joints)
    samples = JointSamples(stamp_ns, names, pos, np.zeros_like(pos))
    gyro = None
    if drive.gyro:
        gyro = (np.interp(t_read - drive.gyro_lag_s, t, w) + drive.gyro_bias_radps
                + rng.normal(0.0, drive.gyro_noise_radps, len(t_s)))
    idx = np.clip(np.round(t_s * INNER_HZ).astype(int), 0, n_i - 1)
    return Generated(samples, gyro, t_s, truth[idx, 0], truth[idx, 1], np.interp(t_s, t, theta),
                     list(drive.events), s)


def random_drive(seed: int, duration_s: float = 90.0, n_events: int = 5, gyro: bool = True,
                 joints_per_side: int = 1, same_side_events: bool = False) -> Drive:
    """A random round of the (invented) Ferncliff vault aisles: straights, arcs, turns, stops, and
    ``n_events`` slip events of both kinds on straights and in arcs (at least 0.5 m/s)."""
    rng = np.random.default_rng(10_000 + seed)
    segments: list[tuple[float, float, float]] = [(3.0, 0.0, 0.0)]  # stand still: gyro bias
    slots: list[tuple[float, float]] = []
    t = 3.0
    while t < duration_s:
        kind = rng.choice(["straight", "arc", "turn", "stop"], p=[0.45, 0.3, 0.15, 0.1])
        if kind == "straight":
            d, vv, ww = rng.uniform(4.0, 7.0), rng.uniform(0.5, 1.0), 0.0
        elif kind == "arc":
            d, vv = rng.uniform(3.0, 5.0), rng.uniform(0.5, 0.8)
            ww = rng.choice([-1, 1]) * rng.uniform(0.4, 1.2)
        elif kind == "turn":
            d, vv, ww = rng.uniform(1.0, 2.0), 0.0, rng.choice([-1, 1]) * rng.uniform(1.0, 2.0)
        else:
            d, vv, ww = rng.uniform(1.0, 2.0), 0.0, 0.0
        segments.append((float(d), float(vv), float(ww)))
        if kind in ("straight", "arc") and d > 3.0:
            slots.append((t + 1.2, t + d - 0.3))   # after the speed has settled
        t += d
    events: list[SlipEvent] = []
    order = rng.permutation(len(slots))
    for i in order[:n_events]:
        lo, hi = slots[i]
        dur = float(min(rng.uniform(0.8, 2.0), hi - lo))
        t0 = float(rng.uniform(lo, hi - dur))
        kind = "spin" if rng.random() < 0.5 else "drag"
        ratio = float(rng.uniform(0.6, 1.0) if kind == "spin" else rng.uniform(0.5, 0.8))
        joint = int(rng.integers(joints_per_side)) if same_side_events else None
        events.append(SlipEvent(t0, dur, str(rng.choice(["left", "right"])), kind, ratio, joint))
    events.sort(key=lambda e: e.t0_s)
    return Drive(segments, events, gyro=gyro, joints_per_side=joints_per_side)


def slip_figures(gen: Generated, flagged: np.ndarray, t_s: np.ndarray, grace_s: float = 0.2) -> dict[str, float]:
    """Coverage after the first ``grace_s`` of each event, false-flag fraction of non-slip time
    (strict, and with a ``grace_s`` tail after each event excluded), worst latency (s)."""
    truth = np.interp(t_s, gen.t_s, gen.truth_any.astype(float)) > 0.5
    after_start = np.zeros_like(truth)
    tail = np.zeros_like(truth)
    latencies = []
    for e in gen.events:
        t1 = e.t0_s + e.duration_s
        after_start |= (t_s >= e.t0_s + grace_s) & (t_s < t1)
        tail |= (t_s >= t1) & (t_s < t1 + grace_s)
        hit = np.flatnonzero(flagged & (t_s >= e.t0_s) & (t_s < t1))
        latencies.append(t_s[hit[0]] - e.t0_s if len(hit) else math.inf)
    covered = flagged[after_start].mean() if after_start.any() else math.nan
    quiet = ~truth
    return {
        "coverage": float(covered),
        "false_strict": float(flagged[quiet].mean()),
        "false_outside_tail": float(flagged[quiet & ~tail].mean()),
        "latency_max_s": float(max(latencies)) if latencies else 0.0,
        "latency_mean_s": float(np.mean(latencies)) if latencies else 0.0,
    }


# ------------------------------------------------------------------------------------------------
# hard cases without slip (nothing may fire)
# ------------------------------------------------------------------------------------------------
def sharp_turns_drive(seed: int, duration_s: float = 40.0) -> Drive:
    """Arcs of 0.5 m radius at 1 m/s alternating left and right, and fast turns in place, with an
    abrupt yaw acceleration (8 rad/s^2) and a gyro reading 5 ms old."""
    rng = np.random.default_rng(20_000 + seed)
    segs: list[tuple[float, float, float]] = [(2.0, 0.0, 0.0)]
    t = 2.0
    while t < duration_s:
        d = float(rng.uniform(1.0, 2.5))
        if rng.random() < 0.75:
            segs.append((d, float(rng.uniform(0.8, 1.0)), float(rng.choice([-1, 1]) * rng.uniform(1.6, 2.0))))
        else:
            segs.append((d, 0.0, float(rng.choice([-1, 1]) * rng.uniform(2.0, 2.5))))
        t += d
    return Drive(segs, yaw_accel_radps2=8.0, gyro_lag_s=0.005)


def traction_limit_drive(seed: int, mu: float = 0.5, duration_s: float = 40.0) -> Drive:
    """Starts and stops with each wheel at 90 % of the traction limit mu g, straight and turning."""
    rng = np.random.default_rng(30_000 + seed)
    segs: list[tuple[float, float, float]] = [(2.0, 0.0, 0.0)]
    t = 2.0
    while t < duration_s:
        go = float(rng.uniform(1.0, 2.0))
        segs.append((go, float(rng.uniform(0.8, 1.2)), float(rng.choice([0.0, -0.8, 0.8]))))
        segs.append((float(rng.uniform(0.6, 1.2)), 0.0, 0.0))
        t += go + 1.2
    limit = 0.9 * mu * 9.80665
    return Drive(segs, accel_mps2=limit, yaw_accel_radps2=4.0, wheel_accel_mps2=limit)


def noisy_gyro_drive(seed: int, standstill: bool = True, duration_s: float = 60.0) -> Drive:
    """A random round without slip, the gyro three times noisier than configured, biased by
    0.05 rad/s; with or without a first standstill to estimate the bias."""
    d = random_drive(seed, duration_s=duration_s, n_events=0)
    if not standstill:
        d.segments = [(0.5, 0.6, 0.0)] + d.segments[1:]
    d.gyro_noise_radps = 0.03
    d.gyro_bias_radps = 0.05
    return d


# ------------------------------------------------------------------------------------------------
# the same kind of round built with the project's drive simulator (an independent generator)
# ------------------------------------------------------------------------------------------------
def sim_round(seed: int, n_events: int = 4):
    """A random round for ``wheel_dr.sim``: straights, arcs, turns, pauses at 50 Hz, gyro biased and
    noisy, up to ``n_events`` slip events (slip ratio 0.4 to 0.6, spin or drag, one wheel) placed
    in straights and arcs after the speed has settled. Returns the sim's Scenario."""
    from wheel_dr.sim import Scenario, SlipEvent as SimSlip, arc, pause, segment_times, straight, turn_in_place

    rng = np.random.default_rng(50_000 + seed)
    segs = [pause(2.0)]
    for _ in range(14):
        c = rng.choice(["straight", "arc", "turn", "pause"], p=[0.45, 0.3, 0.15, 0.1])
        if c == "straight":
            segs.append(straight(float(rng.uniform(3, 6)), float(rng.uniform(0.5, 0.9))))
        elif c == "arc":
            segs.append(arc(float(rng.choice([-1, 1]) * rng.uniform(0.8, 2.0)), float(rng.uniform(0.6, 1.5)),
                            float(rng.uniform(0.5, 0.7))))
        elif c == "turn":
            segs.append(turn_in_place(float(rng.choice([-1, 1]) * rng.uniform(1.0, 3.0)), 1.2))
        else:
            segs.append(pause(float(rng.uniform(1, 2))))
    base = Scenario(name=f"slip_round_{seed}", segments=tuple(segs), rate_hz=50.0, k_left_m=2e-5, k_right_m=2e-5,
                    gyro_bias_radps=0.01, gyro_noise_sd_radps=0.01, accel_mps2=1.0, accel_radps2=3.0)
    times = segment_times(base)
    cands = [i for i, s in enumerate(segs) if s.kind in ("straight", "arc")]
    events = []
    for i in rng.permutation(cands)[:n_events]:
        a, b = times[i], times[i + 1]
        if b - a < 2.5:
            continue
        d = float(rng.uniform(0.8, min(2.0, b - a - 1.5)))
        t0 = float(rng.uniform(a + 1.0, b - d - 0.3))
        events.append(SimSlip(t0, d, str(rng.choice(["left", "right"])), str(rng.choice(["spin", "drag"])),
                              float(rng.uniform(0.4, 0.6))))
    return base.with_values(slip_events=tuple(events))


def heading_errors(gen: Generated, traj) -> np.ndarray:
    """|error of the heading change| (rad) from 0.3 s before to 0.5 s after each event, against the truth."""
    t = gen.t_s[traj.index]
    out = []
    for e in gen.events:
        a, b = e.t0_s - 0.3, e.t0_s + e.duration_s + 0.5
        est = np.interp([a, b], t, traj.theta_rad)
        true = np.interp([a, b], gen.t_s, gen.theta_true_rad)
        out.append(abs((est[1] - est[0]) - (true[1] - true[0])))
    return np.array(out)
