"""Bags written with rosbags (rosbag2 mcap and sqlite3, ROS 1) read back by wheel_dr.bags: exact round trip,
bulk decoding against rosbags' own deserialisation, topic discovery, truth sources and URDF geometry."""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from rosbags.highlevel import AnyReader
from rosbags.rosbag2 import StoragePlugin, Writer as Writer2
from rosbags.typesys import Stores, get_typestore

from test_bags_support import write_short_bag
from wheel_dr.bags import BagError, geometry_from_urdf, read_run, read_tum
from wheel_dr.demo.quokka import quokka_urdf
from wheel_dr.bags.codec import encode_joint_states
from wheel_dr.core import InputError


@pytest.fixture(scope="module")
def bags(tmp_path_factory):
    d = tmp_path_factory.mktemp("bags")
    out = {}
    for fmt, name in (("mcap", "drive_mcap"), ("sqlite3", "drive_sqlite"), ("ros1", "drive.bag")):
        path, sim = write_short_bag(d / name, fmt, truth_stride=4)
        out[fmt] = path
    out["sim"] = sim
    return out


@pytest.mark.parametrize("fmt", ["mcap", "sqlite3", "ros1"])
def test_round_trip_is_exact(bags, fmt):
    sim = bags["sim"]
    run = read_run(bags[fmt])
    assert run.decode == "bulk" and run.stamps_from == "header"
    assert run.storage == ("rosbag1" if fmt == "ros1" else "rosbag2")
    assert run.samples.names == sim.joint_names
    assert np.array_equal(run.samples.stamp_ns, sim.stamp_ns)
    assert np.array_equal(run.samples.position, sim.position_rad)
    assert np.array_equal(run.samples.velocity, sim.velocity_radps)
    assert np.array_equal(run.gyro_z_radps, sim.gyro_z_radps)
    pick = np.unique(np.append(np.arange(0, len(sim), 4), len(sim) - 1))
    assert np.array_equal(run.truth.stamp_ns, sim.stamp_ns[pick])
    assert np.allclose(run.truth.x_m, sim.true_x_m[pick], atol=0, rtol=0)
    assert np.allclose(run.truth.yaw_rad, sim.true_yaw_rad[pick], atol=1e-12)
    assert np.array_equal(run.slip_truth_ns, sim.slip_intervals_ns)
    assert list(run.slip_side) == list(sim.slip_side)
    assert run.urdf == quokka_urdf(joint_names=sim.joint_names)
    assert run.imu_topic == "/imu" and run.truth_source.startswith("topic /ground_truth")


@pytest.mark.parametrize("fmt", ["mcap", "ros1"])
def test_bulk_decoding_matches_rosbags_deserialisation(bags, fmt):
    """Reference library check: every joint state and IMU reading decoded by rosbags equals the bulk arrays."""
    run = read_run(bags[fmt])
    stamps, pos, gyro = [], [], []
    with AnyReader([Path(bags[fmt])]) as reader:
        conns = [c for c in reader.connections if c.topic in ("/joint_states", "/imu")]
        for c, _, raw in reader.messages(connections=conns):
            m = reader.deserialize(raw, c.msgtype)
            if c.topic == "/joint_states":
                stamps.append(m.header.stamp.sec * 10**9 + m.header.stamp.nanosec)
                pos.append(m.position)
            else:
                gyro.append(m.angular_velocity.z)
    assert np.array_equal(np.array(stamps), run.samples.stamp_ns)
    assert np.array_equal(np.array(pos), run.samples.position)
    assert np.array_equal(np.array(gyro), run.gyro_z_radps)


@pytest.mark.parametrize("store, ros1", [(Stores.ROS2_KILTED, False), (Stores.ROS2_HUMBLE, False),
                                         (Stores.ROS1_NOETIC, True)])
def test_encoder_equals_rosbags_serialiser(store, ros1):
    """The bulk JointState encoder writes byte for byte what rosbags' serialiser writes."""
    ts = get_typestore(store)
    rng = np.random.default_rng(1)
    names = ["a_joint", "bb", "ccc_joint"]
    stamps = np.array([1, 10**9 + 5, 1_800_000_000_123_456_789], dtype=np.int64)
    pos = rng.normal(size=(3, 3))
    vel = rng.normal(size=(3, 3))

    def msg(i):
        t = ts.types["builtin_interfaces/msg/Time"](sec=int(stamps[i] // 10**9), nanosec=int(stamps[i] % 10**9))
        h = ts.types["std_msgs/msg/Header"]
        hdr = h(seq=i, stamp=t, frame_id="base") if ros1 else h(stamp=t, frame_id="base")
        return ts.types["sensor_msgs/msg/JointState"](header=hdr, name=names, position=pos[i], velocity=vel[i],
                                                      effort=np.zeros(0))
    ser = ts.serialize_ros1 if ros1 else ts.serialize_cdr
    rows = encode_joint_states(bytes(ser(msg(0), "sensor_msgs/msg/JointState")), stamps, pos, vel, ros1)
    for i in range(3):
        assert rows[i].tobytes() == bytes(ser(msg(i), "sensor_msgs/msg/JointState"))


def _write_joint_bag(path: Path, messages, store=Stores.ROS2_JAZZY, extra_topics=()):
    """A rosbag2 (sqlite3) bag of JointState messages given as (stamp_ns, names, positions) tuples."""
    ts = get_typestore(store)
    with Writer2(path, version=9, storage_plugin=StoragePlugin.SQLITE3) as w:
        conn = w.add_connection("/wheels/joint_states", "sensor_msgs/msg/JointState", typestore=ts)
        others = [w.add_connection(t, "sensor_msgs/msg/JointState", typestore=ts) for t in extra_topics]
        for stamp, names, values in messages:
            t = ts.types["builtin_interfaces/msg/Time"](sec=stamp // 10**9, nanosec=stamp % 10**9)
            m = ts.types["sensor_msgs/msg/JointState"](
                header=ts.types["std_msgs/msg/Header"](stamp=t, frame_id=""), name=list(names),
                position=np.asarray(values, dtype=np.float64), velocity=np.zeros(0), effort=np.zeros(0))
            raw = ts.serialize_cdr(m, "sensor_msgs/msg/JointState")
            w.write(conn, stamp, raw)
            for o in others:
                w.write(o, stamp, raw)
    return path


def test_varying_names_fall_back_to_per_message_decoding(tmp_path):
    msgs = [(10**9 + i * 10**7, ["l", "r"] if i % 3 else ["r", "l", "caster"], [0.1 * i, 0.2 * i] if i % 3 else
             [0.2 * i, 0.1 * i, 5.0]) for i in range(1, 30)]
    msgs.append((10**9 + 40 * 10**7, ["l", "r"], [1.0]))            # malformed: 2 names, 1 position
    run = read_run(_write_joint_bag(tmp_path / "vary", msgs))
    assert run.decode == "per-message" and run.samples.names == ("l", "r", "caster")
    s = run.samples
    col = {n: i for i, n in enumerate(s.names)}
    assert np.allclose(s.position[:-1, col["l"]], [0.1 * i for i in range(1, 30)])
    assert np.allclose(s.position[:-1, col["r"]], [0.2 * i for i in range(1, 30)])
    assert s.present[0, col["caster"]] == False and s.present[2, col["caster"]] == True  # noqa: E712
    assert s.malformed[-1] and not s.malformed[:-1].any()
    assert run.gyro_z_radps is None and run.truth is None and run.urdf is None


def test_topics_found_by_type_and_errors_list_candidates(tmp_path):
    msgs = [(10**9 + i * 10**7, ["l", "r"], [0.0, 0.0]) for i in range(1, 5)]
    path = _write_joint_bag(tmp_path / "two", msgs, extra_topics=("/other/joint_states",))
    with pytest.raises(BagError) as err:
        read_run(path)
    assert "/other/joint_states" in str(err.value) and "/wheels/joint_states" in str(err.value)
    assert "--joint-topic" in str(err.value)
    assert read_run(path, joint_topic="/other/joint_states").joint_topic == "/other/joint_states"
    with pytest.raises(BagError, match="not in bag"):
        read_run(path, joint_topic="/nope")


def test_truth_from_tf_pair_pose_stamped_and_tum(tmp_path):
    ts = get_typestore(Stores.ROS2_KILTED)
    T = ts.types
    path = tmp_path / "tf"
    yaw = np.linspace(0, 1.0, 20)
    with Writer2(path, version=9, storage_plugin=StoragePlugin.MCAP) as w:
        js = w.add_connection("/joint_states", "sensor_msgs/msg/JointState", typestore=ts)
        tf = w.add_connection("/tf", "tf2_msgs/msg/TFMessage", typestore=ts)
        ps = w.add_connection("/mocap/pose", "geometry_msgs/msg/PoseStamped", typestore=ts)
        for i in range(20):
            stamp = 10**9 + i * 10**8
            t = T["builtin_interfaces/msg/Time"](sec=stamp // 10**9, nanosec=stamp % 10**9)
            hdr = T["std_msgs/msg/Header"](stamp=t, frame_id="map")
            q = T["geometry_msgs/msg/Quaternion"](x=0.0, y=0.0, z=math.sin(yaw[i] / 2), w=math.cos(yaw[i] / 2))
            w.write(js, stamp, ts.serialize_cdr(T["sensor_msgs/msg/JointState"](
                header=T["std_msgs/msg/Header"](stamp=t, frame_id=""), name=["l", "r"], position=np.zeros(2),
                velocity=np.zeros(2), effort=np.zeros(0)), "sensor_msgs/msg/JointState"))
            other = T["geometry_msgs/msg/TransformStamped"](
                header=T["std_msgs/msg/Header"](stamp=t, frame_id="odom"), child_frame_id="base_link",
                transform=T["geometry_msgs/msg/Transform"](translation=T["geometry_msgs/msg/Vector3"](x=9.0, y=9.0, z=0.0),
                                                           rotation=q))
            mine = T["geometry_msgs/msg/TransformStamped"](
                header=hdr, child_frame_id="base_link",
                transform=T["geometry_msgs/msg/Transform"](translation=T["geometry_msgs/msg/Vector3"](x=0.1 * i, y=0.0, z=0.0),
                                                           rotation=q))
            w.write(tf, stamp, ts.serialize_cdr(T["tf2_msgs/msg/TFMessage"](transforms=[other, mine]), "tf2_msgs/msg/TFMessage"))
            w.write(ps, stamp, ts.serialize_cdr(T["geometry_msgs/msg/PoseStamped"](
                header=hdr, pose=T["geometry_msgs/msg/Pose"](position=T["geometry_msgs/msg/Point"](x=0.2 * i, y=1.0, z=0.0),
                                                             orientation=q)), "geometry_msgs/msg/PoseStamped"))
    run = read_run(path, truth="map->base_link")
    assert np.allclose(run.truth.x_m, 0.1 * np.arange(20)) and np.allclose(run.truth.yaw_rad, yaw)
    run = read_run(path)                                  # the only pose topic is found by type
    assert run.truth_source.startswith("topic /mocap/pose")
    assert np.allclose(run.truth.x_m, 0.2 * np.arange(20)) and np.allclose(run.truth.y_m, 1.0)
    with pytest.raises(BagError, match="no transform"):
        read_run(path, truth="map->nowhere")
    tum = tmp_path / "truth.txt"
    tum.write_text("# t x y z qx qy qz qw\n" + "".join(
        f"{1 + 0.1 * i:.3f} {0.3 * i} 2 0 0 0 {math.sin(yaw[i] / 2)} {math.cos(yaw[i] / 2)}\n" for i in range(20)))
    run = read_run(path, truth=str(tum))
    assert np.allclose(run.truth.x_m, 0.3 * np.arange(20)) and np.allclose(run.truth.yaw_rad, yaw)
    assert run.truth.stamp_ns[1] == 1_100_000_000
    tum.write_text("1.0 2.0 3.0\n")
    with pytest.raises(InputError, match="line 1"):
        read_tum(tum)


def test_urdf_geometry_from_a_urdf_written_here():
    """URDF specification (wiki.ros.org/urdf/XML): joint origins compose along the chain; the wheel radius is
    the cylinder radius of the child link."""
    urdf = """<robot name="testcart">
      <link name="base_link"/>
      <link name="axle_mount"/>
      <link name="wl"><collision><geometry><cylinder radius="0.11" length="0.05"/></geometry></collision></link>
      <link name="wr"><visual><geometry><cylinder radius="0.105" length="0.05"/></geometry></visual></link>
      <joint name="mount" type="fixed"><parent link="base_link"/><child link="axle_mount"/>
        <origin xyz="0.1 0.02 0.05" rpy="0 0 1.5707963267948966"/></joint>
      <joint name="jl" type="continuous"><parent link="axle_mount"/><child link="wl"/>
        <origin xyz="-0.25 0 0" rpy="-1.5707963267948966 0 0"/></joint>
      <joint name="jr" type="continuous"><parent link="base_link"/><child link="wr"/>
        <origin xyz="0 -0.2 0" rpy="-1.5707963267948966 0 0"/></joint>
    </robot>"""
    g = geometry_from_urdf(urdf, ["jl"], ["jr"])
    # left wheel: the mount is turned +90 deg about z, so its -x offset of 0.25 m points along base -y...
    # i.e. y_left = 0.02 + (-0.25) * sin(90 deg) = -0.23; right wheel y = -0.2 -> track 0.03 m
    assert g.left_radius_m == pytest.approx(0.11) and g.right_radius_m == pytest.approx(0.105)
    assert g.track_width_m == pytest.approx(0.03, abs=1e-12)
    q = geometry_from_urdf(quokka_urdf(0.08, 0.081, 0.4), ["quokka_left_wheel_joint"], ["quokka_right_wheel_joint"])
    assert (q.left_radius_m, q.right_radius_m) == (0.08, 0.081) and q.track_width_m == pytest.approx(0.4)
    with pytest.raises(InputError, match="not in the robot description"):
        geometry_from_urdf(urdf, ["missing"], ["jr"])
    with pytest.raises(InputError, match="not valid URDF"):
        geometry_from_urdf("<robot", ["jl"], ["jr"])


@pytest.mark.parametrize("mode, plugin", [("FILE", "SQLITE3"), ("MESSAGE", "MCAP"), ("STORAGE", "MCAP")])
def test_compressed_bags_read_the_same(bags, tmp_path, mode, plugin):
    """zstd compression of the whole file, of each message, or of MCAP chunks (rosbag2 compression modes,
    written by rosbags) gives the same run as the uncompressed bag."""
    from rosbags.rosbag2.enums import CompressionFormat, CompressionMode
    src = Path(bags["mcap"])
    dst = tmp_path / f"comp_{mode}"
    w = Writer2(dst, version=9, storage_plugin=getattr(StoragePlugin, plugin))
    w.set_compression(getattr(CompressionMode, mode), CompressionFormat.ZSTD)
    with AnyReader([src]) as reader, w:
        conns = {c.id: w.add_connection(c.topic, c.msgtype, msgdef=c.msgdef.data, rihs01=c.digest,
                                        offered_qos_profiles=c.ext.offered_qos_profiles) for c in reader.connections}
        for c, t, raw in reader.messages():
            w.write(conns[c.id], t, raw)
    a, b = read_run(src), read_run(dst)
    assert np.array_equal(a.samples.stamp_ns, b.samples.stamp_ns)
    assert np.array_equal(a.samples.position, b.samples.position)
    assert np.array_equal(a.gyro_z_radps, b.gyro_z_radps)
    assert np.array_equal(a.truth.x_m, b.truth.x_m) and np.array_equal(a.slip_truth_ns, b.slip_truth_ns)
    assert a.urdf == b.urdf


def test_skid_steer_bag_round_trip_and_urdf(tmp_path):
    from wheel_dr.bags import write_bag
    from wheel_dr.sim import Scenario, simulate, straight
    sc = Scenario(name="skid", segments=(straight(2.0),), joints_per_side=2, rate_hz=20.0)
    sim = simulate(sc, 0)
    run = read_run(write_bag(sim, tmp_path / "skid"))
    assert run.samples.names == sim.joint_names and np.array_equal(run.samples.position, sim.position_rad)
    g = geometry_from_urdf(run.urdf, sc.left_joints, sc.right_joints)
    assert g.track_width_m == pytest.approx(sc.nominal_track_m) and g.left_radius_m == sc.nominal_left_radius_m
