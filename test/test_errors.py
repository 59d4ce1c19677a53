"""Error types live in one module (wheel_dr.core.errors), all derive from WheelDrError, and the old
import paths still name the same classes."""
from __future__ import annotations

import ast
import importlib
from pathlib import Path

import wheel_dr
from wheel_dr.core import errors

PACKAGE = Path(wheel_dr.__file__).resolve().parent


def test_no_exception_class_is_defined_outside_the_errors_module() -> None:
    found = []
    for path in PACKAGE.rglob("*.py"):
        if path == PACKAGE / "core" / "errors.py":
            continue
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ClassDef):
                bases = [ast.unparse(b) for b in node.bases]
                if node.name.endswith("Error") or any(b.endswith(("Error", "Exception")) for b in bases):
                    found.append(f"{path.relative_to(PACKAGE)}: {node.name}")
    assert not found, found


def test_every_error_derives_from_wheel_dr_error_and_old_names_still_import() -> None:
    for name in errors.__all__:
        assert issubclass(getattr(errors, name), errors.WheelDrError), name
    old_homes = {"wheel_dr.cli": ["UsageError"], "wheel_dr.bags.reader": ["BagError"],
                 "wheel_dr.analysis.calibration": ["CalibrationError", "TruthError", "ExcitationError"],
                 "wheel_dr.analysis.umbmark": ["SquareTestError"], "wheel_dr.ros.env": ["RosWorkspaceMissingError"]}
    for module, names in old_homes.items():
        mod = importlib.import_module(module)
        for name in names:
            assert getattr(mod, name) is getattr(errors, name), f"{module}.{name}"
    assert issubclass(errors.RosWorkspaceMissingError, FileNotFoundError)   # callers catching that still do
