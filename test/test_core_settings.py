"""Settings schema and the shared ROS 2 parameters file; the core's import purity.

Sources: the ROS 2 parameters-file layout (a node name or the wildcard ``/**`` at the top, then
``ros__parameters``, nested keys; ROS 2 documentation, "Parameters", common practice); REP 105
frame names ``odom`` and ``base_link`` as the defaults; the required names are those the node and
analyser document (docs/parameters.md).
"""
from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import pytest
import yaml

from wheel_dr.core import Settings, SettingsError
from wheel_dr.params import NODE_NAME, load_settings, parse_params_text, update_params_text

REPO = Path(__file__).resolve().parents[1]
CONFIG = REPO / "config" / "wheel_dr.yaml"
REQUIRED = ("wheels.left_joints", "wheels.right_joints", "wheels.left_radius", "wheels.right_radius",
            "wheels.track_width", "frames.odom", "frames.base", "integration", "noise.model",
            "noise.k_left", "noise.k_right", "noise.alphas")


def test_config_file_loads_to_the_defaults() -> None:
    """config/wheel_dr.yaml lists the documented defaults: loading it changes nothing."""
    assert load_settings(CONFIG) == Settings()
    assert load_settings(None) == Settings()


def test_every_parameter_is_in_the_config_file_and_nothing_else() -> None:
    """Every Settings.specs() entry appears in config/wheel_dr.yaml, with its default value."""
    flat = parse_params_text(CONFIG.read_text(encoding="utf-8"))
    names = [s.name for s in Settings.specs()]
    assert len(names) == len(set(names))
    missing = sorted(set(names) - set(flat))
    assert not missing, f"add these to config/wheel_dr.yaml: {missing}"
    assert not sorted(set(flat) - set(names)), "config/wheel_dr.yaml has names the schema does not know"
    for spec in Settings.specs():
        assert spec.check(flat[spec.name]) == spec.default, spec.name


def test_required_names_and_rep105_defaults() -> None:
    """The documented required names exist; frames default to REP 105's odom and base_link; the default
    noise gives a non-zero covariance."""
    names = {s.name for s in Settings.specs()}
    assert set(REQUIRED) <= names
    s = Settings()
    assert (s.frames.odom, s.frames.base) == ("odom", "base_link")
    assert Settings.spec("integration").choices == ("euler", "midpoint", "exact")
    assert Settings.spec("noise.model").choices == ("per_wheel", "motion_model")
    assert len(s.noise.alphas) == 4
    assert (s.noise.k_left > 0 and s.noise.k_right > 0) and any(a > 0 for a in s.noise.alphas)


def _bad_values(spec):
    """Values outside a spec's range, each paired with the text the error must show."""
    out = []
    if spec.choices:
        out.append(("no_such_choice", "no_such_choice"))
    if spec.kind in (int, float):
        if spec.lo is not None:
            v = spec.lo if spec.lo_open else spec.lo - 1.0
            out.append((v, f"{v:g}"))
        if spec.hi is not None:
            v = spec.hi if spec.hi_open else spec.hi + 1.0
            out.append((v, f"{v:g}"))
        out.append((math.nan, "nan"))
    if spec.kind is tuple and spec.lo is not None:
        v = spec.lo - 1.0
        out.append(([v] * (spec.length or 1), f"{v:g}"))
    return out


@pytest.mark.parametrize("spec", [s for s in Settings.specs() if _bad_values(s)], ids=lambda s: s.name)
def test_errors_name_the_key_the_value_and_the_range(spec) -> None:
    """Each out-of-range value raises SettingsError naming the parameter, the value and the allowed range."""
    for value, shown in _bad_values(spec):
        with pytest.raises(SettingsError) as info:
            Settings.from_flat({spec.name: value})
        msg = str(info.value)
        assert spec.name in msg and shown in msg, msg
        if spec.choices:
            assert all(c in msg for c in spec.choices), msg
        else:
            assert spec.range_text() in msg, msg
        assert "\n" not in msg.strip()


def test_other_user_errors_are_one_sentence() -> None:
    """Unknown names, wrong types and wrong list lengths: SettingsError naming the key."""
    cases = [({"wheels.track_widht": 0.4}, "wheels.track_widht"),
             ({"wheels.track_width": "wide"}, "wheels.track_width"),
             ({"noise.alphas": [0.1, 0.2]}, "noise.alphas"),
             ({"wheels.left_joints": []}, "wheels.left_joints"),
             ({"wheels.wrap_angle": "yes"}, "wheels.wrap_angle"),
             ({"wheels.left_joints": ["a"], "wheels.right_joints": ["a"]}, "'a'")]
    for values, shown in cases:
        with pytest.raises(SettingsError) as info:
            Settings.from_flat(values)
        assert shown in str(info.value), str(info.value)
    assert isinstance(SettingsError("x"), ValueError)


def test_wildcard_and_node_name_sections() -> None:
    """ROS 2 parameters files: '/**' applies to every node, the node's own section overrides it, other
    nodes' sections are ignored, a namespaced node name matches."""
    text = f"""
/**:
  ros__parameters:
    wheels:
      track_width: 0.40
      left_radius: 0.083
other_node:
  ros__parameters:
    wheels:
      track_width: 9.0
/fleet/{NODE_NAME}:
  ros__parameters:
    wheels:
      track_width: 0.4185
    integration: midpoint
    use_sim_time: true
"""
    flat = parse_params_text(text)
    assert flat == {"wheels.track_width": 0.4185, "wheels.left_radius": 0.083, "integration": "midpoint"}
    only_wild = parse_params_text("/**:\n  ros__parameters:\n    noise:\n      model: motion_model\n")
    assert Settings.from_flat(only_wild).noise.model == "motion_model"
    with pytest.raises(SettingsError, match=r"/\*\*"):
        parse_params_text("other_node:\n  ros__parameters:\n    integration: euler\n")
    with pytest.raises(SettingsError, match="ros__parameters"):
        parse_params_text("/**:\n  integration: euler\n")
    with pytest.raises(SettingsError, match="YAML"):
        parse_params_text("/**: [unclosed\n")


def test_update_params_text_keeps_comments_and_changes_only_given_values() -> None:
    """update_params_text rewrites only the given values; comments, order and the rest stay."""
    original = CONFIG.read_text(encoding="utf-8")
    new_values = {"wheels.track_width": 0.4185, "wheels.left_radius": 0.0829, "noise.alphas": [0.1, 0.002, 0.02, 0.003],
                  "integration": "midpoint"}
    updated = update_params_text(original, new_values)
    before, after = original.splitlines(), updated.splitlines()
    assert len(before) == len(after)
    changed = [(a, b) for a, b in zip(before, after) if a != b]
    assert len(changed) == len(new_values)
    for a, b in changed:   # the comment of each changed line is kept
        assert "#" in a and a[a.index("#"):] == b[b.index("#"):]
    comments = [ln for ln in before if ln.lstrip().startswith("#")]
    assert comments and all(c in after for c in comments)
    flat = parse_params_text(updated)
    settings = Settings.from_flat(flat)
    assert settings.wheels.track_width == 0.4185 and settings.wheels.left_radius == 0.0829
    assert settings.noise.alphas == (0.1, 0.002, 0.02, 0.003) and settings.integration == "midpoint"
    untouched = {k: v for k, v in Settings().to_flat().items() if k not in new_values}
    assert {k: settings.to_flat()[k] for k in untouched} == untouched
    # the result is still plain YAML of the same shape
    assert list(yaml.safe_load(updated)) == ["/**"]
    # a name absent from the file is appended under ros__parameters
    appended = update_params_text("/**:\n  ros__parameters:\n    integration: euler\n", {"limits.max_gap_s": 0.25})
    assert parse_params_text(appended) == {"integration": "euler", "limits.max_gap_s": 0.25}


def test_core_imports_no_ros_bags_or_yaml() -> None:
    """The core is pure numpy/scipy: importing it pulls in no rclpy, rosbags, yaml or ROS
    message packages (checked in a fresh interpreter)."""
    code = ("import sys, json; import wheel_dr.core, wheel_dr.core.slip, wheel_dr.core.noise, "
            "wheel_dr.core.motion, wheel_dr.core.wheels, wheel_dr.core.conventions; "
            "print(json.dumps(sorted(sys.modules)))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, cwd=REPO)
    modules = json.loads(out.stdout)
    banned = ("rclpy", "rosbags", "yaml", "_yaml", "rosidl", "rmw", "builtin_interfaces", "sensor_msgs",
              "nav_msgs", "geometry_msgs", "matplotlib", "wheel_dr.ros", "wheel_dr.bags", "wheel_dr.params",
              "wheel_dr.report", "wheel_dr.cli")
    bad = [m for m in modules if any(m == b or m.startswith(b + ".") for b in banned)]
    assert not bad, f"the core imports {bad}"
    assert "numpy" in modules and "wheel_dr.core" in modules


class _NoDuplicatesLoader(yaml.SafeLoader):
    """YAML loader that refuses a key given twice in one mapping (PyYAML silently keeps the last)."""


def _construct_mapping(loader, node, deep=False):
    keys = [loader.construct_object(k, deep=deep) for k, _ in node.value]
    dupes = {k for k in keys if keys.count(k) > 1}
    if dupes:
        raise yaml.constructor.ConstructorError(None, None, f"duplicate keys {sorted(dupes)}", node.start_mark)
    return yaml.SafeLoader.construct_mapping(loader, node, deep=deep)


_NoDuplicatesLoader.add_constructor(yaml.resolver.BaseResolver.DEFAULT_MAPPING_TAG, _construct_mapping)


def test_update_params_text_adds_a_missing_name_inside_its_existing_section() -> None:
    """A name missing from a section the file already has goes into that section: a second 'wheels:'
    mapping would make YAML keep only one of the two and silently drop the file's other values."""
    text = ("/**:\n  ros__parameters:\n    wheels:\n      track_width: 0.412   # m, measured\n"
            "      left_radius: 0.0825\n    # integration scheme\n    integration: exact\n")
    updated = update_params_text(text, {"wheels.right_radius": 0.0822, "wheels.track_width": 0.4185,
                                        "limits.max_gap_s": 0.25, "noise.alphas": [0.1, 0.0, 0.0, 0.0]})
    yaml.load(updated, Loader=_NoDuplicatesLoader)   # no key twice
    assert parse_params_text(updated) == {"wheels.track_width": 0.4185, "wheels.left_radius": 0.0825,
                                          "wheels.right_radius": 0.0822, "integration": "exact",
                                          "limits.max_gap_s": 0.25, "noise.alphas": [0.1, 0.0, 0.0, 0.0]}
    assert "# m, measured" in updated and "    # integration scheme\n    integration: exact" in updated
    # the section is the file's last lines and a new section is appended too, in either order
    tail = "/**:\n  ros__parameters:\n    integration: exact\n    wheels:\n      track_width: 0.412\n"
    for values in ({"limits.max_gap_s": 0.25, "wheels.gear_ratio": 2.0},
                   {"wheels.gear_ratio": 2.0, "limits.max_gap_s": 0.25}):
        updated = update_params_text(tail, values)
        yaml.load(updated, Loader=_NoDuplicatesLoader)
        assert parse_params_text(updated) == {"integration": "exact", "wheels.track_width": 0.412,
                                              "wheels.gear_ratio": 2.0, "limits.max_gap_s": 0.25}
