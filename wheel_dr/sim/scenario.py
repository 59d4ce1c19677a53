"""Drive scenarios for the simulator: route segments, true and nominal geometry, noise, slip events.

Everything here is plain data (frozen dataclasses). A scenario says what the base really does
(the route, driven with the *true* geometry) and how its sensors misreport it (wheel random
error, slip, gyro bias and noise). ``wheel_dr.sim.simulate`` turns it into arrays.

Units are SI (REP 103): metres, radians, seconds; yaw counter-clockwise positive, body x forward,
y left. The demo numbers (the "Quokka" cart in the "Ferncliff Seed Bank") are invented.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Sequence

import numpy as np

__all__ = [
    "Segment",
    "straight",
    "arc",
    "turn_in_place",
    "pause",
    "SlipEvent",
    "FloorPatch",
    "HeldEvent",
    "Incline",
    "RadiusChange",
    "Scenario",
    "QUOKKA_JOINTS",
    "QUOKKA_SKID_JOINTS",
    "QUOKKA_NOMINAL_RADIUS_M",
    "QUOKKA_NOMINAL_TRACK_M",
    "QUOKKA_TRUE_LEFT_RADIUS_M",
    "QUOKKA_TRUE_RIGHT_RADIUS_M",
    "QUOKKA_TRUE_TRACK_M",
    "DEMO_START_STAMP_NS",
    "waypoint_route",
]

from ..demo.quokka import (DEMO_START_STAMP_NS, QUOKKA_JOINTS, QUOKKA_NOMINAL_RADIUS_M, QUOKKA_NOMINAL_TRACK_M,
                           QUOKKA_SKID_JOINTS, QUOKKA_TRUE_LEFT_RADIUS_M, QUOKKA_TRUE_RIGHT_RADIUS_M,
                           QUOKKA_TRUE_TRACK_M)

SEGMENT_KINDS = ("straight", "arc", "turn", "pause")
SLIP_KINDS = ("spin", "drag")
SLIP_SIDES = ("left", "right", "both")


@dataclass(frozen=True)
class Segment:
    """One piece of route with constant curvature.

    * ``straight``: ``length_m`` (negative drives backwards) at ``speed_mps``;
    * ``arc``: turn by ``angle_rad`` (positive = left, counter-clockwise) on a circle of
      ``radius_m`` (> 0, of the base centre) at ``speed_mps`` along the arc;
    * ``turn``: turn on the spot by ``angle_rad`` at ``turn_rate_radps``;
    * ``pause``: stand still for ``duration_s``.

    ``speed_mps`` / ``turn_rate_radps`` are peak magnitudes; the scenario's acceleration limits
    shape a trapezoidal profile from rest to rest (or constant speed when they are 0).
    """

    kind: str
    length_m: float = 0.0
    angle_rad: float = 0.0
    radius_m: float = 0.0
    speed_mps: float = 0.5
    turn_rate_radps: float = 0.8
    duration_s: float = 0.0

    def __post_init__(self) -> None:
        if self.kind not in SEGMENT_KINDS:
            raise ValueError(f"segment kind '{self.kind}' is not one of {', '.join(SEGMENT_KINDS)}.")
        if self.kind == "arc" and not self.radius_m > 0:
            raise ValueError("an arc segment needs radius_m > 0 (use kind 'turn' to turn on the spot).")
        if self.kind in ("straight", "arc") and not self.speed_mps > 0:
            raise ValueError("segment speed_mps must be > 0.")
        if self.kind == "turn" and not self.turn_rate_radps > 0:
            raise ValueError("segment turn_rate_radps must be > 0.")
        if self.kind == "pause" and not self.duration_s >= 0:
            raise ValueError("pause duration_s must be >= 0.")

    @property
    def extent(self) -> float:
        """Length of the progress variable: metres (straight, arc) or radians (turn); 0 for a pause."""
        if self.kind == "straight":
            return abs(self.length_m)
        if self.kind == "arc":
            return abs(self.angle_rad) * self.radius_m
        if self.kind == "turn":
            return abs(self.angle_rad)
        return 0.0


def straight(length_m: float, speed_mps: float = 0.5) -> Segment:
    """Drive ``length_m`` straight ahead (negative: backwards)."""
    return Segment("straight", length_m=length_m, speed_mps=speed_mps)


def arc(angle_rad: float, radius_m: float, speed_mps: float = 0.4) -> Segment:
    """Turn by ``angle_rad`` (positive left) on a circle of ``radius_m``."""
    return Segment("arc", angle_rad=angle_rad, radius_m=radius_m, speed_mps=speed_mps)


def turn_in_place(angle_rad: float, turn_rate_radps: float = 0.8) -> Segment:
    """Turn on the spot by ``angle_rad`` (positive left)."""
    return Segment("turn", angle_rad=angle_rad, turn_rate_radps=turn_rate_radps)


def pause(duration_s: float) -> Segment:
    """Stand still for ``duration_s``."""
    return Segment("pause", duration_s=duration_s)


@dataclass(frozen=True)
class SlipEvent:
    """Slip placed by time: from ``start_s`` (since the first sample) for ``duration_s``.

    ``kind`` 'spin': the wheel turns faster than the ground moves under it (encoder over-reads);
    'drag': slower (encoder under-reads). ``slip_ratio`` s in [0, 0.95] uses the common-practice
    longitudinal slip ratio s = |r w - v| / max(|r w|, |v|): spin r w = v / (1 - s),
    drag r w = v (1 - s). ``ramp_s`` > 0 makes the ratio rise linearly from 0 over that long
    after the start (a wheel spinning up); 0 steps it at once. With several joints per side
    (skid steer), ``joint`` picks one of them (0 = front) and None means all of the side.
    """

    start_s: float
    duration_s: float
    side: str = "left"
    kind: str = "spin"
    slip_ratio: float = 0.3
    ramp_s: float = 0.0
    joint: int | None = None

    def __post_init__(self) -> None:
        _check_slip(self.side, self.kind, self.slip_ratio)
        if self.ramp_s < 0:
            raise ValueError("ramp_s must be >= 0.")


@dataclass(frozen=True)
class FloorPatch:
    """Slip placed by a floor patch: an axis-aligned rectangle in the odom frame (metres).

    A wheel slips (``kind``, ``slip_ratio`` as in ``SlipEvent``) while its contact point is inside;
    ``ramp_s`` > 0 makes the ratio rise linearly over that long after the wheel enters.
    """

    x_min_m: float
    x_max_m: float
    y_min_m: float
    y_max_m: float
    kind: str = "spin"
    slip_ratio: float = 0.3
    name: str = "patch"
    ramp_s: float = 0.0

    def __post_init__(self) -> None:
        _check_slip("both", self.kind, self.slip_ratio)
        if self.ramp_s < 0:
            raise ValueError("ramp_s must be >= 0.")
        if not (self.x_max_m > self.x_min_m and self.y_max_m > self.y_min_m):
            raise ValueError("a floor patch needs x_max_m > x_min_m and y_max_m > y_min_m.")


@dataclass(frozen=True)
class HeldEvent:
    """The base is held from ``start_s`` for ``duration_s`` (pushing against an obstacle, or lifted):
    it does not move while its wheels turn at ``speed_mps`` (both sides alike, the commanded speed;
    reached from the base's speed at the onset over ``ramp_s``). The route pauses and resumes after
    the event, so the run is that much longer. The samples are labelled as slip of kind 'held'.
    """

    start_s: float
    duration_s: float
    speed_mps: float
    ramp_s: float = 0.0

    def __post_init__(self) -> None:
        if not self.duration_s > 0 or self.ramp_s < 0:
            raise ValueError("a held event needs duration_s > 0 and ramp_s >= 0.")


@dataclass(frozen=True)
class Incline:
    """A slope driven over from ``start_s`` for ``duration_s``: the base pitches nose-up by
    ``angle_rad`` (negative: downhill), blended in and out over ``ramp_s``. Only the IMU sees it
    (gravity's share in the accelerometer, the orientation); the planar route is unchanged."""

    start_s: float
    duration_s: float
    angle_rad: float
    ramp_s: float = 0.5

    def __post_init__(self) -> None:
        if not self.duration_s > 0 or self.ramp_s < 0 or abs(self.angle_rad) >= math.pi / 2:
            raise ValueError("an incline needs duration_s > 0, ramp_s >= 0 and |angle_rad| < pi/2.")


@dataclass(frozen=True)
class RadiusChange:
    """A wheel's true rolling radius changes by ``fraction`` (-0.015: 1.5 % smaller, a softening tyre)
    from ``start_s`` (since the first sample), linearly over ``ramp_s`` (0: at once). The encoders
    turn by ground travel over the radius at each step; the nominal geometry is unchanged."""

    start_s: float
    side: str = "left"
    fraction: float = -0.015
    ramp_s: float = 0.0

    def __post_init__(self) -> None:
        if self.side not in ("left", "right", "both"):
            raise ValueError(f"radius change side '{self.side}' is not one of left, right, both.")
        if not (-0.5 < self.fraction < 0.5) or self.ramp_s < 0:
            raise ValueError("a radius change needs -0.5 < fraction < 0.5 and ramp_s >= 0.")


def _check_slip(side: str, kind: str, ratio: float) -> None:
    if side not in SLIP_SIDES:
        raise ValueError(f"slip side '{side}' is not one of {', '.join(SLIP_SIDES)}.")
    if kind not in SLIP_KINDS:
        raise ValueError(f"slip kind '{kind}' is not one of {', '.join(SLIP_KINDS)}.")
    if not 0.0 <= ratio <= 0.95:
        raise ValueError(f"slip_ratio {ratio} is outside [0, 0.95].")


@dataclass(frozen=True)
class Scenario:
    """A complete simulated drive (see the module docstring). Units in the field names.

    Geometry: ``true_*`` is what the base really has (it moves the base and turns the wheels);
    ``nominal_*`` is the design value, written to the URDF and to nominal parameter files.
    Random wheel error: each step's measured travel of a wheel is its true travel plus zero-mean
    Gaussian noise of variance ``k_*_m`` * |travel| (the core's ``per_wheel`` model; 0 = none).
    Gyro: z rate = true yaw rate + ``gyro_bias_radps`` + white noise of standard deviation
    ``gyro_noise_sd_radps`` per sample. Accelerometer at ``imu_position_m`` (x, y, z in base_link):
    the specific force of that point (each reading the mean over the step ending at it) plus
    ``accel_bias_mps2`` on x and white noise ``accel_noise_sd_mps2`` per axis; ``inclines`` pitch
    the base, ``held_events`` hold it while its wheels turn. The command (cmd_vel) is the route's
    planned speed (the held events' speed while held). ``radius_changes`` change a side's true radius
    during the drive (the ``true_*_radius_m`` are the radii at the start). ``accel_mps2`` / ``accel_radps2`` limit the speed ramps
    (0 = speed changes instantly, segments at constant speed).
    Skid steer: ``joints_per_side`` 2 gives a front and a rear wheel on each side, ``wheelbase_m`` apart,
    all of a side driven alike (the ideal skid-steer kinematics with the true track as effective
    track); ``joint_names`` then lists the left joints (front first), then the right ones.
    """

    name: str
    segments: tuple[Segment, ...]
    rate_hz: float = 100.0
    true_left_radius_m: float = QUOKKA_TRUE_LEFT_RADIUS_M
    true_right_radius_m: float = QUOKKA_TRUE_RIGHT_RADIUS_M
    true_track_m: float = QUOKKA_TRUE_TRACK_M
    nominal_left_radius_m: float = QUOKKA_NOMINAL_RADIUS_M
    nominal_right_radius_m: float = QUOKKA_NOMINAL_RADIUS_M
    nominal_track_m: float = QUOKKA_NOMINAL_TRACK_M
    k_left_m: float = 0.0
    k_right_m: float = 0.0
    slip_events: tuple[SlipEvent, ...] = ()
    floor_patches: tuple[FloorPatch, ...] = ()
    gyro_bias_radps: float = 0.0
    gyro_noise_sd_radps: float = 0.0
    accel_bias_mps2: float = 0.0
    accel_noise_sd_mps2: float = 0.0
    imu_position_m: tuple[float, float, float] = (0.0, 0.0, 0.0)
    held_events: tuple[HeldEvent, ...] = ()
    inclines: tuple[Incline, ...] = ()
    accel_mps2: float = 0.5
    accel_radps2: float = 1.5
    start_pose: tuple[float, float, float] = (0.0, 0.0, 0.0)
    start_stamp_ns: int = DEMO_START_STAMP_NS
    lead_in_s: float = 1.0
    joint_names: tuple[str, ...] = QUOKKA_JOINTS
    joints_per_side: int = 1
    wheelbase_m: float = 0.3
    description: str = ""
    extra: dict = field(default_factory=dict, compare=False)
    radius_changes: tuple[RadiusChange, ...] = ()

    def __post_init__(self) -> None:
        if not self.segments:
            raise ValueError("a scenario needs at least one segment.")
        if not self.rate_hz > 0:
            raise ValueError("rate_hz must be > 0.")
        for name in ("true_left_radius_m", "true_right_radius_m", "true_track_m", "nominal_left_radius_m",
                     "nominal_right_radius_m", "nominal_track_m"):
            if not getattr(self, name) > 0:
                raise ValueError(f"{name} must be > 0.")
        if self.k_left_m < 0 or self.k_right_m < 0 or self.gyro_noise_sd_radps < 0:
            raise ValueError("noise levels must be >= 0.")
        if self.joints_per_side not in (1, 2):
            raise ValueError("joints_per_side must be 1 or 2.")
        if self.joints_per_side == 2 and tuple(self.joint_names) == QUOKKA_JOINTS:
            object.__setattr__(self, "joint_names", QUOKKA_SKID_JOINTS)
        if len(self.joint_names) != 2 * self.joints_per_side or len(set(self.joint_names)) != len(self.joint_names):
            raise ValueError(f"joint_names needs {2 * self.joints_per_side} different names (left side first).")
        for ev in self.slip_events:
            if ev.joint is not None and not 0 <= ev.joint < self.joints_per_side:
                raise ValueError(f"slip event joint {ev.joint} is not one of the {self.joints_per_side} joints of a side.")

    @property
    def left_joints(self) -> tuple[str, ...]:
        """Joint names of the left side."""
        return tuple(self.joint_names[:self.joints_per_side])

    @property
    def right_joints(self) -> tuple[str, ...]:
        """Joint names of the right side."""
        return tuple(self.joint_names[self.joints_per_side:])

    def with_values(self, **changes) -> "Scenario":
        """A copy with some fields changed (``dataclasses.replace``)."""
        return replace(self, **changes)

    @property
    def nominal_params(self) -> dict[str, object]:
        """Dotted wheel_dr parameters for the nominal geometry and this scenario's joints."""
        return {"wheels.left_joints": list(self.left_joints), "wheels.right_joints": list(self.right_joints),
                "wheels.left_radius": self.nominal_left_radius_m, "wheels.right_radius": self.nominal_right_radius_m,
                "wheels.track_width": self.nominal_track_m}

    @property
    def true_params(self) -> dict[str, object]:
        """Dotted wheel_dr parameters for the true geometry (what a perfect calibration finds)."""
        return {"wheels.left_joints": list(self.left_joints), "wheels.right_joints": list(self.right_joints),
                "wheels.left_radius": self.true_left_radius_m, "wheels.right_radius": self.true_right_radius_m,
                "wheels.track_width": self.true_track_m}


def waypoint_route(points_xy: Sequence[tuple[float, float]], start_yaw_rad: float = 0.0,
                   speed_mps: float = 0.5, corner_radius_m: float = 0.0,
                   turn_rate_radps: float = 0.8) -> tuple[Segment, ...]:
    """Segments that drive through ``points_xy`` in order, starting at the first point.

    At each corner the base turns on the spot (``corner_radius_m`` 0) or, if > 0, the straight runs
    are shortened and joined by an arc of that radius (which must fit in both neighbouring runs).
    """
    pts = np.asarray(points_xy, dtype=np.float64)
    if len(pts) < 2:
        raise ValueError("a waypoint route needs at least two points.")
    d = np.diff(pts, axis=0)
    lengths = np.hypot(d[:, 0], d[:, 1])
    if np.any(lengths <= 0):
        raise ValueError("consecutive waypoints must differ.")
    headings = np.arctan2(d[:, 1], d[:, 0])
    turns = [math.remainder(headings[0] - start_yaw_rad, 2 * math.pi)]
    turns += [math.remainder(headings[i] - headings[i - 1], 2 * math.pi) for i in range(1, len(headings))]
    cut = [corner_radius_m * abs(math.tan(t / 2)) if corner_radius_m > 0 else 0.0 for t in turns]
    segs: list[Segment] = []
    for i, length in enumerate(lengths):
        if abs(turns[i]) > 1e-12:
            if i == 0 or corner_radius_m <= 0:
                segs.append(turn_in_place(turns[i], turn_rate_radps))
            else:
                segs.append(arc(turns[i], corner_radius_m, min(speed_mps, 0.4)))
        before = cut[i] if i > 0 else 0.0
        after = cut[i + 1] if i + 1 < len(lengths) else 0.0
        run = length - before - after
        if run < -1e-9:
            raise ValueError(f"corner radius {corner_radius_m} m does not fit between waypoints {i} and {i + 1}.")
        if run > 1e-9:
            segs.append(straight(run, speed_mps))
    return tuple(segs)
