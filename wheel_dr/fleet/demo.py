"""A small invented fleet of simulated bags: three carts of the Ferncliff Seed Bank, one wearing a tyre.

Demo data only (the robots, the place and every number are invented). Each robot gets its own
parameters file (ROOT/<robot>/params.yaml, the design geometry) and a few shifts, each a varied
drive with ground truth recorded as a real bag; the worn robot's true left radius shrinks by
``wear_per_km`` of the design value per kilometre driven in the recordings (exaggerated, so that
it shows within a few short shifts). The floor has a wet patch near the loading bay where wheels spin.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Sequence

from ..params import atomic_write_text

__all__ = ["DemoRobot", "DEMO_FLEET", "build_demo_fleet", "robot_params_text", "wear_text", "SHIFT_NS"]

SHIFT_NS = 8 * 3600 * 1_000_000_000        # one shift apart
DAY0_NS = 1_801_000_000 * 1_000_000_000    # an arbitrary start in 2027


@dataclass(frozen=True)
class DemoRobot:
    """An invented cart: name, design (nominal) geometry, how far its true geometry is from it
    (fractions), the left tyre's wear per km (fraction of the design radius) and its bag format."""

    name: str
    radius_m: float = 0.0825
    track_m: float = 0.412
    left_off: float = 0.0
    right_off: float = 0.0
    track_off: float = 0.0
    wear_per_km: float = 0.0
    fmt: str = "mcap"

    def true_geometry(self, distance_m: float) -> tuple[float, float, float]:
        """True (left radius, right radius, track) in metres after ``distance_m`` of driving."""
        return (self.radius_m * (1.0 + self.left_off - self.wear_per_km * distance_m / 1000.0),
                self.radius_m * (1.0 + self.right_off), self.track_m * (1.0 + self.track_off))


DEMO_FLEET: tuple[DemoRobot, ...] = (
    DemoRobot("quokka-2", left_off=0.0005, right_off=-0.0004, track_off=0.001, fmt="mcap"),
    DemoRobot("potoroo", radius_m=0.076, track_m=0.384, left_off=-0.0003, wear_per_km=0.06, fmt="sqlite3"),
    DemoRobot("bettong", radius_m=0.09, track_m=0.45, right_off=0.0004, track_off=-0.001, fmt="ros1"),
)


def robot_params_text(robot: DemoRobot) -> str:
    """ROOT/<robot>/params.yaml: the design geometry, the simulator's joints and noise level."""
    from ..sim import QUOKKA_JOINTS
    return (f"# Invented demo cart '{robot.name}' (Ferncliff Seed Bank fleet); design geometry, demo numbers only.\n"
            "/**:\n  ros__parameters:\n    wheels:\n"
            f"      left_joints: [{QUOKKA_JOINTS[0]}]\n      right_joints: [{QUOKKA_JOINTS[1]}]\n"
            f"      left_radius: {robot.radius_m}\n      right_radius: {robot.radius_m}\n"
            f"      track_width: {robot.track_m}\n"
            "    noise:\n      model: per_wheel\n      k_left: 2.0e-05\n      k_right: 2.0e-05\n")


def build_demo_fleet(root: str | Path, robots: Sequence[DemoRobot] = DEMO_FLEET, bags_per_robot: int = 4,
                     duration_s: float = 150.0, rate_hz: float = 50.0, seed: int = 5, overwrite: bool = False) -> Path:
    """Write the fleet under ``root`` (existing bags are kept unless ``overwrite``): ROOT/<robot>/params.yaml
    and ROOT/<robot>/day<k>/shift (rosbag2 directories, or shift.bag for ROS 1). Returns ``root``."""
    from ..bags import write_bag
    from ..demo.scenarios import varied_drive_scenario
    from ..sim import FloorPatch, simulate
    top = Path(root)
    wet = FloorPatch(2.0, 4.0, -1.0, 1.0, kind="spin", slip_ratio=0.2, name="wet patch by the loading bay")
    for r_i, robot in enumerate(robots):
        (top / robot.name).mkdir(parents=True, exist_ok=True)
        atomic_write_text(top / robot.name / "params.yaml", robot_params_text(robot))
        driven_m = 0.0
        for k in range(bags_per_robot):
            target = top / robot.name / f"day{k + 1:02d}" / ("shift.bag" if robot.fmt == "ros1" else "shift")
            sc = varied_drive_scenario(duration_s, route_seed=seed + 31 * r_i + k, rate_hz=rate_hz,
                                       nominal_left_radius_m=robot.radius_m, nominal_right_radius_m=robot.radius_m,
                                       nominal_track_m=robot.track_m, k_left_m=2e-5, k_right_m=2e-5,
                                       gyro_bias_radps=0.001, gyro_noise_sd_radps=0.004,
                                       floor_patches=(wet,) if k % 2 == 0 else (),
                                       start_stamp_ns=DAY0_NS + (3 * k + r_i) * SHIFT_NS)
            length_m = _route_length_m(sc)
            left, right, track = robot.true_geometry(driven_m + 0.5 * length_m)   # worn to the shift's middle
            driven_m += length_m
            if target.exists() and not overwrite:
                continue
            sc = sc.with_values(true_left_radius_m=left, true_right_radius_m=right, true_track_m=track)
            write_bag(simulate(sc, seed=seed + 1000 * r_i + k), target, robot.fmt, overwrite=True)
    return top


def _route_length_m(sc) -> float:
    """Distance the base's centre travels on the route (straight runs and arcs; turns on the spot: none)."""
    return float(sum(abs(seg.extent) for seg in sc.segments if seg.kind in ("straight", "arc")))


def wear_text(robot: DemoRobot) -> str:
    """One line on what the robot's tyre does (for the demo's notes)."""
    if robot.wear_per_km <= 0:
        return f"{robot.name}: no wear"
    return (f"{robot.name}: left tyre wears {100 * robot.wear_per_km:.1f} % of its radius per km driven "
            f"({1000 * robot.radius_m * robot.wear_per_km:.2f} mm, exaggerated for the demo)")




def main(argv: Sequence[str] | None = None) -> int:
    """``python -m wheel_dr.fleet.demo [--out DIR]`` (run by ``make demo``): build the invented fleet
    under DIR/bags once (kept as a cache), analyse it with ``wheel-dr fleet`` on a local Dask cluster
    and print where its page is."""
    import argparse

    from ..cli import main as cli_main
    ap = argparse.ArgumentParser(prog="python -m wheel_dr.fleet.demo", description=main.__doc__)
    ap.add_argument("--out", default="out/demo/fleet", help="output directory (default out/demo/fleet)")
    ap.add_argument("--workers", type=int, help="local Dask workers (default: the CPUs)")
    args = ap.parse_args(argv)
    out = Path(args.out)
    root = out / "bags"
    print(f"fleet demo: three invented carts of the Ferncliff Seed Bank, {DEMO_BAGS_PER_ROBOT} shifts each, in {root}")
    for robot in DEMO_FLEET:
        print(f"  {wear_text(robot)}")
    build_demo_fleet(root, bags_per_robot=DEMO_BAGS_PER_ROBOT, duration_s=150.0, rate_hz=20.0)
    cmd = ["fleet", str(root), "--out", str(out), "--resume", "--quiet"]
    if args.workers:
        cmd += ["--workers", str(args.workers)]
    return cli_main(cmd)


DEMO_BAGS_PER_ROBOT = 4

if __name__ == "__main__":
    import sys
    sys.exit(main())
