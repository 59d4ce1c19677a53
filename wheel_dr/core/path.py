"""A planar path (stamped x, y, yaw): the form ground truth and estimates take for comparison."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .motion import wrap_angle

__all__ = ["PlanarPath"]


@dataclass
class PlanarPath:
    """Stamped planar poses: stamp_ns (N,) int64 increasing, x_m, y_m, yaw_rad (N,) in one frame."""

    stamp_ns: np.ndarray
    x_m: np.ndarray
    y_m: np.ndarray
    yaw_rad: np.ndarray
    frame_id: str = ""

    def __len__(self) -> int:
        return int(len(self.stamp_ns))

    @property
    def t_s(self) -> np.ndarray:
        """Stamps in seconds."""
        return np.asarray(self.stamp_ns) * 1e-9

    def interpolate(self, stamp_ns: np.ndarray) -> "PlanarPath":
        """Poses at ``stamp_ns`` by linear interpolation (yaw through its unwrapped form); stamps
        outside this path's span get NaN."""
        t = np.asarray(stamp_ns, dtype=np.int64)
        base = np.asarray(self.stamp_ns, dtype=np.int64)
        tq = (t - base[0]).astype(np.float64)
        tb = (base - base[0]).astype(np.float64)
        inside = (t >= base[0]) & (t <= base[-1])
        unwrapped = np.unwrap(self.yaw_rad)
        out = [np.where(inside, np.interp(tq, tb, v), np.nan) for v in (self.x_m, self.y_m, unwrapped)]
        return PlanarPath(t, out[0], out[1], wrap_angle(out[2]), self.frame_id)

    @classmethod
    def from_trajectory(cls, traj) -> "PlanarPath":
        """The path of an estimator Trajectory."""
        return cls(traj.stamp_ns, traj.x_m, traj.y_m, traj.yaw_rad)
