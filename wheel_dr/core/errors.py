"""Exception types of the estimator core."""
from __future__ import annotations

__all__ = ["WheelDrError", "SettingsError", "InputError"]


class WheelDrError(Exception):
    """Base class of every error wheel_dr raises on purpose; its message is one sentence for a user."""


class SettingsError(WheelDrError, ValueError):
    """A parameter is missing, of the wrong type or outside its allowed range."""


class InputError(WheelDrError, ValueError):
    """Input data cannot be used as given (for example a configured joint is absent from every sample)."""
