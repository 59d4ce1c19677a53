"""wheel_dr's estimator core: numpy and scipy only, no ROS, no bags, no file access."""
from __future__ import annotations

from .conventions import (pose_covariance_6x6, planar_covariance_from_6x6, quaternion_to_yaw,
                          twist_covariance_6x6, yaw_to_quaternion)
from .errors import InputError, SettingsError, WheelDrError
from .estimator import Estimator, Trajectory, run, run_travel
from .noise import UNOBSERVED_VARIANCE
from .settings import Settings
from .wheels import JointSamples, SampleStatus, Travel, wheel_travel

__all__ = [
    "Estimator", "Trajectory", "run", "run_travel", "Settings", "SettingsError", "InputError",
    "WheelDrError", "JointSamples", "SampleStatus", "Travel", "wheel_travel", "UNOBSERVED_VARIANCE",
    "yaw_to_quaternion", "quaternion_to_yaw", "pose_covariance_6x6", "twist_covariance_6x6",
    "planar_covariance_from_6x6",
]
