"""The drive simulators behind the synthetic bags and the demo: pure numpy, no ROS, no I/O.

Differential bases in ``drive``; any wheel table (tricycle, car-like, mecanum, omni, swerve) in ``table``.

Ready-made scenarios (the demo round, squares, varied drives) live in ``wheel_dr.demo.scenarios``.
"""
from __future__ import annotations

from .drive import MOVING_MPS, SimResult, segment_duration, segment_times, simulate
from .table import TableScenario, TableSimResult, TwistLeg, WheelSlip, simulate_table
from .scenario import (DEMO_START_STAMP_NS, QUOKKA_JOINTS, QUOKKA_NOMINAL_RADIUS_M, QUOKKA_NOMINAL_TRACK_M,
                       QUOKKA_TRUE_LEFT_RADIUS_M, QUOKKA_TRUE_RIGHT_RADIUS_M, QUOKKA_TRUE_TRACK_M, FloorPatch,
                       HeldEvent, Incline, RadiusChange, Scenario, Segment, SlipEvent, arc, pause, straight, turn_in_place, waypoint_route)

__all__ = [
    "Scenario", "Segment", "SlipEvent", "FloorPatch", "HeldEvent", "Incline", "RadiusChange", "straight", "arc", "turn_in_place", "pause",
    "waypoint_route", "simulate", "SimResult", "segment_times", "segment_duration", "MOVING_MPS", "QUOKKA_JOINTS",
    "QUOKKA_NOMINAL_RADIUS_M", "QUOKKA_NOMINAL_TRACK_M", "QUOKKA_TRUE_LEFT_RADIUS_M",
    "QUOKKA_TRUE_RIGHT_RADIUS_M", "QUOKKA_TRUE_TRACK_M", "DEMO_START_STAMP_NS",
    "TableScenario", "TableSimResult", "TwistLeg", "WheelSlip", "simulate_table",
]
