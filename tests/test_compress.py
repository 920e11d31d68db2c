"""Compressed code streams: the lossless block codec and IMA ADPCM.

Lossless: every stream decodes to exactly its codes, from any block; the bit layout is
checked on a block worked out by hand from the format (module docstring of
``ladderpack.compress``, Rice 1979 for the code, Robinson 1994 for the predictors); the
demo's spoken clip at 8 bits compresses at least 1.4x (issue 31).

IMA ADPCM: the step and index tables and the decoder are checked against two
implementations that are not ours: CPython's ``audioop`` module (``adpcm2lin`` and
``lin2adpcm``, the Intel/DVI IMA ADPCM coder of the standard library; ``audioop-lts`` on
Python 3.13 and later, from PyPI) and a decoder written below from the Interactive
Multimedia Association's recommended practice (1992) with its tables typed in again.
"""

from __future__ import annotations

import contextlib
import warnings
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from ladderpack import compress as cz

with warnings.catch_warnings():
    warnings.simplefilter("ignore", DeprecationWarning)
    import audioop  # stdlib until 3.13, then the audioop-lts package

ROOT = Path(__file__).resolve().parent.parent


def sine_codes(n: int, bits: int, seed: int = 1) -> np.ndarray:
    rng = np.random.default_rng(seed)
    top = (1 << bits) - 1
    x = top / 2 + 0.4 * top * np.sin(2 * np.pi * 440 * np.arange(n) / 22050)
    return np.clip(np.round(x + rng.standard_normal(n)), 0, top).astype(np.int64)


@pytest.mark.parametrize("bits", [1, 4, 8, 12, 16])
@pytest.mark.parametrize("kind", ["sine", "noise", "silence", "extremes"])
def test_lossless_gives_back_every_code(bits: int, kind: str) -> None:
    n, top = 3000, (1 << bits) - 1
    rng = np.random.default_rng(bits)
    x = {
        "sine": sine_codes(n, bits) if bits > 1 else rng.integers(0, 2, n),
        "noise": rng.integers(0, top + 1, n),
        "silence": np.full(n, top // 2),
        "extremes": np.where(np.arange(n) % 3 == 0, 0, top),
    }[kind]
    s = cz.encode_lossless(x, bits)
    np.testing.assert_array_equal(cz.decode_lossless(s), x)
    assert s.block_words.size == -(-n // cz.BLOCK_SAMPLES)


def test_every_block_decodes_on_its_own() -> None:
    x = sine_codes(5000, 8)
    s = cz.encode_lossless(x, 8, block_samples=700)
    for b in range(s.block_words.size):
        np.testing.assert_array_equal(cz.decode_lossless(s, first_block=b), x[700 * b :])


def test_a_spike_in_silence_is_escaped() -> None:
    # a block of small residuals takes k = 0; one jump of 255 then needs the escape
    x = np.full(200, 100)
    x[100] = 255
    s = cz.encode_lossless(x, 8)
    np.testing.assert_array_equal(cz.decode_lossless(s), x)
    assert s.words.size * 32 < 200 + 2 * (16 + 11) + 64  # about one bit a code


def test_block_layout_worked_by_hand() -> None:
    # Codes 10, 12, 14, 15 at 8 bits, worked from the format (ladderpack.compress):
    # order 0 codes zigzag 20, 24, 28, 30: far more bits than the others.
    # order 1: 10 verbatim, residuals 2, 2, 1 (zigzag 4, 4, 2); k = 0 costs 5 + 5 + 3,
    #   k = 1 costs 4 + 4 + 3 = 11, k = 2 also 11, k = 3 12: k = 1 (the smaller of equal
    #   costs); 6 + 8 + 11 = 25 bits.
    # order 2: 10, 12 verbatim, residuals 0, -1 (zigzag 0, 1), k = 0: 1 + 2 = 3 bits;
    #   6 + 16 + 3 = 25 bits, no fewer than order 1, so order 1 stays.
    #   01 | 0001 | 00001010 | u=4: q=2 "110" + "0" | u=4: "1100" | u=2: q=1 "10" + "0"
    s = cz.encode_lossless(np.array([10, 12, 14, 15]), 8)
    bits = "01" + "0001" + "00001010" + "1100" + "1100" + "100"
    assert len(bits) == 25
    assert int(s.words[0]) == int(bits.ljust(32, "0"), 2)
    assert s.words.size == 1 and list(s.block_words) == [0]


def test_the_spoken_demo_clip_compresses_1_4x() -> None:
    from ladderpack.pack import unpack
    from ladderpack.stream import stream_clip

    a = stream_clip(str(ROOT / "demo_audio" / "frost_warning.flac"), bits=8, rate_hz=22050)
    p = a.packed
    codes = unpack(p.words, p.layout, p.sample_count).codes
    s = cz.encode_lossless(codes, 8)
    assert 4 * p.words.size / s.nbytes >= 1.4  # issue 31's goal (measured: 2.79x)


# -- IMA ADPCM --------------------------------------------------------------------------

# The recommended practice's tables, typed in again for this test (IMA 1992; the same
# values as the decoder tables of the Intel/DVI reference code).
STEPS = [
    7, 8, 9, 10, 11, 12, 13, 14, 16, 17, 19, 21, 23, 25, 28, 31, 34, 37, 41, 45, 50, 55,
    60, 66, 73, 80, 88, 97, 107, 118, 130, 143, 157, 173, 190, 209, 230, 253, 279, 307,
    337, 371, 408, 449, 494, 544, 598, 658, 724, 796, 876, 963, 1060, 1166, 1282, 1411,
    1552, 1707, 1878, 2066, 2272, 2499, 2749, 3024, 3327, 3660, 4026, 4428, 4871, 5358,
    5894, 6484, 7132, 7845, 8630, 9493, 10442, 11487, 12635, 13899, 15289, 16818, 18500,
    20350, 22385, 24623, 27086, 29794, 32767,
]  # fmt: skip
INDEX = [-1, -1, -1, -1, 2, 4, 6, 8, -1, -1, -1, -1, 2, 4, 6, 8]


def ima_decode(nibbles: list[int], pred: int, index: int) -> list[int]:
    """The recommended practice's decoder, step by step (vpdiff from the magnitude bits)."""
    out = []
    for code in nibbles:
        step = STEPS[index]
        vpdiff = step >> 3
        if code & 4:
            vpdiff += step
        if code & 2:
            vpdiff += step >> 1
        if code & 1:
            vpdiff += step >> 2
        pred = max(-32768, min(32767, pred - vpdiff if code & 8 else pred + vpdiff))
        index = max(0, min(88, index + INDEX[code]))
        out.append(pred)
    return out


def test_ima_tables() -> None:
    assert tuple(STEPS) == cz.IMA_STEPS and len(STEPS) == 89
    assert tuple(INDEX[:8]) == cz.IMA_INDEX_ADJUST


def voice(n: int, seed: int = 3) -> np.ndarray:
    rng = np.random.default_rng(seed)
    t = np.arange(n) / 22050
    x = 9000 * np.sin(2 * np.pi * 220 * t) * (1 + 0.5 * np.sin(2 * np.pi * 3 * t))
    x += 3000 * np.sin(2 * np.pi * 1750 * t) + 400 * rng.standard_normal(n)
    return np.clip(np.round(x), -32768, 32767).astype(np.int64)


def _hi_first(nibbles: list[int]) -> bytes:
    """Nibbles two a byte as audioop reads them: the first in the high nibble."""
    if len(nibbles) % 2:
        nibbles = [*nibbles, 0]
    return bytes((a << 4) | b for a, b in zip(nibbles[0::2], nibbles[1::2], strict=True))


@pytest.mark.parametrize("width", [1, 6])
def test_adpcm_decoder_agrees_with_audioop_and_the_recommended_practice(width: int) -> None:
    x = voice(3000)
    s = cz.encode_adpcm(x, block_samples=1000, search_width=width)
    ours = cz.decode_adpcm(s)
    for b, h in enumerate(s.headers.tolist()):
        pred, index = (h & 0xFFFF) - ((h & 0x8000) << 1), h >> 16
        nib = s.nibbles[1000 * b + 1 : 1000 * (b + 1)].tolist()
        want = ima_decode(nib, pred, index)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", DeprecationWarning)
            lin, _state = audioop.adpcm2lin(_hi_first(nib), 2, (pred, index))
        theirs = np.frombuffer(lin, "<i2")[: len(nib)].astype(np.int64)
        np.testing.assert_array_equal(ours[1000 * b + 1 : 1000 * (b + 1)], want)
        np.testing.assert_array_equal(theirs, want)
        assert ours[1000 * b] == pred


def test_greedy_codes_are_audioops_encoder() -> None:
    x = voice(2001)  # audioop codes whole bytes: an even count after the first sample
    s = cz.encode_adpcm(x, block_samples=2001, search_width=1)
    h = int(s.headers[0])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)
        data, _ = audioop.lin2adpcm(x[1:].astype("<i2").tobytes(), 2, (int(x[0]), h >> 16))
    theirs = [n for byte in data for n in (byte >> 4, byte & 15)][: x.size - 1]
    assert s.nibbles[1:].tolist() == theirs


def test_the_search_beats_the_greedy_encoder() -> None:
    x = voice(6000)
    greedy = cz.sinad_db(x, cz.decode_adpcm(cz.encode_adpcm(x, search_width=1)))
    searched = cz.sinad_db(x, cz.decode_adpcm(cz.encode_adpcm(x, search_width=8)))
    assert searched > greedy + 0.5, (greedy, searched)


def test_adpcm_is_four_times_smaller_than_16_bit_pcm() -> None:
    x = voice(20000)
    s = cz.encode_adpcm(x)
    assert 2 * x.size / s.nbytes >= 3.95  # 4 bits a sample plus a word a block
    assert s.packed.size == 10000 and s.packed[0] & 15 == s.nibbles[0]


# -- the MicroPython player's decoder, run on the host ----------------------------------


def _viper_decoder() -> Any:
    """``_lossless_block`` from the generated module's text, with ``micropython.viper`` and
    ``ptr32`` as no-ops (it is written to give the same bits as plain Python)."""
    import types

    from ladderpack.emit.micropython import LOSSLESS_DECODER

    space: dict[str, object] = {
        "micropython": types.SimpleNamespace(viper=lambda f: f),
        "ptr32": lambda a: a,
    }
    exec(LOSSLESS_DECODER, space)  # our own generated source
    return space["_lossless_block"]


@pytest.mark.parametrize("bits", [1, 3, 8, 10, 12, 16])
@pytest.mark.parametrize("layout", ["right-msb-high", "left-msb-low-inverted"])
def test_the_micropython_decoder_gives_the_stream_words(bits: int, layout: str) -> None:
    import array

    from ladderpack.stream import stream_tone

    right = layout.startswith("right")
    asset = stream_tone(
        "sine", name="z", seconds=0.05, rate_hz=22050, bits=bits, compress="lossless",
        shift="right" if right else "left", pin_order="msb-high" if right else "msb-low",
        invert=not right,
    )  # fmt: skip
    ll, lay = asset.lossless, asset.packed.layout
    assert ll is not None and ll.block_samples % lay.samples_per_word == 0
    decode = _viper_decoder()
    ends = [*ll.block_words.tolist()[1:], ll.words.size]
    got: list[int] = []
    for b, start in enumerate(ll.block_words.tolist()):
        src = array.array("I", [int(w) for w in ll.words[start : ends[b]]] + [0])
        dst = array.array("I", bytes(4 * ll.block_samples))
        n = min(ll.block_samples, ll.samples - b * ll.block_samples)
        inv = (1 << bits) - 1 if lay.invert else 0
        cfg = array.array(
            "i",
            [
                n,
                bits,
                lay.samples_per_word,
                int(lay.shift_right),
                int(not lay.msb_high),
                inv,
                1,
                0,
                bits,
            ],
        )
        got += dst[: decode(src, dst, cfg)].tolist()
    assert got == asset.packed.words.tolist()


def test_a_damaged_stream_is_refused_with_a_message() -> None:
    from ladderpack.errors import OptionError

    x = sine_codes(3000, 8)
    s = cz.encode_lossless(x, 8)
    data = s.to_bytes()
    back = cz.lossless_from_bytes(data, bits=8, samples=s.samples, block_samples=1024, blocks=3)
    np.testing.assert_array_equal(cz.decode_lossless(back), x)
    with pytest.raises(OptionError, match="block offsets"):
        cz.lossless_from_bytes(data[:8], bits=8, samples=s.samples, block_samples=1024, blocks=3)
    with pytest.raises(OptionError, match="out of order"):
        bad = np.frombuffer(data, "<u4").copy()
        bad[1], bad[2] = bad[2], bad[1]
        cz.lossless_from_bytes(bad.tobytes(), bits=8, samples=s.samples, block_samples=1024,
                               blocks=3)  # fmt: skip
    cut = cz.lossless_from_bytes(data[: len(data) - 200], bits=8, samples=s.samples,
                                 block_samples=1024, blocks=3)  # fmt: skip
    with pytest.raises(OptionError, match=r"ends inside a block|outside"):
        cz.decode_lossless(cut)
    rng = np.random.default_rng(5)
    for _ in range(20):  # random damage: a message, never another exception
        noisy = np.frombuffer(data, "<u4").copy()
        noisy[3 + rng.integers(0, noisy.size - 3)] ^= np.uint32(1 << int(rng.integers(0, 32)))
        with contextlib.suppress(OptionError):
            cz.decode_lossless(cz.lossless_from_bytes(noisy.tobytes(), bits=8,
                               samples=s.samples, block_samples=1024, blocks=3))  # fmt: skip


class _Words:
    """A host stand-in for viper's ``ptr32`` on a words array: stores 32-bit patterns."""

    def __init__(self, a: Any) -> None:
        self.a = a

    def __getitem__(self, i: int) -> int:
        return int(self.a[i])

    def __setitem__(self, i: int, v: int) -> None:
        self.a[i] = v & 0xFFFFFFFF


def test_the_micropython_adpcm_decoder_gives_the_reference_samples() -> None:
    import array
    import types

    from ladderpack.emit.micropython import ADPCM_DECODER

    space: dict[str, object] = {
        "array": array,
        "micropython": types.SimpleNamespace(viper=lambda f: f),
        "ptr8": lambda a: a,
        "ptr16": lambda a: a,
        "ptr32": _Words,
    }
    exec(ADPCM_DECODER, space)  # our own generated source
    decode = space["_adpcm_block"]
    x = voice(5000)
    s = cz.encode_adpcm(x, block_samples=1000)
    want = cz.decode_adpcm(s)
    packed = s.packed
    for b, h in enumerate(s.headers.tolist()):
        pred, index = (h & 0xFFFF) - ((h & 0x8000) << 1), h >> 16
        n = min(1000, s.samples - 1000 * b)
        src = bytes(packed[500 * b : 500 * b + (n + 1) // 2])
        dst = array.array("I", bytes(4 * n))
        cfg = array.array("i", [n, pred, index, 1, 0, 0])
        assert decode(src, dst, cfg) == n  # type: ignore[operator]
        got = [((w >> 16) ^ 0x8000) - 0x8000 for w in dst]
        assert got == want[1000 * b : 1000 * b + n].tolist()
        assert all((w >> 16) == (w & 0xFFFF) for w in dst)  # the sample in both halves


def test_stereo_adpcm_codes_each_channel_on_its_own() -> None:
    # two channels interleaved: each channel's codes and headers are those of the channel
    # coded alone (half the block), and each decodes by CPython's audioop (IMA ADPCM)
    left, right = voice(3000, seed=1), voice(3000, seed=2) // 3
    x = np.column_stack([left, right]).ravel()
    s = cz.encode_adpcm(x, block_samples=1000, channels=2)
    assert s.channels == 2 and s.blocks == 6 and s.headers.size == 12
    d = cz.decode_adpcm(s)
    for c, mono in enumerate((left, right)):
        alone = cz.encode_adpcm(mono, block_samples=500)
        assert s.headers[c::2].tolist() == alone.headers.tolist()
        assert s.nibbles[c::2].tolist() == alone.nibbles.tolist()
        np.testing.assert_array_equal(d[c::2], cz.decode_adpcm(alone))
        for b, h in enumerate(alone.headers.tolist()):
            pred, index = (h & 0xFFFF) - ((h & 0x8000) << 1), h >> 16
            nib = s.nibbles[1000 * b + 2 + c : 1000 * (b + 1) : 2].tolist()
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", DeprecationWarning)
                lin, _state = audioop.adpcm2lin(_hi_first(nib), 2, (pred, index))
            theirs = np.frombuffer(lin, "<i2")[: len(nib)].astype(np.int64)
            np.testing.assert_array_equal(d[1000 * b + 2 + c : 1000 * (b + 1) : 2], theirs)
    # a frame's two codes share a byte, left in the low nibble; the file form reads back
    assert s.packed[1] == s.nibbles[2] | s.nibbles[3] << 4
    back = cz.adpcm_from_bytes(s.to_bytes(), samples=6000, block_samples=1000, channels=2)
    np.testing.assert_array_equal(cz.decode_adpcm(back), d)
    assert s.nbytes == x.size // 2 + 4 * 12  # 4 bits a sample, a header a block and channel


def test_the_micropython_stereo_adpcm_decoder_gives_the_reference_frames() -> None:
    import array
    import types

    from ladderpack.emit.micropython import ADPCM_DECODER

    space: dict[str, object] = {
        "array": array,
        "micropython": types.SimpleNamespace(viper=lambda f: f),
        "ptr8": lambda a: a,
        "ptr16": lambda a: a,
        "ptr32": _Words,
    }
    exec(ADPCM_DECODER, space)  # our own generated source
    decode = space["_adpcm_block"]
    x = np.column_stack([voice(2100, seed=4), -voice(2100, seed=5)]).ravel()
    s = cz.encode_adpcm(x, block_samples=1000, channels=2)
    want = cz.decode_adpcm(s)
    packed, heads = s.packed, s.headers.tolist()
    for b in range(s.blocks):
        n = min(1000, s.samples - 1000 * b)
        src = bytes(packed[500 * b : 500 * b + n // 2])
        dst = array.array("I", bytes(4 * (n // 2)))
        cfg = array.array("i", [n, 0, 0, 2, 0, 0])
        for c in range(2):
            h = heads[2 * b + c]
            cfg[1 + 3 * c], cfg[2 + 3 * c] = (h & 0xFFFF) - ((h & 0x8000) << 1), h >> 16
        assert decode(src, dst, cfg) == n // 2  # type: ignore[operator]
        got = (
            [((w >> 16) ^ 0x8000) - 0x8000 for w in dst],
            [((w & 0xFFFF) ^ 0x8000) - 0x8000 for w in dst],
        )
        assert got[0] == want[1000 * b : 1000 * b + n : 2].tolist()
        assert got[1] == want[1000 * b + 1 : 1000 * b + n : 2].tolist()


@pytest.mark.parametrize("stereo", [False, True])
def test_the_micropython_decoder_gives_i2s_frames(stereo: bool) -> None:
    # the lossless decoder's I2S mode: a word a frame, two's complement, left in the top
    # half (a mono code in both), as the I2S layout packs them
    import array

    from ladderpack.outputs.i2s import I2sLayout

    lay = I2sLayout(16, stereo=stereo)
    ch = 2 if stereo else 1
    codes = np.concatenate([sine_codes(1500 * ch, 16), np.array([0, 65535] * ch)])
    s = cz.encode_lossless(codes, 16, block_samples=256 * ch, channels=ch)
    decode = _viper_decoder()
    ends = [*s.block_words.tolist()[1:], s.words.size]
    got: list[int] = []
    for b, start in enumerate(s.block_words.tolist()):
        src = array.array("I", [int(w) for w in s.words[start : ends[b]]] + [0])
        dst = array.array("I", bytes(4 * 256))
        n = min(s.block_samples, s.samples - b * s.block_samples)
        cfg = array.array("i", [n, 16, 1, 0, 0, 0x8000, ch, 1, 16])
        got += dst[: decode(src, dst, cfg)].tolist()
    assert got == lay.pack_codes(codes).tolist()


@pytest.mark.parametrize("width", [2, 5, 8])
def test_the_trellis_kernels_give_the_same_codes(width: int) -> None:
    # the numba-compiled search, its array reference run by the interpreter, and the
    # dict-and-list version: the same codes (ties kept in the same order), any signal
    from ladderpack import _kernels

    for seed in range(4):
        x = voice(700, seed=seed)
        if seed == 3:
            x[::7] = 32767  # clipping and big jumps
        steps = np.array(cz.IMA_STEPS, dtype=np.int64)
        outs = []
        for fn in (_kernels.adpcm_trellis_py, _kernels.adpcm_trellis_ref,
                   _kernels.compiled("adpcm_trellis")):  # fmt: skip
            out = np.zeros(x.size - 1, np.uint8)
            fn(x[1:].astype(np.int64), int(x[0]), 20, width, steps, out)
            outs.append(out)
        np.testing.assert_array_equal(outs[0], outs[1])
        np.testing.assert_array_equal(outs[0], outs[2])


def test_two_channels_are_predicted_each_from_its_own() -> None:
    t = np.arange(4000) / 22050
    left = np.round(512 + 400 * np.sin(2 * np.pi * 300 * t)).astype(np.int64)
    right = np.round(512 - 300 * np.sin(2 * np.pi * 1100 * t)).astype(np.int64)
    x = np.column_stack([left, right]).ravel()
    two = cz.encode_lossless(x, 10, channels=2)
    one = cz.encode_lossless(x, 10)
    np.testing.assert_array_equal(cz.decode_lossless(two), x)
    for b in range(two.blocks):
        np.testing.assert_array_equal(cz.decode_lossless(two, first_block=b), x[1024 * b :])
    assert two.nbytes < 0.7 * one.nbytes  # interleaved, the neighbours are the other channel
    back = cz.lossless_from_bytes(two.to_bytes(), bits=10, samples=x.size, block_samples=1024,
                                  blocks=two.blocks, channels=2)  # fmt: skip
    np.testing.assert_array_equal(cz.decode_lossless(back), x)


# -- preview reads a compressed bundle ------------------------------------------------------


@pytest.mark.parametrize(
    ("output", "compress", "stereo"),
    [
        ("ladder", "lossless", False),
        ("ladder", "lossless", True),
        ("i2s", "lossless", False),
        ("i2s", "lossless", True),
        ("i2s", "adpcm", False),
        ("i2s", "adpcm", True),
        ("spi-dac", "lossless", False),
        ("spi-dac", "lossless", True),
        ("i2c-dac", "lossless", False),
        ("pwm", "lossless", False),
        ("pwm", "lossless", True),
    ],
)
def test_preview_reads_what_the_players_send(
    tmp_path: Path, output: str, compress: str, stereo: bool
) -> None:
    # each channel's codes, as preview decodes the compressed .bin: for lossless those of
    # the same stream's uncompressed .bin (unpacked by the layout), for ADPCM those the
    # words the players send decode to (the host reference decoder's samples)
    from ladderpack.audio import Signal
    from ladderpack.bundle import write_bundle
    from ladderpack.preview import _read_bundle
    from ladderpack.stream import stream_signal

    t = np.arange(3000) / 22050.0
    x = np.stack([0.7 * np.sin(2 * np.pi * 300 * t), 0.4 * np.sin(2 * np.pi * 900 * t)], 1)
    opts: dict[str, Any] = {"output": output, "stereo": stereo}
    if output == "i2c-dac":
        opts = {"output": output, "rate_hz": 8000.0}
    if output == "ladder":
        opts["bits"] = 6 if stereo else 10
    sig = Signal(x if stereo else x[:, 0], 22050.0)
    for how, where in ((compress, tmp_path / "c"), ("none", tmp_path / "u")):
        write_bundle(stream_signal(sig, name="zp", compress=how, **opts), where)
    packed = stream_signal(sig, name="zp", compress=compress, **opts).packed
    for ch in range(2 if stereo else 1):
        got = _read_bundle(str(tmp_path / "c" / "zp.json"), ch)
        plain = _read_bundle(str(tmp_path / "u" / "zp.json"), ch)
        if compress == "lossless":
            np.testing.assert_array_equal(got.codes, plain.codes)
        else:
            want = got.model.decode(packed.words, packed.sample_count, ch)
            np.testing.assert_array_equal(got.codes, want)
            assert 0 < np.max(np.abs(got.codes.astype(np.int64) - plain.codes)) < 2000


# -- the SPI and I2C DACs' lossless streams: the MicroPython decoder and packer ------------


@pytest.mark.parametrize("stereo", [False, True])
def test_the_micropython_decoder_gives_spi_dac_words(stereo: bool) -> None:
    # form 2: every code in its own 12-bit slot, shift left (bits 31:20, then 19:8), each
    # channel predicted from its own: the words the SPI DAC's layouts pack
    import array

    from ladderpack.outputs.spi_dac import SpiDacStereoLayout, _mono_layout
    from ladderpack.pack import pack
    from ladderpack.quantize import Codes

    ch = 2 if stereo else 1
    codes = np.concatenate([sine_codes(1200, 12), np.array([0, 4095] * 2)])
    if stereo:
        want = SpiDacStereoLayout().pack_codes(codes)
    else:
        want = pack(Codes(codes.astype(np.uint16), 12), _mono_layout()).words
    s = cz.encode_lossless(codes, 12, block_samples=256, channels=ch)
    decode = _viper_decoder()
    ends = [*s.block_words.tolist()[1:], s.words.size]
    got: list[int] = []
    for b, start in enumerate(s.block_words.tolist()):
        src = array.array("I", [int(w) for w in s.words[start : ends[b]]] + [0])
        dst = array.array("I", bytes(4 * 256))
        n = min(s.block_samples, s.samples - b * s.block_samples)
        cfg = array.array("i", [n, 12, 2, 0, 0, 0, ch, 2, 12])
        got += dst[: decode(src, dst, cfg)].tolist()
    assert got == want.tolist()


@pytest.mark.parametrize(("command", "power_down"), [("fast", 0), ("fast", 2), ("register", 0),
                                                      ("register", 3)])  # fmt: skip
def test_the_micropython_i2c_packer_gives_the_writer_words(command: str, power_down: int) -> None:
    # the decoder's form 3 (a code a word), then the packer: every 12-bit code's update
    # as writer_words makes it (the MCP4725 command bytes, see ladderpack.outputs.i2c_dac)
    import array
    import types

    from ladderpack.outputs.i2c_dac import I2C_PACK, I2cDacFormat, pack_cfg, writer_words

    space: dict[str, object] = {
        "micropython": types.SimpleNamespace(viper=lambda f: f),
        "ptr32": _Words,
    }
    exec(I2C_PACK, space)  # our own generated source
    fmt = I2cDacFormat(0x61, command, power_down=power_down)
    codes = np.arange(4096)
    cfg = array.array("i", pack_cfg(fmt))
    cfg[0] = codes.size
    dst = array.array("I", bytes(4 * 4 * codes.size))
    src = array.array("I", codes.tolist())
    n = space["_i2c_pack"](src, dst, cfg)  # type: ignore[operator]
    assert dst[:n].tolist() == writer_words(fmt, codes).tolist()
    # and the decoder's form 3 gives the codes themselves
    s = cz.encode_lossless(codes, 12, block_samples=4096)
    out = array.array("I", bytes(4 * 4096))
    src = array.array("I", [int(w) for w in s.words] + [0])
    got = _viper_decoder()(src, out, array.array("i", [4096, 12, 1, 0, 0, 0, 1, 3, 12]))
    assert out[:got].tolist() == codes.tolist()


# -- the fast decoder against the bit-by-bit reference ------------------------------------


def _decoders() -> list[Any]:
    from ladderpack import _kernels

    return [_kernels.lossless_decode_py, _kernels.lossless_decode_ref,
            _kernels.compiled("lossless_decode")]  # fmt: skip


def _run(fn: Any, s: cz.LosslessStream, first: int = 0) -> tuple[int, list[int]]:
    out = np.zeros(max(0, s.samples - first * s.block_samples), np.int64)
    bad = fn(s.words, s.block_words, s.bits, s.samples, s.block_samples, s.channels, first, out)
    return int(bad), out.tolist()


@pytest.mark.parametrize("bits", [1, 5, 8, 12, 16])
@pytest.mark.parametrize("channels", [1, 2])
def test_every_lossless_decoder_gives_the_references_codes(bits: int, channels: int) -> None:
    # the interpreter and numba versions of the fast decoder (whole fields at once) and
    # the reference that reads the format bit by bit: the same codes, from any block
    rng = np.random.default_rng(bits * 10 + channels)
    noise = rng.integers(0, 1 << bits, 300 * channels)
    x = np.concatenate([sine_codes(2000 * channels, bits), noise, np.zeros(200 * channels, int)])
    x[::97] = (1 << bits) - 1  # escapes
    s = cz.encode_lossless(x, bits, block_samples=256 * channels, channels=channels)
    for first in (0, 3):
        want = cz.decode_lossless_reference(s, first_block=first).tolist()
        for fn in _decoders():
            assert _run(fn, s, first) == (0, want)


def test_every_lossless_decoder_refuses_the_same_damage() -> None:
    # random damage: where the reference refuses, the fast decoders name a block and
    # give the same codes before it; where it decodes, they give its codes
    x = sine_codes(3000, 8)
    s = cz.encode_lossless(x, 8)
    rng = np.random.default_rng(11)
    refused = 0
    for _ in range(40):
        noisy = s.words.copy()
        noisy[rng.integers(0, noisy.size)] ^= np.uint32(1 << int(rng.integers(0, 32)))
        d = cz.LosslessStream(8, s.samples, s.block_samples, noisy, s.block_words)
        try:
            want = cz.decode_lossless_reference(d).tolist()
        except cz.OptionError:  # the reference's refusal
            want = None
        for fn in _decoders():
            bad, got = _run(fn, d)
            if want is None:
                assert bad > 0
            else:
                assert (bad, got) == (0, want)
        refused += want is None
    assert refused > 0
    cut = cz.LosslessStream(8, s.samples, s.block_samples, s.words[:-40], s.block_words)
    from ladderpack.errors import OptionError

    with pytest.raises(OptionError, match="block 2 is damaged"):
        cz.decode_lossless(cut)
