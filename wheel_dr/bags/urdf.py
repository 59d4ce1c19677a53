"""URDF geometry: wheel radii and track, or a wheel table's contact points and radii, read from any URDF.

Reading rule (URDF specification, wiki.ros.org/urdf/XML): a wheel's radius is the ``radius`` of the
``cylinder`` in its child link's collision (else visual) geometry; the track is the distance
between the left and right wheel joints' origins along the base frame's y axis, with joint origins
composed from ``xyz`` / ``rpy`` (fixed-axis roll, pitch, yaw) along the kinematic chain.

Wheel tables (``table_geometry_from_urdf``): wheel i's contact point (x_i, y_i) is the origin of its
spin joint (``drive.wheel_joints``) in the base frame, or of its steering joint
(``drive.steer_joints``) for a wheel without an encoder; its radius is the cylinder of the spin
joint's child link, or of the first link below the steering joint that has one.
"""
from __future__ import annotations

import math
import xml.etree.ElementTree as ET
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from ..core.errors import InputError

__all__ = ["UrdfGeometry", "geometry_from_urdf", "TableUrdfGeometry", "table_geometry_from_urdf"]


@dataclass(frozen=True)
class UrdfGeometry:
    """Wheel geometry found in a URDF (metres) and the joints it came from."""

    left_radius_m: float
    right_radius_m: float
    track_width_m: float
    left_joints: tuple[str, ...]
    right_joints: tuple[str, ...]
    robot_name: str = ""


def _rpy_matrix(r: float, p: float, y: float) -> np.ndarray:
    cr, sr, cp, sp, cy, sy = math.cos(r), math.sin(r), math.cos(p), math.sin(p), math.cos(y), math.sin(y)
    return np.array([[cy * cp, cy * sp * sr - sy * cr, cy * sp * cr + sy * sr],
                     [sy * cp, sy * sp * sr + cy * cr, sy * sp * cr - cy * sr],
                     [-sp, cp * sr, cp * cr]])


def _floats(text: str | None, n: int, what: str) -> list[float]:
    if text is None:
        return [0.0] * n
    try:
        vals = [float(v) for v in text.split()]
    except ValueError:
        vals = []
    if len(vals) != n:
        raise InputError(f"the URDF's {what} '{text}' is not {n} numbers; fix the robot description.")
    return vals


def _cylinder_radius(link: ET.Element | None) -> float | None:
    if link is None:
        return None
    for tag in ("collision", "visual"):
        for node in link.findall(tag):
            cyl = node.find("geometry/cylinder")
            if cyl is not None and cyl.get("radius") is not None:
                try:
                    return float(cyl.get("radius"))
                except ValueError:
                    return None
    return None


def geometry_from_urdf(text: str, left_joints: Sequence[str], right_joints: Sequence[str],
                       base_frame: str = "base_link") -> UrdfGeometry:
    """Wheel radii and track of the named joints in URDF ``text`` (see the module docstring).

    Radii of several joints per side are averaged. Raises InputError naming what is missing.
    """
    try:
        root = ET.fromstring(text)
    except ET.ParseError:
        raise InputError("the robot description is not valid URDF XML; give the geometry in the parameters "
                         "file (wheels.left_radius, wheels.right_radius, wheels.track_width).") from None
    links = {ln.get("name"): ln for ln in root.findall("link")}
    joints = {j.get("name"): j for j in root.findall("joint")}
    child_to_joint = {j.find("child").get("link"): j for j in joints.values() if j.find("child") is not None}

    def to_base(link_name: str) -> tuple[np.ndarray, np.ndarray]:
        rot, pos = np.eye(3), np.zeros(3)
        seen = set()
        name = link_name
        while name != base_frame and name in child_to_joint and name not in seen:
            seen.add(name)
            j = child_to_joint[name]
            origin = j.find("origin")
            xyz = _floats(origin.get("xyz") if origin is not None else None, 3, f"joint '{j.get('name')}' xyz")
            rpy = _floats(origin.get("rpy") if origin is not None else None, 3, f"joint '{j.get('name')}' rpy")
            r = _rpy_matrix(*rpy)
            rot, pos = r @ rot, r @ pos + np.asarray(xyz)
            name = j.find("parent").get("link")
        return rot, pos

    def side(names: Sequence[str]) -> tuple[float, float]:
        radii, ys = [], []
        for n in names:
            j = joints.get(n)
            if j is None:
                raise InputError(f"joint '{n}' is not in the robot description; fix wheels.left_joints / "
                                 "wheels.right_joints or give the geometry in the parameters file.")
            child = j.find("child").get("link")
            radius = _cylinder_radius(links.get(child))
            if radius is None or radius <= 0:
                raise InputError(f"wheel link '{child}' of joint '{n}' has no cylinder radius in the robot "
                                 "description; give wheels.left_radius / wheels.right_radius in the parameters file.")
            radii.append(radius)
            ys.append(float(to_base(child)[1][1]))
        return float(np.mean(radii)), float(np.mean(ys))

    lr, ly = side(left_joints)
    rr, ry = side(right_joints)
    track = abs(ly - ry)
    if not track > 0:
        raise InputError("the robot description puts the left and right wheels at the same y; give "
                         "wheels.track_width in the parameters file.")
    return UrdfGeometry(lr, rr, track, tuple(left_joints), tuple(right_joints), root.get("name", ""))


@dataclass(frozen=True)
class TableUrdfGeometry:
    """A wheel table's contact points (m, base frame) and radii (m) found in a URDF, one per wheel,
    and the joint each wheel's numbers came from."""

    wheel_x: tuple[float, ...]
    wheel_y: tuple[float, ...]
    wheel_radius: tuple[float, ...]
    joints: tuple[str, ...]
    robot_name: str = ""


_TABLE_FIX = "give drive.wheel_x, drive.wheel_y and drive.wheel_radius in the parameters file"


def table_geometry_from_urdf(text: str, wheel_joints: Sequence[str], steer_joints: Sequence[str] = (),
                             base_frame: str = "base_link") -> TableUrdfGeometry:
    """Contact points and radii of a wheel table's wheels in URDF ``text`` (see the module docstring).

    ``wheel_joints`` / ``steer_joints`` are the table's arrays ('' for none; ``steer_joints`` may be
    empty). Raises InputError naming what is missing and the fix.
    """
    try:
        root = ET.fromstring(text)
    except ET.ParseError:
        raise InputError(f"the robot description is not valid URDF XML; {_TABLE_FIX}.") from None
    links = {ln.get("name"): ln for ln in root.findall("link")}
    joints = {j.get("name"): j for j in root.findall("joint")}
    child_of: dict[str, str] = {}
    parent_of: dict[str, str] = {}
    children: dict[str, list[str]] = {}
    for name, j in joints.items():
        c, p = j.find("child"), j.find("parent")
        if c is None or p is None or c.get("link") is None or p.get("link") is None:
            raise InputError(f"joint '{name}' of the robot description lacks a parent or child link; fix the "
                             f"robot description or {_TABLE_FIX}.")
        child_of[name], parent_of[name] = c.get("link"), p.get("link")
        children.setdefault(p.get("link"), []).append(c.get("link"))
    by_child = {child_of[n]: joints[n] for n in joints}

    def to_base(link_name: str) -> np.ndarray:
        rot, pos = np.eye(3), np.zeros(3)
        seen = set()
        name = link_name
        while name != base_frame and name in by_child and name not in seen:
            seen.add(name)
            j = by_child[name]
            origin = j.find("origin")
            xyz = _floats(origin.get("xyz") if origin is not None else None, 3, f"joint '{j.get('name')}' xyz")
            rpy = _floats(origin.get("rpy") if origin is not None else None, 3, f"joint '{j.get('name')}' rpy")
            r = _rpy_matrix(*rpy)
            rot, pos = r @ rot, r @ pos + np.asarray(xyz)
            name = parent_of[j.get("name")]
        if name != base_frame:
            raise InputError(f"link '{link_name}' of the robot description is not below '{base_frame}'; set "
                             f"frames.base to the URDF's base link or {_TABLE_FIX}.")
        return pos

    def radius_below(link_name: str) -> float | None:
        queue, seen = [link_name], set()
        while queue:
            name = queue.pop(0)
            if name in seen:
                continue
            seen.add(name)
            r = _cylinder_radius(links.get(name))
            if r is not None:
                return r
            queue += children.get(name, [])
        return None

    steer = list(steer_joints) if len(steer_joints) else [""] * len(wheel_joints)
    if len(steer) != len(wheel_joints):
        raise InputError(f"drive.steer_joints has {len(steer)} entries but drive.wheel_joints has "
                         f"{len(wheel_joints)}; give one entry per wheel.")
    xs, ys, rs, used = [], [], [], []
    for i, (spin, st) in enumerate(zip(wheel_joints, steer)):
        name = spin or st
        if not name:
            raise InputError(f"wheel {i} of the table names neither a spin nor a steering joint, so the robot "
                             f"description cannot place it; {_TABLE_FIX}.")
        j = joints.get(name)
        if j is None:
            raise InputError(f"joint '{name}' is not in the robot description; fix drive.wheel_joints / "
                             f"drive.steer_joints or {_TABLE_FIX}.")
        child = child_of[name]
        radius = _cylinder_radius(links.get(child)) if spin else radius_below(child)
        if radius is None or not radius > 0:
            raise InputError(f"wheel link '{child}' of joint '{name}' has no cylinder radius in the robot "
                             f"description; {_TABLE_FIX}.")
        pos = to_base(child)
        xs.append(float(pos[0]))
        ys.append(float(pos[1]))
        rs.append(float(radius))
        used.append(name)
    return TableUrdfGeometry(tuple(xs), tuple(ys), tuple(rs), tuple(used), root.get("name", ""))
