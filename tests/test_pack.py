"""Packing codes into FIFO words."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from ladderpack.pack import WordLayout, pack, unpack
from ladderpack.quantize import Codes


@pytest.mark.parametrize(
    ("bits", "per_word", "threshold", "pad"),
    # REFERENCES.md 7.4 packing guidance (RP2040 datasheet, Autopull): PULL_THRESH =
    # floor(32/N) * N; 8 -> 4/word, 10 -> 3/word + 2 pad bits, 12 -> 2/word, 16 -> 2/word.
    [(8, 4, 32, 0), (10, 3, 30, 2), (12, 2, 24, 8), (16, 2, 32, 0), (1, 32, 32, 0), (5, 6, 30, 2)],
)
def test_layout(bits: int, per_word: int, threshold: int, pad: int) -> None:
    lay = WordLayout(bits)
    assert (lay.samples_per_word, lay.pull_threshold, lay.pad_bits) == (per_word, threshold, pad)


def test_right_shift_puts_first_sample_in_lsbs() -> None:
    # OUT_SHIFTDIR = right: OUT takes the OSR's least significant bits first (datasheet).
    p = pack(Codes(np.array([0x1, 0x2, 0x3], np.uint16), 10), WordLayout(10))
    assert p.words.tolist() == [0x1 | 0x2 << 10 | 0x3 << 20]


def test_left_shift_puts_first_sample_in_msbs() -> None:
    p = pack(
        Codes(np.array([0xAB, 0xCD], np.uint16), 8), WordLayout(8, shift_right=False), pad_code=0x11
    )
    assert p.words.tolist() == [0xABCD1111]


def test_last_word_padded_with_pad_code() -> None:
    p = pack(Codes(np.array([5], np.uint16), 16), WordLayout(16), pad_code=7)
    assert p.words.tolist() == [5 | 7 << 16] and p.sample_count == 1


@given(
    bits=st.integers(1, 16),
    right=st.booleans(),
    data=st.data(),
)
def test_pack_unpack_identity(bits: int, right: bool, data: st.DataObject) -> None:
    values = data.draw(st.lists(st.integers(0, (1 << bits) - 1), min_size=1, max_size=200))
    pad = data.draw(st.integers(0, (1 << bits) - 1))
    lay = WordLayout(bits, shift_right=right)
    packed = pack(Codes(np.array(values, np.uint16), bits), lay, pad_code=pad)
    assert packed.words.dtype == np.uint32
    assert packed.words.size == -(-len(values) // lay.samples_per_word)
    back = unpack(packed.words, lay)
    assert back.codes[: len(values)].tolist() == values
    assert set(back.codes[len(values) :].tolist()) <= {pad}
