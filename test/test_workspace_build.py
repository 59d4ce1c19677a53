"""ROS workspace checks: wheel_dr builds with colcon, and tf2_msgs/TFMessage crosses real DDS between processes."""
from __future__ import annotations

import json
import math
import os
import random
import shutil
import subprocess
import sys
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from wheel_dr.ros.env import isolated_dds_env, ros_environment

__all__: list[str] = []

REPO_ROOT = Path(__file__).resolve().parents[1]
VENV_BIN = Path(sys.executable).parent
PACKAGE = "wheel_dr"

# Everything in the repo that is not part of the ROS package's sources.
_NOT_PACKAGE_SOURCES = shutil.ignore_patterns(
    ".git", ".venv", ".ros_ws", ".ci", ".cache", ".pytest_cache", "__pycache__", "*.egg-info",
    "build", "install", "log", "out", "test", "tools",
)


def _setup_py_declarations(source_dir: Path) -> dict:
    """Run setup.py with setuptools.setup() replaced, returning its data_files and console scripts.

    Runs in a subprocess with the package sources as working folder, so setup.py's globs see the
    same files colcon sees.
    """
    probe = (
        "import json, setuptools\n"
        "captured = {}\n"
        "setuptools.setup = lambda **kw: captured.update(kw)\n"
        "exec(compile(open('setup.py').read(), 'setup.py', 'exec'), {'__name__': '__main__'})\n"
        "print(json.dumps({'data_files': captured.get('data_files', []),\n"
        "                  'console_scripts': captured.get('entry_points', {}).get('console_scripts', [])}))\n"
    )
    out = subprocess.run(
        [sys.executable, "-c", probe], cwd=source_dir, capture_output=True, text=True, check=True, timeout=60
    )
    return json.loads(out.stdout.strip().splitlines()[-1])


def test_colcon_builds_wheel_dr_as_ament_python_package(tmp_path: Path) -> None:
    """colcon (colcon-ros, build type ament_python) installs everything setup.py declares.

    Expected layout is the ament_python convention (common practice in ROS 2, as produced by
    colcon-ros): a resource marker share/ament_index/resource_index/packages/<name>, the manifest
    at share/<name>/package.xml, data_files under the prefix, and console scripts in
    lib/<name>/ (setup.cfg's install_scripts). The file list comes from setup.py itself.
    """
    workspace = tmp_path / "ws"
    source_dir = workspace / "src" / PACKAGE
    shutil.copytree(REPO_ROOT, source_dir, ignore=_NOT_PACKAGE_SOURCES, symlinks=True)

    env = dict(os.environ)
    env["PATH"] = f"{VENV_BIN}{os.pathsep}{env.get('PATH', '')}"
    env["COLCON_HOME"] = str(tmp_path / "colcon_home")
    env.pop("PYTHONPATH", None)
    result = subprocess.run(
        [
            str(VENV_BIN / "colcon"), "--log-base", str(workspace / "log"), "build",
            "--paths", str(source_dir),
            "--build-base", str(workspace / "build"),
            "--install-base", str(workspace / "install"),
            "--event-handlers", "console_direct-",
        ],
        cwd=workspace, env=env, capture_output=True, text=True, timeout=120, check=False,
    )
    assert result.returncode == 0, f"colcon build failed:\n{result.stdout[-3000:]}\n{result.stderr[-3000:]}"
    assert "1 package finished" in result.stdout, result.stdout

    prefix = workspace / "install" / PACKAGE  # colcon's default isolated install layout
    marker = prefix / "share" / "ament_index" / "resource_index" / "packages" / PACKAGE
    assert marker.is_file(), "ament resource index marker missing"

    manifest = prefix / "share" / PACKAGE / "package.xml"
    root = ET.parse(manifest).getroot()
    assert root.get("format") == "3"
    assert root.findtext("name") == PACKAGE
    assert root.findtext("export/build_type") == "ament_python"

    declared = _setup_py_declarations(source_dir)
    for destination, files in declared["data_files"]:
        for relative in files:
            installed = prefix / destination / Path(relative).name
            assert installed.is_file(), f"{relative} not installed to {destination}"
            assert installed.read_bytes() == (source_dir / relative).read_bytes(), f"{installed} differs from source"

    site = prefix / "lib" / f"python{sys.version_info.major}.{sys.version_info.minor}" / "site-packages"
    assert (site / PACKAGE / "__init__.py").is_file()
    assert (site / PACKAGE / "ros" / "env.py").is_file()

    # The scripts start their entry point by name; the installed metadata maps name -> module:function.
    entry_points = [line.replace(" ", "") for egg in site.glob("*.egg-info") for line in
                    (egg / "entry_points.txt").read_text().splitlines()]
    scripts = [spec.replace(" ", "") for spec in declared["console_scripts"]]
    assert any(spec.startswith("wheel_dr_node=") for spec in scripts), "setup.py no longer declares the node's script"
    for spec in scripts:
        name = spec.split("=", 1)[0]
        script = prefix / "lib" / PACKAGE / name
        assert script.is_file(), f"console script {name} missing from lib/{PACKAGE}"
        assert os.access(script, os.X_OK), f"console script {name} is not executable"
        assert spec in entry_points, f"installed metadata does not map {spec}"


_TALKER = r"""
import json, sys, time
import rclpy
from geometry_msgs.msg import TransformStamped
from tf2_msgs.msg import TFMessage

spec = json.loads(sys.argv[1])
rclpy.init()
node = rclpy.create_node("wdr_ws_test_tf_talker")
publisher = node.create_publisher(TFMessage, "/tf", 100)
t = TransformStamped()
t.header.frame_id = spec["parent"]
t.header.stamp.sec, t.header.stamp.nanosec = spec["sec"], spec["nanosec"]
t.child_frame_id = spec["child"]
t.transform.translation.x, t.transform.translation.y, t.transform.translation.z = spec["xyz"]
(t.transform.rotation.x, t.transform.rotation.y,
 t.transform.rotation.z, t.transform.rotation.w) = spec["xyzw"]
deadline = time.monotonic() + 25.0
while time.monotonic() < deadline:
    publisher.publish(TFMessage(transforms=[t]))
    time.sleep(0.05)
"""

_LISTENER = r"""
import json, sys, time
import rclpy
from tf2_msgs.msg import TFMessage

received = []
rclpy.init()
node = rclpy.create_node("wdr_ws_test_tf_listener")
node.create_subscription(TFMessage, "/tf", received.append, 100)
deadline = time.monotonic() + 20.0
while not received and time.monotonic() < deadline:
    rclpy.spin_once(node, timeout_sec=0.1)
if not received:
    sys.exit("no TFMessage arrived on /tf within 20 s")
message = received[0]
out = []
for t in message.transforms:
    out.append({
        "parent": t.header.frame_id, "child": t.child_frame_id,
        "sec": t.header.stamp.sec, "nanosec": t.header.stamp.nanosec,
        "xyz": [t.transform.translation.x, t.transform.translation.y, t.transform.translation.z],
        "xyzw": [t.transform.rotation.x, t.transform.rotation.y, t.transform.rotation.z, t.transform.rotation.w],
    })
print(json.dumps(out), flush=True)
"""


def test_tf_message_crosses_real_dds_between_processes(tmp_path: Path, ros_env: dict[str, str]) -> None:
    """A TFMessage published by one rclpy process arrives intact in another on the isolated domain.

    REP 105 frames (odom -> base_link, the transform an odometry source publishes); float64 fields
    go through CDR unchanged, so the received values must equal the sent ones exactly.
    """
    rng = random.Random()
    yaw_rad = rng.uniform(-math.pi, math.pi)
    spec = {
        "parent": "odom",
        "child": "base_link",
        "sec": rng.randint(1, 2**31 - 1),
        "nanosec": rng.randint(0, 999_999_999),
        "xyz": [rng.uniform(-50.0, 50.0), rng.uniform(-50.0, 50.0), 0.0],
        "xyzw": [0.0, 0.0, math.sin(yaw_rad / 2.0), math.cos(yaw_rad / 2.0)],
    }
    talker_py = tmp_path / "talker.py"
    listener_py = tmp_path / "listener.py"
    talker_py.write_text(_TALKER)
    listener_py.write_text(_LISTENER)

    listener = subprocess.Popen(
        [sys.executable, str(listener_py)], env=ros_env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True
    )
    talker = subprocess.Popen(
        [sys.executable, str(talker_py), json.dumps(spec)],
        env=ros_env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True,
    )
    try:
        out, err = listener.communicate(timeout=30)
    finally:
        listener.kill() if listener.poll() is None else None
        talker.terminate()
        try:
            _, talker_err = talker.communicate(timeout=10)
        except subprocess.TimeoutExpired:
            talker.kill()
            _, talker_err = talker.communicate()
    assert listener.returncode == 0, f"listener failed: {err[-3000:]}\ntalker stderr: {talker_err[-3000:]}"
    received = json.loads(out.strip().splitlines()[-1])
    assert received == [spec]


def test_isolated_dds_env_keeps_discovery_local() -> None:
    """isolated_dds_env picks a domain in 1..100 and localhost-only discovery (project rule)."""
    base = {"ROS_DOMAIN_ID": "0", "ROS_STATIC_PEERS": "192.0.2.10", "KEEP": "x"}
    domains = set()
    for _ in range(200):
        env = isolated_dds_env(base)
        domains.add(int(env["ROS_DOMAIN_ID"]))
        assert env["ROS_AUTOMATIC_DISCOVERY_RANGE"] == "LOCALHOST"
        assert env["ROS_LOCALHOST_ONLY"] == "1"
        assert env["ROS_STATIC_PEERS"] == ""
        assert env["KEEP"] == "x"
    assert min(domains) >= 1 and max(domains) <= 100
    assert len(domains) > 1, "domain id is not random"
    assert base["ROS_DOMAIN_ID"] == "0", "input mapping was modified"
    assert isolated_dds_env(base, domain_id=42)["ROS_DOMAIN_ID"] == "42"
    with pytest.raises(ValueError):
        isolated_dds_env(base, domain_id=500)


def test_ros_env_sh_matches_python_helper() -> None:
    """Sourcing tools/ros_env.sh (POSIX sh, as make does) gives the same paths as ros_environment()."""
    base = {"PATH": os.environ["PATH"], "HOME": os.environ.get("HOME", "/tmp"),
            "AMENT_PREFIX_PATH": "/opt/elsewhere", "PYTHONPATH": "/opt/elsewhere/py",
            "LD_LIBRARY_PATH": "/opt/elsewhere/lib", "WHEEL_DR_ROOT": str(REPO_ROOT)}
    shell = subprocess.run(
        ["sh", "-c", '. "$WHEEL_DR_ROOT/tools/ros_env.sh" && env -0'],
        env=base, capture_output=True, text=True, check=True, timeout=30,
    )
    from_shell = dict(item.split("=", 1) for item in shell.stdout.split("\0") if "=" in item)
    from_python = ros_environment(base, venv_prefix=(REPO_ROOT / ".venv").resolve())
    for name in ("AMENT_PREFIX_PATH", "PYTHONPATH", "LD_LIBRARY_PATH"):
        assert from_shell[name] == from_python[name], name
        assert from_python[name].endswith("/opt/elsewhere" + {"AMENT_PREFIX_PATH": "", "PYTHONPATH": "/py",
                                                             "LD_LIBRARY_PATH": "/lib"}[name])


@pytest.mark.filterwarnings("ignore:module 'sre_:DeprecationWarning")  # raised inside lark, the IDL parser
def test_tf2_msgs_usable_in_the_test_process() -> None:
    """conftest makes the locally built TFMessage importable here, type support included."""
    from tf2_msgs.msg import TFMessage

    TFMessage.__class__.__import_type_support__()
    assert TFMessage._TYPE_SUPPORT is not None
    assert Path(sys.modules["tf2_msgs"].__file__).is_relative_to(
        Path(os.environ["AMENT_PREFIX_PATH"].split(os.pathsep)[0])
    )
