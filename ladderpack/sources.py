"""Mono sample sources read in blocks: a sound file, or a signal already in memory.

The stream stage reads its input in several passes (the mean, the peak, the
samples); a source hands out the same mono blocks each time.  A clip read in one
block is read from the file once and kept.
"""

from __future__ import annotations

import math
import os
from collections.abc import Iterator
from typing import Any

import numpy as np

from ladderpack.audio import Signal, check_signal, load_clip
from ladderpack.conform import MEAN_CHUNK
from ladderpack.errors import AudioFileError, OptionError

__all__ = [
    "BLOCK_FRAMES",
    "BLOCK_THRESHOLD",
    "ArraySource",
    "FileSource",
    "MonoSource",
]

#: Clips with more samples (frames x channels) than this are processed in blocks.
BLOCK_THRESHOLD = 1 << 23

#: Frames per block for long clips.
BLOCK_FRAMES = 1 << 16


#: Containers and encodings whose samples are read by copying (no decoder to run twice).
_RAW_FORMATS = frozenset({"WAV", "WAVEX", "RF64", "W64", "AIFF", "CAF", "RAW"})
_RAW_SUBTYPES = frozenset({"PCM_U8", "PCM_S8", "PCM_16", "PCM_24", "PCM_32", "FLOAT", "DOUBLE"})


class MonoSource:
    """Mono float64 samples at ``rate_hz``, ``frames`` long, in blocks on demand."""

    rate_hz: float
    frames: int
    channels: int

    def blocks(self, block_frames: int) -> Iterator[np.ndarray]:
        """The samples in blocks of `block_frames` (the last one shorter)."""
        raise NotImplementedError  # pragma: no cover - abstract

    def whole(self) -> np.ndarray:
        """All samples at once."""
        return np.concatenate(list(self.blocks(self.frames)))

    def mean(self, block_frames: int) -> float:
        """The mean, computed exactly as :func:`ladderpack.conform.chunked_mean` does.

        Partial sums over fixed :data:`~ladderpack.conform.MEAN_CHUNK` chunks are
        added with ``math.fsum``, so any block size gives the same bits.
        """
        parts: list[float] = []
        carry = np.zeros(0)
        for mono in self.blocks(block_frames):
            carry = np.concatenate([carry, mono]) if carry.size else mono
            whole = carry.size - carry.size % MEAN_CHUNK
            parts.extend(
                float(np.sum(carry[i : i + MEAN_CHUNK])) for i in range(0, whole, MEAN_CHUNK)
            )
            carry = carry[whole:]
        if carry.size:
            parts.append(float(np.sum(carry)))
        return math.fsum(parts) / self.frames


class ArraySource(MonoSource):
    """A mono :class:`~ladderpack.audio.Signal` already in memory."""

    def __init__(self, sig: Signal) -> None:
        check_signal(sig)
        self.samples = np.asarray(sig.samples, dtype=np.float64)
        self.rate_hz = float(sig.rate_hz)
        self.frames = int(self.samples.shape[0])
        self.channels = 1

    def blocks(self, block_frames: int) -> Iterator[np.ndarray]:
        """Views of the samples, `block_frames` at a time."""
        for i in range(0, self.frames, block_frames):
            yield self.samples[i : i + block_frames]


class FileSource(MonoSource):
    """A sound file mixed to mono (or one channel of it), read in blocks.

    Parameters
    ----------
    path : str or path-like
        WAV, FLAC, OGG or AIFF file.
    channel : int, optional
        0-based channel to use; default the mean of all channels.

    Raises
    ------
    AudioFileError, OptionError, SignalError
        For a missing or unreadable file, a channel it does not have, or no samples.
    """

    def __init__(self, path: str | os.PathLike[str], *, channel: int | None = None) -> None:
        import soundfile

        self.path = os.fspath(path)
        self.channel = channel
        load_clip(self.path, channel=channel, frames=1)  # checks the file and the channel
        info = soundfile.info(self.path)
        self.rate_hz = float(info.samplerate)
        self.frames = int(info.frames)
        self.channels = int(info.channels)
        if self.frames < 1:
            raise OptionError(
                "expected at least 1 sample frame(s), got 0", file=self.path, field="samples"
            )
        self._whole: np.ndarray | None = None
        self._spill: Any = None
        self._spill_block = 0
        self._subtype = info.subtype
        self._raw_pcm = info.format in _RAW_FORMATS and info.subtype in _RAW_SUBTYPES

    def blocks(self, block_frames: int) -> Iterator[np.ndarray]:
        """Mono blocks of `block_frames` frames, each checked to be finite.

        A compressed clip (FLAC, Ogg, ...) read in several blocks is decoded once: the
        mono samples go to a temporary file as they are read, and later passes with
        the same block size read them back from there (:meth:`close` removes it).
        Uncompressed PCM is simply read again.
        """
        if block_frames >= self.frames:
            if self._whole is None:
                self._whole = load_clip(self.path, channel=self.channel).samples
            yield self._whole
            return
        if self._raw_pcm:  # decoding is a copy: cheaper than keeping a float64 copy
            yield from self._decode(block_frames)
            return
        if self._spill is not None and self._spill_block == block_frames:
            self._spill.seek(0)
            for i in range(0, self.frames, block_frames):
                yield np.fromfile(
                    self._spill, dtype=np.float64, count=min(block_frames, self.frames - i)
                )
            return
        import tempfile

        spill = tempfile.TemporaryFile(prefix="ladderpack-")  # noqa: SIM115 - kept for later passes
        try:
            for mono in self._decode(block_frames):
                mono.tofile(spill)
                yield mono
        except BaseException:
            spill.close()
            raise
        self.close()
        self._spill, self._spill_block = spill, block_frames

    def _decode(self, block_frames: int) -> Iterator[np.ndarray]:
        """Mono blocks decoded from the file (a read error names the file)."""
        try:
            yield from self._decode_blocks(block_frames)
        except OSError as exc:  # a failing disk or device mid-clip
            raise AudioFileError(
                f"cannot read it ({exc.strerror or exc})", file=self.path
            ) from None

    def _decode_blocks(self, block_frames: int) -> Iterator[np.ndarray]:
        import soundfile

        pcm16 = self._subtype == "PCM_16"
        for block in soundfile.blocks(
            self.path,
            blocksize=block_frames,
            dtype="int16" if pcm16 else "float64",
            always_2d=True,
        ):
            if pcm16:
                # The integer sum is exact; scaled by 1 / 32768 (exact) and divided by the
                # channel count it is the float path's value to the bit (libsndfile reads
                # PCM_16 as x / 32768), at a quarter of the memory traffic.
                if self.channel is None:
                    isum = block[:, 0].astype(np.int32)
                    for ch in range(1, block.shape[1]):
                        isum += block[:, ch]
                    total = isum.astype(np.float64)
                    total *= 1.0 / 32768.0
                    total /= block.shape[1]
                    yield total
                else:
                    yield block[:, self.channel].astype(np.float64) * (1.0 / 32768.0)
                continue
            if not np.all(np.isfinite(block)):
                raise OptionError("samples must be finite", file=self.path, field="samples")
            if self.channel is None:
                mono = block[:, 0].copy()
                for ch in range(1, block.shape[1]):
                    mono += block[:, ch]
                mono /= block.shape[1]
            else:
                mono = block[:, self.channel].copy()
            yield mono

    def close(self) -> None:
        """Remove the temporary copy of the mono samples, if any."""
        if self._spill is not None:
            self._spill.close()
            self._spill = None
