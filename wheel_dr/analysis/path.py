"""Planar paths for the analysis modules (the type lives in ``wheel_dr.core.path``)."""
from __future__ import annotations

from ..core.path import PlanarPath

__all__ = ["PlanarPath"]
