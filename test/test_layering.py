"""The package layers import downwards only: core < sim, bags, analysis, params < demo, report < commands.

Each package is imported alone in a fresh interpreter and ``sys.modules`` is checked for the
wheel_dr packages it must not pull in (the same method as the core's purity test). Layering of
this kind is common practice: a lower layer never knows the layers built on it, which keeps the
estimator core testable without bags, and the bag code usable without the simulator.
"""
from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]

COMMANDS = ("wheel_dr.cli", "wheel_dr.calibrate_cmd", "wheel_dr.runs", "wheel_dr.ros", "wheel_dr.fleet")
# package (or module) -> wheel_dr packages it must not import
FORBIDDEN = {
    "wheel_dr.core": ("wheel_dr.sim", "wheel_dr.bags", "wheel_dr.analysis", "wheel_dr.params", "wheel_dr.demo",
                      "wheel_dr.report", "wheel_dr.fileio") + COMMANDS,
    "wheel_dr.demo.quokka": ("wheel_dr.core", "wheel_dr.sim", "wheel_dr.bags", "wheel_dr.analysis",
                             "wheel_dr.params", "wheel_dr.report") + COMMANDS,
    "wheel_dr.sim": ("wheel_dr.bags", "wheel_dr.analysis", "wheel_dr.params", "wheel_dr.report",
                     "wheel_dr.demo.scenarios") + COMMANDS,
    "wheel_dr.bags": ("wheel_dr.sim", "wheel_dr.analysis", "wheel_dr.params", "wheel_dr.demo",
                      "wheel_dr.report") + COMMANDS,
    "wheel_dr.analysis": ("wheel_dr.sim", "wheel_dr.bags", "wheel_dr.params", "wheel_dr.demo",
                          "wheel_dr.report") + COMMANDS,
    "wheel_dr.params": ("wheel_dr.sim", "wheel_dr.bags", "wheel_dr.analysis", "wheel_dr.demo",
                        "wheel_dr.report") + COMMANDS,
    "wheel_dr.demo.scenarios": ("wheel_dr.bags", "wheel_dr.analysis", "wheel_dr.params",
                                "wheel_dr.report") + COMMANDS,
    "wheel_dr.report": ("wheel_dr.sim", "wheel_dr.bags", "wheel_dr.params", "wheel_dr.demo") + COMMANDS,
}


def _imported(module: str) -> list[str]:
    code = f"import sys, json; import {module}; print(json.dumps(sorted(sys.modules)))"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, cwd=REPO)
    return json.loads(out.stdout)


@pytest.mark.parametrize("module", sorted(FORBIDDEN))
def test_layer_imports_point_down(module: str) -> None:
    """Importing ``module`` loads none of the layers above it or beside it."""
    modules = _imported(module)
    bad = [m for m in modules if any(m == b or m.startswith(b + ".") for b in FORBIDDEN[module])]
    assert not bad, f"{module} imports {bad}"
    assert module in modules
