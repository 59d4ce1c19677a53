"""ROS 2 shell of wheel_dr: the node, message conversion and process environments (rclpy is imported only by the node)."""
from __future__ import annotations

__all__: list[str] = []
