"""Differential drive and skid steer behind the drive-model interface (the formulas of ``core.motion``).

ds = (ds_r + ds_l) / 2, dtheta = (ds_r - ds_l) / b, dy = 0 (Siegwart et al. 2011, sec. 5.2.4);
the per-wheel noise model gives each side's travel the variance k |ds| (Chong & Kleeman 1997).
The measurements are the two sides' travel (m): left, then right.
"""
from __future__ import annotations

import numpy as np

from ..settings import Settings
from .base import DriveModel

__all__ = ["DifferentialDrive"]


class DifferentialDrive(DriveModel):
    """Two sides, each the mean of its joints; ``track_width_m`` apart."""

    def __init__(self, track_width_m: float, left_joints=("left_wheel_joint",), right_joints=("right_wheel_joint",),
                 k_left: float = 5e-4, k_right: float = 5e-4) -> None:
        self.track_width_m = float(track_width_m)
        self.left_joints, self.right_joints = tuple(left_joints), tuple(right_joints)
        self.k_left, self.k_right = float(k_left), float(k_right)

    @classmethod
    def from_settings(cls, settings: Settings) -> "DifferentialDrive":
        """The model of a ``wheels.*`` / ``noise.*`` configuration."""
        w, n = settings.wheels, settings.noise
        return cls(w.track_width, w.left_joints, w.right_joints, n.k_left, n.k_right)

    def joint_roles(self) -> dict[str, str]:
        return {j: "spin" for j in self.left_joints + self.right_joints}

    def geometry(self) -> dict[str, object]:
        return {"wheels.track_width": self.track_width_m}

    def increment(self, spin_m, steer_rad=None) -> np.ndarray:
        s = np.asarray(spin_m, dtype=np.float64).reshape(-1, 2)
        out = np.zeros((len(s), 3))
        out[:, 0] = 0.5 * (s[:, 1] + s[:, 0])
        out[:, 2] = (s[:, 1] - s[:, 0]) / self.track_width_m
        return out

    def jacobian(self, spin_m, steer_rad=None) -> np.ndarray:
        m = len(np.asarray(spin_m).reshape(-1, 2))
        jac = np.zeros((m, 3, 2))
        jac[:, 0, :] = 0.5
        jac[:, 2, 0] = -1.0 / self.track_width_m
        jac[:, 2, 1] = 1.0 / self.track_width_m
        return jac

    def increment_covariance(self, spin_m, steer_rad=None) -> np.ndarray:
        s = np.asarray(spin_m, dtype=np.float64).reshape(-1, 2)
        var = np.column_stack([self.k_left * np.abs(s[:, 0]), self.k_right * np.abs(s[:, 1])])
        jac = self.jacobian(s)
        return (jac * var[:, None, :]) @ np.swapaxes(jac, 1, 2)

    def inverse(self, twist, dt_s):
        tw = np.asarray(twist, dtype=np.float64).reshape(-1, 3)
        dt = np.asarray(dt_s, dtype=np.float64).reshape(-1)
        half = 0.5 * self.track_width_m * tw[:, 2]
        return np.column_stack([(tw[:, 0] - half) * dt, (tw[:, 0] + half) * dt]), None
