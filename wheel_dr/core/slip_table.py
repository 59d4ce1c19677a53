"""Slip and wheel-fault detection for wheel-table bases (tricycle, car-like, mecanum, omni, swerve, custom).

Interface used by the estimator (the two forms are tested equal, sample by sample):

* ``detect_slip_table(model, travel, body, body_cov, gyro_z_radps, settings) -> SlipResult`` over a
  whole run, vectorised (``travel.joint_travel_m`` (M, E) spin travel per encoder wheel in table
  order, ``travel.steer_rad`` (M, T) steering readings, ``body`` (M, 3) increments, ``body_cov``
  (M, 3, 3) their covariances, gyro per accepted sample, NaN where none, or None; an optional
  ``resid`` (M, E) saves recomputing ``model.residual``);
* ``TableSlipMonitor(model, settings).step(status, stamp_ns, dt_s, spin, steer, body, body_cov6,
  resid, gyro_z_radps) -> SlipStep`` one accepted sample at a time (``resid`` is
  ``model.residual(spin, steer)`` of the step, ``body_cov6`` the upper triangle
  (xx, xy, xt, yy, yt, tt) of its covariance).

The windows, the chain-restart rule, the scores (1 at the threshold), the debounce/hysteresis latch
and the traction latch are those of ``wheel_dr.core.slip`` (imported from there, same settings).
Detectors (bits of ``detector``):

* ``DETECTOR_GYRO`` (1), gyro against wheels: the model's heading change over the window,
  sum dtheta, against the gyro's, sum (w_z - bias) dt, gated by a chi-square test with one degree
  of freedom (Bar-Shalom, Li & Kirubarajan 2001, sec. 5.4; ``slip.gyro_gate``):
  ``z = |d| / sqrt(gate * var)`` with ``var = sum C[2,2] + sigma_g^2 T^2 / n + (tol_w T)^2
  + (tol_s dtheta_wheels)^2``, C[2,2] the heading variance of the model's increment covariance,
  the rest as for the differential base (including the long window and the standstill gyro
  bias, where all encoder wheels are below ``slip.still_speed_mps``). The gyro alone cannot say
  which wheel is wrong: while its flag is set and the residual's is not, every encoder wheel is
  flagged (with the residual's set, the residual names the wheels).
* ``DETECTOR_TRACTION`` (2), per encoder wheel: the wheel measures the ground speed of its contact
  point along one direction (its rolling direction, or across its rollers, scaled by
  sin(roller)); the change of that velocity (as a vector, so a steering flip by pi with the spin
  reversed is no spike) between the window-mean at the sample and at its window's boundary,
  over the distance of the windows' centres, beyond ``slip.traction_mu`` g cannot come from
  rolling contact (common practice). Signed along the wheel's current direction (positive:
  spinning up), latched per wheel by ``slip.traction_latch``; a spike on a wheel another
  detector already flags starts nothing. The differential base's gyro veto of one-sided traction
  flags is not applied: one wheel spinning need not turn a table base's heading.
* ``DETECTOR_RESIDUAL`` (32), where the encoders outnumber the motion's degrees of freedom
  (dof = 3 minus the table's sliding-constraint rank; 1 for the steered kinds): the whitened
  least-squares residuals r of ``WheelTable.residual`` are, per step, N(0, I - P) with P the
  projection onto the fitted directions, so each step's |r|^2 is chi-square with E - dof degrees
  of freedom (Bar-Shalom, Li & Kirubarajan 2001, sec. 5.4; the least-squares residual test).
  Over the window the per-wheel sums S = sum r have covariance sum (I - P_k), whose trace is
  n (E - dof) (the trace of a projection is its rank); the statistic |S|^2 / n is chi-square with
  E - dof degrees of freedom where P does not change within the window (where it does, the mean
  is the same and the upper tail, in the tests, no heavier; the weights are taken at the measured
  travel, which adds to both once the step's noise is a sizeable part of the step). The gate is
  the chi-square quantile with E - dof degrees of freedom at the tail probability of
  ``slip.gyro_gate`` (6.63: 1 %), ``z = sqrt(stat / gate)``.
  With E - dof >= 2 the flagged wheel is the one with the largest |S_i| (judged while the score
  is over 1, kept while under). With E - dof = 1 (mecanum, four omni wheels, a car-like base with
  two rear encoders) there is one parity equation: every single-wheel fault moves the residual
  along the same direction, so the residual alone detects but cannot isolate. Where the gyro is
  read it is a second redundant measurement: a fault on wheel i that explains the residual would
  change the heading by sqrt(w_i) (C R_i^T)[theta] |r|^2 / r_i per step (C the increment's
  covariance, R_i the wheel's rolling row, w_i its weight), and the wheels flagged are those whose
  window sum of that agrees with the gyro's heading difference within the gyro test's gate (all,
  if none does or without a gyro). Steering noise is not in the residual's variance (a steering
  offset error shows as a residual). Tables with E <= dof have no residual test;
  ``residual_statistic`` gives the statistic itself (for checks and the report).

``left`` / ``right``: a flagged wheel with y > 0 / y < 0 (a wheel at y = 0 counts for both).
Responses (``slip.response``) as for the differential base: ``inflate`` scales the step noise of
flagged samples, ``gyro`` takes the gyro's heading increment on flagged samples with a reading
(``dtheta_rad``; the model's elsewhere) and inflates flagged samples without one.

Slip flags are advisory, not a safety function (the caution in ``wheel_dr.safety``).
"""
from __future__ import annotations

import math
from collections import deque
from typing import Sequence

import numpy as np

from .drive.table import WheelTable
from .settings import Settings
from .drive.table import _ROBUST_FRACTION as _ROBUST
from .slip import (BIAS_MIN_SAMPLES, DETECTOR_GYRO, DETECTOR_RESIDUAL, DETECTOR_TRACTION, LONG_SHORT_SCORE,
                   MAX_GYRO_RADPS, SlipResult, SlipStep, _Constants, _cum, _Latch, _TractionLatch, latch,
                   traction_latch)
from .wheels import SampleStatus, Travel

__all__ = ["detect_slip_table", "TableSlipMonitor", "residual_dof", "residual_gate", "residual_statistic"]


def residual_dof(model: WheelTable) -> int:
    """Degrees of freedom of the residual test: encoder wheels minus the motion's dof (<= 0: no test)."""
    return int(model.spin.sum()) - (3 - int(model._constraint_rank))


def residual_gate(model: WheelTable, settings: Settings) -> float:
    """Chi-square gate of the residual test: the quantile with ``residual_dof`` degrees of freedom at
    the tail probability that ``slip.gyro_gate`` has with one (inf when there is no test)."""
    dof = residual_dof(model)
    if dof <= 0:
        return math.inf
    from scipy import stats               # here, not at import: the node's start-up stays lean

    tail = float(stats.chi2.sf(settings.slip.gyro_gate, 1))
    return float(stats.chi2.isf(tail, dof))


class _TableConstants:
    """The model and settings turned into the numbers both forms use (computed once)."""

    def __init__(self, model: WheelTable, settings: Settings) -> None:
        self.k = _Constants(settings)
        enc = np.asarray(model.spin, dtype=bool)
        self.e = int(enc.sum())
        self.t = int(np.asarray(model.steered).sum())
        self.rdof = residual_dof(model)
        self.gate_r = residual_gate(model, settings)
        self.y = [float(v) for v in model.y[enc]]
        self.left = [v >= 0.0 for v in self.y]
        self.right = [v <= 0.0 for v in self.y]
        ang0 = (model.mount + np.where(model.standard, 0.0, model.roller - 0.5 * math.pi))[enc]
        self.ang0 = [float(v) for v in ang0]
        self.scale = [float(v) for v in np.where(model.standard, 1.0, np.sin(model.roller))[enc]]
        self.cos0 = [float(v) for v in np.cos(ang0)]
        self.sin0 = [float(v) for v in np.sin(ang0)]
        col = np.cumsum(model.steered) - 1
        self.steer_col = [int(col[i]) if model.steered[i] else -1 for i in np.flatnonzero(enc)]
        self.offset = [float(model.offset[i]) for i in np.flatnonzero(enc)]
        self.x = [float(v) for v in model.x[enc]]
        self.kw = [float(v) for v in model.k[enc]]


def _finite(x: np.ndarray) -> np.ndarray:
    return np.where(np.isfinite(x), x, 0.0)


def _no_slip(m: int, e: int) -> SlipResult:
    no = np.zeros(m, dtype=bool)
    return SlipResult(no, no.copy(), no.copy(), np.zeros(m, dtype=np.int64), np.zeros(m),
                      wheel_flags=np.zeros((m, e), dtype=bool))


# ------------------------------------------------------------------------------------------------
# batch
# ------------------------------------------------------------------------------------------------
def _window_residual(resid: np.ndarray, restart: np.ndarray, j: np.ndarray, n_win: np.ndarray):
    """|S|^2 / n of the window sums S of the whitened residuals, and the wheel of the largest |S_i|."""
    m = len(restart)
    resid = np.where(restart[:, None], 0.0, _finite(np.asarray(resid, dtype=np.float64).reshape(m, -1)))
    e = resid.shape[1]
    cums = [_cum(resid[:, i]) for i in range(e)]
    sums = [cr[1:] - cr[j] for cr in cums]
    stat = sums[0] * sums[0]
    for i in range(1, e):
        stat = stat + sums[i] * sums[i]
    return stat / n_win, np.argmax(np.abs(np.column_stack(sums)), axis=1)


def residual_statistic(model: WheelTable, travel: Travel, settings: Settings) -> tuple[np.ndarray, np.ndarray]:
    """The residual test's statistic |S|^2 / n per accepted sample (NaN where its window is not
    evaluated or the table has no residual test) and the wheel it names (index in table order
    of the encoder wheels). Chi-square with ``residual_dof(model)`` degrees of freedom on clean data."""
    k = _Constants(settings)
    m = len(travel.dt_s)
    stamp = np.asarray(travel.stamp_ns, dtype=np.int64)
    restart = np.asarray(travel.restart, dtype=bool)
    if residual_dof(model) <= 0 or m == 0:
        return np.full(m, np.nan), np.zeros(m, dtype=np.int64)
    e = int(model.spin.sum())
    spin = np.where(restart[:, None], 0.0, _finite(np.asarray(travel.joint_travel_m, dtype=np.float64).reshape(m, e)))
    steer = None
    if model.steered.any():
        steer = _finite(np.asarray(travel.steer_rad, dtype=np.float64).reshape(m, -1))
    j = np.searchsorted(stamp, stamp - k.window_ns, side="right")
    idx = np.arange(m)
    clean = (j >= 1) & (np.maximum.accumulate(np.where(restart, idx, -1)) < j)
    stat, named = _window_residual(model.residual(spin, steer), restart, j, (idx - j + 1).astype(np.float64))
    return np.where(clean, stat, np.nan), named


def detect_slip_table(model: WheelTable, travel: Travel, body: np.ndarray, body_cov: np.ndarray,
                      gyro_z_radps: np.ndarray | None, settings: Settings,
                      resid: np.ndarray | None = None) -> SlipResult:
    """Run the wheel-table slip detectors over a whole run (one entry per accepted sample).

    ``resid`` (M, E): ``model.residual(travel.joint_travel_m, travel.steer_rad)`` if the caller
    has it already (else it is computed here). See the module docstring for the detectors, their
    thresholds and the responses.
    """
    c = _TableConstants(model, settings)
    k = c.k
    e = c.e
    m = len(travel.dt_s)
    if not k.enabled or m == 0:
        return _no_slip(m, e)
    stamp = np.asarray(travel.stamp_ns, dtype=np.int64)
    restart = np.asarray(travel.restart, dtype=bool)
    dt = np.where(restart, 0.0, np.asarray(travel.dt_s, dtype=np.float64))
    spin = np.where(restart[:, None], 0.0, _finite(np.asarray(travel.joint_travel_m, dtype=np.float64).reshape(m, e)))
    steer = None
    if c.t:
        if travel.steer_rad is None:
            raise ValueError(f"a {model.kind} table has steered wheels: Travel.steer_rad must hold their "
                             "readings (one column per steered wheel).")
        steer = _finite(np.asarray(travel.steer_rad, dtype=np.float64).reshape(m, c.t))
    body = np.asarray(body, dtype=np.float64).reshape(m, 3)
    dth = np.where(restart, 0.0, _finite(body[:, 2]))
    var_th = np.where(restart, 0.0, _finite(np.asarray(body_cov, dtype=np.float64).reshape(m, 3, 3)[:, 2, 2]))

    # gyro and its bias (mean over the last N samples with every encoder wheel standing still)
    has_gyro = gyro_z_radps is not None
    if has_gyro:
        g = np.asarray(gyro_z_radps, dtype=np.float64)
        with np.errstate(invalid="ignore"):
            avail = np.abs(g) <= MAX_GYRO_RADPS
        g = np.where(avail, g, 0.0)
        still = avail & ~restart & np.all(np.abs(spin) <= (k.still * dt)[:, None], axis=1)
        still_total = _cum(g[still])
        cnt = np.arange(1, len(still_total))
        n_used = np.minimum(cnt, k.bias_samples)
        at_still = np.concatenate(((k.bias_prior,), (still_total[cnt] - still_total[cnt - n_used]) / n_used))
        at_still[1:BIAS_MIN_SAMPLES] = k.bias_prior
        bias = at_still[np.cumsum(still)]
        gi = np.where(avail, (g - bias) * dt, 0.0)
    else:
        avail = np.zeros(m, dtype=bool)
        gi = np.zeros(m)

    # windows (stamp in (t - window, t]), boundary sample j - 1; clean: no restart inside
    j = np.searchsorted(stamp, stamp - k.window_ns, side="right")
    bnd = np.maximum(j - 1, 0)
    has_b = j >= 1
    idx = np.arange(m)
    last_restart = np.maximum.accumulate(np.where(restart, idx, -1))
    clean = has_b & (last_restart < j)
    n_win = (idx - j + 1).astype(np.float64)
    t_eff = (stamp - stamp[bnd]) * 1e-9
    sf = np.where(clean, t_eff, 1.0)
    rows = slice(1, m + 1)

    # traction per wheel: velocity of the contact point along the wheel's measuring direction
    za = np.zeros((m, e))
    ok_a = clean & has_b & clean[bnd]
    gap = 0.5 * (sf + sf[bnd])
    dirs = []
    for i in range(e):
        sc = spin[:, i] * c.scale[i]
        if c.steer_col[i] >= 0:
            a = c.ang0[i] + (steer[:, c.steer_col[i]] - c.offset[i])
            ca, sa = np.cos(a), np.sin(a)
        else:
            ca, sa = c.cos0[i], c.sin0[i]
        dirs.append((ca, sa))
        cu, cw = _cum(sc * ca), _cum(sc * sa)
        vu, vw = (cu[rows] - cu[j]) / sf, (cw[rows] - cw[j]) / sf
        du, dw = vu - vu[bnd], vw - vw[bnd]
        mag = np.sqrt(du * du + dw * dw) / gap / k.mu_g
        za[:, i] = np.where(ok_a, np.where(du * ca + dw * sa >= 0.0, mag, -mag), 0.0)

    # residual test
    if c.rdof > 0:
        if resid is None:
            resid = model.residual(spin, steer)
        resid = np.where(restart[:, None], 0.0, _finite(np.asarray(resid, dtype=np.float64).reshape(m, e)))
        stat, raw = _window_residual(resid, restart, j, n_win)
        zr = np.where(clean, np.sqrt(stat / c.gate_r), 0.0)
        li = np.maximum.accumulate(np.where(zr > 1.0, idx, -1))
        named = np.where(li >= 0, raw[np.maximum(li, 0)], raw)
    else:
        zr = np.zeros(m)
        named = np.zeros(m, dtype=np.int64)

    # gyro against the model's heading (window, long window)
    zg = np.zeros(m)
    if has_gyro:
        last_miss = np.maximum.accumulate(np.where(avail, -1, idx))
        g_ok = clean & (last_miss < j)
        cum_gi, cum_v, cum_d = _cum(gi), _cum(var_th), _cum(dth)

        def gyro_test(at1, jw, t_w, n, ok):
            dth_w = cum_d[at1] - cum_d[jw]
            d_w = dth_w - (cum_gi[at1] - cum_gi[jw])
            var = (cum_v[at1] - cum_v[jw]) + (t_w * t_w) * (k.gyro_var / n + k.rate_tol2) \
                + k.scale_tol2 * (dth_w * dth_w)
            with np.errstate(divide="ignore", invalid="ignore"):
                z = np.where(ok, np.abs(d_w) / np.sqrt(var * k.gate), 0.0)
            return z, d_w, var

        zg, d, var_g = gyro_test(rows, j, t_eff, n_win, g_ok)
        if k.long_ns > 0:
            sub = np.flatnonzero(g_ok & (zg >= LONG_SHORT_SCORE))
            jl = np.searchsorted(stamp, stamp[sub] - k.long_ns, side="right")
            ok_l = (jl >= 1) & (last_restart[sub] < jl) & (last_miss[sub] < jl)
            t_l = (stamp[sub] - stamp[np.maximum(jl - 1, 0)]) * 1e-9
            zl, dl_w, _ = gyro_test(sub + 1, jl, t_l, (sub - jl + 1).astype(np.float64), ok_l)
            zg[sub] = np.maximum(zg[sub], np.where((d[sub] > 0.0) == (dl_w > 0.0), zl, 0.0))

    # which wheels the residual flags: the one named (E - dof >= 2); with one parity equation the
    # wheels whose fault would also explain the gyro's heading difference, or all without a gyro
    if c.rdof >= 2:
        res_set = np.column_stack([named == i for i in range(e)])
    else:
        res_set = np.ones((m, e), dtype=bool)
    if c.rdof == 1 and has_gyro:
        cov3 = np.asarray(body_cov, dtype=np.float64).reshape(m, 3, 3)
        xt, yt, tt = (np.where(restart, 0.0, _finite(cov3[:, a, 2])) for a in range(3))
        r2 = resid[:, 0] * resid[:, 0]
        mean_abs = np.abs(spin[:, 0])
        for i in range(1, e):
            r2 = r2 + resid[:, i] * resid[:, i]
            mean_abs = mean_abs + np.abs(spin[:, i])
        floor = np.maximum(_ROBUST * (mean_abs / e), 1e-12)
        cons = np.empty((m, e), dtype=bool)
        for i in range(e):
            ca, sa = dirs[i]
            crow = xt * ca + yt * sa + tt * (sa * c.x[i] - ca * c.y[i])
            sw = 1.0 / (abs(c.scale[i]) * np.sqrt(c.kw[i] * np.maximum(np.abs(spin[:, i]), floor) + 1e-30))
            ri = resid[:, i]
            with np.errstate(divide="ignore", invalid="ignore"):
                sig = np.where(ri != 0.0, crow * sw * r2 / ri, 0.0)
            cd = _cum(np.where(avail, _finite(sig), 0.0))   # only windows with every gyro reading use it
            with np.errstate(divide="ignore", invalid="ignore"):
                cons[:, i] = np.abs(d - (cd[rows] - cd[j])) / np.sqrt(var_g * k.gate) <= 1.0
        cons = np.where(cons.any(axis=1)[:, None], cons, True)
        li = np.maximum.accumulate(np.where((zr > 1.0) & g_ok, idx, -1))
        res_set = np.where((li >= 0)[:, None], cons[np.maximum(li, 0)], True)

    # latches
    def lat(z: np.ndarray) -> np.ndarray:
        return latch(z, stamp, k.set_ns, k.clear_ns, k.clear_fraction)

    no = np.zeros(m, dtype=bool)
    on_g = lat(zg) if has_gyro else no
    on_r = lat(zr) if c.rdof > 0 else no
    flags = np.zeros((m, e), dtype=bool)
    on_t = np.zeros(m, dtype=bool)
    gyro_all = on_g & ~on_r           # with the residual flag set, it names the wheels
    for i in range(e):
        res_i = on_r & res_set[:, i]
        tr = traction_latch(za[:, i], stamp, k.hold_ns, k.clear_fraction, on_g | res_i)
        on_t |= tr
        flags[:, i] = gyro_all | res_i | tr
    left = np.zeros(m, dtype=bool)
    right = np.zeros(m, dtype=bool)
    for i in range(e):
        if c.left[i]:
            left |= flags[:, i]
        if c.right[i]:
            right |= flags[:, i]
    flagged = flags.any(axis=1)
    detector = (on_g * DETECTOR_GYRO + on_t * DETECTOR_TRACTION + on_r * DETECTOR_RESIDUAL).astype(np.int64)
    score = np.maximum(np.maximum(zg, zr), np.abs(za).max(axis=1) if e else 0.0)
    result = SlipResult(flagged, left, right, detector, score, gyro_bias_radps=bias if has_gyro else None,
                        wheel_flags=flags)
    if k.response == "inflate":
        result.noise_scale = np.where(flagged, k.inflate, 1.0)
    elif k.response == "gyro":
        sub = flagged & avail
        result.dtheta_rad = np.where(sub, gi, body[:, 2])
        result.noise_scale = np.where(flagged & ~avail, k.inflate, 1.0)
    return result


# ------------------------------------------------------------------------------------------------
# streaming
# ------------------------------------------------------------------------------------------------
# A sample in the window is a tuple (stamp, totals, cu, cw, cr, cd, clean, vu, vw, span): its stamp,
# the running totals after it (gyro increment, heading variance, heading change, restarts, missing
# gyro readings), the per-wheel running totals (traction u and w, residual, heading share; lists
# never changed once stored) and what a later sample needs of it as a boundary (its window's
# cleanness, window-mean velocities and span).
_USED = SampleStatus.USED
_isfinite = math.isfinite


def _num(v) -> float:
    try:
        x = float(v)
    except (TypeError, ValueError, OverflowError):
        return 0.0
    return x if math.isfinite(x) else 0.0


def _nums(values, n: int) -> list[float]:
    """``n`` finite floats (non-numbers, NaN and inf as 0); the fast path checks the sum only."""
    try:
        out = [float(v) for v in values]
        if len(out) == n and math.isfinite(math.fsum(out)):
            return out
    except (TypeError, ValueError, OverflowError):
        pass
    out = [_num(v) for v in values][:n]
    return out + [0.0] * (n - len(out))


def _floats(values, n: int):
    """``values`` itself where it holds ``n`` floats with a finite sum (so each is finite: what the
    estimator hands over), else ``_nums(values, n)``."""
    try:
        if len(values) == n and type(total := sum(values)) is float and _isfinite(total):
            return values
    except (TypeError, ValueError, OverflowError):
        pass
    return _nums(values, n)


class TableSlipMonitor:
    """Streaming form of ``detect_slip_table`` (same rules; tested equal sample by sample)."""

    def __init__(self, model: WheelTable, settings: Settings) -> None:
        self.model = model
        self.settings = settings
        self._c = _TableConstants(model, settings)
        c = self._c
        e = c.e
        self._wheels = list(range(e))
        # per-wheel constants of the hot loops (the same numbers, gathered once)
        self._steer_w = tuple((i, c.steer_col[i], c.ang0[i], c.offset[i]) for i in range(e) if c.steer_col[i] >= 0)
        self._all_steered = len(self._steer_w) == e and [w[0] for w in self._steer_w] == self._wheels
        # (x, y, k, |scale|, sa x - ca y of a fixed wheel (its rolling direction is constant) or None)
        self._share_w = tuple((x, y, kw, abs(sc), (sa * x - ca * y) if c.steer_col[i] < 0 else None)
                              for i, (x, y, kw, sc, ca, sa) in enumerate(zip(c.x, c.y, c.kw, c.scale, c.cos0, c.sin0)))
        self._zeros = [0.0] * e
        self._zeros_t = [0.0] * c.t
        self._sides = tuple(zip(c.left, c.right))
        self.reset()

    def reset(self) -> None:
        """Forget detector state (windows, latches, gyro bias)."""
        c = self._c
        k = c.k
        e = c.e
        self._entries: deque[tuple] = deque()
        self._boundary: tuple | None = None
        self._lentries: deque[tuple] = deque()
        self._lboundary: tuple | None = None
        self._tu, self._tw, self._tr, self._td = [0.0] * e, [0.0] * e, [0.0] * e, [0.0] * e
        self._cons: list[bool] | None = None
        self._t_gi = self._t_var = self._t_dth = 0.0
        self._t_restart = self._t_miss = 0
        self._still_count = 0
        self._still_totals: deque[float] = deque([0.0], maxlen=k.bias_samples + 1)
        self._named: int | None = None
        self._lat_g, self._lat_r = _Latch(k), _Latch(k)
        self._lat_t = [_TractionLatch(k) for _ in range(e)]

    def _gyro_test(self, stamp: int, b_stamp: int, now: tuple, b_tot: tuple, n: int) -> tuple[float, float]:
        k = self._c.k
        t_w = (stamp - b_stamp) * 1e-9
        dth_w = now[2] - b_tot[2]
        d_w = dth_w - (now[0] - b_tot[0])
        var = (now[1] - b_tot[1]) + (t_w * t_w) * (k.gyro_var / float(n) + k.rate_tol2) \
            + k.scale_tol2 * (dth_w * dth_w)
        return abs(d_w) / math.sqrt(var * k.gate), d_w, var

    def step(self, status: SampleStatus, stamp_ns: int, dt_s: float, spin: Sequence[float],
             steer: Sequence[float] | None, body: Sequence[float], body_cov6: Sequence[float],
             resid: Sequence[float] | None, gyro_z_radps: float | None) -> SlipStep:
        """One accepted sample (``status`` < 10); returns its flags and the response's changes.

        ``spin`` (E) travel per encoder wheel (m), ``steer`` (T) steering readings (rad, None
        without steering), ``body`` (dx, dy, dtheta), ``body_cov6`` (xx, xy, xt, yy, yt, tt) of its
        covariance, ``resid`` (E) ``model.residual(spin, steer)`` of the step (None: not given),
        ``gyro_z_radps`` the z rate held at the sample or None.
        """
        c = self._c
        k = c.k
        e = c.e
        if not k.enabled:
            return SlipStep(wheel_flags=(False,) * e)
        stamp = int(stamp_ns)
        restart = status != _USED
        if restart:
            dt = dth = var_th = 0.0
            s = self._zeros
        else:
            dt = float(dt_s)
            s = _floats(spin, e)
            v = body[2]
            dth = v if (type(v) is float and v - v == 0.0) else _num(v)
            v = body_cov6[5]
            var_th = v if (type(v) is float and v - v == 0.0) else _num(v)
        t = c.t
        st = _floats(steer, t) if (t and steer is not None) else self._zeros_t

        # gyro and bias
        g = gyro_z_radps
        if type(g) is not float:
            try:
                g = float(g) if g is not None else math.nan
            except (TypeError, ValueError, OverflowError):
                g = math.nan
        avail = abs(g) <= MAX_GYRO_RADPS                     # False for NaN and inf too
        if not avail:
            g = 0.0
        if avail and not restart:
            lim = k.still * dt
            still = True
            for v in s:
                if abs(v) > lim:
                    still = False
                    break
            if still:
                self._still_count += 1
                self._still_totals.append(self._still_totals[-1] + g)
        count = self._still_count
        if count >= BIAS_MIN_SAMPLES:
            n_used = min(count, k.bias_samples)
            bias = (self._still_totals[-1] - self._still_totals[-1 - n_used]) / n_used
        else:
            bias = k.bias_prior
        gi = (g - bias) * dt if avail else 0.0

        # steering directions of the encoder wheels
        if not self._steer_w:
            cas, sas = c.cos0, c.sin0
        elif self._all_steered:
            ang = [a0 + (st[col] - off) for _, col, a0, off in self._steer_w]
            cas, sas = list(map(math.cos, ang)), list(map(math.sin, ang))
        else:
            cas, sas = list(c.cos0), list(c.sin0)
            for i, col, a0, off in self._steer_w:
                a = a0 + (st[col] - off)
                cas[i], sas[i] = math.cos(a), math.sin(a)
        self._t_gi += gi
        self._t_var += var_th
        self._t_dth += dth
        if restart:
            self._t_restart += 1
        if not avail:
            self._t_miss += 1
        now = (self._t_gi, self._t_var, self._t_dth, self._t_restart, self._t_miss)

        # the window (stamp in (t - window, t]) and its boundary sample
        entries = self._entries
        cutoff = stamp - k.window_ns
        bnd = self._boundary
        while entries and entries[0][0] <= cutoff:      # (the new sample, at the end, always stays)
            bnd = entries.popleft()
        self._boundary = bnd
        n = len(entries) + 1
        zeros = self._zeros
        if bnd is None:
            clean = False
            b_stamp, b_tot = stamp, (0.0, 0.0, 0.0, 0, 0)
            b_u = b_w = b_r = zeros
        else:
            b_stamp, b_tot, b_u, b_w, b_r = bnd[0], bnd[1], bnd[2], bnd[3], bnd[4]
            clean = now[3] - b_tot[3] == 0

        # per wheel, in one pass: running totals (new lists each step: the window's entries keep the
        # old ones), window-mean velocities and traction, residual window sums
        rdof = c.rdof
        r = zeros if (rdof <= 0 or restart or resid is None) else _floats(resid, e)
        tu, tw, tr = [], [], []
        stat = 0.0
        best = -1.0
        named = 0
        za = zeros
        vu = vw = None
        safe = 1.0
        i = 0
        if clean:
            safe = (stamp - b_stamp) * 1e-9
            vu, vw = [], []
            trac = bnd[6]                               # the boundary's window is clean too
            if trac:
                za = []
                den = 0.5 * (safe + bnd[9])
                mu_g = k.mu_g
                sqrt = math.sqrt
                b_vu, b_vw = bnd[7], bnd[8]
            else:
                b_vu = b_vw = zeros
            for v, sc, ca, sa, a_u, a_w, a_r, ri, p_u, p_w, p_r, bu, bw in zip(
                    s, c.scale, cas, sas, self._tu, self._tw, self._tr, r, b_u, b_w, b_r, b_vu, b_vw):
                sc = v * sc
                a_u = a_u + sc * ca
                a_w = a_w + sc * sa
                tu.append(a_u)
                tw.append(a_w)
                a_u = (a_u - p_u) / safe
                a_w = (a_w - p_w) / safe
                vu.append(a_u)
                vw.append(a_w)
                if trac:
                    du, dw = a_u - bu, a_w - bw
                    mag = sqrt(du * du + dw * dw) / den / mu_g
                    za.append(mag if du * ca + dw * sa >= 0.0 else -mag)
                a_r = a_r + ri
                tr.append(a_r)
                si = a_r - p_r
                stat += si * si
                if abs(si) > best:
                    best, named = abs(si), i
                i += 1
        else:
            for v, sc, ca, sa, a_u, a_w, a_r, ri, p_r in zip(
                    s, c.scale, cas, sas, self._tu, self._tw, self._tr, r, b_r):
                sc = v * sc
                tu.append(a_u + sc * ca)
                tw.append(a_w + sc * sa)
                a_r = a_r + ri
                tr.append(a_r)
                si = a_r - p_r
                stat += si * si
                if abs(si) > best:
                    best, named = abs(si), i
                i += 1
        self._tu, self._tw, self._tr = tu, tw, tr
        td = self._td
        if rdof == 1 and avail:
            # heading change a fault on wheel i would explain (its parity share, through the
            # increment's covariance row): sqrt(w_i) (C R_i^T)[theta] |r|^2 / r_i
            if restart:
                xt = yt = tt = 0.0
            else:
                v = body_cov6[2]
                xt = v if (type(v) is float and v - v == 0.0) else _num(v)
                v = body_cov6[4]
                yt = v if (type(v) is float and v - v == 0.0) else _num(v)
                tt = var_th
            r2 = mean_abs = 0.0
            for ri, v in zip(r, s):
                r2 += ri * ri
                mean_abs += abs(v)
            floor = _ROBUST * (mean_abs / e)
            if 1e-12 > floor:
                floor = 1e-12
            td = list(td)
            sqrt = math.sqrt
            for i, ri, v, ca, sa, (x, y, kw, asc, arm) in zip(self._wheels, r, s, cas, sas, self._share_w):
                if ri != 0.0:
                    crow = xt * ca + yt * sa + tt * ((sa * x - ca * y) if arm is None else arm)
                    v = abs(v)
                    sw = 1.0 / (asc * sqrt(kw * (v if v >= floor else floor) + 1e-30))
                    sig = crow * sw * r2 / ri
                    if _isfinite(sig):
                        td[i] = td[i] + sig      # (adding nothing leaves the total as the batch's)
            self._td = td

        entry = (stamp, now, tu, tw, tr, td, clean, vu, vw, safe)
        entries.append(entry)
        if k.long_ns > 0:
            lentries = self._lentries
            lentries.append(entry)
            cutoff_l = stamp - k.long_ns
            while lentries[0][0] <= cutoff_l:
                self._lboundary = lentries.popleft()
        # residual
        zr = 0.0
        if rdof > 0:
            if clean:
                zr = math.sqrt(stat / float(n) / c.gate_r)
            if zr > 1.0:
                self._named = named
            elif self._named is not None:
                named = self._named
        else:
            named = 0

        # gyro against the model's heading
        zg = 0.0
        if clean and now[4] - b_tot[4] == 0:
            zg, d, var_g = self._gyro_test(stamp, b_stamp, now, b_tot, n)
            lb = self._lboundary
            if k.long_ns > 0 and lb is not None and zg >= LONG_SHORT_SCORE and now[3] - lb[1][3] == 0 \
                    and now[4] - lb[1][4] == 0:
                zl, dl_w, _ = self._gyro_test(stamp, lb[0], now, lb[1], len(self._lentries))
                if (d > 0.0) == (dl_w > 0.0):
                    zg = max(zg, zl)
            if rdof == 1 and zr > 1.0:
                lim = math.sqrt(var_g * k.gate)
                cons = [abs(d - (a - b)) / lim <= 1.0 for a, b in zip(td, bnd[5])]
                self._cons = cons if any(cons) else [True] * e

        on_g = self._lat_g.update(zg, stamp)
        on_r = self._lat_r.update(zr, stamp) if rdof > 0 else False
        gyro_all = on_g and not on_r          # with the residual flag set, it names the wheels
        cons = self._cons if (on_r and rdof == 1) else None
        every = on_r and rdof == 1 and cons is None
        named_on = on_r and rdof >= 2
        flags = []
        on_t = False
        left = right = False
        score = zg if zg > zr else zr
        if not (on_g or on_r):                # the usual sample: only traction can flag a wheel
            for lat, z, (is_l, is_r) in zip(self._lat_t, za, self._sides):
                if lat.update(z, stamp, False):
                    on_t = True
                    flags.append(True)
                    left = left or is_l
                    right = right or is_r
                else:
                    flags.append(False)
                if abs(z) > score:
                    score = abs(z)
        else:
            i = 0
            for lat, z, (is_l, is_r) in zip(self._lat_t, za, self._sides):
                res_i = every or (on_r and (cons[i] if cons is not None else (named_on and named == i)))
                tr_i = lat.update(z, stamp, on_g or res_i)
                if abs(z) > score:
                    score = abs(z)
                if gyro_all or res_i or tr_i:
                    on_t = on_t or tr_i
                    flags.append(True)
                    left = left or is_l
                    right = right or is_r
                else:
                    flags.append(False)
                i += 1
        flagged = left or right
        detector = ((DETECTOR_GYRO if on_g else 0) | (DETECTOR_TRACTION if on_t else 0)
                    | (DETECTOR_RESIDUAL if on_r else 0))
        out = SlipStep(flagged, left, right, detector, score,
                       gyro_bias_radps=bias if gyro_z_radps is not None else None, wheel_flags=tuple(flags))
        if flagged:
            response = k.response
            if response == "inflate":
                out.noise_scale = k.inflate
            elif response == "gyro":
                if avail:
                    out.dtheta_rad = gi
                else:
                    out.noise_scale = k.inflate
        return out
