"""Ready-made scenarios: the demo night round, UMBmark squares and a long varied drive (invented demo data).

The demo is set in our invented scenario: the "Quokka" delivery cart on its night round through
the aisles of the "Ferncliff Seed Bank" vault, crossing a freshly mopped patch by the cold-room
door where the wheels spin. All numbers are demo-only.
"""
from __future__ import annotations

import math

import numpy as np

from ..sim.drive import segment_duration, segment_times
from ..sim.scenario import (FloorPatch, RadiusChange, Scenario, Segment, SlipEvent, arc, pause, straight,
                            turn_in_place, waypoint_route)

__all__ = ["demo_scenario", "softening_round_scenario", "SOFTENING_FRACTION", "square_scenario", "varied_drive_scenario", "varied_route", "DEMO_SEED",
           "COLD_ROOM_PATCH", "DEMO_IMU_POSITION_M"]

DEMO_SEED = 2027
DEMO_IMU_POSITION_M = (0.12, 0.0, 0.18)   # the Quokka's IMU: on the electronics tray, ahead of the axle

# The mopped patch by the cold-room door, at the far corridor past the third aisle (odom frame, m).
COLD_ROOM_PATCH = FloorPatch(15.2, 16.8, 2.0, 4.4, kind="spin", slip_ratio=0.25, name="mopped patch by the cold-room door")

_AISLE_LOOP = [(0.0, 0.0), (14.0, 0.0), (14.0, 2.4), (0.0, 2.4), (0.0, 4.8), (16.0, 4.8),
               (16.0, -1.5), (-1.5, -1.5), (-1.5, 0.0), (0.0, 0.0)]


def demo_scenario(rate_hz: float = 100.0, laps: int = 1) -> Scenario:
    """The Quokka's night round: serpentine through three aisles, back along the side corridors.

    About 75 m a lap with rounded corners (0.6 m radius arcs, left and right), a turn about on
    the spot at the end; the cart crosses the mopped patch (wheels spin) on a corner and the
    straight after it; a wheel drags twice (a caught packing strap): once in an arc, once on a
    straight. True geometry differs from nominal (worn tyre, bent axle mount); gyro and accelerometer
    with bias, the IMU mounted ``DEMO_IMU_POSITION_M`` from base_link.
    """
    segs: list[Segment] = []
    for _ in range(laps):
        segs += list(waypoint_route(_AISLE_LOOP, speed_mps=0.6, corner_radius_m=0.6))
    segs += [pause(2.0), turn_in_place(math.pi, 0.7), pause(2.0)]
    base = Scenario(name="ferncliff_night_round", segments=tuple(segs), rate_hz=rate_hz,
                    k_left_m=2e-5, k_right_m=2e-5, gyro_bias_radps=0.0015, gyro_noise_sd_radps=0.004,
                    accel_bias_mps2=0.03, accel_noise_sd_mps2=0.02, imu_position_m=DEMO_IMU_POSITION_M,
                    floor_patches=(COLD_ROOM_PATCH,),
                    description="Quokka cart, night round of the Ferncliff Seed Bank aisles (invented demo).")
    times = segment_times(base)
    arcs = [i for i, s in enumerate(segs) if s.kind == "arc"]
    runs = [i for i, s in enumerate(segs) if s.kind == "straight" and s.extent > 5.0]
    a, r = arcs[1], runs[2]
    events = (
        SlipEvent(start_s=float(times[a] + 0.3), duration_s=1.2, side="right", kind="drag", slip_ratio=0.25),
        SlipEvent(start_s=float(0.5 * (times[r] + times[r + 1])), duration_s=1.5, side="left", kind="drag",
                  slip_ratio=0.2),
    )
    return base.with_values(slip_events=events)


def square_scenario(side_m: float = 4.0, direction: str = "cw", laps: int = 1, speed_mps: float = 0.4,
                    turn_rate_radps: float = 0.6, rate_hz: float = 100.0, **scenario_fields) -> Scenario:
    """A square of side ``side_m`` driven ``laps`` times, turning on the spot at each corner.

    ``direction`` 'cw' turns right (-90 deg) at each corner, 'ccw' left; the base starts and ends
    at the origin facing +x (the UMBmark test path, Borenstein & Feng 1996; 4 m in the paper).
    Other ``Scenario`` fields (geometry, noise) pass through ``scenario_fields``.
    """
    if direction not in ("cw", "ccw"):
        raise ValueError("direction must be 'cw' or 'ccw'.")
    turn = -0.5 * math.pi if direction == "cw" else 0.5 * math.pi
    segs: list[Segment] = []
    for _ in range(laps):
        for _ in range(4):
            segs += [straight(side_m, speed_mps), pause(0.5), turn_in_place(turn, turn_rate_radps), pause(0.5)]
    return Scenario(name=f"square_{direction}_{side_m:g}m", segments=tuple(segs), rate_hz=rate_hz,
                    description=f"UMBmark square, {side_m:g} m, {direction}, {laps} lap(s).", **scenario_fields)


def varied_drive_scenario(duration_s: float = 600.0, route_seed: int = 7, rate_hz: float = 100.0,
                          **scenario_fields) -> Scenario:
    """A long drive with straight runs (some backwards), arcs and on-the-spot turns both ways.

    The route is drawn from ``route_seed`` (so the scenario itself is fixed data) until it lasts at
    least ``duration_s``; headings are steered back towards the origin so the base stays within
    roughly 15 m of it. Meant for calibration against ground truth.
    """
    rng = np.random.default_rng(route_seed)
    probe = Scenario(name="probe", segments=(pause(0.0),), rate_hz=rate_hz, **scenario_fields)
    segs: list[Segment] = []
    x = y = th = 0.0
    elapsed = 0.0
    while elapsed < duration_s:
        choice = rng.random()
        if math.hypot(x, y) > 15.0:                      # head home
            want = math.atan2(-y, -x)
            turn = math.remainder(want - th, 2 * math.pi)
            if abs(turn) > 0.05:
                seg = turn_in_place(turn, float(rng.uniform(0.4, 1.0)))
            else:
                seg = straight(float(rng.uniform(3.0, 8.0)), float(rng.uniform(0.3, 0.9)))
        elif choice < 0.4:
            length = float(rng.uniform(1.0, 6.0)) * (-1.0 if rng.random() < 0.15 else 1.0)
            seg = straight(length, float(rng.uniform(0.3, 0.9)))
        elif choice < 0.75:
            angle = float(rng.uniform(math.radians(30), math.radians(200))) * (1 if rng.random() < 0.5 else -1)
            seg = arc(angle, float(rng.uniform(0.4, 3.0)), float(rng.uniform(0.2, 0.6)))
        elif choice < 0.95:
            angle = float(rng.uniform(math.radians(20), math.radians(270))) * (1 if rng.random() < 0.5 else -1)
            seg = turn_in_place(angle, float(rng.uniform(0.3, 1.2)))
        else:
            seg = pause(float(rng.uniform(0.5, 3.0)))
        segs.append(seg)
        # track the planned pose to steer the route
        if seg.kind == "straight":
            x += seg.length_m * math.cos(th)
            y += seg.length_m * math.sin(th)
        elif seg.kind == "arc":
            k = math.copysign(1.0 / seg.radius_m, seg.angle_rad)
            p = seg.extent
            chord = 2.0 * math.sin(0.5 * k * p) / k
            x += chord * math.cos(th + 0.5 * k * p)
            y += chord * math.sin(th + 0.5 * k * p)
            th += seg.angle_rad
        elif seg.kind == "turn":
            th += seg.angle_rad
        elapsed += segment_duration(seg, probe)
    return Scenario(name=f"varied_drive_{int(duration_s)}s", segments=tuple(segs), rate_hz=rate_hz,
                    description=f"Varied drive of {elapsed:.0f} s (route seed {route_seed}).", **scenario_fields)


def varied_route(seed: int, duration_s: float = 600.0) -> tuple[Segment, ...]:
    """About ``duration_s`` of straight runs (some backwards), arcs and turns on the spot both ways,
    drawn from ``seed`` (the calibration tests' and benchmark's route; no steering towards home)."""
    rng = np.random.default_rng(seed)
    segs: list[Segment] = []
    t = 0.0
    while t < duration_s:
        c = rng.random()
        if c < 0.4:
            length = float(rng.uniform(1.0, 5.0)) * (-1.0 if rng.random() < 0.15 else 1.0)
            v = float(rng.uniform(0.3, 0.8))
            segs.append(straight(length, v))
            t += abs(length) / v + 1.0
        elif c < 0.75:
            angle = float(rng.uniform(0.5, 3.0)) * float(rng.choice([-1.0, 1.0]))
            radius, v = float(rng.uniform(0.4, 3.0)), float(rng.uniform(0.2, 0.6))
            segs.append(arc(angle, radius, v))
            t += abs(angle) * radius / v + 1.0
        elif c < 0.95:
            angle = float(rng.uniform(0.4, 4.0)) * float(rng.choice([-1.0, 1.0]))
            rate = float(rng.uniform(0.4, 1.2))
            segs.append(turn_in_place(angle, rate))
            t += abs(angle) / rate + 1.0
        else:
            d = float(rng.uniform(0.5, 2.0))
            segs.append(pause(d))
            t += d
    return tuple(segs)


SOFTENING_FRACTION = -0.015   # the Quokka's left tyre loses 1.5 % of its radius (demo number)


def softening_round_scenario(laps: int = 4, rate_hz: float = 100.0) -> Scenario:
    """The night round driven ``laps`` times while the Quokka's left tyre slowly softens: its radius falls
    by ``SOFTENING_FRACTION`` over two minutes from the end of the first lap (online self-calibration demo;
    everything else as in ``demo_scenario``)."""
    base = demo_scenario(rate_hz=rate_hz, laps=laps)
    lap_s = float(segment_times(demo_scenario(rate_hz=rate_hz))[-1])
    return base.with_values(name="ferncliff_softening_round",
                            radius_changes=(RadiusChange(lap_s, "left", SOFTENING_FRACTION, ramp_s=120.0),),
                            description="Quokka cart, night rounds while its left tyre softens (invented demo).")
