"""The demo cart "Quokka" (invented, demo-only numbers): joint names, geometry and its URDF text.

A leaf module (no wheel_dr imports): the simulator takes its defaults from here, the demo
scenarios and the tests take the cart from here.
"""
from __future__ import annotations

from typing import Sequence

__all__ = ["QUOKKA_JOINTS", "QUOKKA_SKID_JOINTS", "QUOKKA_NOMINAL_RADIUS_M", "QUOKKA_NOMINAL_TRACK_M",
           "QUOKKA_TRUE_LEFT_RADIUS_M", "QUOKKA_TRUE_RIGHT_RADIUS_M", "QUOKKA_TRUE_TRACK_M",
           "DEMO_START_STAMP_NS", "quokka_urdf"]

# The demo cart (invented numbers, demo only): nominal design values and the "true" ones
# (a worn tyre and a bent axle mount).
QUOKKA_JOINTS = ("quokka_left_wheel_joint", "quokka_right_wheel_joint")
QUOKKA_SKID_JOINTS = ("quokka_front_left_wheel_joint", "quokka_rear_left_wheel_joint",
                      "quokka_front_right_wheel_joint", "quokka_rear_right_wheel_joint")
QUOKKA_NOMINAL_RADIUS_M = 0.0825
QUOKKA_NOMINAL_TRACK_M = 0.412
QUOKKA_TRUE_LEFT_RADIUS_M = 0.0829
QUOKKA_TRUE_RIGHT_RADIUS_M = 0.0822
QUOKKA_TRUE_TRACK_M = 0.4185

DEMO_START_STAMP_NS = 1_800_000_000 * 1_000_000_000  # 2027-01-15 08:00 UTC, an arbitrary start


def quokka_urdf(left_radius_m: float = QUOKKA_NOMINAL_RADIUS_M, right_radius_m: float = QUOKKA_NOMINAL_RADIUS_M,
                track_width_m: float = QUOKKA_NOMINAL_TRACK_M,
                joint_names: Sequence[str] = QUOKKA_JOINTS, base_frame: str = "base_link",
                wheelbase_m: float = 0.3) -> str:
    """URDF text of the demo "Quokka" cart (invented): box body and two driven wheels with a caster, or,
    with four joint names (left front, left rear, right front, right rear), four skid-steer wheels
    ``wheelbase_m`` apart."""
    half = 0.5 * track_width_m
    if len(joint_names) not in (2, 4):
        raise ValueError("the Quokka URDF has two or four wheel joints.")

    def wheel(joint: str, link: str, y: float, radius: float, x: float = 0.0) -> str:
        return f"""  <link name="{link}">
    <visual><geometry><cylinder radius="{radius!r}" length="0.035"/></geometry></visual>
    <collision><geometry><cylinder radius="{radius!r}" length="0.035"/></geometry></collision>
    <inertial><mass value="0.6"/><inertia ixx="0.001" ixy="0" ixz="0" iyy="0.001" iyz="0" izz="0.002"/></inertial>
  </link>
  <joint name="{joint}" type="continuous">
    <parent link="{base_frame}"/>
    <child link="{link}"/>
    <origin xyz="{x!r} {y!r} 0" rpy="-1.5707963267948966 0 0"/>
    <axis xyz="0 0 1"/>
  </joint>
"""
    if len(joint_names) == 2:
        wheels = (wheel(joint_names[0], "quokka_left_wheel", half, left_radius_m)
                  + wheel(joint_names[1], "quokka_right_wheel", -half, right_radius_m)
                  + f"""  <link name="quokka_caster">
    <visual><geometry><sphere radius="0.03"/></geometry></visual>
  </link>
  <joint name="quokka_caster_joint" type="fixed">
    <parent link="{base_frame}"/>
    <child link="quokka_caster"/>
    <origin xyz="-0.22 0 -0.0525" rpy="0 0 0"/>
  </joint>
""")
    else:
        hw = 0.5 * wheelbase_m
        wheels = "".join(wheel(j, link, y, r, x) for j, link, y, r, x in (
            (joint_names[0], "quokka_front_left_wheel", half, left_radius_m, hw),
            (joint_names[1], "quokka_rear_left_wheel", half, left_radius_m, -hw),
            (joint_names[2], "quokka_front_right_wheel", -half, right_radius_m, hw),
            (joint_names[3], "quokka_rear_right_wheel", -half, right_radius_m, -hw)))
    return f"""<?xml version="1.0"?>
<!-- The "Quokka" delivery cart of the wheel_dr demo (invented; numbers are demo-only). -->
<robot name="quokka">
  <link name="{base_frame}">
    <visual><geometry><box size="0.55 0.36 0.25"/></geometry></visual>
    <collision><geometry><box size="0.55 0.36 0.25"/></geometry></collision>
    <inertial><mass value="18"/><inertia ixx="0.3" ixy="0" ixz="0" iyy="0.5" iyz="0" izz="0.6"/></inertial>
  </link>
{wheels}</robot>
"""
