"""Slip and wheel-fault detection on wheel increments: three detectors, debounce, hysteresis, responses.

Interface used by the estimator (the two forms are tested equal, sample by sample):

* ``detect_slip(travel, gyro_z_radps, settings) -> SlipResult`` over a whole run, vectorised
  (gyro per accepted sample, NaN where no IMU reading is available, or None);
* ``SlipMonitor(settings).step(tracker, status, dt_s, ds_left_m, ds_right_m, gyro_z_radps) -> SlipStep``
  one accepted sample at a time (``tracker.joint_travel_m`` holds the per-joint travel of the step).

Wheel speeds and heading changes are compared over a sliding time window of ``slip.window_s``
(the samples with stamp in (t - window, t]), computed as differences of running sums; a window
that contains a chain restart (first sample, gap, encoder jump) or reaches back to the first
sample is not evaluated. Every detector turns its statistic into a score ``z``
(1 at its threshold) and runs its own latch: the flag sets once ``z > 1`` has held for
``slip.set_delay_s`` (debounce) and clears once ``z < slip.clear_fraction`` has held for
``slip.clear_delay_s`` (hysteresis); in between it keeps its state. Samples a detector cannot
evaluate count as clear. The traction detector latches differently (below).

Detectors (bits of ``detector``):

* ``DETECTOR_GYRO`` (1), gyro against wheels: the wheels' heading change over the window,
  (sum ds_r - sum ds_l) / b, against the gyro's, sum (w_z - bias) dt. Their difference d is gated
  by a chi-square test with one degree of freedom (Bar-Shalom, Li & Kirubarajan 2001, sec. 5.4,
  the gate on an innovation; ``slip.gyro_gate``): ``z = |d| / sqrt(gate * var)`` with
  ``var = sum C[1,1] + sigma_g^2 T^2 / n + (tol_w T)^2 + (tol_s dtheta_wheels)^2``, where C[1,1]
  is the heading-increment variance of the core's noise model (``noise.increment_noise``),
  T the window's length (stamp of its last sample minus that of the sample before its first),
  n its number of samples (sigma_g^2 T^2 / n = sigma_g^2 sum dt^2 at a steady rate), sigma_g
  ``slip.gyro_noise_radps``, tol_w ``slip.gyro_rate_tolerance_radps`` (timing and mounting,
  common practice) and tol_s ``slip.gyro_scale_tolerance`` (gyro scale and wheel calibration,
  common practice). The same test over ``slip.long_window_s`` catches mild slips that last:
  its score counts where the short window scores at least ``LONG_SHORT_SCORE`` with a
  difference of the same sign (so it neither fires on its own nor drags a flag on after a
  strong slip has ended). The gyro bias is the mean z rate over the last
  ``slip.gyro_bias_samples`` samples at which the base stood still (both wheel speeds below
  ``slip.still_speed_mps``), ``slip.gyro_bias_radps`` until ``BIAS_MIN_SAMPLES`` such samples.
  This is the disagreement test of gyrodometry (Borenstein & Feng, ICRA 1996) with a
  statistical threshold. The side is the hypothesis that best keeps the base speed seen before
  the discrepancy: if the right wheel slips, the true speed is v_l + w_gyro b / 2; if the left,
  v_r - w_gyro b / 2; it is judged while the score is over 1 and kept while it is under.
* ``DETECTOR_TRACTION`` (2), traction plausibility: a wheel's surface acceleration (difference of
  the window-mean speeds at the sample and at its window's boundary sample, over the distance
  of the two windows' centres) beyond ``slip.traction_mu`` times standard gravity
  cannot come from rolling contact (common practice: a wheel cannot accelerate the base faster
  than about mu g). Such a spike (no debounce: the acceleration is already a difference of
  window means) marks the onset of spinning (positive) or dragging
  (negative); the side stays flagged until an opposite acceleration beyond
  ``slip.clear_fraction`` of the limit (the wheel taking grip again; hysteresis) or until
  ``slip.traction_hold_s`` after the last spike of its own sign. It does not start on a side
  that another detector already flags (the spike belongs to that slip). Where the gyro
  is read, a traction flag on one side only is dropped while the gyro detector has been clear for
  ``slip.clear_delay_s`` (a one-sided slip would turn the wheels' heading). Runs without an IMU.
* ``DETECTOR_SAME_SIDE`` (4), where a side has two or more joints: the spread of their window
  speeds over the side's mean speed (a slip ratio, common practice), against
  ``slip.same_side_ratio`` (speeds below ``slip.same_side_min_speed_mps`` count as that speed).

Responses (``slip.response``): ``flag`` changes nothing; ``inflate`` multiplies the step noise Q
(and the twist covariance) of every flagged sample by ``slip.inflate_factor``; ``gyro``
replaces the heading increment of every flagged sample that has a gyro reading by the
bias-corrected gyro increment (w_z - bias) dt (gyrodometry, Borenstein & Feng 1996), and
inflates flagged samples without one. ``score`` is the largest detector score of the sample.

Slip flags are advisory, not a safety function (the caution in ``wheel_dr.safety``).
"""
from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass

import numpy as np

from .noise import motion_model_parts, motion_model_variances
from .settings import Settings
from .slip_motion import DETECTOR_ACCEL, DETECTOR_COMMAND, MotionInputs, MotionMonitor, detect_motion
from .wheels import SampleStatus, Travel, TravelTracker

__all__ = [
    "SlipResult",
    "SlipStep",
    "detect_slip",
    "SlipMonitor",
    "heading_increment_variance",
    "latch",
    "traction_latch",
    "DETECTOR_GYRO",
    "DETECTOR_TRACTION",
    "DETECTOR_SAME_SIDE",
    "DETECTOR_RESIDUAL",
    "DETECTOR_ACCEL",
    "DETECTOR_COMMAND",
    "DETECTOR_NAMES",
    "STANDARD_GRAVITY_MPS2",
    "BIAS_MIN_SAMPLES",
    "LONG_SHORT_SCORE",
    "MAX_GYRO_RADPS",
]

DETECTOR_GYRO = 1        # gyro z rate disagrees with the wheels' yaw rate (chi-square gate)
DETECTOR_TRACTION = 2    # a wheel accelerates faster than traction allows (mu g)
DETECTOR_SAME_SIDE = 4   # wheels of one side disagree (sides with two or more joints)
DETECTOR_RESIDUAL = 32   # a wheel disagrees with the others (wheel tables with redundant encoders)
DETECTOR_NAMES = {DETECTOR_GYRO: "gyro", DETECTOR_TRACTION: "traction", DETECTOR_SAME_SIDE: "same_side",
                  DETECTOR_ACCEL: "accel", DETECTOR_COMMAND: "command", DETECTOR_RESIDUAL: "residual"}

STANDARD_GRAVITY_MPS2 = 9.80665  # standard acceleration of gravity (3rd CGPM, 1901)
BIAS_MIN_SAMPLES = 10            # standing-still samples needed before the gyro bias estimate is used
MAX_GYRO_RADPS = 100.0           # z rates beyond this are not readings (MEMS full scale is about 35 rad/s)
_BLOCK = 32768                   # samples per block of the batch window work
LONG_SHORT_SCORE = 0.25          # the long window counts while the short one's score is at least this


@dataclass
class SlipResult:
    """Per accepted sample: flags, detectors, score, and what the response changes."""

    slip: np.ndarray           # (M,) bool, any side slipping
    left: np.ndarray           # (M,) bool
    right: np.ndarray          # (M,) bool
    detector: np.ndarray       # (M,) int bit mask of the detectors whose flag is set (DETECTOR_*)
    score: np.ndarray          # (M,) float, largest detector score (1 = at its threshold)
    dtheta_rad: np.ndarray | None = None   # heading increments to integrate (response 'gyro'), or None
    noise_scale: np.ndarray | None = None  # factor on the step noise Q (responses 'inflate', 'gyro'), or None
    gyro_bias_radps: np.ndarray | None = None  # gyro bias estimate in use at each sample, or None without gyro
    ds_m: np.ndarray | None = None         # body distances to integrate (slip.distance_source 'observer'), or None
    accel_bias_mps2: np.ndarray | None = None  # accelerometer bias estimate in use, or None without accelerometer
    wheel_flags: np.ndarray | None = None  # (M, E) bool per encoder wheel (wheel tables), or None (differential)


@dataclass
class SlipStep:
    """One sample's slip outcome (streaming); same meanings as ``SlipResult``."""

    slip: bool = False
    left: bool = False
    right: bool = False
    detector: int = 0
    score: float = 0.0
    dtheta_rad: float | None = None
    noise_scale: float = 1.0
    gyro_bias_radps: float | None = None
    ds_m: float | None = None
    accel_bias_mps2: float | None = None
    wheel_flags: tuple = ()    # one bool per encoder wheel (wheel tables), () for differential


# ------------------------------------------------------------------------------------------------
# shared pieces
# ------------------------------------------------------------------------------------------------
class _Constants:
    """Settings turned into the numbers both forms use (computed once, identically)."""

    def __init__(self, settings: Settings) -> None:
        s = settings.slip
        w = settings.wheels
        self.enabled = s.enabled
        self.response = s.response
        self.b = w.track_width
        self.half_b = 0.5 * w.track_width
        self.nl = len(w.left_joints)
        self.nr = len(w.right_joints)
        self.window_ns = max(1, int(round(s.window_s * 1e9)))   # a window always holds its own sample
        self.set_ns = int(round(s.set_delay_s * 1e9))
        self.clear_ns = int(round(s.clear_delay_s * 1e9))
        self.clear_fraction = s.clear_fraction
        self.gate = s.gyro_gate
        self.gyro_var = s.gyro_noise_radps * s.gyro_noise_radps
        self.rate_tol2 = s.gyro_rate_tolerance_radps * s.gyro_rate_tolerance_radps
        self.scale_tol2 = s.gyro_scale_tolerance * s.gyro_scale_tolerance
        self.bias_prior = s.gyro_bias_radps
        self.bias_samples = s.gyro_bias_samples
        self.still = s.still_speed_mps
        self.mu_g = s.traction_mu * STANDARD_GRAVITY_MPS2
        self.hold_ns = int(round(s.traction_hold_s * 1e9))
        self.long_ns = int(round(s.long_window_s * 1e9))
        self.ss_ratio = s.same_side_ratio
        self.ss_min = s.same_side_min_speed_mps
        self.inflate = s.inflate_factor
        self.response_distance = s.distance_source == "observer"
        n = settings.noise
        self.model = n.model
        self.k_left = n.k_left
        self.k_right = n.k_right
        self.alphas = n.alphas
        self.scheme = settings.integration


def heading_increment_variance(ds_left_m: np.ndarray, ds_right_m: np.ndarray, settings: Settings) -> np.ndarray:
    """Variance (rad^2) of each step's wheel heading increment: C[1,1] of ``noise.increment_noise``.

    Same expressions as the core's noise models: per_wheel (k_r |ds_r| + k_l |ds_l|) / b^2
    (Siegwart et al. 2011, sec. 5.2.4); motion_model var(rot1) + var(rot2) (Thrun et al. 2005,
    sec. 5.4). Divided by dt^2 it is the variance of the wheels' yaw rate.
    """
    return _c11(np.asarray(ds_left_m, dtype=np.float64), np.asarray(ds_right_m, dtype=np.float64),
                _Constants(settings))


def _c11(dl: np.ndarray, dr: np.ndarray, k: _Constants) -> np.ndarray:
    b = k.b
    if k.model == "per_wheel":
        return (k.k_right * np.abs(dr) + k.k_left * np.abs(dl)) / (b * b)
    ds = 0.5 * (dr + dl)
    dth = (dr - dl) / b
    rot1, trans, rot2 = motion_model_parts(ds, dth, k.scheme)
    var = motion_model_variances(rot1, trans, rot2, k.alphas)
    return var[..., 0] + var[..., 2]


def _held_runs(cond: np.ndarray, stamp_ns: np.ndarray, delay_ns: int) -> tuple[np.ndarray, np.ndarray]:
    """[from, end) of the stretches where ``cond`` has held for at least ``delay_ns``: each run of
    ``cond`` from its first sample whose stamp is ``delay_ns`` or more after the run's first one."""
    m = len(cond)
    flips = np.empty(m + 1, dtype=bool)               # where a run starts or ends
    if m:
        flips[0], flips[m] = cond[0], cond[-1]
        np.not_equal(cond[1:], cond[:-1], out=flips[1:m])
    edges = np.flatnonzero(flips)
    starts, ends = edges[0::2], edges[1::2]            # runs are [start, end)
    if delay_ns <= 0:
        return starts, ends
    held_from = np.searchsorted(stamp_ns, stamp_ns[starts] + delay_ns, side="left")
    keep = held_from < ends
    return held_from[keep], ends[keep]


def _held(cond: np.ndarray, stamp_ns: np.ndarray, delay_ns: int) -> np.ndarray:
    """True where ``cond`` has been true for at least ``delay_ns`` (since the first sample of its run)."""
    m = len(cond)
    begin, end = _held_runs(cond, stamp_ns, delay_ns)
    marks = np.zeros(m + 1, dtype=np.int8)
    marks[begin] = 1
    marks[end] = -1                                     # runs are separated: no index is both
    return np.cumsum(marks[:-1], dtype=np.int8) > 0


def latch(score: np.ndarray, stamp_ns: np.ndarray, set_delay_ns: int, clear_delay_ns: int,
          clear_fraction: float) -> np.ndarray:
    """Debounced latch with hysteresis, vectorised: set after ``score > 1`` held ``set_delay_ns``,
    cleared after ``score < clear_fraction`` held ``clear_delay_ns``, else the state is kept.

    Set and clear stretches exclude each other, so the state is the kind of the latest stretch
    begun, which equals stepping the state machine sample by sample: it changes only where a
    stretch of the other kind begins.
    """
    m = len(score)
    if m == 0:
        return np.zeros(0, dtype=bool)
    on_from, _ = _held_runs(score > 1.0, stamp_ns, set_delay_ns)
    off_from, _ = _held_runs(score < clear_fraction, stamp_ns, clear_delay_ns)
    begins = np.concatenate((on_from, off_from))
    kinds = np.concatenate((np.ones(len(on_from), dtype=np.int8), np.zeros(len(off_from), dtype=np.int8)))
    order = np.argsort(begins, kind="stable")
    begins, kinds = begins[order], kinds[order]
    change = kinds != np.concatenate(([0], kinds[:-1]))   # the state starts off
    marks = np.zeros(m + 1, dtype=np.int8)
    marks[begins[change]] = np.where(kinds[change] == 1, 1, -1)
    return np.cumsum(marks[:-1], dtype=np.int8) > 0


def traction_latch(signed_z: np.ndarray, stamp_ns: np.ndarray, hold_ns: int, release: float,
                   busy: np.ndarray | None = None) -> np.ndarray:
    """Traction flag from signed scores (a / (mu g)): a spike (|z| > 1) starts a slip of its sign
    (not where ``busy``: the side is flagged by another detector);
    an opposite score beyond ``release`` (the wheel taking grip again, hysteresis) ends it, as
    does ``hold_ns`` without a spike of its own sign. When a slip times out, an opposite spike
    within a further ``hold_ns`` is its late re-grip and starts nothing. The samples of the
    opposite run that ended a slip cannot start the next one.

    A loop over the samples with |z| > ``release`` only (few in normal driving); the streaming
    twin ``_TractionLatch`` applies the same rule to every sample.
    """
    m = len(signed_z)
    out = np.zeros(m, dtype=bool)
    if m == 0:
        return out
    events = np.flatnonzero(np.abs(signed_z) > release)
    sign, on_at, last_ns, consumed, expect, expect_until, prev_i = 0, 0, 0, 0, 0, 0, -2
    for i in events.tolist():
        z = float(signed_z[i])
        t = int(stamp_ns[i])
        weak = 1 if z > 0.0 else -1
        strong = weak if abs(z) > 1.0 else 0
        if sign != 0 and t - last_ns > hold_ns:                   # timed out before this sample
            out[on_at:int(np.searchsorted(stamp_ns, last_ns + hold_ns, side="right"))] = True
            sign, expect, expect_until = 0, -sign, last_ns + 2 * hold_ns
        if expect != 0 and t > expect_until:
            expect = 0
        if i != prev_i + 1 or weak != consumed:                   # the consumed run has ended
            consumed = 0
        prev_i = i
        if consumed:
            continue
        if sign == 0:
            if strong != 0:
                if strong == expect:                               # late re-grip of a timed-out slip
                    consumed, expect = strong, 0
                elif busy is not None and busy[i]:                  # another detector has this slip
                    consumed = strong
                else:
                    sign, on_at, last_ns, expect = strong, i, t, 0
        elif strong == sign:
            last_ns = t
        elif weak == -sign:                                        # the wheel takes grip again
            out[on_at:i] = True
            sign, consumed = 0, weak
    if sign != 0:
        out[on_at:int(np.searchsorted(stamp_ns, last_ns + hold_ns, side="right"))] = True
    return out


class _TractionLatch:
    """Streaming twin of ``traction_latch``."""

    __slots__ = ("_k", "_sign", "_last_ns", "_consumed", "_expect", "_expect_until")

    def __init__(self, k: "_Constants") -> None:
        self._k = k
        self._sign = 0
        self._last_ns = 0
        self._consumed = 0
        self._expect = 0
        self._expect_until = 0

    def update(self, signed_z: float, stamp_ns: int, busy: bool = False) -> bool:
        k = self._k
        hold = k.hold_ns
        weak = (1 if signed_z > 0.0 else -1) if abs(signed_z) > k.clear_fraction else 0
        strong = weak if abs(signed_z) > 1.0 else 0
        if weak == 0:
            self._consumed = 0
            if self._sign != 0 and stamp_ns - self._last_ns > hold:
                self._expect, self._expect_until = -self._sign, self._last_ns + 2 * hold
                self._sign = 0
            return self._sign != 0
        if self._sign != 0 and stamp_ns - self._last_ns > hold:
            self._expect, self._expect_until = -self._sign, self._last_ns + 2 * hold
            self._sign = 0
        if self._expect != 0 and stamp_ns > self._expect_until:
            self._expect = 0
        if weak != self._consumed:
            self._consumed = 0
        if self._consumed:
            return self._sign != 0
        if self._sign == 0:
            if strong != 0:
                if strong == self._expect:
                    self._consumed, self._expect = strong, 0
                elif busy:
                    self._consumed = strong
                else:
                    self._sign, self._last_ns, self._expect = strong, stamp_ns, 0
        elif strong == self._sign:
            self._last_ns = stamp_ns
        elif weak == -self._sign:
            self._sign, self._consumed = 0, weak
        return self._sign != 0


class _Latch:
    """Streaming twin of ``latch``."""

    __slots__ = ("state", "_set_since", "_clear_since", "_k")

    def __init__(self, k: _Constants) -> None:
        self._k = k
        self.state = False
        self._set_since: int | None = None
        self._clear_since: int | None = None

    def update(self, z: float, stamp_ns: int) -> bool:
        k = self._k
        is_set = z > 1.0
        is_clear = z < k.clear_fraction
        if is_set:
            if self._set_since is None:
                self._set_since = stamp_ns
        else:
            self._set_since = None
        if is_clear:
            if self._clear_since is None:
                self._clear_since = stamp_ns
        else:
            self._clear_since = None
        if is_set and stamp_ns - self._set_since >= k.set_ns:
            self.state = True
        elif is_clear and stamp_ns - self._clear_since >= k.clear_ns:
            self.state = False
        return self.state


def _no_slip(m: int) -> SlipResult:
    no = np.zeros(m, dtype=bool)
    return SlipResult(no, no.copy(), no.copy(), np.zeros(m, dtype=np.int64), np.zeros(m))


# ------------------------------------------------------------------------------------------------
# batch
# ------------------------------------------------------------------------------------------------
def _side_sum(w: list[np.ndarray], lo: int, hi: int) -> np.ndarray:
    """Mean of columns lo..hi-1 by sequential additions (as the streaming form)."""
    total = w[lo]
    for c in range(lo + 1, hi):
        total = total + w[c]
    return total / (hi - lo)


def _cum(x: np.ndarray) -> np.ndarray:
    """Running sum with a leading zero (sequential additions, as the streaming totals)."""
    out = np.zeros((len(x) + 1,) + x.shape[1:], dtype=x.dtype)
    np.cumsum(x, axis=0, out=out[1:])
    return out


def detect_slip(travel: Travel, gyro_z_radps: np.ndarray | None, settings: Settings,
                motion: MotionInputs | None = None) -> SlipResult:
    """Run the slip detectors over a whole run (one entry per accepted sample), vectorised.

    ``gyro_z_radps`` (M,) is the IMU z rate (rad/s, base frame, REP 103) held at each accepted
    sample, NaN where none is available, or None for no IMU (readings beyond ``MAX_GYRO_RADPS``
    count as none). ``motion`` carries the accelerometer, orientation and command per accepted
    sample for the detectors of ``slip_motion``. See the module docstring for the
    detectors, their thresholds and the responses.
    """
    k = _Constants(settings)
    m = len(travel.dt_s)
    if not k.enabled or m == 0:
        return _no_slip(m)
    stamp = np.asarray(travel.stamp_ns, dtype=np.int64)
    restart = np.asarray(travel.restart, dtype=bool)
    dt = np.where(restart, 0.0, np.asarray(travel.dt_s, dtype=np.float64))
    dl = np.asarray(travel.ds_left_m, dtype=np.float64)
    dr = np.asarray(travel.ds_right_m, dtype=np.float64)
    joints = travel.joint_travel_m
    nl = k.nl
    if joints is None or joints.shape[1] != k.nl + k.nr:
        joints = np.column_stack([dl, dr])
        nl = 1
    joints = np.asarray(joints, dtype=np.float64)
    nj = joints.shape[1]

    # gyro and its bias (mean over the last N standing-still samples)
    has_gyro = gyro_z_radps is not None
    if has_gyro:
        g = np.asarray(gyro_z_radps, dtype=np.float64)
        with np.errstate(invalid="ignore"):
            avail = np.abs(g) <= MAX_GYRO_RADPS              # False for NaN and inf too
        g = np.where(avail, g, 0.0)
        still = avail & ~restart & (np.abs(dl) <= k.still * dt) & (np.abs(dr) <= k.still * dt)
        # bias after the c-th standstill sample: mean of the last min(c, N) of them; held between
        still_total = _cum(g[still])
        c = np.arange(1, len(still_total))
        n_used = np.minimum(c, k.bias_samples)
        at_still = np.concatenate(((k.bias_prior,), (still_total[c] - still_total[c - n_used]) / n_used))
        at_still[1:BIAS_MIN_SAMPLES] = k.bias_prior
        bias = at_still[np.cumsum(still)]
        gi = np.where(avail, (g - bias) * dt, 0.0)      # bias-corrected gyro heading increment
        c11 = _c11(dl, dr, k)
    else:
        avail = np.zeros(m, dtype=bool)
        gi = np.zeros(m)

    # sliding windows (stamp_i in (t_k - window, t_k]) by running sums; boundary sample = j - 1
    j = np.searchsorted(stamp, stamp - k.window_ns, side="right")
    bnd = np.maximum(j - 1, 0)
    has_b = j >= 1

    # window sums are differences of sequential running sums (gyro increments, C11, joints);
    # a window is clean when no restart lies in it; its length is the stamp difference to the
    # boundary sample, its sample count k - j + 1
    def cum(x: np.ndarray) -> np.ndarray:
        c = np.empty(m + 1)
        c[0] = 0.0
        np.cumsum(x, out=c[1:])
        return c

    idx = np.arange(m)
    last_restart = np.maximum.accumulate(np.where(restart, idx, -1))
    cum_joints = [cum(joints[:, c]) for c in range(nj)]
    clean = has_b & (last_restart < j)
    vb = np.empty(m)
    span = np.empty(m)                                  # window lengths (1 where not clean)
    if has_gyro:
        last_miss = np.maximum.accumulate(np.where(avail, -1, idx))
        cum_gi, cum_c11 = cum(gi), cum(c11)
        g_ok = clean & (last_miss < j)

    def side_extreme(part: list[np.ndarray]) -> np.ndarray:
        """Per sample the value of largest magnitude (the first of equals)."""
        if len(part) == 1:
            return part[0]
        stacked = np.column_stack(part)
        pick = np.argmax(np.abs(stacked), axis=1)
        return np.take_along_axis(stacked, pick[:, None], axis=1)[:, 0]

    def same_side(vs: list[np.ndarray], ok: np.ndarray) -> np.ndarray:
        """Spread / max(mean |v|, floor) / ratio of one side's joint speeds."""
        mean_abs = np.abs(vs[0])
        hi_v, lo_v = vs[0], vs[0]
        for v in vs[1:]:
            mean_abs = mean_abs + np.abs(v)
            hi_v, lo_v = np.maximum(hi_v, v), np.minimum(lo_v, v)
        mean_abs = mean_abs / len(vs)
        return np.where(ok, (hi_v - lo_v) / np.maximum(mean_abs, k.ss_min) / k.ss_ratio, 0.0)

    def gyro_test(at: np.ndarray, at1, t_w: np.ndarray, jw: np.ndarray, ok: np.ndarray, w_left: np.ndarray,
                  w_right: np.ndarray):
        """Gyro score of the samples ``at`` (running-sum rows ``at1``) whose windows start at ``jw``."""
        dth_w = (w_right - w_left) / k.b
        dth_gw = cum_gi[at1] - cum_gi[jw]
        d_w = dth_w - dth_gw
        n_win = (at - jw + 1).astype(np.float64)
        var = (cum_c11[at1] - cum_c11[jw]) + (t_w * t_w) * (k.gyro_var / n_win + k.rate_tol2) \
            + k.scale_tol2 * (dth_w * dth_w)
        with np.errstate(divide="ignore", invalid="ignore"):
            z = np.where(ok, np.abs(d_w) / np.sqrt(var * k.gate), 0.0)
        return z, d_w, dth_gw

    # the per-sample window work runs in blocks that stay in cache (a block reads the speeds of
    # earlier samples from the full arrays, which are filled in order)
    vj = [np.empty(m) for _ in range(nj)]
    vl, vr = np.empty(m), np.empty(m)
    st_left, st_right = np.empty(m), np.empty(m)
    zs_left = np.empty(m) if nl >= 2 else None
    zs_right = np.empty(m) if nj - nl >= 2 else None
    zg = np.zeros(m)
    gyro_left = np.zeros(m, dtype=bool)
    carry_quiet, carry_strong, carry_q, carry_left = -1, -1, 0.0, False
    for lo in range(0, m, _BLOCK):
        hi = min(m, lo + _BLOCK)
        blk = slice(lo, hi)
        jj, bb, cl = j[blk], bnd[blk], clean[blk]
        t_eff = (stamp[blk] - stamp[bb]) * 1e-9
        sf = np.where(cl, t_eff, 1.0)
        span[blk] = sf
        clean_b = has_b[blk] & clean[bb]
        # speeds per joint; unclean windows (safe = 1) hold window sums that are never used
        wj = [c[lo + 1:hi + 1] - c[jj] for c in cum_joints]
        for col in range(nj):
            vj[col][blk] = wj[col] / sf
        wl, wr = _side_sum(wj, 0, nl), _side_sum(wj, nl, nj)
        vl[blk], vr[blk] = wl / sf, wr / sf
        vb[blk] = 0.5 * (vl[blk] + vr[blk])
        # traction: a / (mu g) per joint, a = difference of window-mean speeds one window apart
        ok_a = cl & clean_b
        # the two windows' centres lie half of each window's length apart
        gap = 0.5 * (sf + span[bb])
        za = [np.where(ok_a, (v[blk] - v[bb]) / gap / k.mu_g, 0.0) for v in vj]
        st_left[blk], st_right[blk] = side_extreme(za[:nl]), side_extreme(za[nl:])
        if zs_left is not None:
            zs_left[blk] = same_side([v[blk] for v in vj[:nl]], cl)
        if zs_right is not None:
            zs_right[blk] = same_side([v[blk] for v in vj[nl:]], cl)
        # gyro against wheels, over the window and (for mild sustained slips) the long window
        if has_gyro:
            ib = idx[blk]
            z, d, dg = gyro_test(ib, slice(lo + 1, hi + 1), t_eff, jj, g_ok[blk], wl, wr)
            if k.long_ns > 0:
                # the long window only counts where the short one scores LONG_SHORT_SCORE or more
                sub = np.flatnonzero(g_ok[blk] & (z >= LONG_SHORT_SCORE))
                at = sub + lo
                jl = np.searchsorted(stamp, stamp[at] - k.long_ns, side="right")
                ok_l = (jl >= 1) & (last_restart[at] < jl) & (last_miss[at] < jl)
                wjl = [c[at + 1] - c[jl] for c in cum_joints]
                t_l = (stamp[at] - stamp[np.maximum(jl - 1, 0)]) * 1e-9
                zl, dl_w, _ = gyro_test(at, at + 1, t_l, jl, ok_l, _side_sum(wjl, 0, nl), _side_sum(wjl, nl, nj))
                agree = (d[sub] > 0.0) == (dl_w > 0.0)
                z[sub] = np.maximum(z[sub], np.where(agree, zl, 0.0))
            zg[blk] = z
            # side: keep the base speed seen while quiet (forward fill across blocks)
            quiet = g_ok[blk] & clean_b & (z < k.clear_fraction)
            qi = np.maximum(np.maximum.accumulate(np.where(quiet, ib, -1)), carry_quiet)
            q = np.where(qi >= 0, vb[bnd[np.maximum(qi, 0)]], 0.0)
            carry_quiet = int(qi[-1])
            wg = dg / sf
            raw_left = np.abs(vr[blk] - wg * k.half_b - q) < np.abs(vl[blk] + wg * k.half_b - q)
            # the side is judged while the score is over the threshold and kept while it is under
            # (the windows of a slip's tail mix slipping and gripping samples)
            li = np.maximum(np.maximum.accumulate(np.where(z > 1.0, ib, -1)), carry_strong)
            carry_strong = int(li[-1])
            gyro_left[blk] = np.where(li >= 0, np.where(li >= lo, raw_left[np.maximum(li - lo, 0)], carry_left),
                                      raw_left)
            if carry_strong >= lo:
                carry_left = bool(raw_left[carry_strong - lo])
    zt_left, zt_right = np.abs(st_left), np.abs(st_right)
    if not has_gyro:
        g_ok = np.zeros(m, dtype=bool)

    # latches
    def lat(z: np.ndarray) -> np.ndarray:
        return latch(z, stamp, k.set_ns, k.clear_ns, k.clear_fraction)

    no = np.zeros(m, dtype=bool)
    on_g = lat(zg) if has_gyro else no
    on_sl = lat(zs_left) if zs_left is not None else no
    on_sr = lat(zs_right) if zs_right is not None else no
    # a traction slip does not start on a side another detector already flags (its spikes are
    # that slip's own onset or re-grip)
    busy_left, busy_right = on_sl | (on_g & gyro_left), on_sr | (on_g & ~gyro_left)
    on_tl = traction_latch(st_left, stamp, k.hold_ns, k.clear_fraction, busy_left)
    on_tr = traction_latch(st_right, stamp, k.hold_ns, k.clear_fraction, busy_right)
    # a one-sided slip turns the wheels' heading: a gyro clearly quiet for clear_delay_s vetoes it
    if has_gyro:
        veto = _held(g_ok & (zg < k.clear_fraction), stamp, k.clear_ns) & ~(on_tl & on_tr)
        on_tl, on_tr = on_tl & ~veto, on_tr & ~veto
    left = on_tl | on_sl | (on_g & gyro_left)
    right = on_tr | on_sr | (on_g & ~gyro_left)
    flagged = left | right
    detector = (on_g * DETECTOR_GYRO + (on_tl | on_tr) * DETECTOR_TRACTION
                + (on_sl | on_sr) * DETECTOR_SAME_SIDE).astype(np.int64)
    score = np.maximum(np.maximum(zg, zt_left), zt_right)
    if zs_left is not None:
        score = np.maximum(score, zs_left)
    if zs_right is not None:
        score = np.maximum(score, zs_right)

    mr = None
    if motion is not None:
        rate = np.where(avail, g - bias, np.nan) if has_gyro else None
        mr = detect_motion(stamp, restart, dt, dl, dr, rate, motion, settings)
    if mr is not None:
        # both sides: the accelerometer and the command see the base, not a side
        if motion.cmd_v_mps is not None:
            mr.command = latch(mr.z_command, stamp, k.set_ns, k.clear_ns, k.clear_fraction)
        on_m = mr.accel | mr.command
        left, right = left | on_m, right | on_m
        flagged = left | right
        detector = detector + (mr.accel * DETECTOR_ACCEL + mr.command * DETECTOR_COMMAND).astype(np.int64)
        score = np.maximum(score, np.maximum(mr.z_accel, mr.z_command))
    result = SlipResult(flagged, left, right, detector, score,
                        gyro_bias_radps=bias if has_gyro else None)
    if mr is not None:
        result.accel_bias_mps2 = mr.bias_mps2
        if settings.slip.distance_source == "observer":
            use = mr.accel & np.isfinite(mr.ds_observer_m)
            result.ds_m = np.where(use, mr.ds_observer_m, 0.5 * (dr + dl))   # else the wheels' (as body_increment)
    if k.response == "inflate":
        result.noise_scale = np.where(flagged, k.inflate, 1.0)
    elif k.response == "gyro":
        sub = flagged & avail
        result.dtheta_rad = np.where(sub, gi, (dr - dl) / k.b)   # else the wheels' (as body_increment)
        result.noise_scale = np.where(flagged & ~avail, k.inflate, 1.0)
    return result


# ------------------------------------------------------------------------------------------------
# streaming
# ------------------------------------------------------------------------------------------------
def _side_sum_one(w: list[float], lo: int, hi: int) -> float:
    total = w[lo]
    for c in range(lo + 1, hi):
        total = total + w[c]
    return total / (hi - lo)


class _Entry:
    """One sample in the window: stamp, running totals after it, and what the boundary needs."""

    __slots__ = ("stamp", "totals", "joints", "clean", "vj", "vb", "span")

    def __init__(self, stamp: int, totals: tuple, joints: list[float]) -> None:
        self.stamp = stamp
        self.totals = totals
        self.joints = joints
        self.clean = False
        self.vj: list[float] = []
        self.vb = 0.0
        self.span = 1.0


class SlipMonitor:
    """Streaming form of ``detect_slip`` (same rules and arithmetic; tested equal sample by sample)."""

    def __init__(self, settings: Settings) -> None:
        self.settings = settings
        self._k = _Constants(settings)
        self.reset()

    def reset(self) -> None:
        """Forget detector state (windows, latches, gyro bias)."""
        k = self._k
        self._entries: deque[_Entry] = deque()
        self._boundary: _Entry | None = None
        self._lentries: deque[_Entry] = deque()
        self._lboundary: _Entry | None = None
        nj = k.nl + k.nr
        self._nj = nj
        self._t_joints = [0.0] * nj
        self._t_gi = self._t_c11 = 0.0
        self._t_restart = 0
        self._t_miss = 0
        self._still_count = 0
        self._still_totals: deque[float] = deque([0.0], maxlen=k.bias_samples + 1)
        self._q = 0.0
        self._quiet_since: int | None = None
        self._gyro_left: bool | None = None
        self._lat_g, self._lat_tl, self._lat_tr = _Latch(k), _TractionLatch(k), _TractionLatch(k)
        self._lat_sl, self._lat_sr = _Latch(k), _Latch(k)
        self._motion = MotionMonitor(self.settings)
        self._motion_seen = False
        self._lat_c = _Latch(k)

    def _c11_one(self, dl: float, dr: float) -> float:
        k = self._k
        if k.model == "per_wheel":
            b = k.b
            return (k.k_right * abs(dr) + k.k_left * abs(dl)) / (b * b)
        return float(_c11(np.array([dl]), np.array([dr]), k)[0])

    def _gyro_test(self, ok: bool, stamp: int, b_stamp: int, now: tuple, b_tot: tuple, w_left: float,
                   w_right: float, n: int) -> tuple[float, float, float]:
        k = self._k
        t_w = (stamp - b_stamp) * 1e-9
        dth_w = (w_right - w_left) / k.b
        dth_gw = now[0] - b_tot[0]
        d_w = dth_w - dth_gw
        if not ok:
            return 0.0, d_w, dth_gw
        var = (now[1] - b_tot[1]) + (t_w * t_w) * (k.gyro_var / float(n) + k.rate_tol2) \
            + k.scale_tol2 * (dth_w * dth_w)
        return abs(d_w) / math.sqrt(var * k.gate), d_w, dth_gw   # var > 0: gyro noise > 0, window dt > 0

    def step(self, tracker: TravelTracker, status: SampleStatus, dt_s: float, ds_left_m: float,
             ds_right_m: float, gyro_z_radps: float | None, accel_x_mps2: float | None = None,
             up_x: float | None = None, cmd_v_mps: float | None = None) -> SlipStep:
        """One accepted sample (``status`` < 10); returns its flags and the response's changes.

        ``accel_x_mps2``, ``up_x`` and ``cmd_v_mps`` feed the detectors of ``slip_motion`` (None: not read).
        """
        k = self._k
        if not k.enabled:
            return SlipStep()
        stamp = int(tracker.last_stamp_ns)
        restart = status != SampleStatus.USED
        dt = 0.0 if restart else float(dt_s)
        dl, dr = float(ds_left_m), float(ds_right_m)
        joints = [float(v) for v in tracker.joint_travel_m]
        nl = k.nl
        if len(joints) != self._nj:
            joints, nl = [dl, dr], 1
        nj = len(joints)
        if len(self._t_joints) != nj:
            self._t_joints = [0.0] * nj

        # gyro and bias
        try:
            g = float(gyro_z_radps) if gyro_z_radps is not None else math.nan
        except (TypeError, ValueError):
            g = math.nan
        avail = abs(g) <= MAX_GYRO_RADPS                     # False for NaN and inf too
        if not avail:
            g = 0.0
        if avail and not restart and abs(dl) <= k.still * dt and abs(dr) <= k.still * dt:
            self._still_count += 1
            self._still_totals.append(self._still_totals[-1] + g)
        count = self._still_count
        if count >= BIAS_MIN_SAMPLES:
            n_used = min(count, k.bias_samples)
            bias = (self._still_totals[-1] - self._still_totals[-1 - n_used]) / n_used
        else:
            bias = k.bias_prior
        gi = (g - bias) * dt if avail else 0.0
        c11 = self._c11_one(dl, dr)

        # running totals, window
        tj = self._t_joints
        for i in range(nj):
            tj[i] = tj[i] + joints[i]
        self._t_gi += gi
        self._t_c11 += c11
        self._t_restart += int(restart)
        self._t_miss += int(not avail)
        entry = _Entry(stamp, (self._t_gi, self._t_c11, self._t_restart, self._t_miss), list(tj))
        self._entries.append(entry)
        cutoff = stamp - k.window_ns
        while self._entries[0].stamp <= cutoff:
            self._boundary = self._entries.popleft()
        if k.long_ns > 0:
            self._lentries.append(entry)
            cutoff_l = stamp - k.long_ns
            while self._lentries[0].stamp <= cutoff_l:
                self._lboundary = self._lentries.popleft()
        bnd = self._boundary
        if bnd is None:
            b_tot, b_joints, b_stamp = (0.0, 0.0, 0, 0), [0.0] * nj, stamp
        else:
            b_tot, b_joints, b_stamp = bnd.totals, bnd.joints, bnd.stamp
        now = entry.totals
        t_eff = (stamp - b_stamp) * 1e-9
        clean = bnd is not None and now[2] - b_tot[2] == 0
        safe = t_eff if clean else 1.0
        wj = [tj[i] - b_joints[i] for i in range(nj)]
        vj = [wj[i] / safe for i in range(nj)]
        wl, wr = _side_sum_one(wj, 0, nl), _side_sum_one(wj, nl, nj)
        vl, vr = wl / safe, wr / safe
        vb = 0.5 * (vl + vr)
        entry.clean, entry.vj, entry.vb, entry.span = clean, vj, vb, safe
        clean_b = bnd is not None and bnd.clean

        # traction
        if clean and clean_b:
            gap = 0.5 * (safe + bnd.span)
            za = [(vj[i] - bnd.vj[i]) / gap / k.mu_g for i in range(nj)]
        else:
            za = [0.0] * nj

        def side_extreme(part: list[float]) -> float:
            best = part[0]
            for x in part[1:]:
                if abs(x) > abs(best):
                    best = x
            return best

        st_left, st_right = side_extreme(za[:nl]), side_extreme(za[nl:])
        zt_left, zt_right = abs(st_left), abs(st_right)

        # same side
        def same_side(lo: int, hi: int) -> float:
            vs = vj[lo:hi]
            mean_abs = abs(vs[0])
            for v in vs[1:]:
                mean_abs = mean_abs + abs(v)
            mean_abs = mean_abs / len(vs)
            if not clean:
                return 0.0
            return (max(vs) - min(vs)) / max(mean_abs, k.ss_min) / k.ss_ratio

        zs_left = same_side(0, nl) if nl >= 2 else None
        zs_right = same_side(nl, nj) if nj - nl >= 2 else None

        # gyro against wheels (window, long window)
        g_ok = clean and now[3] - b_tot[3] == 0
        zg, d, dth_g = self._gyro_test(g_ok, stamp, b_stamp, now, b_tot, wl, wr, len(self._entries))
        lb = self._lboundary
        if k.long_ns > 0 and g_ok and lb is not None and now[2] - lb.totals[2] == 0 and now[3] - lb.totals[3] == 0:
            wjl = [tj[i] - lb.joints[i] for i in range(nj)]
            zl, dl_w, _ = self._gyro_test(True, stamp, lb.stamp, now, lb.totals, _side_sum_one(wjl, 0, nl),
                                          _side_sum_one(wjl, nl, nj), len(self._lentries))
            if zg >= LONG_SHORT_SCORE and (d > 0.0) == (dl_w > 0.0):
                zg = max(zg, zl)
        if g_ok and clean_b and zg < k.clear_fraction:
            self._q = bnd.vb
        q = self._q
        wg = dth_g / safe
        gyro_left = abs(vr - wg * k.half_b - q) < abs(vl + wg * k.half_b - q)
        if zg > 1.0:
            self._gyro_left = gyro_left
        elif self._gyro_left is not None:
            gyro_left = self._gyro_left

        on_g = self._lat_g.update(zg, stamp)
        on_sl = self._lat_sl.update(zs_left, stamp) if zs_left is not None else False
        on_sr = self._lat_sr.update(zs_right, stamp) if zs_right is not None else False
        on_tl = self._lat_tl.update(st_left, stamp, on_sl or (on_g and gyro_left))
        on_tr = self._lat_tr.update(st_right, stamp, on_sr or (on_g and not gyro_left))
        if g_ok and zg < k.clear_fraction:
            if self._quiet_since is None:
                self._quiet_since = stamp
        else:
            self._quiet_since = None
        if self._quiet_since is not None and stamp - self._quiet_since >= k.clear_ns and not (on_tl and on_tr):
            on_tl = on_tr = False
        left = on_tl or on_sl or (on_g and gyro_left)
        right = on_tr or on_sr or (on_g and not gyro_left)
        flagged = left or right
        detector = ((DETECTOR_GYRO if on_g else 0) | (DETECTOR_TRACTION if (on_tl or on_tr) else 0)
                    | (DETECTOR_SAME_SIDE if (on_sl or on_sr) else 0))
        score = max(zg, zt_left, zt_right)
        if zs_left is not None:
            score = max(score, zs_left)
        if zs_right is not None:
            score = max(score, zs_right)
        ms = None
        if accel_x_mps2 is not None or self._motion_seen:    # once an accelerometer was read, None is a dropout
            self._motion_seen = True
            ms = self._motion.step(stamp, restart, dt, dl, dr, (g - bias) if avail else None, accel_x_mps2, up_x,
                                   cmd_v_mps)
        if ms is not None:
            ms.command = self._lat_c.update(ms.z_command, stamp)
            if ms.accel or ms.command:
                left = right = flagged = True
            detector |= (DETECTOR_ACCEL if ms.accel else 0) | (DETECTOR_COMMAND if ms.command else 0)
            score = max(score, ms.z_accel, ms.z_command)
        out = SlipStep(flagged, left, right, detector, score,
                       gyro_bias_radps=bias if gyro_z_radps is not None else None)
        if ms is not None:
            out.accel_bias_mps2 = ms.bias_mps2
            if k.response_distance and ms.accel and math.isfinite(ms.ds_observer_m):
                out.ds_m = ms.ds_observer_m
        if k.response == "inflate" and flagged:
            out.noise_scale = k.inflate
        elif k.response == "gyro" and flagged:
            if avail:
                out.dtheta_rad = gi
            else:
                out.noise_scale = k.inflate
        return out
