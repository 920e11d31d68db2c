"""The README's quick start stays true: its test command is the one CI runs."""

from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_ci_runs_the_readme_test_command() -> None:
    readme = (ROOT / "README.md").read_text()
    m = re.search(r"runs\s+the\s+test\s+suite[^`]*?with\s+`([^`]+)`", readme)
    assert m is not None
    ci = (ROOT / ".ci" / "run").read_text().strip().splitlines()
    assert ci[-1] == m.group(1)


def test_quick_start_installs_into_a_virtual_environment() -> None:
    # PEP 668: a Debian or Ubuntu Python refuses pip outside a virtual environment.
    readme = (ROOT / "README.md").read_text()
    first = re.search(r"## Quick start.*?```sh\n(.+?)\n```", readme, re.S)
    assert first is not None
    cmd = first.group(1)
    assert cmd.startswith("python3 -m venv ") and "--python .venv/bin/python install ." in cmd
    assert cmd.endswith(".venv/bin/ladderpack demo demo_out")


def test_ci_runs_the_readme_first_command_and_tests_the_installed_wheel() -> None:
    readme = (ROOT / "README.md").read_text()
    first = re.search(r"## Quick start.*?```sh\n(.+?)\n```", readme, re.S)
    assert first is not None
    ci = (ROOT / ".ci" / "run").read_text().splitlines()
    assert first.group(1) in ci
    # not editable, the source tree off the path, the installed package required
    assert " -e " not in ci[-1] and " -P -m pytest" in ci[-1]
    assert "export LADDERPACK_REQUIRE_INSTALLED=1" in ci
