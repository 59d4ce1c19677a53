"""Reading and writing the ROS 2 parameters file that the node, the analyser and calibration share.

The file is the one the node takes with ``--ros-args --params-file FILE``::

    /**:                      # or the node's name, e.g. wheel_dr_node
      ros__parameters:
        wheels:
          track_width: 0.412
        integration: exact

Nested keys are flattened to wheel_dr's dotted names (``wheels.track_width``).
"""
from __future__ import annotations

import os
import re
from pathlib import Path
from typing import Any, Mapping

import yaml

from .core.errors import SettingsError
from .core.settings import Settings
from .fileio import atomic_write_text  # re-exported: parameters files are written with it

__all__ = ["NODE_NAME", "load_settings", "parse_params_text", "flatten", "write_params_text",
           "update_params_text", "atomic_write_text"]

NODE_NAME = "wheel_dr_node"


class _ParamsLoader(yaml.SafeLoader):
    """SafeLoader that reads numbers as ROS 2 does: ``2e-05`` and ``1E3`` are floats, not strings
    (YAML 1.1, which PyYAML follows, demands a dot in a float)."""


_ParamsLoader.add_implicit_resolver(
    "tag:yaml.org,2002:float",
    re.compile(r"""^(?:[-+]?(?:[0-9][0-9_]*)\.[0-9_]*(?:[eE][-+]?[0-9]+)?
                 |[-+]?(?:[0-9][0-9_]*)(?:[eE][-+]?[0-9]+)
                 |\.[0-9_]+(?:[eE][-+]?[0-9]+)?
                 |[-+]?\.(?:inf|Inf|INF)
                 |\.(?:nan|NaN|NAN))$""", re.X),
    list("-+0123456789."))


def flatten(tree: Mapping[str, Any], prefix: str = "") -> dict[str, Any]:
    """Nested mapping -> dotted names."""
    out: dict[str, Any] = {}
    for key, value in tree.items():
        name = f"{prefix}{key}"
        if isinstance(value, Mapping):
            out.update(flatten(value, name + "."))
        else:
            out[name] = value
    return out


def parse_params_text(text: str, source: str = "parameters file",
                      node_name: str = NODE_NAME) -> dict[str, Any]:
    """Dotted-name values for ``node_name`` from the text of a ROS 2 parameters file.

    Sections for ``/**`` apply first, then those for the node's own name (with or without a
    leading slash or namespace), as ROS 2 applies them.
    """
    try:
        doc = yaml.load(text, Loader=_ParamsLoader)  # noqa: S506 (a SafeLoader)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}" if mark is not None else ""
        raise SettingsError(f"{source} is not valid YAML{where}; fix its syntax.") from None
    if doc is None:
        return {}
    if not isinstance(doc, Mapping):
        raise SettingsError(f"{source} must be a mapping with a node name or '/**' at the top; "
                            "see config/wheel_dr.yaml for the layout.")
    values: dict[str, Any] = {}
    matched = False
    for key in sorted(doc, key=lambda k: 0 if k == "/**" else 1):
        name = str(key).rstrip("/").split("/")[-1]
        if key != "/**" and name != node_name:
            continue
        body = doc[key]
        if not isinstance(body, Mapping) or "ros__parameters" not in body:
            raise SettingsError(f"{source}: section '{key}' has no 'ros__parameters' mapping; put the "
                                "parameters under '{key}: ros__parameters:'.")
        params = body["ros__parameters"] or {}
        if not isinstance(params, Mapping):
            raise SettingsError(f"{source}: '{key}.ros__parameters' must be a mapping of parameters.")
        values.update(flatten(params))
        matched = True
    if not matched:
        raise SettingsError(f"{source} has no section for '/**' or '{node_name}'; put the parameters under "
                            "'/**: ros__parameters:'.")
    values.pop("use_sim_time", None)
    return values


def load_settings(path: str | os.PathLike | None, node_name: str = NODE_NAME,
                  base: Settings | None = None) -> Settings:
    """Validated Settings from a parameters file (defaults when ``path`` is None)."""
    if path is None:
        return base or Settings()
    p = Path(path)
    if p.exists() and not p.is_file():
        raise SettingsError(f"parameters file '{p}' is not a regular file (a directory, pipe or device); give the "
                            "path of a YAML file such as config/wheel_dr.yaml.")
    if not p.is_file():
        raise SettingsError(f"parameters file '{p}' does not exist; give the path of a YAML file such as "
                            "config/wheel_dr.yaml.")
    try:
        text = p.read_text(encoding="utf-8")
    except UnicodeDecodeError:
        raise SettingsError(f"parameters file '{p}' is not UTF-8 text; give a YAML file such as "
                            "config/wheel_dr.yaml.") from None
    except OSError:
        raise SettingsError(f"parameters file '{p}' cannot be read; check the path and its permissions.") from None
    return Settings.from_flat(parse_params_text(text, f"parameters file '{p}'", node_name), base=base)


def _nest(flat: Mapping[str, Any]) -> dict[str, Any]:
    tree: dict[str, Any] = {}
    for name, value in flat.items():
        node = tree
        parts = name.split(".")
        for part in parts[:-1]:
            node = node.setdefault(part, {})
        node[parts[-1]] = list(value) if isinstance(value, tuple) else value
    return tree


def write_params_text(settings: Settings, header: str = "", node_key: str = "/**") -> str:
    """A complete parameters file for ``settings`` (every parameter), with an optional comment header."""
    body = yaml.safe_dump({node_key: {"ros__parameters": _nest(settings.to_flat())}}, sort_keys=False,
                          default_flow_style=None)
    lines = [f"# {line}".rstrip() for line in header.splitlines()] if header else []
    return "\n".join(lines + [body])


_SCALAR = re.compile(r"^(?P<indent>\s*)(?P<key>[A-Za-z0-9_]+):(?P<sp>\s*)(?P<value>[^#\n]*?)(?P<tail>\s*#.*)?$")


def update_params_text(text: str, values: Mapping[str, Any], header: str = "") -> str:
    """The parameters file ``text`` with only the given dotted names' values replaced.

    Comments, order and everything else are kept; a name absent from the file goes at the end of
    its section when the file has that section (a second mapping of the same name would make YAML
    drop one of them), otherwise it is appended under the last ``ros__parameters`` block.
    ``header`` (plain text) becomes a comment block on top.
    """
    lines = text.splitlines()
    stack: list[tuple[int, str]] = []
    done: set[str] = set()
    params_indent: int | None = None
    sections: dict[str, tuple[int, int]] = {}  # dotted name of a mapping -> (line index, indent)
    for i, line in enumerate(lines):
        if not line.strip() or line.lstrip().startswith("#"):
            continue
        m = _SCALAR.match(line)
        if not m:
            continue
        indent = len(m.group("indent"))
        while stack and stack[-1][0] >= indent:
            stack.pop()
        key = m.group("key")
        if key == "ros__parameters":
            params_indent = indent
            stack = [(indent, key)]
            continue
        if params_indent is None or not stack or stack[0][1] != "ros__parameters":
            continue
        dotted = ".".join([k for _, k in stack[1:]] + [key])
        if m.group("value").strip() == "":
            stack.append((indent, key))
            sections[dotted] = (i, indent)
            continue
        if dotted in values:
            new = _flow(values[dotted])
            lines[i] = f"{m.group('indent')}{key}:{m.group('sp') or ' '}{new}{m.group('tail') or ''}"
            done.add(dotted)
    missing = {k: v for k, v in values.items() if k not in done}
    if missing:
        if params_indent is None:
            raise SettingsError("the parameters file has no 'ros__parameters' block to update; start from "
                                "config/wheel_dr.yaml.")
        by_section: dict[str, dict[str, Any]] = {}
        for name, value in missing.items():
            parts = name.split(".")
            owner = next((".".join(parts[:n]) for n in range(len(parts) - 1, 0, -1)
                          if ".".join(parts[:n]) in sections), "")
            by_section.setdefault(owner, {})[name[len(owner) + 1:] if owner else name] = value
        inserts: list[tuple[int, int, list[str]]] = []  # (line index, 1 for new sections, lines)
        for owner, sub in by_section.items():
            extra = _tree_lines(_nest({k: _plain(v) for k, v in sub.items()}))
            if not owner:
                inserts.append((len(lines), 1, [" " * (params_indent + 2) + ln for ln in extra]))
                continue
            at, indent = sections[owner]
            end, child = at, indent + 2
            for j in range(at + 1, len(lines)):
                body = lines[j].strip()
                if not body or body.startswith("#"):
                    continue
                depth = len(lines[j]) - len(lines[j].lstrip())
                if depth <= indent:
                    break
                child = depth if end == at else child
                end = j
            inserts.append((end + 1, 0, [" " * child + ln for ln in extra]))
        # bottom up, so earlier indices stay valid; at one index new sections go after section ends
        for at, _, new_lines in sorted(inserts, key=lambda item: item[:2], reverse=True):
            lines[at:at] = new_lines
    head = [f"# {ln}".rstrip() for ln in header.splitlines()] if header else []
    return "\n".join(head + lines) + "\n"


def _flow(value: Any) -> str:
    """One value as YAML flow text (``0.4``, ``[0.1, 0.2]``, ``exact``)."""
    return yaml.safe_dump(_plain(value), default_flow_style=True).strip().removesuffix("...").strip()


def _tree_lines(tree: Mapping[str, Any]) -> list[str]:
    """Lines of a nested mapping in the parameters file's style (block mappings, flow lists)."""
    out: list[str] = []
    for key, value in tree.items():
        if isinstance(value, Mapping):
            out += yaml.safe_dump({key: value}, sort_keys=False, default_flow_style=None).splitlines()
        else:
            out.append(f"{key}: {_flow(value)}")
    return out


def _plain(value: Any) -> Any:
    if isinstance(value, tuple):
        return [_plain(v) for v in value]
    if hasattr(value, "item"):
        return value.item()
    return value
