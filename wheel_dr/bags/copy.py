"""A copy of a bag with wheel_dr's recomputed odometry added on a new topic (nav_msgs/Odometry)."""
from __future__ import annotations

import os
from pathlib import Path

import numpy as np
from rosbags.highlevel import AnyReader
from rosbags.typesys import Stores, get_typestore

from ..core.conventions import pose_covariance_6x6_array, twist_covariance_6x6_array
from ..core.errors import InputError
from ..core.se2 import yaw_to_quaternion_array
from ..core.settings import Settings
from .codec import pose_layout
from .reader import BagError, _open, _resolve, _why
from .writer import _fill, _header, bag_writer_into_place

__all__ = ["copy_with_odometry"]


def _odometry_rows(traj, settings: Settings, ts, ros1: bool) -> list[bytes]:
    """Serialised nav_msgs/Odometry, one per trajectory entry (pose and covariance in odom, twist in base)."""
    g = ts.types
    vec = g["geometry_msgs/msg/Vector3"]
    msg = g["nav_msgs/msg/Odometry"](
        header=_header(ts, int(traj.stamp_ns[0]), settings.frames.odom, ros1), child_frame_id=settings.frames.base,
        pose=g["geometry_msgs/msg/PoseWithCovariance"](
            pose=g["geometry_msgs/msg/Pose"](position=g["geometry_msgs/msg/Point"](x=0.0, y=0.0, z=0.0),
                                             orientation=g["geometry_msgs/msg/Quaternion"](x=0.0, y=0.0, z=0.0, w=1.0)),
            covariance=np.zeros(36)),
        twist=g["geometry_msgs/msg/TwistWithCovariance"](
            twist=g["geometry_msgs/msg/Twist"](linear=vec(x=0.0, y=0.0, z=0.0), angular=vec(x=0.0, y=0.0, z=0.0)),
            covariance=np.zeros(36)))
    ser = ts.serialize_ros1 if ros1 else ts.serialize_cdr
    template = bytes(ser(msg, "nav_msgs/msg/Odometry"))
    lay = pose_layout(template, "nav_msgs/msg/Odometry", ros1)
    p0 = lay.fields["pose"][0]
    pc0 = p0 + 56
    t0 = pc0 + 288
    tc0 = t0 + 48
    n = len(traj)
    quat = yaw_to_quaternion_array(traj.yaw_rad)
    cols = {p0: traj.x_m, p0 + 8: traj.y_m, p0 + 40: quat[:, 2], p0 + 48: quat[:, 3], t0: traj.v_mps,
            t0 + 40: traj.w_radps}
    vy = getattr(traj, "vy_mps", None)
    if vy is not None:
        cols[t0 + 8] = vy
    pose36 = pose_covariance_6x6_array(traj.cov)          # the 6x6 layout lives in core.conventions
    twist36 = twist_covariance_6x6_array(traj.twist_cov)
    for k in range(36):
        cols[pc0 + 8 * k] = pose36[:, k]
        cols[tc0 + 8 * k] = twist36[:, k]
    rows = _fill(template, n, np.asarray(traj.stamp_ns, dtype=np.int64), lay.sec_offset, lay.nsec_offset, ros1, cols)
    return [r.tobytes() for r in rows]


def copy_with_odometry(src: str | os.PathLike, dst: str | os.PathLike, traj, settings: Settings,
                       topic: str = "/wheel_dr/odom", overwrite: bool = False) -> Path:
    """Copy every message of bag ``src`` into ``dst`` (same format and storage) and add ``topic``.

    Written under a temporary name and renamed when complete.
    """
    source = _resolve(src)
    target = Path(dst)
    if target.resolve() == source.resolve():
        raise InputError(f"--bag-out '{target}' is the input bag; give a new path for the copy.")
    if target.exists() and not overwrite:
        raise InputError(f"output '{target}' already exists; remove it, pass --overwrite or choose another name.")
    reader = _open(source)
    ros1 = not reader.is2
    if ros1 and target.suffix != ".bag":
        reader.close()
        raise InputError(f"the input is a ROS 1 bag, so the copy must be a file ending in .bag; name it '{target}.bag'.")
    if any(c.topic == topic for c in reader.connections):
        reader.close()
        raise InputError(f"bag '{source}' already has a topic {topic}; choose another with --odom-topic.")
    ts = get_typestore(Stores.ROS1_NOETIC if ros1 else Stores.LATEST)
    rows = _odometry_rows(traj, settings, ts, ros1)
    mcap = source.suffix == ".mcap" or (source.is_dir() and any(source.glob("*.mcap")))
    fmt = "ros1" if ros1 else ("mcap" if mcap else "sqlite3")
    try:
        with bag_writer_into_place(target, fmt) as writer:
            mapping = {}
            for c in reader.connections:
                if ros1:
                    mapping[c.id] = writer.add_connection(c.topic, c.msgtype, msgdef=c.msgdef.data, md5sum=c.digest,
                                                          callerid=c.ext.callerid, latching=c.ext.latching)
                else:
                    mapping[c.id] = writer.add_connection(c.topic, c.msgtype, msgdef=c.msgdef.data, rihs01=c.digest,
                                                          serialization_format=c.ext.serialization_format,
                                                          offered_qos_profiles=c.ext.offered_qos_profiles)
            odom = writer.add_connection(topic, "nav_msgs/msg/Odometry", typestore=ts)
            stamps = np.asarray(traj.stamp_ns, dtype=np.int64).tolist()
            k = 0
            try:
                for c, t, raw in reader.messages():
                    while k < len(stamps) and stamps[k] <= t:
                        writer.write(odom, stamps[k], rows[k])
                        k += 1
                    writer.write(mapping[c.id], t, raw)
            except Exception as exc:
                raise BagError(f"bag '{source}' cannot be read to the end: {_why(exc)}; re-copy or re-record "
                               "it.") from None
            for j in range(k, len(stamps)):
                writer.write(odom, stamps[j], rows[j])
    finally:
        reader.close()
    return target
