"""Writing simulated drives as real bags with rosbags: rosbag2 (mcap, sqlite3) and ROS 1.

Topics (defaults; see ``DEFAULT_TOPICS``):

* ``/joint_states``  sensor_msgs/JointState: the encoder readings (name, position rad, velocity rad/s);
* ``/imu``           sensor_msgs/Imu: gyro z rate with ``angular_velocity_covariance`` diag(sd^2);
  the accelerometer's specific force with ``linear_acceleration_covariance`` diag(sd^2) and the
  orientation (yaw and pitch, covariance diag(1e-4)); with ``imu_accel=False`` orientation and
  linear acceleration are marked unknown (covariance[0] = -1, the message definition's convention);
* ``/cmd_vel``       geometry_msgs/Twist: the commanded speed and yaw rate (``cmd=False``: none);
* ``/ground_truth``  nav_msgs/Odometry: true pose in ``odom``, twist (v, w; and vy for wheel tables) in ``base_link``;
* ``/robot_description`` std_msgs/String: the cart's URDF (nominal geometry), one message at the
  start, offered transient-local (rosbag2) / latched (ROS 1);
* ``/ground_truth/slip`` diagnostic_msgs/DiagnosticArray: one message per true slip interval,
  stamped at its start, with one status named ``slip_truth`` (level WARN) whose values are
  ``side`` (left/right), ``kind`` (spin/drag), ``start_ns`` and ``end_ns`` (inclusive stamps of the
  joint samples that slipped, integer nanoseconds as text).

Bag record times equal the header stamps. Bags are written under a temporary name and renamed.
"""
from __future__ import annotations

import os
import shutil
from pathlib import Path
from contextlib import contextmanager
from typing import Iterator, Mapping

import numpy as np
from rosbags.interfaces import Qos, QosDurability, QosHistory, QosLiveliness, QosReliability, QosTime
from rosbags.rosbag1 import Writer as Writer1
from rosbags.rosbag2 import StoragePlugin, Writer as Writer2
from rosbags.typesys import Stores, get_typestore

from ..core.conventions import pose_covariance_6x6, yaw_to_quaternion
from ..core.errors import InputError
from ..core.se2 import yaw_to_quaternion_array
from ..partfiles import make_part_dir
from .codec import imu_layout, joint_state_layout, encode_joint_states, pose_layout

__all__ = ["write_bag", "DEFAULT_TOPICS", "SLIP_STATUS_NAME", "BAG_FORMATS"]

DEFAULT_TOPICS = {
    "joint_states": "/joint_states",
    "imu": "/imu",
    "truth": "/ground_truth",
    "robot_description": "/robot_description",
    "slip": "/ground_truth/slip",
    "cmd_vel": "/cmd_vel",
}
SLIP_STATUS_NAME = "slip_truth"
BAG_FORMATS = ("mcap", "sqlite3", "ros1")

_ZERO = QosTime(0, 0)
_LATCHED = Qos(QosHistory.KEEP_LAST, 1, QosReliability.RELIABLE, QosDurability.TRANSIENT_LOCAL, _ZERO, _ZERO,
               QosLiveliness.AUTOMATIC, _ZERO, False)


def _header(ts, stamp_ns: int, frame: str, ros1: bool):
    time = ts.types["builtin_interfaces/msg/Time"](sec=int(stamp_ns // 1_000_000_000),
                                                   nanosec=int(stamp_ns % 1_000_000_000))
    h = ts.types["std_msgs/msg/Header"]
    return h(seq=0, stamp=time, frame_id=frame) if ros1 else h(stamp=time, frame_id=frame)


def _fill(template: bytes, n: int, stamps: np.ndarray, sec_off: int, nsec_off: int, ros1: bool,
          columns: Mapping[int, np.ndarray]) -> np.ndarray:
    """(n, L) rows copied from ``template`` with the stamp and float64 columns at byte offsets."""
    arr = np.empty((n, len(template)), dtype=np.uint8)
    arr[:] = np.frombuffer(template, dtype=np.uint8)
    sec = (stamps // 1_000_000_000).astype("<u4" if ros1 else "<i4")
    nsec = (stamps % 1_000_000_000).astype("<u4")
    arr[:, sec_off:sec_off + 4] = sec.view(np.uint8).reshape(n, 4)
    arr[:, nsec_off:nsec_off + 4] = nsec.view(np.uint8).reshape(n, 4)
    if ros1:
        arr[:, 0:4] = np.arange(n, dtype="<u4").view(np.uint8).reshape(n, 4)
    for off, values in columns.items():
        arr[:, off:off + 8] = np.ascontiguousarray(values, dtype="<f8").view(np.uint8).reshape(n, 8)
    return arr


def _rows(arr: np.ndarray) -> list[bytes]:
    return [r.tobytes() for r in arr]


def _messages(sim, ts, ros1: bool, topics: Mapping[str, str], truth_stride: int, imu: bool,
              truth: bool, description: bool, slip: bool, urdf: str | None, odom_frame: str, base_frame: str,
              imu_frame: str, imu_accel: bool = True, cmd: bool = True):
    """[(topic, msgtype, qos_latched, [(stamp_ns, bytes-like), ...]), ...] for one bag."""
    ser = ts.serialize_ros1 if ros1 else ts.serialize_cdr
    stamps = np.asarray(sim.stamp_ns, dtype=np.int64)
    n = len(stamps)
    out = []
    js = ts.types["sensor_msgs/msg/JointState"]
    nj = len(sim.joint_names)
    first = js(header=_header(ts, int(stamps[0]), "", ros1), name=list(sim.joint_names),
               position=np.zeros(nj), velocity=np.zeros(nj), effort=np.zeros(0))
    rows = encode_joint_states(bytes(ser(first, "sensor_msgs/msg/JointState")), stamps, sim.position_rad,
                               sim.velocity_radps, ros1)
    out.append((topics["joint_states"], "sensor_msgs/msg/JointState", False, list(zip(stamps.tolist(), _rows(rows)))))
    if imu:
        vec = ts.types["geometry_msgs/msg/Vector3"]
        quat = ts.types["geometry_msgs/msg/Quaternion"]
        var = max(sim.scenario.gyro_noise_sd_radps, 1e-4) ** 2
        unknown = np.zeros(9)
        unknown[0] = -1.0
        msg = ts.types["sensor_msgs/msg/Imu"](
            header=_header(ts, int(stamps[0]), imu_frame, ros1), orientation=quat(x=0.0, y=0.0, z=0.0, w=1.0),
            orientation_covariance=unknown.copy(), angular_velocity=vec(x=0.0, y=0.0, z=0.0),
            angular_velocity_covariance=np.diag([var, var, var]).ravel(),
            linear_acceleration=vec(x=0.0, y=0.0, z=0.0), linear_acceleration_covariance=unknown.copy())
        with_accel = imu_accel and sim.accel_mps2 is not None
        if with_accel:
            avar = max(sim.scenario.accel_noise_sd_mps2, 1e-3) ** 2
            msg.orientation_covariance = np.diag([1e-4, 1e-4, 1e-4]).ravel()
            msg.linear_acceleration_covariance = np.diag([avar, avar, avar]).ravel()
        template = bytes(ser(msg, "sensor_msgs/msg/Imu"))
        lay = imu_layout(template, ros1)
        off = lay.fields["angular_velocity"][0] + 16
        columns = {off: sim.gyro_z_radps}
        if with_accel:
            o, a = lay.fields["orientation"][0], lay.fields["linear_acceleration"][0]
            q = sim.orientation_xyzw
            for i in range(4):
                columns[o + 8 * i] = q[:, i]
            for i in range(3):
                columns[a + 8 * i] = sim.accel_mps2[:, i]
        rows = _fill(template, n, stamps, lay.sec_offset, lay.nsec_offset, ros1, columns)
        out.append((topics["imu"], "sensor_msgs/msg/Imu", False, list(zip(stamps.tolist(), _rows(rows)))))
    if cmd and sim.cmd_v_mps is not None:
        g = ts.types
        vec = g["geometry_msgs/msg/Vector3"]
        msgs = []
        for k in range(0, n, 5):             # 20 Hz at a 100 Hz joint rate, as navigation stacks send it
            tw = g["geometry_msgs/msg/Twist"](linear=vec(x=float(sim.cmd_v_mps[k]), y=0.0, z=0.0),
                                              angular=vec(x=0.0, y=0.0, z=float(sim.cmd_w_radps[k])))
            msgs.append((int(stamps[k]), ser(tw, "geometry_msgs/msg/Twist")))
        out.append((topics["cmd_vel"], "geometry_msgs/msg/Twist", False, msgs))
    if truth:
        pick = np.arange(0, n, max(1, int(truth_stride)))
        if pick[-1] != n - 1:
            pick = np.append(pick, n - 1)
        g = ts.types
        point = g["geometry_msgs/msg/Point"](x=0.0, y=0.0, z=0.0)
        pose = g["geometry_msgs/msg/PoseWithCovariance"](
            pose=g["geometry_msgs/msg/Pose"](position=point, orientation=g["geometry_msgs/msg/Quaternion"](
                x=0.0, y=0.0, z=0.0, w=1.0)), covariance=np.array(pose_covariance_6x6(np.eye(3) * 1e-8)))
        vec = g["geometry_msgs/msg/Vector3"]
        twist = g["geometry_msgs/msg/TwistWithCovariance"](
            twist=g["geometry_msgs/msg/Twist"](linear=vec(x=0.0, y=0.0, z=0.0), angular=vec(x=0.0, y=0.0, z=0.0)),
            covariance=np.array(pose_covariance_6x6(np.eye(3) * 1e-8)))
        msg = g["nav_msgs/msg/Odometry"](header=_header(ts, int(stamps[0]), odom_frame, ros1),
                                         child_frame_id=base_frame, pose=pose, twist=twist)
        template = bytes(ser(msg, "nav_msgs/msg/Odometry"))
        lay = pose_layout(template, "nav_msgs/msg/Odometry", ros1)
        p0 = lay.fields["pose"][0]
        quat = yaw_to_quaternion_array(sim.true_theta_rad[pick])
        tw0 = p0 + 56 + 288
        cols = {p0: sim.true_x_m[pick], p0 + 8: sim.true_y_m[pick], p0 + 40: quat[:, 2],
                p0 + 48: quat[:, 3], tw0: sim.true_v_mps[pick], tw0 + 40: sim.true_w_radps[pick]}
        if getattr(sim, "true_vy_mps", None) is not None:      # wheel tables: the lateral speed too
            cols[tw0 + 8] = sim.true_vy_mps[pick]
        rows = _fill(template, len(pick), stamps[pick], lay.sec_offset, lay.nsec_offset, ros1, cols)
        out.append((topics["truth"], "nav_msgs/msg/Odometry", False, list(zip(stamps[pick].tolist(), _rows(rows)))))
    if description:
        text = urdf if urdf is not None else sim.robot_description(base_frame)
        msg = ts.types["std_msgs/msg/String"](data=text)
        out.append((topics["robot_description"], "std_msgs/msg/String", True,
                    [(int(stamps[0]), ser(msg, "std_msgs/msg/String"))]))
    if slip:
        g = ts.types
        msgs = []
        joints = (sim.slip_joint.tolist() if sim.slip_joint is not None
                  else [sim.joint_names[0 if sd == "left" else -1] for sd in sim.slip_side.tolist()])
        for (start, end), side, kind, joint in zip(sim.slip_intervals_ns.tolist(), sim.slip_side.tolist(),
                                                   sim.slip_kind.tolist(), joints):
            kv = g["diagnostic_msgs/msg/KeyValue"]
            status = g["diagnostic_msgs/msg/DiagnosticStatus"](
                level=1, name=SLIP_STATUS_NAME, message=f"{side} wheel {kind}",
                hardware_id=joint,
                values=[kv(key="side", value=side), kv(key="kind", value=kind),
                        kv(key="start_ns", value=str(start)), kv(key="end_ns", value=str(end))])
            arr = g["diagnostic_msgs/msg/DiagnosticArray"](header=_header(ts, int(start), odom_frame, ros1),
                                                          status=[status])
            msgs.append((int(start), ser(arr, "diagnostic_msgs/msg/DiagnosticArray")))
        out.append((topics["slip"], "diagnostic_msgs/msg/DiagnosticArray", False, msgs))
    return out


def write_bag(sim, path: str | os.PathLike, fmt: str = "mcap", *, typestore=None,
              topics: Mapping[str, str] | None = None, truth_stride: int = 5, imu: bool = True,
              truth: bool = True, description: bool = True, slip: bool = True, urdf: str | None = None,
              odom_frame: str = "odom", base_frame: str = "base_link", imu_frame: str = "imu_link",
              overwrite: bool = False, imu_accel: bool = True, cmd: bool = True) -> Path:
    """Write ``sim`` as a bag at ``path`` and return the path (see the module docstring for topics).

    ``fmt``: 'mcap' or 'sqlite3' (rosbag2, ``path`` is a directory) or 'ros1' (``path`` is a
    ``.bag`` file). ``typestore`` defaults to ROS 2 Kilted (rosbag2) or Noetic (ROS 1).
    ``truth_stride``: ground truth every n-th joint sample (and the last). ``urdf``: robot
    description text (default: the Quokka URDF with the scenario's nominal geometry).
    Existing output raises InputError unless ``overwrite``.
    """
    if fmt not in BAG_FORMATS:
        raise InputError(f"bag format '{fmt}' is not one of {', '.join(BAG_FORMATS)}; pick one of those.")
    ros1 = fmt == "ros1"
    ts = typestore or get_typestore(Stores.ROS1_NOETIC if ros1 else Stores.ROS2_KILTED)
    names = dict(DEFAULT_TOPICS)
    names.update(topics or {})
    target = Path(path)
    if target.exists() and not overwrite:
        raise InputError(f"output '{target}' already exists; remove it or choose another name.")
    groups = _messages(sim, ts, ros1, names, truth_stride, imu, truth, description, slip, urdf, odom_frame,
                       base_frame, imu_frame, imu_accel, cmd)
    with bag_writer_into_place(target, fmt) as writer:
        order = []
        for topic, msgtype, latched, msgs in groups:
            if ros1:
                conn = writer.add_connection(topic, msgtype, typestore=ts, latching=1 if latched else None)
            else:
                conn = writer.add_connection(topic, msgtype, typestore=ts,
                                             offered_qos_profiles=[_LATCHED] if latched else [])
            order.append((conn, msgs))
        # merge by time: every group is already in time order
        stamps = np.concatenate([np.array([m[0] for m in msgs], dtype=np.int64) for _, msgs in order])
        which = np.concatenate([np.full(len(msgs), i) for i, (_, msgs) in enumerate(order)])
        pos = np.concatenate([np.arange(len(msgs)) for _, msgs in order])
        seq = np.lexsort((which, stamps))
        conns = [c for c, _ in order]
        lists = [msgs for _, msgs in order]
        write = writer.write
        which_l, pos_l = which.tolist(), pos.tolist()
        for k in seq.tolist():
            i = which_l[k]
            stamp, data = lists[i][pos_l[k]]
            write(conns[i], stamp, data)
    return target


@contextmanager
def bag_writer_into_place(target: Path, fmt: str) -> Iterator[Writer1 | Writer2]:
    """An open bag writer ('mcap', 'sqlite3' or 'ros1') on a temporary name beside ``target``; the bag
    is renamed onto ``target`` only when the block completes, so nothing half-written is left."""
    tmpdir = make_part_dir(target)   # also removes the parts a killed run left beside target
    tmp = tmpdir / target.name
    try:
        if fmt == "ros1":
            writer: Writer1 | Writer2 = Writer1(tmp)
        else:
            plugin = StoragePlugin.MCAP if fmt == "mcap" else StoragePlugin.SQLITE3
            writer = Writer2(tmp, version=9, storage_plugin=plugin)
        with writer:
            yield writer
        if target.exists():
            shutil.rmtree(target) if target.is_dir() else target.unlink()
        os.replace(tmp, target)
    finally:
        shutil.rmtree(tmpdir, ignore_errors=True)
