"""Online self-calibration: the geometry a gyro observes, estimated recursively while the base drives.

Differential drive. With wheel angle increments phi_l, phi_r (rad) over a step, the true heading
change is (R_r phi_r - R_l phi_l) / B (Siegwart et al. 2011, sec. 3.2.1), and a gyro reads it plus
its bias: sum(w_z dt) = p_r phi_r - p_l phi_l + bias * T + noise, with p_r = R_r / B, p_l = R_l / B.
The model is linear in theta = (p_r, p_l, bias), so the estimator is weighted recursive least
squares (Ljung & Soderstrom 1983, ch. 2) in information form with exponential forgetting by
distance: data driven d metres ago weighs exp(-d / horizon_m). Observable: the radius ratio
R_r / R_l = p_r / p_l and the track over the mean radius B / R = 2 / (p_r + p_l); the mean radius
itself (the scale) is not: every radius and the track scaled alike turn the same heading. The gyro
bias is estimated with them (standing still and straight runs inform it), so a biased gyro does
not move the geometry.

Samples are summed over intervals of ``online_calibration.interval_s`` (by stamp; one estimate per
interval), and consecutive intervals are merged into chunks until the wheels have travelled
``online_calibration.chunk_m`` (mean |travel| of the sides) or ``CHUNK_MAX_S`` have passed. Over a
chunk the wheels' random error is small against their travel, so least squares with noisy
regressors is less biased (its relative attenuation is about var(phi) / phi^2 = k / d for the
per-wheel model over a chunk of d metres, Fuller 1987, sec. 1.1), and the rest is corrected to first
order by subtracting the wheel angles' noise variance from the information (Fuller 1987, sec. 2.2),
as far as the corrected information plus half the prior stays positive definite (a smaller share of
it otherwise, which only happens when the noise settings overstate the wheels' noise).
A chunk is skipped when it, the one before or the one after holds a sample with a slip flag (the
flag lags the slip's onset by the detector's window and debounce), and when its residual against
the current estimate fails a chi-square gate (``online_calibration.gate``, with
``slip.gyro_rate_tolerance_radps`` times the chunk's length added to its standard deviation for
timing between gyro and wheels); samples without a gyro reading are left out. The weight of a chunk
is the inverse of its residual variance: gyro white noise (``slip.gyro_noise_radps`` per reading,
times dt) plus the wheels' (the per-wheel model's ``noise.k_left``/``k_right``).

Standard errors are those of the exponentially weighted estimate (the sandwich
M^-1 (B + L0) M^-1, with M the forgotten information plus the prior's L0 and B the information
forgotten at twice the rate), so they hold for forgetting too. The prior is the configured
geometry with ``online_calibration.prior_pct`` standard deviation and the gyro bias
``slip.gyro_bias_radps`` with ``online_calibration.prior_bias_radps``; it is not forgotten, so a
drive that never turns keeps the estimate at the configured value with the prior's standard error.

Alert, per quantity (ratio, track over radius): sets when the estimate departs from the configured
value by more than ``alert_pct`` and by more than 4 standard errors, while the standard error is
small enough to see a change of ``alert_pct`` (2 se below it; else "too little excitation" is
reported and nothing alerts); it holds until the departure falls below ``clear_fraction`` of
``alert_pct`` (hysteresis). Suggested values keep the configured mean radius.

Two forms, tested equal sample by sample: ``online_calibration(travel, gyro, flags, settings)`` over
a run (numpy sums, a loop over intervals only) and ``OnlineCalibrator.step`` per sample (pure Python
floats; the interval update runs once per interval). Both give their intervals to the same
``_Filter``. The geometry alert is advisory, not a safety function (``wheel_dr.safety``).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .settings import Settings
from .slip import MAX_GYRO_RADPS
from .wheels import Travel

__all__ = ["OnlineCalibrationResult", "OnlineCalibrator", "ScaleEstimator", "supported", "unsupported_reason", "SCALE_WINDOW_M", "SCALE_MIN_WINDOWS",
           "REFERENCE_SD_M", "online_calibration", "suggested_geometry",
           "EXCITATION_SE", "ALERT_SE", "STATUS_OK", "STATUS_ALERT", "STATUS_LOW_EXCITATION", "GEOMETRY_FIELDS",
           "GEOMETRY_LABEL"]

CHUNK_MAX_S = 5.0       # intervals are merged for at most this long (standing still, creeping)
SCALE_WINDOW_M = 1.0    # reference windows: the odometry has moved at least this far between their poses
SCALE_MIN_WINDOWS = 5   # windows before the scale enters the suggested geometry
SCALE_LIMITS = (0.8, 1.25)   # a window whose distance ratio is outside these is a relocalisation jump: skipped
REFERENCE_SD_M = 0.02   # position standard deviation of a reference pose without covariance (PoseStamped)
ALERT_SE = 4.0          # an alert needs a departure of more than this many standard errors
EXCITATION_SE = 2.0     # a quantity is excited when this many standard errors are below alert_pct
STATUS_OK, STATUS_ALERT, STATUS_LOW_EXCITATION = "ok", "alert", "too little excitation"

# Layout of the node's ~/geometry message (std_msgs/Float64MultiArray ``data``), see GEOMETRY_LABEL.
GEOMETRY_FIELDS: tuple[str, ...] = (
    "stamp_s", "radius_ratio", "radius_ratio_se", "track_over_radius", "track_over_radius_se",
    "gyro_bias_radps", "gyro_bias_se_radps", "alert", "alert_ratio", "alert_track", "excited_ratio",
    "excited_track", "configured_radius_ratio", "configured_track_over_radius", "suggested_left_radius_m",
    "suggested_right_radius_m", "suggested_track_width_m", "intervals_used", "intervals_skipped", "scale",
    "scale_se", "scale_windows", "alert_scale")
GEOMETRY_LABEL = "wheel_dr_geometry:" + ",".join(GEOMETRY_FIELDS)


def unsupported_reason(settings: Settings) -> str | None:
    """Why online calibration cannot run with these settings (None: it can). Differential and
    skid-steer drive run here (``OnlineCalibrator``); a wheel table (``drive.kind`` other than
    'differential') runs in ``online_table`` (``TableOnlineCalibrator``). Without a gyro nothing runs:
    the callers say so (a run or node without IMU readings)."""
    return None


def supported(settings: Settings) -> bool:
    """True when ``online_calibration.enabled`` and the drive kind is covered (``unsupported_reason``);
    for a wheel table the estimator is ``online_table.TableOnlineCalibrator``, not ``OnlineCalibrator``."""
    return settings.online_calibration.enabled and unsupported_reason(settings) is None


def suggested_geometry(radius_ratio: float, track_over_radius: float, left_radius_m: float,
                       right_radius_m: float) -> tuple[float, float, float]:
    """(left radius, right radius, track) with the given ratio and track over mean radius, keeping the
    configured mean radius (the gyro cannot see the scale)."""
    mean = 0.5 * (left_radius_m + right_radius_m)
    left = 2.0 * mean / (1.0 + radius_ratio)
    return left, radius_ratio * left, track_over_radius * mean


class _Constants:
    def __init__(self, settings: Settings) -> None:
        o = settings.online_calibration
        w, n, s = settings.wheels, settings.noise, settings.slip
        self.enabled = o.enabled
        self.interval_ns = max(1, int(round(o.interval_s * 1e9)))
        self.inv_horizon = 1.0 / o.horizon_m
        self.alert = o.alert_pct * 0.01
        self.clear = o.clear_fraction * self.alert
        self.gate = o.gate
        self.chunk_m = o.chunk_m
        self.rl, self.rr, self.b = w.left_radius, w.right_radius, w.track_width
        self.kl, self.kr = n.k_left, n.k_right
        self.b2 = w.track_width * w.track_width
        self.gyro_var = s.gyro_noise_radps * s.gyro_noise_radps
        self.tol2 = s.gyro_rate_tolerance_radps * s.gyro_rate_tolerance_radps
        self.ratio0 = w.right_radius / w.left_radius
        self.track0 = w.track_width / (0.5 * (w.left_radius + w.right_radius))
        self.prior = (w.right_radius / w.track_width, w.left_radius / w.track_width, s.gyro_bias_radps)
        rel = o.prior_pct * 0.01
        self.prior_info = (1.0 / (rel * self.prior[0]) ** 2, 1.0 / (rel * self.prior[1]) ** 2,
                           1.0 / (o.prior_bias_radps * o.prior_bias_radps))


class _Filter:
    """Information-form recursive least squares over intervals (pure Python floats); see the module text."""

    def __init__(self, k: _Constants) -> None:
        self.k = k
        self.a = [0.0] * 6        # forgotten information, entries 00 01 02 11 12 22
        self.bb = [0.0] * 6       # information forgotten at twice the rate (sandwich)
        self.v = [0.0, 0.0, 0.0]  # forgotten information vector
        self.e = [0.0, 0.0, 0.0, 0.0]  # wheel-angle noise in the information: right, left; and forgotten twice
        self.correction = 1.0     # share of the noise correction the last solve used
        self.pending: tuple | None = None
        self.chunk = [0.0] * 9    # intervals merged until chunk_m of travel or CHUNK_MAX_S
        self.flag_before = False
        self.used = 0
        self.skipped = 0
        self.on_ratio = self.on_track = False
        self.theta = k.prior
        self.cov = (1.0 / k.prior_info[0], 0.0, 0.0, 1.0 / k.prior_info[1], 0.0, 1.0 / k.prior_info[2])
        self._outputs()

    def set_constants(self, k: _Constants) -> None:
        """New configured geometry (a settings change): the data and estimate stay, the reference moves."""
        self.k = k
        self._outputs()

    def interval(self, pr: float, pl: float, t: float, g: float, t2: float, ar: float, al: float, dist: float,
                 flags: float) -> None:
        """One interval's sums: wheel angles (rad), time, gyro integral (rad), sum dt^2, |travel| per side (m),
        distance (m) and the count of slip-flagged samples; merged into a chunk, the chunk before the one
        just completed is used now (or skipped)."""
        c = self.chunk
        c = [c[0] + pr, c[1] + pl, c[2] + t, c[3] + g, c[4] + t2, c[5] + ar, c[6] + al, c[7] + dist, c[8] + flags]
        if c[7] < self.k.chunk_m and c[2] < CHUNK_MAX_S:
            self.chunk = c
            self._outputs()
            return
        self.chunk = [0.0] * 9
        pr, pl, t, g, t2, ar, al, dist, flags = c
        flagged = flags > 0.0
        prev, self.pending = self.pending, (pr, pl, t, g, t2, ar, al, dist, flagged)
        if prev is not None:
            skip = prev[8] or flagged or self.flag_before
            self.flag_before = prev[8]
            self._use(prev, skip)
        self._outputs()

    def _use(self, iv: tuple, skip: bool) -> None:
        pr, pl, t, g, t2, ar, al, dist, _ = iv
        k = self.k
        lam = math.exp(-dist * k.inv_horizon)
        lam2 = lam * lam
        a, bb, v = self.a, self.bb, self.v
        a0, a1, a2, a3, a4, a5 = a[0] * lam, a[1] * lam, a[2] * lam, a[3] * lam, a[4] * lam, a[5] * lam
        b0, b1, b2, b3, b4, b5 = bb[0] * lam2, bb[1] * lam2, bb[2] * lam2, bb[3] * lam2, bb[4] * lam2, bb[5] * lam2
        v0, v1, v2 = v[0] * lam, v[1] * lam, v[2] * lam
        e = self.e
        self.e = [e[0] * lam, e[1] * lam, e[2] * lam2, e[3] * lam2]
        if skip or t <= 0.0:
            self.a, self.bb, self.v = [a0, a1, a2, a3, a4, a5], [b0, b1, b2, b3, b4, b5], [v0, v1, v2]
            if t > 0.0:
                self.skipped += 1
            self._solve()
            return
        x0, x1 = pr, -pl
        var = k.gyro_var * t2 + (k.kr * ar + k.kl * al) / k.b2
        th = self.theta
        r = g - (th[0] * x0 - th[1] * pl + th[2] * t)
        c = self.cov
        s = var + k.tol2 * (t * t) + (x0 * (c[0] * x0 - c[1] * pl + c[2] * t) - pl * (c[1] * x0 - c[3] * pl + c[4] * t)
                   + t * (c[2] * x0 - c[4] * pl + c[5] * t))
        if r * r > k.gate * s:
            self.a, self.bb, self.v = [a0, a1, a2, a3, a4, a5], [b0, b1, b2, b3, b4, b5], [v0, v1, v2]
            self.skipped += 1
            self._solve()
            return
        w = 1.0 / var
        # x = (phi_r, -phi_l, T); theta = (p_r, p_l, bias) enters as p_r phi_r - p_l phi_l + bias T,
        # so the regressor of p_l is -phi_l: information entries with the sign folded in
        u0, u1, u2 = w * (x0 * x0), w * (-x0 * pl), w * (x0 * t)
        u3, u4, u5 = w * (pl * pl), w * (-pl * t), w * (t * t)
        self.a = [a0 + u0, a1 + u1, a2 + u2, a3 + u3, a4 + u4, a5 + u5]
        self.bb = [b0 + u0, b1 + u1, b2 + u2, b3 + u3, b4 + u4, b5 + u5]
        self.v = [v0 + w * x0 * g, v1 + w * (-pl) * g, v2 + w * t * g]
        er, el = w * k.kr * ar / (k.rr * k.rr), w * k.kl * al / (k.rl * k.rl)   # var(phi) of the chunk (noise.k_*)
        e = self.e
        self.e = [e[0] + er, e[1] + el, e[2] + er, e[3] + el]
        self.used += 1
        self._solve()

    def _solve(self) -> None:
        k = self.k
        a, bb, v, li, p0, e = self.a, self.bb, self.v, k.prior_info, k.prior, self.e
        m00, m01, m02, m11, m12, m22 = a[0] + li[0], a[1], a[2], a[3] + li[1], a[4], a[5] + li[2]
        # noisy wheel angles inflate the information by their variance (errors in variables): subtract it,
        # as far as the corrected information plus half the prior stays positive definite (on a drive that
        # has not turned, the corrected information is about zero in the direction of the track)
        h0, h1, h2 = 0.5 * li[0], 0.5 * li[1], 0.5 * li[2]
        c = 1.0
        while c > 0.0:
            q00, q11, q22 = a[0] - c * e[0] + h0, a[3] - c * e[1] + h1, a[5] + h2
            if q00 > 0.0 and q00 * q11 - m01 * m01 > 0.0 and (q00 * (q11 * q22 - m12 * m12) - m01 * (m01 * q22 - m12 * m02)
                                                             + m02 * (m01 * m12 - q11 * m02)) > 0.0:
                break
            c = 0.0 if c < 0.2 else 0.5 * c
        self.correction = c
        m00, m11 = m00 - c * e[0], m11 - c * e[1]
        n_e0, n_e1 = c * e[2], c * e[3]
        c00 = m11 * m22 - m12 * m12
        c01 = m02 * m12 - m01 * m22
        c02 = m01 * m12 - m02 * m11
        c11 = m00 * m22 - m02 * m02
        c12 = m01 * m02 - m00 * m12
        c22 = m00 * m11 - m01 * m01
        det = m00 * c00 + m01 * c01 + m02 * c02
        if not det > 0.0 or not math.isfinite(det):
            return                                 # keep the last estimate (information not positive)
        q = 1.0 / det
        i00, i01, i02, i11, i12, i22 = c00 * q, c01 * q, c02 * q, c11 * q, c12 * q, c22 * q
        r0, r1, r2 = v[0] + li[0] * p0[0], v[1] + li[1] * p0[1], v[2] + li[2] * p0[2]
        self.theta = (i00 * r0 + i01 * r1 + i02 * r2, i01 * r0 + i11 * r1 + i12 * r2,
                      i02 * r0 + i12 * r1 + i22 * r2)
        n00, n01, n02 = bb[0] + li[0] - n_e0, bb[1], bb[2]
        n11, n12, n22 = bb[3] + li[1] - n_e1, bb[4], bb[5] + li[2]
        # t = Minv N (rows), then C = t Minv (symmetric: six entries)
        t00 = i00 * n00 + i01 * n01 + i02 * n02
        t01 = i00 * n01 + i01 * n11 + i02 * n12
        t02 = i00 * n02 + i01 * n12 + i02 * n22
        t10 = i01 * n00 + i11 * n01 + i12 * n02
        t11 = i01 * n01 + i11 * n11 + i12 * n12
        t12 = i01 * n02 + i11 * n12 + i12 * n22
        t20 = i02 * n00 + i12 * n01 + i22 * n02
        t21 = i02 * n01 + i12 * n11 + i22 * n12
        t22 = i02 * n02 + i12 * n12 + i22 * n22
        self.cov = (t00 * i00 + t01 * i01 + t02 * i02, t00 * i01 + t01 * i11 + t02 * i12,
                    t00 * i02 + t01 * i12 + t02 * i22, t10 * i01 + t11 * i11 + t12 * i12,
                    t10 * i02 + t11 * i12 + t12 * i22, t20 * i02 + t21 * i12 + t22 * i22)

    def _outputs(self) -> None:
        k = self.k
        pr, pl, bias = self.theta
        c = self.cov
        ratio = pr / pl
        s = pr + pl
        track = 2.0 / s
        g0, g1 = 1.0 / pl, -pr / (pl * pl)
        var_ratio = g0 * g0 * c[0] + 2.0 * g0 * g1 * c[1] + g1 * g1 * c[3]
        h = -2.0 / (s * s)
        var_track = h * h * (c[0] + 2.0 * c[1] + c[3])
        self.ratio, self.track, self.bias = ratio, track, bias
        self.ratio_se = math.sqrt(var_ratio) if var_ratio > 0.0 else 0.0
        self.track_se = math.sqrt(var_track) if var_track > 0.0 else 0.0
        self.bias_se = math.sqrt(c[5]) if c[5] > 0.0 else 0.0
        dev_r = ratio / k.ratio0 - 1.0
        dev_t = track / k.track0 - 1.0
        se_r = self.ratio_se / k.ratio0
        se_t = self.track_se / k.track0
        self.dev_ratio, self.dev_track = dev_r, dev_t
        self.excited_ratio = EXCITATION_SE * se_r < k.alert
        self.excited_track = EXCITATION_SE * se_t < k.alert
        if self.on_ratio:
            self.on_ratio = not abs(dev_r) < k.clear
        elif self.excited_ratio and abs(dev_r) > k.alert and abs(dev_r) > ALERT_SE * se_r:
            self.on_ratio = True
        if self.on_track:
            self.on_track = not abs(dev_t) < k.clear
        elif self.excited_track and abs(dev_t) > k.alert and abs(dev_t) > ALERT_SE * se_t:
            self.on_track = True
        self.alert = self.on_ratio or self.on_track


def _status(on: bool, excited: bool) -> str:
    return STATUS_ALERT if on else (STATUS_OK if excited else STATUS_LOW_EXCITATION)


class ScaleEstimator:
    """The scale (true over configured mean radius) from a distance source: a pose of the robot's own
    localisation. Over windows in which the odometry has moved ``SCALE_WINDOW_M`` or more, the
    reference's displacement d_ref against the odometry's d_odom (both planar magnitudes, so the frames
    need not agree): d_ref = s d_odom + noise, weighted least squares with the same forgetting by
    distance and sandwich standard error as the gyro estimate. Noise: the two reference positions'
    variance plus the per-wheel model's distance variance (k_left + k_right) / 4 per metre."""

    def __init__(self, settings: Settings) -> None:
        o, n = settings.online_calibration, settings.noise
        self.inv_horizon = 1.0 / o.horizon_m
        self.k_dist = 0.25 * (n.k_left + n.k_right)
        self.alert = o.alert_pct * 0.01
        self.clear = o.clear_fraction * self.alert
        self.reset()

    def reset(self) -> None:
        """Forget the windows (the odometry pose was reset or the geometry changed)."""
        self._start: tuple[float, float, float, float, float] | None = None
        self._a = self._b = self._c = 0.0
        self.scale, self.se, self.windows, self.rejected = 1.0, math.inf, 0, 0
        self.on = False

    def restart_window(self) -> None:
        """The odometry pose jumped (reset, re-anchor): the open window is dropped, the estimate kept."""
        self._start = None

    def add(self, ref_x: float, ref_y: float, ref_var: float, odom_x: float, odom_y: float) -> bool:
        """One reference position (m) with its variance (m^2, per axis) and the odometry position at its
        stamp; True when it closed a window that entered the estimate."""
        if not all(math.isfinite(v) for v in (ref_x, ref_y, ref_var, odom_x, odom_y)):
            return False
        var_ref = ref_var if ref_var > 0.0 else REFERENCE_SD_M * REFERENCE_SD_M
        st = self._start
        if st is None:
            self._start = (ref_x, ref_y, odom_x, odom_y, var_ref)
            return False
        d_odom = math.hypot(odom_x - st[2], odom_y - st[3])
        if d_odom < SCALE_WINDOW_M:
            return False
        d_ref = math.hypot(ref_x - st[0], ref_y - st[1])
        self._start = (ref_x, ref_y, odom_x, odom_y, var_ref)
        ratio = d_ref / d_odom
        if not SCALE_LIMITS[0] < ratio < SCALE_LIMITS[1]:
            self.rejected += 1
            return False
        w = 1.0 / (var_ref + st[4] + self.k_dist * d_odom)
        lam = math.exp(-d_odom * self.inv_horizon)
        self._a = lam * self._a + w * d_odom * d_odom
        self._b = lam * lam * self._b + w * d_odom * d_odom
        self._c = lam * self._c + w * d_odom * d_ref
        self.scale = self._c / self._a
        self.se = math.sqrt(self._b) / self._a
        self.windows += 1
        dev = abs(self.scale - 1.0)
        if self.on:
            self.on = not dev < self.clear
        elif self.windows >= SCALE_MIN_WINDOWS and EXCITATION_SE * self.se < self.alert and dev > self.alert \
                and dev > ALERT_SE * self.se:
            self.on = True
        return True

    @property
    def ready(self) -> bool:
        return self.windows >= SCALE_MIN_WINDOWS


class OnlineCalibrator:
    """Streaming form (one accepted sample per ``step``; no numpy per step). Attributes after each
    interval: ``ratio``, ``ratio_se``, ``track`` (track over mean radius), ``track_se``, ``bias``,
    ``bias_se``, ``alert``, ``on_ratio``, ``on_track``, ``excited_ratio``, ``excited_track``."""

    def __init__(self, settings: Settings) -> None:
        self._k = _Constants(settings)
        self.filter = _Filter(self._k)
        # the scale from a distance source (the node's online_calibration.reference_topic), else None
        self.scale = ScaleEstimator(settings) if settings.online_calibration.reference_topic else None
        self._tot = [0.0] * 9
        self._last = [0.0] * 9
        self._next_ns: int | None = None
        self.stamp_ns: int | None = None     # stamp of the last interval's end
        self.intervals = 0

    def update_settings(self, settings: Settings) -> None:
        """New settings: the configured geometry (reference and wheel angles) changes, the data stay."""
        old = self._k
        self._k = _Constants(settings)
        self.filter.set_constants(self._k)
        if self.scale is not None and (old.rl, old.rr) != (self._k.rl, self._k.rr):
            if old.rl + old.rr != self._k.rl + self._k.rr:
                self.scale.reset()      # the configured mean radius moved: the scale starts again
            else:
                self.scale.restart_window()

    def step(self, stamp_ns: int, restart: bool, dt_s: float, ds_left_m: float, ds_right_m: float,
             gyro_z_radps: float | None, flagged: bool) -> bool:
        """One accepted sample; True when it closed an interval (the estimate was updated)."""
        k = self._k
        tot = self._tot
        dl, dr = ds_left_m, ds_right_m
        adl, adr = abs(dl), abs(dr)
        tot[7] += (adl + adr) * 0.5
        if flagged:
            tot[8] += 1.0
        if gyro_z_radps is not None and not restart:
            try:
                g = float(gyro_z_radps)
            except (TypeError, ValueError):
                g = math.nan
            if abs(g) <= MAX_GYRO_RADPS:             # False for NaN and inf too
                dt = dt_s
                tot[0] += dr / k.rr
                tot[1] += dl / k.rl
                tot[2] += dt
                tot[3] += g * dt
                tot[4] += dt * dt
                tot[5] += adr
                tot[6] += adl
        nxt = self._next_ns
        if nxt is None:
            self._next_ns = (stamp_ns // k.interval_ns + 1) * k.interval_ns
            return False
        if stamp_ns < nxt:
            return False
        self._next_ns = (stamp_ns // k.interval_ns + 1) * k.interval_ns
        last = self._last
        self.filter.interval(tot[0] - last[0], tot[1] - last[1], tot[2] - last[2], tot[3] - last[3],
                             tot[4] - last[4], tot[5] - last[5], tot[6] - last[6], tot[7] - last[7],
                             tot[8] - last[8])
        self._last = list(tot)
        self.stamp_ns = stamp_ns
        self.intervals += 1
        return True

    # -- read-outs ------------------------------------------------------------------------------
    def __getattr__(self, name: str):
        if name in _FILTER_OUTPUTS:
            return getattr(self.__dict__["filter"], name)
        raise AttributeError(name)

    @property
    def status_ratio(self) -> str:
        f = self.filter
        return _status(f.on_ratio, f.excited_ratio)

    @property
    def status_track(self) -> str:
        f = self.filter
        return _status(f.on_track, f.excited_track)

    @property
    def alert_any(self) -> bool:
        """The gyro's alert or, with a distance source, the scale's."""
        return self.filter.alert or (self.scale is not None and self.scale.on)

    def suggested(self) -> tuple[float, float, float]:
        """Suggested (left radius, right radius, track) in metres: the configured mean radius kept, or
        scaled by the distance source's scale once it has ``SCALE_MIN_WINDOWS`` windows."""
        k = self._k
        f = 1.0 if self.scale is None or not self.scale.ready else self.scale.scale
        return suggested_geometry(self.filter.ratio, self.filter.track, k.rl * f, k.rr * f)

    def values(self) -> list[float]:
        """The GEOMETRY_FIELDS values of the last interval (the node's ~/geometry message)."""
        f, k = self.filter, self._k
        left, right, track = self.suggested()
        stamp = 0.0 if self.stamp_ns is None else self.stamp_ns * 1e-9
        return [stamp, f.ratio, f.ratio_se, f.track, f.track_se, f.bias, f.bias_se, float(self.alert_any),
                float(f.on_ratio), float(f.on_track), float(f.excited_ratio), float(f.excited_track),
                k.ratio0, k.track0, left, right, track, float(f.used), float(f.skipped)] + (
                    [math.nan, math.nan, 0.0, 0.0] if self.scale is None else
                    [self.scale.scale, self.scale.se, float(self.scale.windows), float(self.scale.on)])


_FILTER_OUTPUTS = frozenset({"ratio", "ratio_se", "track", "track_se", "bias", "bias_se", "alert", "on_ratio",
                             "on_track", "excited_ratio", "excited_track", "dev_ratio", "dev_track", "used",
                             "skipped"})


@dataclass
class OnlineCalibrationResult:
    """Batch form's output, one entry per interval (``index`` is the accepted sample that closed it)."""

    index: np.ndarray
    stamp_ns: np.ndarray
    radius_ratio: np.ndarray
    radius_ratio_se: np.ndarray
    track_over_radius: np.ndarray
    track_over_radius_se: np.ndarray
    gyro_bias_radps: np.ndarray
    gyro_bias_se_radps: np.ndarray
    alert: np.ndarray
    alert_ratio: np.ndarray
    alert_track: np.ndarray
    excited_ratio: np.ndarray
    excited_track: np.ndarray
    configured_ratio: float
    configured_track_over_radius: float
    left_radius_m: float
    right_radius_m: float
    intervals_used: int = 0
    intervals_skipped: int = 0

    def __len__(self) -> int:
        return int(len(self.stamp_ns))

    @property
    def t_s(self) -> np.ndarray:
        return self.stamp_ns * 1e-9

    def suggested(self) -> tuple[float, float, float]:
        """Suggested (left radius, right radius, track) from the last estimate (configured mean radius kept)."""
        if not len(self):
            w = (self.left_radius_m, self.right_radius_m)
            return suggested_geometry(self.configured_ratio, self.configured_track_over_radius, *w)
        return suggested_geometry(float(self.radius_ratio[-1]), float(self.track_over_radius[-1]),
                                  self.left_radius_m, self.right_radius_m)


def online_calibration(travel: Travel, gyro_z_radps: np.ndarray | None, slip_flags: np.ndarray | None,
                       settings: Settings) -> OnlineCalibrationResult:
    """Batch form over a run: gyro z rate (rad/s) and slip flag per accepted sample (NaN / None: none)."""
    k = _Constants(settings)
    m = len(travel.stamp_ns)
    dl = np.asarray(travel.ds_left_m, dtype=np.float64)
    dr = np.asarray(travel.ds_right_m, dtype=np.float64)
    dt = np.asarray(travel.dt_s, dtype=np.float64)
    if gyro_z_radps is None:
        g = np.full(m, np.nan)
    else:
        g = np.asarray(gyro_z_radps, dtype=np.float64)
    ok = ~np.asarray(travel.restart, dtype=bool) & (np.abs(g) <= MAX_GYRO_RADPS)
    flags = np.zeros(m, dtype=bool) if slip_flags is None else np.asarray(slip_flags, dtype=bool)
    gz = np.where(ok, g, 0.0)
    dtz = np.where(ok, dt, 0.0)
    adl, adr = np.abs(dl), np.abs(dr)
    cols = [np.where(ok, dr / k.rr, 0.0), np.where(ok, dl / k.rl, 0.0), dtz, gz * dtz, dtz * dtz,
            np.where(ok, adr, 0.0), np.where(ok, adl, 0.0), (adl + adr) * 0.5, flags.astype(np.float64)]
    stamp = np.asarray(travel.stamp_ns, dtype=np.int64)
    bins = stamp // k.interval_ns
    ticks = np.flatnonzero(bins[1:] > bins[:-1]) + 1 if m > 1 else np.zeros(0, dtype=np.int64)
    totals = [np.cumsum(c)[ticks] for c in cols]
    prev = [np.concatenate(([0.0], t[:-1])) for t in totals]
    sums = [(t - p).tolist() for t, p in zip(totals, prev)]
    f = _Filter(k)
    n = len(ticks)
    rows: list[tuple] = []
    keep = rows.append
    interval = f.interval
    for j in range(n):
        interval(sums[0][j], sums[1][j], sums[2][j], sums[3][j], sums[4][j], sums[5][j], sums[6][j],
                 sums[7][j], sums[8][j])
        keep((f.ratio, f.ratio_se, f.track, f.track_se, f.bias, f.bias_se, f.alert, f.on_ratio, f.on_track,
              f.excited_ratio, f.excited_track))
    table = np.array(rows, dtype=np.float64).reshape(n, 11)
    out = table[:, :6]
    bits = table[:, 6:] != 0.0
    return OnlineCalibrationResult(ticks, stamp[ticks], out[:, 0], out[:, 1], out[:, 2], out[:, 3], out[:, 4],
                                   out[:, 5], bits[:, 0], bits[:, 1], bits[:, 2], bits[:, 3], bits[:, 4],
                                   k.ratio0, k.track0, k.rl, k.rr, f.used, f.skipped)
