"""A run-time settings change in the node: new frames are laid out into the odometry it publishes.

The node is built in this process on the session's isolated DDS domain (test/conftest.py) and its
parameter callback is called directly, as rclpy would call it for a `ros2 param set`. Frames are
read-only through the ROS parameter interface; this checks the shell's own handling of a frames
change, which must compare the new frames with the ones in force before taking the new settings.
"""
from __future__ import annotations

import rclpy
from rclpy.parameter import Parameter

from wheel_dr.ros import node as node_mod


def test_changed_frames_reach_the_published_layout_and_unchanged_ones_keep_it() -> None:
    rclpy.init()
    try:
        shell = node_mod.create("wheel_dr_frames_check")
        try:
            writer = shell._writer
            assert b"base_link" in bytes(writer._odom)
            ok = shell._on_set_parameters([Parameter("noise.k_left", Parameter.Type.DOUBLE, 2e-4)])
            assert ok.successful
            assert shell._writer is writer                          # frames unchanged: same layout
            ok = shell._on_set_parameters([Parameter("frames.base", Parameter.Type.STRING, "cart7/base_link")])
            assert ok.successful, ok.reason
            assert shell.settings.frames.base == "cart7/base_link"
            assert shell._writer is not writer
            assert b"cart7/base_link" in bytes(shell._writer._odom)
        finally:
            shell.node.destroy_node()
    finally:
        rclpy.try_shutdown()
