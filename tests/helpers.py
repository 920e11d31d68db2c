"""Small builders shared by the emitter and CLI tests."""

from __future__ import annotations

import shutil

import numpy as np
import pytest

from ladderpack.audio import Signal
from ladderpack.bundle import StreamAsset
from ladderpack.pipeline import stream_signal


def small_asset(
    bits: int = 8,
    *,
    shift: str = "right",
    name: str = "test tone",
    seconds: float = 0.02,
    **options: object,
) -> StreamAsset:
    """A short 1 kHz stream, quick to build and compile."""
    t = np.arange(int(48000 * seconds)) / 48000
    sig = Signal(np.sin(2 * np.pi * 1000 * t), 48000.0)
    return stream_signal(
        sig,
        name=name,
        bits=bits,
        shift=shift,
        ramp_ms=2.0,
        source={"file": "unit-test sine"},
        **options,
    )  # type: ignore[arg-type]


def require_tool(name: str) -> str:
    """Path of an external program the test needs; fail (not skip) when it is missing.

    .ci/run installs every tool, so a missing one is a broken environment.
    """
    path = shutil.which(name)
    if path is None:
        pytest.fail(f"{name} is not installed; .ci/run installs it")
    return path
