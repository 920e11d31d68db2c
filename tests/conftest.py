"""Shared fixtures."""

from __future__ import annotations

import shutil

import numpy as np
import pytest


@pytest.fixture
def rng() -> np.random.Generator:
    """Seeded generator for every test that uses noise."""
    return np.random.default_rng(20261201)


def require_tool(name: str) -> str:
    """Path of an external program the test needs; fail (not skip) when it is missing.

    .ci/run installs every tool, so a missing one is a broken environment.
    """
    path = shutil.which(name)
    if path is None:
        pytest.fail(f"{name} is not installed; .ci/run installs it")
    return path
