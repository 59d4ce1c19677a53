"""Process environments for the locally built ROS 2 interfaces (.ros_ws) and isolated DDS test runs."""
from __future__ import annotations

import os
import random
import sys
from collections.abc import Mapping
from pathlib import Path

from ..core import errors as _errors

__all__ = [
    "RosWorkspaceMissingError",
    "default_workspace_install",
    "isolated_dds_env",
    "ros_environment",
    "workspace_paths",
]

# No rclpy import here: this module is used to build the environment *before* rclpy starts.

_PYTHON_DIR = f"python{sys.version_info.major}.{sys.version_info.minor}"
# Set by the ROS wheels' start-up hook once it has re-executed Python with its LD_LIBRARY_PATH.
_BOOTSTRAP_GUARD = "_ROS_WHEELS_BOOTSTRAP_COMPLETE"


RosWorkspaceMissingError = _errors.RosWorkspaceMissingError   # defined in wheel_dr.core.errors


def default_workspace_install() -> Path:
    """Return the install folder of the local interface workspace.

    ``$WHEEL_DR_ROS_WS/install`` when that variable is set, else ``<repo>/.ros_ws/install``
    (the folder tools/build_tf_msgs.sh builds into).
    """
    override = os.environ.get("WHEEL_DR_ROS_WS")
    if override:
        return Path(override).resolve() / "install"
    return Path(__file__).resolve().parents[2] / ".ros_ws" / "install"


def workspace_paths(install_prefix: Path | None = None) -> dict[str, Path]:
    """Return the folders of a merged colcon install prefix that processes must see.

    Keys: ``prefix`` (for AMENT_PREFIX_PATH), ``python`` (for PYTHONPATH), ``lib``
    (for LD_LIBRARY_PATH; the C type supports are looked up there by file name).
    """
    prefix = (install_prefix or default_workspace_install()).resolve()
    return {
        "prefix": prefix,
        "python": prefix / "lib" / _PYTHON_DIR / "site-packages",
        "lib": prefix / "lib",
    }


def _prepend(value: str | None, *entries: str) -> str:
    """Put ``entries`` first on a path list, dropping their older copies and empty parts."""
    old = [part for part in (value or "").split(os.pathsep) if part and part not in entries]
    return os.pathsep.join([*entries, *old])


def ros_environment(
    base_env: Mapping[str, str] | None = None,
    *,
    install_prefix: Path | None = None,
    venv_prefix: Path | None = None,
) -> dict[str, str]:
    """Return an environment for subprocesses that use rclpy and the locally built tf2_msgs.

    Starts from ``base_env`` (default ``os.environ``) and puts the install prefix of the local
    workspace first on AMENT_PREFIX_PATH (followed by the venv prefix, ``sys.prefix`` by default,
    where the message wheels keep their ament index), its ``lib/python3.X/site-packages`` on
    PYTHONPATH and its ``lib`` on LD_LIBRARY_PATH. The ROS wheels' start-up guard is removed so a
    child Python adds the wheels' own library folders itself. Nothing is changed in place.

    Raises RosWorkspaceMissingError when the workspace has not been built.
    """
    paths = workspace_paths(install_prefix)
    if not (paths["python"] / "tf2_msgs").is_dir():
        raise RosWorkspaceMissingError(
            f"The local tf2_msgs build is missing under {paths['prefix']}; run `make tf-msgs` "
            "(or tools/build_tf_msgs.sh) first."
        )
    venv = Path(venv_prefix or sys.prefix).resolve()
    env = dict(os.environ if base_env is None else base_env)
    env["AMENT_PREFIX_PATH"] = _prepend(env.get("AMENT_PREFIX_PATH"), str(paths["prefix"]), str(venv))
    env["PYTHONPATH"] = _prepend(env.get("PYTHONPATH"), str(paths["python"]))
    env["LD_LIBRARY_PATH"] = _prepend(env.get("LD_LIBRARY_PATH"), str(paths["lib"]), str(venv / "lib"))
    env.pop(_BOOTSTRAP_GUARD, None)
    return env


def isolated_dds_env(
    env: Mapping[str, str],
    *,
    domain_id: int | None = None,
    rng: random.Random | None = None,
) -> dict[str, str]:
    """Return a copy of ``env`` that keeps DDS traffic on this machine and on its own domain.

    Sets ROS_DOMAIN_ID (``domain_id``, else drawn uniformly from 1..100), discovery limited to
    localhost both the current way (ROS_AUTOMATIC_DISCOVERY_RANGE=LOCALHOST) and the older way
    (ROS_LOCALHOST_ONLY=1), and clears ROS_STATIC_PEERS so no robot network is contacted.
    """
    if domain_id is None:
        domain_id = (rng or random.SystemRandom()).randint(1, 100)
    if not 0 <= domain_id <= 232:
        raise ValueError(f"ROS_DOMAIN_ID {domain_id} is outside 0..232; pick a domain in that range.")
    out = dict(env)
    out["ROS_DOMAIN_ID"] = str(domain_id)
    out["ROS_AUTOMATIC_DISCOVERY_RANGE"] = "LOCALHOST"
    out["ROS_LOCALHOST_ONLY"] = "1"
    out["ROS_STATIC_PEERS"] = ""
    return out
