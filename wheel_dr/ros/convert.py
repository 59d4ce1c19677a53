"""Message <-> core conversion for the node: stamps, parameters, odometry, TF, flags and diagnostics.

Everything numeric comes from wheel_dr.core; this module only moves numbers between ROS 2
messages and the core's types. It needs message packages and ``rclpy.serialization`` (to lay out
the serialised templates once), never a running ROS graph, so it is tested in-process.

Frames (REP 105): the pose is in ``frames.odom``, the twist in ``frames.base``. Covariance layout
(nav_msgs/Odometry): 6x6 row-major over (x, y, z, rotation about X, Y, Z), filled by
``wheel_dr.core.conventions`` (z, roll, pitch unobserved, variance 1e6).
"""
from __future__ import annotations

import math
import struct
from array import array
from typing import Any, Mapping, Sequence

import numpy as np

from ..core.conventions import (planar_covariance_from_6x6, pose_covariance_6x6, quaternion_to_yaw,
                                twist_covariance_6x6, yaw_to_quaternion)
from ..core.errors import InputError
from ..core.settings import ParamSpec
from ..core.wheels import SampleStatus

__all__ = [
    "FLAG_FIELDS",
    "FLAGS_LABEL",
    "flag_fields",
    "STATUS_NAMES",
    "stamp_to_ns",
    "ns_to_sec_nanosec",
    "parameter_descriptor",
    "parameter_value",
    "python_value",
    "RawOdometryWriter",
    "parse_joint_state",
    "CdrError",
    "parse_imu_gyro_z",
    "parse_imu_motion",
    "DETECTOR_BITS_TEXT",
    "pose_cov_index",
    "flag_values",
    "pose_from_msg",
    "key_values",
]

# Field order of the flags message (std_msgs/Float64MultiArray ``data``); see FLAGS_LABEL and
# the field-by-field table in docs/node.md. Booleans are 0.0 / 1.0, codes are whole numbers.
FLAG_FIELDS: tuple[str, ...] = (
    "stamp_sec",       # joint-state stamp, whole seconds (header.stamp.sec)
    "stamp_nanosec",   # joint-state stamp, nanoseconds part (header.stamp.nanosec)
    "status",          # SampleStatus code of this sample (0 used, 1 chain start, 2 gap, 3 jump, 10.. skipped)
    "slip",            # 1 when either side is flagged as slipping
    "slip_left",       # 1 when the left side is flagged
    "slip_right",      # 1 when the right side is flagged
    "detector",        # bit mask of the detectors that fired (1 gyro, 2 traction, 4 same side, 8 accel, 16 command)
    "score",           # largest detector score (1 = at its threshold); 0 for skipped samples
)
FLAGS_LABEL = "wheel_dr_flags:" + ",".join(FLAG_FIELDS)
DETECTOR_BITS_TEXT = "1 gyro, 2 traction, 4 same side, 8 accel, 16 command, 32 residual (wheel tables)"
STATUS_NAMES: dict[int, str] = {int(s): s.name.lower() for s in SampleStatus}


def stamp_to_ns(stamp: Any) -> int:
    """builtin_interfaces/Time -> integer nanoseconds (sec * 1e9 + nanosec, exact)."""
    return stamp.sec * 1_000_000_000 + stamp.nanosec


def ns_to_sec_nanosec(stamp_ns: int) -> tuple[int, int]:
    """Integer nanoseconds -> (sec, nanosec) of builtin_interfaces/Time (nanosec in [0, 1e9))."""
    sec, nanosec = divmod(int(stamp_ns), 1_000_000_000)
    return sec, nanosec


# --- parameters -------------------------------------------------------------------------------
_INT64_MAX = 2**63 - 1


def parameter_descriptor(spec: ParamSpec, read_only: bool = False) -> Any:
    """rcl_interfaces/ParameterDescriptor for one wheel_dr parameter (description, unit, range).

    Numbers with a lower or upper bound get a FloatingPointRange / IntegerRange (an open side is
    enforced by the settings check, the descriptor can only say closed); the description always
    ends with the exact allowed range.
    """
    from rcl_interfaces.msg import FloatingPointRange, IntegerRange, ParameterDescriptor

    unit = f" Unit: {spec.unit}." if spec.unit else ""
    desc = ParameterDescriptor(
        name=spec.name,
        description=f"{spec.description}{unit} Allowed: {spec.range_text()}.",
        read_only=read_only,
    )
    if spec.choices:
        desc.additional_constraints = "one of: " + ", ".join(spec.choices)
    if spec.kind is tuple and spec.name.startswith("drive."):
        # The table's lists are empty by default, which rclpy cannot type (it would take a byte
        # array): let them take a string or number array; the settings check enforces the type.
        desc.dynamic_typing = True
    if spec.kind in (float, int) and (spec.lo is not None or spec.hi is not None):
        if spec.kind is float:
            lo = -math.inf if spec.lo is None else float(spec.lo)
            hi = math.inf if spec.hi is None else float(spec.hi)
            desc.floating_point_range = [FloatingPointRange(from_value=lo, to_value=hi, step=0.0)]
        else:
            lo_i = -_INT64_MAX if spec.lo is None else int(spec.lo)
            hi_i = _INT64_MAX if spec.hi is None else int(spec.hi)
            desc.integer_range = [IntegerRange(from_value=lo_i, to_value=hi_i, step=0)]
    return desc


def parameter_value(value: Any) -> Any:
    """A settings value as rclpy wants it for declare/set (tuples become lists)."""
    if isinstance(value, tuple):
        return list(value)
    return value


def python_value(value: Any) -> Any:
    """A value read back from rclpy (array.array, numpy, list) as plain Python for Settings."""
    if isinstance(value, (array, np.ndarray)):
        return [v.item() if hasattr(v, "item") else v for v in value]
    if isinstance(value, (list, tuple)):
        return list(value)
    return value


# --- serialised (CDR) fast path -----------------------------------------------------------------
# The node takes joint states as serialised bytes and publishes pre-laid-out bytes: converting
# between Python message objects and C costs more than the whole estimator step at 1 kHz. CDR
# (OMG DDS-XTypes / CDR, little-endian encapsulation 0x0001): after the 4-byte encapsulation header,
# every primitive is aligned to its size relative to the end of that header; strings and sequences
# are a uint32 length followed by the elements (strings include their terminating NUL).
_CDR_LE = b"\x00\x01"
_CDR_BE = b"\x00\x00"
_u32 = struct.Struct("<I")
_stamp = struct.Struct("<iI")
_READERS = {_CDR_LE: ("<", struct.Struct("<I"), struct.Struct("<iI"), struct.Struct("<d")),
            _CDR_BE: (">", struct.Struct(">I"), struct.Struct(">iI"), struct.Struct(">d"))}


from ..core.errors import CdrError  # noqa: E402  (defined with every other error)


def _align(pos: int, n: int) -> int:
    """Next position aligned to ``n`` bytes, counted from the end of the 4-byte header."""
    return pos + (-(pos - 4) % n)


def _reader(raw: bytes, what: str):
    head = bytes(raw[:2])
    if len(raw) < 4 or head not in _READERS:
        raise CdrError(f"{what} is not plain CDR (encapsulation {head.hex() or 'missing'})")
    return _READERS[head]


def _u32_at(raw: bytes, pos: int, u32: struct.Struct, what: str) -> int:
    if pos + 4 > len(raw):
        raise CdrError(f"{what} ends inside a length field")
    return u32.unpack_from(raw, pos)[0]


def parse_joint_state(raw: bytes) -> tuple[int, int, tuple[str, ...], tuple[float, ...], tuple[float, ...]]:
    """Serialised sensor_msgs/JointState -> (stamp sec, nanosec, names, positions, velocities).

    Little- and big-endian CDR (encapsulation 0x0001 / 0x0000). Efforts are not read. Every
    length is checked against the buffer before it is used, so a truncated, corrupted or crafted
    buffer raises CdrError (a ValueError) and nothing else; no read goes past the buffer.
    """
    what = "joint state"
    endian, u32, stamp, _ = _reader(raw, what)
    size = len(raw)
    if size < 16:
        raise CdrError(f"{what} is shorter than its header")
    sec, nanosec = stamp.unpack_from(raw, 4)
    n = _u32_at(raw, 12, u32, what)
    if n < 1 or 16 + n > size or raw[15 + n] != 0:
        raise CdrError(f"{what} frame_id length {n} does not fit the message")
    pos = _align(16 + n, 4)
    count = _u32_at(raw, pos, u32, what)
    pos += 4
    if count > (size - pos) // 5:          # each name needs at least a length and its NUL
        raise CdrError(f"{what} claims {count} names, more than the message holds")
    names = []
    for _ in range(count):
        pos = _align(pos, 4)
        n = _u32_at(raw, pos, u32, what)
        if n < 1 or pos + 4 + n > size or raw[pos + 3 + n] != 0:
            raise CdrError(f"{what} name length {n} does not fit the message")
        try:
            names.append(bytes(raw[pos + 4:pos + 3 + n]).decode("utf-8"))
        except UnicodeDecodeError:
            raise CdrError(f"{what} has a joint name that is not UTF-8") from None
        pos += 4 + n
    arrays = []
    for _ in range(2):  # position, velocity
        pos = _align(pos, 4)
        count = _u32_at(raw, pos, u32, what)
        pos += 4
        if count:
            pos = _align(pos, 8)
            if count > (size - pos) // 8:
                raise CdrError(f"{what} claims {count} values, more than the message holds")
            arrays.append(struct.unpack_from(f"{endian}{count}d", raw, pos))
            pos += 8 * count
        else:
            arrays.append(())
    pos = _align(pos, 4)                    # effort: not read, but it must be there
    count = _u32_at(raw, pos, u32, what)
    if count and count > (size - _align(pos + 4, 8)) // 8:
        raise CdrError(f"{what} claims {count} efforts, more than the message holds")
    return sec, nanosec, tuple(names), arrays[0], arrays[1]


_IMU_DOUBLES = 37  # orientation 4 + 9, angular velocity 3 + 9, linear acceleration 3 + 9


def _imu_doubles(raw: bytes, count: int) -> tuple[float, ...]:
    """The first ``count`` doubles after an Imu's header, bounds-checked, in either byte order."""
    what = "imu message"
    endian, u32, _, _ = _reader(raw, what)
    n = _u32_at(raw, 12, u32, what)
    if n < 1 or 16 + n > len(raw) or raw[15 + n] != 0:
        raise CdrError(f"{what} frame_id length {n} does not fit the message")
    pos = _align(16 + n, 8)
    if pos + 8 * count > len(raw):
        raise CdrError(f"{what} is shorter than an Imu message")
    return struct.unpack_from(f"{endian}{count}d", raw, pos)


def parse_imu_gyro_z(raw: bytes) -> tuple[float, bool]:
    """Serialised sensor_msgs/Imu -> (angular_velocity.z rad/s, angular velocity provided).

    sensor_msgs/Imu: angular_velocity_covariance[0] == -1 means no angular velocity.
    After header: orientation (4 doubles), its covariance (9), angular_velocity (3), its covariance (9).
    Little- or big-endian CDR; a buffer too short or not CDR raises CdrError (a ValueError).
    """
    d = _imu_doubles(raw, 17)
    return d[15], d[16] != -1.0


def parse_imu_motion(raw: bytes) -> tuple[float, bool, float, bool, float]:
    """Serialised sensor_msgs/Imu -> (angular_velocity.z, its flag, linear_acceleration.x, its flag, up_x).

    A flag is False where the message marks the field unknown (its covariance[0] == -1); up_x is
    the x component of the world's up axis in the IMU frame from the orientation
    (``wheel_dr.core.slip_motion.up_x_from_quaternion``), NaN where the orientation is unknown.
    Little- or big-endian CDR; a buffer too short or not CDR raises CdrError (a ValueError).
    """
    d = _imu_doubles(raw, _IMU_DOUBLES)
    qx, qy, qz, qw, o_cov0 = d[0], d[1], d[2], d[3], d[4]
    wz, w_cov0 = d[15], d[16]
    ax, a_cov0 = d[25], d[28]
    up = 2.0 * (qx * qz - qw * qy) if o_cov0 != -1.0 else math.nan
    return wz, w_cov0 != -1.0, ax, a_cov0 != -1.0, up


def pose_cov_index(layout: Any, size: int) -> tuple[np.ndarray, np.ndarray]:
    """Where the core's 6x6 layout function puts each entry of a 3x3 (or 2x2) block, and the fixed rest.

    Returns (flat 6x6 indices of the block's row-major entries, the 36 values for a zero block).
    Derived by calling ``layout`` (``pose_covariance_6x6`` with size 3 / ``twist_covariance_6x6``
    with size 2) so the layout stays defined in wheel_dr.core.conventions only.
    """
    base = np.asarray(layout(np.zeros((size, size))), dtype=np.float64)
    marks = np.arange(1.0, size * size + 1.0).reshape(size, size) * 1e7 + 0.5
    filled = np.asarray(layout(marks), dtype=np.float64) - base
    idx = np.array([int(np.flatnonzero(filled == v)[0]) for v in marks.ravel()])
    return idx, base


def _find(raw: bytes, fmt: str, values: Sequence[Any]) -> int:
    needle = struct.pack(fmt, *values)
    at = raw.find(needle)
    if at < 0 or raw.find(needle, at + 1) >= 0:
        raise ValueError("could not locate a field in the serialised template")
    return at


class RawOdometryWriter:
    """Serialised nav_msgs/Odometry, tf2_msgs/TFMessage (one transform) and flags, laid out once.

    A template of each message is serialised by rclpy with marker values; the byte offsets of the
    stamp and of the numeric blocks are found from the markers, so the layout is rclpy's own. Per
    sample only those bytes are overwritten. Pose (odom frame), twist (base frame) and the 6x6
    covariances follow ``pose_covariance_6x6`` / ``twist_covariance_6x6``; the quaternion is
    ``yaw_to_quaternion`` (REP 103).
    """

    def __init__(self, odom_frame: str, base_frame: str, tf_type: type | None = None,
                 wheel_joints: Sequence[str] = ()) -> None:
        from geometry_msgs.msg import TransformStamped
        from nav_msgs.msg import Odometry
        from rclpy.serialization import serialize_message
        from std_msgs.msg import Float64MultiArray, MultiArrayDimension

        s1, s2 = 1_234_567_891, 987_654_321
        mark = [1e9 + 0.25 * k for k in range(85)]
        odom = Odometry()
        odom.header.frame_id, odom.child_frame_id = odom_frame, base_frame
        odom.header.stamp.sec, odom.header.stamp.nanosec = s1, s2
        p = odom.pose.pose
        p.position.x, p.position.y, p.position.z = mark[0:3]
        p.orientation.x, p.orientation.y, p.orientation.z, p.orientation.w = mark[3:7]
        odom.pose.covariance = mark[7:43]
        t = odom.twist.twist
        t.linear.x, t.linear.y, t.linear.z, t.angular.x, t.angular.y, t.angular.z = mark[43:49]
        odom.twist.covariance = mark[49:85]
        raw = bytes(serialize_message(odom))
        if raw[:2] != _CDR_LE:
            raise ValueError("this middleware does not serialise little-endian CDR")
        self._odom = bytearray(raw)
        self._odom_stamp = _find(raw, "<iI", (s1, s2))
        self._odom_block = _find(raw, "<85d", mark)
        self._values = np.zeros(85)
        self._pose_idx, pose_base = pose_cov_index(pose_covariance_6x6, 3)
        self._twist_idx, twist_base = pose_cov_index(twist_covariance_6x6, 2)
        self._values[7:43] = pose_base
        self._values[49:85] = twist_base
        self._pose_idx = self._pose_idx + 7
        self._twist_idx = self._twist_idx + 49
        self._twist3_idx = pose_cov_index(twist_covariance_6x6, 3)[0] + 49   # wheel tables: (vx, vy, wz)

        self._tf = None
        if tf_type is not None:
            tr = TransformStamped()
            tr.header.frame_id, tr.child_frame_id = odom_frame, base_frame
            tr.header.stamp.sec, tr.header.stamp.nanosec = s1, s2
            tt = tr.transform
            tt.translation.x, tt.translation.y, tt.translation.z = mark[0:3]
            tt.rotation.x, tt.rotation.y, tt.rotation.z, tt.rotation.w = mark[3:7]
            msg = tf_type()
            msg.transforms = [tr]
            raw = bytes(serialize_message(msg))
            self._tf = bytearray(raw)
            self._tf_stamp = _find(raw, "<iI", (s1, s2))
            self._tf_block = _find(raw, "<7d", mark[0:7])

        fields = flag_fields(wheel_joints)
        nf = len(fields)
        flags = Float64MultiArray()
        flags.layout.dim = [MultiArrayDimension(label="wheel_dr_flags:" + ",".join(fields), size=nf, stride=nf)]
        flags.data = [1e9 + 0.25 * k for k in range(nf)]
        raw = bytes(serialize_message(flags))
        self._flags = bytearray(raw)
        self._flags_block = _find(raw, f"<{nf}d", list(flags.data))
        self._flags_fmt = struct.Struct(f"<{nf}d")
        self.n_wheels = len(wheel_joints)

    @property
    def has_tf(self) -> bool:
        return self._tf is not None

    def odometry(self, stamp_sec: int, stamp_nanosec: int, x_m: float, y_m: float, yaw_rad: float,
                 cov_xyyaw: np.ndarray, v_mps: float, w_radps: float, twist_cov_vw: np.ndarray,
                 vy_mps: float = 0.0) -> bytes:
        """Serialised Odometry (and, via ``tf()``, the matching transform) for one estimator state.

        ``twist_cov_vw`` is (2, 2) over (v, w) for differential drive (vy 0, its variance tight) or
        (3, 3) over (vx, vy, wz) for wheel tables."""
        v = self._values
        qx, qy, qz, qw = yaw_to_quaternion(yaw_rad)
        v[0], v[1], v[5], v[6] = x_m, y_m, qz, qw
        v[self._pose_idx] = cov_xyyaw.ravel()
        v[43], v[44], v[48] = v_mps, vy_mps, w_radps
        v[self._twist_idx if twist_cov_vw.shape == (2, 2) else self._twist3_idx] = twist_cov_vw.ravel()
        buf = self._odom
        _stamp.pack_into(buf, self._odom_stamp, stamp_sec, stamp_nanosec)
        at = self._odom_block
        buf[at:at + 680] = v.tobytes()
        if self._tf is not None:
            _stamp.pack_into(self._tf, self._tf_stamp, stamp_sec, stamp_nanosec)
            at = self._tf_block
            self._tf[at:at + 56] = v[:7].tobytes()
        return bytes(buf)

    def tf(self) -> bytes:
        """Serialised TFMessage of the last ``odometry`` call."""
        return bytes(self._tf)

    def flags(self, values: Sequence[float]) -> bytes:
        """Serialised flags message with the FLAG_FIELDS ``values``."""
        self._flags_fmt.pack_into(self._flags, self._flags_block, *values)
        return bytes(self._flags)


def flag_fields(wheel_joints: Sequence[str] = ()) -> tuple[str, ...]:
    """Field names of the flags message: FLAG_FIELDS, then ``wheel:<joint>`` per encoder wheel of a
    wheel table (none for differential drive)."""
    return FLAG_FIELDS + tuple(f"wheel:{j}" for j in wheel_joints)


def flag_values(stamp_sec: int, stamp_nanosec: int, status: int, slip: Any | None, n_wheels: int = 0) -> list[float]:
    """The flag_fields values of one sample; ``slip`` is the core's SlipStep, or None when the
    sample was skipped or not evaluated (then the slip fields are 0); ``n_wheels`` per-wheel flags
    follow for wheel tables."""
    if slip is None:
        return [float(stamp_sec), float(stamp_nanosec), float(status), 0.0, 0.0, 0.0, 0.0, 0.0] + [0.0] * n_wheels
    score = float(slip.score)
    out = [float(stamp_sec), float(stamp_nanosec), float(status), float(bool(slip.slip)),
           float(bool(slip.left)), float(bool(slip.right)), float(int(slip.detector)),
           score if math.isfinite(score) else 0.0]
    if n_wheels:
        wheels = tuple(getattr(slip, "wheel_flags", ()) or ())
        out += [float(bool(f)) for f in wheels[:n_wheels]] + [0.0] * (n_wheels - len(wheels))
    return out


def pose_from_msg(msg: Any, odom_frame: str) -> tuple[tuple[float, float, float], np.ndarray]:
    """geometry_msgs/PoseWithCovarianceStamped -> ((x_m, y_m, yaw_rad), 3x3 covariance over x, y, yaw).

    The pose must be in ``odom_frame`` (or have an empty frame_id), finite, with a symmetric
    positive semi-definite (x, y, yaw) block (``planar_covariance_from_6x6``); otherwise
    InputError says what is wrong.
    """
    frame = msg.header.frame_id
    if frame and frame.lstrip("/") != odom_frame:
        raise InputError(f"re-anchor pose is in frame '{frame}'; send it in the odom frame '{odom_frame}'.")
    p = msg.pose.pose.position
    q = msg.pose.pose.orientation
    values = [p.x, p.y, q.x, q.y, q.z, q.w]
    if not all(math.isfinite(v) for v in values):
        raise InputError("re-anchor pose has a NaN or infinite value; send a finite pose.")
    norm = math.sqrt(q.x * q.x + q.y * q.y + q.z * q.z + q.w * q.w)
    if not 0.5 < norm < 1.5:
        raise InputError(f"re-anchor orientation quaternion has norm {norm:.3g}; send a unit quaternion.")
    yaw = quaternion_to_yaw(q.x / norm, q.y / norm, q.z / norm, q.w / norm)
    cov = planar_covariance_from_6x6(np.asarray(msg.pose.covariance, dtype=np.float64))
    if not np.isfinite(cov).all():
        raise InputError("re-anchor covariance has a NaN or infinite entry; send a finite covariance.")
    if not np.allclose(cov, cov.T, rtol=1e-9, atol=1e-12):
        raise InputError("re-anchor covariance (x, y, yaw block) is not symmetric; send a symmetric covariance.")
    scale = max(1.0, float(np.max(np.abs(cov))))
    if float(np.linalg.eigvalsh(cov).min()) < -1e-12 * scale:
        raise InputError("re-anchor covariance (x, y, yaw block) is not positive semi-definite; "
                         "send a valid covariance.")
    return (float(p.x), float(p.y), float(yaw)), 0.5 * (cov + cov.T)


def key_values(items: Mapping[str, Any]) -> list[Any]:
    """diagnostic_msgs/KeyValue list from a mapping (floats with 6 significant digits)."""
    from diagnostic_msgs.msg import KeyValue

    out = []
    for key, value in items.items():
        if isinstance(value, bool):
            text = "true" if value else "false"
        elif isinstance(value, float):
            text = f"{value:.6g}"
        elif isinstance(value, (list, tuple)):
            text = "[" + ", ".join(f"{v:.6g}" if isinstance(v, float) else str(v) for v in value) + "]"
        else:
            text = str(value)
        out.append(KeyValue(key=key, value=text))
    return out
