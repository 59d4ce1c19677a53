"""Drive models: the geometry of a wheeled base as one pluggable part of the core.

``base.DriveModel`` is the interface; ``differential.DifferentialDrive`` is today's two-sided base
(skid steer included) behind it; ``table.WheelTable`` is any planar wheeled base given as a table
of wheels (tricycle, car-like, mecanum, omni, swerve or custom).
"""
from __future__ import annotations

from .base import DriveModel, integrate_body
from .differential import DifferentialDrive
from .table import DRIVE_KINDS, WheelTable

__all__ = ["DriveModel", "DifferentialDrive", "WheelTable", "DRIVE_KINDS", "integrate_body"]
