"""Launch files and config files: parsed (the launch system is not installed here) and cross-checked.

The Python launch file is read with ``ast`` and the XML one with ``xml.etree``; what they name
must exist: the executable among setup.py's console scripts, the default params file among the
files setup.py installs to share/wheel_dr/config, the remapped topics among the node's own
subscriptions. Launch XML tags and attributes (arg/node/param/remap, pkg, exec, $(var) and
$(find-pkg-share)) are those of the ROS 2 launch_xml format (common practice in ROS 2).
"""
from __future__ import annotations

import ast
import glob
import os
import xml.etree.ElementTree as ET
from pathlib import Path
from typing import Any

import pytest

from wheel_dr.params import NODE_NAME, load_settings

__all__: list[str] = []

REPO = Path(__file__).resolve().parents[1]
PACKAGE = "wheel_dr"
ARGS = {"namespace", "params_file", "use_sim_time", "joint_states_topic", "imu_topic"}


def _literal(node: ast.AST) -> Any:
    try:
        return ast.literal_eval(node)
    except ValueError:
        return None


def _setup_py() -> dict[str, Any]:
    """console_scripts and data_files of setup.py, evaluated with its globs in the repo folder."""
    tree = ast.parse((REPO / "setup.py").read_text())
    call = next(n for n in ast.walk(tree) if isinstance(n, ast.Call) and getattr(n.func, "id", "") == "setup")
    kw = {k.arg: k.value for k in call.keywords}
    consts = {t.id: _literal(n.value) for n in tree.body if isinstance(n, ast.Assign)
              for t in n.targets if isinstance(t, ast.Name)}
    cwd = os.getcwd()
    os.chdir(REPO)
    try:
        data_files = eval(compile(ast.Expression(kw["data_files"]), "setup.py", "eval"), {"glob": glob.glob, **consts})
    finally:
        os.chdir(cwd)
    scripts = _literal(kw["entry_points"])["console_scripts"]
    return {"data_files": data_files,
            "console_scripts": {s.split("=")[0].strip(): s.split("=")[1].strip() for s in scripts}}


def _installed(setup: dict[str, Any], share_path: str) -> bool:
    """True when setup.py installs repo file ``share_path`` (relative to share/wheel_dr)."""
    folder, name = os.path.split(share_path)
    target = f"share/{PACKAGE}/{folder}".rstrip("/")
    return any(dest == target and any(os.path.normpath(f) == os.path.normpath(share_path) for f in files)
               for dest, files in setup["data_files"])


def _node_topics() -> set[str]:
    """Topic names the node subscribes to (literal strings in its create_subscription calls)."""
    tree = ast.parse((REPO / "wheel_dr" / "ros" / "node.py").read_text())
    out = set()
    for n in ast.walk(tree):
        if isinstance(n, ast.Call) and getattr(n.func, "attr", "") == "create_subscription":
            topic = _literal(n.args[1])
            if isinstance(topic, str):
                out.add(topic)
    return out


def _py_launch() -> dict[str, Any]:
    tree = ast.parse((REPO / "launch" / "wheel_dr.launch.py").read_text())
    funcs = {n.name for n in tree.body if isinstance(n, ast.FunctionDef)}
    assert "generate_launch_description" in funcs
    imports = {(n.module, a.name) for n in ast.walk(tree) if isinstance(n, ast.ImportFrom) for a in n.names}
    consts = {t.id: _literal(n.value) for n in tree.body if isinstance(n, ast.Assign)
              for t in n.targets if isinstance(t, ast.Name)}

    def value(node: ast.AST) -> Any:
        if isinstance(node, ast.Name) and node.id in consts:
            return consts[node.id]
        return _literal(node)

    calls = [n for n in ast.walk(tree) if isinstance(n, ast.Call) and isinstance(n.func, ast.Name)]
    args = {}
    for c in calls:
        if c.func.id == "DeclareLaunchArgument":
            kw = {k.arg: k.value for k in c.keywords}
            args[value(c.args[0])] = kw["default_value"]
    node = next(c for c in calls if c.func.id == "Node")
    kw = {k.arg: k.value for k in node.keywords}
    remaps = {}
    for elt in kw["remappings"].elts:
        src, dst = elt.elts
        remaps[value(src)] = dst.args[0].value if isinstance(dst, ast.Call) else value(dst)
    return {"imports": imports, "args": args, "package": value(kw["package"]),
            "executable": value(kw["executable"]), "name": value(kw["name"]),
            "namespace": kw["namespace"].args[0].value, "parameters": kw["parameters"], "remaps": remaps,
            "value": value}


def test_python_launch_file_names_what_exists() -> None:
    """launch/wheel_dr.launch.py: launch / launch_ros APIs, the package's console script, every argument,
    the default params file installed by setup.py, remaps of topics the node really subscribes to."""
    setup = _setup_py()
    got = _py_launch()
    assert ("launch", "LaunchDescription") in got["imports"] and ("launch_ros.actions", "Node") in got["imports"]
    assert set(got["args"]) == ARGS
    assert got["package"] == PACKAGE
    assert setup["console_scripts"][got["executable"]] == "wheel_dr.ros.node:main"
    assert got["name"] == NODE_NAME and got["namespace"] == "namespace"
    # default params file: PathJoinSubstitution([FindPackageShare("wheel_dr"), "config", "wheel_dr.yaml"])
    default = got["args"]["params_file"]
    assert default.func.id == "PathJoinSubstitution"
    share, *parts = default.args[0].elts
    assert share.func.id == "FindPackageShare" and got["value"](share.args[0]) == PACKAGE
    rel = "/".join(got["value"](p) for p in parts)
    assert (REPO / rel).is_file() and _installed(setup, rel)
    load_settings(REPO / rel)  # and it is a valid wheel_dr parameters file
    # parameters: the params file argument and use_sim_time from its argument
    params = got["parameters"].elts
    assert params[0].func.id == "LaunchConfiguration" and params[0].args[0].value == "params_file"
    sim = params[1].values[0]
    assert got["value"](params[1].keys[0]) == "use_sim_time" and sim.args[0].args[0].value == "use_sim_time"
    assert got["remaps"] == {"joint_states": "joint_states_topic", "imu": "imu_topic"}
    assert set(got["remaps"]) <= _node_topics()
    assert _literal(got["args"]["joint_states_topic"]) == "joint_states"


def test_xml_launch_file_names_what_exists_and_matches_the_python_one() -> None:
    """launch/wheel_dr.launch.xml: same arguments and defaults as the Python file, same executable,
    params file and remaps."""
    setup = _setup_py()
    root = ET.parse(REPO / "launch" / "wheel_dr.launch.xml").getroot()
    assert root.tag == "launch"
    args = {a.get("name"): a.get("default") for a in root.findall("arg")}
    assert set(args) == ARGS
    assert all(a.get("description") for a in root.findall("arg"))
    prefix = f"$(find-pkg-share {PACKAGE})/"
    assert args["params_file"].startswith(prefix)
    rel = args["params_file"][len(prefix):]
    assert (REPO / rel).is_file() and _installed(setup, rel)
    py = _py_launch()
    for name in ARGS - {"params_file"}:
        assert args[name] == _literal(py["args"][name]), name
    node = root.find("node")
    assert node.get("pkg") == PACKAGE and node.get("exec") in setup["console_scripts"]
    assert node.get("name") == NODE_NAME and node.get("namespace") == "$(var namespace)"
    params = node.findall("param")
    assert params[0].get("from") == "$(var params_file)"
    assert (params[1].get("name"), params[1].get("value")) == ("use_sim_time", "$(var use_sim_time)")
    remaps = {r.get("from"): r.get("to") for r in node.findall("remap")}
    assert remaps == {k: f"$(var {v})" for k, v in py["remaps"].items()}


def test_launch_and_config_files_are_installed() -> None:
    """Every launch and config file of the repo is in setup.py's data_files (so colcon installs it)."""
    setup = _setup_py()
    for folder in ("launch", "config"):
        for f in sorted((REPO / folder).iterdir()):
            if f.is_file() and f.suffix in (".py", ".xml", ".yaml"):
                assert _installed(setup, f"{folder}/{f.name}"), f


@pytest.mark.parametrize("name", ["wheel_dr.yaml", "skid_steer_ticks.yaml"])
def test_config_files_are_valid_parameters(name: str) -> None:
    """The shipped parameters files load through the one settings schema."""
    settings = load_settings(REPO / "config" / name)
    if name == "skid_steer_ticks.yaml":  # two wheels a side, encoder counts
        assert len(settings.wheels.left_joints) == 2 and len(settings.wheels.right_joints) == 2
        assert settings.wheels.source == "ticks" and settings.wheels.counter_bits > 0
