"""Slip that no heading test can see: the accelerometer against the wheels, and the command against both.

Two detectors, batch (``detect_motion``) and streaming (``MotionMonitor.step``), tested equal:

* ``DETECTOR_ACCEL`` (8), accelerometer against wheels. A short-horizon speed observer: the
  observer's speed at sample k is the wheels' window-mean body speed at an *anchor* sample a plus
  the longitudinal acceleration integrated from a to k,
  ``v_obs(k) = u(a) + sum_{a < i <= k} alpha_i dt_i`` (a finite-memory complementary filter: the
  accelerometer carries the short term, the wheels the long term). While no slip is flagged the
  anchor is the last sample at least ``slip.accel_horizon_s`` old (the observer is pulled to the
  wheels with that horizon); while the flag is set the anchor stays where it was when the flag
  set (the observer coasts on the accelerometer); after the flag clears, anchors are taken only
  from samples whose speed window lies wholly after the flagged stretch. The test compares the
  window means of the wheel speed and of the observer speed (same windows, ``slip.window_s``):
  ``d = (u(k) - u(a)) - (Abar(k) - Abar(a))`` with ``A`` the running integral of alpha and
  ``Abar`` its window mean, and gates it with a chi-square test of one degree of freedom
  (Bar-Shalom, Li & Kirubarajan 2001, sec. 5.4; ``slip.accel_gate``):
  ``z = |d| / sqrt(gate * var)``,
  ``var = var_u(k) + var_u(a) + sigma_a^2 sum dt^2 + (tol_a D)^2 + (tol_s du)^2 + tol_v^2``,
  where var_u is the variance of a window-mean wheel speed from the core's noise model (C[0,0]
  of ``noise.increment_noise`` summed over the window, over its length squared), sigma_a
  ``imu.accel_noise_mps2`` (white noise of one reading: its integral is a random walk),
  D = t_k - t_a the integration time, tol_a ``slip.accel_bias_tolerance_mps2`` plus, for samples
  without orientation, g sin(``imu.max_slope_deg``) (a slope the standstill bias did not absorb),
  du = u(k) - u(a) with tol_s ``slip.accel_scale_tolerance`` and tol_v
  ``slip.accel_speed_tolerance_mps`` (timing, vibration; common practice).
  The flag latches like every detector (``slip.set_delay_s``, ``slip.clear_delay_s``,
  ``slip.clear_fraction``) and marks both sides: spinning or dragging both wheels alike, a base
  pushing against an obstacle or lifted with its wheels turning, all show here.
* ``DETECTOR_COMMAND`` (16), commanded against measured (needs ``cmd_vel`` and the accelerometer):
  over the same anchor, the change of the commanded speed dc, of the wheel speed du and of the
  observer dv. ``z_w = |du - dc| / sqrt(gate var_w)`` (wheels against command),
  ``z_i = |dv - dc| / sqrt(gate var_i)`` (IMU against command), each variance with
  ``slip.command_tolerance_mps`` added for the drive's tracking error. Its score is z_i where the
  wheels follow the command (z_w <= 1) -- wheels turning as commanded while the IMU sees no such
  motion: pushing against an obstacle, lifted -- and z_w where the IMU follows it (z_i <= 1) --
  the wheels not doing what the base does. Latched as the others.

Longitudinal acceleration alpha (base_link, m/s^2): the accelerometer's x reading (each reading
taken as the mean over the step ending at it, as an IMU's decimation filter delivers it), minus
gravity's share g * up_x where the IMU reports orientation (up_x = 2 (q_x q_z - q_w q_y), the x
component of the world's up axis in the base frame; ``imu.use_orientation``), minus the bias,
plus the lever-arm terms of an IMU at (l_x, l_y) in base_link (``imu.position_m``): the IMU point
sees a_x - w^2 l_x - w' l_y (rigid-body kinematics, common practice), so alpha adds w^2 l_x and
the observer adds l_y (w(k) - w(a)) (the integral of w' l_y). The yaw rate w is the bias-corrected
gyro where read, else the wheels'. The accelerometer bias is the mean x reading over the last
``slip.gyro_bias_samples`` standing-still samples (``slip.still_speed_mps``), as for the gyro;
``imu.accel_bias_mps2`` until ``BIAS_MIN_SAMPLES`` of them (a reading counts once the steps before, of and after it are still, so the readings that begin or
end a stop are not taken). Readings marked unknown
(``linear_acceleration_covariance[0] == -1``, passed as NaN) switch the detector off for every
window that contains one; a chain restart does too.

What no detector here can see: a slip that builds up more slowly than the horizon (the anchor
follows it), a base that has been held or lifted since before the horizon with nothing changing,
speed errors smaller than the gate's allowance, and, without orientation, slopes beyond
``imu.max_slope_deg``. Flags are advisory inputs to navigation, not a safety function: never use
them in place of a safety-rated stop; defer to local codes and the machine's safety assessment.
"""
from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass

import numpy as np

from .noise import motion_model_parts, motion_model_variances
from .settings import Settings

__all__ = [
    "MotionInputs",
    "MotionResult",
    "MotionStep",
    "MotionMonitor",
    "detect_motion",
    "up_x_from_quaternion",
    "body_speed_variance",
    "DETECTOR_ACCEL",
    "DETECTOR_COMMAND",
    "MAX_ACCEL_MPS2",
]

DETECTOR_ACCEL = 8       # wheels' speed disagrees with the accelerometer's speed observer
DETECTOR_COMMAND = 16    # wheels follow the command while the IMU does not, or the reverse
STANDARD_GRAVITY_MPS2 = 9.80665  # standard acceleration of gravity (3rd CGPM, 1901)
BIAS_MIN_SAMPLES = 10            # standing-still samples needed before the bias estimate is used
MAX_ACCEL_MPS2 = 160.0           # readings beyond this are not readings (MEMS full scale is up to 16 g)
_CHUNK = 512                     # first chunk of the batch search for the next latch change
_BLOCK = 8192                    # samples per block of the batch pass (cache-sized)


def up_x_from_quaternion(qx, qy, qz, qw):
    """x component of the world's up axis in the body frame, 2 (qx qz - qw qy), for unit quaternions
    (body to world, REP 103). Level: 0; nose up (uphill) by theta: sin(theta). Arrays or floats."""
    return 2.0 * (qx * qz - qw * qy)


@dataclass
class MotionInputs:
    """Per accepted sample (batch): accelerometer x (m/s^2, base frame axes, NaN where unknown), the
    up axis' x component from the IMU orientation (NaN where unknown; ``up_x_from_quaternion``) and
    the commanded forward speed (m/s, NaN where no fresh command). Any may be None."""

    accel_x_mps2: np.ndarray | None = None
    up_x: np.ndarray | None = None
    cmd_v_mps: np.ndarray | None = None


@dataclass
class MotionResult:
    """Per accepted sample: the two flags, their scores and the observer's distance per step."""

    accel: np.ndarray              # (M,) bool, accelerometer detector flag
    command: np.ndarray            # (M,) bool, command detector flag
    z_accel: np.ndarray            # (M,) score (1 = at the gate)
    z_command: np.ndarray          # (M,) score
    ds_observer_m: np.ndarray      # (M,) observer distance of the step (NaN where not evaluated)
    bias_mps2: np.ndarray          # (M,) accelerometer bias estimate in use


@dataclass
class MotionStep:
    """One sample's outcome (streaming); same meanings as ``MotionResult``."""

    accel: bool = False
    command: bool = False
    z_accel: float = 0.0
    z_command: float = 0.0
    ds_observer_m: float = math.nan
    bias_mps2: float = 0.0


class _K:
    """Settings turned into the numbers both forms use."""

    def __init__(self, settings: Settings) -> None:
        s, imu, w = settings.slip, settings.imu, settings.wheels
        self.enabled = s.enabled and s.accel_horizon_s > 0.0
        self.b = w.track_width
        self.window_ns = int(round(s.window_s * 1e9))
        self.horizon_ns = int(round(s.accel_horizon_s * 1e9))
        self.set_ns = int(round(s.set_delay_s * 1e9))
        self.clear_ns = int(round(s.clear_delay_s * 1e9))
        self.clear_fraction = s.clear_fraction
        self.gate = s.accel_gate
        self.qa = imu.accel_noise_mps2 * imu.accel_noise_mps2
        self.tol_a = s.accel_bias_tolerance_mps2
        self.tol_a_level = s.accel_bias_tolerance_mps2 + STANDARD_GRAVITY_MPS2 * math.sin(math.radians(imu.max_slope_deg))
        self.tol_v2 = s.accel_speed_tolerance_mps * s.accel_speed_tolerance_mps
        self.tol_s2 = s.accel_scale_tolerance * s.accel_scale_tolerance
        self.tol_c2 = s.command_tolerance_mps * s.command_tolerance_mps
        self.lx, self.ly = float(imu.position_m[0]), float(imu.position_m[1])
        self.use_orientation = imu.use_orientation
        self.bias_prior = imu.accel_bias_mps2
        self.bias_samples = s.gyro_bias_samples
        self.still = s.still_speed_mps
        n = settings.noise
        self.model, self.k_left, self.k_right, self.alphas = n.model, n.k_left, n.k_right, n.alphas
        self.scheme = settings.integration


def body_speed_variance(ds_left_m: np.ndarray, ds_right_m: np.ndarray, settings: Settings) -> np.ndarray:
    """Variance (m^2) of each step's body travel: C[0,0] of ``noise.increment_noise`` (per-wheel model
    (k_r |ds_r| + k_l |ds_l|) / 4, Siegwart et al. 2011 sec. 5.2.4; motion model var(trans),
    Thrun et al. 2005 sec. 5.4)."""
    return _c00(np.asarray(ds_left_m, dtype=np.float64), np.asarray(ds_right_m, dtype=np.float64), _K(settings))


def _c00(dl: np.ndarray, dr: np.ndarray, k: _K) -> np.ndarray:
    if k.model == "per_wheel":
        return 0.25 * (k.k_right * np.abs(dr) + k.k_left * np.abs(dl))
    ds = 0.5 * (dr + dl)
    dth = (dr - dl) / k.b
    rot1, trans, rot2 = motion_model_parts(ds, dth, k.scheme)
    return motion_model_variances(rot1, trans, rot2, k.alphas)[..., 1]


# ------------------------------------------------------------------------------------------------
# batch
# ------------------------------------------------------------------------------------------------
def _first_held(cond: np.ndarray, stamp: np.ndarray, delay_ns: int) -> int:
    """Index of the first sample where ``cond`` has held ``delay_ns`` since its run began, or -1."""
    m = len(cond)
    if m == 0 or not cond.any():
        return -1
    flips = np.empty(m + 1, dtype=bool)
    flips[0], flips[m] = cond[0], cond[-1]
    np.not_equal(cond[1:], cond[:-1], out=flips[1:m])
    edges = np.flatnonzero(flips)
    starts, ends = edges[0::2], edges[1::2]
    held = np.searchsorted(stamp, stamp[starts] + delay_ns, side="left") if delay_ns > 0 else starts
    ok = np.flatnonzero(held < ends)
    return int(held[ok[0]]) if len(ok) else -1


def _sorted_search(stamp: np.ndarray, target: np.ndarray) -> np.ndarray:
    """``np.searchsorted(stamp, target, side="right") - 1`` for sorted ``target``, in blocks whose
    answers lie in a short stretch of ``stamp`` (a cache-resident search; same result)."""
    m = len(target)
    out = np.empty(m, dtype=np.int64)
    for lo in range(0, m, _BLOCK):
        hi = min(m, lo + _BLOCK)
        tb = target[lo:hi]
        a = int(np.searchsorted(stamp, tb[0], side="right"))
        b = int(np.searchsorted(stamp, tb[-1], side="right"))
        out[lo:hi] = np.searchsorted(stamp[a:b], tb, side="right") + (a - 1)
    return out


def _search(cond_of, lo: int, m: int, stamp: np.ndarray, delay_ns: int) -> int:
    """First index >= ``lo`` where ``cond_of(lo, hi)`` (a boolean array over [lo, hi)) has held
    ``delay_ns`` since its run began (runs begin at ``lo`` or later), or -1; looks at growing chunks."""
    size = _CHUNK
    while lo < m:
        hi = min(m, lo + size)
        j = _first_held(cond_of(lo, hi), stamp[lo:hi], delay_ns)
        if j >= 0:
            return lo + j
        if hi == m:
            return -1
        size *= 4
    return -1


def detect_motion(stamp_ns: np.ndarray, restart: np.ndarray, dt_s: np.ndarray, ds_left_m: np.ndarray,
                  ds_right_m: np.ndarray, yaw_rate_radps: np.ndarray | None, inputs: MotionInputs,
                  settings: Settings) -> MotionResult | None:
    """Run both detectors over a run (one entry per accepted sample; ``dt_s`` 0 at restarts).

    ``yaw_rate_radps`` is the bias-corrected gyro rate (NaN where none) or None. Returns None when
    the detectors are off (no accelerometer, horizon 0, slip detection disabled).
    """
    k = _K(settings)
    acc = inputs.accel_x_mps2
    m = len(stamp_ns)
    if not k.enabled or acc is None or m == 0:
        return None
    stamp = np.asarray(stamp_ns, dtype=np.int64)
    restart = np.asarray(restart, dtype=bool)
    dt = np.where(restart, 0.0, np.asarray(dt_s, dtype=np.float64))
    dl = np.asarray(ds_left_m, dtype=np.float64)
    dr = np.asarray(ds_right_m, dtype=np.float64)
    f = np.asarray(acc, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        avail = np.abs(f) <= MAX_ACCEL_MPS2
    f = np.where(avail, f, 0.0)
    orient = np.zeros(m, dtype=bool)
    if k.use_orientation and inputs.up_x is not None:
        up = np.asarray(inputs.up_x, dtype=np.float64)
        with np.errstate(invalid="ignore"):
            orient = np.abs(up) <= 1.0
        f = np.where(orient, f - STANDARD_GRAVITY_MPS2 * np.where(orient, up, 0.0), f)
    # bias: mean of the last N standing-still readings (prior until BIAS_MIN_SAMPLES)
    # (reading i counts once steps i-1, i and i+1 are still: the readings of a start or a stop are not taken)
    still_step = ~restart & (np.abs(dl) <= k.still * dt) & (np.abs(dr) <= k.still * dt)
    still = avail & still_step
    still[1:] &= still_step[:-1]
    still[:-1] &= still_step[1:]
    still[-1] = False
    tot = np.zeros(int(still.sum()) + 1)
    np.cumsum(f[still], out=tot[1:])
    c = np.arange(1, len(tot))
    n_used = np.minimum(c, k.bias_samples)
    at_still = np.concatenate(((k.bias_prior,), (tot[c] - tot[c - n_used]) / n_used))
    at_still[1:BIAS_MIN_SAMPLES] = k.bias_prior
    counted = np.zeros(m, dtype=np.int64)
    np.cumsum(still[:-1], out=counted[1:])          # readings counted before sample k
    bias = at_still[counted]
    g = None if yaw_rate_radps is None else np.asarray(yaw_rate_radps, dtype=np.float64)
    idx = np.arange(m)
    # windows (t - window, t]: boundary sample bnd (-1 when none); anchors at the horizon
    bnd = _sorted_search(stamp, stamp - k.window_ns)
    horizon = _sorted_search(stamp, stamp - k.horizon_ns)
    cmd = None if inputs.cmd_v_mps is None else np.asarray(inputs.cmd_v_mps, dtype=np.float64)
    # per-sample arrays, filled block by block (a block reads earlier samples' values: bnd, anchors)
    a_obs, b_cum, s_cum, v_cum, q_cum = (np.empty(m) for _ in range(5))
    u, wd, var_u = np.empty(m), np.empty(m), np.empty(m)
    lim = np.empty(m, dtype=np.int64)
    tol_a = np.where(orient, k.tol_a, k.tol_a_level)
    z = np.empty(m)
    zc = None if cmd is None else np.empty(m)
    carry = [0.0, 0.0, 0.0, 0.0, 0.0]              # running sums of alpha dt, A dt, ds, var(ds), dt^2
    prev_a, last_r, last_m = None, -1, -1

    def cum(x: np.ndarray, i: int) -> np.ndarray:
        """Sequential running sum continuing carry[i] (the carry leads, so the additions are the
        streaming form's)."""
        out = np.cumsum(np.concatenate(((carry[i],), x)))[1:]
        carry[i] = float(out[-1])
        return out

    def scores(lo: int, hi: int, anchor: np.ndarray | int):
        """Accelerometer and command scores of samples [lo, hi) with ``anchor`` (array or one index)."""
        at = slice(lo, hi)
        if isinstance(anchor, np.ndarray):
            def get(x: np.ndarray) -> np.ndarray:
                return np.take(x, anchor, mode="clip")        # -1 reads sample 0; ``ok`` is False there
            ok = lim[at] <= get(bnd)
        else:
            a1 = min(max(anchor, 0), m - 1)

            def get(x: np.ndarray):
                return x[a1]
            ok = (lim[at] <= bnd[a1]) & (anchor >= 0) & (anchor < idx[at])
        d = wd[at] - get(wd)
        du = u[at] - get(u)
        ta = tol_a[at] * ((stamp[at] - get(stamp)) * 1e-9)
        var_acc = k.qa * (q_cum[at] - get(q_cum)) + ta * ta
        var_w = var_u[at] + get(var_u)
        var = var_w + var_acc + k.tol_s2 * (du * du) + k.tol_v2
        z = np.abs(d) / np.sqrt(var * k.gate)
        z[~ok] = 0.0
        if cmd is None:
            return z, None
        dc = cmd[at] - get(cmd)
        okc = ok & np.isfinite(dc)
        dv = du - d
        rw, ri = du - dc, dv - dc
        vw = var_w + k.tol_s2 * (du * du) + k.tol_v2 + k.tol_c2
        vi = var_acc + k.tol_s2 * (dv * dv) + k.tol_v2 + k.tol_c2
        zw = np.abs(rw) / np.sqrt(vw * k.gate)
        zi = np.abs(ri) / np.sqrt(vi * k.gate)
        zc = np.maximum(np.where(zw <= 1.0, zi, 0.0), np.where(zi <= 1.0, zw, 0.0))
        zc[~okc] = 0.0
        return z, zc

    for lo in range(0, m, _BLOCK):
        hi = min(m, lo + _BLOCK)
        sl = slice(lo, hi)
        dtb, dlb, drb = dt[sl], dl[sl], dr[sl]
        # yaw rate: gyro where read, else the wheels' step rate
        pos_dt = dtb > 0.0
        w = np.where(pos_dt, (drb - dlb) / k.b / np.where(pos_dt, dtb, 1.0), 0.0)
        if g is not None:
            gb = g[sl]
            w = np.where(np.isfinite(gb), gb, w)
        alpha = np.where(avail[sl], f[sl] - bias[sl] + k.lx * (w * w), 0.0)
        ao = cum(alpha * dtb, 0) + k.ly * w        # observer speed offset at each sample
        a_obs[sl] = ao
        ap = np.concatenate(((ao[0] if prev_a is None else prev_a,), ao[:-1]))
        prev_a = float(ao[-1])
        b_cum[sl] = cum(0.5 * (ap + ao) * dtb, 1)  # its time integral (trapezoid)
        s_cum[sl] = cum(0.5 * (dlb + drb), 2)
        v_cum[sl] = cum(_c00(dlb, drb, k), 3)
        q_cum[sl] = cum(dtb * dtb, 4)
        # a window pair (anchor a, sample k) is usable when no restart lies after a's boundary and
        # no missing reading at or after it: lim[k] <= bnd[a]
        ib = idx[sl]
        lr = np.maximum.accumulate(np.where(restart[sl], ib, last_r))
        lm = np.maximum.accumulate(np.where(avail[sl], last_m, ib))
        last_r, last_m = int(lr[-1]), int(lm[-1])
        lim[sl] = np.maximum(lr, lm + 1)
        bb = bnd[sl]
        bi = np.maximum(bb, 0)
        span = np.where(bb >= 0, (stamp[sl] - stamp[bi]) * 1e-9, 1.0)
        ub = (s_cum[sl] - s_cum[bi]) / span
        u[sl] = ub
        wd[sl] = ub - (b_cum[sl] - b_cum[bi]) / span   # wheel minus observer window mean
        var_u[sl] = (v_cum[sl] - v_cum[bi]) / (span * span)
        with np.errstate(invalid="ignore", divide="ignore"):
            zb, cb = scores(lo, hi, horizon[sl])
        z[sl] = zb
        if zc is not None:
            zc[sl] = cb

    with np.errstate(invalid="ignore", divide="ignore"):
        z_free, zc_free = z.copy(), (None if zc is None else zc.copy())
        anc = horizon.copy()
        flag = np.zeros(m, dtype=bool)
        pos, jmin = 0, -1
        while pos < m:
            # free: anchors at the horizon, but not before jmin (the first clean window after a flag)
            bind_end = min(m, max(pos, int(np.searchsorted(horizon, jmin, side="left")))) if jmin >= 0 else pos
            if bind_end > pos:
                zb, cb = scores(pos, bind_end, jmin)
                z[pos:bind_end] = zb
                if cmd is not None:
                    zc[pos:bind_end] = cb
                anc[pos:bind_end] = jmin
            i1 = _search(lambda lo, hi: z[lo:hi] > 1.0, pos, m, stamp, k.set_ns)
            if i1 < 0:
                break
            flag[i1] = True
            # frozen anchor from i1 + 1 until the latch clears
            af = int(anc[i1])
            reach = [i1 + 1]

            def frozen(lo: int, hi: int) -> np.ndarray:
                reach[0] = max(reach[0], hi)
                zf, cf = scores(lo, hi, af)
                z[lo:hi] = zf
                if cmd is not None:
                    zc[lo:hi] = cf
                return zf < k.clear_fraction

            i2 = _search(frozen, i1 + 1, m, stamp, k.clear_ns)
            if i2 < 0:
                flag[i1 + 1:] = True
                anc[i1 + 1:] = af
                break
            flag[i1 + 1:i2] = True
            anc[i1 + 1:i2 + 1] = af
            # the free regime resumes after i2 with anchors whose window lies wholly after i2
            back = slice(i2 + 1, reach[0])
            z[back] = z_free[back]
            if cmd is not None:
                zc[back] = zc_free[back]
            jmin = int(np.searchsorted(bnd, i2, side="left"))
            pos = i2 + 1
    # the observer's distance of flagged samples: (u(a) - Abar(a)) dt + the step's integral of A
    ds_obs = np.full(m, np.nan)
    fi = np.flatnonzero(flag)
    if len(fi):
        a = anc[fi]
        ok = (a >= 0) & (lim[fi] <= bnd[np.maximum(a, 0)]) & (a < fi)
        ds = wd[np.maximum(a, 0)] * dt[fi] + 0.5 * (a_obs[np.maximum(fi - 1, 0)] + a_obs[fi]) * dt[fi]
        ds_obs[fi] = np.where(ok, ds, np.nan)
    if zc is None:
        zc = np.zeros(m)
    return MotionResult(flag, np.zeros(m, dtype=bool), z, zc, ds_obs, bias)


# ------------------------------------------------------------------------------------------------
# streaming
# ------------------------------------------------------------------------------------------------
class _E:
    """One sample's running totals and window values."""

    __slots__ = ("stamp", "seq", "s", "b", "v", "q", "u", "wd", "var_u", "has_b", "bnd_seq", "cmd")


class MotionMonitor:
    """Streaming form of ``detect_motion`` (same rules and arithmetic; tested equal sample by sample)."""

    def __init__(self, settings: Settings) -> None:
        self._k = _K(settings)
        self.reset()

    def reset(self) -> None:
        """Forget all state (windows, anchors, latch, bias)."""
        self._seq = -1
        self._a_cum = self._b_cum = self._s_cum = self._v_cum = self._q_cum = 0.0
        self._a_prev: float | None = None
        self._last_restart = -1
        self._last_miss = -1
        self._win: deque[_E] = deque()
        self._bnd: _E | None = None
        self._hor: deque[_E] = deque()
        self._still_count = 0
        self._prev_still = self._prev2_still = self._prev_avail = False
        self._prev_f = 0.0
        self._still_totals: deque[float] = deque([0.0], maxlen=self._k.bias_samples + 1)
        self._flag = False
        self._frozen: _E | None = None
        self._wait_after = -2          # after a clear: anchors need bnd_seq >= this (-2: no constraint)
        self._jmin: _E | None = None
        self._set_since: int | None = None
        self._clear_since: int | None = None

    def _score(self, e: _E, a: _E | None, at_ok: bool, dt: float, a_obs: float, a_prev: float,
               tol_a: float) -> tuple[float, float, float]:
        k = self._k
        if a is None or not at_ok or a.seq >= e.seq or not a.has_b or self._last_restart > a.bnd_seq \
                or self._last_miss >= a.bnd_seq:
            return 0.0, math.nan, 0.0
        d = e.wd - a.wd
        du = e.u - a.u
        ta = tol_a * ((e.stamp - a.stamp) * 1e-9)
        var_acc = k.qa * (e.q - a.q) + ta * ta
        var_w = e.var_u + a.var_u
        var = var_w + var_acc + k.tol_s2 * (du * du) + k.tol_v2
        z = abs(d) / math.sqrt(var * k.gate)
        ds = a.wd * dt + 0.5 * (a_prev + a_obs) * dt
        zc = 0.0
        if e.cmd is not None and a.cmd is not None:
            dc = e.cmd - a.cmd
            if math.isfinite(dc):
                dv = du - d
                rw, ri = du - dc, dv - dc
                vw = var_w + k.tol_s2 * (du * du) + k.tol_v2 + k.tol_c2
                vi = var_acc + k.tol_s2 * (dv * dv) + k.tol_v2 + k.tol_c2
                zw = abs(rw) / math.sqrt(vw * k.gate)
                zi = abs(ri) / math.sqrt(vi * k.gate)
                zc = max(zi if zw <= 1.0 else 0.0, zw if zi <= 1.0 else 0.0)
        return z, ds, zc

    def step(self, stamp_ns: int, restart: bool, dt_s: float, ds_left_m: float, ds_right_m: float,
             yaw_rate_radps: float | None, accel_x_mps2: float | None, up_x: float | None = None,
             cmd_v_mps: float | None = None) -> MotionStep | None:
        """One accepted sample (``accel_x_mps2`` None or NaN: no reading); None when the detectors are off."""
        k = self._k
        if not k.enabled:
            return None
        self._seq += 1
        seq = self._seq
        dt = 0.0 if restart else float(dt_s)
        dl, dr = float(ds_left_m), float(ds_right_m)
        try:
            f = math.nan if accel_x_mps2 is None else float(accel_x_mps2)
        except (TypeError, ValueError):
            f = math.nan
        avail = abs(f) <= MAX_ACCEL_MPS2
        if not avail:
            f = 0.0
        orient = False
        if k.use_orientation and up_x is not None:
            try:
                up = float(up_x)
            except (TypeError, ValueError):
                up = math.nan
            orient = abs(up) <= 1.0
            if orient:
                f = f - STANDARD_GRAVITY_MPS2 * up
        still_step = not restart and abs(dl) <= k.still * dt and abs(dr) <= k.still * dt
        if still_step and self._prev_still and self._prev2_still and self._prev_avail:
            self._still_count += 1                     # the previous reading, between still steps
            self._still_totals.append(self._still_totals[-1] + self._prev_f)
        self._prev2_still, self._prev_still = self._prev_still, still_step
        count = self._still_count
        if count >= BIAS_MIN_SAMPLES:
            n_used = min(count, k.bias_samples)
            bias = (self._still_totals[-1] - self._still_totals[-1 - n_used]) / n_used
        else:
            bias = k.bias_prior
        self._prev_f, self._prev_avail = f, avail
        w = (dr - dl) / k.b / dt if dt > 0.0 else 0.0
        if yaw_rate_radps is not None and math.isfinite(yaw_rate_radps):
            w = float(yaw_rate_radps)
        alpha = f - bias + k.lx * (w * w) if avail else 0.0
        self._a_cum += alpha * dt
        a_obs = self._a_cum + k.ly * w
        a_prev = a_obs if self._a_prev is None else self._a_prev
        self._a_prev = a_obs
        self._b_cum += 0.5 * (a_prev + a_obs) * dt
        self._s_cum += 0.5 * (dl + dr)
        self._v_cum += float(_c00(np.array([dl]), np.array([dr]), k)[0]) if k.model != "per_wheel" else \
            0.25 * (k.k_right * abs(dr) + k.k_left * abs(dl))
        self._q_cum += dt * dt
        if restart:
            self._last_restart = seq
        if not avail:
            self._last_miss = seq

        e = _E()
        e.stamp, e.seq = int(stamp_ns), seq
        e.s, e.b, e.v, e.q = self._s_cum, self._b_cum, self._v_cum, self._q_cum
        e.cmd = None
        if cmd_v_mps is not None:
            try:
                e.cmd = float(cmd_v_mps)
            except (TypeError, ValueError):
                e.cmd = None
        win = self._win
        win.append(e)
        cutoff = e.stamp - k.window_ns
        while win[0].stamp <= cutoff:
            self._bnd = win.popleft()
        bnd = self._bnd
        if bnd is None:
            e.has_b, e.bnd_seq, e.u, e.wd, e.var_u = False, -1, 0.0, 0.0, 0.0
        else:
            span = (e.stamp - bnd.stamp) * 1e-9
            e.has_b, e.bnd_seq = True, bnd.seq
            e.u = (e.s - bnd.s) / span
            e.wd = e.u - (e.b - bnd.b) / span
            e.var_u = (e.v - bnd.v) / (span * span)
        hor = self._hor
        hor.append(e)
        h_cut = e.stamp - k.horizon_ns
        while len(hor) >= 2 and hor[1].stamp <= h_cut:
            hor.popleft()
        h = hor[0] if hor[0].stamp <= h_cut else None
        if self._wait_after >= -1 and self._jmin is None and e.bnd_seq >= self._wait_after:
            self._jmin = e
        tol_a = k.tol_a if orient else k.tol_a_level

        if self._flag:
            anchor = self._frozen
        elif self._wait_after >= -1:
            jm = self._jmin
            if jm is None:
                anchor = None
            elif h is None or h.seq < jm.seq:
                anchor = jm
            else:
                anchor = h
        else:
            anchor = h
        z, ds, zc = self._score(e, anchor, True, dt, a_obs, a_prev, tol_a)

        # latch (debounce and hysteresis as every detector)
        if z > 1.0:
            if self._set_since is None:
                self._set_since = e.stamp
        else:
            self._set_since = None
        if z < k.clear_fraction:
            if self._clear_since is None:
                self._clear_since = e.stamp
        else:
            self._clear_since = None
        if not self._flag:
            if self._set_since is not None and e.stamp - self._set_since >= k.set_ns:
                self._flag = True
                self._frozen = anchor
        elif self._clear_since is not None and e.stamp - self._clear_since >= k.clear_ns:
            self._flag = False
            self._frozen = None
            self._wait_after = seq
            self._jmin = None
        out = MotionStep(self._flag, False, z, zc, ds if self._flag else math.nan, bias)
        return out
