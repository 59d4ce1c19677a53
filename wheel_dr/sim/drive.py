"""The drive simulator: a Scenario in, encoder readings, gyro, true poses and true slip out (numpy only).

Model (kinematic, REP 103 frames, SI units):

* The base follows the scenario's route exactly; that is the ground truth. Each segment has
  constant curvature and a trapezoidal progress profile (rest to rest, limited by the scenario's
  acceleration; constant speed when the limit is 0), so the true pose is evaluated in closed form
  at every stamp (no numerical integration): an arc of curvature k from heading th0 moves the
  base by the chord p sinc(k p / 2) in direction th0 + k p / 2 (Siegwart et al. 2011, ch. 3).
* The wheels' ground travel follows from the *true* track b: on an arc of curvature k the left
  contact line travels p (1 - k b / 2), the right p (1 + k b / 2); turning on the spot by dth they
  travel -+ b dth / 2.
* Encoders: per step, measured wheel travel = ground travel x slip factor + Gaussian noise of
  variance k_side |travel| (the core's per_wheel model); joint angle = cumulative measured travel /
  true radius (rad). Joint velocity = backward difference of the reported angle / dt (0 first).
* Slip (encoders misreport, the base still follows the route): factor 1 / (1 - s) for 'spin' and
  (1 - s) for 'drag', s the slip ratio (optionally ramped up from 0 after each onset); applied to a
  step when the event is active at the step's end stamp, s > 0 there and that wheel's ground speed
  exceeds ``MOVING_MPS`` (only then is it labelled).
* Radius changes (``Scenario.radius_changes``): the true radius of a side changes during the drive; the
  wheel angle of each step is then that step's measured travel over the radius at its end.
* Gyro z = true yaw rate at the stamp + bias + white noise (sd per sample).
* Accelerometer (specific force of the IMU point, base axes): each reading is the mean over the step
  ending at it (a decimation filter): a_x = dv/dt - w^2 l_x - w' l_y, a_y = v w + w' l_x - w^2 l_y
  for an IMU at (l_x, l_y) (rigid-body kinematics), plus gravity's share g (sin p, 0, cos p) for a
  nose-up pitch p (an incline), plus bias (x) and white noise. The orientation is yaw and pitch.
* Held events: the route pauses (the true pose stays) while the encoders report the commanded wheel
  speed; the command (cmd_vel) is otherwise the route's planned speed and yaw rate.

Random streams (wheel noise per joint, left first, then the gyro, then the accelerometer) are independent children of one
SeedSequence(seed),
so a given seed always gives the same result and switching one noise off leaves the others alone.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from ..core.path import PlanarPath
from ..core.motion import wrap_angle
from ..core.wheels import JointSamples
from ..demo.quokka import quokka_urdf
from .scenario import Scenario, Segment

__all__ = ["SimResult", "simulate", "segment_times", "segment_duration", "MOVING_MPS"]

MOVING_MPS = 1e-3  # a wheel slower than this over the ground is "not moving": no slip applied or labelled


@dataclass
class SimResult:
    """Output of ``simulate``; arrays are per joint-state sample (N,) unless noted.

    ``position_rad`` / ``velocity_radps`` (N, J) are what the encoders report (columns in
    ``joint_names`` order: left joints, then right; J = 2 unless skid steer), including slip and
    random error. ``true_*`` poses are in the odom
    frame at the joint stamps; ``true_yaw_rad`` is wrapped to (-pi, pi], ``true_theta_rad`` not.
    ``slip_intervals_ns`` (K, 2) int64 are inclusive [first, last] stamps of the samples whose
    step slipped, with ``slip_side`` ('left'/'right') and ``slip_kind`` ('spin'/'drag') per row;
    ``slip_left`` / ``slip_right`` (N,) mark the same samples.
    """

    scenario: Scenario
    seed: int
    stamp_ns: np.ndarray
    joint_names: tuple[str, str]
    position_rad: np.ndarray
    velocity_radps: np.ndarray
    gyro_z_radps: np.ndarray
    true_x_m: np.ndarray
    true_y_m: np.ndarray
    true_yaw_rad: np.ndarray
    true_theta_rad: np.ndarray
    true_v_mps: np.ndarray
    true_w_radps: np.ndarray
    true_travel_m: np.ndarray          # (N, 2) cumulative ground travel of the left / right wheel
    slip_left: np.ndarray
    slip_right: np.ndarray
    slip_intervals_ns: np.ndarray
    slip_side: np.ndarray
    slip_kind: np.ndarray
    true_left_radius_m: float
    true_right_radius_m: float
    true_track_m: float
    slip_joint: np.ndarray | None = None   # (K,) joint name of each slip interval
    accel_mps2: np.ndarray | None = None    # (N, 3) accelerometer reading (base axes, specific force)
    pitch_rad: np.ndarray | None = None     # (N,) nose-up pitch (inclines)
    cmd_v_mps: np.ndarray | None = None     # (N,) commanded speed (cmd_vel linear.x)
    cmd_w_radps: np.ndarray | None = None   # (N,) commanded yaw rate (cmd_vel angular.z)

    @property
    def orientation_xyzw(self) -> np.ndarray:
        """(N, 4) IMU orientation quaternions: yaw, then nose-up pitch (REP 103: pitch about y is -p)."""
        half_y = 0.5 * self.true_theta_rad
        p = np.zeros(len(self)) if self.pitch_rad is None else self.pitch_rad
        half_p = -0.5 * p
        cy, sy, cp, sp = np.cos(half_y), np.sin(half_y), np.cos(half_p), np.sin(half_p)
        return np.column_stack([-sy * sp, cy * sp, sy * cp, cy * cp])

    @property
    def up_x(self) -> np.ndarray:
        """(N,) x component of the world's up axis in the base frame (sin of the nose-up pitch)."""
        return np.sin(np.zeros(len(self)) if self.pitch_rad is None else self.pitch_rad)

    def __len__(self) -> int:
        return int(len(self.stamp_ns))

    @property
    def t_s(self) -> np.ndarray:
        """Seconds since the first sample."""
        return (self.stamp_ns - self.stamp_ns[0]) * 1e-9

    @property
    def slip_any(self) -> np.ndarray:
        """(N,) any wheel slipping over the step ending at the sample."""
        return self.slip_left | self.slip_right

    @property
    def distance_m(self) -> float:
        """Distance the base centre travelled (m)."""
        return float(np.sum(np.hypot(np.diff(self.true_x_m), np.diff(self.true_y_m))))

    def joint_samples(self) -> JointSamples:
        """The encoder readings as the core's JointSamples."""
        return JointSamples(self.stamp_ns.copy(), tuple(self.joint_names), self.position_rad.copy(),
                            self.velocity_radps.copy())

    def truth_path(self) -> PlanarPath:
        """The true poses as a PlanarPath in the odom frame."""
        return PlanarPath(self.stamp_ns.copy(), self.true_x_m.copy(), self.true_y_m.copy(),
                          self.true_yaw_rad.copy(), "odom")

    def robot_description(self, base_frame: str = "base_link") -> str:
        """URDF text of the simulated base with the scenario's nominal geometry (the demo cart's body)."""
        sc = self.scenario
        return quokka_urdf(sc.nominal_left_radius_m, sc.nominal_right_radius_m, sc.nominal_track_m,
                           self.joint_names, base_frame, sc.wheelbase_m)

    def true_settings_values(self) -> dict[str, object]:
        """Dotted parameters with the true geometry (see ``Scenario.true_params``)."""
        return dict(self.scenario.true_params)


def _profile_duration(extent: float, peak: float, accel: float) -> float:
    if extent <= 0:
        return 0.0
    if accel <= 0:
        return extent / peak
    t_ramp = peak / accel
    if accel * t_ramp * t_ramp >= extent:      # triangular profile: never reaches the peak
        return 2.0 * math.sqrt(extent / accel)
    return 2.0 * t_ramp + (extent - accel * t_ramp * t_ramp) / peak


def _profile(t: np.ndarray, extent: float, peak: float, accel: float) -> tuple[np.ndarray, np.ndarray]:
    """Progress p(t) and rate p'(t) of a rest-to-rest trapezoidal profile over ``extent``."""
    total = _profile_duration(extent, peak, accel)
    t = np.clip(t, 0.0, total)
    if accel <= 0:
        return peak * t, np.full_like(t, peak)
    t_ramp = peak / accel
    if accel * t_ramp * t_ramp >= extent:
        t_ramp = math.sqrt(extent / accel)
        peak = accel * t_ramp
    cruise_end = total - t_ramp
    d_ramp = 0.5 * accel * t_ramp * t_ramp
    p = np.where(t < t_ramp, 0.5 * accel * t * t,
                 np.where(t <= cruise_end, d_ramp + peak * (t - t_ramp),
                          extent - 0.5 * accel * (total - t) ** 2))
    rate = np.where(t < t_ramp, accel * t, np.where(t <= cruise_end, peak, accel * (total - t)))
    return p, rate


def _segment_params(seg: Segment, scenario: Scenario) -> tuple[float, float, float]:
    """(extent, peak rate, acceleration) of a segment's progress variable."""
    if seg.kind in ("straight", "arc"):
        return seg.extent, seg.speed_mps, scenario.accel_mps2
    if seg.kind == "turn":
        return seg.extent, seg.turn_rate_radps, scenario.accel_radps2
    return 0.0, 1.0, 0.0


def segment_duration(seg: Segment, scenario: Scenario) -> float:
    """Seconds the segment takes under the scenario's acceleration limits."""
    if seg.kind == "pause":
        return seg.duration_s
    return _profile_duration(*_segment_params(seg, scenario))


def segment_times(scenario: Scenario) -> np.ndarray:
    """(S + 1,) start time of each segment in seconds since the first sample, then the route's end.

    The route starts after ``lead_in_s`` of standing still and is followed by the same again.
    """
    times = [scenario.lead_in_s]
    for seg in scenario.segments:
        times.append(times[-1] + segment_duration(seg, scenario))
    return np.asarray(times)


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """Inclusive (first, last) index pairs of the True runs of a boolean array."""
    if not mask.any():
        return []
    d = np.diff(np.concatenate(([0], mask.astype(np.int8), [0])))
    starts = np.flatnonzero(d == 1)
    ends = np.flatnonzero(d == -1) - 1
    return list(zip(starts.tolist(), ends.tolist()))


def simulate(scenario: Scenario, seed: int = 0) -> SimResult:
    """Simulate ``scenario`` with random streams from ``seed`` (deterministic; see the module docstring)."""
    sc = scenario
    b = sc.true_track_m
    times = segment_times(sc)
    total_s = times[-1] + sc.lead_in_s + sum(h.duration_s for h in sc.held_events)
    n = int(math.floor(total_s * sc.rate_hz + 1e-9)) + 1
    t_real = np.arange(n) / sc.rate_hz
    stamp_ns = sc.start_stamp_ns + np.round(t_real * 1e9).astype(np.int64)
    # route time: it stands still while the base is held
    held = np.zeros(n, dtype=bool)
    t = t_real.copy()
    for h in sc.held_events:
        inside = (t_real > h.start_s) & (t_real <= h.start_s + h.duration_s)
        held |= inside
        t = t - np.clip(t_real - h.start_s, 0.0, h.duration_s)

    x = np.empty(n)
    y = np.empty(n)
    th = np.empty(n)
    v = np.zeros(n)
    w = np.zeros(n)
    trav = np.empty((n, 2))
    vw = np.zeros((n, 2))           # ground speed of the left / right wheel
    x0, y0, th0 = (float(c) for c in sc.start_pose)
    l0 = r0 = 0.0
    seg_index = np.searchsorted(times, t, side="right") - 1   # -1 before the route, S after it
    before = seg_index < 0
    x[before], y[before], th[before], trav[before] = x0, y0, th0, (0.0, 0.0)
    for k, seg in enumerate(sc.segments):
        sel = seg_index == k
        extent, peak, accel = _segment_params(seg, sc)
        ts = t[sel] - times[k]
        p, pd = _profile(ts, extent, peak, accel) if extent > 0 else (np.zeros(ts.shape), np.zeros(ts.shape))
        p_end = extent
        if seg.kind == "straight":
            sgn = 1.0 if seg.length_m >= 0 else -1.0
            x[sel] = x0 + sgn * p * math.cos(th0)
            y[sel] = y0 + sgn * p * math.sin(th0)
            th[sel] = th0
            v[sel] = sgn * pd
            trav[sel, 0] = l0 + sgn * p
            trav[sel, 1] = r0 + sgn * p
            vw[sel] = (sgn * pd)[:, None]
            dx, dy, dth, dl, dr = sgn * p_end * math.cos(th0), sgn * p_end * math.sin(th0), 0.0, sgn * p_end, \
                sgn * p_end
        elif seg.kind == "arc":
            kappa = math.copysign(1.0 / seg.radius_m, seg.angle_rad)
            half = 0.5 * kappa * p
            chord = p * np.sinc(half / math.pi)
            x[sel] = x0 + chord * np.cos(th0 + half)
            y[sel] = y0 + chord * np.sin(th0 + half)
            th[sel] = th0 + kappa * p
            v[sel] = pd
            w[sel] = kappa * pd
            trav[sel, 0] = l0 + p * (1.0 - 0.5 * kappa * b)
            trav[sel, 1] = r0 + p * (1.0 + 0.5 * kappa * b)
            vw[sel, 0] = pd * (1.0 - 0.5 * kappa * b)
            vw[sel, 1] = pd * (1.0 + 0.5 * kappa * b)
            h_end = 0.5 * kappa * p_end
            c_end = p_end * float(np.sinc(h_end / math.pi))
            dx, dy, dth = c_end * math.cos(th0 + h_end), c_end * math.sin(th0 + h_end), kappa * p_end
            dl, dr = p_end * (1.0 - 0.5 * kappa * b), p_end * (1.0 + 0.5 * kappa * b)
        elif seg.kind == "turn":
            sgn = 1.0 if seg.angle_rad >= 0 else -1.0
            x[sel], y[sel] = x0, y0
            th[sel] = th0 + sgn * p
            w[sel] = sgn * pd
            trav[sel, 0] = l0 - sgn * p * 0.5 * b
            trav[sel, 1] = r0 + sgn * p * 0.5 * b
            vw[sel, 0] = -sgn * pd * 0.5 * b
            vw[sel, 1] = sgn * pd * 0.5 * b
            dx, dy, dth, dl, dr = 0.0, 0.0, sgn * p_end, -sgn * p_end * 0.5 * b, sgn * p_end * 0.5 * b
        else:  # pause
            x[sel], y[sel], th[sel], trav[sel] = x0, y0, th0, (l0, r0)
            dx = dy = dth = dl = dr = 0.0
        x0, y0, th0, l0, r0 = x0 + dx, y0 + dy, th0 + dth, l0 + dl, r0 + dr
    after = seg_index >= len(sc.segments)
    x[after], y[after], th[after], trav[after] = x0, y0, th0, (l0, r0)
    cmd_v, cmd_w = v.copy(), w.copy()
    held_speed = np.zeros(n)
    for h in sc.held_events:
        inside = np.flatnonzero((t_real > h.start_s) & (t_real <= h.start_s + h.duration_s))
        if len(inside):
            v0 = float(v[inside[0]])
            frac = np.clip((t_real[inside] - h.start_s) / h.ramp_s, 0.0, 1.0) if h.ramp_s > 0 else 1.0
            held_speed[inside] = v0 + (h.speed_mps - v0) * frac
            cmd_v[inside], cmd_w[inside] = h.speed_mps, 0.0
    v[held], w[held], vw[held] = 0.0, 0.0, 0.0
    t = t_real

    # -- per joint: columns are the left joints (front first), then the right ones -----------------
    jps = sc.joints_per_side
    side_of = np.repeat([0, 1], jps)                 # column -> side (0 left, 1 right)
    n_j = 2 * jps
    vw_j = vw[:, side_of]

    # -- slip factors per step (the step ending at each sample) -----------------------------------
    moving = np.abs(vw_j) > MOVING_MPS
    factor = np.ones((n, n_j))
    masks: dict[tuple[int, str], np.ndarray] = {}

    def apply(cols: Sequence[int], ratio: np.ndarray, kind: str) -> None:
        """Slip ``ratio`` (N,) per sample (0 where inactive) on the given joint columns."""
        safe = np.clip(ratio, 0.0, 0.95)
        f = 1.0 / (1.0 - safe) if kind == "spin" else (1.0 - safe)
        for c in cols:
            hit = (ratio > 0) & moving[:, c]
            factor[hit, c] *= f[hit]
            key = (c, kind)
            masks[key] = masks.get(key, np.zeros(n, dtype=bool)) | hit

    def ramped(active: np.ndarray, ratio: float, ramp_s: float) -> np.ndarray:
        """Ratio per sample: ``ratio`` where active, rising linearly over ``ramp_s`` from each onset."""
        out = np.where(active, ratio, 0.0)
        if ramp_s > 0:
            for first, last in _runs(active):
                seg = slice(first, last + 1)
                out[seg] *= np.clip((t[seg] - t[first]) / ramp_s, 0.0, 1.0)
        return out

    for ev in sc.slip_events:
        active = (t >= ev.start_s) & (t <= ev.start_s + ev.duration_s)
        sides = {"left": (0,), "right": (1,), "both": (0, 1)}[ev.side]
        within = range(jps) if ev.joint is None else (ev.joint,)
        apply([sd * jps + k for sd in sides for k in within], ramped(active, ev.slip_ratio, ev.ramp_s), ev.kind)
    if sc.floor_patches:
        half_b = 0.5 * b
        sin_th, cos_th = np.sin(th), np.cos(th)
        cx, cy = [], []
        for c in range(n_j):
            lat = half_b if side_of[c] == 0 else -half_b
            px = x - sin_th * half_b if lat > 0 else x + sin_th * half_b       # contact line of the side
            py = y + cos_th * half_b if lat > 0 else y - cos_th * half_b
            if jps > 1:                                                       # front / rear wheel
                lon = 0.5 * sc.wheelbase_m * (1.0 if c % jps == 0 else -1.0)
                px, py = px + cos_th * lon, py + sin_th * lon
            cx.append(px)
            cy.append(py)
        for patch in sc.floor_patches:
            for c in range(n_j):
                inside = ((cx[c] >= patch.x_min_m) & (cx[c] <= patch.x_max_m) & (cy[c] >= patch.y_min_m)
                          & (cy[c] <= patch.y_max_m))
                apply((c,), ramped(inside, patch.slip_ratio, patch.ramp_s), patch.kind)
    if sc.held_events:
        hit = held & (np.abs(held_speed) > MOVING_MPS)
        for c in range(n_j):
            masks[(c, "held")] = hit.copy()
    if n:
        factor[0] = 1.0
        for key in masks:
            masks[key][0] = False

    # -- encoders, gyro --------------------------------------------------------------------------
    streams = [np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(n_j + 2)]
    rng_gyro, rng_accel = streams[n_j], streams[n_j + 1]
    d_true = np.zeros((n, n_j))
    d_true[1:] = np.diff(trav, axis=0)[:, side_of]
    d_meas = d_true * factor
    if sc.held_events and n > 1:      # wheels turning on the spot of a held base
        d_meas[1:] += (held_speed[1:] * np.diff(t_real))[:, None]
    for c in range(n_j):
        k_m = sc.k_left_m if side_of[c] == 0 else sc.k_right_m
        z = streams[c].standard_normal(n)
        if k_m > 0:
            d_meas[:, c] += np.sqrt(k_m * np.abs(d_meas[:, c])) * z
    radius = np.array([sc.true_left_radius_m, sc.true_right_radius_m])[side_of]
    if sc.radius_changes:      # radius per sample and joint: the wheel angle of each step is its travel / radius
        scale = np.ones((n, n_j))
        for rc in sc.radius_changes:
            frac = np.clip((t_real - rc.start_s) / rc.ramp_s, 0.0, 1.0) if rc.ramp_s > 0 else \
                (t_real >= rc.start_s).astype(np.float64)
            for c in range(n_j):
                if rc.side == "both" or ("left", "right")[side_of[c]] == rc.side:
                    scale[:, c] *= 1.0 + rc.fraction * frac
        position = np.cumsum(d_meas / (radius * scale), axis=0)
    else:
        position = np.cumsum(d_meas, axis=0) / radius
    velocity = np.zeros((n, n_j))
    if n > 1:
        dt = np.diff(stamp_ns) * 1e-9
        velocity[1:] = np.diff(position, axis=0) / dt[:, None]
    gyro = w + sc.gyro_bias_radps + sc.gyro_noise_sd_radps * rng_gyro.standard_normal(n)
    # accelerometer: mean specific force over the step ending at each sample
    dv = np.zeros(n)
    dw = np.zeros(n)
    if n > 1:
        step = np.diff(t_real)
        dv[1:] = np.diff(v) / step
        dw[1:] = np.diff(w) / step
    pitch = np.zeros(n)
    for inc in sc.inclines:
        t1 = inc.start_s + inc.duration_s
        if inc.ramp_s > 0:
            shape = np.clip((t_real - inc.start_s) / inc.ramp_s, 0, 1) * np.clip((t1 - t_real) / inc.ramp_s, 0, 1)
        else:
            shape = ((t_real >= inc.start_s) & (t_real < t1)).astype(float)
        pitch += inc.angle_rad * shape
    lx, ly = float(sc.imu_position_m[0]), float(sc.imu_position_m[1])
    g0 = 9.80665
    acc = np.empty((n, 3))
    acc[:, 0] = dv - w * w * lx - dw * ly + g0 * np.sin(pitch) + sc.accel_bias_mps2
    acc[:, 1] = v * w + dw * lx - w * w * ly
    acc[:, 2] = g0 * np.cos(pitch)
    acc += sc.accel_noise_sd_mps2 * rng_accel.standard_normal((n, 3))

    # -- slip truth intervals ---------------------------------------------------------------------
    rows: list[tuple[int, int, str, str, str]] = []
    for (c, kind), mask in masks.items():
        for first, last in _runs(mask):
            rows.append((int(stamp_ns[first]), int(stamp_ns[last]), ("left", "right")[side_of[c]], kind,
                         sc.joint_names[c]))
    rows.sort()
    intervals = np.array([(r[0], r[1]) for r in rows], dtype=np.int64).reshape(-1, 2)
    slip_left = np.zeros(n, dtype=bool)
    slip_right = np.zeros(n, dtype=bool)
    for (c, _), mask in masks.items():
        (slip_left if side_of[c] == 0 else slip_right)[:] |= mask

    return SimResult(
        scenario=sc, seed=int(seed), stamp_ns=stamp_ns, joint_names=tuple(sc.joint_names),
        position_rad=position, velocity_radps=velocity, gyro_z_radps=gyro,
        true_x_m=x, true_y_m=y, true_yaw_rad=wrap_angle(th), true_theta_rad=th, true_v_mps=v, true_w_radps=w,
        true_travel_m=trav, slip_left=slip_left, slip_right=slip_right, slip_intervals_ns=intervals,
        slip_side=np.array([r[2] for r in rows], dtype="<U5"), slip_kind=np.array([r[3] for r in rows], dtype="<U4"),
        true_left_radius_m=sc.true_left_radius_m, true_right_radius_m=sc.true_right_radius_m,
        true_track_m=sc.true_track_m, slip_joint=np.array([r[4] for r in rows], dtype=object).astype(str),
        accel_mps2=acc, pitch_rad=pitch, cmd_v_mps=cmd_v, cmd_w_radps=cmd_w)
