"""Bulk decoding and encoding of fixed-layout messages (JointState, Imu, Odometry, poses) with numpy.

Decoding dominates bag replay, so the common case is handled without per-message deserialisation:
when every message of a topic has the same byte length and the same bytes in its variable-length
prefix (frame id, joint names), every field sits at the same offset in every message. The raw
messages are then stacked into one (N, L) byte array and each field is read as a column.

Wire formats handled (facts of the formats):

* ROS 2 CDR, little endian (encapsulation header 00 01 00 00), as rmw implementations write it:
  primitives aligned to their size relative to the end of the 4-byte encapsulation header;
  strings are a uint32 length counting the terminating NUL, then the bytes and the NUL;
  sequences a uint32 count then the elements; fixed arrays have no count.
* ROS 1 serialisation: little endian, no alignment, strings a uint32 length without NUL,
  variable arrays a uint32 count, the std_msgs/Header starts with a uint32 seq.

When a topic does not have one layout (names change, frame ids differ, big-endian CDR, ...),
``None`` is returned and the caller falls back to rosbags' deserialisation.
"""
from __future__ import annotations

import struct
from dataclasses import dataclass
from typing import Sequence

import numpy as np

__all__ = ["Layout", "joint_state_layout", "imu_layout", "pose_layout", "stack_raw", "bulk_joint_states",
           "bulk_imu_gyro_z", "bulk_imu", "bulk_poses", "encode_joint_states", "CDR_LE_HEADER"]

CDR_LE_HEADER = b"\x00\x01\x00\x00"


@dataclass
class Layout:
    """Byte offsets of the fields of one message layout (offsets from the start of the raw message)."""

    length: int                      # total bytes of every message with this layout
    fixed_from: int                  # bytes [fixed_from, fixed_to) are equal in every message
    fixed_to: int
    sec_offset: int                  # int32 (CDR) / uint32 (ROS 1) header.stamp.sec
    nsec_offset: int                 # uint32 nanoseconds
    fields: dict[str, tuple[int, int]]   # name -> (offset, count of float64)
    names: tuple[str, ...] = ()
    frame_id: str = ""


class _Cursor:
    """Reads a CDR or ROS 1 byte string, tracking alignment."""

    def __init__(self, raw: bytes, ros1: bool) -> None:
        self.raw = raw
        self.ros1 = ros1
        self.base = 0 if ros1 else 4
        self.pos = self.base

    def align(self, size: int) -> None:
        if not self.ros1:
            rel = self.pos - self.base
            self.pos += (-rel) % size

    def u32(self) -> int:
        self.align(4)
        (v,) = struct.unpack_from("<I", self.raw, self.pos)
        self.pos += 4
        return v

    def string(self) -> str:
        n = self.u32()
        data = self.raw[self.pos:self.pos + n]
        self.pos += n
        if not self.ros1:
            data = data[:-1] if data.endswith(b"\x00") else data
        return data.decode("utf-8", errors="replace")

    def doubles(self, count: int) -> int:
        if count == 0:
            return self.pos       # an empty sequence adds no padding
        self.align(8)
        start = self.pos
        self.pos += 8 * count
        return start

    def header(self) -> tuple[int, int, str]:
        if self.ros1:
            self.pos += 4  # seq
        sec_off = self.pos
        self.pos += 4
        nsec_off = self.pos
        self.pos += 4
        return sec_off, nsec_off, self.string()


def _start(raw: bytes, ros1: bool) -> _Cursor | None:
    if not ros1 and raw[:4] != CDR_LE_HEADER:
        return None
    return _Cursor(raw, ros1)


def joint_state_layout(raw: bytes, ros1: bool = False) -> Layout | None:
    """Layout of one sensor_msgs/JointState message (header, name[], position[], velocity[], effort[])."""
    try:
        c = _start(raw, ros1)
        if c is None:
            return None
        sec_off, nsec_off, frame = c.header()
        fixed_from = sec_off + 8
        names = tuple(c.string() for _ in range(c.u32()))
        fixed_to = c.pos
        fields = {}
        for name in ("position", "velocity", "effort"):
            count = c.u32()
            fields[name] = (c.doubles(count), count)
        if c.pos > len(raw):
            return None
        return Layout(len(raw), fixed_from, fixed_to, sec_off, nsec_off, fields, names, frame)
    except (struct.error, IndexError):
        return None


def imu_layout(raw: bytes, ros1: bool = False) -> Layout | None:
    """Layout of one sensor_msgs/Imu message: header, orientation[4], cov[9], angular_velocity[3], ..."""
    try:
        c = _start(raw, ros1)
        if c is None:
            return None
        sec_off, nsec_off, frame = c.header()
        fixed_from = sec_off + 8
        fixed_to = c.pos
        orientation = c.doubles(4)
        orientation_cov = c.doubles(9)
        angular = c.doubles(3)
        angular_cov = c.doubles(9)
        linear = c.doubles(3)
        linear_cov = c.doubles(9)
        if c.pos != len(raw):
            return None
        return Layout(len(raw), fixed_from, fixed_to, sec_off, nsec_off,
                      {"orientation": (orientation, 4), "orientation_covariance": (orientation_cov, 9),
                       "angular_velocity": (angular, 3), "angular_velocity_covariance": (angular_cov, 9),
                       "linear_acceleration": (linear, 3), "linear_acceleration_covariance": (linear_cov, 9)},
                      (), frame)
    except (struct.error, IndexError):
        return None


def pose_layout(raw: bytes, msgtype: str, ros1: bool = False) -> Layout | None:
    """Layout of a stamped pose message: Odometry (header, child_frame_id, pose...), PoseStamped or
    PoseWithCovarianceStamped; field ``pose`` is position[3] followed by orientation[4]."""
    try:
        c = _start(raw, ros1)
        if c is None:
            return None
        sec_off, nsec_off, frame = c.header()
        fixed_from = sec_off + 8
        child = ""
        if msgtype.endswith("/Odometry"):
            child = c.string()
        fixed_to = c.pos
        pose = c.doubles(7)
        return Layout(len(raw), fixed_from, fixed_to, sec_off, nsec_off, {"pose": (pose, 7)}, (child,), frame)
    except (struct.error, IndexError):
        return None


def stack_raw(raws: Sequence[bytes], layout: Layout, ros1: bool = False) -> np.ndarray | None:
    """(N, L) uint8 array of the messages if all share ``layout`` (length and fixed bytes), else None."""
    n = len(raws)
    if n == 0:
        return np.zeros((0, layout.length), dtype=np.uint8)
    if isinstance(raws, np.ndarray):
        if raws.ndim != 2 or raws.shape[1] != layout.length:
            return None
        arr = raws
    else:
        total = b"".join(raws)
        if len(total) != n * layout.length:
            return None
        arr = np.frombuffer(total, dtype=np.uint8).reshape(n, layout.length)
    if layout.fixed_to > layout.fixed_from:
        block = arr[:, layout.fixed_from:layout.fixed_to]
        if not (block == block[0]).all():
            return None
    if not ros1 and not (arr[:, :4] == arr[0, :4]).all():
        return None  # mixed encapsulation headers (CDR) -- not one layout
    return arr


def _column(arr: np.ndarray, offset: int, count: int, dtype: str) -> np.ndarray:
    size = np.dtype(dtype).itemsize
    return np.ascontiguousarray(arr[:, offset:offset + size * count]).view(dtype).reshape(len(arr), count)


def _stamps(arr: np.ndarray, layout: Layout, ros1: bool) -> np.ndarray:
    sec = _column(arr, layout.sec_offset, 1, "<u4" if ros1 else "<i4")[:, 0].astype(np.int64)
    nsec = _column(arr, layout.nsec_offset, 1, "<u4")[:, 0].astype(np.int64)
    return sec * 1_000_000_000 + nsec


def _stacked(raws: Sequence[bytes], ros1: bool, layout_of, *args) -> tuple[Layout | None, np.ndarray | None]:
    """The layout of the first message (``layout_of(raw, *args, ros1)``) and all messages stacked as
    one (N, L) byte array, or (None, None) when the topic is empty or its messages differ in layout."""
    if len(raws) == 0:
        return None, None
    layout = layout_of(bytes(raws[0]), *args, ros1)
    if layout is None:
        return None, None
    return layout, stack_raw(raws, layout, ros1)


def bulk_joint_states(raws: Sequence[bytes], ros1: bool = False):
    """(names, stamp_ns (N,), position (N, J), velocity (N, J), has_position, has_velocity) or None."""
    layout, arr = _stacked(raws, ros1, joint_state_layout)
    if arr is None:
        return None
    j = len(layout.names)
    stamps = _stamps(arr, layout, ros1)
    out = []
    for name in ("position", "velocity"):
        off, count = layout.fields[name]
        if count not in (0, j):
            return None  # malformed layout: let the per-message path mark it
        out.append(_column(arr, off, j, "<f8") if count == j else np.full((len(arr), j), np.nan))
    has_pos = layout.fields["position"][1] == j
    has_vel = layout.fields["velocity"][1] == j
    if j and not has_pos and not has_vel:
        return None  # names without values: malformed (core.wheels.samples_from_messages)
    return layout.names, stamps, out[0], out[1], has_pos, has_vel


def bulk_imu_gyro_z(raws: Sequence[bytes], ros1: bool = False):
    """(stamp_ns (N,), angular_velocity.z (N,)) or None."""
    layout, arr = _stacked(raws, ros1, imu_layout)
    if arr is None:
        return None
    off, _ = layout.fields["angular_velocity"]
    return _stamps(arr, layout, ros1), _column(arr, off, 3, "<f8")[:, 2].copy()


def bulk_imu(raws: Sequence[bytes], ros1: bool = False):
    """dict of stamp_ns (N,), orientation (N, 4) x y z w, angular_velocity (N, 3), linear_acceleration
    (N, 3) and the first element of each covariance (N,) (-1 marks the field unknown), or None."""
    layout, arr = _stacked(raws, ros1, imu_layout)
    if arr is None:
        return None
    out = {"stamp_ns": _stamps(arr, layout, ros1)}
    for name in ("orientation", "angular_velocity", "linear_acceleration"):
        off, count = layout.fields[name]
        out[name] = _column(arr, off, count, "<f8").copy()
        out[name + "_cov0"] = _column(arr, layout.fields[name + "_covariance"][0], 1, "<f8")[:, 0].copy()
    return out


def bulk_poses(raws: Sequence[bytes], msgtype: str, ros1: bool = False):
    """(stamp_ns (N,), pose (N, 7) x y z qx qy qz qw, frame_id, child_frame_id) or None."""
    layout, arr = _stacked(raws, ros1, pose_layout, msgtype)
    if arr is None or layout.fields["pose"][0] + 56 > layout.length:
        return None
    off, _ = layout.fields["pose"]
    return _stamps(arr, layout, ros1), _column(arr, off, 7, "<f8"), layout.frame_id, layout.names[0]


def encode_joint_states(template: bytes, stamp_ns: np.ndarray, position: np.ndarray, velocity: np.ndarray,
                        ros1: bool = False) -> np.ndarray:
    """(N, L) uint8: ``template`` (one serialised JointState with the right names and J-long position
    and velocity) with each row's stamp, position and velocity filled in (and seq for ROS 1)."""
    layout = joint_state_layout(template, ros1)
    if layout is None:
        raise ValueError("template is not a little-endian JointState message")
    n = len(stamp_ns)
    j = len(layout.names)
    arr = np.empty((n, layout.length), dtype=np.uint8)
    arr[:] = np.frombuffer(template, dtype=np.uint8)
    stamp = np.asarray(stamp_ns, dtype=np.int64)
    sec = (stamp // 1_000_000_000).astype("<u4" if ros1 else "<i4")
    nsec = (stamp % 1_000_000_000).astype("<u4")
    arr[:, layout.sec_offset:layout.sec_offset + 4] = sec.view(np.uint8).reshape(n, 4)
    arr[:, layout.nsec_offset:layout.nsec_offset + 4] = nsec.view(np.uint8).reshape(n, 4)
    if ros1:
        arr[:, 0:4] = np.arange(n, dtype="<u4").view(np.uint8).reshape(n, 4)
    for name, values in (("position", position), ("velocity", velocity)):
        off, count = layout.fields[name]
        if count != j:
            raise ValueError(f"template {name} must have {j} entries")
        arr[:, off:off + 8 * j] = np.ascontiguousarray(values, dtype="<f8").view(np.uint8).reshape(n, 8 * j)
    return arr
