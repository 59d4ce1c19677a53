"""Message <-> core conversion for the node: stamps, parameters, odometry, TF, flags and diagnostics.

Everything numeric comes from wheel_dr.core; this module only moves numbers between ROS 2
messages and the core's types. It imports message packages but never rclpy itself, so it can be
tested without a running ROS graph.

Frames (REP 105): the pose is in ``frames.odom``, the twist in ``frames.base``. Covariance layout
(nav_msgs/Odometry): 6x6 row-major over (x, y, z, rotation about X, Y, Z), filled by
``wheel_dr.core.conventions`` (z, roll, pitch unobserved, variance 1e6).
"""
from __future__ import annotations

import math
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
    "STATUS_NAMES",
    "stamp_to_ns",
    "ns_to_sec_nanosec",
    "parameter_descriptor",
    "parameter_value",
    "python_value",
    "OdometryFrame",
    "flag_values",
    "pose_from_msg",
    "key_values",
]

# Field order of the flags message (std_msgs/Float64MultiArray ``data``); see FLAGS_LABEL and
# the README's field-by-field table. Booleans are 0.0 / 1.0, codes are whole numbers.
FLAG_FIELDS: tuple[str, ...] = (
    "stamp_sec",       # joint-state stamp, whole seconds (header.stamp.sec)
    "stamp_nanosec",   # joint-state stamp, nanoseconds part (header.stamp.nanosec)
    "status",          # SampleStatus code of this sample (0 used, 1 chain start, 2 gap, 3 jump, 10.. skipped)
    "slip",            # 1 when either side is flagged as slipping
    "slip_left",       # 1 when the left side is flagged
    "slip_right",      # 1 when the right side is flagged
    "detector",        # bit mask of the detectors that fired (1 gyro, 2 traction, 4 same side)
    "score",           # largest detector score (1 = at its threshold); 0 for skipped samples
)
FLAGS_LABEL = "wheel_dr_flags:" + ",".join(FLAG_FIELDS)
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


# --- odometry and TF --------------------------------------------------------------------------
class OdometryFrame:
    """Reusable nav_msgs/Odometry, TFMessage and flags messages filled from the estimator state.

    Messages are serialised when published, so one instance of each is refilled per sample
    (allocating new ones costs more than the whole estimator step). ``tf_type`` is
    tf2_msgs.msg.TFMessage, or None when TF is not available.
    """

    def __init__(self, odom_frame: str, base_frame: str, tf_type: type | None = None) -> None:
        from geometry_msgs.msg import TransformStamped
        from nav_msgs.msg import Odometry
        from std_msgs.msg import Float64MultiArray, MultiArrayDimension

        self.odom = Odometry()
        self.transform = TransformStamped()
        self.tf = None
        if tf_type is not None:
            self.tf = tf_type()
            self.tf.transforms = [self.transform]
        self.flags = Float64MultiArray()
        self.flags.layout.dim = [MultiArrayDimension(label=FLAGS_LABEL, size=len(FLAG_FIELDS),
                                                     stride=len(FLAG_FIELDS))]
        self.flags.layout.data_offset = 0
        self._pose_cov = np.zeros(36)
        self._twist_cov = np.zeros(36)
        self.set_frames(odom_frame, base_frame)

    def set_frames(self, odom_frame: str, base_frame: str) -> None:
        """Frame names: header.frame_id = odom frame, child_frame_id = base frame (REP 105)."""
        self.odom.header.frame_id = odom_frame
        self.odom.child_frame_id = base_frame
        self.transform.header.frame_id = odom_frame
        self.transform.child_frame_id = base_frame

    def fill(self, stamp_sec: int, stamp_nanosec: int, x_m: float, y_m: float, yaw_rad: float,
             cov_xyyaw: np.ndarray, v_mps: float, w_radps: float, twist_cov_vw: np.ndarray) -> None:
        """Fill odometry and transform from a pose (odom frame), twist (base frame) and covariances.

        The quaternion is a rotation by ``yaw_rad`` about z (REP 103); covariances are laid out by
        ``pose_covariance_6x6`` / ``twist_covariance_6x6``.
        """
        odom = self.odom
        stamp = odom.header.stamp
        stamp.sec = stamp_sec
        stamp.nanosec = stamp_nanosec
        qx, qy, qz, qw = yaw_to_quaternion(yaw_rad)
        pose = odom.pose.pose
        pose.position.x = x_m
        pose.position.y = y_m
        q = pose.orientation
        q.z = qz
        q.w = qw
        self._pose_cov[:] = pose_covariance_6x6(cov_xyyaw)
        odom.pose.covariance = self._pose_cov
        twist = odom.twist.twist
        twist.linear.x = v_mps
        twist.angular.z = w_radps
        self._twist_cov[:] = twist_covariance_6x6(twist_cov_vw)
        odom.twist.covariance = self._twist_cov
        tr = self.transform
        tr.header.stamp.sec = stamp_sec
        tr.header.stamp.nanosec = stamp_nanosec
        t = tr.transform
        t.translation.x = x_m
        t.translation.y = y_m
        t.rotation.z = qz
        t.rotation.w = qw

    def fill_flags(self, values: Sequence[float]) -> None:
        """Put one sample's flag values (``flag_values``) into the flags message."""
        self.flags.data = array("d", values)


def flag_values(stamp_sec: int, stamp_nanosec: int, status: int, slip: Any | None) -> list[float]:
    """The FLAG_FIELDS values of one sample; ``slip`` is the core's SlipStep, or None when the
    sample was skipped or not evaluated (then the slip fields are 0)."""
    if slip is None:
        return [float(stamp_sec), float(stamp_nanosec), float(status), 0.0, 0.0, 0.0, 0.0, 0.0]
    score = float(slip.score)
    return [float(stamp_sec), float(stamp_nanosec), float(status), float(bool(slip.slip)),
            float(bool(slip.left)), float(bool(slip.right)), float(int(slip.detector)),
            score if math.isfinite(score) else 0.0]


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
