"""Compressed code streams: lossless (prediction and Rice codes) and IMA ADPCM.

Both work on a stream's codes, after dither, shaping and correction, so what a player
decodes is what the uncompressed stream would have put on the pins.

**Lossless** (:func:`encode_lossless`, :func:`decode_lossless`). The codes are cut into
blocks of :data:`BLOCK_SAMPLES` that are decoded on their own (a loop or a seek enters
at any block), each starting on a 32-bit word. A block holds a fixed polynomial
predictor of order 0, 1 or 2 (the first ``order`` codes verbatim), as in the
prediction scheme for lossless audio of Robinson (1994, "SHORTEN: Simple lossless and
near-lossless waveform compression", Cambridge University Engineering Department
technical report CUED/F-INFENG/TR.156), and the prediction residuals in a Rice code
(R. F. Rice, "Some practical universal noiseless coding techniques", JPL Publication
79-22, 1979; the Golomb code with a power-of-two parameter, S. W. Golomb, "Run-length
encodings", IEEE Trans. Inf. Theory 12(3), 1966). The encoder picks the order and the
Rice parameter of each block by counting the exact bits of every choice. Bits go
MSB first into little-endian 32-bit words.

Block layout (our own)::

    order      2 bits   0, 1 or 2
    k          4 bits   Rice parameter, 0..15
    warm-up    order x N bits, the first codes as they are
    residuals  per code: u = zigzag(code - prediction); q = u >> k;
               q < 16: q one bits, a zero bit, then the k low bits of u
               q >= 16 (escape): 16 one bits, then u in N + 3 bits
    padding    zero bits to the next word

**IMA ADPCM** (:func:`encode_adpcm`, :func:`decode_adpcm`): 4 bits a sample (Interactive
Multimedia Association, "Recommended Practices for Enhancing Digital Audio Compatibility
in Multimedia Systems", rev. 3.00, 1992: the 89-entry step table and the index
adjustments). The encoder searches: a trellis over the predictor states keeps the best
few paths (by squared error) and chooses each code knowing the next ones, instead of
the greedy choice sample by sample (``_kernels.adpcm_trellis_*``: compiled by numba for
long streams, in plain Python for short ones, the same codes). Blocks of
:data:`ADPCM_BLOCK_SAMPLES` restart from a stored predictor and step index, so loops and
seeks work as for lossless.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from ladderpack._kernels import ima_greedy, ima_step, kernel
from ladderpack.errors import OptionError

__all__ = [
    "ADPCM_BLOCK_SAMPLES",
    "BLOCK_SAMPLES",
    "IMA_INDEX_ADJUST",
    "IMA_STEPS",
    "AdpcmStream",
    "LosslessStream",
    "adpcm_from_bytes",
    "decode_adpcm",
    "decode_lossless",
    "decode_lossless_reference",
    "decode_stored",
    "encode_adpcm",
    "encode_lossless",
    "lossless_from_bytes",
    "mono_frames",
    "sinad_db",
]

#: Codes a lossless block holds (the last block may be shorter).
BLOCK_SAMPLES = 1024
#: Largest Rice parameter a block may use (4 bits in its header).
MAX_K = 15
#: Quotients from this value on are escaped (16 one bits, then the value verbatim).
ESCAPE_Q = 16
#: Width added to the code width for an escaped value (a second-order residual of
#: N-bit codes lies within +/-3 (2^N - 1), so its zigzag value fits in N + 3 bits).
ESCAPE_EXTRA_BITS = 3


@dataclass(frozen=True)
class LosslessStream:
    """A losslessly compressed code stream.

    Attributes
    ----------
    bits : int
        Code width N.
    samples : int
        Codes it holds.
    block_samples : int
        Codes a block holds (all but the last).
    words : numpy.ndarray
        The bit stream, uint32 (each word's bits MSB first).
    block_words : numpy.ndarray
        Word index where each block starts, uint32.
    channels : int
        Channels interleaved in the codes (1, or 2 for two ladders: left, right, ...);
        each code is predicted from the codes of its own channel.
    """

    bits: int
    samples: int
    block_samples: int
    words: np.ndarray
    block_words: np.ndarray
    channels: int = 1

    @property
    def nbytes(self) -> int:
        """Bytes of the bit stream and the block index."""
        return 4 * (int(self.words.size) + int(self.block_words.size))

    @property
    def blocks(self) -> int:
        """Blocks it holds."""
        return int(self.block_words.size)

    @property
    def max_block_words(self) -> int:
        """Words of the longest block (what a decoder that reads block by block holds)."""
        ends = np.append(self.block_words[1:], self.words.size).astype(np.int64)
        return int(np.max(ends - self.block_words.astype(np.int64))) if ends.size else 0

    def to_bytes(self) -> bytes:
        """The file form: the block index, then the bit stream, little-endian words."""
        return np.concatenate([self.block_words, self.words]).astype("<u4").tobytes()


def lossless_from_bytes(
    data: bytes, *, bits: int, samples: int, block_samples: int, blocks: int, channels: int = 1
) -> LosslessStream:
    """Read :meth:`LosslessStream.to_bytes` back (the sidecar gives the numbers).

    Raises
    ------
    OptionError
        When the data cannot be such a stream (short, or a block index out of order).
    """
    words = np.frombuffer(data, dtype="<u4")
    if len(data) % 4 or words.size < blocks or blocks != -(-samples // block_samples):
        raise OptionError(
            f"expected {blocks} block offsets and a bit stream, got {len(data)} bytes",
            field="compression",
        )
    index, stream = words[:blocks].astype(np.uint32), words[blocks:].astype(np.uint32)
    if blocks and (index[0] != 0 or np.any(np.diff(index.astype(np.int64)) <= 0)
                   or int(index[-1]) >= max(1, stream.size)):  # fmt: skip
        raise OptionError("the block index is out of order", field="compression")
    return LosslessStream(bits, samples, block_samples, stream, index, channels)


def _zigzag(e: np.ndarray) -> np.ndarray:
    return np.where(e >= 0, 2 * e, -2 * e - 1)


def _residuals(x: np.ndarray, order: int, c: int = 1) -> np.ndarray:
    """Prediction residuals of one block from its ``order x c``-th code on (int64).

    Each code is predicted from the codes `c` and `2c` before it (its own channel's).
    """
    if order == 0:
        return x.copy()
    if order == 1:
        return x[c:] - x[:-c]
    return x[2 * c :] - 2 * x[c:-c] + x[: -2 * c]


def _rice_bits(u: np.ndarray, bits: int) -> np.ndarray:
    """Bits of the residuals `u` for every k in 0..MAX_K (an array of MAX_K + 1)."""
    ks = np.arange(MAX_K + 1)
    q = u[:, None] >> ks[None, :]
    coded = np.where(q < ESCAPE_Q, q + 1 + ks[None, :], ESCAPE_Q + bits + ESCAPE_EXTRA_BITS)
    return coded.sum(axis=0)


def _choose(x: np.ndarray, bits: int, c: int = 1) -> tuple[int, int, np.ndarray]:
    """(order, k, zigzag residuals) with the fewest bits for one block."""
    best: tuple[int, int, int, np.ndarray] | None = None
    top = min(2, (x.size - 1) // c) if x.size else 0
    for order in range(top + 1):
        u = _zigzag(_residuals(x, order, c))
        costs = _rice_bits(u, bits) if u.size else np.zeros(MAX_K + 1, dtype=np.int64)
        k = int(np.argmin(costs))  # the first of equal costs: the smallest k
        total = int(costs[k]) + order * c * bits
        if best is None or total < best[0]:
            best = (total, order, k, u)
    assert best is not None
    return best[1], best[2], best[3]


def _fields(x: np.ndarray, bits: int, c: int = 1) -> tuple[list[np.ndarray], list[np.ndarray]]:
    """(values, widths) of one block's fields, in stream order."""
    order, k, u = _choose(x, bits, c)
    values = [np.array([order << 4 | k], dtype=np.uint64)]
    widths = [np.array([6], dtype=np.int64)]
    if order:
        values.append(x[: order * c].astype(np.uint64))
        widths.append(np.full(order * c, bits, dtype=np.int64))
    q = u >> k
    esc = q >= ESCAPE_Q
    # a plain residual: q ones, a zero, then k bits (one field of q + 1 + k <= 31 bits);
    # an escaped one: 16 ones (one field), then the value in N + 3 bits (a second)
    n = u.size
    v = np.zeros(2 * n, dtype=np.uint64)
    w = np.zeros(2 * n, dtype=np.int64)
    qs = np.where(esc, 0, q).astype(np.uint64)
    unary = ((np.uint64(1) << qs) - np.uint64(1)) << np.uint64(1)
    low = u.astype(np.uint64) & np.uint64((1 << k) - 1)
    v[0::2] = np.where(esc, np.uint64(0xFFFF), (unary << np.uint64(k)) | low)
    w[0::2] = np.where(esc, ESCAPE_Q, q + 1 + k)
    v[1::2] = np.where(esc, u.astype(np.uint64), np.uint64(0))
    w[1::2] = np.where(esc, bits + ESCAPE_EXTRA_BITS, 0)
    values.append(v)
    widths.append(w)
    return values, widths


def encode_lossless(
    codes: np.ndarray, bits: int, *, block_samples: int = BLOCK_SAMPLES, channels: int = 1
) -> LosslessStream:
    """Compress a code stream without loss.

    Parameters
    ----------
    codes : numpy.ndarray
        The stream's codes, 0 .. 2**bits - 1 (one channel, or channels interleaved as
        the stream plays them).
    bits : int
        Code width N, 1..16.
    block_samples : int
        Codes a block holds (each is decoded on its own); a multiple of `channels`.
    channels : int
        1, or 2 for two channels interleaved (left, right, left, ...): each code is
        predicted from its own channel's.

    Returns
    -------
    LosslessStream

    Examples
    --------
    >>> s = encode_lossless(np.array([128, 130, 133, 135] * 64), 8)
    >>> bool(np.array_equal(decode_lossless(s), [128, 130, 133, 135] * 64))
    True
    """
    x = np.asarray(codes, dtype=np.int64)
    if not 1 <= bits <= 16:
        raise OptionError(f"lossless streams take 1..16-bit codes, got {bits}", field="bits")
    if x.ndim != 1:
        raise OptionError("expected one row of codes", field="codes")
    if x.size and (int(x.min()) < 0 or int(x.max()) >= 1 << bits):
        raise OptionError(f"codes must lie in 0..{(1 << bits) - 1}", field="codes")
    if channels not in (1, 2) or x.size % channels:
        raise OptionError(f"expected 1 or 2 whole channels, got {channels}", field="channels")
    if block_samples < 3 or block_samples % channels:
        raise OptionError(
            f"blocks need at least 3 codes, whole frames, got {block_samples}", field="block"
        )
    vals: list[np.ndarray] = []
    wids: list[np.ndarray] = []
    starts: list[int] = []
    pos = 0
    for b in range(0, x.size, block_samples):
        starts.append(pos // 32)
        v, w = _fields(x[b : b + block_samples], bits, channels)
        n = int(sum(int(a.sum()) for a in w))
        pad = -(pos + n) % 32
        vals += [*v, np.zeros(1, dtype=np.uint64)]
        wids += [*w, np.array([pad], dtype=np.int64)]
        pos += n + pad
    words = _pack_fields(
        np.concatenate(vals) if vals else np.zeros(0, np.uint64),
        np.concatenate(wids) if wids else np.zeros(0, np.int64),
        pos // 32,
    )
    return LosslessStream(
        bits, int(x.size), block_samples, words, np.array(starts, dtype=np.uint32), channels
    )


def _pack_fields(values: np.ndarray, widths: np.ndarray, n_words: int) -> np.ndarray:
    """Fields of up to 32 bits, MSB first, into uint32 words."""
    keep = widths > 0
    values, widths = values[keep], widths[keep]
    ends = np.cumsum(widths)
    starts = ends - widths
    word = starts // 32
    shift = (64 - (starts % 32) - widths).astype(np.uint64)
    window = values << shift  # the field within words `word` and `word + 1`
    out = np.zeros(n_words + 1, dtype=np.uint64)
    np.add.at(out, word, window >> np.uint64(32))  # fields never share a bit: add is or
    np.add.at(out, word + 1, window & np.uint64(0xFFFFFFFF))
    return out[:n_words].astype(np.uint32)


class _Bits:
    """Reads a word stream MSB first (the reference decoder's reader)."""

    def __init__(self, words: np.ndarray, word: int) -> None:
        self.words = [int(w) for w in words]
        self.pos = 32 * word

    def read(self, n: int) -> int:
        v = 0
        for _ in range(n):
            if self.pos >> 5 >= len(self.words):
                raise OptionError("the bit stream ends inside a block", field="compression")
            w = self.words[self.pos >> 5]
            v = (v << 1) | ((w >> (31 - (self.pos & 31))) & 1)
            self.pos += 1
        return v


#: Streams up to this many codes are decoded by the interpreter version of the kernel
#: (about 2 us a code); longer ones by numba's (a few ns a code, after half a second to
#: load a cached kernel), as ``preview`` of a long stream would otherwise take minutes.
LOSSLESS_PLAIN_MAX_SAMPLES = 200_000


def decode_lossless(stream: LosslessStream, *, first_block: int = 0) -> np.ndarray:
    """Decode a :class:`LosslessStream`.

    The fast decoder (``_kernels.lossless_decode_*``, numba for long streams), held to
    :func:`decode_lossless_reference` by the tests.

    Parameters
    ----------
    stream : LosslessStream
    first_block : int
        Start at this block (blocks decode on their own).

    Returns
    -------
    numpy.ndarray
        The codes from that block to the end, int64.

    Raises
    ------
    OptionError
        For a damaged stream: it ends inside a block, or gives a code outside the width.
    """
    n = max(0, stream.samples - first_block * stream.block_samples)
    out = np.zeros(n, dtype=np.int64)
    decode = kernel("lossless_decode", n, LOSSLESS_PLAIN_MAX_SAMPLES)
    bad = decode(
        np.ascontiguousarray(stream.words, dtype=np.uint32),
        np.ascontiguousarray(stream.block_words, dtype=np.uint32),
        int(stream.bits),
        int(stream.samples),
        int(stream.block_samples),
        int(stream.channels),
        int(first_block),
        out,
    )
    if bad:
        raise OptionError(
            f"block {bad - 1} is damaged: the bit stream ends inside it, or it decodes to a "
            f"code outside 0..{(1 << stream.bits) - 1}",
            field="compression",
        )
    return out


def decode_lossless_reference(stream: LosslessStream, *, first_block: int = 0) -> np.ndarray:
    """:func:`decode_lossless` bit by bit, as the format reads (plain Python): the reference.

    The same arguments, codes and refusals (its messages say more: where the stream ends,
    the code out of range).
    """
    out: list[int] = []
    nb = int(stream.block_words.size)
    for b in range(first_block, nb):
        r = _Bits(stream.words, int(stream.block_words[b]))
        n = min(stream.block_samples, stream.samples - b * stream.block_samples)
        order, k = r.read(2), r.read(4)
        hist: list[int] = []
        for i in range(n):
            if i < order * stream.channels:
                x = r.read(stream.bits)
            else:
                q = 0
                while q < ESCAPE_Q and r.read(1):
                    q += 1
                esc = q == ESCAPE_Q
                u = r.read(stream.bits + ESCAPE_EXTRA_BITS) if esc else (q << k) | r.read(k)
                e = u >> 1 if u % 2 == 0 else -((u + 1) >> 1)
                c = stream.channels
                if order == 0:
                    pred = 0
                elif order == 1:
                    pred = hist[-c]
                else:
                    pred = 2 * hist[-c] - hist[-2 * c]
                x = pred + e
            if not 0 <= x < 1 << stream.bits:
                raise OptionError(
                    f"block {b} decodes to {x}, outside 0..{(1 << stream.bits) - 1}",
                    field="compression",
                )
            hist.append(x)
            out.append(x)
    return np.array(out, dtype=np.int64)


# -- IMA ADPCM --------------------------------------------------------------------------

#: Step sizes (IMA 1992 recommended practice; 89 entries, 7 .. 32767).
IMA_STEPS = (
    7, 8, 9, 10, 11, 12, 13, 14, 16, 17, 19, 21, 23, 25, 28, 31, 34, 37, 41, 45, 50, 55,
    60, 66, 73, 80, 88, 97, 107, 118, 130, 143, 157, 173, 190, 209, 230, 253, 279, 307,
    337, 371, 408, 449, 494, 544, 598, 658, 724, 796, 876, 963, 1060, 1166, 1282, 1411,
    1552, 1707, 1878, 2066, 2272, 2499, 2749, 3024, 3327, 3660, 4026, 4428, 4871, 5358,
    5894, 6484, 7132, 7845, 8630, 9493, 10442, 11487, 12635, 13899, 15289, 16818, 18500,
    20350, 22385, 24623, 27086, 29794, 32767,
)  # fmt: skip
#: The step sizes as the search kernels take them.
_STEPS64 = np.array(IMA_STEPS, dtype=np.int64)
_STEP_LIST = list(IMA_STEPS)

#: Step-index change by the code's three magnitude bits (IMA 1992).
IMA_INDEX_ADJUST = (-1, -1, -1, -1, 2, 4, 6, 8)

#: Streams up to this many samples are searched by the interpreter version of the
#: trellis (17 us a sample at width 8) rather than numba's (0.6 us a sample, after half a
#: second to load a cached kernel, about two to compile one): measured on the 2-core
#: development machine, the crossing is near 30 000 samples with a warm kernel cache.
ADPCM_PLAIN_MAX_SAMPLES = 30_000

#: Samples an ADPCM block holds; each block starts from a stored predictor and index.
ADPCM_BLOCK_SAMPLES = 1024


@dataclass(frozen=True)
class AdpcmStream:
    """An IMA ADPCM stream of 16-bit samples, in blocks.

    Two channels are coded each on its own (its own predictor and step index) and
    interleaved sample by sample, so a frame's two codes share a byte (left in the low
    nibble).

    Attributes
    ----------
    samples : int
        Samples it holds (all channels: a stereo stream holds two a frame).
    block_samples : int
        Samples a block holds (all but the last; all channels, whole frames).
    headers : numpy.ndarray
        Per block and channel (block 0 left, block 0 right, block 1 left, ...), uint32:
        the predictor at the block's start (signed 16 bits, low half) and the step index
        (bits 16..22).
    nibbles : numpy.ndarray
        The 4-bit codes, uint8, one a sample; a block's first frame is its headers'
        predictors, its codes 0.
    channels : int
        1, or 2 interleaved (left, right, ...).
    """

    samples: int
    block_samples: int
    headers: np.ndarray
    nibbles: np.ndarray
    channels: int = 1

    @property
    def blocks(self) -> int:
        """Blocks it holds."""
        return int(self.headers.size) // self.channels

    @property
    def packed(self) -> np.ndarray:
        """The codes two a byte, the earlier sample in the low nibble (uint8)."""
        n = self.nibbles
        if n.size % 2:
            n = np.concatenate([n, np.zeros(1, np.uint8)])
        return (n[0::2] | (n[1::2] << 4)).astype(np.uint8)

    @property
    def nbytes(self) -> int:
        """Bytes of the packed codes and the block headers."""
        return int(self.packed.size) + 4 * int(self.headers.size)

    def to_bytes(self) -> bytes:
        """The file form: the block headers (little-endian words), then the packed codes."""
        return self.headers.astype("<u4").tobytes() + self.packed.tobytes()


def adpcm_from_bytes(
    data: bytes, *, samples: int, block_samples: int, channels: int = 1
) -> AdpcmStream:
    """Read :meth:`AdpcmStream.to_bytes` back (the sidecar gives the numbers).

    Raises
    ------
    OptionError
        When the data is not that long, or a header's step index is out of range.
    """
    if (
        channels not in (1, 2)
        or block_samples < 2
        or block_samples % channels
        or samples % channels
    ):
        raise OptionError(
            f"expected 1 or 2 channels in blocks of whole frames, got "
            f"{channels} channel(s), {samples} samples in blocks of {block_samples}",
            field="compression",
        )
    blocks = -(-samples // block_samples) if samples else 0
    need = 4 * blocks * channels + (samples + 1) // 2
    if samples < 0 or len(data) != need:
        raise OptionError(
            f"expected {blocks * channels} block headers and {(samples + 1) // 2} bytes of "
            f"codes ({need} bytes), got {len(data)}",
            field="compression",
        )
    heads = 4 * blocks * channels
    headers = np.frombuffer(data[:heads], dtype="<u4").astype(np.uint32)
    if np.any((headers >> 16) > 88):
        raise OptionError("a block header's step index is above 88", field="compression")
    raw = np.frombuffer(data[heads:], dtype=np.uint8)
    nibbles = np.empty(2 * raw.size, dtype=np.uint8)
    nibbles[0::2], nibbles[1::2] = raw & 15, raw >> 4
    return AdpcmStream(samples, block_samples, headers, nibbles[:samples], channels)


def _ima_step(pred: int, index: int, code: int) -> tuple[int, int]:
    """One IMA decoding step: the new (predictor, index)."""
    return ima_step(pred, index, code, _STEP_LIST)


def _greedy_code(pred: int, index: int, target: int) -> int:
    """The IMA encoder's own choice of code (the recommended practice's quantiser)."""
    return ima_greedy(pred, index, target, _STEP_LIST)


def _start_index(x: np.ndarray) -> int:
    """A step index suited to a block's first differences."""
    d = int(np.max(np.abs(np.diff(x[:16])))) if x.size > 1 else 0
    for i, s in enumerate(IMA_STEPS):
        if s >= d // 2:
            return i
    return 88


def encode_adpcm(
    samples: np.ndarray,
    *,
    block_samples: int = ADPCM_BLOCK_SAMPLES,
    search_width: int = 8,
    channels: int = 1,
) -> AdpcmStream:
    """Encode 16-bit samples as IMA ADPCM, searching for the codes.

    Parameters
    ----------
    samples : numpy.ndarray
        Signed 16-bit sample values: one channel, or two interleaved (left, right, ...).
    block_samples : int
        Samples a block holds (all channels, whole frames).
    search_width : int
        Paths the trellis keeps per sample; 1 gives the recommended practice's greedy
        encoder.
    channels : {1, 2}
        Channels interleaved in `samples`; each is coded on its own.

    Returns
    -------
    AdpcmStream

    Examples
    --------
    >>> s = encode_adpcm(np.array([0, 100, 200, 300, -5, 5, -5, 5]), block_samples=4,
    ...                  channels=2)
    >>> s.blocks, s.headers.size, s.nbytes
    (2, 4, 20)
    """
    x = np.asarray(samples, dtype=np.int64)
    if x.ndim != 1 or (x.size and (int(x.min()) < -32768 or int(x.max()) > 32767)):
        raise OptionError("expected one row of signed 16-bit samples", field="samples")
    if search_width < 1:
        raise OptionError(f"search_width must be >= 1, got {search_width}", field="search")
    if channels not in (1, 2) or x.size % channels:
        raise OptionError(
            f"expected 1 or 2 channels of whole frames, got {channels} for {x.size} samples",
            field="channels",
        )
    if block_samples < 2 or block_samples % channels:
        raise OptionError(
            f"a block holds 2 or more samples, whole frames, got {block_samples}", field="block"
        )
    headers: list[int] = []
    codes = np.zeros(x.size, dtype=np.uint8)
    search = kernel("adpcm_trellis", int(x.size), ADPCM_PLAIN_MAX_SAMPLES)
    for b in range(0, x.size, block_samples):
        for c in range(channels):
            blk = x[b + c : b + block_samples : channels]
            pred, index = int(blk[0]), _start_index(blk)
            headers.append((pred & 0xFFFF) | index << 16)
            body = blk[1:]
            if search_width == 1:
                got = []
                for t in body.tolist():
                    g = _greedy_code(pred, index, t)
                    pred, index = _ima_step(pred, index, g)
                    got.append(g)
                found = np.array(got, dtype=np.uint8)
            else:
                found = np.zeros(body.size, dtype=np.uint8)
                search(np.ascontiguousarray(body), pred, index, search_width, _STEPS64, found)
            # the block's first frame is its headers' predictors (codes 0)
            codes[b + c + channels : b + block_samples : channels] = found
    return AdpcmStream(
        int(x.size), block_samples, np.array(headers, dtype=np.uint32), codes, channels
    )


def decode_adpcm(stream: AdpcmStream) -> np.ndarray:
    """Decode an :class:`AdpcmStream` to signed 16-bit samples (int64), the reference.

    Two channels come back interleaved, as they were coded.
    """
    ch = stream.channels
    out = np.zeros(stream.samples, dtype=np.int64)
    heads = stream.headers.tolist()
    for b in range(stream.blocks):
        lo = b * stream.block_samples
        hi = min(stream.samples, lo + stream.block_samples)
        for c in range(ch):
            h = heads[b * ch + c]
            pred = (h & 0xFFFF) - ((h & 0x8000) << 1)
            index = (h >> 16) & 0x7F
            got = [pred]
            for code in stream.nibbles[lo + c + ch : hi : ch].tolist():
                pred, index = _ima_step(pred, index, code)
                got.append(pred)
            out[lo + c : hi : ch] = got
    return out


def decode_stored(data: bytes, compression: Mapping[str, Any], *, bits: int) -> np.ndarray:
    """Decode a compressed ``.bin`` as its sidecar's ``stats.compression`` describes it.

    Parameters
    ----------
    data : bytes
        The file's bytes.
    compression : mapping
        The sidecar's ``stats.compression`` (``kind``, ``samples``, ``block_samples``,
        ``blocks``, ``channels``, and for lossless ``bits``).
    bits : int
        Code width when the record does not give it (bundles made before it did).

    Returns
    -------
    numpy.ndarray
        int64: a lossless stream's codes, an ADPCM stream's signed 16-bit samples; two
        channels interleaved (left, right, ...).

    Raises
    ------
    OptionError
        For an unknown kind, or data that is not the stream described.
    """
    kind = compression.get("kind")
    channels = int(compression.get("channels", 1))
    samples, block = int(compression["samples"]), int(compression["block_samples"])
    if kind == "adpcm":
        return decode_adpcm(
            adpcm_from_bytes(data, samples=samples, block_samples=block, channels=channels)
        )
    if kind != "lossless":
        raise OptionError(f"unknown compression {kind!r}", field="compression")
    stream = lossless_from_bytes(
        data,
        bits=int(compression.get("bits", bits)),
        samples=samples,
        block_samples=block,
        blocks=int(compression["blocks"]),
        channels=channels,
    )
    return decode_lossless(stream)


def mono_frames(samples: np.ndarray) -> np.ndarray:
    """Signed 16-bit samples as the words of mono 16-bit I2S frames (uint32).

    Each sample in both halves, as the players send a decoded ADPCM stream.

    Examples
    --------
    >>> [hex(w) for w in mono_frames(np.array([1, -2]))]
    ['0x10001', '0xfffefffe']
    """
    s = np.asarray(samples, dtype=np.int64) & 0xFFFF
    return ((s << 16) | s).astype(np.uint32)


def sinad_db(reference: np.ndarray, decoded: np.ndarray) -> float:
    """SINAD of `decoded` against `reference`, dB: reference power over error power."""
    r = np.asarray(reference, dtype=np.float64)
    e = np.asarray(decoded, dtype=np.float64) - r
    pe = math.fsum((e * e).tolist())
    pr = math.fsum(((r - math.fsum(r.tolist()) / max(1, r.size)) ** 2).tolist())
    return math.inf if pe == 0 else 10.0 * math.log10(pr / pe)
