"""Online self-calibration for wheel-table drives (tricycle, car-like, mecanum, omni, swerve, custom): batch form.

The same idea as ``online_calibration`` for differential drive, on the table's own model: the gyro's
heading change over an interval against the table's, linearised in the geometry. With spin travel s
(configured radii) and steering readings, the table gives the heading increment dtheta(g) for its
geometry g (``WheelTable.increment``); the gyro reads dtheta(g_true) + bias dt + noise, so

    sum(w_z dt) - dtheta(g0) = J (g - g0) + bias T + noise,    J = d dtheta / d g at the configured g0,

a linear model in the geometry change and the bias (Gauss-Newton's first step, Bjorck 1996,
sec. 9.2). The geometry parameters are each encoder wheel's radius (relative change: its spin travel
scaled), every wheel's position x, y (over the base's size L) and each steered wheel's steering
offset (rad); the derivatives by forward differences of the table's own solution (positions and
offsets in a copy of the table as kind 'custom', so a perturbed axle need not stay straight).

Samples are summed over intervals of ``online_calibration.interval_s`` (spin travel, steering
readings, time, gyro heading; samples without a gyro reading or at a chain restart are left out) and
the table is linearised once per interval, at its summed travel and mean steering; intervals with a
slip flag, and their neighbours, are left out; each is weighted by its residual variance (gyro white noise
plus the table's heading-increment variance, ``WheelTable.increment_covariance``). The bias is
eliminated (Schur complement) and the geometry information is split by its eigenvectors: a
direction whose standard error is below ``OBSERVABLE_SE`` is a combination the gyro observes, the
rest are not (for every kind, scaling all radii and positions together turns the same heading: the
scale needs a distance source). Each observable combination is reported with its estimate and
standard error, and alerts like the differential drive's (beyond ``alert_pct`` and 4 standard
errors). No forgetting: the estimate is over the whole run. ``TableOnlineCalibrator`` is the streaming form (the node,
one interval's numpy work when it closes), ``online_table_series`` the course over a run (replay's
geometry_online_table.csv). Advisory, not a safety function (``wheel_dr.safety``).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .drive.table import WheelTable
from .slip import MAX_GYRO_RADPS

__all__ = ["TableCombination", "TableOnlineResult", "TableOnlineSeries", "TableOnlineCalibrator", "table_parameters",
           "heading_jacobian", "online_table", "online_table_series",
           "OBSERVABLE_SE"]

OBSERVABLE_SE = 0.01        # a combination with a standard error below 1 % (relative units) is observed
_FD_M = 1e-5                # forward-difference step for positions (m) and steering offsets (rad)
_FD_R = 1e-5                # forward-difference step for a radius (relative)
_SHOWN = 0.05               # components below this are left out of a combination's text


@dataclass
class TableCombination:
    """One direction of the geometry (unit vector over ``TableOnlineResult.names``, relative units)."""

    vector: np.ndarray
    estimate: float
    se: float
    alert: bool
    text: str


@dataclass
class TableOnlineResult:
    names: tuple[str, ...]
    observed: list[TableCombination]
    unobserved: list[TableCombination]
    gyro_bias_radps: float
    gyro_bias_se_radps: float
    intervals_used: int
    alert: bool = False
    delta: np.ndarray = field(default_factory=lambda: np.zeros(0))   # minimum-norm change in the observed span

    def suggested(self, table: WheelTable) -> dict[str, tuple[float, ...]]:
        """The table's geometry moved by ``delta`` (observed combinations only), as drive.* parameters."""
        r, x, y, off = table.radius.copy(), table.x.copy(), table.y.copy(), table.offset.copy()
        size = _size(table)
        for (kind, i), d in zip(_params(table), self.delta):
            if kind == "radius":
                r[i] *= 1.0 + d
            elif kind == "x":
                x[i] += d * size
            elif kind == "y":
                y[i] += d * size
            else:
                off[i] += d
        return {"drive.wheel_radius": tuple(r), "drive.wheel_x": tuple(x), "drive.wheel_y": tuple(y),
                "drive.steer_offset": tuple(off)}


def _size(table: WheelTable) -> float:
    return float(max(np.max(np.abs(table.x)), np.max(np.abs(table.y)), 1e-3))


def _label(table: WheelTable, i: int) -> str:
    return table.wheel_joints[i] or table.steer_joints[i] or f"wheel {i}"


def _params(table: WheelTable) -> list[tuple[str, int]]:
    out = [("radius", i) for i in range(len(table.x)) if table.spin[i]]
    out += [("x", i) for i in range(len(table.x))] + [("y", i) for i in range(len(table.x))]
    out += [("offset", i) for i in range(len(table.x)) if table.steered[i]]
    return out


def table_parameters(table: WheelTable) -> tuple[str, ...]:
    """Names of the geometry parameters, in the order of the Jacobian's columns (relative units:
    radius as a fraction, x and y over the base's size, steering offset in rad)."""
    unit = {"radius": "radius", "x": "x/L", "y": "y/L", "offset": "steer_offset"}
    return tuple(f"{unit[k]}[{_label(table, i)}]" for k, i in _params(table))


def _copy(table: WheelTable, x=None, y=None, offset=None) -> WheelTable:
    return WheelTable("custom", table.wheel_joints, table.x if x is None else x, table.y if y is None else y,
                      table.radius, steer_joints=table.steer_joints, mount_angle=table.mount,
                      roller_angle=table.roller, steer_offset=table.offset if offset is None else offset,
                      k_wheels=table.k, steer_sd_rad=table.steer_sd_rad)


def _perturbed(table: WheelTable) -> list:
    """[the table's unperturbed copy as kind 'custom'] + per parameter: None for a radius, else the
    copy with that position (m) or steering offset (rad) moved up by ``_FD_M``, and the step in
    relative units (forward differences against the unperturbed copy)."""
    size = _size(table)
    out: list = [_copy(table)]
    for kind, i in _params(table):
        if kind == "radius":
            out.append(None)
            continue
        up = {"x": table.x, "y": table.y, "offset": table.offset}[kind].copy()
        up[i] += _FD_M
        out.append((_copy(table, **{kind: up}), _FD_M / (size if kind in ("x", "y") else 1.0)))
    return out


def heading_jacobian(table: WheelTable, spin_m: np.ndarray, steer_rad: np.ndarray | None,
                     perturbed: list | None = None) -> tuple[np.ndarray, np.ndarray]:
    """(dtheta0 (M,), J (M, P)): the table's heading increments and their derivatives in the parameters
    by forward differences: a radius scales its wheel's spin travel by 1 + ``_FD_R``; a position or
    steering offset moves by ``_FD_M`` in a 'custom' copy (``perturbed``: from ``_perturbed``, built
    once by a streaming caller)."""
    spin = np.asarray(spin_m, dtype=np.float64).reshape(-1, int(table.spin.sum()))
    dth0 = table.increment(spin, steer_rad)[:, 2]
    pert = perturbed if perturbed is not None else _perturbed(table)
    base = pert[0].increment(spin, steer_rad)[:, 2]
    cols = []
    enc = list(np.flatnonzero(table.spin))
    for (kind, i), pt in zip(_params(table), pert[1:]):
        if pt is None:
            scaled = spin.copy()
            scaled[:, enc.index(i)] *= 1.0 + _FD_R
            cols.append((table.increment(scaled, steer_rad)[:, 2] - dth0) / _FD_R)
            continue
        up, step = pt
        cols.append((up.increment(spin, steer_rad)[:, 2] - base) / step)
    return dth0, np.column_stack(cols)


def _text(names: tuple[str, ...], v: np.ndarray) -> str:
    parts = [f"{c:+.2f} {n}" for c, n in zip(v, names) if abs(c) >= _SHOWN]
    return " ".join(parts).lstrip("+") if parts else "-"


def _sums(stamp_ns, dt_s, spin_m, steer_rad, gyro_z_radps, slip_flags, restart, interval_ns: int):
    """Per interval of the samples given (consecutive stamps in one ``interval_ns`` bin), over its
    samples with a gyro reading and a step (no restart): the spin travel sums (K, E), the steering
    sums (K, T) or None, the count, the time, the gyro heading (sum w_z dt), the sum of dt^2; and per
    interval a slip flag and the stamp of its last sample."""
    dt = np.asarray(dt_s, dtype=np.float64)
    g = np.asarray(gyro_z_radps, dtype=np.float64)
    ok = (np.abs(g) <= MAX_GYRO_RADPS) & (dt > 0)
    if restart is not None:
        ok &= ~np.asarray(restart, dtype=bool)
    flags = np.zeros(len(dt), dtype=bool) if slip_flags is None else np.asarray(slip_flags, dtype=bool)
    stamp = np.asarray(stamp_ns, dtype=np.int64)
    bins = stamp // interval_ns
    starts = np.flatnonzero(np.concatenate(([True], bins[1:] != bins[:-1])))
    z = np.where(ok, 1.0, 0.0)
    spin = np.asarray(spin_m, dtype=np.float64).reshape(len(dt), -1)

    def per(a: np.ndarray) -> np.ndarray:
        a = np.where(ok if a.ndim == 1 else ok[:, None], a, 0.0)
        return np.add.reduceat(a, starts, axis=0)

    steer = None if steer_rad is None else per(np.asarray(steer_rad, dtype=np.float64).reshape(len(dt), -1))
    bad = np.add.reduceat(flags.astype(np.int64), starts) > 0
    last = stamp[np.concatenate((starts[1:], [len(stamp)])) - 1]
    return per(spin), steer, per(z), per(dt), per(g * dt), per(dt * dt), bad, last


def _rows(table: WheelTable, perturbed: list, spin, steer, count, time, gyro, dt2, gyro_noise_radps: float):
    """The intervals' design rows x (K, P+1) (heading Jacobian at the interval's summed spin travel and
    mean steering, then the time for the bias), the gyro-minus-table headings y (K,) and their
    variances v (K,)."""
    mean_steer = None if steer is None else steer / np.maximum(count, 1.0)[:, None]
    dth0, jac = heading_jacobian(table, spin, mean_steer, perturbed)
    var = table.increment_covariance(spin, mean_steer)[:, 2, 2] + gyro_noise_radps ** 2 * dt2
    return np.column_stack([jac, time]), gyro - dth0, var


def _use(bad: np.ndarray, v: np.ndarray, x: np.ndarray, next_bad_after_last: bool = False) -> np.ndarray:
    """Intervals that enter the estimate: no slip flag in it or its neighbours, a gyro reading in it."""
    prev = np.concatenate(([False], bad[:-1]))
    nxt = np.concatenate((bad[1:], [next_bad_after_last]))
    return ~bad & ~prev & ~nxt & (v > 0) & (x[:, -1] > 0)


def _solve(names: tuple[str, ...], a: np.ndarray, b: np.ndarray, used: int, alert_pct: float,
           prior_bias_radps: float) -> TableOnlineResult:
    """The bias eliminated (Schur complement), the geometry information split by its eigenvectors."""
    a = a.copy()
    p = len(names)
    a[p, p] += 1.0 / prior_bias_radps ** 2
    agb, abb = a[:p, p], a[p, p]
    s = a[:p, :p] - np.outer(agb, agb) / abb
    r = b[:p] - agb * b[p] / abb
    lam, vec = np.linalg.eigh(0.5 * (s + s.T))
    observed, unobserved = [], []
    delta = np.zeros(p)
    limit = alert_pct * 0.01
    for k in np.argsort(-lam):
        u = vec[:, k] * (1.0 if vec[np.argmax(np.abs(vec[:, k])), k] > 0 else -1.0)
        se = float(1.0 / np.sqrt(lam[k])) if lam[k] > 0 else float("inf")
        if se < OBSERVABLE_SE:
            est = float(u @ r / lam[k])
            delta += est * u
            observed.append(TableCombination(u, est, se, abs(est) > limit and abs(est) > 4.0 * se, _text(names, u)))
        else:
            unobserved.append(TableCombination(u, 0.0, se, False, _text(names, u)))
    bias = float((b[p] - agb @ delta) / abb)
    return TableOnlineResult(names, observed, unobserved, bias, float(1.0 / np.sqrt(abb)), int(used),
                             any(c.alert for c in observed), delta)


def online_table(table: WheelTable, stamp_ns: np.ndarray, dt_s: np.ndarray, spin_m: np.ndarray,
                 steer_rad: np.ndarray | None, gyro_z_radps: np.ndarray, slip_flags: np.ndarray | None,
                 gyro_noise_radps: float, interval_s: float = 0.1, alert_pct: float = 0.5,
                 prior_bias_radps: float = 0.05, restart: np.ndarray | None = None) -> TableOnlineResult:
    """Batch form over a run of accepted samples (see the module docstring); samples at a chain
    restart (``restart``) are left out."""
    return _batch(table, stamp_ns, dt_s, spin_m, steer_rad, gyro_z_radps, slip_flags, gyro_noise_radps,
                  interval_s, alert_pct, prior_bias_radps, restart)[0]


def _batch(table, stamp_ns, dt_s, spin_m, steer_rad, gyro_z_radps, slip_flags, gyro_noise_radps, interval_s,
           alert_pct, prior_bias_radps, restart):
    names = table_parameters(table)
    *sums, bad, last = _sums(stamp_ns, dt_s, spin_m, steer_rad, gyro_z_radps, slip_flags, restart,
                             max(1, int(round(interval_s * 1e9))))
    x, y, v = _rows(table, _perturbed(table), *sums, gyro_noise_radps)
    use = _use(bad, v, x)
    w = np.where(use, 1.0 / np.where(use, v, 1.0), 0.0)
    xw = x * w[:, None]
    res = _solve(names, x.T @ xw, xw.T @ y, int(use.sum()), alert_pct, prior_bias_radps)
    return res, (x, y, w, last)


def _config(settings) -> dict:
    o = settings.online_calibration
    return {"gyro_noise_radps": settings.slip.gyro_noise_radps, "interval_s": o.interval_s, "alert_pct": o.alert_pct,
            "prior_bias_radps": o.prior_bias_radps}


@dataclass
class TableOnlineSeries:
    """The table estimate over a run (``online_table_series``): per closed interval (K rows) the
    estimates of the run's final observed combinations from the data up to it (the directions the
    gyro does not observe held at the configured geometry), their standard errors and alerts."""

    stamp_ns: np.ndarray            # (K,) stamp of each interval's last sample
    estimate: np.ndarray            # (K, C) relative change along each final observed combination
    se: np.ndarray                  # (K, C) its standard error (NaN while not yet determined)
    alert: np.ndarray               # (K, C) bool
    final: TableOnlineResult

    def __len__(self) -> int:
        return len(self.stamp_ns)

    @property
    def texts(self) -> tuple[str, ...]:
        return tuple(c.text for c in self.final.observed)


def online_table_series(table: WheelTable, stamp_ns, dt_s, spin_m, steer_rad, gyro_z_radps, slip_flags,
                        gyro_noise_radps: float, interval_s: float = 0.1, alert_pct: float = 0.5,
                        prior_bias_radps: float = 0.05, restart=None) -> TableOnlineSeries:
    """``online_table`` plus the estimate's course (``TableOnlineSeries``); the last row equals the result."""
    res, (x, y, w, last) = _batch(table, stamp_ns, dt_s, spin_m, steer_rad, gyro_z_radps, slip_flags,
                                  gyro_noise_radps, interval_s, alert_pct, prior_bias_radps, restart)
    p, c, k = len(res.names), len(res.observed), len(last)
    if c == 0 or k == 0:
        empty = np.zeros((k, c))
        return TableOnlineSeries(last, empty, empty + np.nan, empty.astype(bool), res)
    u = np.column_stack([o.vector for o in res.observed])                       # (P, C)
    xz = np.column_stack([x[:, :p] @ u, x[:, p]])                                # (K, C+1)
    az = np.cumsum(xz[:, :, None] * xz[:, None, :] * w[:, None, None], axis=0)
    bz = np.cumsum(xz * (w * y)[:, None], axis=0)
    az[:, c, c] += 1.0 / prior_bias_radps ** 2
    agb, abb = az[:, :c, c], az[:, c, c]
    s = az[:, :c, :c] - agb[:, :, None] * agb[:, None, :] / abb[:, None, None]
    r = bz[:, :c] - agb * (bz[:, c] / abb)[:, None]
    lam = np.linalg.eigvalsh(0.5 * (s + np.swapaxes(s, 1, 2)))
    ok = lam[:, 0] > 1e-9 * np.maximum(lam[:, -1], 1e-300)
    est = np.full((k, c), np.nan)
    se = np.full((k, c), np.nan)
    if ok.any():
        inv = np.linalg.inv(s[ok])
        est[ok] = np.einsum("kij,kj->ki", inv, r[ok])
        se[ok] = np.sqrt(np.maximum(np.diagonal(inv, axis1=1, axis2=2), 0.0))
    limit = alert_pct * 0.01
    with np.errstate(invalid="ignore"):
        alert = ok[:, None] & (np.abs(est) > limit) & (np.abs(est) > 4.0 * se)
    return TableOnlineSeries(last, est, se, alert, res)


def run_series(table: WheelTable, travel, gyro_z_radps, slip_flags, settings) -> TableOnlineSeries:
    """``online_table_series`` over a run's Travel with the settings' online_calibration values."""
    return online_table_series(table, travel.stamp_ns, travel.dt_s, travel.joint_travel_m, travel.steer_rad,
                               gyro_z_radps, slip_flags, restart=travel.restart, **_config(settings))


class TableOnlineCalibrator:
    """Streaming form of ``online_table`` for the node: ``step`` per accepted sample adds to the open
    interval's sums (floats); when an interval closes (a stamp in the next one) its row is formed
    (numpy, once per interval) and, once the next interval's slip flag is known, added to the sums.
    ``result()`` does the eigen split; it equals ``online_table`` over the same samples."""

    def __init__(self, settings) -> None:
        self.table = settings.drive_model()
        cfg = _config(settings)
        self.gyro_noise = cfg["gyro_noise_radps"]
        self.interval_ns = max(1, int(round(cfg["interval_s"] * 1e9)))
        self.alert_pct, self.prior_bias = cfg["alert_pct"], cfg["prior_bias_radps"]
        self.names = table_parameters(self.table)
        self._pert = _perturbed(self.table)
        self._params = _params(self.table)
        self._enc = list(np.flatnonzero(self.table.spin))
        n = len(self.names) + 1
        self._a = np.zeros((n, n))
        self._b = np.zeros(n)
        self._used = 0
        self._bin: int | None = None
        self._n_e, self._n_t = int(self.table.spin.sum()), int(self.table.steered.sum())
        self._clear()
        self._pending = None          # (row, prev_bad) of the last closed interval, waiting for its successor
        self.intervals = 0            # intervals closed so far

    def _clear(self) -> None:
        self._spin = [0.0] * self._n_e
        self._steer = [0.0] * self._n_t
        self._count = self._time = self._gyro = self._dt2 = 0.0
        self._bad = False
        self._open = False

    def step(self, stamp_ns: int, restart: bool, dt_s: float, spin, steer, gyro_z_radps: float | None,
             slipping: bool) -> None:
        """One accepted sample: its spin travel (E, m), steering readings (T, rad; None without steered
        wheels), gyro z rate (None: no reading) and slip flag. Floats only, unless an interval closes."""
        b = stamp_ns // self.interval_ns
        if b != self._bin:
            if self._open:
                self._close()
            self._bin = b
        self._open = True
        if slipping:
            self._bad = True
        if restart or not dt_s > 0 or gyro_z_radps is None or not abs(gyro_z_radps) <= MAX_GYRO_RADPS:
            return
        acc = self._spin
        for i, v in enumerate(spin):
            acc[i] += v
        if self._n_t:
            acc = self._steer
            for i, v in enumerate(steer):
                acc[i] += v
        self._count += 1.0
        self._time += dt_s
        self._gyro += gyro_z_radps * dt_s
        self._dt2 += dt_s * dt_s

    def _row(self):
        """The open interval's row as ``_rows`` forms it, with the table's float path (``step_floats``)."""
        sp = self._spin
        st = [v / max(self._count, 1.0) for v in self._steer] if self._n_t else None
        _, _, dth0, c6, _ = self.table.step_floats(sp, st)
        base = self._pert[0].step_floats(sp, st)[2]
        cols = []
        for (kind, i), pt in zip(self._params, self._pert[1:]):
            if pt is None:
                scaled = list(sp)
                scaled[self._enc.index(i)] *= 1.0 + _FD_R
                cols.append((self.table.step_floats(scaled, st)[2] - dth0) / _FD_R)
            else:
                up, step = pt
                cols.append((up.step_floats(sp, st)[2] - base) / step)
        cols.append(self._time)
        return np.array(cols), self._gyro - dth0, c6[5] + self.gyro_noise ** 2 * self._dt2, self._bad

    def _add(self, a, b, row, prev_bad: bool, next_bad: bool) -> int:
        x, y, v, bad = row
        if bad or prev_bad or next_bad or not (v > 0) or not (x[-1] > 0):
            return 0
        w = 1.0 / v
        a += np.outer(x, x) * w
        b += x * (w * y)
        return 1

    def _close(self) -> None:
        row = self._row()
        self._clear()
        self.intervals += 1
        if self._pending is not None:
            prow, pprev = self._pending
            self._used += self._add(self._a, self._b, prow, pprev, row[3])
            self._pending = (row, prow[3])
        else:
            self._pending = (row, False)

    def result(self) -> TableOnlineResult:
        """The estimate over every sample so far (the open interval included)."""
        a, b, used = self._a.copy(), self._b.copy(), self._used
        rows = [] if self._pending is None else [self._pending]
        if self._open:
            row = self._row()
            rows.append((row, rows[-1][0][3] if rows else False))
        for i, (row, prev_bad) in enumerate(rows):
            nxt = rows[i + 1][0][3] if i + 1 < len(rows) else False
            used += self._add(a, b, row, prev_bad, nxt)
        return _solve(self.names, a, b, used, self.alert_pct, self.prior_bias)
