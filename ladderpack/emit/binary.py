"""The ``.bin`` output: packed FIFO words as little-endian 32-bit integers."""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np

from ladderpack.pack import Packed

__all__ = ["render", "render_chunks"]


def render_chunks(packed: Packed, words_per_chunk: int = 1 << 20) -> Iterator[bytes]:
    """The ``.bin`` content in chunks, for streams too long to copy at once."""
    w = np.asarray(packed.words, dtype="<u4")
    for i in range(0, w.shape[0], words_per_chunk):
        yield w[i : i + words_per_chunk].tobytes()


def render(packed: Packed) -> bytes:
    """Return the words as little-endian bytes, 4 per word, in FIFO order.

    This is the byte order both RP2040 cores and its DMA use, so the file can
    be copied to flash or a filesystem and fed to the FIFO unchanged.
    """
    return np.asarray(packed.words, dtype="<u4").tobytes()
