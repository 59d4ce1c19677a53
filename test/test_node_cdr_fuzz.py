"""Fuzzing the node's own CDR readers of JointState and Imu (wheel_dr.ros.convert) with hypothesis.

Reference: rclpy's serialisation of the same messages (the ROS 2 client library) and the CDR
rules of OMG DDS-XTypes 1.3, sec. 7.4 (encapsulation header, alignment, sequence lengths; both
byte orders). Properties: a byte string that is not a message raises CdrError (a ValueError)
and nothing else, whatever its length, byte order, counts or content; a valid message reads
back exactly what rclpy wrote, in either byte order; no read goes past the buffer (a parse of
a prefix never succeeds with values the prefix does not hold).
"""
from __future__ import annotations

import math
import struct

import pytest

pytest.importorskip("hypothesis")
from hypothesis import given, strategies as st  # noqa: E402

from wheel_dr.ros.convert import CdrError, parse_imu_gyro_z, parse_joint_state  # noqa: E402

# CDR strings end at their NUL (XTypes 7.4.1.1.4), so a name cannot hold one
TEXT = st.text(alphabet=st.characters(blacklist_characters="\x00", blacklist_categories=("Cs",)), max_size=12)
NAMES = st.lists(TEXT, min_size=0, max_size=6)
FLOATS = st.floats(allow_nan=True, allow_infinity=True, width=64)


def _serialize_js(stamp: tuple[int, int], frame: str, names: list[str], pos: list[float], vel: list[float]) -> bytes:
    from rclpy.serialization import serialize_message
    from sensor_msgs.msg import JointState

    m = JointState()
    m.header.stamp.sec, m.header.stamp.nanosec = stamp
    m.header.frame_id = frame
    m.name, m.position, m.velocity = names, pos, vel
    return bytes(serialize_message(m))


def _to_big_endian_js(raw: bytes) -> bytes:
    """Re-encode a little-endian JointState as big-endian CDR (every number byte-swapped)."""
    out = bytearray(b"\x00\x00" + raw[2:4])
    sec, nsec = struct.unpack_from("<iI", raw, 4)
    out += struct.pack(">iI", sec, nsec)
    pos = 12

    def copy_u32() -> int:
        nonlocal pos
        while (pos - 4) % 4:
            out.append(raw[pos])
            pos += 1
        (n,) = struct.unpack_from("<I", raw, pos)
        out.extend(struct.pack(">I", n))
        pos += 4
        return n

    n = copy_u32()
    out += raw[pos:pos + n]
    pos += n
    for _ in range(copy_u32()):
        n = copy_u32()
        out += raw[pos:pos + n]
        pos += n
    for _ in range(3):
        count = copy_u32()
        if count:
            while (pos - 4) % 8:
                out.append(raw[pos])
                pos += 1
            vals = struct.unpack_from(f"<{count}d", raw, pos)
            out += struct.pack(f">{count}d", *vals)
            pos += 8 * count
    return bytes(out)


def _same(a: tuple, b: tuple) -> bool:
    return len(a) == len(b) and all(x == y or (math.isnan(x) and math.isnan(y)) for x, y in zip(a, b))


@st.composite
def joint_states(draw):
    names = draw(NAMES)
    n = len(names)
    pos = draw(st.one_of(st.just([]), st.lists(FLOATS, min_size=n, max_size=n), st.lists(FLOATS, max_size=8)))
    vel = draw(st.one_of(st.just([]), st.lists(FLOATS, min_size=n, max_size=n)))
    stamp = (draw(st.integers(-2**31, 2**31 - 1)), draw(st.integers(0, 2**32 - 1)))
    frame = draw(TEXT)
    return stamp, frame, names, pos, vel


@given(joint_states())
def test_valid_joint_states_read_back_in_both_byte_orders(msg) -> None:
    stamp, frame, names, pos, vel = msg
    raw = _serialize_js(stamp, frame, names, pos, vel)
    for data in (raw, _to_big_endian_js(raw)):
        sec, nsec, got_names, got_pos, got_vel = parse_joint_state(data)
        assert (sec, nsec) == stamp and list(got_names) == names
        assert _same(got_pos, tuple(pos)) and _same(got_vel, tuple(vel))


@given(joint_states(), st.data())
def test_damaged_joint_states_raise_only_cdr_error(msg, data) -> None:
    raw = bytearray(_serialize_js(*msg))
    how = data.draw(st.sampled_from(["truncate", "flip", "count", "header"]))
    if how == "truncate":
        raw = raw[:data.draw(st.integers(0, len(raw) - 1))]
    elif how == "flip":
        for _ in range(data.draw(st.integers(1, 8))):
            raw[data.draw(st.integers(0, len(raw) - 1))] = data.draw(st.integers(0, 255))
    elif how == "count":   # a length field (4-aligned) set to a huge or odd value
        at = 4 + 4 * data.draw(st.integers(2, max(2, (len(raw) - 8) // 4)))
        if at + 4 <= len(raw):
            raw[at:at + 4] = struct.pack("<I", data.draw(st.sampled_from([2**32 - 1, 2**31, 10**6, 3, 0])))
    else:
        raw[:4] = data.draw(st.binary(min_size=4, max_size=4))
    try:
        sec, nsec, names, pos, vel = parse_joint_state(bytes(raw))
    except CdrError:
        return
    # a parse that succeeds only holds what the buffer holds
    assert 8 * (len(pos) + len(vel)) + sum(len(n.encode()) for n in names) <= len(raw)


@given(st.binary(max_size=400))
def test_random_bytes_raise_only_cdr_error(raw: bytes) -> None:
    for parse in (parse_joint_state, parse_imu_gyro_z):
        try:
            parse(raw)
        except CdrError:
            pass


@given(TEXT, FLOATS, st.booleans(), st.data())
def test_imu_reads_back_and_damage_raises_only_cdr_error(frame: str, wz: float, provided: bool, data) -> None:
    from rclpy.serialization import serialize_message
    from sensor_msgs.msg import Imu

    m = Imu()
    m.header.frame_id = frame
    m.angular_velocity.z = wz
    if not provided:
        m.angular_velocity_covariance[0] = -1.0
    raw = bytes(serialize_message(m))
    got, flag = parse_imu_gyro_z(raw)
    assert (got == wz or (math.isnan(got) and math.isnan(wz))) and flag == provided
    cut = raw[:data.draw(st.integers(0, len(raw) - 1))]
    try:
        parse_imu_gyro_z(cut)
    except CdrError:
        return
    assert len(cut) >= 16 + 8 * 17     # a successful parse of a prefix holds the whole Imu head
