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
steering readings (J_s by central differences of the same solution).

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


def _rot_rows(angle: np.ndarray, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Rows g . A_i of unit vectors g at ``angle`` acting on tau: (gx, gy, -gx y + gy x), shape (..., 3)."""
    gx, gy = np.cos(angle), np.sin(angle)
    return np.stack([gx, gy, gy * x - gx * y], axis=-1)


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
            st = np.asarray(steer, dtype=np.float64).reshape(m, -1)
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
        return self._solve(spin_m, steer_rad)[0]

    def jacobian(self, spin_m, steer_rad=None) -> np.ndarray:
        _, null, h_inv, g, w, scale, _, _ = self._solve(spin_m, steer_rad)
        return null @ h_inv @ np.swapaxes(g * (w * scale)[:, :, None], 1, 2)

    def steer_jacobian(self, spin_m, steer_rad) -> np.ndarray:
        """(M, 3, T) d increment / d steering readings, central differences with the weights held."""
        s = np.asarray(spin_m, dtype=np.float64).reshape(-1, int(self.spin.sum()))
        st = np.asarray(steer_rad, dtype=np.float64).reshape(len(s), -1)
        var = self.spin_variance(s)
        out = np.zeros((len(s), 3, st.shape[1]))
        for t in range(st.shape[1]):
            up, dn = st.copy(), st.copy()
            up[:, t] += _FD_STEP_RAD
            dn[:, t] -= _FD_STEP_RAD
            out[:, :, t] = (self._solve(s, up, var)[0] - self._solve(s, dn, var)[0]) / (2 * _FD_STEP_RAD)
        return out

    def increment_covariance(self, spin_m, steer_rad=None) -> np.ndarray:
        _, null, h_inv, _, _, _, _, _ = self._solve(spin_m, steer_rad)
        cov = null @ h_inv @ np.swapaxes(null, 1, 2)
        if self.steered.any() and self.steer_sd_rad > 0:
            js = self.steer_jacobian(spin_m, steer_rad)
            cov = cov + self.steer_sd_rad ** 2 * js @ np.swapaxes(js, 1, 2)
        return cov

    def residual(self, spin_m, steer_rad=None) -> np.ndarray:
        """(M, E) whitened residuals (b - R tau) sqrt(w) of the encoder wheels' rolling equations."""
        tau, _, _, _, w, _, rows, b = self._solve(spin_m, steer_rad)
        return (b - np.einsum("mei,mi->me", rows, tau)) * np.sqrt(w)

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
