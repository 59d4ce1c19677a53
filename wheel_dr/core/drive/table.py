"""Any planar wheeled base as a table of wheels: weighted least squares with the sliding constraints held exactly.

Wheel i sits at (x_i, y_i) in the base frame and rolls along psi_i = mount_i + (steer_i - offset_i)
(fixed wheels: the mount angle); its contact point moves at v_i = (vx - wz y_i, vy + wz x_i)
(Siegwart, Nourbakhsh & Scaramuzza 2011, sec. 3.2; Campion, Bastin & d'Andrea-Novel 1996).

* A standard wheel rolls without slipping, d_i . v_i = r_i dphi_i / dt, and does not slide,
  n_i . v_i = 0 (d_i = (cos psi_i, sin psi_i), n_i = d_i turned by +pi/2).
* A wheel whose rollers run free at roller_i from its rolling direction gives
  v_i . rot(d_i, roller_i - pi/2) = r_i dphi_i / dt sin(roller_i), and no sliding constraint.

Per step the body increment tau = (dx, dy, dtheta) is the weighted least-squares solution of the
rolling equations of the wheels with encoders, subject to the sliding equations held exactly
(they are physics, not measurements): tau = N z with N spanning the null space of the stacked
sliding rows (from their SVD, keeping the table's structural constraint rank, so steering noise
cannot make the constraints contradict each other), z = (G^T W G)^-1 G^T W b, G = R N. Its
covariance is N (G^T W G)^-1 N^T from the wheel noise plus J_s diag(steer_sd^2) J_s^T from the
steering readings (J_s = d tau / d steering readings).

Two implementations give the same numbers (tested to 1e-9): ``_solve``, the definition above with
numpy's batched SVD and inverse (kept as the reference and for tables with steered standard wheels
and two degrees of freedom), and the fast path, ``solve`` (vectorised, in cache-sized blocks) and
``step_floats`` (one step in plain floats for the streaming estimator), in closed form: the null
space once per table when no standard wheel is steered, else (one degree of freedom) the
eigenvector of C^T C's smallest eigenvalue from Newton's method and an adjugate, k x k inverses by
cofactors, and an analytic steering Jacobian (see ``solve``).

Weights are the inverse variances of the wheels' travel, k_i |s_i| (the per-wheel model), made
robust: |s_i| is floored at a quarter of the mean |s| of the step's encoder wheels, so a slowly
turning wheel does not get an almost infinite weight from one noisy reading (common practice).
"""
from __future__ import annotations

import math
from typing import Sequence

import numpy as np

from ..errors import SettingsError
from .base import DriveModel

__all__ = ["WheelTable", "DRIVE_KINDS"]

DRIVE_KINDS = ("differential", "tricycle", "ackermann", "mecanum", "omni", "swerve", "custom")
_ROBUST_FRACTION = 0.25
_FD_STEP_RAD = 1e-6
_TINY = 1e-300          # floor of a divisor (a degenerate step stays finite)
_NEWTON_STEPS = 60      # enough for nearly equal eigenvalues (linear convergence, ratio 1/2)
_BLOCK = 8192           # steps per block of the vectorised solve
_NEWTON_TOL = 1e-14      # relative to trace(A): the smallest eigenvalue to round-off


def _rot_rows(angle: np.ndarray, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Rows g . A_i of unit vectors g at ``angle`` acting on tau: (gx, gy, -gx y + gy x), shape (..., 3)."""
    gx, gy = np.cos(angle), np.sin(angle)
    return np.stack([gx, gy, gy * x - gx * y], axis=-1)


def _smallest_eigvec(a00, a01, a02, a11, a12, a22):
    """Unit eigenvector (n0, n1, n2) of the smallest eigenvalue lam of symmetric positive semi-definite
    3 x 3 matrices A given by their six entries (arrays), with lam and the sigma = trace and pi = sum
    of principal 2 x 2 minors of M = A - lam I (its two other eigenvalues' sum and product).

    lam by Newton's method on det(A - lam I) from 0 (the polynomial is convex and decreasing up to
    lam, so the steps approach it from below); n from the adjugate of M, which is pi n n^T for a
    rank-two M: its column with the largest diagonal entry, divided by that entry's square root."""
    tr = a00 + a11 + a22
    c2 = a00 * a11 - a01 * a01 + a00 * a22 - a02 * a02 + a11 * a22 - a12 * a12
    det = a00 * (a11 * a22 - a12 * a12) - a01 * (a01 * a22 - a12 * a02) + a02 * (a01 * a12 - a11 * a02)
    lam = np.where(c2 > _TINY, det, 0.0) / np.where(c2 > _TINY, c2, 1.0)       # the first step from 0
    todo = np.arange(len(tr))
    for _ in range(_NEWTON_STEPS - 1):       # further steps only where the last one still changed lam
        lt, trt, c2t = lam[todo], tr[todo], c2[todo]
        dp = -c2t + lt * (2.0 * trt - 3.0 * lt)
        ok = dp < 0.0
        step = np.where(ok, (det[todo] - lt * (c2t - lt * (trt - lt))) / np.where(ok, dp, -1.0), 0.0)
        lam[todo] = lt - step
        todo = todo[np.abs(step) > _NEWTON_TOL * trt]
        if not len(todo):
            break
    m00, m11, m22 = a00 - lam, a11 - lam, a22 - lam
    j00, j11, j22 = m11 * m22 - a12 * a12, m00 * m22 - a02 * a02, m00 * m11 - a01 * a01
    j01, j02, j12 = a02 * a12 - a01 * m22, a01 * a12 - a02 * m11, a01 * a02 - m00 * a12
    pick1 = (j11 > j00) & (j11 >= j22)
    pick2 = (j22 > j00) & (j22 > j11)
    d = np.where(pick2, j22, np.where(pick1, j11, j00))
    ok = d > _TINY
    inv = 1.0 / np.sqrt(np.where(ok, d, 1.0))
    n0 = np.where(ok, np.where(pick2, j02, np.where(pick1, j01, j00)) * inv, 1.0)
    n1 = np.where(ok, np.where(pick2, j12, np.where(pick1, j11, j01)) * inv, 0.0)
    n2 = np.where(ok, np.where(pick2, j22, np.where(pick1, j12, j02)) * inv, 0.0)
    return n0, n1, n2, lam, m00 + m11 + m22, j00 + j11 + j22


def _smallest_eigvec_floats(a00, a01, a02, a11, a12, a22):
    """Float twin of ``_smallest_eigvec`` (Newton stops once a step no longer changes lam)."""
    tr = a00 + a11 + a22
    c2 = a00 * a11 - a01 * a01 + a00 * a22 - a02 * a02 + a11 * a22 - a12 * a12
    det = a00 * (a11 * a22 - a12 * a12) - a01 * (a01 * a22 - a12 * a02) + a02 * (a01 * a12 - a11 * a02)
    lam = det / c2 if c2 > _TINY else 0.0
    for _ in range(_NEWTON_STEPS - 1):
        dp = -c2 + lam * (2.0 * tr - 3.0 * lam)
        if not dp < 0.0:
            break
        step = (det - lam * (c2 - lam * (tr - lam))) / dp
        lam -= step
        if not abs(step) > _NEWTON_TOL * tr:
            break
    m00, m11, m22 = a00 - lam, a11 - lam, a22 - lam
    j00, j11, j22 = m11 * m22 - a12 * a12, m00 * m22 - a02 * a02, m00 * m11 - a01 * a01
    sig, pi = m00 + m11 + m22, j00 + j11 + j22
    if j22 > j00 and j22 > j11:
        d, n0, n1, n2 = j22, a01 * a12 - a02 * m11, a01 * a02 - m00 * a12, j22
    elif j11 > j00:
        d, n0, n1, n2 = j11, a02 * a12 - a01 * m22, j11, a01 * a02 - m00 * a12
    else:
        d, n0, n1, n2 = j00, j00, a02 * a12 - a01 * m22, a01 * a12 - a02 * m11
    if not d > _TINY:
        return 1.0, 0.0, 0.0, lam, sig, pi
    inv = 1.0 / math.sqrt(d)
    return n0 * inv, n1 * inv, n2 * inv, lam, sig, pi


_UPPER = {1: ((0, 0),), 2: ((0, 0), (0, 1), (1, 1)), 3: ((0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2))}
_UIDX = {k: [[next(n for n, ij in enumerate(_UPPER[k]) if ij == (min(i, j), max(i, j))) for j in range(k)]
             for i in range(k)] for k in _UPPER}
_SYM6 = _UIDX[3]


def _inv_sym_rows(hu: np.ndarray, k: int) -> list:
    """Inverse of symmetric k x k matrices (k = 1, 2, 3) given as rows of their upper triangle
    (k(k+1)/2, M), by cofactors, returned the same way (a singular one gives huge finite entries
    instead of a division by zero)."""
    if k == 1:
        return [1.0 / np.where(np.abs(hu[0]) > _TINY, hu[0], _TINY)]
    if k == 2:
        a, b, c = hu
        det = a * c - b * b
        idet = 1.0 / np.where(np.abs(det) > _TINY, det, _TINY)
        return [c * idet, -b * idet, a * idet]
    k00, k01, k02, k11, k12, k22 = hu
    i00, i01, i02 = k11 * k22 - k12 * k12, k02 * k12 - k01 * k22, k01 * k12 - k02 * k11
    i11, i12, i22 = k00 * k22 - k02 * k02, k01 * k02 - k00 * k12, k00 * k11 - k01 * k01
    det = k00 * i00 + k01 * i01 + k02 * i02
    idet = 1.0 / np.where(np.abs(det) > _TINY, det, _TINY)
    return [i00 * idet, i01 * idet, i02 * idet, i11 * idet, i12 * idet, i22 * idet]


def _inv_small_floats(h: list, k: int) -> list:
    """Float twin of ``_inv_sym_rows`` for one k x k matrix (lists) (its upper triangle is read)."""
    if k == 1:
        d = h[0][0]
        return [[1.0 / (d if abs(d) > _TINY else _TINY)]]
    if k == 2:
        a, b, c = h[0][0], h[0][1], h[1][1]
        det = a * c - b * b
        if not abs(det) > _TINY:
            det = _TINY
        return [[c / det, -b / det], [-b / det, a / det]]
    k00, k01, k02, k11, k12, k22 = h[0][0], h[0][1], h[0][2], h[1][1], h[1][2], h[2][2]
    i00, i01, i02 = k11 * k22 - k12 * k12, k02 * k12 - k01 * k22, k01 * k12 - k02 * k11
    i11, i12, i22 = k00 * k22 - k02 * k02, k01 * k02 - k00 * k12, k00 * k11 - k01 * k01
    det = k00 * i00 + k01 * i01 + k02 * i02
    if not abs(det) > _TINY:
        det = _TINY
    d = 1.0 / det
    return [[i00 * d, i01 * d, i02 * d], [i01 * d, i11 * d, i12 * d], [i02 * d, i12 * d, i22 * d]]


class WheelTable(DriveModel):
    """A table of wheels (see the module docstring); arrays are one entry per wheel."""

    def __init__(self, kind: str, wheel_joints: Sequence[str], wheel_x: Sequence[float], wheel_y: Sequence[float],
                 wheel_radius: Sequence[float], steer_joints: Sequence[str] | None = None,
                 mount_angle: Sequence[float] | None = None, roller_angle: Sequence[float] | None = None,
                 steer_offset: Sequence[float] | None = None, k_wheels: float | Sequence[float] = 5e-4,
                 steer_sd_rad: float = 0.0) -> None:
        n = len(wheel_joints)
        self.kind = kind
        if kind not in DRIVE_KINDS or kind == "differential":
            raise SettingsError(f"drive.kind '{kind}' is not a wheel-table kind; use one of "
                                f"{', '.join(DRIVE_KINDS[1:])} (or 'differential' with the wheels.* parameters).")
        zeros = (0.0,) * n
        arrays = {"drive.wheel_x": wheel_x, "drive.wheel_y": wheel_y, "drive.wheel_radius": wheel_radius,
                  "drive.steer_joints": ("",) * n if steer_joints is None else steer_joints,
                  "drive.mount_angle": zeros if mount_angle is None else mount_angle,
                  "drive.roller_angle": zeros if roller_angle is None else roller_angle,
                  "drive.steer_offset": zeros if steer_offset is None else steer_offset}
        if n == 0:
            raise SettingsError("drive.wheel_joints is empty; list one entry per wheel ('' for a wheel without an encoder).")
        for name, arr in arrays.items():
            if len(arr) != n:
                raise SettingsError(f"{name} has {len(arr)} entries but drive.wheel_joints has {n}; give one entry per wheel.")
        k = np.broadcast_to(np.asarray(k_wheels, dtype=np.float64), (n,)) if np.ndim(k_wheels) == 0 else \
            np.asarray(k_wheels, dtype=np.float64)
        if len(k) != n:
            raise SettingsError(f"noise.k_wheels has {len(k)} entries; give one value or one per wheel ({n}).")
        self.wheel_joints = tuple(wheel_joints)
        self.steer_joints = tuple(arrays["drive.steer_joints"])
        named = [j for j in self.wheel_joints + self.steer_joints if j]
        dup = sorted({j for j in named if named.count(j) > 1})
        if dup:
            raise SettingsError(f"joint '{dup[0]}' appears twice in drive.wheel_joints / drive.steer_joints; "
                                "list each joint once.")
        self.x = np.asarray(wheel_x, dtype=np.float64)
        self.y = np.asarray(wheel_y, dtype=np.float64)
        self.radius = np.asarray(wheel_radius, dtype=np.float64)
        if np.any(~(self.radius > 0)):
            raise SettingsError("drive.wheel_radius must be > 0 m for every wheel.")
        self.mount = np.asarray(arrays["drive.mount_angle"], dtype=np.float64)
        self.roller = np.asarray(arrays["drive.roller_angle"], dtype=np.float64)
        self.offset = np.asarray(arrays["drive.steer_offset"], dtype=np.float64)
        self.k = k.astype(np.float64)
        self.steer_sd_rad = float(steer_sd_rad)
        self.spin = np.array([bool(j) for j in self.wheel_joints])      # wheels with an encoder
        self.steered = np.array([bool(j) for j in self.steer_joints])
        self.standard = np.abs(self.roller) < 1e-12
        self._check_kind()
        self._constraint_rank = self._check_rank()
        self._precompute()

    # -- checks ---------------------------------------------------------------------------------
    def _check_kind(self) -> None:
        n, kind = len(self.x), self.kind
        quarter = np.isclose(np.abs(self.roller), math.pi / 4)
        half = np.isclose(np.abs(self.roller), math.pi / 2)
        if kind == "mecanum" and not (n == 4 and quarter.all() and not self.steered.any()):
            raise SettingsError("a mecanum base has four unsteered wheels with drive.roller_angle +-pi/4; "
                                "fix the table or use drive.kind 'custom'.")
        if kind == "omni" and not (n >= 3 and half.all() and not self.steered.any()):
            raise SettingsError("an omni base has three or more unsteered wheels with drive.roller_angle +-pi/2; "
                                "fix the table or use drive.kind 'custom'.")
        if kind in ("tricycle", "ackermann", "swerve") and not self.standard.all():
            raise SettingsError(f"a {kind} base has standard wheels only (drive.roller_angle all 0); "
                                "fix the table or use drive.kind 'custom'.")
        if kind == "tricycle":
            fixed = ~self.steered
            if not (self.steered.sum() == 1 and fixed.any() and np.ptp(self.x[fixed]) < 1e-9):
                raise SettingsError("a tricycle base has exactly one steered wheel and its fixed wheels on one "
                                    "axle (same drive.wheel_x); fix the table or use drive.kind 'custom'.")
        if kind == "ackermann":
            fixed = ~self.steered
            if not (self.steered.sum() == 2 and fixed.sum() >= 2 and np.ptp(self.x[fixed]) < 1e-9
                    and np.ptp(self.x[self.steered]) < 1e-9):
                raise SettingsError("a car-like (ackermann) base has two steered front wheels on one axle and "
                                    "fixed rear wheels on another; fix the table or use drive.kind 'custom'.")
        if kind == "swerve" and not (n >= 2 and self.steered.all()):
            raise SettingsError("a swerve base has two or more wheels and every one of them steered "
                                "(drive.steer_joints); fix the table or use drive.kind 'custom'.")

    def _check_rank(self) -> int:
        if not self.spin.any():
            raise SettingsError("the drive table cannot determine the motion: no wheel has an encoder; "
                                "name the spin joints in drive.wheel_joints.")
        c0 = _rot_rows(self.mount + 0.5 * math.pi, self.x, self.y)[self.standard]
        e0 = _rot_rows(self.mount + np.where(self.standard, 0.0, self.roller - 0.5 * math.pi), self.x, self.y)[self.spin]
        rank_c = int(np.linalg.matrix_rank(c0, tol=1e-9)) if len(c0) else 0
        if rank_c >= 3 or np.linalg.matrix_rank(np.vstack([c0, e0]), tol=1e-9) < 3:
            raise SettingsError("the drive table cannot determine the motion (rank below 3): add wheels with "
                                "encoders or correct their positions and angles.")
        return rank_c

    # -- interface --------------------------------------------------------------------------------
    def joint_roles(self) -> dict[str, str]:
        out = {j: "spin" for j in self.wheel_joints if j}
        out.update({j: "steer" for j in self.steer_joints if j})
        return out

    def geometry(self) -> dict[str, object]:
        return {"drive.kind": self.kind, "drive.wheel_x": tuple(self.x), "drive.wheel_y": tuple(self.y),
                "drive.wheel_radius": tuple(self.radius), "drive.mount_angle": tuple(self.mount),
                "drive.roller_angle": tuple(self.roller), "drive.steer_offset": tuple(self.offset)}

    def _psi(self, steer: np.ndarray | None, m: int) -> np.ndarray:
        psi = np.broadcast_to(self.mount, (m, len(self.x))).copy()
        if self.steered.any():
            st = np.asarray(steer, dtype=np.float64).reshape(m, int(self.steered.sum()))
            psi[:, self.steered] += st - self.offset[self.steered]
        return psi

    def _solve(self, spin: np.ndarray, steer: np.ndarray | None, var_s: np.ndarray | None = None):
        """tau (M, 3), N (M, 3, k), H^-1 (M, k, k), G (M, E, k), w (M, E), scale (E,), rows R (M, E, 3)."""
        s = np.asarray(spin, dtype=np.float64).reshape(-1, int(self.spin.sum()))
        m = len(s)
        psi = self._psi(steer, m)
        enc = self.spin
        scale = np.where(self.standard, 1.0, np.sin(self.roller))[enc]
        rows = _rot_rows(psi[:, enc] + np.where(self.standard, 0.0, self.roller - 0.5 * math.pi)[enc],
                         self.x[enc], self.y[enc])
        b = s * scale
        if var_s is None:
            var_s = self.spin_variance(s)
        w = 1.0 / (scale * scale * var_s)
        if self._constraint_rank:
            c = _rot_rows(psi[:, self.standard] + 0.5 * math.pi, self.x[self.standard], self.y[self.standard])
            vh = np.linalg.svd(c)[2]
            null = np.swapaxes(vh[:, self._constraint_rank:, :], 1, 2)
        else:
            null = np.broadcast_to(np.eye(3), (m, 3, 3))
        g = rows @ null
        h = np.swapaxes(g, 1, 2) @ (g * w[:, :, None])
        h_inv = np.linalg.inv(h)
        z = (h_inv @ np.einsum("mek,me->mk", g, w * b)[:, :, None])[:, :, 0]
        tau = (null @ z[:, :, None])[:, :, 0]
        return tau, null, h_inv, g, w, scale, rows, b

    def spin_variance(self, spin_m) -> np.ndarray:
        """(M, E) variance of each encoder wheel's travel: k_i max(|s_i|, a quarter of the step's mean |s|)."""
        s = np.abs(np.asarray(spin_m, dtype=np.float64).reshape(-1, int(self.spin.sum())))
        floor = np.maximum(_ROBUST_FRACTION * s.mean(axis=1, keepdims=True), 1e-12)
        return self.k[self.spin] * np.maximum(s, floor) + 1e-30

    def increment(self, spin_m, steer_rad=None) -> np.ndarray:
        return self.solve(spin_m, steer_rad)[0]

    def jacobian(self, spin_m, steer_rad=None) -> np.ndarray:
        _, null, h_inv, g, w, scale, _, _ = self._solve(spin_m, steer_rad)
        return null @ h_inv @ np.swapaxes(g * (w * scale)[:, :, None], 1, 2)

    def steer_jacobian(self, spin_m, steer_rad) -> np.ndarray:
        """(M, 3, T) d increment / d steering readings (analytic, see ``solve``; the weights do not
        depend on the steering)."""
        s = np.asarray(spin_m, dtype=np.float64).reshape(-1, int(self.spin.sum()))
        st = np.asarray(steer_rad, dtype=np.float64).reshape(len(s), len(self._steered_idx))
        if self._mode == "reference":
            return self._steer_jacobian_fd(s, st)
        with np.errstate(all="ignore"):
            return self._fast(s, st, True)[3]

    def _steer_jacobian_fd(self, spin_m, steer_rad) -> np.ndarray:
        """(M, 3, T) d increment / d steering readings, central differences of the SVD path."""
        s = np.asarray(spin_m, dtype=np.float64).reshape(-1, int(self.spin.sum()))
        st = np.asarray(steer_rad, dtype=np.float64).reshape(len(s), len(self._steered_idx))
        var = self.spin_variance(s)
        out = np.zeros((len(s), 3, st.shape[1]))
        for t in range(st.shape[1]):
            up, dn = st.copy(), st.copy()
            up[:, t] += _FD_STEP_RAD
            dn[:, t] -= _FD_STEP_RAD
            out[:, :, t] = (self._solve(s, up, var)[0] - self._solve(s, dn, var)[0]) / (2 * _FD_STEP_RAD)
        return out

    def increment_covariance(self, spin_m, steer_rad=None) -> np.ndarray:
        return self.solve(spin_m, steer_rad)[1]

    def residual(self, spin_m, steer_rad=None) -> np.ndarray:
        """(M, E) whitened residuals (b - R tau) sqrt(w) of the encoder wheels' rolling equations."""
        return self.solve(spin_m, steer_rad)[2]

    # -- the fast path: closed forms, vectorised (solve) and in floats (step_floats) -----------------
    def _precompute(self) -> None:
        """Everything constant per table, for ``solve`` and ``step_floats`` (see ``solve``)."""
        enc = np.flatnonzero(self.spin)
        self._enc = enc
        self._off = np.where(self.standard, 0.0, self.roller - 0.5 * math.pi)   # rolling-row angle - psi
        self._scale = np.where(self.standard, 1.0, np.sin(self.roller))[enc]
        self._k_enc = self.k[enc]
        self._steered_idx = np.flatnonzero(self.steered)
        self._std_steered = np.flatnonzero(self.standard & self.steered)
        fixed_std = self.standard & ~self.steered
        cons = _rot_rows(self.mount + 0.5 * math.pi, self.x, self.y)
        self._a0 = cons[fixed_std].T @ cons[fixed_std]
        self._rows0 = _rot_rows(self.mount + self._off, self.x, self.y)[enc]
        self._enc_steered = self.steered[enc]
        enc_of = {int(i): e for e, i in enumerate(enc)}
        self._null = None
        if not len(self._std_steered):
            self._mode = "fixed"            # sliding rows constant: the null space once, as the SVD path does
            if self._constraint_rank:
                self._null = np.ascontiguousarray(np.linalg.svd(cons[self.standard])[2][self._constraint_rank:].T)
            else:
                self._null = np.eye(3)
            g = self._rows0 @ self._null
            self._g0 = g
        elif self._constraint_rank == 2:
            self._mode = "one"              # one degree of freedom: the smallest eigenvector of C^T C
        else:
            self._mode = "reference"        # steered standard wheels with two degrees of freedom: the SVD path
        col = {int(i): t for t, i in enumerate(self._steered_idx)}
        self._enc_steer_t = np.array([col.get(int(i), -1) for i in enc], dtype=np.int64)
        self._inv_s2 = 1.0 / (self._scale * self._scale)
        self._ss_t = np.array([col[int(i)] for i in self._std_steered], dtype=np.int64)
        self._st_base = (self.mount - self.offset)[self._steered_idx]
        self._enc_std = self.standard[enc]
        self._enc_co, self._enc_so = np.cos(self._off[enc]), np.sin(self._off[enc])
        if self._mode == "fixed":
            k = self._null.shape[1]
            self._gg0u = np.stack([self._g0[:, i] * self._g0[:, j] for i, j in _UPPER[k]])
            self._cov_coef = np.array([[self._null[a, i] * self._null[c, j] + (self._null[a, j] * self._null[c, i]
                                                                               if i != j else 0.0)
                                        for i, j in _UPPER[k]] for a, c in _UPPER[3]])
        # float tables for step_floats
        self._f_e = len(enc)
        self._f_k = tuple(float(v) for v in self._k_enc)
        self._f_scale = tuple(float(v) for v in self._scale)
        self._f_inv_s2 = tuple(float(1.0 / (v * v)) for v in self._scale)
        self._f_unit_scale = all(v == 1.0 for v in self._f_scale)
        self._f_rows0 = tuple(tuple(float(c) for c in r) for r in self._rows0)
        self._f_a0 = tuple(float(self._a0[i, j]) for i, j in ((0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2)))
        self._f_steer = tuple((enc_of.get(int(i), -1), bool(self.standard[i]),
                               float(self.mount[i] - self.offset[i]), float(self.x[i]), float(self.y[i]),
                               math.cos(self._off[i]), math.sin(self._off[i])) for i in self._steered_idx)
        self._f_sd2 = self.steer_sd_rad ** 2 if (len(self._steered_idx) and self.steer_sd_rad > 0) else 0.0
        if self._mode == "fixed":
            self._f_null = tuple(tuple(float(c) for c in r) for r in self._null)
            self._f_g0 = tuple(tuple(float(c) for c in r) for r in self._g0)
            self._f_g_fixed = not self._enc_steered.any()
            self._f_null_eye = bool(np.array_equal(self._null, np.eye(3)))
            self._f_cov_coef = tuple(tuple(float(c) for c in r) for r in self._cov_coef)

    def solve(self, spin_m, steer_rad=None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Body increments tau (M, 3), their covariance (M, 3, 3) from the wheel noise and the steering
        noise (``steer_sd_rad``), and the whitened residuals (M, E), for (M, E) spin travel (m) and
        (M, T) steering readings (rad). The same numbers as the SVD path (``_solve``), in closed form.

        With the sliding rows constant (no steered standard wheel) the null space N is found once and
        the solve is a k x k symmetric inverse (k = 3 - constraint rank). With steered standard wheels
        and one degree of freedom, the null vector n is the eigenvector of the smallest eigenvalue
        lam of A = C^T C (the subspace the rank-truncated SVD keeps): lam by Newton's method on
        det(A - lam I) from 0 (monotone there, A being positive semi-definite), n from the adjugate
        of A - lam I (= pi n n^T): its column with the largest diagonal entry. Then tau = n z,
        z = sum w g b / H, H = sum w g^2,
        g = R n, and the wheel part of the covariance is n n^T / H. The steering Jacobian is
        analytic: a reading moves its wheel's rolling row (d r / d psi is the row at psi + pi/2)
        and its sliding row, which moves n by dn = -(A - lam I)^+ dA n (first-order eigenvector
        perturbation); tau does not depend on the length of n. Other tables (steered standard wheels
        with two degrees of freedom) take the SVD path with central differences.

        Long inputs are solved in blocks of ``_BLOCK`` steps (the temporaries stay in cache). A step
        with all spins 0 gives tau = 0 and a finite covariance; a step with a non-finite reading
        gives NaNs. Small inputs may come back as views of wheel-major arrays.
        """
        s = np.asarray(spin_m, dtype=np.float64).reshape(-1, self._f_e)
        st = None if not len(self._steered_idx) else np.asarray(steer_rad, dtype=np.float64).reshape(len(s), len(self._steered_idx))
        if not len(s):
            return np.zeros((0, 3)), np.zeros((0, 3, 3)), np.zeros((0, self._f_e))
        bad = ~np.isfinite(s).all(axis=1)
        if st is not None:
            bad |= ~np.isfinite(st).all(axis=1)
        if bad.any():               # callers drop non-finite readings; here such a step gives NaNs
            s = np.where(bad[:, None], 0.0, s)
            st = None if st is None else np.where(bad[:, None], 0.0, st)
            tau, cov, resid = (np.array(a) for a in self.solve(s, st))
            tau[bad], cov[bad], resid[bad] = np.nan, np.nan, np.nan
            return tau, cov, resid
        # finite readings never divide by zero (the divisors are floored)
        if self._mode == "reference":
            tau, null, h_inv, _, w, _, rows, b = self._solve(s, st)
            cov = null @ h_inv @ np.swapaxes(null, 1, 2)
            if self._f_sd2:
                js = self._steer_jacobian_fd(s, st)
                cov = cov + self._f_sd2 * js @ np.swapaxes(js, 1, 2)
            return tau, cov, (b - np.einsum("mei,mi->me", rows, tau)) * np.sqrt(w)
        want = bool(self._f_sd2)
        m = len(s)
        if m <= _BLOCK:
            return self._fast(s, st, want)[:3]
        tau, cov, resid = np.empty((m, 3)), np.empty((m, 3, 3)), np.empty((m, self._f_e))
        for a in range(0, m, _BLOCK):          # blocks small enough for the temporaries to stay in cache
            e = min(m, a + _BLOCK)
            tau[a:e], cov[a:e], resid[a:e] = self._fast(s[a:e], None if st is None else st[a:e], want)[:3]
        return tau, cov, resid

    def _fast(self, s: np.ndarray, st: np.ndarray | None, want_js: bool):
        """tau (M, 3), wheel-noise covariance (M, 3, 3), whitened residual (M, E) and the (M, 3, T)
        steering Jacobian (None unless ``want_js``). Arrays are held wheel-major, (E, M), so every
        operation runs on contiguous rows."""
        m = len(s)
        sw = np.ascontiguousarray(s.T)                                   # (E, M)
        a = np.abs(sw)
        floor = np.maximum(_ROBUST_FRACTION * a.mean(axis=0), 1e-12)
        w = self._inv_s2[:, None] / (self._k_enc[:, None] * np.maximum(a, floor) + 1e-30)
        b = sw * self._scale[:, None]
        st_w = None if st is None else np.ascontiguousarray(st.T)         # (T, M)
        enc_t = self._enc_steer_t                                         # steering column of each encoder wheel, -1
        xe, ye = self.x[self._enc][:, None], self.y[self._enc][:, None]
        if st_w is not None:
            psi = self._st_base[:, None] + st_w                           # (T, M) steered wheels' psi
            ct, stn = np.cos(psi), np.sin(psi)
        if self._enc_steered.any():
            ca = np.empty((len(self._enc), m))
            sa = np.empty((len(self._enc), m))
            ca[:] = self._rows0[:, 0:1]
            sa[:] = self._rows0[:, 1:2]
            for e in np.flatnonzero(enc_t >= 0):                         # rolling direction psi + off
                t = enc_t[e]
                if self._enc_std[e]:
                    ca[e], sa[e] = ct[t], stn[t]
                else:
                    co, so = self._enc_co[e], self._enc_so[e]
                    ca[e], sa[e] = ct[t] * co - stn[t] * so, stn[t] * co + ct[t] * so
            r = (ca, sa, sa * xe - ca * ye)
        else:
            ca = sa = None
            r = tuple(np.broadcast_to(self._rows0[:, i:i + 1], (len(self._enc), m)) for i in range(3))
        js = None
        if self._mode == "fixed":
            null = self._null
            k = null.shape[1]
            if ca is None:
                hu = self._gg0u @ w                                       # upper triangle of H, (k(k+1)/2, M)
                v = self._g0.T @ (w * b)
            else:
                g = [r[0] * null[0, i] + r[1] * null[1, i] + r[2] * null[2, i] for i in range(k)]
                wg = [w * gi for gi in g]
                hu = np.stack([np.sum(wg[i] * g[j], axis=0) for i, j in _UPPER[k]])
                v = np.stack([np.sum(wgi * b, axis=0) for wgi in wg])
            hi = _inv_sym_rows(hu, k)                                     # upper triangle of H^-1
            z = [sum(hi[_UIDX[k][i][j]] * v[j] for j in range(k)) for i in range(k)]
            tau = null @ np.stack(z)                           # (3, M)
            cov6 = self._cov_coef @ np.stack(hi)                          # (6, M): N H^-1 N^T
            eps = b - (r[0] * tau[0] + r[1] * tau[1] + r[2] * tau[2])
            if want_js:
                js = np.zeros((3, len(self._steered_idx), m))
                for e in np.flatnonzero(enc_t >= 0):
                    t = enc_t[e]
                    d0, d1, d2 = -sa[e], ca[e], ca[e] * xe[e] + sa[e] * ye[e]
                    dtau = d0 * tau[0] + d1 * tau[1] + d2 * tau[2]
                    we, ee = w[e], eps[e]
                    vec = (we * (ee * d0 - dtau * r[0][e]), we * (ee * d1 - dtau * r[1][e]),
                           we * (ee * d2 - dtau * r[2][e]))
                    for i in range(3):
                        js[i, t] = sum(cov6[_SYM6[i][j]] * vec[j] for j in range(3))
            return self._pack(tau, cov6, eps * np.sqrt(w), js)
        # one degree of freedom with steered standard wheels
        cp, sp = ct[self._ss_t], stn[self._ss_t]                          # (S, M) sliding rows' psi
        xs, ys = self.x[self._std_steered][:, None], self.y[self._std_steered][:, None]
        c2r = cp * xs + sp * ys
        a0 = self._f_a0
        a00 = a0[0] + np.sum(sp * sp, axis=0)
        a01 = a0[1] - np.sum(sp * cp, axis=0)
        a02 = a0[2] - np.sum(sp * c2r, axis=0)
        a11 = a0[3] + np.sum(cp * cp, axis=0)
        a12 = a0[4] + np.sum(cp * c2r, axis=0)
        a22 = a0[5] + np.sum(c2r * c2r, axis=0)
        n0, n1, n2, lam, sig, pi = _smallest_eigvec(a00, a01, a02, a11, a12, a22)
        g = r[0] * n0 + r[1] * n1 + r[2] * n2                           # (E, M)
        wg = w * g
        h = np.sum(wg * g, axis=0)
        h = np.where(h > _TINY, h, _TINY)
        ih = 1.0 / h
        z = np.sum(wg * b, axis=0) * ih
        tau = np.stack([n0 * z, n1 * z, n2 * z])
        cov6 = np.stack([n0 * n0 * ih, n0 * n1 * ih, n0 * n2 * ih, n1 * n1 * ih, n1 * n2 * ih, n2 * n2 * ih])
        resid = (b - g * z) * np.sqrt(w)
        if want_js:
            js = np.zeros((3, len(self._steered_idx), m))
            coef = w * (b - 2.0 * z * g)                                  # w_e (b_e - 2 z g_e)
            q0, q1, q2 = (np.sum(coef * r[i], axis=0) * ih for i in range(3))
            for e in np.flatnonzero(enc_t >= 0):                         # a steered encoder wheel's rolling row
                f = coef[e] * (-sa[e] * n0 + ca[e] * n1 + (ca[e] * xe[e] + sa[e] * ye[e]) * n2) * ih
                t = enc_t[e]
                js[0, t] += n0 * f
                js[1, t] += n1 * f
                js[2, t] += n2 * f
            # a steered standard wheel's sliding row c = (-sp, cp, c2r), dc/dpsi = (-cp, -sp, cp y - sp x)
            dc2 = cp * ys - sp * xs
            cn = -sp * n0 + cp * n1 + c2r * n2
            dcn = -cp * n0 - sp * n1 + dc2 * n2
            y0, y1, y2 = -cp * cn - sp * dcn, -sp * cn + cp * dcn, dc2 * cn + c2r * dcn
            # dn = -M^+ y: on the plane normal to n, M^-1 = (sigma I - M) / pi (Cayley-Hamilton)
            m00, m11, m22 = a00 - lam, a11 - lam, a22 - lam
            ipi = -1.0 / np.where(pi > _TINY, pi, _TINY)
            ny = n0 * y0 + n1 * y1 + n2 * y2
            d0 = (sig * (y0 - n0 * ny) - (m00 * y0 + a01 * y1 + a02 * y2)) * ipi
            d1 = (sig * (y1 - n1 * ny) - (a01 * y0 + m11 * y1 + a12 * y2)) * ipi
            d2 = (sig * (y2 - n2 * ny) - (a02 * y0 + a12 * y1 + m22 * y2)) * ipi
            f = q0 * d0 + q1 * d1 + q2 * d2
            js[0, self._ss_t] += z * d0 + n0 * f
            js[1, self._ss_t] += z * d1 + n1 * f
            js[2, self._ss_t] += z * d2 + n2 * f
        return self._pack(tau, cov6, resid, js)

    def _pack(self, tau, cov6, resid, js):
        """Wheel-major rows to the public shapes (M, 3), (M, 3, 3), (M, E), (M, 3, T), as views (no
        copy); the steering noise sd^2 J_s J_s^T is added to the covariance here."""
        if js is not None and self._f_sd2:
            j0, j1, j2 = js
            cov6 = cov6 + self._f_sd2 * np.stack([np.sum(j0 * j0, axis=0), np.sum(j0 * j1, axis=0),
                                                  np.sum(j0 * j2, axis=0), np.sum(j1 * j1, axis=0),
                                                  np.sum(j1 * j2, axis=0), np.sum(j2 * j2, axis=0)])
        c9 = cov6[[0, 1, 2, 1, 3, 4, 2, 4, 5]]
        return tau.T, np.moveaxis(c9.reshape(3, 3, -1), 2, 0), resid.T, \
            None if js is None else np.moveaxis(js, 2, 0)

    def step_floats(self, spin: Sequence[float], steer: Sequence[float] | None = None):
        """One step of ``solve`` in plain floats (the streaming estimator's hot path, no numpy):
        (dx, dy, dtheta, cov6, resid) with cov6 = (xx, xy, xt, yy, yt, tt) of the body increment's
        covariance and resid the E whitened residuals. Non-finite readings give NaNs (callers drop
        them before this point)."""
        n_e = self._f_e
        steer_table = self._f_steer
        if self._mode == "reference" or not math.isfinite(sum(spin) + (sum(steer) if steer_table else 0.0)):
            return self._step_floats_slow(spin, steer)
        floor = _ROBUST_FRACTION * (sum(map(abs, spin)) / n_e)
        if floor < 1e-12:
            floor = 1e-12
        w = [i2 / (k * (a if (a := abs(v)) > floor else floor) + 1e-30)
             for v, k, i2 in zip(spin, self._f_k, self._f_inv_s2)]
        b = spin if self._f_unit_scale else [v * sc for v, sc in zip(spin, self._f_scale)]   # (v * 1.0 is v)
        sd2 = self._f_sd2
        cos, sin = math.cos, math.sin
        if self._mode == "fixed":
            if not steer_table:                                  # no steering: the rows as they are
                return self._fixed_floats(self._f_rows0, (), w, b, sd2)
            rows = list(self._f_rows0)
            moved = []
            for (e, std, base, x, y, co, so), sv in zip(steer_table, steer or ()):
                if e >= 0:                                       # a steered roller wheel with an encoder
                    p = base + sv
                    cp, sp = cos(p), sin(p)
                    ca, sa = cp * co - sp * so, sp * co + cp * so
                    rows[e] = (ca, sa, sa * x - ca * y)
                    moved.append((e, (-sa, ca, ca * x + sa * y), None, None))
            return self._fixed_floats(rows, moved, w, b, sd2)
        rows = list(self._f_rows0)
        a00, a01, a02, a11, a12, a22 = self._f_a0
        trig = []
        for (e, std, base, x, y, co, so), sv in zip(steer_table, steer):
            p = base + sv
            cp = cos(p)
            sp = sin(p)
            c2 = 0.0
            if std:
                c2 = cp * x + sp * y
                a00 += sp * sp
                a01 -= sp * cp
                a02 -= sp * c2
                a11 += cp * cp
                a12 += cp * c2
                a22 += c2 * c2
                if e >= 0:
                    rows[e] = (cp, sp, sp * x - cp * y)
            elif e >= 0:
                ca, sa = cp * co - sp * so, sp * co + cp * so
                rows[e] = (ca, sa, sa * x - ca * y)
            trig.append((cp, sp, c2))
        n0, n1, n2, lam, sig, pi = _smallest_eigvec_floats(a00, a01, a02, a11, a12, a22)
        g = []
        h = pz = 0.0
        for (r0, r1, r2), we, be in zip(rows, w, b):
            ge = r0 * n0 + r1 * n1 + r2 * n2
            g.append(ge)
            wg = we * ge
            h += wg * ge
            pz += wg * be
        if not h > _TINY:
            h = _TINY
        ih = 1.0 / h
        z = pz * ih
        sqrt = math.sqrt
        cxx, cxy, cxt = n0 * n0 * ih, n0 * n1 * ih, n0 * n2 * ih
        cyy, cyt, ctt = n1 * n1 * ih, n1 * n2 * ih, n2 * n2 * ih
        if not sd2:
            resid = tuple([(be - ge * z) * sqrt(we) for ge, we, be in zip(g, w, b)])
        else:
            z2 = 2.0 * z
            res = []
            coef = []
            q0 = q1 = q2 = 0.0
            for (r0, r1, r2), ge, we, be in zip(rows, g, w, b):
                res.append((be - ge * z) * sqrt(we))
                ce = we * (be - z2 * ge)
                coef.append(ce)
                q0 += ce * r0
                q1 += ce * r1
                q2 += ce * r2
            resid = tuple(res)
            q0, q1, q2 = q0 * ih, q1 * ih, q2 * ih
            # a sliding row's turn moves n by dn = -P y, P = M^+ = (sigma (I - n n^T) - M) / pi, and tau by
            # z dn + n (q . dn) = L y with L = -(z P + n (P q)^T), once per step
            ipi = 1.0 / (pi if pi > _TINY else _TINY)
            p00 = (sig * (1.0 - n0 * n0) - a00 + lam) * ipi
            p11 = (sig * (1.0 - n1 * n1) - a11 + lam) * ipi
            p22 = (sig * (1.0 - n2 * n2) - a22 + lam) * ipi
            p01 = -(sig * n0 * n1 + a01) * ipi
            p02 = -(sig * n0 * n2 + a02) * ipi
            p12 = -(sig * n1 * n2 + a12) * ipi
            pq0 = p00 * q0 + p01 * q1 + p02 * q2
            pq1 = p01 * q0 + p11 * q1 + p12 * q2
            pq2 = p02 * q0 + p12 * q1 + p22 * q2
            l00, l01, l02 = -(z * p00 + n0 * pq0), -(z * p01 + n0 * pq1), -(z * p02 + n0 * pq2)
            l10, l11, l12 = -(z * p01 + n1 * pq0), -(z * p11 + n1 * pq1), -(z * p12 + n1 * pq2)
            l20, l21, l22 = -(z * p02 + n2 * pq0), -(z * p12 + n2 * pq1), -(z * p22 + n2 * pq2)
            for (e, std, base, x, y, co, so), (cp, sp, c2) in zip(steer_table, trig):
                if std:                                          # its sliding row turns and moves n
                    cn = cp * n1 - sp * n0 + c2 * n2
                    if e >= 0:                                   # the wheel's rolling row turns
                        # (its row is (cp, sp, .), so the factor below is cn: the same operations)
                        f = coef[e] * cn * ih
                        j0, j1, j2 = n0 * f, n1 * f, n2 * f
                    else:
                        j0 = j1 = j2 = 0.0
                    dc2 = cp * y - sp * x
                    dcn = dc2 * n2 - cp * n0 - sp * n1
                    y0, y1, y2 = -cp * cn - sp * dcn, cp * dcn - sp * cn, dc2 * cn + c2 * dcn
                    j0 += l00 * y0 + l01 * y1 + l02 * y2
                    j1 += l10 * y0 + l11 * y1 + l12 * y2
                    j2 += l20 * y0 + l21 * y1 + l22 * y2
                elif e >= 0:                                     # the wheel's rolling row turns
                    ca, sa, _ = rows[e]
                    f = coef[e] * (ca * n1 - sa * n0 + (ca * x + sa * y) * n2) * ih
                    j0, j1, j2 = n0 * f, n1 * f, n2 * f
                else:
                    j0 = j1 = j2 = 0.0
                s0, s1 = sd2 * j0, sd2 * j1
                cxx += s0 * j0
                cxy += s0 * j1
                cxt += s0 * j2
                cyy += s1 * j1
                cyt += s1 * j2
                ctt += sd2 * j2 * j2
        return n0 * z, n1 * z, n2 * z, (cxx, cxy, cxt, cyy, cyt, ctt), resid

    def _step_floats_slow(self, spin, steer):
        """``step_floats`` through ``solve`` (tables on the SVD path), or NaNs for non-finite readings."""
        finite = all(math.isfinite(v) for v in spin) and (not self._f_steer or all(math.isfinite(v) for v in steer))
        if not finite:
            nan = float("nan")
            return nan, nan, nan, (nan,) * 6, (nan,) * self._f_e
        tau, cov, resid = self.solve([list(spin)], None if not self._f_steer else [list(steer)])
        c = cov[0]
        return (float(tau[0, 0]), float(tau[0, 1]), float(tau[0, 2]),
                (float(c[0, 0]), float(c[0, 1]), float(c[0, 2]), float(c[1, 1]), float(c[1, 2]), float(c[2, 2])),
                tuple(float(v) for v in resid[0]))

    def _fixed_floats(self, rows, moved, w, b, sd2):
        """``step_floats`` with the sliding rows constant: a k x k solve in the fixed null space N."""
        null = self._f_null
        k = len(null[0])
        if self._f_g_fixed:
            g = self._f_g0
        else:
            g = [tuple(r[0] * null[0][i] + r[1] * null[1][i] + r[2] * null[2][i] for i in range(k)) for r in rows]
        if k == 3:
            h00 = h01 = h02 = h11 = h12 = h22 = v0 = v1 = v2 = 0.0
            for (g0, g1, g2), we, be in zip(g, w, b):
                a0, a1, wb = we * g0, we * g1, we * be
                h00 += a0 * g0
                h01 += a0 * g1
                h02 += a0 * g2
                h11 += a1 * g1
                h12 += a1 * g2
                h22 += we * g2 * g2
                v0 += wb * g0
                v1 += wb * g1
                v2 += wb * g2
            i00, i01, i02 = h11 * h22 - h12 * h12, h02 * h12 - h01 * h22, h01 * h12 - h02 * h11
            i11, i12, i22 = h00 * h22 - h02 * h02, h01 * h02 - h00 * h12, h00 * h11 - h01 * h01
            det = h00 * i00 + h01 * i01 + h02 * i02
            d = 1.0 / (det if abs(det) > _TINY else _TINY)
            hi = (i00 * d, i01 * d, i02 * d, i11 * d, i12 * d, i22 * d)
            z = (hi[0] * v0 + hi[1] * v1 + hi[2] * v2, hi[1] * v0 + hi[3] * v1 + hi[4] * v2,
                 hi[2] * v0 + hi[4] * v1 + hi[5] * v2)
        elif k == 2:
            h00 = h01 = h11 = v0 = v1 = 0.0
            for (g0, g1), we, be in zip(g, w, b):
                a0, wb = we * g0, we * be
                h00 += a0 * g0
                h01 += a0 * g1
                h11 += we * g1 * g1
                v0 += wb * g0
                v1 += wb * g1
            det = h00 * h11 - h01 * h01
            d = 1.0 / (det if abs(det) > _TINY else _TINY)
            hi = (h11 * d, -h01 * d, h00 * d)
            z = (hi[0] * v0 + hi[1] * v1, hi[1] * v0 + hi[2] * v1)
        else:
            h00 = v0 = 0.0
            for (g0,), we, be in zip(g, w, b):
                h00 += we * g0 * g0
                v0 += we * be * g0
            hi = (1.0 / (h00 if abs(h00) > _TINY else _TINY),)
            z = (hi[0] * v0,)
        if self._f_null_eye:
            tau, cov = z, hi
        else:
            tau = tuple(sum(nr[i] * z[i] for i in range(k)) for nr in null)
            cov = tuple(sum(cf[i] * hi[i] for i in range(len(hi))) for cf in self._f_cov_coef)
        t0, t1, t2 = tau
        sqrt = math.sqrt
        if not (sd2 and moved):
            resid = tuple([(be - (r0 * t0 + r1 * t1 + r2 * t2)) * sqrt(we)
                           for (r0, r1, r2), be, we in zip(rows, b, w)])
            return t0, t1, t2, tuple(cov), resid
        eps = [be - (r[0] * t0 + r[1] * t1 + r[2] * t2) for r, be in zip(rows, b)]
        resid = tuple([ee * sqrt(we) for ee, we in zip(eps, w)])
        cxx, cxy, cxt, cyy, cyt, ctt = cov
        if sd2:
            for e, dr, _, _ in moved:
                if dr is None:
                    continue
                r = rows[e]
                dt = dr[0] * t0 + dr[1] * t1 + dr[2] * t2
                we, ee = w[e], eps[e]
                u0, u1, u2 = we * (ee * dr[0] - dt * r[0]), we * (ee * dr[1] - dt * r[1]), we * (ee * dr[2] - dt * r[2])
                j0 = cov[0] * u0 + cov[1] * u1 + cov[2] * u2
                j1 = cov[1] * u0 + cov[3] * u1 + cov[4] * u2
                j2 = cov[2] * u0 + cov[4] * u1 + cov[5] * u2
                cxx += sd2 * j0 * j0
                cxy += sd2 * j0 * j1
                cxt += sd2 * j0 * j2
                cyy += sd2 * j1 * j1
                cyt += sd2 * j1 * j2
                ctt += sd2 * j2 * j2
        return t0, t1, t2, (cxx, cxy, cxt, cyy, cyt, ctt), resid

    def inverse(self, twist, dt_s):
        tw = np.asarray(twist, dtype=np.float64).reshape(-1, 3)
        dt = np.asarray(dt_s, dtype=np.float64).reshape(-1)
        vx = tw[:, 0:1] - tw[:, 2:3] * self.y
        vy = tw[:, 1:2] + tw[:, 2:3] * self.x
        psi = np.broadcast_to(self.mount, vx.shape).copy()
        steer = None
        if self.steered.any():
            moving = np.hypot(vx, vy) > 1e-12
            want = np.where(moving, np.arctan2(vy, vx), psi)
            rel = np.remainder(want - self.mount + 0.5 * math.pi, math.pi) - 0.5 * math.pi  # wheel may roll backwards
            psi = np.where(self.steered, self.mount + rel, psi)
            steer = (rel + self.offset)[:, self.steered]
        ang = psi + np.where(self.standard, 0.0, self.roller - 0.5 * math.pi)
        along = np.cos(ang) * vx + np.sin(ang) * vy
        scale = np.where(self.standard, 1.0, np.sin(self.roller))
        return (along / scale * dt[:, None])[:, self.spin], steer
