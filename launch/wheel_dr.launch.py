"""Launch file: starts wheel_dr_node (wheel odometry) in a namespace beside an existing navigation stack.

Arguments (all optional):
  namespace           namespace of the node and its relative topics (one per robot), default none
  params_file         wheel_dr parameters file, default <share>/wheel_dr/config/wheel_dr.yaml
  use_sim_time        true to follow /clock (bag playback, simulation), default false
  joint_states_topic  topic the wheel joint states arrive on, default joint_states (relative)
  imu_topic           optional IMU for the slip detectors, default imu (relative)

Example, two robots side by side:
  ros2 launch wheel_dr wheel_dr.launch.py namespace:=cart1 params_file:=/etc/robot/cart1_odom.yaml
  ros2 launch wheel_dr wheel_dr.launch.py namespace:=cart2 joint_states_topic:=/cart2/drive/joint_states

Odometry and slip flags are advisory inputs to navigation, not a safety function.
"""
from __future__ import annotations

from launch import LaunchDescription
from launch.actions import DeclareLaunchArgument
from launch.substitutions import LaunchConfiguration, PathJoinSubstitution
from launch_ros.actions import Node
from launch_ros.parameter_descriptions import ParameterValue
from launch_ros.substitutions import FindPackageShare

__all__ = ["generate_launch_description"]

PACKAGE = "wheel_dr"
EXECUTABLE = "wheel_dr_node"


def generate_launch_description() -> LaunchDescription:
    """The node with its parameters file, sim-time switch and input remaps as launch arguments."""
    arguments = [
        DeclareLaunchArgument(
            "namespace", default_value="",
            description="Namespace of the node and of its relative topics (odom, odom_flags, joint_states, imu)."),
        DeclareLaunchArgument(
            "params_file",
            default_value=PathJoinSubstitution([FindPackageShare(PACKAGE), "config", "wheel_dr.yaml"]),
            description="wheel_dr parameters file (the same file the offline analyser reads and calibration writes)."),
        DeclareLaunchArgument(
            "use_sim_time", default_value="false",
            description="Follow the /clock topic (bag playback or simulation) instead of the system clock."),
        DeclareLaunchArgument(
            "joint_states_topic", default_value="joint_states",
            description="Topic of the wheel joint states (sensor_msgs/JointState)."),
        DeclareLaunchArgument(
            "imu_topic", default_value="imu",
            description="Optional IMU topic (sensor_msgs/Imu) for the slip detectors."),
    ]
    node = Node(
        package=PACKAGE,
        executable=EXECUTABLE,
        name="wheel_dr_node",
        namespace=LaunchConfiguration("namespace"),
        parameters=[
            LaunchConfiguration("params_file"),
            {"use_sim_time": ParameterValue(LaunchConfiguration("use_sim_time"), value_type=bool)},
        ],
        remappings=[
            ("joint_states", LaunchConfiguration("joint_states_topic")),
            ("imu", LaunchConfiguration("imu_topic")),
        ],
        output="screen",
    )
    return LaunchDescription([*arguments, node])
