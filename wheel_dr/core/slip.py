"""Slip and encoder-fault detection on wheel increments (placeholder: no detector yet, never flags).

Interface used by the estimator (batch and streaming forms must agree):

* ``detect_slip(travel, gyro_z_radps, settings) -> SlipResult`` (gyro per accepted sample or None)
* ``SlipMonitor(settings).step(tracker, status, dt_s, ds_left_m, ds_right_m, gyro_z_radps) -> SlipStep``
  (``tracker.joint_travel_m`` holds the per-joint travel of the step)
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .settings import Settings
from .wheels import SampleStatus, Travel, TravelTracker

__all__ = ["SlipResult", "SlipStep", "detect_slip", "SlipMonitor"]


@dataclass
class SlipResult:
    """Per accepted sample: flags, score, and what the response changes."""

    slip: np.ndarray           # (M,) bool, any side slipping
    left: np.ndarray           # (M,) bool
    right: np.ndarray          # (M,) bool
    detector: np.ndarray       # (M,) int bit mask of the detectors that fired
    score: np.ndarray          # (M,) float
    dtheta_rad: np.ndarray | None = None   # replacement heading increments, or None
    noise_scale: np.ndarray | None = None  # factor on the step noise Q, or None


@dataclass
class SlipStep:
    """One sample's slip outcome (streaming)."""

    slip: bool = False
    left: bool = False
    right: bool = False
    detector: int = 0
    score: float = 0.0
    dtheta_rad: float | None = None
    noise_scale: float = 1.0


def detect_slip(travel: "Travel", gyro_z_radps: np.ndarray | None, settings: Settings) -> SlipResult:
    """Run the slip detectors over a whole run."""
    m = len(travel.dt_s)
    no = np.zeros(m, dtype=bool)
    return SlipResult(no, no.copy(), no.copy(), np.zeros(m, dtype=np.int64), np.zeros(m))


class SlipMonitor:
    """Streaming form of ``detect_slip``."""

    def __init__(self, settings: Settings) -> None:
        self.settings = settings

    def reset(self) -> None:
        """Forget detector state."""

    def step(self, tracker: "TravelTracker", status: SampleStatus, dt_s: float, ds_left_m: float,
             ds_right_m: float, gyro_z_radps: float | None) -> SlipStep:
        """One sample."""
        return SlipStep()
