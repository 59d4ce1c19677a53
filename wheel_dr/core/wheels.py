"""Joint states to wheel travel per side: joint lookup by name, sources, unwrapping and sample checks.

The same rules run in two forms that are tested equal: ``wheel_travel`` over whole arrays (the
analyser) and ``TravelTracker.step`` one sample at a time (the node).

Sample rules, in the order they are applied (each skipped sample is counted by kind):

* malformed (a non-empty position or velocity array whose length differs from the names, or
  names with both arrays empty): skipped;
* stamp zero or negative (or beyond int64 nanoseconds): skipped;
* a configured joint missing from the sample: skipped;
* a needed value NaN or infinite, or not given (its array empty, as sensor_msgs/JointState
  allows for unused fields): skipped as non-finite;
* stamp equal to or earlier than the last accepted one: skipped;
* otherwise accepted. An accepted sample restarts the increment chain (its increment is zero,
  the pose is kept) when it is the first, when the gap since the last accepted sample exceeds
  ``limits.max_gap_s``, or when any wheel's surface speed over the step exceeds
  ``limits.max_wheel_speed_mps`` (an encoder jump or glitch), or when a wheel's travel over the
  step is not a finite number (finite readings whose difference overflows, e.g. +-1e308): an
  increment that is not finite is never integrated.

``samples_from_messages`` turns a list of messages into ``JointSamples`` by the same rules, so
the analyser's per-message decoding and the node classify every message alike.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from enum import IntEnum
from typing import Sequence

import numpy as np

from .errors import InputError
from .settings import Settings

__all__ = [
    "SampleStatus",
    "SKIP_KINDS",
    "RESTART_KINDS",
    "JointSamples",
    "Travel",
    "wheel_travel",
    "joint_layout",
    "TravelTracker",
    "radians_per_unit",
    "wrap_difference",
    "count_statuses",
    "samples_from_messages",
]

_INT64_MAX = 2**63 - 1

TWO_PI = 2.0 * math.pi
_HALF_TURN = 0.5 * TWO_PI                 # wrap_difference's half period for angles


class SampleStatus(IntEnum):
    """What happened to one joint-state sample."""

    USED = 0
    CHAIN_START = 1          # first accepted sample: increment zero
    GAP = 2                  # accepted, gap too long: increment dropped, chain restarts
    JUMP = 3                 # accepted, implausible wheel speed: increment dropped, chain restarts
    MALFORMED = 10           # names and values of different lengths
    BAD_STAMP = 11           # stamp zero or negative
    MISSING_JOINT = 12       # a configured joint is not in the sample
    NON_FINITE = 13          # NaN or inf in a needed value
    STAMP_NOT_INCREASING = 14  # repeated or earlier stamp


SKIP_KINDS = tuple(s for s in SampleStatus if s >= 10)
RESTART_KINDS = (SampleStatus.CHAIN_START, SampleStatus.GAP, SampleStatus.JUMP)


def count_statuses(status: np.ndarray) -> dict[str, int]:
    """Count of every status kind (lower-case names) in an array of SampleStatus codes."""
    counts = np.bincount(np.asarray(status, dtype=np.int64), minlength=max(SampleStatus) + 1)
    return {s.name.lower(): int(counts[s]) for s in SampleStatus}


def radians_per_unit(settings: Settings) -> float:
    """Wheel angle in radians per unit of the configured source (1 for radians, 2 pi / counts per wheel rev)."""
    w = settings.wheels
    if w.source == "ticks":
        return TWO_PI / (w.ticks_per_revolution * w.gear_ratio)
    return 1.0


def wrap_difference(d: np.ndarray | float, period: float) -> np.ndarray | float:
    """A difference brought into [-period/2, period/2): unwraps angles (period 2 pi) or counters (2^bits)."""
    half = 0.5 * period
    return (np.asarray(d) + half) % period - half if isinstance(d, np.ndarray) else (d + half) % period - half


def _wrap_period(settings: Settings) -> float:
    w = settings.wheels
    if w.source == "ticks" and w.counter_bits > 0:
        return float(2 ** w.counter_bits)
    if w.source == "position" and w.wrap_angle:
        return TWO_PI
    return 0.0


@dataclass
class JointSamples:
    """A run of joint-state samples as arrays (the analyser's input).

    ``position`` and ``velocity`` are (N, J) over ``names``; ``present`` marks which joints each
    sample carried (absent ones may hold anything); ``malformed`` marks samples whose message was
    inconsistent. Stamps are nanoseconds (int64).
    """

    stamp_ns: np.ndarray
    names: tuple[str, ...]
    position: np.ndarray
    velocity: np.ndarray
    present: np.ndarray | None = None
    malformed: np.ndarray | None = None

    def __len__(self) -> int:
        return int(len(self.stamp_ns))


@dataclass
class Travel:
    """Wheel travel between consecutive accepted samples (metres), one entry per accepted sample."""

    index: np.ndarray      # (M,) index of each accepted sample in the input
    stamp_ns: np.ndarray   # (M,) int64
    dt_s: np.ndarray       # (M,) time since the previous accepted sample (0 at a chain start)
    ds_left_m: np.ndarray  # (M,) travel of the left side (mean of its joints)
    ds_right_m: np.ndarray
    restart: np.ndarray    # (M,) bool: increment dropped, chain restarts here
    status: np.ndarray     # (N,) SampleStatus code of every input sample
    joint_travel_m: np.ndarray | None = None  # (M, J) per joint, left joints first, then right (tables: encoder wheels)
    steer_rad: np.ndarray | None = None       # (M, T) steering reading of each step (wheel tables), else None


def _columns(names: Sequence[str], wanted: Sequence[str], where: str) -> list[int]:
    index = {n: i for i, n in enumerate(names)}
    missing = [n for n in wanted if n not in index]
    if missing:
        raise InputError(
            f"configured joint '{missing[0]}' is not among the joint states' names ({', '.join(names) or 'none'}); "
            f"fix {where} in the parameters file.")
    return [index[n] for n in wanted]


def joint_layout(settings: Settings) -> tuple[tuple[str, ...], tuple[float, ...], tuple[str, ...], int]:
    """The joints the settings read: spin joints (travel is differenced, in order: left then right
    for differential, the table's encoder wheels otherwise), their radii, steering joints (angles,
    table kinds only) and the number of left joints (differential; 0 for tables)."""
    model = settings.drive_model()
    w = settings.wheels
    if model is None:
        spin = tuple(w.left_joints) + tuple(w.right_joints)
        radius = (w.left_radius,) * len(w.left_joints) + (w.right_radius,) * len(w.right_joints)
        return spin, radius, (), len(w.left_joints)
    spin = tuple(j for j in model.wheel_joints if j)
    return spin, tuple(float(r) for r in model.radius[model.spin]), tuple(j for j in model.steer_joints if j), 0


def wheel_travel(samples: JointSamples, settings: Settings) -> Travel:
    """Per-side wheel travel of a whole run, vectorised (same rules as ``TravelTracker.step``).

    For wheel tables (``drive.kind`` other than differential) ``joint_travel_m`` holds the travel of
    each encoder wheel and ``steer_rad`` the steering reading of each step (the mean of its start
    and end readings); the per-side travel is zero. A steering joint turning faster than
    ``limits.max_steer_rate_radps`` over a step is a jump like a wheel speed beyond its limit.
    """
    w = settings.wheels
    n = len(samples)
    spin_names, radii, steer_names, nl = joint_layout(settings)
    where = "drive.wheel_joints / drive.steer_joints" if steer_names or not nl else \
        "wheels.left_joints / wheels.right_joints"
    spin_cols = _columns(samples.names, spin_names, where)
    steer_cols = _columns(samples.names, steer_names, where)
    cols = spin_cols + steer_cols
    ns = len(spin_cols)
    stamp = np.asarray(samples.stamp_ns, dtype=np.int64)
    values = samples.velocity if w.source == "velocity" else samples.position
    values = np.asarray(values, dtype=np.float64)[:, spin_cols] if n else np.zeros((0, ns))
    if steer_cols:
        steer_vals = np.asarray(samples.position, dtype=np.float64)[:, steer_cols] if n else \
            np.zeros((0, len(steer_cols)))
        needed = np.hstack([values, steer_vals])
    else:
        steer_vals = None
        needed = values

    status = np.zeros(n, dtype=np.int8)
    skipped = np.zeros(n, dtype=bool)

    def mark(mask: np.ndarray, kind: SampleStatus) -> None:
        new = mask & ~skipped
        status[new] = kind
        skipped[new] = True

    if samples.malformed is not None:
        mark(np.asarray(samples.malformed, dtype=bool), SampleStatus.MALFORMED)
    mark(stamp <= 0, SampleStatus.BAD_STAMP)
    if samples.present is not None:
        mark(~np.asarray(samples.present, dtype=bool)[:, cols].all(axis=1), SampleStatus.MISSING_JOINT)
    mark(~np.isfinite(needed).all(axis=1), SampleStatus.NON_FINITE)
    # A candidate is accepted when its stamp exceeds every earlier candidate's stamp: the running
    # maximum of accepted stamps equals that of all candidates, since rejected ones never exceed it.
    cand = np.flatnonzero(~skipped)
    cs = stamp[cand]
    prev_max = np.maximum.accumulate(np.concatenate(([np.iinfo(np.int64).min], cs[:-1]))) if len(cs) else cs
    increasing = cs > prev_max
    status[cand[~increasing]] = SampleStatus.STAMP_NOT_INCREASING
    acc = cand[increasing]

    m = len(acc)
    st = stamp[acc]
    vals = values[acc]
    dt = np.zeros(m)
    if m > 1:
        dt[1:] = (st[1:] - st[:-1]) * 1e-9
    radius = np.array(radii)
    dphi = np.zeros_like(vals)
    with np.errstate(over="ignore", invalid="ignore"):   # overflowing differences become jumps below
        if m > 1:
            if w.source == "velocity":
                dphi[1:] = 0.5 * (vals[1:] + vals[:-1]) * dt[1:, None]
            else:
                d = vals[1:] - vals[:-1]
                period = _wrap_period(settings)
                if period:
                    d = wrap_difference(d, period)
                dphi[1:] = d * radians_per_unit(settings)
        travel = dphi * radius
    steer = None
    dsteer = None
    if steer_vals is not None:
        sv = steer_vals[acc]
        steer = sv.copy()
        if m > 1:
            with np.errstate(over="ignore", invalid="ignore"):
                dsteer = wrap_difference(sv[1:] - sv[:-1], TWO_PI)
                steer[1:] = sv[:-1] + 0.5 * dsteer
    restart = np.zeros(m, dtype=bool)
    kind = np.full(m, SampleStatus.USED, dtype=np.int8)
    if m:
        kind[0] = SampleStatus.CHAIN_START
        gap = dt > settings.limits.max_gap_s
        gap[0] = False
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            # "not <=" so that a NaN travel (inf - inf, a wrapped inf) is a jump too
            jump = ~(np.abs(travel) <= settings.limits.max_wheel_speed_mps * dt[:, None]).all(axis=1)
            if dsteer is not None:
                jump[1:] |= ~(np.abs(dsteer) <= settings.limits.max_steer_rate_radps * dt[1:, None]).all(axis=1)
        jump[0] = False
        jump &= ~gap
        kind[gap] = SampleStatus.GAP
        kind[jump] = SampleStatus.JUMP
        restart = kind != SampleStatus.USED
        travel[restart] = 0.0
        if steer is not None:
            steer[restart] = steer_vals[acc][restart]
    status[acc] = kind
    if nl:
        ds_left = travel[:, :nl].sum(axis=1) / nl
        ds_right = travel[:, nl:].sum(axis=1) / (len(spin_cols) - nl)
    else:
        ds_left = ds_right = np.zeros(m)
    return Travel(acc, st, dt, ds_left, ds_right, restart, status, travel, steer)


class TravelTracker:
    """Streaming form of ``wheel_travel``: feed one joint-state sample at a time."""

    def __init__(self, settings: Settings) -> None:
        self.settings = settings
        w = settings.wheels
        spin, radii, steer, self._nl = joint_layout(settings)
        self._wanted = spin + steer
        self._nspin = len(spin)
        self._nsteer = len(steer)
        self._radius = list(radii)
        self._max_steer = settings.limits.max_steer_rate_radps
        self.steer_rad: list[float] = [0.0] * len(steer)   # steering readings of the last step (tables)
        self._period = _wrap_period(settings)
        self._scale = radians_per_unit(settings)
        self._use_velocity = w.source == "velocity"
        self._max_gap_s = settings.limits.max_gap_s
        self._max_speed = settings.limits.max_wheel_speed_mps
        self._names_key: tuple[str, ...] | None = None
        self._cols: list[int] | None = None
        self.last_stamp_ns: int | None = None
        self._last: list[float] | None = None
        self.joint_travel_m: list[float] = [0.0] * len(spin)  # last step, left joints first (tables: encoder wheels)

    def restart(self) -> None:
        """Forget the last sample: the next accepted one starts a new increment chain."""
        self.last_stamp_ns = None
        self._last = None

    def _lookup(self, names: Sequence[str]) -> list[int] | None:
        key = tuple(names)
        if key != self._names_key:
            index = {n: i for i, n in enumerate(key)}
            self._names_key = key
            self._cols = [index[n] for n in self._wanted] if all(n in index for n in self._wanted) else None
        return self._cols

    def step(self, stamp_ns: int, names: Sequence[str], positions: Sequence[float],
             velocities: Sequence[float]) -> tuple[SampleStatus, float, float, float]:
        """Classify one sample; returns (status, dt_s, ds_left_m, ds_right_m). Never raises on bad data."""
        values = velocities if self._use_velocity else positions
        n = len(names)
        np_, nv = len(positions), len(velocities)
        if np_ not in (0, n) or nv not in (0, n) or (n and not np_ and not nv):
            return SampleStatus.MALFORMED, 0.0, 0.0, 0.0
        if not 0 < stamp_ns <= _INT64_MAX:
            return SampleStatus.BAD_STAMP, 0.0, 0.0, 0.0
        cols = self._lookup(names)
        if cols is None:
            return SampleStatus.MISSING_JOINT, 0.0, 0.0, 0.0
        if len(values) != n:                      # the needed array is empty: no value given
            return SampleStatus.NON_FINITE, 0.0, 0.0, 0.0
        try:
            if self._nsteer:
                if len(positions) != n:            # steering angles come in the position field
                    return SampleStatus.NON_FINITE, 0.0, 0.0, 0.0
                ns = self._nspin
                vals = [float(values[c]) for c in cols[:ns]] + [float(positions[c]) for c in cols[ns:]]
            else:
                vals = [float(values[c]) for c in cols]
        except (TypeError, ValueError, OverflowError):
            return SampleStatus.NON_FINITE, 0.0, 0.0, 0.0
        if not all(map(math.isfinite, vals)):
            return SampleStatus.NON_FINITE, 0.0, 0.0, 0.0
        last_stamp = self.last_stamp_ns
        if last_stamp is not None and stamp_ns <= last_stamp:
            return SampleStatus.STAMP_NOT_INCREASING, 0.0, 0.0, 0.0
        last = self._last
        self.last_stamp_ns = int(stamp_ns)
        self._last = vals
        self.joint_travel_m = [0.0] * self._nspin
        if self._nsteer:
            self.steer_rad = vals[self._nspin:]
        if last is None:
            return SampleStatus.CHAIN_START, 0.0, 0.0, 0.0
        dt = (stamp_ns - last_stamp) * 1e-9
        if dt > self._max_gap_s:
            return SampleStatus.GAP, dt, 0.0, 0.0
        nl = self._nl
        if not nl:                                 # a wheel table: no sides
            return self._table_step(vals, last, dt)
        travel = []
        limit = self._max_speed * dt
        for v, v0, r in zip(vals, last, self._radius):
            if self._use_velocity:
                d = 0.5 * (v + v0) * dt
            else:
                d = v - v0
                if self._period:
                    d = wrap_difference(d, self._period)
                d = d * self._scale
            t = d * r
            if not abs(t) <= limit:                # NaN (an overflowed, wrapped difference) too
                return SampleStatus.JUMP, dt, 0.0, 0.0
            travel.append(t)
        if self._nsteer:
            ns, steer = self._nspin, []
            limit_s = self._max_steer * dt
            for v, v0 in zip(vals[ns:], last[ns:]):
                d = wrap_difference(v - v0, TWO_PI)
                if not abs(d) <= limit_s:
                    return SampleStatus.JUMP, dt, 0.0, 0.0
                steer.append(v0 + 0.5 * d)
            self.steer_rad = steer
        self.joint_travel_m = travel
        ds_left = sum(travel[:nl]) / nl
        ds_right = sum(travel[nl:]) / (len(travel) - nl)
        return SampleStatus.USED, dt, ds_left, ds_right

    def _table_step(self, vals: list[float], last: list[float], dt: float) -> tuple[SampleStatus, float, float, float]:
        """The rest of ``step`` for a wheel table (the same arithmetic as the differential loop, per
        list): spin travel of the encoder wheels, then the steering readings (mean of the step's
        two); an implausible speed of either is a jump."""
        limit = self._max_speed * dt
        r = self._radius
        if self._use_velocity:
            travel = [0.5 * (v + v0) * dt * ri for v, v0, ri in zip(vals, last, r)]
        elif self._period:
            period = self._period
            half = 0.5 * period
            sc = self._scale
            travel = [(((v - v0) + half) % period - half) * sc * ri for v, v0, ri in zip(vals, last, r)]
        else:
            sc = self._scale
            travel = [(v - v0) * sc * ri for v, v0, ri in zip(vals, last, r)]
        # every |travel| within the limit; NaN (an overflowed, wrapped difference) fails the sum
        if travel and not (max(map(abs, travel)) <= limit and math.isfinite(sum(travel))):
            return SampleStatus.JUMP, dt, 0.0, 0.0
        if self._nsteer:
            ns, steer = self._nspin, []
            limit_s = self._max_steer * dt
            for v, v0 in zip(vals[ns:], last[ns:]):
                d = (v - v0 + _HALF_TURN) % TWO_PI - _HALF_TURN      # wrap_difference(v - v0, TWO_PI)
                if not abs(d) <= limit_s:
                    return SampleStatus.JUMP, dt, 0.0, 0.0
                steer.append(v0 + 0.5 * d)
            self.steer_rad = steer
        self.joint_travel_m = travel
        return SampleStatus.USED, dt, 0.0, 0.0


def samples_from_messages(messages: Sequence[tuple[int, Sequence[str], Sequence[float], Sequence[float]]]
                          ) -> JointSamples:
    """``JointSamples`` of a list of (stamp_ns, names, positions, velocities) messages.

    The same rules as ``TravelTracker.step``: a message is malformed when a non-empty position or
    velocity array has another length than its names, or names come with both arrays empty; an
    empty array is a field not given (NaN, so a needed one is non-finite); a repeated name keeps
    its last value. Joint columns are the names in order of first appearance.
    """
    index: dict[str, int] = {}
    rows = []
    for stamp, names, pos, vel in messages:
        nm = list(names)
        n, np_, nv = len(nm), len(pos), len(vel)
        bad = np_ not in (0, n) or nv not in (0, n) or (n > 0 and np_ == 0 and nv == 0)
        if not bad:
            for name in nm:
                index.setdefault(name, len(index))
        rows.append((stamp, nm, pos, vel, bad))
    n, j = len(rows), len(index)
    stamps = np.zeros(n, dtype=np.int64)
    position = np.full((n, j), np.nan)
    velocity = np.full((n, j), np.nan)
    present = np.zeros((n, j), dtype=bool)
    malformed = np.zeros(n, dtype=bool)
    for i, (stamp, nm, pos, vel, bad) in enumerate(rows):
        st = int(stamp)
        stamps[i] = st if -_INT64_MAX <= st <= _INT64_MAX else -1   # beyond int64: a bad stamp
        if bad:
            malformed[i] = True
            continue
        cols = [index[x] for x in nm]
        present[i, cols] = True
        unique = len(set(cols)) == len(cols)
        for values, out in ((pos, position), (vel, velocity)):
            if len(values) and unique:
                try:
                    out[i, cols] = np.asarray(values, dtype=np.float64)
                    continue
                except (TypeError, ValueError, OverflowError):
                    pass
            if len(values):
                for c, v in zip(cols, values):
                    try:
                        out[i, c] = float(v)
                    except (TypeError, ValueError, OverflowError):
                        out[i, c] = np.nan
    return JointSamples(stamps, tuple(index), position, velocity, present, malformed)
