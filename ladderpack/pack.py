"""Packing codes into 32-bit TX FIFO words.

The state machine's ``out pins, N`` takes N bits from the output shift
register (OSR) per sample.  With ``OUT_SHIFTDIR`` = right it takes the OSR's
least significant bits first, with left its most significant bits first
(RP2040 datasheet, "OUT" instruction and "Autopull" sections).  Autopull
refills the OSR once ``PULL_THRESH`` bits have been shifted out, so a word
carries ``floor(32 / N)`` whole samples and any bits left over are padding
that the refill discards.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator
from dataclasses import dataclass

import numpy as np

from ladderpack.errors import OptionError
from ladderpack.quantize import Codes, check_bits

__all__ = ["Packed", "StereoLadderLayout", "WordLayout", "pack", "pack_blocks", "unpack"]


@dataclass(frozen=True)
class WordLayout:
    """How codes sit in a 32-bit FIFO word.

    Attributes
    ----------
    bits : int
        Code width N.
    shift_right : bool
        True (default) for ``OUT_SHIFTDIR`` = right: the first sample of a
        word is in its least significant bits.  False: in its most
        significant bits.
    per_word : int, optional
        Samples per word, 1..floor(32 / bits); default as many as fit.
    msb_high : bool
        True (default) when the ladder's most significant bit is on the
        highest GPIO (ladder bit k on GPIO ``out_base + k``).  False when it
        is on the lowest: the bits of every code are reversed at pack time.
    invert : bool
        Invert every bit (for an inverting buffer between pins and ladder).
    """

    bits: int
    shift_right: bool = True
    per_word: int | None = None
    msb_high: bool = True
    invert: bool = False

    def __post_init__(self) -> None:
        self._check_width()
        most = 32 // self.bits
        if self.per_word is not None and (
            isinstance(self.per_word, bool)
            or not isinstance(self.per_word, int)
            or not 1 <= self.per_word <= most
        ):
            raise OptionError(
                f"must be 1..{most} for {self.bits}-bit samples, got {self.per_word!r}",
                field="samples_per_word",
            )

    def _check_width(self) -> None:
        check_bits(self.bits)

    @property
    def samples_per_word(self) -> int:
        """Samples per word (default ``floor(32 / bits)``)."""
        return self.per_word if self.per_word is not None else 32 // self.bits

    def to_pins(self, codes: np.ndarray) -> np.ndarray:
        """Map ladder codes to the bit patterns written to the pins."""
        x = np.asarray(codes, dtype=np.uint32)
        if not self.msb_high:
            x = _reverse_bits(x, self.bits)
        if self.invert:
            x = x ^ np.uint32((1 << self.bits) - 1)
        return x

    def from_pins(self, patterns: np.ndarray) -> np.ndarray:
        """Inverse of :meth:`to_pins`."""
        x = np.asarray(patterns, dtype=np.uint32)
        if self.invert:
            x = x ^ np.uint32((1 << self.bits) - 1)
        if not self.msb_high:
            x = _reverse_bits(x, self.bits)
        return x

    @property
    def pull_threshold(self) -> int:
        """Autopull threshold in bits, ``samples_per_word * bits`` (1..32)."""
        return self.samples_per_word * self.bits

    @property
    def pad_bits(self) -> int:
        """Unused bits per word."""
        return 32 - self.pull_threshold

    def words_for(self, samples: int) -> int:
        """Words needed for `samples` samples."""
        return -(-samples // self.samples_per_word)

    def to_dict(self) -> dict[str, object]:
        """Plain-data description."""
        return {
            "bits": self.bits,
            "samples_per_word": self.samples_per_word,
            "shift": "right" if self.shift_right else "left",
            "pull_threshold": self.pull_threshold,
            "pad_bits": self.pad_bits,
            "pin_order": "msb-high" if self.msb_high else "msb-low",
            "invert": self.invert,
        }


@dataclass(frozen=True)
class StereoLadderLayout(WordLayout):
    """Two N-bit ladders side by side on 2N pins, both written by one ``out pins, 2N``.

    A code of this layout is a frame, ``left | right << N`` (`bits` is 2N); the left
    ladder sits on ``out_base .. out_base + N - 1`` and the right one on the N pins
    above.  Pin order and inversion apply to each ladder on its own, so either is wired
    as a mono ladder would be.
    """

    def _check_width(self) -> None:
        if self.bits % 2 or not 2 <= self.bits <= 32:
            raise OptionError(
                f"two ladders take an even number of pins 2..32, got {self.bits}", field="bits"
            )

    @property
    def channel_bits(self) -> int:
        """Width N of each ladder."""
        return self.bits // 2

    def _half(self) -> WordLayout:
        return WordLayout(self.channel_bits, msb_high=self.msb_high, invert=self.invert)

    def to_pins(self, codes: np.ndarray) -> np.ndarray:
        """Frames ``left | right << N`` -> pin patterns, each ladder mapped on its own."""
        x = np.asarray(codes, dtype=np.uint32)
        n, half = np.uint32(self.channel_bits), self._half()
        mask = np.uint32((1 << self.channel_bits) - 1)
        return half.to_pins(x & mask) | (half.to_pins((x >> n) & mask) << n)

    def from_pins(self, patterns: np.ndarray) -> np.ndarray:
        """Inverse of :meth:`to_pins`."""
        x = np.asarray(patterns, dtype=np.uint32)
        n, half = np.uint32(self.channel_bits), self._half()
        mask = np.uint32((1 << self.channel_bits) - 1)
        return half.from_pins(x & mask) | (half.from_pins((x >> n) & mask) << n)

    def frames(self, left: np.ndarray, right: np.ndarray) -> np.ndarray:
        """The frame codes ``left | right << N`` of two channels' codes."""
        n = np.uint32(self.channel_bits)
        return np.asarray(left, np.uint32) | (np.asarray(right, np.uint32) << n)

    def channels_of(self, frames: np.ndarray) -> np.ndarray:
        """Frame codes -> (frames, 2) left and right codes."""
        x = np.asarray(frames, dtype=np.int64)
        mask = (1 << self.channel_bits) - 1
        return np.stack([x & mask, (x >> self.channel_bits) & mask], axis=1)

    def to_dict(self) -> dict[str, object]:
        """Plain-data description: the mono ladder's, for two ladders."""
        return {
            **super().to_dict(),
            "channels": "stereo",
            "channel_bits": self.channel_bits,
            "sample_order": "left ladder on the lower N pins, right on the N above",
        }


@dataclass(frozen=True)
class Packed:
    """Packed FIFO words.

    Attributes
    ----------
    words : numpy.ndarray
        uint32 words in FIFO order.
    layout : WordLayout
        The layout used.
    sample_count : int
        Samples carried (the rest of the last word is padding).
    pad_code : int
        Ladder code used to fill the last word.
    """

    words: np.ndarray
    layout: WordLayout
    sample_count: int
    pad_code: int


def _reverse_bits(x: np.ndarray, bits: int) -> np.ndarray:
    out = np.zeros_like(x)
    for k in range(bits):
        out |= ((x >> np.uint32(k)) & np.uint32(1)) << np.uint32(bits - 1 - k)
    return out


def _slot_shifts(layout: WordLayout) -> np.ndarray:
    j = np.arange(layout.samples_per_word, dtype=np.uint64)
    if layout.shift_right:
        return j * np.uint64(layout.bits)
    return np.uint64(32) - (j + np.uint64(1)) * np.uint64(layout.bits)


def pack(codes: Codes, layout: WordLayout, *, pad_code: int = 0) -> Packed:
    """Pack codes into 32-bit words.

    Parameters
    ----------
    codes : Codes
        The stream; its `bits` must match the layout.
    layout : WordLayout
        Samples per word and shift direction.
    pad_code : int
        Ladder code that fills the unused slots of the last word (the idle
        code, so the pins rest where the stream left them).

    Notes
    -----
    Codes are ladder codes; the layout's pin order and inversion are applied
    here, so the words hold pin patterns.

    Examples
    --------
    >>> import numpy as np
    >>> p = pack(Codes(np.array([1, 2, 3, 4, 5], np.uint16), 8), WordLayout(8))
    >>> [hex(w) for w in p.words]
    ['0x4030201', '0x5']
    """
    if codes.bits != layout.bits:
        raise OptionError(
            f"codes are {codes.bits}-bit but layout is {layout.bits}-bit", field="bits"
        )
    if not 0 <= pad_code < (1 << layout.bits):
        raise OptionError(f"must be 0..{(1 << layout.bits) - 1}, got {pad_code}", field="pad_code")
    spw = layout.samples_per_word
    n = len(codes)
    n_words = layout.words_for(n)
    slots = np.full(n_words * spw, int(layout.to_pins(np.array([pad_code]))[0]), dtype=np.uint64)
    slots[:n] = layout.to_pins(codes.codes)
    grid = slots.reshape(n_words, spw)
    shifts = _slot_shifts(layout)
    words = grid[:, 0] << shifts[0]
    for j in range(1, spw):  # column by column: much faster than a reduce over short rows
        words |= grid[:, j] << shifts[j]
    return Packed(words.astype(np.uint32), layout, n, int(pad_code))


def unpack(words: np.ndarray, layout: WordLayout, sample_count: int | None = None) -> Codes:
    """Recover ladder codes from packed words (the inverse of :func:`pack`).

    Parameters
    ----------
    words : numpy.ndarray
        uint32 words.
    layout : WordLayout
        The layout they were packed with.
    sample_count : int, optional
        Number of samples to keep; default every slot.
    """
    w = np.asarray(words, dtype=np.uint64)
    mask = np.uint64((1 << layout.bits) - 1)
    slots = (w[:, None] >> _slot_shifts(layout)[None, :]) & mask
    flat = layout.from_pins(slots.reshape(-1)).astype(np.uint16 if layout.bits <= 16 else np.uint32)
    if sample_count is not None:
        flat = flat[:sample_count]
    return Codes(flat, layout.bits)


def pack_blocks(
    blocks: Iterable[np.ndarray], layout: WordLayout, *, pad_code: int = 0
) -> Iterator[np.ndarray]:
    """:func:`pack` over a stream of code blocks, carrying partial words across blocks.

    Yields uint32 word blocks whose concatenation equals ``pack`` of the
    concatenated codes (the last word padded with `pad_code`).
    """
    spw = layout.samples_per_word
    dtype = np.uint16 if layout.bits <= 16 else np.uint32
    carry = np.zeros(0, dtype=dtype)
    for block in blocks:
        codes = np.concatenate([carry, np.asarray(block, dtype=dtype)])
        whole = codes.size - codes.size % spw
        carry = codes[whole:]
        if whole:
            yield pack(Codes(codes[:whole], layout.bits), layout, pad_code=pad_code).words
    if carry.size:
        yield pack(Codes(carry, layout.bits), layout, pad_code=pad_code).words
