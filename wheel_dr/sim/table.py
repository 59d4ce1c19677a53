"""The drive simulator for wheel tables (tricycle, car-like, mecanum, omni, swerve, custom): numpy only.

A route of body twists (vx, vy, wz) over time drives the *true* table (``core.drive.WheelTable``,
which may differ from the nominal one written to the URDF); out come the spin joints' positions,
the steering joints' readings, a gyro, true poses and true slip, in the forms of the differential
simulator (``wheel_dr.sim.drive.SimResult``), so ``wheel_dr.bags.write_bag`` writes them as they are.

Model (kinematic, REP 103 frames, SI units; Siegwart, Nourbakhsh & Scaramuzza 2011, sec. 3.2):

* Route: legs of constant twist after ``lead_in_s`` of standing still and before as long again;
  each leg is reached from the previous twist by a linear blend over ``blend_s`` (rest to rest at
  the ends). The twist is first projected onto what the table's fixed standard wheels allow
  (their sliding equations, n_i . v_i = 0): a car-like base cannot strafe, and a tricycle whose
  base_link is off the rear axle moves sideways in turns.
* Steering (steered wheels): at every stamp each steered wheel points along its contact-point
  velocity v_i = (vx - wz y_i, vy + wz x_i) of the route twist; of the two directions that do
  (rolling forwards or backwards) the one nearer the previous reading is kept (no flip of pi).
  A wheel at rest turns linearly from the direction it stopped with to the one it starts with
  (it is steered ready before it moves). Reading = steer angle + the true ``steer_offset``.
* Each step (between two stamps) steers with the mean of its two end readings, the convention the
  estimator uses; the step's body twist is the route twist at mid-step projected onto the null
  space of every standard wheel's sliding equation at that steering (rank from the table at zero
  steering, as ``WheelTable`` does), so the true motion and the wheels agree exactly. Body
  increment tau = twist dt; true poses are ``integrate_body(tau, 'exact')`` (the SE(2)
  exponential of a constant twist per step, Sola et al. 2018, eq. 156).
* Spin travel of each encoder wheel = its rolling equation (d_i . v_i for a standard wheel, the
  roller form over sin(roller) otherwise) x dt; joint angle = cumulative measured travel / true
  radius (rad); joint velocity = backward difference of the reported angle / dt (0 first).
* Noise: per-wheel travel noise of variance k_i |ds| (the per-wheel model), steering readings
  with white noise of standard deviation ``steer_sd_rad``; gyro z = the step's true yaw rate +
  bias + white noise. Slip of one named wheel over a stretch: factor 1 / (1 - s) on its
  measured travel for 'spin', (1 - s) for 'drag', where that wheel moves faster than
  ``MOVING_MPS`` (only there labelled).

Random streams (one per encoder wheel in table order, one per steering joint, then the gyro) are
independent children of one SeedSequence(seed): a seed always gives the same result.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Sequence

import numpy as np

from ..core.drive import WheelTable, integrate_body
from ..core.motion import wrap_angle
from ..core.path import PlanarPath
from ..core.wheels import JointSamples
from ..demo.quokka import DEMO_START_STAMP_NS
from .drive import MOVING_MPS, _runs

__all__ = ["TwistLeg", "WheelSlip", "TableScenario", "TableSimResult", "simulate_table", "route_twist",
           "rolling_travel", "table_urdf", "table_params", "free_joint_name"]

SLIP_KINDS = ("spin", "drag")
_MOVING_WHEEL_MPS = 1e-6       # a steered wheel slower than this has no direction of its own (it is at rest)


@dataclass(frozen=True)
class TwistLeg:
    """``duration_s`` of constant body twist: vx, vy (m/s, base frame) and wz (rad/s, counter-clockwise)."""

    duration_s: float
    vx_mps: float = 0.0
    vy_mps: float = 0.0
    wz_radps: float = 0.0

    def __post_init__(self) -> None:
        if not self.duration_s > 0:
            raise ValueError("a twist leg needs duration_s > 0.")

    @property
    def twist(self) -> tuple[float, float, float]:
        return (self.vx_mps, self.vy_mps, self.wz_radps)


@dataclass(frozen=True)
class WheelSlip:
    """Slip of the wheel whose spin joint is ``joint`` from ``start_s`` (since the first sample) for
    ``duration_s``: 'spin' (the encoder over-reads, r w = v / (1 - s)) or 'drag' (r w = v (1 - s)),
    ``slip_ratio`` s in [0, 0.95] (the common-practice longitudinal slip ratio)."""

    joint: str
    start_s: float
    duration_s: float
    kind: str = "spin"
    slip_ratio: float = 0.3

    def __post_init__(self) -> None:
        if self.kind not in SLIP_KINDS:
            raise ValueError(f"slip kind '{self.kind}' is not one of {', '.join(SLIP_KINDS)}.")
        if not 0.0 <= self.slip_ratio <= 0.95:
            raise ValueError(f"slip_ratio {self.slip_ratio} is outside [0, 0.95].")
        if not self.duration_s > 0:
            raise ValueError("a wheel slip needs duration_s > 0.")


@dataclass(frozen=True)
class TableScenario:
    """A simulated drive of a wheel table (see the module docstring). Units in the field names.

    ``table`` is the true table (it moves the base and turns the wheels); ``nominal`` the design
    table written to the URDF and to parameters files (default: the true one). ``k_wheels`` is the
    variance of each encoder wheel's travel per metre (one value or one per wheel of the table).
    """

    name: str
    table: WheelTable = field(compare=False)
    legs: tuple[TwistLeg, ...]
    nominal: WheelTable | None = field(default=None, compare=False)
    rate_hz: float = 100.0
    blend_s: float = 0.6
    lead_in_s: float = 1.0
    k_wheels: float | tuple[float, ...] = 0.0
    steer_sd_rad: float = 0.0
    slips: tuple[WheelSlip, ...] = ()
    gyro_bias_radps: float = 0.0
    gyro_noise_sd_radps: float = 0.0
    accel_noise_sd_mps2: float = 0.0        # no accelerometer is simulated (the bag marks it unknown)
    start_pose: tuple[float, float, float] = (0.0, 0.0, 0.0)
    start_stamp_ns: int = DEMO_START_STAMP_NS
    robot_name: str = "table_base"
    description: str = ""

    def __post_init__(self) -> None:
        if not self.legs:
            raise ValueError("a table scenario needs at least one twist leg.")
        if not self.rate_hz > 0:
            raise ValueError("rate_hz must be > 0.")
        if self.blend_s < 0 or self.lead_in_s < 0:
            raise ValueError("blend_s and lead_in_s must be >= 0.")
        n = len(self.table.x)
        k = np.asarray(self.k_wheels, dtype=np.float64)
        if k.ndim > 1 or (k.ndim == 1 and len(k) != n) or np.any(k < 0):
            raise ValueError(f"k_wheels must be one value >= 0 or one per wheel ({n}).")
        if self.steer_sd_rad < 0 or self.gyro_noise_sd_radps < 0:
            raise ValueError("noise levels must be >= 0.")
        spins = [j for j in self.table.wheel_joints if j]
        for s in self.slips:
            if s.joint not in spins:
                raise ValueError(f"slip joint '{s.joint}' is not a spin joint of the table ({', '.join(spins)}).")
        if self.nominal is not None and (self.nominal.wheel_joints != self.table.wheel_joints
                                         or self.nominal.steer_joints != self.table.steer_joints
                                         or self.nominal.kind != self.table.kind):
            raise ValueError("the nominal table must have the true table's kind and joints.")

    @property
    def kind(self) -> str:
        return self.table.kind

    @property
    def nominal_table(self) -> WheelTable:
        return self.table if self.nominal is None else self.nominal

    @property
    def duration_s(self) -> float:
        """Seconds from the first sample to the last: lead-in, the legs, the final blend and lead-out."""
        return 2.0 * self.lead_in_s + sum(leg.duration_s for leg in self.legs) + self.blend_s

    def with_values(self, **changes) -> "TableScenario":
        """A copy with some fields changed (``dataclasses.replace``)."""
        return replace(self, **changes)

    def k_per_wheel(self) -> np.ndarray:
        """(n,) travel noise k_i of every wheel of the table."""
        return np.broadcast_to(np.asarray(self.k_wheels, dtype=np.float64), (len(self.table.x),)).copy()


@dataclass
class TableSimResult:
    """Output of ``simulate_table``, per joint-state sample (N,) unless noted (as ``SimResult``).

    ``position_rad`` / ``velocity_radps`` (N, J): columns in ``joint_names`` order, the encoder
    wheels' spin joints (table order), then the steering joints (table order); spin positions are
    angles (travel / true radius), steering positions the readings. ``true_*`` poses in the odom
    frame at the joint stamps. ``true_twist`` (N, 3) is the body twist of the step ending at each
    sample (0 first), ``true_increment`` (N, 3) that step's body increment, ``true_spin_m`` (N, E)
    its true spin travel, ``true_steer_rad`` (N, T) the true steering readings at the stamps
    (without noise) and ``step_steer_rad`` (N, T) the steering the step used (mean of its end
    readings). ``slip_intervals_ns`` (K, 2) inclusive stamps of slipping samples with
    ``slip_joint``, ``slip_side`` ('left' for a wheel at y >= 0, else 'right') and ``slip_kind``.
    """

    scenario: TableScenario
    seed: int
    stamp_ns: np.ndarray
    joint_names: tuple[str, ...]
    position_rad: np.ndarray
    velocity_radps: np.ndarray
    gyro_z_radps: np.ndarray
    true_x_m: np.ndarray
    true_y_m: np.ndarray
    true_yaw_rad: np.ndarray
    true_theta_rad: np.ndarray
    true_twist: np.ndarray
    true_increment: np.ndarray
    true_spin_m: np.ndarray
    true_steer_rad: np.ndarray
    step_steer_rad: np.ndarray
    slip_wheels: np.ndarray              # (N, E) bool: that wheel slipped over the step ending at the sample
    slip_intervals_ns: np.ndarray
    slip_joint: np.ndarray
    slip_side: np.ndarray
    slip_kind: np.ndarray
    accel_mps2: np.ndarray | None = None      # not simulated: the bag marks acceleration unknown
    cmd_v_mps: np.ndarray | None = None       # no cmd_vel for table bases
    cmd_w_radps: np.ndarray | None = None
    pitch_rad: np.ndarray | None = None

    def __len__(self) -> int:
        return int(len(self.stamp_ns))

    @property
    def spin_joints(self) -> tuple[str, ...]:
        return tuple(j for j in self.scenario.table.wheel_joints if j)

    @property
    def steer_joints(self) -> tuple[str, ...]:
        return tuple(j for j in self.scenario.table.steer_joints if j)

    @property
    def true_v_mps(self) -> np.ndarray:
        """(N,) body vx (m/s) of the step ending at each sample."""
        return self.true_twist[:, 0]

    @property
    def true_vy_mps(self) -> np.ndarray:
        return self.true_twist[:, 1]

    @property
    def true_w_radps(self) -> np.ndarray:
        return self.true_twist[:, 2]

    @property
    def t_s(self) -> np.ndarray:
        return (self.stamp_ns - self.stamp_ns[0]) * 1e-9

    @property
    def slip_any(self) -> np.ndarray:
        return self.slip_wheels.any(axis=1)

    @property
    def distance_m(self) -> float:
        return float(np.sum(np.hypot(np.diff(self.true_x_m), np.diff(self.true_y_m))))

    @property
    def orientation_xyzw(self) -> np.ndarray:
        half = 0.5 * self.true_theta_rad
        z = np.zeros(len(self))
        return np.column_stack([z, z, np.sin(half), np.cos(half)])

    def joint_samples(self) -> JointSamples:
        return JointSamples(self.stamp_ns.copy(), tuple(self.joint_names), self.position_rad.copy(),
                            self.velocity_radps.copy())

    def truth_path(self) -> PlanarPath:
        return PlanarPath(self.stamp_ns.copy(), self.true_x_m.copy(), self.true_y_m.copy(),
                          self.true_yaw_rad.copy(), "odom")

    def robot_description(self, base_frame: str = "base_link") -> str:
        """URDF text with the nominal table (``table_urdf``)."""
        sc = self.scenario
        return table_urdf(sc.nominal_table, sc.robot_name, base_frame)

    def spin_travel_m(self) -> np.ndarray:
        """(N - 1, E) measured spin travel of each step from the reported angles x the true radii."""
        e = len(self.spin_joints)
        r = self.scenario.table.radius[self.scenario.table.spin]
        return np.diff(self.position_rad[:, :e], axis=0) * r

    def steer_readings(self) -> np.ndarray:
        """(N, T) the reported steering readings."""
        e = len(self.spin_joints)
        return self.position_rad[:, e:]


# -- kinematics helpers --------------------------------------------------------------------------
def _contact_velocity(table: WheelTable, twist: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    tw = np.asarray(twist, dtype=np.float64).reshape(-1, 3)
    return tw[:, 0:1] - tw[:, 2:3] * table.y, tw[:, 1:2] + tw[:, 2:3] * table.x


def rolling_travel(table: WheelTable, twist, psi, dt) -> np.ndarray:
    """(M, E) spin travel of the encoder wheels for body twists (M, 3) held over dt (M,) with the wheels
    rolling along ``psi`` (M, n): the rolling equation of each wheel (the form of ``WheelTable.inverse``
    with the steering given)."""
    vx, vy = _contact_velocity(table, twist)
    ang = np.asarray(psi, dtype=np.float64) + np.where(table.standard, 0.0, table.roller - 0.5 * math.pi)
    scale = np.where(table.standard, 1.0, np.sin(table.roller))
    along = np.cos(ang) * vx + np.sin(ang) * vy
    return (along / scale * np.asarray(dt, dtype=np.float64).reshape(-1)[:, None])[:, table.spin]


def _sliding_rows(table: WheelTable, psi: np.ndarray, which: np.ndarray) -> np.ndarray:
    """(M, S, 3) sliding equations n_i . v_i of the selected standard wheels acting on (vx, vy, wz)."""
    ang = psi[:, which] + 0.5 * math.pi
    gx, gy = np.cos(ang), np.sin(ang)
    return np.stack([gx, gy, gy * table.x[which] - gx * table.y[which]], axis=-1)


def _project(rows: np.ndarray, rank: int, twist: np.ndarray) -> np.ndarray:
    """Twists (M, 3) projected onto the null space of the top ``rank`` directions of ``rows`` (M, S, 3)."""
    if rank == 0 or rows.shape[1] == 0:
        return twist
    vh = np.linalg.svd(rows)[2][:, :rank, :]                                   # (M, rank, 3) constraint space
    return twist - np.einsum("mri,mr->mi", vh, np.einsum("mri,mi->mr", vh, twist))


def _rank(rows: np.ndarray) -> int:
    return int(np.linalg.matrix_rank(rows, tol=1e-9)) if len(rows) else 0


def _fixed_projection(table: WheelTable, twist: np.ndarray) -> np.ndarray:
    """Twists allowed by the fixed (unsteered) standard wheels' sliding equations."""
    fixed = table.standard & ~table.steered
    if not fixed.any():
        return twist
    psi = np.broadcast_to(table.mount, (1, len(table.x)))
    rows = _sliding_rows(table, psi, fixed)[0]
    r = _rank(rows)
    return _project(np.broadcast_to(rows, (len(twist),) + rows.shape), r, twist)


def route_twist(scenario: TableScenario, t_s) -> np.ndarray:
    """(M, 3) route twist at ``t_s`` (seconds since the first sample), before any projection."""
    t = np.asarray(t_s, dtype=np.float64).reshape(-1)
    starts = [scenario.lead_in_s]
    for leg in scenario.legs:
        starts.append(starts[-1] + leg.duration_s)
    twists = [(0.0, 0.0, 0.0)] + [leg.twist for leg in scenario.legs] + [(0.0, 0.0, 0.0)]
    bounds = np.asarray(starts)                     # leg k (1-based in twists) runs [bounds[k-1], bounds[k])
    idx = np.searchsorted(bounds, t, side="right")  # 0: lead-in; len(legs) + 1: lead-out
    tw = np.asarray(twists)
    out = tw[idx].copy()
    if scenario.blend_s > 0:
        seg_start = np.where(idx > 0, bounds[np.clip(idx - 1, 0, len(bounds) - 1)], 0.0)
        durations = [scenario.lead_in_s] + [leg.duration_s for leg in scenario.legs] + [math.inf]
        blend = np.minimum(scenario.blend_s, np.asarray(durations)[idx])
        frac = np.clip((t - seg_start) / np.where(blend > 0, blend, 1.0), 0.0, 1.0)
        frac = np.where(idx > 0, frac, 1.0)
        prev = tw[np.clip(idx - 1, 0, None)]
        out = prev + (out - prev) * frac[:, None]
    return out


def _steering(table: WheelTable, twist: np.ndarray, t: np.ndarray) -> np.ndarray:
    """(N, T) true steering readings at the stamps (see the module docstring)."""
    st = table.steered
    vx, vy = _contact_velocity(table, twist)
    vx, vy = vx[:, st], vy[:, st]
    moving = np.hypot(vx, vy) > _MOVING_WHEEL_MPS
    out = np.zeros(vx.shape)
    mount, offset = table.mount[st], table.offset[st]
    for j in range(vx.shape[1]):
        m = moving[:, j]
        if not m.any():
            out[:, j] = offset[j]
            continue
        want = np.arctan2(vy[m, j], vx[m, j]) - mount[j]
        rel = np.unwrap(np.remainder(want + 0.5 * math.pi, math.pi) - 0.5 * math.pi, period=math.pi)
        rel -= math.pi * round(float(rel[0]) / math.pi)       # start within (-pi/2, pi/2]
        out[:, j] = np.interp(t, t[m], rel) + offset[j]
    return out


def _psi(table: WheelTable, steer: np.ndarray | None, m: int) -> np.ndarray:
    psi = np.broadcast_to(table.mount, (m, len(table.x))).copy()
    if table.steered.any():
        psi[:, table.steered] += steer - table.offset[table.steered]
    return psi


def simulate_table(scenario: TableScenario, seed: int = 0) -> TableSimResult:
    """Simulate ``scenario`` with random streams from ``seed`` (deterministic; see the module docstring)."""
    sc = scenario
    tab = sc.table
    n = int(math.floor(sc.duration_s * sc.rate_hz + 1e-9)) + 1
    if n < 2:
        raise ValueError("a table scenario needs at least two samples.")
    t = np.arange(n) / sc.rate_hz
    stamp_ns = sc.start_stamp_ns + np.round(t * 1e9).astype(np.int64)
    dt = np.diff(stamp_ns) * 1e-9
    n_e, n_t = int(tab.spin.sum()), int(tab.steered.sum())

    # -- steering at the stamps, twist per step ----------------------------------------------------
    tw_stamp = _fixed_projection(tab, route_twist(sc, t))
    steer = _steering(tab, tw_stamp, t) if n_t else np.zeros((n, 0))
    step_steer = 0.5 * (steer[1:] + steer[:-1])
    psi = _psi(tab, step_steer, n - 1)
    t_mid = 0.5 * (t[1:] + t[:-1])
    tw = _fixed_projection(tab, route_twist(sc, t_mid))
    if n_t:
        c0 = _sliding_rows(tab, np.broadcast_to(tab.mount, (1, len(tab.x))), tab.standard)[0]
        tw = _project(_sliding_rows(tab, psi, tab.standard), _rank(c0), tw)
    inc = tw * dt[:, None]
    spin = rolling_travel(tab, tw, psi, dt)                       # (n-1, E) true travel

    # -- slip of named wheels ------------------------------------------------------------------------
    spin_names = [j for j in tab.wheel_joints if j]
    speed = np.abs(spin) / dt[:, None]
    factor = np.ones_like(spin)
    masks: dict[tuple[int, str], np.ndarray] = {}
    for s in sc.slips:
        c = spin_names.index(s.joint)
        active = (t[1:] >= s.start_s) & (t[1:] <= s.start_s + s.duration_s) & (speed[:, c] > MOVING_MPS)
        if s.slip_ratio > 0:
            f = 1.0 / (1.0 - s.slip_ratio) if s.kind == "spin" else 1.0 - s.slip_ratio
            factor[active, c] *= f
            masks[(c, s.kind)] = masks.get((c, s.kind), np.zeros(n - 1, dtype=bool)) | active

    # -- sensors -------------------------------------------------------------------------------------
    streams = [np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(n_e + n_t + 1)]
    k = sc.k_per_wheel()[tab.spin]
    meas = spin * factor
    for c in range(n_e):
        z = streams[c].standard_normal(n - 1)
        if k[c] > 0:
            meas[:, c] += np.sqrt(k[c] * np.abs(meas[:, c])) * z
    radius = tab.radius[tab.spin]
    spin_pos = np.vstack([np.zeros((1, n_e)), np.cumsum(meas, axis=0) / radius])
    steer_read = steer.copy()
    for j in range(n_t):
        z = streams[n_e + j].standard_normal(n)
        if sc.steer_sd_rad > 0:
            steer_read[:, j] += sc.steer_sd_rad * z
    position = np.hstack([spin_pos, steer_read])
    velocity = np.zeros_like(position)
    velocity[1:] = np.diff(position, axis=0) / dt[:, None]
    twist = np.vstack([np.zeros((1, 3)), tw])
    gyro = twist[:, 2] + sc.gyro_bias_radps + sc.gyro_noise_sd_radps * streams[-1].standard_normal(n)

    # -- truth ---------------------------------------------------------------------------------------
    x, y, th, _ = integrate_body(inc, "exact", sc.start_pose)
    x0, y0, th0 = (float(v) for v in sc.start_pose)
    x, y, th = np.concatenate(([x0], x)), np.concatenate(([y0], y)), np.concatenate(([th0], th))
    slip_wheels = np.zeros((n, n_e), dtype=bool)
    rows: list[tuple[int, int, str, str, str]] = []
    enc_y = tab.y[tab.spin]
    for (c, kind), mask in masks.items():
        slip_wheels[1:, c] |= mask
        for first, last in _runs(mask):
            rows.append((int(stamp_ns[first + 1]), int(stamp_ns[last + 1]), spin_names[c],
                         "left" if enc_y[c] >= 0 else "right", kind))
    rows.sort()
    names = tuple(spin_names) + tuple(j for j in tab.steer_joints if j)
    return TableSimResult(
        scenario=sc, seed=int(seed), stamp_ns=stamp_ns, joint_names=names, position_rad=position,
        velocity_radps=velocity, gyro_z_radps=gyro, true_x_m=x, true_y_m=y, true_yaw_rad=wrap_angle(th),
        true_theta_rad=th, true_twist=twist, true_increment=np.vstack([np.zeros((1, 3)), inc]),
        true_spin_m=np.vstack([np.zeros((1, n_e)), spin]), true_steer_rad=steer,
        step_steer_rad=np.vstack([steer[:1], step_steer]), slip_wheels=slip_wheels,
        slip_intervals_ns=np.array([(r[0], r[1]) for r in rows], dtype=np.int64).reshape(-1, 2),
        slip_joint=np.array([r[2] for r in rows], dtype=object).astype(str),
        slip_side=np.array([r[3] for r in rows], dtype="<U5"),
        slip_kind=np.array([r[4] for r in rows], dtype="<U4"))


# -- URDF and parameters of a table ----------------------------------------------------------------
def free_joint_name(robot_name: str, index: int) -> str:
    """Name given in the URDF to the spin joint of wheel ``index`` when the table lists none (no encoder)."""
    return f"{robot_name}_wheel{index}_free_joint"


def table_urdf(table: WheelTable, robot_name: str = "table_base", base_frame: str = "base_link",
               wheel_width_m: float = 0.04) -> str:
    """URDF text of a table's wheels: per wheel a continuous spin joint whose child link carries a
    cylinder of the wheel's radius (collision and visual; axle along the joint's z, turned by roll
    -pi/2 and yaw = the rolling direction, so a positive spin rolls the wheel along it); a steered
    wheel hangs from a revolute steering joint (axis z) at its contact point whose zero is turned
    by mount - steer_offset, so the reading steer_offset rolls it along its mount angle. The
    contact point (x_i, y_i) is the spin joint's origin in the base frame; base_link at axle height."""
    parts: list[str] = []
    box = '<visual><geometry><box size="0.02 0.02 0.02"/></geometry></visual>'
    for i in range(len(table.x)):
        spin = table.wheel_joints[i] or free_joint_name(robot_name, i)
        wheel_link = f"{robot_name}_wheel{i}_link"
        x, y, r = float(table.x[i]), float(table.y[i]), float(table.radius[i])
        cyl = f'<geometry><cylinder radius="{r!r}" length="{wheel_width_m!r}"/></geometry>'
        wheel = (f'  <link name="{wheel_link}">\n    <visual>{cyl}</visual>\n    <collision>{cyl}</collision>\n'
                 '    <inertial><mass value="0.5"/><inertia ixx="0.001" ixy="0" ixz="0" iyy="0.001" iyz="0" '
                 'izz="0.001"/></inertial>\n  </link>\n')
        if table.steered[i]:
            knuckle = f"{robot_name}_steer{i}_link"
            yaw0 = float(table.mount[i] - table.offset[i])
            parts.append(f'  <link name="{knuckle}">{box}</link>\n'
                         f'  <joint name="{table.steer_joints[i]}" type="revolute">\n'
                         f'    <parent link="{base_frame}"/>\n    <child link="{knuckle}"/>\n'
                         f'    <origin xyz="{x!r} {y!r} 0" rpy="0 0 {yaw0!r}"/>\n    <axis xyz="0 0 1"/>\n'
                         '    <limit lower="-4.0" upper="4.0" effort="50" velocity="6"/>\n  </joint>\n')
            parts.append(wheel + f'  <joint name="{spin}" type="continuous">\n    <parent link="{knuckle}"/>\n'
                         f'    <child link="{wheel_link}"/>\n    <origin xyz="0 0 0" rpy="-1.5707963267948966 0 0"/>\n'
                         '    <axis xyz="0 0 1"/>\n  </joint>\n')
        else:
            parts.append(wheel + f'  <joint name="{spin}" type="continuous">\n    <parent link="{base_frame}"/>\n'
                         f'    <child link="{wheel_link}"/>\n'
                         f'    <origin xyz="{x!r} {y!r} 0" rpy="-1.5707963267948966 0 {float(table.mount[i])!r}"/>\n'
                         '    <axis xyz="0 0 1"/>\n  </joint>\n')
    span_x = float(np.ptp(table.x)) + 0.1
    span_y = float(np.ptp(table.y)) + 0.1
    return (f'<?xml version="1.0"?>\n<!-- {robot_name}: a {table.kind} base of the wheel_dr simulator '
            f'(invented; numbers are demo-only). -->\n<robot name="{robot_name}">\n  <link name="{base_frame}">\n'
            f'    <visual><geometry><box size="{span_x:.3f} {span_y:.3f} 0.2"/></geometry></visual>\n  </link>\n'
            + "".join(parts) + "</robot>\n")


def table_params(table: WheelTable, geometry: bool = True) -> dict[str, object]:
    """Dotted wheel_dr parameters of a table (``drive.*``); ``geometry`` False leaves out the
    positions and radii (for the URDF to fill)."""
    out: dict[str, object] = {"drive.kind": table.kind, "drive.wheel_joints": list(table.wheel_joints)}
    if table.steered.any():
        out["drive.steer_joints"] = list(table.steer_joints)
    if geometry:
        out.update({"drive.wheel_x": [float(v) for v in table.x], "drive.wheel_y": [float(v) for v in table.y],
                    "drive.wheel_radius": [float(v) for v in table.radius]})
    if np.any(table.mount != 0):
        out["drive.mount_angle"] = [float(v) for v in table.mount]
    if np.any(table.roller != 0):
        out["drive.roller_angle"] = [float(v) for v in table.roller]
    if np.any(table.offset != 0):
        out["drive.steer_offset"] = [float(v) for v in table.offset]
    return out
