"""The one settings schema of wheel_dr: typed, documented, validated, shared by node, analyser and calibration.

Every parameter is a field of a section dataclass; its dotted name is ``section.field`` (for
example ``wheels.track_width``), exactly as it appears under ``ros__parameters`` in the node's
parameters file. The field's metadata holds the description, unit and allowed range, so the node
declares its ROS 2 parameters, the reference table in docs/parameters.md and validation all from one place.
"""
from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from typing import Any, Iterator, Mapping

from .errors import SettingsError

__all__ = [
    "ParamSpec",
    "WheelSettings",
    "FrameSettings",
    "NoiseSettings",
    "LimitSettings",
    "SlipSettings",
    "OutputSettings",
    "ImuSettings",
    "OnlineCalibrationSettings",
    "Settings",
    "INTEGRATION_SCHEMES",
    "NOISE_MODELS",
    "WHEEL_SOURCES",
    "DRIVE_KINDS",
    "DriveSettings",
]

INTEGRATION_SCHEMES = ("euler", "midpoint", "exact")
NOISE_MODELS = ("per_wheel", "motion_model")
WHEEL_SOURCES = ("position", "velocity", "ticks")
DRIVE_KINDS = ("differential", "tricycle", "ackermann", "mecanum", "omni", "swerve", "custom")


def _p(default: Any, description: str, unit: str = "", lo: float | None = None,
       hi: float | None = None, choices: tuple[str, ...] | None = None,
       lo_open: bool = False, hi_open: bool = False, length: int | None = None, blank: bool = False) -> Any:
    """A dataclass field carrying its parameter documentation and range (``blank``: a list of
    names that may be empty and may hold '' entries)."""
    meta = dict(description=description, unit=unit, lo=lo, hi=hi, choices=choices,
                lo_open=lo_open, hi_open=hi_open, length=length, blank=blank)
    if isinstance(default, (list, tuple)):
        value = tuple(default)
        return field(default_factory=lambda: value, metadata=meta)
    return field(default=default, metadata=meta)


@dataclass(frozen=True)
class ParamSpec:
    """One parameter: dotted name, default, type and documentation."""

    name: str
    default: Any
    kind: type
    description: str
    unit: str
    lo: float | None
    hi: float | None
    choices: tuple[str, ...] | None
    lo_open: bool
    hi_open: bool
    length: int | None
    blank: bool = False

    def range_text(self) -> str:
        """Human-readable allowed range, for errors, docs/parameters.md and parameter descriptors."""
        if self.choices:
            return "one of " + ", ".join(self.choices)
        if self.lo is None and self.hi is None:
            if self.kind is tuple:
                if self.blank:
                    return "list of names, '' for none"
                return "list of names" if self.length is None else f"list of {self.length} numbers"
            return "any" if self.kind is not bool else "true or false"
        lo = "-inf" if self.lo is None else f"{self.lo:g}"
        hi = "inf" if self.hi is None else f"{self.hi:g}"
        left = "(" if self.lo_open or self.lo is None else "["
        right = ")" if self.hi_open or self.hi is None else "]"
        text = f"{left}{lo}, {hi}{right}"
        if self.kind is tuple:
            text = f"{self.length or 'any number of'} values each in {text}"
        return text

    def check(self, value: Any) -> Any:
        """Return ``value`` converted to this parameter's type, or raise SettingsError naming the fix."""
        where = f"parameter '{self.name}'"
        if self.kind is bool:
            if not isinstance(value, bool):
                raise SettingsError(f"{where} is {value!r}; it must be true or false.")
            return value
        if self.kind is str:
            if not isinstance(value, str):
                raise SettingsError(f"{where} is {value!r}; it must be a string ({self.range_text()}).")
            if self.choices and value not in self.choices:
                raise SettingsError(f"{where} is '{value}'; allowed: {', '.join(self.choices)}.")
            return value
        if self.kind is tuple:
            if isinstance(value, (str, bytes)) or not hasattr(value, "__iter__"):
                raise SettingsError(f"{where} is {value!r}; it must be a list ({self.range_text()}).")
            items = tuple(value)
            if self.length is not None and len(items) != self.length:
                raise SettingsError(
                    f"{where} has {len(items)} values; it needs exactly {self.length}.")
            if self.lo is None and self.hi is None and self.blank:  # names, '' for none, may be empty
                if not all(isinstance(i, str) for i in items):
                    raise SettingsError(f"{where} is {list(items)!r}; it must list joint names ('' for none).")
                return items
            if self.lo is None and self.hi is None:  # a list of names
                if not items or not all(isinstance(i, str) and i for i in items):
                    raise SettingsError(
                        f"{where} is {list(items)!r}; it must list one or more joint names.")
                return items
            return tuple(self._number(v, where) for v in items)
        return self._number(value, where)

    def _number(self, value: Any, where: str) -> Any:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise SettingsError(f"{where} is {value!r}; it must be a number in {self.range_text()}.")
        if self.kind is int:
            if isinstance(value, float) and not value.is_integer():
                raise SettingsError(f"{where} is {value!r}; it must be a whole number in {self.range_text()}.")
            value = int(value)
        else:
            value = float(value)
        bad = not math.isfinite(value)
        if self.lo is not None:
            bad |= value < self.lo or (self.lo_open and value == self.lo)
        if self.hi is not None:
            bad |= value > self.hi or (self.hi_open and value == self.hi)
        if bad:
            unit = f" {self.unit}" if self.unit else ""
            raise SettingsError(f"{where} is {value:g}{unit}; allowed range is {self.range_text()}.")
        return value


@dataclass(frozen=True)
class WheelSettings:
    """Which joints are the wheels, how their states read, and the base geometry (metres)."""

    left_joints: tuple[str, ...] = _p(
        ("left_wheel_joint",), "Joint names of the left side; several are averaged (skid steer).")
    right_joints: tuple[str, ...] = _p(
        ("right_wheel_joint",), "Joint names of the right side; several are averaged (skid steer).")
    left_radius: float = _p(0.1, "Effective rolling radius of the left wheels.", "m", 0.001, 5.0)
    right_radius: float = _p(0.1, "Effective rolling radius of the right wheels.", "m", 0.001, 5.0)
    track_width: float = _p(0.5, "Distance between the left and right wheel contact lines.", "m", 0.001, 10.0)
    source: str = _p("position", "What the joint states carry: 'position' (rad, differenced), "
                     "'velocity' (rad/s times dt, for drivers without usable positions) or "
                     "'ticks' (raw encoder counts in the position field).", choices=WHEEL_SOURCES)
    wrap_angle: bool = _p(False, "Joint positions wrap at +-pi (unwrapped per step).")
    ticks_per_revolution: float = _p(4096.0, "Encoder counts per motor revolution (4 x lines for "
                                     "quadrature); used when source is 'ticks'.", "counts", 1.0, 1e9)
    gear_ratio: float = _p(1.0, "Motor revolutions per wheel revolution; used when source is 'ticks'.",
                           "", 0.001, 1e6)
    counter_bits: int = _p(0, "Width of the hardware tick counter that rolls over (16, 32, ...); "
                           "0 means counts never roll over.", "bits", 0, 64)

_TABLE_GEOMETRY = ("wheel_x", "wheel_y", "wheel_radius")


@dataclass(frozen=True)
class DriveSettings:
    """The drive geometry as a table of wheels, one entry per wheel in every array (see docs/drive_models.md).

    With ``kind`` 'differential' (the default) the table is empty and the wheels.* parameters
    describe the base (skid steer included); every other kind reads the table.
    """

    kind: str = _p("differential", "Drive geometry: 'differential' (two sides, the wheels.* parameters; skid steer "
                   "included), or a table of wheels: 'tricycle', 'ackermann' (car-like), 'mecanum', 'omni', "
                   "'swerve' or 'custom' (any table that determines the motion).", choices=DRIVE_KINDS)
    wheel_joints: tuple[str, ...] = _p((), "Spin joint of each wheel of the table ('' for a wheel without an "
                                       "encoder); positions are differenced like the wheels.* joints.", blank=True)
    steer_joints: tuple[str, ...] = _p((), "Steering joint of each wheel ('' for a fixed wheel); its readings are "
                                       "angles, not differenced. May be left empty when no wheel steers.", blank=True)
    wheel_x: tuple[float, ...] = _p((), "Contact point of each wheel in the base frame, x forward (REP 103); "
                                    "filled from the URDF where left empty.", "m", -50.0, 50.0)
    wheel_y: tuple[float, ...] = _p((), "Contact point of each wheel in the base frame, y left (REP 103); "
                                    "filled from the URDF where left empty.", "m", -50.0, 50.0)
    wheel_radius: tuple[float, ...] = _p((), "Effective rolling radius of each wheel; filled from the URDF where "
                                         "left empty.", "m", 0.001, 5.0)
    mount_angle: tuple[float, ...] = _p((), "Rolling direction of each wheel at zero steering in the base frame, "
                                        "counter-clockwise from x (0 = forward); empty: all 0.", "rad",
                                        -2.0 * math.pi, 2.0 * math.pi)
    roller_angle: tuple[float, ...] = _p((), "0 for a standard wheel; otherwise the free direction of its rollers "
                                         "from its rolling direction, counter-clockwise (+-pi/4 mecanum, pi/2 "
                                         "omni); empty: all 0.", "rad", -0.5 * math.pi, 0.5 * math.pi)
    steer_offset: tuple[float, ...] = _p((), "Steering joint reading at which the wheel rolls along its mount "
                                         "angle; empty: all 0.", "rad", -math.pi, math.pi)


@dataclass(frozen=True)
class FrameSettings:
    """Frame names (REP 105)."""

    odom: str = _p("odom", "Frame the pose is expressed in (REP 105 'odom').")
    base: str = _p("base_link", "Frame rigidly attached to the base (REP 105 'base_link').")


@dataclass(frozen=True)
class NoiseSettings:
    """Uncertainty model of the wheel increments."""

    model: str = _p("per_wheel", "Uncertainty model: 'per_wheel' (each wheel's travel has variance "
                    "k |ds|) or 'motion_model' (odometry motion model, alphas).", choices=NOISE_MODELS)
    k_left: float = _p(5e-4, "Per-wheel model: variance of the left travel per metre travelled.",
                       "m", 0.0, 1.0)
    k_right: float = _p(5e-4, "Per-wheel model: variance of the right travel per metre travelled.",
                        "m", 0.0, 1.0)
    alphas: tuple[float, ...] = _p(
        (0.05, 0.001, 0.01, 0.001),
        "Motion model alpha1..alpha4: rotation from rotation (rad^2/rad^2), rotation from translation "
        "(rad^2/m^2), translation from translation (m^2/m^2), translation from rotation (m^2/rad^2).",
        "", 0.0, 10.0, length=4)
    k_wheels: tuple[float, ...] = _p((5e-4,), "Wheel tables (drive.kind other than differential): variance of a "
                                     "wheel's travel per metre travelled, one value for every wheel or one per "
                                     "wheel.", "m", 0.0, 1.0)
    steer_sd_rad: float = _p(0.005, "Wheel tables: standard deviation of one steering joint reading.", "rad",
                             0.0, 1.0)


@dataclass(frozen=True)
class LimitSettings:
    """Plausibility limits that decide when a sample is skipped or the increment chain restarts."""

    max_gap_s: float = _p(0.5, "A gap between samples longer than this restarts the increment chain "
                          "(the pose is kept, the increment across the gap is dropped).", "s", 0.001, 3600.0)
    max_wheel_speed_mps: float = _p(5.0, "A wheel surface speed above this is an encoder jump or glitch: "
                                    "the increment is dropped and the chain restarts.", "m/s", 0.001, 1000.0)
    max_steer_rate_radps: float = _p(10.0, "Wheel tables: a steering joint turning faster than this between "
                                     "samples is a reading glitch: the increment is dropped and the chain "
                                     "restarts (steering angles are not differenced, so the wheel-speed limit "
                                     "does not apply to them).", "rad/s", 0.001, 10000.0)


@dataclass(frozen=True)
class SlipSettings:
    """Slip and fault detection (see wheel_dr.core.slip)."""

    enabled: bool = _p(True, "Run the slip detectors.")
    response: str = _p("flag", "What a detected slip does: 'flag' only, 'inflate' the covariance, or "
                       "'gyro' (take the gyro's yaw increment while slipping).",
                       choices=("flag", "inflate", "gyro"))
    window_s: float = _p(0.1, "Sliding window over which wheel speeds and heading changes are compared "
                         "(smooths encoder and timing noise); at least one sample period of a 1 kHz driver.", "s", 0.001, 5.0)
    long_window_s: float = _p(1.0, "Second, longer window of the gyro-versus-wheels test for mild sustained "
                              "slips (counts while the short window points the same way); 0 turns it off, else at least "
                              "slip.window_s.", "s", 0.0, 60.0)
    set_delay_s: float = _p(0.02, "Debounce: a detector's score must stay above 1 this long before its flag "
                            "sets.", "s", 0.0, 10.0)
    clear_delay_s: float = _p(0.04, "A detector's score must stay below slip.clear_fraction this long before "
                              "its flag clears.", "s", 0.0, 10.0)
    clear_fraction: float = _p(0.5, "Hysteresis: fraction of the threshold below which a detector counts as "
                               "clear (between it and 1 the flag keeps its state).", "", 0.0, 1.0,
                               lo_open=True, hi_open=True)
    gyro_gate: float = _p(6.63, "Chi-square gate (1 degree of freedom) on the gyro-versus-wheels heading "
                          "difference; 6.63 is the 99 % quantile.", "", 0.01, 1e6)
    gyro_noise_radps: float = _p(0.01, "Standard deviation of one gyro z-rate reading (white noise).", "rad/s",
                                 1e-6, 10.0)
    gyro_rate_tolerance_radps: float = _p(0.05, "Extra standard deviation of the gyro-wheel yaw-rate "
                                          "difference for timing and mounting effects (common practice).",
                                          "rad/s", 0.0, 10.0)
    gyro_scale_tolerance: float = _p(0.05, "Extra standard deviation of the heading difference as a fraction "
                                     "of the wheels' heading change (gyro scale, track width error).", "",
                                     0.0, 1.0)
    gyro_bias_radps: float = _p(0.0, "Gyro z bias assumed until the base has stood still long enough to "
                                "estimate it.", "rad/s", -1.0, 1.0)
    gyro_bias_samples: int = _p(500, "The gyro bias is the mean z rate over this many most recent "
                                "standing-still samples.", "samples", 1, 10000000)
    still_speed_mps: float = _p(0.005, "Both wheel speeds below this count as standing still (gyro bias "
                                "estimation).", "m/s", 0.0, 1.0)
    traction_mu: float = _p(0.5, "Friction coefficient for the traction check: a wheel accelerating faster "
                            "than mu g is slipping or glitching (rubber on dry indoor floors about 0.5 to "
                            "0.9, common practice).", "", 0.01, 5.0)
    traction_hold_s: float = _p(2.0, "A traction spike keeps its side flagged until a spike of the opposite "
                                "sign (grip regained) or this long after the last spike.", "s", 0.0, 600.0)
    same_side_ratio: float = _p(0.25, "Wheels of one side whose speeds spread by more than this fraction of "
                                "the side's mean speed disagree (slip ratio, common practice).", "", 0.01, 10.0)
    same_side_min_speed_mps: float = _p(0.1, "Side speeds below this count as this speed in the same-side "
                                        "ratio (keeps slow motion from firing).", "m/s", 0.001, 10.0)
    inflate_factor: float = _p(100.0, "Factor on the step noise (and twist covariance) of flagged samples "
                               "for the 'inflate' response, and in 'gyro' for samples without a gyro "
                               "reading.", "", 1.0, 1e9)
    accel_horizon_s: float = _p(1.0, "Horizon of the accelerometer's speed observer: while no slip is flagged, the "
                                "observer is the wheel speed this long ago plus the acceleration integrated since "
                                "(see wheel_dr.core.slip_motion); 0 turns the accelerometer and command detectors "
                                "off.", "s", 0.0, 30.0)
    accel_gate: float = _p(6.63, "Chi-square gate (1 degree of freedom) on the wheel-versus-observer speed "
                           "difference; 6.63 is the 99 % quantile.", "", 0.0, 1e6, lo_open=True)
    accel_bias_tolerance_mps2: float = _p(0.03, "Extra standard deviation of the longitudinal acceleration for bias "
                                          "drift, mounting tilt and floor unevenness; grows the allowance with the "
                                          "integration time.", "m/s^2", 0.0, 5.0)
    accel_speed_tolerance_mps: float = _p(0.03, "Extra standard deviation of the wheel-versus-observer speed "
                                          "difference for timing and vibration (common practice).", "m/s", 0.0, 5.0)
    accel_scale_tolerance: float = _p(0.05, "Extra standard deviation of that difference as a fraction of the speed "
                                      "change over the horizon (wheel radius and accelerometer scale errors).", "",
                                      0.0, 1.0)
    command_tolerance_mps: float = _p(0.1, "Extra standard deviation of the commanded-versus-measured speed change "
                                      "for the drive's tracking error (command detector).", "m/s", 0.0, 5.0)
    command_timeout_s: float = _p(0.5, "A cmd_vel older than this counts as no command (drivers stop on a stale "
                                  "command).", "s", 0.0, 60.0, lo_open=True)
    distance_source: str = _p("wheels", "Distance of samples the accelerometer detector flags: 'wheels' (as "
                              "measured) or 'observer' (the observer's speed times dt; the heading keeps its "
                              "source).", choices=("wheels", "observer"))


@dataclass(frozen=True)
class OutputSettings:
    """What the node publishes (the analyser ignores these)."""

    publish_tf: bool = _p(True, "Publish the odom -> base transform on /tf.")
    diagnostics_period_s: float = _p(1.0, "Period of the /diagnostics status.", "s", 0.05, 60.0)
    rate_hz: float = _p(0.0, "Rate of the odometry, TF and flags outputs by sample stamp (every sample is still "
                        "integrated); 0 publishes one output per joint-state message.", "Hz", 0.0, 10000.0)


@dataclass(frozen=True)
class ImuSettings:
    """The IMU's accelerometer and mounting (slip detection; the gyro's settings are under slip.)."""

    position_m: tuple[float, ...] = _p((0.0, 0.0, 0.0), "Position of the IMU in the base frame, x forward, y left, "
                                       "z up (REP 103), for the lever-arm correction of the accelerometer (z is "
                                       "not used by the planar estimator).", "m", -10.0, 10.0, length=3)
    accel_noise_mps2: float = _p(0.02, "Standard deviation of one accelerometer reading (white noise; about "
                                 "0.01 to 0.05 m/s^2 for MEMS IMUs at 100 Hz).", "m/s^2", 0.0, 10.0, lo_open=True)
    accel_bias_mps2: float = _p(0.0, "Accelerometer x bias assumed until the base has stood still long enough to "
                                "estimate it.", "m/s^2", -5.0, 5.0)
    use_orientation: bool = _p(True, "Remove gravity's share from the x acceleration with the IMU's orientation "
                               "where the Imu message gives one (orientation_covariance[0] != -1).")
    max_slope_deg: float = _p(0.0, "Steepest slope the base drives on without orientation: its gravity share "
                              "g sin(slope) widens the accelerometer allowance (0: floors level beyond what the "
                              "standstill bias absorbed; ramps in buildings are up to about 5 deg).", "deg",
                              0.0, 30.0)


@dataclass(frozen=True)
class OnlineCalibrationSettings:
    """Online self-calibration from the gyro (see wheel_dr.core.online_calibration)."""

    enabled: bool = _p(False, "Estimate the geometry the gyro observes (radius ratio, track over mean radius) while "
                       "driving, and alert when it departs from the configured one; needs an IMU.")
    horizon_m: float = _p(30.0, "Forgetting horizon: data driven this far ago (mean wheel travel) weighs 1/e as much "
                          "as new data; shorter follows changes faster, longer gives smaller standard errors.", "m",
                          1.0, 1e6)
    alert_pct: float = _p(0.5, "An estimate that departs from the configured value by more than this (and by more "
                          "than 4 standard errors) raises the geometry alert.", "%", 0.01, 50.0)
    clear_fraction: float = _p(0.5, "Hysteresis: the alert holds until the departure falls below this fraction of "
                               "online_calibration.alert_pct.", "", 0.0, 1.0, lo_open=True, hi_open=True)
    interval_s: float = _p(0.1, "Samples are summed over intervals of this length (by stamp) before they enter the "
                           "estimate; one estimate per interval (at least 10 per second).", "s", 0.001, 0.1)
    chunk_m: float = _p(0.05, "Intervals are merged until the wheels have travelled this far (mean of the sides' "
                        "|travel|, or for 5 s) before they enter the estimate: the wheels' random error is then small "
                        "against their travel.", "m", 0.0, 100.0)
    gate: float = _p(10.83, "Chi-square gate (1 degree of freedom) on a merged interval's gyro-versus-wheels residual; "
                     "10.83 is the 99.9 % quantile (larger residuals are outliers and are skipped).", "", 0.01, 1e6)
    prior_pct: float = _p(10.0, "Standard deviation of the prior on the configured geometry (keeps the estimate "
                          "defined before the drive has turned enough).", "%", 0.1, 100.0)
    prior_bias_radps: float = _p(0.05, "Standard deviation of the prior on the gyro z bias (mean "
                                 "slip.gyro_bias_radps).", "rad/s", 1e-6, 10.0)
    apply: bool = _p(False, "Node: when the alert sets, change the running geometry to the suggested values "
                     "(radius ratio and track; the mean radius is kept). Off: only report.")
    reference_topic: str = _p("", "Node: a pose topic of the robot's own localisation (PoseWithCovarianceStamped, "
                              "Odometry or PoseStamped) that makes the scale observable; '' for none.")


SECTIONS: dict[str, type] = {
    "wheels": WheelSettings,
    "drive": DriveSettings,
    "frames": FrameSettings,
    "integration": str,  # a top-level scalar, see Settings.integration
    "noise": NoiseSettings,
    "limits": LimitSettings,
    "slip": SlipSettings,
    "output": OutputSettings,
    "imu": ImuSettings,
    "online_calibration": OnlineCalibrationSettings,
}

_INTEGRATION_SPEC = dict(
    description="Pose integration scheme: 'euler', 'midpoint' (2nd-order Runge-Kutta) or 'exact' "
                "(constant-curvature arc).",
    unit="", lo=None, hi=None, choices=INTEGRATION_SCHEMES, lo_open=False, hi_open=False, length=None)


@dataclass(frozen=True)
class Settings:
    """All estimator, node and analyser settings; build with ``Settings.from_flat`` to validate."""

    wheels: WheelSettings = field(default_factory=WheelSettings)
    drive: DriveSettings = field(default_factory=DriveSettings)
    frames: FrameSettings = field(default_factory=FrameSettings)
    integration: str = "exact"
    noise: NoiseSettings = field(default_factory=NoiseSettings)
    limits: LimitSettings = field(default_factory=LimitSettings)
    slip: SlipSettings = field(default_factory=SlipSettings)
    output: OutputSettings = field(default_factory=OutputSettings)
    imu: ImuSettings = field(default_factory=ImuSettings)
    online_calibration: OnlineCalibrationSettings = field(default_factory=OnlineCalibrationSettings)

    # -- schema -----------------------------------------------------------------------------
    @staticmethod
    def specs() -> list[ParamSpec]:
        """Every parameter's spec, in file order."""
        out: list[ParamSpec] = []
        for sec_name, sec in SECTIONS.items():
            if sec is str:
                out.append(ParamSpec(sec_name, "exact", str, **_INTEGRATION_SPEC))
                continue
            for f in dataclasses.fields(sec):
                default = f.default if f.default is not dataclasses.MISSING else f.default_factory()
                kind = tuple if isinstance(default, tuple) else type(default)
                out.append(ParamSpec(f"{sec_name}.{f.name}", default, kind, **f.metadata))
        return out

    @staticmethod
    def spec(name: str) -> ParamSpec:
        """The spec of one dotted parameter name."""
        for s in Settings.specs():
            if s.name == name:
                return s
        raise SettingsError(f"parameter '{name}' is not a wheel_dr parameter; see docs/parameters.md "
                            "for the names.")

    # -- conversion ------------------------------------------------------------------------
    @classmethod
    def from_flat(cls, values: Mapping[str, Any], base: "Settings | None" = None,
                  ignore_unknown: bool = False) -> "Settings":
        """Settings from dotted names (as in a parameters file), validated; unknown names are errors.

        Values not given keep those of ``base`` (default: the documented defaults).
        """
        flat = (base or cls()).to_flat()
        known = set(flat)
        for name, value in values.items():
            if name not in known:
                if ignore_unknown:
                    continue
                close = [k for k in known if k.split(".")[-1] == name.split(".")[-1]]
                hint = f" (did you mean '{close[0]}'?)" if close else ""
                raise SettingsError(f"parameter '{name}' is not a wheel_dr parameter{hint}; remove it or fix "
                                    "its name.")
            flat[name] = cls.spec(name).check(value)
        sections: dict[str, Any] = {}
        for sec_name, sec in SECTIONS.items():
            if sec is str:
                sections[sec_name] = flat[sec_name]
            else:
                sections[sec_name] = sec(**{f.name: flat[f"{sec_name}.{f.name}"] for f in dataclasses.fields(sec)})
        settings = cls(**sections)
        settings._check_consistency()
        return settings

    def to_flat(self) -> dict[str, Any]:
        """Dotted name -> value, for writing a parameters file or declaring ROS parameters."""
        out: dict[str, Any] = {}
        for sec_name, sec in SECTIONS.items():
            value = getattr(self, sec_name)
            if sec is str:
                out[sec_name] = value
            else:
                for f in dataclasses.fields(sec):
                    out[f"{sec_name}.{f.name}"] = getattr(value, f.name)
        return out

    def replace(self, **flat_values: Any) -> "Settings":
        """A validated copy with some dotted-name values changed (pass a dict with ``**``)."""
        return Settings.from_flat(flat_values, base=self)

    def with_values(self, values: Mapping[str, Any]) -> "Settings":
        """A validated copy with the given dotted-name values changed."""
        return Settings.from_flat(values, base=self)

    def _check_consistency(self) -> None:
        left, right = self.wheels.left_joints, self.wheels.right_joints
        both = set(left) & set(right)
        if both:
            raise SettingsError(f"joint '{sorted(both)[0]}' is listed in both wheels.left_joints and "
                                "wheels.right_joints; list each joint on one side only.")
        if len(set(left)) != len(left) or len(set(right)) != len(right):
            raise SettingsError("a joint is listed twice in wheels.left_joints or wheels.right_joints; "
                                "list each joint once.")
        self._check_drive()
        s = self.slip
        if 0.0 < s.long_window_s < s.window_s:
            raise SettingsError(f"parameter 'slip.long_window_s' is {s.long_window_s:g} s, shorter than "
                                f"slip.window_s ({s.window_s:g} s); set it to 0 (off) or at least slip.window_s.")
        self._check_derived()

    def _check_drive(self) -> None:
        """A table kind builds its wheel table (one sentence on what does not fit); differential has none."""
        d = self.drive
        if d.kind == "differential":
            given = [f"drive.{f.name}" for f in dataclasses.fields(d) if f.name != "kind" and getattr(d, f.name)]
            if given:
                raise SettingsError(f"{given[0]} is set but drive.kind is 'differential' (which uses the wheels.* "
                                    "parameters); set drive.kind to the base's kind or remove the drive table.")
            return
        if all(getattr(d, name) for name in _TABLE_GEOMETRY):   # else the URDF may fill it (drive_model says what is missing)
            object.__setattr__(self, "_drive_model", self._build_drive_model())

    def _build_drive_model(self):
        from .drive.table import WheelTable   # the core's own drive package (no cycle: it needs only errors)

        d, n = self.drive, self.noise
        for name in _TABLE_GEOMETRY:
            if not getattr(d, name):
                raise SettingsError(f"parameter 'drive.{name}' is empty; give one value per wheel of drive.wheel_joints "
                                    "(or let the URDF in the bag fill it).")
        k = n.k_wheels[0] if len(n.k_wheels) == 1 else n.k_wheels
        return WheelTable(d.kind, d.wheel_joints, d.wheel_x, d.wheel_y, d.wheel_radius,
                          steer_joints=d.steer_joints or None, mount_angle=d.mount_angle or None,
                          roller_angle=d.roller_angle or None, steer_offset=d.steer_offset or None,
                          k_wheels=k, steer_sd_rad=n.steer_sd_rad)

    def drive_model(self):
        """The ``core.drive.WheelTable`` of a table kind (built once, at validation), None for 'differential'.

        Raises SettingsError naming the empty geometry array when a table kind's positions or radii
        were left for a URDF to fill and nothing filled them.
        """
        if self.drive.kind == "differential":
            return None
        model = getattr(self, "_drive_model", None)
        return model if model is not None else self._build_drive_model()

    def _check_derived(self) -> None:
        """Quantities the core divides by or multiplies with must be finite and positive (no under- or overflow)."""
        w, s, lim = self.wheels, self.slip, self.limits
        derived = {
            "radians per encoder count (2 pi / (wheels.ticks_per_revolution * wheels.gear_ratio))":
                2.0 * math.pi / (w.ticks_per_revolution * w.gear_ratio),
            "1 / wheels.track_width^2": 1.0 / (w.track_width * w.track_width),
            "largest step travel (limits.max_wheel_speed_mps * limits.max_gap_s)": lim.max_wheel_speed_mps * lim.max_gap_s,
            "gyro variance times gate (slip.gyro_noise_radps^2 * slip.gyro_gate)":
                s.gyro_noise_radps * s.gyro_noise_radps * s.gyro_gate,
            "traction limit (slip.traction_mu * g)": s.traction_mu * 9.80665,
            "same-side floor (slip.same_side_min_speed_mps * slip.same_side_ratio)":
                s.same_side_min_speed_mps * s.same_side_ratio,
        }
        for what, value in derived.items():
            if not (math.isfinite(value) and value > 1e-200 and value < 1e200):
                raise SettingsError(f"the derived {what} is {value:g}, outside what the estimator can compute "
                                    "with; bring those parameters into the range of a real base.")

    def __iter__(self) -> Iterator[tuple[str, Any]]:
        return iter(self.to_flat().items())
