"""The ``.bin`` output: packed FIFO words as little-endian 32-bit integers."""

from __future__ import annotations

import numpy as np

from ladderpack.pack import Packed

__all__ = ["render"]


def render(packed: Packed) -> bytes:
    """Return the words as little-endian bytes, 4 per word, in FIFO order.

    This is the byte order both RP2040 cores and its DMA use, so the file can
    be copied to flash or a filesystem and fed to the FIFO unchanged.
    """
    return np.asarray(packed.words, dtype="<u4").tobytes()
