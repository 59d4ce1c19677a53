"""Reading a recorded run from a bag: joint states in bulk, gyro held per sample, truth, slip labels, URDF.

Works for rosbag2 (mcap and sqlite3, any ROS 2 distribution: message definitions come from the
bag, or from rosbags' newest ROS 2 typestore when the bag has none) and ROS 1 bags, through
rosbags' ``AnyReader``. Topics are found by message type when there is one candidate; otherwise
the caller names one and errors list the candidates. All the needed topics are read in one pass.

Sample stamps are the messages' header stamps (REP 103 / std_msgs/Header); when every header
stamp of the joint-state topic is zero, the bag record times are used instead (``stamps_from``).
"""
from __future__ import annotations

import math
import os
import struct
from dataclasses import dataclass, field
from pathlib import Path
from typing import Sequence

import numpy as np
from rosbags.highlevel import AnyReader
from rosbags.typesys import Stores, get_typestore

from ..core import errors as _errors
from ..core.path import PlanarPath
from ..core.se2 import quaternion_to_yaw_array
from ..core.errors import InputError, WheelDrError
from ..core.wheels import JointSamples, samples_from_messages
from . import codec
from .writer import SLIP_STATUS_NAME

__all__ = ["BagError", "RunData", "read_run", "bag_topics", "read_tum", "parse_truth_spec", "TruthSpec",
           "JOINT_TYPE", "IMU_TYPE", "POSE_TYPES", "TF_TYPE"]

JOINT_TYPE = "sensor_msgs/msg/JointState"
IMU_TYPE = "sensor_msgs/msg/Imu"
POSE_TYPES = ("nav_msgs/msg/Odometry", "geometry_msgs/msg/PoseStamped", "geometry_msgs/msg/PoseWithCovarianceStamped")
TF_TYPE = "tf2_msgs/msg/TFMessage"
STRING_TYPE = "std_msgs/msg/String"
DIAG_TYPE = "diagnostic_msgs/msg/DiagnosticArray"
CMD_TYPES = ("geometry_msgs/msg/Twist", "geometry_msgs/msg/TwistStamped")


BagError = _errors.BagError                # defined with every other error in wheel_dr.core.errors


@dataclass(frozen=True)
class TruthSpec:
    """Where ground truth comes from: ``kind`` 'topic' | 'tf' | 'tum' | 'none' | 'auto'."""

    kind: str
    topic: str = ""
    parent: str = ""
    child: str = ""
    path: str = ""

    def describe(self) -> str:
        if self.kind == "topic":
            return f"topic {self.topic}"
        if self.kind == "tf":
            return f"TF {self.parent} -> {self.child}"
        if self.kind == "tum":
            return f"TUM file {self.path}"
        return self.kind


def parse_truth_spec(text: str | None) -> TruthSpec:
    """'--truth' value: None/'auto', 'none', a topic ('/ground_truth'), 'PARENT->CHILD' (TF pair in the
    bag's /tf and /tf_static) or the path of a TUM trajectory file."""
    if text is None or text == "auto":
        return TruthSpec("auto")
    if text == "none":
        return TruthSpec("none")
    if "->" in text:
        parent, child = (s.strip().strip("/") for s in text.split("->", 1))
        if not parent or not child:
            raise InputError(f"truth '{text}' is not a TF pair; write it as PARENT->CHILD, e.g. map->base_link.")
        return TruthSpec("tf", parent=parent, child=child)
    if text.startswith("/"):
        if Path(text).is_file():
            return TruthSpec("tum", path=text)
        return TruthSpec("topic", topic=text)
    if Path(text).exists():
        return TruthSpec("tum", path=text)
    if os.sep in text or text.endswith((".txt", ".tum")):
        raise InputError(f"truth file '{text}' does not exist; give an existing TUM trajectory file, a topic "
                         "name starting with '/', or a TF pair PARENT->CHILD.")
    return TruthSpec("topic", topic="/" + text)


@dataclass
class RunData:
    """One bag decoded once: everything the replay and the comparison need.

    ``gyro_z_radps`` (N,) is the IMU z rate held (zero-order: the latest reading at or before each
    joint stamp, NaN before the first) or None without an IMU topic. ``truth`` is a PlanarPath in
    the truth's frame or None. ``slip_truth_ns`` (K, 2) int64 inclusive intervals or None.
    """

    path: Path
    storage: str                       # 'rosbag2' or 'rosbag1' plus the storage plugin
    samples: JointSamples
    joint_topic: str
    decode: str                        # 'bulk' or 'per-message'
    stamps_from: str                   # 'header' or 'record time'
    gyro_z_radps: np.ndarray | None = None
    accel_x_mps2: np.ndarray | None = None   # (N,) accelerometer x held, NaN where unknown (covariance[0] -1)
    up_x: np.ndarray | None = None           # (N,) up axis' x component from the IMU orientation, NaN where unknown
    cmd_v_mps: np.ndarray | None = None      # (N,) commanded speed held (cmd_vel linear.x), NaN before the first
    cmd_age_s: np.ndarray | None = None      # (N,) age of that command at each joint stamp
    cmd_topic: str | None = None
    imu_topic: str | None = None
    imu_count: int = 0
    truth: PlanarPath | None = None
    truth_source: str = ""
    slip_truth_ns: np.ndarray | None = None
    slip_side: np.ndarray | None = None
    slip_topic: str | None = None
    urdf: str | None = None
    urdf_topic: str | None = None
    topics: dict[str, str] = field(default_factory=dict)
    connections: dict = field(default_factory=dict, repr=False)   # topic -> rosbags Connection list (open only)
    notes: list[str] = field(default_factory=list)

    def __len__(self) -> int:
        return len(self.samples)


_STORAGE_SUFFIXES = (".mcap", ".db3")


def _not_regular(p: Path) -> bool:
    """True for something that exists but is neither a regular file nor a directory (FIFO, socket, device)."""
    return p.exists() and not p.is_file() and not p.is_dir()


def _refuse_special(p: Path, what: str) -> None:
    if _not_regular(p):
        raise BagError(f"{what} '{p}' is not a regular file (a pipe, socket or device); give the path of a "
                       "recorded bag file or directory.")


def _resolve(path: str | os.PathLike) -> Path:
    """The bag to open: a rosbag2 directory (with metadata.yaml, or holding bare .mcap files), a bare
    .mcap or .db3 file, or a ROS 1 .bag file. Anything else is refused with one sentence."""
    p = Path(path)
    if not p.exists():
        raise BagError(f"bag '{p}' does not exist; give the path of a rosbag2 directory, an .mcap file or a "
                       "ROS 1 .bag file.")
    _refuse_special(p, "bag")
    if p.is_file() and p.suffix in _STORAGE_SUFFIXES and (p.parent / "metadata.yaml").is_file():
        p = p.parent
    if p.is_dir():
        for f in p.iterdir():
            if f.name == "metadata.yaml" or f.suffix in _STORAGE_SUFFIXES:
                _refuse_special(f, "bag file")
        if not (p / "metadata.yaml").is_file() and not any(p.glob("*.mcap")):
            raise BagError(f"'{p}' is a directory without metadata.yaml or .mcap files, so not a rosbag2 bag; give "
                           "the bag directory that the recorder wrote, an .mcap file or a ROS 1 .bag file.")
        return p
    if p.suffix not in (".bag",) + _STORAGE_SUFFIXES:
        raise BagError(f"'{p}' is not a bag (expected a rosbag2 directory, an .mcap or .db3 file, or a ROS 1 file "
                       "ending in .bag); give the path of a recorded bag.")
    return p


def _bag_paths(p: Path) -> list[Path]:
    """What rosbags opens: the directory itself with metadata.yaml, else its .mcap files (a split
    recording whose metadata.yaml was lost), or the one file."""
    if p.is_dir() and not (p / "metadata.yaml").is_file():
        return sorted(p.glob("*.mcap"))
    return [p]


def _open(p: Path) -> AnyReader:
    try:
        reader = AnyReader(_bag_paths(p), default_typestore=get_typestore(Stores.LATEST))
        reader.open()
    except Exception as exc:  # rosbags raises its own and low-level errors (yaml, sqlite3, struct) here
        raise BagError(f"bag '{p}' cannot be opened: {_why(exc)}; re-copy or re-record it.") from None
    return reader


def _why(exc: BaseException) -> str:
    """What is wrong with a bag, in our words, from the kind of error the bag library or the system gave."""
    import sqlite3
    import struct as _struct
    import zlib

    text = str(exc).lower()
    name = exc.__class__.__name__.lower()
    if isinstance(exc, PermissionError):
        return "it cannot be read with this user's permissions"
    if isinstance(exc, (EOFError, _struct.error)) or any(w in text for w in ("truncat", "end of file", "eof",
                                                                                 "unexpected end", "not enough",
                                                                                 "end magic", "footer")):
        return "it ends before its closing records, so it is truncated or its recording did not finish"
    if "crc" in text or "checksum" in text or isinstance(exc, zlib.error):
        return "a checksum does not match, so its data is damaged"
    if any(w in name or w in text for w in ("zstd", "lz4", "decompress", "compress")):
        return "a compressed block of it does not decompress, so its data is damaged"
    if isinstance(exc, sqlite3.Error):
        return "its sqlite3 database is damaged or not a database"
    if "yaml" in name or "metadata" in text or "yaml" in text:
        return "its metadata.yaml is damaged or not what a recorder writes"
    if "magic" in text or "not a" in text or "unrecognized" in text or "unknown" in text or "version" in text:
        return "it does not start like a bag of a known format"
    if isinstance(exc, (KeyError, IndexError)):
        return "its index refers to records or connections that are not in it"
    if "definition" in text or "msgdef" in text or "type" in text:
        return "a message definition in it is missing or cannot be parsed"
    if isinstance(exc, (UnicodeDecodeError, ValueError, TypeError, AttributeError, OverflowError)):
        return "a record in it does not have the layout its format requires"
    if isinstance(exc, OSError):
        return "the system could not read it"
    return "it is damaged or not a bag"


def bag_topics(path: str | os.PathLike) -> dict[str, tuple[str, int]]:
    """Topic -> (message type, message count) of a bag."""
    p = _resolve(path)
    reader = _open(p)
    try:
        out: dict[str, tuple[str, int]] = {}
        for c in reader.connections:
            typ, count = out.get(c.topic, (c.msgtype, 0))
            out[c.topic] = (typ, count + c.msgcount)
        return out
    finally:
        reader.close()


def _pick(types: dict[str, str], wanted: Sequence[str], given: str | None, what: str, flag: str, p: Path,
          required: bool) -> str | None:
    cands = sorted(t for t, typ in types.items() if typ in wanted)
    kinds = " or ".join(w.replace("/msg/", "/") for w in wanted)
    if given:
        if given not in types:
            raise BagError(f"topic '{given}' is not in bag '{p}' ({what} candidates: {', '.join(cands) or 'none'}); "
                           f"fix {flag}.")
        if types[given] not in wanted:
            raise BagError(f"topic '{given}' in bag '{p}' is {types[given]}, not {kinds}; fix {flag} "
                           f"(candidates: {', '.join(cands) or 'none'}).")
        return given
    if len(cands) == 1:
        return cands[0]
    if not cands:
        if required:
            listing = ", ".join(f"{t} ({typ})" for t, typ in sorted(types.items())) or "none"
            raise BagError(f"bag '{p}' has no {kinds} topic (topics: {listing}); record the wheel joint states, "
                           f"or name the topic with {flag}.")
        return None
    raise BagError(f"bag '{p}' has several {what} topics ({', '.join(cands)}); pick one with {flag}.")


def _hold(src_stamps: np.ndarray, src_values: np.ndarray, stamps: np.ndarray) -> np.ndarray:
    """Zero-order hold: the latest source value at or before each stamp (NaN before the first)."""
    order = np.argsort(src_stamps, kind="stable")
    ss, sv = src_stamps[order], src_values[order]
    idx = np.searchsorted(ss, stamps, side="right") - 1
    out = np.where(idx >= 0, sv[np.clip(idx, 0, None)] if len(sv) else np.nan, np.nan)
    return out.astype(np.float64)


def _path(stamps: np.ndarray, x: np.ndarray, y: np.ndarray, yaw: np.ndarray, frame: str) -> PlanarPath:
    order = np.argsort(stamps, kind="stable")
    st = stamps[order]
    keep = np.concatenate(([True], np.diff(st) > 0)) if len(st) else np.zeros(0, dtype=bool)
    ok = keep & np.isfinite(x[order]) & np.isfinite(y[order]) & np.isfinite(yaw[order])
    o = order[ok]
    return PlanarPath(stamps[o].astype(np.int64), x[o].astype(np.float64), y[o].astype(np.float64),
                      yaw[o].astype(np.float64), frame)


def read_tum(path: str | os.PathLike) -> PlanarPath:
    """A TUM RGB-D benchmark trajectory file (Sturm et al. 2012): ``t tx ty tz qx qy qz qw`` per line,
    t in seconds; '#' lines are comments. Returns the planar path (x, y, yaw)."""
    p = Path(path)
    if p.exists() and not p.is_file():
        raise InputError(f"truth file '{p}' is not a regular file (a directory, pipe or device); give a TUM "
                         "trajectory file.")
    if not p.is_file():
        raise InputError(f"truth file '{p}' does not exist; give an existing TUM trajectory file.")
    rows = []
    try:
        text = p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError):
        raise InputError(f"truth file '{p}' cannot be read as text; give a TUM trajectory file "
                         "(timestamp tx ty tz qx qy qz qw per line).") from None
    for n, line in enumerate(text.splitlines(), 1):
        s = line.strip()
        if not s or s.startswith("#"):
            continue
        parts = s.replace(",", " ").split()
        try:
            vals = [float(v) for v in parts]
        except ValueError:
            vals = []
        if len(vals) != 8:
            raise InputError(f"line {n} of truth file '{p}' is not 'timestamp tx ty tz qx qy qz qw'; fix the file.")
        rows.append(vals)
    if not rows:
        raise InputError(f"truth file '{p}' holds no poses; give a TUM file with at least two lines.")
    a = np.asarray(rows)
    stamps = np.round(a[:, 0] * 1e9).astype(np.int64)
    return _path(stamps, a[:, 1], a[:, 2], quaternion_to_yaw_array(a[:, 4:8]), "")


def _decode_joint_states(reader: AnyReader, raws: list[bytes], record_ns: list[int], msgtype: str,
                         ros1: bool) -> tuple[JointSamples, str, str]:
    bulk = codec.bulk_joint_states(raws, ros1)
    if bulk is not None:
        # check the computed layout against rosbags' own decoding of the first message
        ref = reader.deserialize(bytes(raws[0]), msgtype)
        names, stamps, pos, vel, has_pos, has_vel = bulk
        if (tuple(ref.name) != names or (has_pos and not np.array_equal(np.asarray(ref.position), pos[0],
                                                                         equal_nan=True))
                or ref.header.stamp.sec * 1_000_000_000 + ref.header.stamp.nanosec != stamps[0]):
            bulk = None
    if bulk is not None:
        names, stamps, pos, vel, _, _ = bulk
        samples = JointSamples(stamps, tuple(names), pos, vel)
        decode = "bulk"
    else:
        per = []
        for raw in raws:
            m = reader.deserialize(bytes(raw), msgtype)
            per.append((m.header.stamp.sec * 1_000_000_000 + m.header.stamp.nanosec, list(m.name),
                        np.asarray(m.position), np.asarray(m.velocity)))
        samples = samples_from_messages(per)   # the node's rules for every message
        decode = "per-message"
    stamps_from = "header"
    if len(samples) and not np.any(samples.stamp_ns):
        samples.stamp_ns = np.asarray(record_ns, dtype=np.int64)
        stamps_from = "record time"
    return samples, decode, stamps_from


def _decode_gyro(reader: AnyReader, raws: list[bytes], msgtype: str, ros1: bool) -> tuple[np.ndarray, np.ndarray]:
    bulk = codec.bulk_imu_gyro_z(raws, ros1)
    if bulk is not None:
        ref = reader.deserialize(bytes(raws[0]), msgtype)
        if not (ref.angular_velocity.z == bulk[1][0] or (math.isnan(ref.angular_velocity.z) and math.isnan(bulk[1][0]))):
            bulk = None
    if bulk is not None:
        return bulk
    st, wz = [], []
    for raw in raws:
        m = reader.deserialize(bytes(raw), msgtype)
        st.append(m.header.stamp.sec * 1_000_000_000 + m.header.stamp.nanosec)
        wz.append(m.angular_velocity.z)
    return np.asarray(st, dtype=np.int64), np.asarray(wz, dtype=np.float64)


def _decode_imu_motion(reader: AnyReader, raws: list[bytes], msgtype: str, ros1: bool):
    """(stamp_ns, accel_x (NaN where unknown), up_x (NaN where no orientation)) of an Imu topic."""
    from ..core.slip_motion import up_x_from_quaternion

    bulk = codec.bulk_imu(raws, ros1)
    if bulk is not None:
        ref = reader.deserialize(bytes(raws[0]), msgtype)
        if not (ref.linear_acceleration.x == bulk["linear_acceleration"][0, 0]
                or math.isnan(ref.linear_acceleration.x)):
            bulk = None
    if bulk is None:
        st, acc, q, acov, ocov = [], [], [], [], []
        for raw in raws:
            m = reader.deserialize(bytes(raw), msgtype)
            st.append(m.header.stamp.sec * 1_000_000_000 + m.header.stamp.nanosec)
            acc.append(m.linear_acceleration.x)
            o = m.orientation
            q.append((o.x, o.y, o.z, o.w))
            acov.append(m.linear_acceleration_covariance[0])
            ocov.append(m.orientation_covariance[0])
        bulk = {"stamp_ns": np.asarray(st, dtype=np.int64), "linear_acceleration": np.asarray(acc)[:, None],
                "orientation": np.asarray(q, dtype=np.float64).reshape(-1, 4),
                "linear_acceleration_cov0": np.asarray(acov), "orientation_cov0": np.asarray(ocov)}
    ax = np.where(bulk["linear_acceleration_cov0"] == -1.0, np.nan, bulk["linear_acceleration"][:, 0])
    q = bulk["orientation"]
    up = np.where(bulk["orientation_cov0"] == -1.0, np.nan, up_x_from_quaternion(q[:, 0], q[:, 1], q[:, 2], q[:, 3]))
    return bulk["stamp_ns"], ax.astype(np.float64), up.astype(np.float64)


def _decode_cmd(reader: AnyReader, raws: list[bytes], times: Sequence[int], msgtype: str):
    """(stamp_ns, linear.x) of a Twist (record times) or TwistStamped (header stamps) topic."""
    st, vx = [], []
    for raw, rec in zip(raws, times):
        m = reader.deserialize(bytes(raw), msgtype)
        if hasattr(m, "twist"):
            stamp = m.header.stamp.sec * 1_000_000_000 + m.header.stamp.nanosec
            st.append(stamp if stamp > 0 else int(rec))
            vx.append(m.twist.linear.x)
        else:
            st.append(int(rec))
            vx.append(m.linear.x)
    return np.asarray(st, dtype=np.int64), np.asarray(vx, dtype=np.float64)


def _decode_poses(reader: AnyReader, raws: list[bytes], msgtype: str, ros1: bool) -> PlanarPath:
    bulk = codec.bulk_poses(raws, msgtype, ros1)
    if bulk is not None:
        ref = reader.deserialize(bytes(raws[0]), msgtype)
        pose = ref.pose.pose if hasattr(ref.pose, "pose") else ref.pose
        if pose.position.x != bulk[1][0, 0] or pose.orientation.w != bulk[1][0, 6]:
            bulk = None
    if bulk is not None:
        stamps, p7, frame, _ = bulk
        return _path(stamps, p7[:, 0], p7[:, 1], quaternion_to_yaw_array(p7[:, 3:7]), frame)
    st, xs, ys, q = [], [], [], []
    frame = ""
    for raw in raws:
        m = reader.deserialize(bytes(raw), msgtype)
        pose = m.pose.pose if hasattr(m.pose, "pose") else m.pose
        st.append(m.header.stamp.sec * 1_000_000_000 + m.header.stamp.nanosec)
        xs.append(pose.position.x)
        ys.append(pose.position.y)
        o = pose.orientation
        q.append((o.x, o.y, o.z, o.w))
        frame = m.header.frame_id
    qa = np.asarray(q, dtype=np.float64).reshape(-1, 4)
    return _path(np.asarray(st, dtype=np.int64), np.asarray(xs), np.asarray(ys), quaternion_to_yaw_array(qa), frame)


def _decode_tf(reader: AnyReader, raws: list[tuple[bytes, str]], parent: str, child: str) -> PlanarPath:
    st, xs, ys, q = [], [], [], []
    for raw, msgtype in raws:
        m = reader.deserialize(bytes(raw), msgtype)
        for tr in m.transforms:
            if tr.header.frame_id.strip("/") == parent and tr.child_frame_id.strip("/") == child:
                st.append(tr.header.stamp.sec * 1_000_000_000 + tr.header.stamp.nanosec)
                xs.append(tr.transform.translation.x)
                ys.append(tr.transform.translation.y)
                r = tr.transform.rotation
                q.append((r.x, r.y, r.z, r.w))
    qa = np.asarray(q, dtype=np.float64).reshape(-1, 4)
    return _path(np.asarray(st, dtype=np.int64), np.asarray(xs), np.asarray(ys), quaternion_to_yaw_array(qa), parent)


_INDEX_HEAD = struct.Struct("<BQHI")    # MCAP message index record: opcode, length, channel id, array bytes
_INDEX_ENTRY = np.dtype([("log_time", "<u8"), ("offset", "<u8")])


def _gather(buf: np.ndarray, offsets: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Record lengths and data starts of the MCAP message records at ``offsets`` of a chunk."""
    off = offsets.astype(np.int64)
    length = np.ascontiguousarray(np.lib.stride_tricks.sliding_window_view(buf, 8)[off + 1]).view("<u8")[:, 0]
    return length.astype(np.int64) - 22, off + 31


def _storages(reader: AnyReader) -> list | None:
    """The storage readers below rosbags' readers (several for split or multi-file bags), or None
    when a bag compresses per message (then rosbags' own iterator decompresses)."""
    out = []
    for r in reader.readers:
        storage = r.storage
        inner = getattr(storage, "storages", None)
        if inner is None:                     # a bare .mcap / .db3 file: the storage itself
            out.append(storage)
            continue
        if storage.metadata.compression_mode == "message":
            return None
        out.extend(inner)
    return out


def _mcap_fast(reader: AnyReader, topics: set[str]):
    """Raw messages of ``topics`` straight from MCAP storage, or None when not applicable.

    The MCAP format (an open standard, mcap.dev/spec) stores messages in chunks and, after each
    chunk, a message index per channel: (log time, offset in the chunk) pairs. rosbags' reader
    yields one message at a time through several layers, which costs more than decoding them. Here
    each chunk is decompressed by rosbags' own routine (with its CRC check), the index is read as one
    numpy array, and a channel whose messages all have one length comes out as one (N, L) uint8
    array (others as a list of bytes). Only the plain rosbag2 layout is handled: anything else
    (per-message compression, unindexed files, other storage) returns None and rosbags' iterator
    is used. Returns {topic: (log_time_ns (N,) int64, raws)}.
    """
    try:
        from rosbags.rosbag2 import storage_mcap
        storages = _storages(reader)
        if not storages or not all(isinstance(st, storage_mcap.McapReader) and st.chunks for st in storages):
            return None
    except (AttributeError, IndexError, ImportError):
        return None
    parts: dict[str, list] = {t: [] for t in topics}
    for st in storages:
        want = {c.id: c.topic for c in st.connections if c.topic in topics}
        bio = st.bio
        for chunk in st.chunks:
            chans = [ch for ch in chunk.channel_count if ch in want and ch in chunk.message_index_offsets]
            if len(chans) != sum(1 for ch in chunk.channel_count if ch in want):
                return None
            if not chans:
                continue
            bio.seek(chunk.chunk_start_offset + 9 + 24)
            (crc,) = struct.unpack("<I", bio.read(4))
            bio.seek(chunk.chunk_start_offset + 9 + 40 + len(chunk.compression))
            data = bio.read(chunk.compressed_size)
            if len(data) != chunk.compressed_size:
                raise ValueError("chunk extends past the end of the file")
            raw = storage_mcap.decompress(data, chunk.compression, chunk.uncompressed_size, crc)
            buf = np.frombuffer(raw, dtype=np.uint8)
            for ch in chans:
                bio.seek(chunk.message_index_offsets[ch])
                op, _, channel, size = _INDEX_HEAD.unpack(bio.read(_INDEX_HEAD.size))
                if op != 0x07 or channel != ch:
                    raise ValueError("message index record does not match its chunk")
                entries = np.frombuffer(bio.read(size), dtype=_INDEX_ENTRY)
                offsets = entries["offset"].astype(np.int64)
                if len(offsets) and (offsets.max() + 31 > len(buf)):
                    raise ValueError("message index points past its chunk")
                lengths, starts = _gather(buf, offsets)
                if len(lengths) and (lengths.min() < 0 or (starts + lengths).max() > len(buf)):
                    raise ValueError("message record overruns its chunk")
                parts[want[ch]].append((entries["log_time"].astype(np.int64), lengths, starts, buf))
    out = {}
    for topic, items in parts.items():
        if not items:
            out[topic] = (np.zeros(0, dtype=np.int64), [])
            continue
        times = np.concatenate([it[0] for it in items])
        lens = np.concatenate([it[1] for it in items])
        order = np.argsort(times, kind="stable")
        if len(lens) and lens.min() == lens.max():
            width = int(lens[0])
            rows = np.concatenate([np.lib.stride_tricks.sliding_window_view(b, width)[st]
                                   for _, _, st, b in items]) if width else np.zeros((len(lens), 0), np.uint8)
            out[topic] = (times[order], rows[order])
        else:
            raws = [bytes(b[s0:s0 + n0]) for _, ln, st, b in items for s0, n0 in zip(st.tolist(), ln.tolist())]
            out[topic] = (times[order], [raws[k] for k in order.tolist()])
    return out


def _sqlite_fast(reader: AnyReader, topics: set[str]):
    """Raw messages of ``topics`` from rosbag2 sqlite3 storage with one query per topic, or None.

    Same result as rosbags' iterator (the messages table of the rosbag2 sqlite3 layout, ordered by
    time), read read-only with Python's own sqlite3 module, without per-message generator layers. Returns {topic: (log_time_ns (N,), [bytes])}.
    """
    try:
        from rosbags.rosbag2 import storage_sqlite3
        storages = _storages(reader)
        if not storages or not all(isinstance(st, storage_sqlite3.Sqlite3Reader) and Path(st.path).is_file()
                                   for st in storages):
            return None
    except (AttributeError, IndexError, ImportError):
        return None
    import sqlite3
    parts: dict[str, list] = {t: [] for t in topics}
    for st in storages:
        db = sqlite3.connect(f"file:{Path(st.path).resolve()}?mode=ro", uri=True)
        try:
            ids = db.execute("SELECT id, name FROM topics").fetchall()
            for topic_id, name in ids:
                if name not in topics:
                    continue
                rows = db.execute("SELECT timestamp, data FROM messages WHERE topic_id = ? ORDER BY timestamp",
                                  (topic_id,)).fetchall()
                if rows:
                    times, raws = zip(*rows)
                    parts[name].append((np.asarray(times, dtype=np.int64), list(raws)))
        finally:
            db.close()
    out = {}
    for topic, items in parts.items():
        if not items:
            out[topic] = (np.zeros(0, dtype=np.int64), [])
        elif len(items) == 1:
            out[topic] = items[0]
        else:
            times = np.concatenate([it[0] for it in items])
            raws = [r for it in items for r in it[1]]
            order = np.argsort(times, kind="stable")
            out[topic] = (times[order], [raws[k] for k in order.tolist()])
    return out


def read_run(path: str | os.PathLike, joint_topic: str | None = None, imu_topic: str | None = None,
             truth: str | TruthSpec | None = None, *, need_truth: bool = False, use_imu: bool = True,
             slip_topic: str | None = None) -> RunData:
    """Decode a bag once (see the module docstring).

    ``truth``: a TruthSpec or its text (see ``parse_truth_spec``); 'auto' takes the one Odometry /
    PoseStamped / PoseWithCovarianceStamped topic if there is exactly one (several are an error
    only when ``need_truth``). Slip labels come from a DiagnosticArray topic whose name contains
    'slip' (or ``slip_topic``) with statuses named ``slip_truth``; the URDF from a std_msgs/String
    topic ending in 'robot_description'. Errors are BagError / InputError with one sentence.
    """
    p = _resolve(path)
    spec = truth if isinstance(truth, TruthSpec) else parse_truth_spec(truth)
    reader = _open(p)
    try:
        ros1 = not reader.is2
        types: dict[str, str] = {}
        conns: dict[str, list] = {}
        for c in reader.connections:
            types.setdefault(c.topic, c.msgtype)
            conns.setdefault(c.topic, []).append(c)
        jt = _pick(types, (JOINT_TYPE,), joint_topic, "joint-state", "--joint-topic", p, True)
        it = _pick(types, (IMU_TYPE,), imu_topic, "IMU", "--imu-topic", p, False) if use_imu else None
        truth_topic = None
        tf_topics: list[str] = []
        if spec.kind == "topic":
            truth_topic = _pick(types, POSE_TYPES, spec.topic, "truth", "--truth", p, True)
        elif spec.kind == "auto":
            cands = sorted(t for t, typ in types.items() if typ in POSE_TYPES)
            if len(cands) == 1:
                truth_topic = cands[0]
            elif len(cands) > 1 and need_truth:
                raise BagError(f"bag '{p}' has several pose topics that could be ground truth ({', '.join(cands)}); "
                               "pick one with --truth.")
        elif spec.kind == "tf":
            tf_topics = [t for t, typ in types.items() if typ == TF_TYPE]
            if not tf_topics:
                raise BagError(f"bag '{p}' has no tf2_msgs/TFMessage topic for truth {spec.describe()}; pick a "
                               "truth topic or a TUM file with --truth.")
        st_topic = slip_topic
        if st_topic is None:
            diag = sorted(t for t, typ in types.items() if typ == DIAG_TYPE and "slip" in t)
            st_topic = diag[0] if len(diag) == 1 else None
        elif types.get(st_topic) != DIAG_TYPE:
            raise BagError(f"slip truth topic '{st_topic}' is not a diagnostic_msgs/DiagnosticArray topic in bag "
                           f"'{p}'; fix --slip-topic.")
        desc = sorted(t for t, typ in types.items() if typ == STRING_TYPE and t.endswith("robot_description"))
        ut = desc[0] if desc else None
        cmds = sorted(t for t, typ in types.items() if typ in CMD_TYPES and t.endswith("cmd_vel"))
        ct = cmds[0] if len(cmds) == 1 and use_imu else None

        wanted = [t for t in (jt, it, truth_topic, st_topic, ut, ct) if t] + tf_topics
        sel = [c for t in wanted for c in conns[t]]
        buckets: dict[str, list] = {t: [] for t in wanted}
        record: list[int] = []
        cmd_record: list[int] = []
        try:
            fast = None
            if not ros1:
                plain = set(wanted) - set(tf_topics)
                fast = _mcap_fast(reader, plain)
                if fast is None:
                    fast = _sqlite_fast(reader, plain)
            if fast is not None:
                for t, (times, raws) in fast.items():
                    buckets[t] = raws
                    if t == jt:
                        record = times.tolist()
                    elif t == ct:
                        cmd_record = times.tolist()
                rest = [c for c in sel if c.topic in tf_topics]
            else:
                rest = sel
            for c, ts, raw in (reader.messages(connections=rest) if rest else ()):
                t = c.topic
                if t == jt:
                    buckets[t].append(raw)
                    record.append(ts)
                elif t == ct:
                    buckets[t].append(raw)
                    cmd_record.append(ts)
                elif t in tf_topics:
                    buckets[t].append((raw, c.msgtype))
                else:
                    buckets[t].append(raw)
        except WheelDrError:
            raise
        except Exception as exc:
            raise BagError(f"bag '{p}' cannot be read to the end: {_why(exc)}; re-copy or re-record it.") from None
        if len(buckets[jt]) == 0:
            raise BagError(f"joint-state topic '{jt}' in bag '{p}' has no messages; record the wheel joint states.")
        try:
            samples, decode, stamps_from = _decode_joint_states(reader, buckets[jt], record, JOINT_TYPE, ros1)
            run = RunData(p, "rosbag1" if ros1 else "rosbag2", samples, jt, decode, stamps_from,
                          topics=dict(types))
            if stamps_from != "header":
                run.notes.append(f"joint-state header stamps are all zero; using bag record times of {jt}.")
            if it and len(buckets[it]):
                g_st, g_wz = _decode_gyro(reader, buckets[it], IMU_TYPE, ros1)
                run.gyro_z_radps = _hold(g_st, g_wz, samples.stamp_ns)
                run.imu_topic = it
                run.imu_count = len(g_st)
                a_st, a_x, a_up = _decode_imu_motion(reader, buckets[it], IMU_TYPE, ros1)
                if np.isfinite(a_x).any():
                    run.accel_x_mps2 = _hold(a_st, a_x, samples.stamp_ns)
                    run.up_x = _hold(a_st, a_up, samples.stamp_ns)
            if ct and len(buckets[ct]):
                c_st, c_v = _decode_cmd(reader, buckets[ct], cmd_record, types[ct])
                run.cmd_v_mps = _hold(c_st, c_v, samples.stamp_ns)
                run.cmd_age_s = (samples.stamp_ns - _hold(c_st, c_st.astype(np.float64), samples.stamp_ns)) * 1e-9
                run.cmd_topic = ct
            if truth_topic:
                run.truth = _decode_poses(reader, buckets[truth_topic], types[truth_topic], ros1)
                run.truth_source = f"topic {truth_topic} ({types[truth_topic].replace('/msg/', '/')})"
            elif spec.kind == "tf":
                raws = [r for t in tf_topics for r in buckets[t]]
                run.truth = _decode_tf(reader, raws, spec.parent, spec.child)
                run.truth_source = spec.describe()
                if len(run.truth) == 0:
                    raise BagError(f"bag '{p}' has no transform {spec.parent} -> {spec.child} on "
                                   f"{', '.join(tf_topics)}; check the frame names given to --truth.")
            elif spec.kind == "tum":
                run.truth = read_tum(spec.path)
                run.truth_source = spec.describe()
            if st_topic and buckets.get(st_topic) is not None:
                rows, sides = [], []
                for raw in buckets[st_topic]:
                    m = reader.deserialize(bytes(raw), DIAG_TYPE)
                    for s in m.status:
                        if s.name != SLIP_STATUS_NAME:
                            continue
                        kv = {v.key: v.value for v in s.values}
                        try:
                            rows.append((int(kv["start_ns"]), int(kv["end_ns"])))
                        except (KeyError, ValueError):
                            continue
                        sides.append(kv.get("side", ""))
                run.slip_truth_ns = np.asarray(rows, dtype=np.int64).reshape(-1, 2)
                run.slip_side = np.asarray(sides, dtype="<U5")
                run.slip_topic = st_topic
            if ut and len(buckets[ut]):
                run.urdf = str(reader.deserialize(bytes(buckets[ut][0]), STRING_TYPE).data)
                run.urdf_topic = ut
        except WheelDrError:
            raise
        except Exception as exc:
            raise BagError(f"bag '{p}' holds messages that cannot be decoded: {_why(exc)}; re-record it or fix "
                           "its message definitions.") from None
        if need_truth and run.truth is None:
            raise BagError(f"bag '{p}' has no ground truth (no Odometry, PoseStamped or PoseWithCovarianceStamped "
                           "topic); name one, a TF pair PARENT->CHILD or a TUM file with --truth.")
        if need_truth and run.truth is not None and len(run.truth) < 2:
            raise BagError(f"ground truth ({run.truth_source or spec.describe()}) of bag '{p}' has "
                           f"{len(run.truth)} pose(s); it needs at least two spanning the drive.")
        return run
    finally:
        reader.close()
