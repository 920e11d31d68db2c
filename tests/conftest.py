"""Shared fixtures, and the check that the tests run against the installed package."""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pytest
from chip.harness import Firmware

import ladderpack

REPO = Path(__file__).resolve().parent.parent

# Subprocesses (``python -m ladderpack``, often with the clone as working folder) must
# import the package that was installed, not the source tree beside them: Python 3.11's
# safe-path mode leaves the working folder off sys.path (the README's test command
# starts pytest with -P for the same reason).
os.environ["PYTHONSAFEPATH"] = "1"
# No RuntimeWarning may reach a user's terminal from any command: every command the tests
# run in a subprocess (the CLI suite) treats one as an error, so it fails as an internal
# error instead of printing (pytest's own filterwarnings does the same in-process).
os.environ["PYTHONWARNINGS"] = "error::RuntimeWarning"


def pytest_report_header() -> str:
    return f"ladderpack under test: {Path(ladderpack.__file__).parent}"


def pytest_sessionstart(session: pytest.Session) -> None:
    # CI sets LADDERPACK_REQUIRE_INSTALLED: what ships (the wheel, installed) is what is
    # tested, never the source tree through an editable install or the path.
    if os.environ.get("LADDERPACK_REQUIRE_INSTALLED", "") not in ("", "0"):
        where = Path(ladderpack.__file__).resolve().parent
        if where == (REPO / "ladderpack").resolve():
            raise pytest.UsageError(
                f"ladderpack is imported from the source tree ({where}), not from an "
                "installed wheel: install with 'pip install .' (not -e) and run pytest "
                "with 'python -P -m pytest'"
            )


@pytest.fixture
def rng() -> np.random.Generator:
    """Seeded generator for every test that uses noise."""
    return np.random.default_rng(20261201)


@pytest.fixture(scope="session")
def fw2350(tmp_path_factory: pytest.TempPathFactory) -> Firmware:
    """One RP2350 firmware build tree for every test that compiles for that chip (the
    emulator is an RP2040): the vendor SDK's objects are compiled once, each test's
    bundle and main program on top."""
    return Firmware(tmp_path_factory.mktemp("fw2350"), platform="rp2350")
