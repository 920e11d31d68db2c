"""What ships is what is tested: the wheel and sdist hold every module of the package.

The wheel is built here with pip (PyPA's build front end, from the package registry) from
the source tree, or taken from ``LADDERPACK_WHEEL`` / ``LADDERPACK_SDIST`` when CI built
them with ``python -m build``; both are plain zip and tar archives (PEP 427, PEP 625),
read with the standard library.
"""

from __future__ import annotations

import os
import subprocess
import sys
import tarfile
import zipfile
from pathlib import Path

import pytest

import ladderpack

REPO = Path(__file__).resolve().parent.parent
PKG = REPO / "ladderpack"


def _shipped(root: Path) -> set[Path]:
    """The files a package tree must ship: its modules and its templates."""
    return {*root.rglob("*.py"), *(p for p in (root / "templates").glob("*") if p.is_file())}


def source_modules() -> set[str]:
    """Every module and template of the package in the source tree, relative to the
    repository."""
    return {p.relative_to(REPO).as_posix() for p in _shipped(PKG)}


@pytest.fixture(scope="module")
def wheel(tmp_path_factory: pytest.TempPathFactory) -> Path:
    given = os.environ.get("LADDERPACK_WHEEL")
    if given:
        return Path(given)
    out = tmp_path_factory.mktemp("wheel")
    done = subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "--no-deps", "-q",
         "-w", str(out), str(REPO)],
        capture_output=True, text=True,
    )  # fmt: skip
    if done.returncode != 0:
        pytest.fail(f"pip wheel failed: {done.stderr[-2000:]}")
    (found,) = out.glob("ladderpack-*.whl")
    return found


def test_every_module_is_in_the_wheel(wheel: Path) -> None:
    with zipfile.ZipFile(wheel) as z:
        names = set(z.namelist())
    missing = sorted(source_modules() - names)
    assert not missing, f"modules missing from {wheel.name}: {missing}"
    assert any(n.endswith("entry_points.txt") for n in names)


def test_every_module_is_in_the_sdist() -> None:
    given = os.environ.get("LADDERPACK_SDIST")
    if not given:
        pytest.skip("LADDERPACK_SDIST names no sdist (CI builds one with python -m build)")
    with tarfile.open(given) as t:
        names = {n.split("/", 1)[1] for n in t.getnames() if "/" in n}
    assert not sorted(source_modules() - names)


def test_the_installed_package_has_every_module() -> None:
    where = Path(ladderpack.__file__).resolve().parent
    if where == PKG.resolve():
        pytest.skip("ladderpack runs from the source tree here (an editable install)")
    installed = {"ladderpack/" + p.relative_to(where).as_posix() for p in _shipped(where)}
    assert not sorted(source_modules() - installed)
