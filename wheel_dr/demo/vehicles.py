"""Invented wheel-table vehicles of the invented "Ferncliff Seed Bank", one per drive kind (demo-only numbers).

Each vehicle has a nominal table (the design values: written to its URDF and to
``config/example_<kind>.yaml``) and a true one (what the simulator drives: worn tyres, a steering
rack a little off centre), a default route of body twists (holonomic kinds also strafe and turn
on the spot, steered kinds drive arcs both ways, forwards and backwards) and a default slip of one
wheel. ``table_scenario(kind)`` builds the simulator's scenario; the demo's second vehicle is the
mecanum "Numbat" (``numbat_scenario``).

* tricycle  "Wombat": the loading dock's tug; a driven, steered front wheel, base_link 0.2 m
  ahead of the rear axle (so base_link moves sideways in turns), encoders on all three wheels;
* ackermann "Emu": the grounds' utility car; steered front wheels without encoders, base_link
  on the rear axle;
* mecanum   "Numbat": the germination lab's sample trolley;
* omni      "Bilby": the herbarium scanner's three-wheel camera platform;
* swerve    "Quoll": the cold store's four-module pallet mover.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from ..core.drive import WheelTable
from ..sim.table import TableScenario, TwistLeg, WheelSlip

__all__ = ["TableVehicle", "VEHICLES", "TABLE_KINDS", "vehicle", "default_legs", "table_scenario",
           "numbat_scenario", "NUMBAT_SEED", "params_text"]

TABLE_KINDS = ("tricycle", "ackermann", "mecanum", "omni", "swerve")
NUMBAT_SEED = 2028
_Q = math.pi / 4
_S3 = math.sqrt(3.0)


@dataclass(frozen=True)
class TableVehicle:
    """An invented vehicle: its name, what it does, and its nominal and true tables (keyword arguments
    of ``WheelTable`` besides the kind), its noise and its default slip."""

    name: str
    kind: str
    role: str
    nominal: dict
    true: dict
    k_wheels: float = 2e-5
    steer_sd_rad: float = 0.0
    slip_joint: str = ""
    slip_kind: str = "spin"

    def table(self, which: str = "nominal") -> WheelTable:
        """The vehicle's WheelTable: 'nominal' (design) or 'true' (what the simulator drives)."""
        args = dict(self.nominal)
        if which == "true":
            args.update(self.true)
        elif which != "nominal":
            raise ValueError("which must be 'nominal' or 'true'.")
        return WheelTable(self.kind, k_wheels=self.k_wheels, steer_sd_rad=self.steer_sd_rad, **args)

    @property
    def robot_name(self) -> str:
        return self.name.lower()


def _j(robot: str, *names: str) -> list[str]:
    return [f"{robot}_{n}_joint" if n else "" for n in names]


VEHICLES: dict[str, TableVehicle] = {
    "tricycle": TableVehicle(
        "Wombat", "tricycle", "the loading dock's tug",
        nominal=dict(wheel_joints=_j("wombat", "drive_wheel", "rear_left_wheel", "rear_right_wheel"),
                     steer_joints=_j("wombat", "drive_steer", "", ""),
                     wheel_x=[0.9, -0.2, -0.2], wheel_y=[0.0, 0.3, -0.3], wheel_radius=[0.12, 0.1, 0.1]),
        true=dict(wheel_x=[0.905, -0.2, -0.2], wheel_radius=[0.1192, 0.1004, 0.0998],
                  steer_offset=[0.012, 0.0, 0.0]),
        k_wheels=4e-5, steer_sd_rad=0.003, slip_joint="wombat_drive_wheel_joint"),
    "ackermann": TableVehicle(
        "Emu", "ackermann", "the grounds' utility car",
        nominal=dict(wheel_joints=_j("emu", "", "", "rear_left_wheel", "rear_right_wheel"),
                     steer_joints=_j("emu", "front_left_steer", "front_right_steer", "", ""),
                     wheel_x=[1.25, 1.25, 0.0, 0.0], wheel_y=[0.48, -0.48, 0.48, -0.48],
                     wheel_radius=[0.2, 0.2, 0.2, 0.2]),
        true=dict(wheel_radius=[0.2, 0.2, 0.2013, 0.1991], steer_offset=[-0.006, -0.006, 0.0, 0.0]),
        k_wheels=5e-5, steer_sd_rad=0.002, slip_joint="emu_rear_left_wheel_joint", slip_kind="drag"),
    "mecanum": TableVehicle(
        "Numbat", "mecanum", "the germination lab's sample trolley",
        nominal=dict(wheel_joints=_j("numbat", "front_left_wheel", "front_right_wheel", "rear_left_wheel",
                                     "rear_right_wheel"),
                     wheel_x=[0.25, 0.25, -0.25, -0.25], wheel_y=[0.2, -0.2, 0.2, -0.2], wheel_radius=[0.05] * 4,
                     roller_angle=[_Q, -_Q, -_Q, _Q]),
        true=dict(wheel_radius=[0.0503, 0.0498, 0.0501, 0.0497], wheel_y=[0.202, -0.202, 0.202, -0.202]),
        k_wheels=2e-5, slip_joint="numbat_rear_left_wheel_joint"),
    "omni": TableVehicle(
        "Bilby", "omni", "the herbarium scanner's camera platform",
        nominal=dict(wheel_joints=_j("bilby", "wheel_a", "wheel_b", "wheel_c"),
                     # 0.2 m from the centre at 0, 120 and 240 deg, rolling tangentially (pi/2, -5pi/6, -pi/6)
                     wheel_x=[0.2, -0.1, -0.1], wheel_y=[0.0, _S3 / 10, -_S3 / 10], wheel_radius=[0.04] * 3,
                     mount_angle=[math.pi / 2, -5 * math.pi / 6, -math.pi / 6],
                     roller_angle=[math.pi / 2] * 3),
        true=dict(wheel_radius=[0.0402, 0.0399, 0.0401]),
        k_wheels=2e-5, slip_joint="bilby_wheel_b_joint"),
    "swerve": TableVehicle(
        "Quoll", "swerve", "the cold store's pallet mover",
        nominal=dict(wheel_joints=_j("quoll", "fl_drive", "fr_drive", "rl_drive", "rr_drive"),
                     steer_joints=_j("quoll", "fl_steer", "fr_steer", "rl_steer", "rr_steer"),
                     wheel_x=[0.32, 0.32, -0.32, -0.32], wheel_y=[0.27, -0.27, 0.27, -0.27],
                     wheel_radius=[0.075] * 4),
        true=dict(wheel_radius=[0.0752, 0.0747, 0.0751, 0.0749], steer_offset=[0.004, -0.003, 0.0, 0.005]),
        k_wheels=3e-5, steer_sd_rad=0.002, slip_joint="quoll_rr_drive_joint"),
}


def vehicle(kind: str) -> TableVehicle:
    """The invented vehicle of a table kind (one of TABLE_KINDS)."""
    if kind not in VEHICLES:
        raise ValueError(f"no example vehicle for drive kind '{kind}'; use one of {', '.join(TABLE_KINDS)}.")
    return VEHICLES[kind]


def default_legs(kind: str) -> tuple[TwistLeg, ...]:
    """About 50 s of route: holonomic kinds drive forwards, strafe both ways, drive diagonally while
    turning, turn on the spot and back up; steered kinds drive straight and arcs left and right,
    forwards and backwards (pauses between, so steered wheels turn while at rest)."""
    stop = TwistLeg(1.5)
    if kind in ("mecanum", "omni", "swerve"):
        return (TwistLeg(4.0, 0.4), stop, TwistLeg(3.0, 0.0, 0.3), stop, TwistLeg(5.0, 0.25, -0.2, 0.35), stop,
                TwistLeg(4.0, 0.0, 0.0, 0.7), stop, TwistLeg(4.0, 0.05, -0.3, -0.3), stop, TwistLeg(3.0, -0.35),
                stop, TwistLeg(5.0, 0.3, 0.0, -0.4), stop)
    return (TwistLeg(3.0, 0.5), TwistLeg(5.0, 0.5, 0.0, 0.35), TwistLeg(2.0, 0.5), TwistLeg(5.0, 0.5, 0.0, -0.35),
            stop, TwistLeg(4.0, -0.3, 0.0, 0.25), stop, TwistLeg(4.0, -0.3, 0.0, -0.25), stop,
            TwistLeg(5.0, 0.4, 0.0, 0.45), TwistLeg(3.0, 0.4))


def table_scenario(kind: str, rate_hz: float = 100.0, laps: int = 1, noise: bool = True, slip: bool = True,
                   name: str | None = None) -> TableScenario:
    """The simulator scenario of a kind's vehicle: true table driven, nominal table in the URDF, the
    default route ``laps`` times, per-wheel and steering noise and a gyro with bias (``noise``), and a
    spin (or drag) of one wheel for 1.5 s in the first lap's third leg (``slip``)."""
    v = vehicle(kind)
    legs = default_legs(kind) * max(1, int(laps))
    lead = 1.0
    start = lead + sum(leg.duration_s for leg in legs[:2]) + 1.0
    slips = (WheelSlip(v.slip_joint, start, 1.5, v.slip_kind, 0.3),) if slip else ()
    return TableScenario(
        name=name or f"{v.robot_name}_{kind}_drive", table=v.table("true"), nominal=v.table("nominal"),
        legs=legs, rate_hz=rate_hz, lead_in_s=lead, k_wheels=v.k_wheels if noise else 0.0,
        steer_sd_rad=v.steer_sd_rad if noise else 0.0, slips=slips,
        gyro_bias_radps=0.0015 if noise else 0.0, gyro_noise_sd_radps=0.004 if noise else 0.0,
        robot_name=v.robot_name,
        description=f"{v.name}, {v.role} ({kind}) of the Ferncliff Seed Bank (invented demo).")


def numbat_scenario(rate_hz: float = 100.0) -> TableScenario:
    """The demo's second vehicle: the Numbat trolley's round along the germination lab's shelves,
    the default mecanum route twice (about 100 s); its rear-left wheel spins on spilled seed for 1.5 s."""
    return table_scenario("mecanum", rate_hz=rate_hz, laps=2, name="ferncliff_germination_lab_numbat")


def _flow(values) -> str:
    items = []
    for v in values:
        items.append(f"'{v}'" if isinstance(v, str) else repr(float(v)))
    return "[" + ", ".join(items) + "]"


def params_text(kind: str, geometry: bool = True, description: str | None = None) -> str:
    """A parameters file for a kind's vehicle (nominal table, its noise), ``geometry`` False without
    the positions and radii (the URDF in the bag fills them)."""
    from ..safety import SAFETY_TEXT
    v = vehicle(kind)
    t = v.table("nominal")
    lines = [f"# description: {description or f'{v.name} ({kind}), nominal table, invented demo vehicle.'}",
             f"# wheel_dr parameters for the invented {v.name}, {v.role} ({kind}) of the invented",
             "# Ferncliff Seed Bank; the numbers are invented, demo-only (docs/drive_models.md).",
             *(f"# {ln}" for ln in _wrap(SAFETY_TEXT)),
             "/**:", "  ros__parameters:", "    drive:", f"      kind: {kind}",
             f"      wheel_joints: {_flow(t.wheel_joints)}"]
    if t.steered.any():
        lines.append(f"      steer_joints: {_flow(t.steer_joints)}")
    if geometry:
        lines += [f"      wheel_x: {_flow(t.x)}", f"      wheel_y: {_flow(t.y)}",
                  f"      wheel_radius: {_flow(t.radius)}"]
    if (t.mount != 0).any():
        lines.append(f"      mount_angle: {_flow(t.mount)}")
    if (t.roller != 0).any():
        lines.append(f"      roller_angle: {_flow(t.roller)}")
    lines += ["    noise:", f"      k_wheels: [{v.k_wheels!r}]"]
    if t.steered.any():
        lines.append(f"      steer_sd_rad: {max(v.steer_sd_rad, 1e-4)!r}")
    return "\n".join(lines) + "\n"


def _wrap(text: str, width: int = 96) -> list[str]:
    out, line = [], ""
    for word in text.split():
        if line and len(line) + 1 + len(word) > width:
            out.append(line)
            line = word
        else:
            line = f"{line} {word}".strip()
    return out + ([line] if line else [])
