"""Shared helpers of the offline tests (simulated drives written as real bags); holds no tests."""
from __future__ import annotations

import math
from pathlib import Path

from wheel_dr.bags import write_bag
from wheel_dr.sim import FloorPatch, Scenario, SlipEvent, arc, pause, simulate, straight, turn_in_place


def short_scenario(rate_hz: float = 50.0) -> Scenario:
    """A 30-second drive of the demo cart: straight, left arc over a wet patch, spot turn right, a drag."""
    segs = (straight(3.0, 0.6), arc(math.pi / 2, 1.0, 0.4), straight(2.0, 0.5), turn_in_place(-math.pi / 2, 0.8),
            straight(2.5, 0.6), pause(0.5))
    return Scenario(name="short", segments=segs, rate_hz=rate_hz, k_left_m=2e-5, k_right_m=2e-5,
                    gyro_bias_radps=0.001, gyro_noise_sd_radps=0.003,
                    floor_patches=(FloorPatch(3.2, 4.2, -0.5, 1.2, kind="spin", slip_ratio=0.3),),
                    slip_events=(SlipEvent(start_s=22.0, duration_s=1.0, side="right", kind="drag", slip_ratio=0.3),))


def write_short_bag(path: Path, fmt: str = "mcap", seed: int = 3, **kwargs):
    """Simulate ``short_scenario`` and write it; returns (path, SimResult)."""
    sim = simulate(short_scenario(), seed)
    return write_bag(sim, path, fmt, **kwargs), sim
