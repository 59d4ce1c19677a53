"""The README's parameter reference and the shipped parameters files agree with the settings schema."""
from __future__ import annotations

import subprocess
import sys
from pathlib import Path

from wheel_dr.core import Settings
from wheel_dr.params import load_settings

ROOT = Path(__file__).resolve().parents[1]


def test_readme_parameter_reference_is_generated_from_the_schema():
    result = subprocess.run([sys.executable, str(ROOT / "tools" / "param_reference.py"), "--check"],
                            capture_output=True, text=True)
    assert result.returncode == 0, result.stderr


def test_every_parameter_is_in_the_readme_table():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    for spec in Settings.specs():
        assert f"| `{spec.name}` |" in text, spec.name


def test_every_shipped_parameters_file_loads():
    files = sorted((ROOT / "config").glob("*.yaml"))
    assert files, "config/ holds no parameters file"
    for path in files:
        load_settings(path)  # raises SettingsError with the key, value and range if not
