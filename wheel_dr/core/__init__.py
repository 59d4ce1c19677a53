"""wheel_dr's estimator core: numpy and scipy only, no ROS, no bags, no file access."""
from __future__ import annotations

import importlib
from typing import Any

# Names are resolved on first use (PEP 562), so importing a light submodule such as
# ``wheel_dr.core.errors`` does not pull in numpy (``wheel-dr --help`` stays fast).
_EXPORTS = {
    "pose_covariance_6x6": "conventions", "planar_covariance_from_6x6": "conventions",
    "quaternion_to_yaw": "conventions", "twist_covariance_6x6": "conventions",
    "yaw_to_quaternion": "conventions",
    "InputError": "errors", "SettingsError": "errors", "WheelDrError": "errors",
    "Estimator": "estimator", "Trajectory": "estimator", "run": "estimator", "run_travel": "estimator",
    "UNOBSERVED_VARIANCE": "noise",
    "Settings": "settings",
    "JointSamples": "wheels", "SampleStatus": "wheels", "Travel": "wheels", "wheel_travel": "wheels",
}

__all__ = sorted(_EXPORTS)


def __getattr__(name: str) -> Any:
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'wheel_dr.core' has no attribute {name!r}")
    value = getattr(importlib.import_module(f"{__name__}.{module}"), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_EXPORTS))
