"""Every exception type wheel_dr raises on purpose, in one place (each message is one sentence for a user).

The modules that raise them re-export them under their old homes (``wheel_dr.bags.reader.BagError``,
``wheel_dr.analysis.calibration.CalibrationError``, ...), so either import works.
"""
from __future__ import annotations

__all__ = ["WheelDrError", "CdrError", "SettingsError", "InputError", "UsageError", "BagError", "CalibrationError",
           "TruthError", "ExcitationError", "SquareTestError", "RosWorkspaceMissingError"]


class WheelDrError(Exception):
    """Base class of every error wheel_dr raises on purpose; its message is one sentence for a user."""


class SettingsError(WheelDrError, ValueError):
    """A parameter is missing, of the wrong type or outside its allowed range."""


class InputError(WheelDrError, ValueError):
    """Input data cannot be used as given (for example a configured joint is absent from every sample)."""


class UsageError(WheelDrError):
    """A command-line value is wrong."""


class BagError(InputError):
    """A bag cannot be opened or read, or lacks what is asked of it."""


class CalibrationError(InputError):
    """Calibration cannot proceed with the data given; the message names what to record or drive."""


class TruthError(CalibrationError):
    """Ground truth is missing, too sparse or does not overlap the joint states."""


class ExcitationError(CalibrationError):
    """The drive does not excite the parameters enough to fit them (too short, too straight, one-sided)."""


class SquareTestError(InputError):
    """The square-test input cannot be used (bad CSV, a direction missing, a bad side length)."""


class RosWorkspaceMissingError(WheelDrError, FileNotFoundError):
    """The local interface workspace (tf2_msgs in .ros_ws/install) has not been built."""


class CdrError(WheelDrError, ValueError):
    """A serialised message is not a well-formed CDR message of the expected type."""
