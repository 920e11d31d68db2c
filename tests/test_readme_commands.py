"""Every command in the README's code blocks runs, in a temporary folder, as documented.

The quick start's two shell commands are what CI runs verbatim (`tests/test_quickstart.py`
checks they are the same); the MicroPython and C blocks run on the emulated chip
(`test_chip_micropython.py::test_readme_micropython_example`,
`test_chip_c.py::test_readme_c_example_runs`). Here: the manifest block is built, the
library block is run, and the complete commands written inline in the text run and exit 0.
"""

from __future__ import annotations

import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parent.parent
README = (REPO / "README.md").read_text()

pytestmark = pytest.mark.slow


def blocks(lang: str) -> list[str]:
    return [m.group(1) for m in re.finditer(rf"```{lang}\n(.*?)```", README, re.S)]


def ladderpack(*args: str, cwd: Path) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "ladderpack", *args], cwd=cwd, capture_output=True, text=True
    )


def test_every_code_block_is_accounted_for() -> None:
    # a new block must get a runner here (or in the chip tests) before it ships
    langs = [m.group(1) for m in re.finditer(r"```(\w*)\n.*?```", README, re.S)]
    assert sorted(langs) == sorted(["sh", "sh", "toml", "python", "c", "python"]), langs
    chip = (REPO / "tests" / "test_chip_micropython.py").read_text()
    assert "def test_readme_micropython_example" in chip
    assert "def test_readme_c_example_runs" in (REPO / "tests" / "test_chip_c.py").read_text()


def test_the_manifest_block_builds(tmp_path: Path) -> None:
    (manifest,) = blocks("toml")
    (tmp_path / "clips").mkdir()
    shutil.copy(REPO / "demo_audio" / "door_chime.flac", tmp_path / "clips")
    (tmp_path / "ladderpack.toml").write_text(manifest)
    res = ladderpack("build", cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    assert (tmp_path / "generated" / "assets.h").exists()
    res = ladderpack("build", "--check", cwd=tmp_path)
    assert res.returncode == 0 and "up to date" in res.stdout, res.stderr


def test_the_library_block_runs(tmp_path: Path) -> None:
    library = next(b for b in blocks("python") if "import ladderpack" in b)
    shutil.copytree(REPO / "demo_audio", tmp_path / "demo_audio")
    res = subprocess.run(
        [sys.executable, "-c", library], cwd=tmp_path, capture_output=True, text=True
    )
    assert res.returncode == 0, res.stderr
    assert (tmp_path / "out" / "door_chime.bin").exists()


#: Complete commands written inline in the README's text (a word in capitals there stands
#: for an argument, so such a span is no command); each must run as the text says.
INLINE = [
    "ladderpack code --volts 1.0",
    "ladderpack --help",
    "clock 48000 --output i2s --find-sys-clock",
]


@pytest.mark.parametrize("command", INLINE)
def test_inline_commands_run(tmp_path: Path, command: str) -> None:
    assert f"`{command}" in README.replace("\n", " ")
    args = command.split()
    if args[0] == "ladderpack":
        args = args[1:]
    res = ladderpack(*args, cwd=tmp_path)
    assert res.returncode == 0, res.stderr


def test_the_make_example_runs(tmp_path: Path) -> None:
    # `make -C examples/make && examples/make/host`, in a copy of the tree
    if shutil.which("make") is None or shutil.which("cc") is None:
        pytest.fail("make and cc are needed; .ci/run installs them")
    assert "`make -C examples/make && examples/make/host`" in README
    shutil.copytree(REPO / "examples", tmp_path / "examples")
    shutil.copytree(REPO / "demo_audio", tmp_path / "demo_audio")
    bindir = str(Path(sys.executable).parent)
    env = {"PATH": f"{bindir}:/usr/bin:/bin", "LADDERPACK": f"{sys.executable} -m ladderpack"}
    import os

    res = subprocess.run(
        ["make", "-C", "examples/make"], cwd=tmp_path, capture_output=True, text=True,
        env={**os.environ, **env},
    )  # fmt: skip
    assert res.returncode == 0, res.stdout + res.stderr
    host = subprocess.run(
        [str(tmp_path / "examples" / "make" / "host")], capture_output=True, text=True
    )
    assert host.returncode == 0 and "door_chime" in host.stdout
