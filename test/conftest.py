"""Shared pytest fixtures for wheel_dr's tests (sections below are owned by different parts of the suite)."""
from __future__ import annotations

import ctypes
import os
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path

import pytest

from wheel_dr.ros.env import (
    RosWorkspaceMissingError,
    isolated_dds_env,
    ros_environment,
    workspace_paths,
)

REPO_ROOT = Path(__file__).resolve().parents[1]

# ==============================================================================================
# ROS workspace environment (tf2_msgs from .ros_ws, isolated DDS domain)
#
# What this section gives every test:
#   * At conftest import (before any test module is collected) it makes sure tools/tf_msgs is
#     built (tools/build_tf_msgs.sh: a no-op taking ~0.2 s when up to date; set
#     WHEEL_DR_SKIP_TF_BUILD=1 to skip the call) and then changes THIS process so that
#     `import tf2_msgs.msg` and rclpy publishers/subscribers of TFMessage work in-process:
#     sys.path, os.environ (AMENT_PREFIX_PATH, PYTHONPATH, LD_LIBRARY_PATH) and a preload of the
#     built libraries (the dynamic loader reads LD_LIBRARY_PATH only at process start; `make test`
#     also exports it beforehand through tools/ros_env.sh, the preload covers a bare `pytest`).
#   * One random ROS_DOMAIN_ID (1..100) for the whole session with localhost-only discovery, set
#     in os.environ too, so in-process nodes and subprocess nodes share that one isolated domain.
#   * Fixtures `ros_env` (dict for subprocess env=...) and `ros_domain_id` (int).
# Use: subprocess.Popen([sys.executable, script], env=ros_env) for a real node in a real process.
# ==============================================================================================

_TF_BUILD_ERROR: str | None = None


def _build_tf_msgs() -> str | None:
    """Run tools/build_tf_msgs.sh (idempotent); return an error sentence, or None on success."""
    if os.environ.get("WHEEL_DR_SKIP_TF_BUILD") == "1":
        return None
    result = subprocess.run(
        ["bash", str(REPO_ROOT / "tools" / "build_tf_msgs.sh")],
        capture_output=True,
        text=True,
        check=False,
    )
    if result.returncode != 0:
        return f"tools/build_tf_msgs.sh failed (exit {result.returncode}): {result.stderr.strip()[-2000:]}"
    return None


def _activate_ros_workspace_in_process() -> None:
    """Make the built tf2_msgs and the session's isolated DDS domain visible to this process."""
    global _TF_BUILD_ERROR
    _TF_BUILD_ERROR = _build_tf_msgs()
    try:
        env = ros_environment(os.environ)
    except RosWorkspaceMissingError as exc:
        _TF_BUILD_ERROR = _TF_BUILD_ERROR or str(exc)
        env = dict(os.environ)
    # os.environ.update() adds and overwrites but removes nothing, so this process keeps the ROS
    # wheels' start-up guard (its loader paths are already set); children started with env=None
    # inherit the guard and the full LD_LIBRARY_PATH, children started with ros_env re-run the hook.
    os.environ.update(isolated_dds_env(env))
    if _TF_BUILD_ERROR is not None:
        return
    paths = workspace_paths()
    if str(paths["python"]) not in sys.path:
        sys.path.insert(0, str(paths["python"]))
    # Loaded libraries are matched by file name later (the C type-support lookup dlopen()s
    # "libtf2_msgs__rosidl_typesupport_*.so" by bare name), so preloading by full path is enough.
    for library in sorted(paths["lib"].glob("libtf2_msgs__*.so")):
        ctypes.CDLL(str(library), mode=ctypes.RTLD_GLOBAL)


_activate_ros_workspace_in_process()


@pytest.fixture(scope="session")
def ros_domain_id() -> int:
    """The ROS_DOMAIN_ID (1..100) that every node of this test session uses."""
    return int(os.environ["ROS_DOMAIN_ID"])


@pytest.fixture(scope="session")
def ros_env(ros_domain_id: int) -> Iterator[dict[str, str]]:
    """Environment for subprocesses running rclpy nodes: local tf2_msgs + session DDS domain.

    The dict is a fresh copy for the session; tests that change it should copy it first
    (``env = dict(ros_env)``).
    """
    if _TF_BUILD_ERROR is not None:
        pytest.fail(f"The ROS workspace is not usable: {_TF_BUILD_ERROR}", pytrace=False)
    env = isolated_dds_env(ros_environment(os.environ), domain_id=ros_domain_id)
    env["PYTHONUNBUFFERED"] = "1"
    yield env


# ==============================================================================================
# (other sections go below this line)
# ==============================================================================================

# ==============================================================================================
# Property-based tests (hypothesis): a short profile for `make test`, a long one for `make fuzz`
# (WHEEL_DR_FUZZ=1). Examples are derandomised in the short profile so `make test` is repeatable.
# ==============================================================================================
try:
    from hypothesis import HealthCheck, settings as _hyp_settings

    _hyp_settings.register_profile(
        "quick", max_examples=120, deadline=None, derandomize=True, print_blob=True,
        suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much, HealthCheck.data_too_large])
    _hyp_settings.register_profile(
        "fuzz", max_examples=int(os.environ.get("WHEEL_DR_FUZZ_EXAMPLES", "20000")), deadline=None,
        print_blob=True,
        suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much, HealthCheck.data_too_large])
    _hyp_settings.load_profile("fuzz" if os.environ.get("WHEEL_DR_FUZZ") == "1" else "quick")
except ImportError:  # hypothesis is in requirements.txt; without it the property tests are skipped
    pass
