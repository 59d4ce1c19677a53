"""Reading and writing bags (rosbag2 mcap/sqlite3, ROS 1), topic discovery, URDF geometry, truth readers."""
from __future__ import annotations

from .urdf import UrdfGeometry, geometry_from_urdf
from .reader import BagError, RunData, TruthSpec, bag_topics, parse_truth_spec, read_run, read_tum
from .writer import BAG_FORMATS, DEFAULT_TOPICS, SLIP_STATUS_NAME, write_bag

__all__ = ["write_bag", "DEFAULT_TOPICS", "SLIP_STATUS_NAME", "BAG_FORMATS", "geometry_from_urdf", "UrdfGeometry", "read_run", "RunData", "BagError", "TruthSpec", "bag_topics",
           "parse_truth_spec", "read_tum"]
