"""Shared fixtures."""

from __future__ import annotations

import numpy as np
import pytest

from tests.chip.harness import Firmware


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
