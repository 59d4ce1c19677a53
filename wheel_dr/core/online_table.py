"""Online self-calibration for wheel-table drives (tricycle, car-like, mecanum, omni, swerve, custom): batch form.

The same idea as ``online_calibration`` for differential drive, on the table's own model: the gyro's
heading change over an interval against the table's, linearised in the geometry. With spin travel s
(configured radii) and steering readings, the table gives the heading increment dtheta(g) for its
geometry g (``WheelTable.increment``); the gyro reads dtheta(g_true) + bias dt + noise, so

    sum(w_z dt) - dtheta(g0) = J (g - g0) + bias T + noise,    J = d dtheta / d g at the configured g0,

a linear model in the geometry change and the bias (Gauss-Newton's first step, Bjorck 1996,
sec. 9.2). The geometry parameters are each encoder wheel's radius (relative change; the Jacobian is
``WheelTable.jacobian`` times the travel), every wheel's position x, y (over the base's size L) and
each steered wheel's steering offset (rad); the last two by central differences of the table's own
solution (a copy of the table as kind 'custom', so a perturbed axle need not stay straight).

Samples are summed over intervals of ``online_calibration.interval_s``; intervals with a slip flag
or without a gyro reading are left out; each is weighted by its residual variance (gyro white noise
plus the table's heading-increment variance, ``WheelTable.increment_covariance``). The bias is
eliminated (Schur complement) and the geometry information is split by its eigenvectors: a
direction whose standard error is below ``OBSERVABLE_SE`` is a combination the gyro observes, the
rest are not (for every kind, scaling all radii and positions together turns the same heading: the
scale needs a distance source). Each observable combination is reported with its estimate and
standard error, and alerts like the differential drive's (beyond ``alert_pct`` and 4 standard
errors). No forgetting: the estimate is over the whole run. The streaming form follows the
drive-table wiring of the estimator. Advisory, not a safety function (``wheel_dr.safety``).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .drive.table import WheelTable
from .slip import MAX_GYRO_RADPS

__all__ = ["TableCombination", "TableOnlineResult", "table_parameters", "heading_jacobian", "online_table",
           "OBSERVABLE_SE"]

OBSERVABLE_SE = 0.01        # a combination with a standard error below 1 % (relative units) is observed
_FD_M = 1e-6                # central-difference step for positions (m) and steering offsets (rad)
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


def heading_jacobian(table: WheelTable, spin_m: np.ndarray, steer_rad: np.ndarray | None) -> tuple[np.ndarray, np.ndarray]:
    """(dtheta0 (M,), J (M, P)): the table's heading increments and their derivatives in the parameters."""
    spin = np.asarray(spin_m, dtype=np.float64).reshape(-1, int(table.spin.sum()))
    dth0 = table.increment(spin, steer_rad)[:, 2]
    jac = table.jacobian(spin, steer_rad)[:, 2, :]                  # d dtheta / d spin travel (M, E)
    size = _size(table)
    cols = []
    enc = list(np.flatnonzero(table.spin))
    for kind, i in _params(table):
        if kind == "radius":
            e = enc.index(i)
            cols.append(jac[:, e] * spin[:, e])
            continue
        arr = {"x": table.x, "y": table.y, "offset": table.offset}[kind]
        up, dn = arr.copy(), arr.copy()
        up[i] += _FD_M
        dn[i] -= _FD_M
        a = _copy(table, **{kind: up}).increment(spin, steer_rad)[:, 2]
        b = _copy(table, **{kind: dn}).increment(spin, steer_rad)[:, 2]
        step = 2.0 * _FD_M / (size if kind in ("x", "y") else 1.0)
        cols.append((a - b) / step)
    return dth0, np.column_stack(cols)


def _text(names: tuple[str, ...], v: np.ndarray) -> str:
    parts = [f"{c:+.2f} {n}" for c, n in zip(v, names) if abs(c) >= _SHOWN]
    return " ".join(parts).lstrip("+") if parts else "-"


def online_table(table: WheelTable, stamp_ns: np.ndarray, dt_s: np.ndarray, spin_m: np.ndarray,
                 steer_rad: np.ndarray | None, gyro_z_radps: np.ndarray, slip_flags: np.ndarray | None,
                 gyro_noise_radps: float, interval_s: float = 0.1, alert_pct: float = 0.5,
                 prior_bias_radps: float = 0.05) -> TableOnlineResult:
    """Batch form over a run of accepted samples (see the module docstring)."""
    names = table_parameters(table)
    dt = np.asarray(dt_s, dtype=np.float64)
    g = np.asarray(gyro_z_radps, dtype=np.float64)
    ok = (np.abs(g) <= MAX_GYRO_RADPS) & (dt > 0)
    flags = np.zeros(len(dt), dtype=bool) if slip_flags is None else np.asarray(slip_flags, dtype=bool)
    dth0, jac = heading_jacobian(table, spin_m, steer_rad)
    var = table.increment_covariance(spin_m, steer_rad)[:, 2, 2] + gyro_noise_radps ** 2 * dt * dt
    bins = np.asarray(stamp_ns, dtype=np.int64) // max(1, int(round(interval_s * 1e9)))
    starts = np.flatnonzero(np.concatenate(([True], bins[1:] != bins[:-1])))
    z = np.where(ok, 1.0, 0.0)

    def per(a: np.ndarray) -> np.ndarray:
        return np.add.reduceat(a * (z if a.ndim == 1 else z[:, None]), starts, axis=0)

    y = per(np.where(ok, g, 0.0) * dt - dth0)
    x = np.column_stack([per(jac), per(dt)])
    v = per(var)
    bad = np.add.reduceat(flags.astype(np.int64), starts) > 0
    use = ~bad & ~np.roll(bad, 1) & ~np.roll(bad, -1) & (v > 0) & (x[:, -1] > 0)
    w = 1.0 / np.where(use, v, 1.0)
    xw = x[use] * w[use, None]
    a = x[use].T @ xw
    b = xw.T @ y[use]
    p = len(names)
    a[p, p] += 1.0 / prior_bias_radps ** 2
    # eliminate the bias (Schur complement), split the geometry information by its eigenvectors
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
    return TableOnlineResult(names, observed, unobserved, bias, float(1.0 / np.sqrt(abb)), int(use.sum()),
                             any(c.alert for c in observed), delta)
