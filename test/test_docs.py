"""The documentation agrees with the tool: links resolve, shown commands parse, the parameter reference is generated."""
from __future__ import annotations

import re
import shlex
import subprocess
import sys
from pathlib import Path

import pytest

from wheel_dr.cli import build_parser
from wheel_dr.core import Settings
from wheel_dr.params import load_settings
from wheel_dr.safety import SAFETY_TEXT

ROOT = Path(__file__).resolve().parents[1]
README = ROOT / "README.md"
DOCS = sorted((ROOT / "docs").glob("*.md"))
LINK = re.compile(r"\]\(([^)\s]+)\)")
FENCE = re.compile(r"^```[a-z]*\n(.*?)^```", re.S | re.M)


def _local_links(path: Path) -> list[tuple[str, Path, str]]:
    """(link text, resolved file, anchor) for every relative link of a Markdown file."""
    out = []
    for target in LINK.findall(path.read_text(encoding="utf-8")):
        if re.match(r"[a-z]+:", target):            # http:, mailto:: none expected, none checked
            continue
        file_part, _, anchor = target.partition("#")
        resolved = (path.parent / file_part).resolve() if file_part else path
        out.append((target, resolved, anchor))
    return out


def _anchors(path: Path) -> set[str]:
    """Heading anchors as GitHub-flavoured Markdown makes them (common practice: lower case, punctuation
    dropped, spaces to hyphens)."""
    text = FENCE.sub("", path.read_text(encoding="utf-8"))
    found = set()
    for heading in re.findall(r"^#+ (.+)$", text, re.M):
        slug = re.sub(r"[^\w\- ]", "", heading.strip().lower()).replace(" ", "-")
        found.add(slug)
    return found


def _shown_commands(path: Path) -> list[str]:
    lines = []
    for block in FENCE.findall(path.read_text(encoding="utf-8")):
        for line in block.splitlines():
            line = line.split(" #")[0].strip()
            if line:
                lines.extend(part.strip() for part in line.split("&&"))
    return lines


def test_readme_is_a_short_landing_page():
    assert len(README.read_text(encoding="utf-8").splitlines()) <= 200


@pytest.mark.parametrize("doc", [README, *DOCS], ids=lambda p: p.name)
def test_every_linked_file_and_heading_exists(doc):
    links = _local_links(doc)
    assert links or doc != README
    for target, resolved, anchor in links:
        assert resolved.exists(), f"{doc.name} links to {target}, which does not exist"
        if anchor and resolved.suffix == ".md":
            assert anchor in _anchors(resolved), f"{doc.name} links to {target}: no such heading"


def test_readme_links_every_docs_page():
    linked = {resolved for _, resolved, _ in _local_links(README)}
    for doc in DOCS:
        assert doc.resolve() in linked, f"README.md does not link to docs/{doc.name}"


def test_every_command_the_readme_shows_parses():
    commands = _shown_commands(README)
    subcommands = set()
    parser = build_parser()
    makefile = (ROOT / "Makefile").read_text(encoding="utf-8")
    for line in commands:
        words = shlex.split(line)
        if words[0] == "wheel-dr":
            build_parser(words[1]).parse_args(words[1:])          # argparse exits (SystemExit) on anything it rejects
            subcommands.add(words[1])
        elif words[0] == "make":
            for target in words[1:]:
                assert re.search(rf"^{re.escape(target)}:", makefile, re.M), f"no make target {target}"
        elif words[0] == ".":
            assert (ROOT / words[1]).is_file()
        elif words[0].endswith("wheel_dr_node"):
            params = words[words.index("--params-file") + 1]
            load_settings(ROOT / params)
        else:
            pytest.fail(f"README.md shows a command this test does not know how to check: {line}")
    assert {"synth", "replay", "compare", "demo", "calibrate"} <= subcommands
    for sub in sorted(subcommands):
        result = subprocess.run([sys.executable, "-m", "wheel_dr.cli", sub, "--help"], capture_output=True,
                                text=True, timeout=120)
        assert result.returncode == 0 and "usage:" in result.stdout, (sub, result.stderr)


def test_the_readme_tour_runs_as_shown(tmp_path):
    """The tour's `wheel-dr` commands (all but the demo, which `make demo` covers) run one after the
    other, as shown, in a fresh directory holding the shipped config/, and each exits 0 with its
    outputs written: a real run of what a newcomer would type."""
    (tmp_path / "config").symlink_to(ROOT / "config", target_is_directory=True)
    lines = [shlex.split(line) for line in _shown_commands(README)]
    tour = [w for w in lines if w[0] == "wheel-dr" and w[1] not in ("demo",)]
    assert [w[1] for w in tour][:3] == ["synth", "replay", "compare"]
    for words in tour:
        result = subprocess.run([sys.executable, "-m", "wheel_dr.cli", *words[1:]], cwd=tmp_path,
                                capture_output=True, text=True, timeout=600)
        assert result.returncode == 0, (words, result.stderr[-2000:])
    for made in ("out/replay/trajectory.csv", "out/compare/index.html", "out/tuned.yaml"):
        assert (tmp_path / made).is_file(), made


def test_node_help_runs():
    result = subprocess.run([sys.executable, "-m", "wheel_dr.ros.node", "--help"], capture_output=True, text=True,
                            timeout=120)
    assert result.returncode == 0, result.stderr
    assert SAFETY_TEXT.split(".")[0] in result.stdout


def test_readme_carries_the_one_safety_text():
    text = README.read_text(encoding="utf-8")
    quoted = " ".join(line.lstrip("> ").strip() for line in text.splitlines() if line.startswith(">"))
    assert SAFETY_TEXT in quoted.replace("**Safety.** ", "")


def test_parameter_reference_is_generated_from_the_schema():
    result = subprocess.run([sys.executable, str(ROOT / "tools" / "param_reference.py"), "--check"],
                            capture_output=True, text=True)
    assert result.returncode == 0, result.stderr


def test_every_parameter_is_in_the_reference_table_once():
    text = (ROOT / "docs" / "parameters.md").read_text(encoding="utf-8")
    for spec in Settings.specs():
        assert text.count(f"| `{spec.name}` |") == 1, spec.name
    for doc in DOCS:                               # no hand-written copy of the table elsewhere
        if doc.name != "parameters.md":
            assert "| parameter | default |" not in doc.read_text(encoding="utf-8"), doc.name


def test_every_shipped_parameters_file_loads():
    files = sorted((ROOT / "config").glob("*.yaml"))
    assert files, "config/ holds no parameters file"
    for path in files:
        load_settings(path)  # raises SettingsError with the key, value and range if not
