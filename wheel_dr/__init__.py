"""wheel_dr: wheel odometry with honest covariance and slip flags for ROS 2 bases, live and offline."""
from __future__ import annotations

__all__ = ["__version__"]
__version__ = "0.1.0"
