"""Serial inner loops (private).

Each loop is written once as plain Python operating on numpy arrays.  The
plain function (``*_ref``) is the reference; :func:`compiled` returns the same
function compiled by numba (imported only when a kernel is first needed, so the
command line starts fast).  A third version (``*_py``) does the same arithmetic
on Python lists, for short blocks where loading numba would cost more than the
loop.  Tests run all of them on seeded inputs and require bit-identical results.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any, cast

import numpy as np

__all__ = [
    "PLAIN_MAX_SAMPLES",
    "adpcm_trellis_py",
    "adpcm_trellis_ref",
    "compiled",
    "ima_greedy",
    "ima_step",
    "kernel",
    "levels_quantize_py",
    "levels_quantize_ref",
    "lossless_decode_py",
    "lossless_decode_ref",
    "shape_quantize_py",
    "shape_quantize_ref",
]

#: Blocks up to this many samples run the interpreter version (``*_py``) unless numba is
#: already loaded: importing numba and loading a cached kernel costs about half a
#: second, and compiling one with an empty kernel cache about two; the interpreter
#: version takes about 3 us a sample at order 8, so it wins below about 150 000
#: samples with a warm cache and below about 650 000 with a cold one (measured on the
#: 2-core development machine; ``bench/quantize.py``); the limit sits between the two,
#: since fresh build containers and CI runners start cold.
PLAIN_MAX_SAMPLES = 300_000


def shape_quantize_ref(
    v: np.ndarray,
    d: np.ndarray,
    b: np.ndarray,
    a: np.ndarray,
    lo: int,
    hi: int,
    e_hist: np.ndarray,
    f_hist: np.ndarray,
    out: np.ndarray,
) -> tuple[int, int]:
    """Error-feedback quantiser with in-loop dither, plain-Python reference.

    The noise transfer function is ``NTF(z) = B(z) / A(z)`` with
    ``B = 1 + sum b[k] z^-(k+1)`` and ``A = 1 + sum a[k] z^-(k+1)`` (FIR when
    `a` is all zero).  Each sample:

    * feedback ``f[n] = sum (a[k] - b[k]) e[n-1-k] - sum a[k] f[n-1-k]``, i.e.
      ``F = (1 - NTF) E``;
    * ``u = v[n] - f[n]``; ``y = clip(floor(u + d[n] + 0.5), lo, hi)``;
    * total error ``e[n] = y - u``, so ``Y = V + NTF E`` (Lipshitz, Vanderkooy &
      Wannamaker 1991 convention: NTF = 1 - H).

    The dither ``d`` is added inside the loop, after the feedback.  A sample
    that clips counts as an overload and resets the filter state, so clipping
    can never start a limit cycle or a runaway.

    Parameters
    ----------
    v : numpy.ndarray
        float64 input in LSB (code scale).
    d : numpy.ndarray
        float64 dither in LSB, one value per sample (zeros for none).
    b, a : numpy.ndarray
        float64 NTF numerator and denominator coefficients after the leading 1,
        same length K (0..16).
    lo, hi : int
        Code range.
    e_hist, f_hist : numpy.ndarray
        float64[K] past errors and feedback values (newest first), updated in
        place so a long stream can be processed in blocks.
    out : numpy.ndarray
        int64 output codes, same length as `v`.

    Returns
    -------
    (int, int)
        Overloads (clipped samples) and state resets.
    """
    order = b.shape[0]
    overloads = 0
    resets = 0
    for n in range(v.shape[0]):
        fb = 0.0
        for k in range(order):
            fb += (a[k] - b[k]) * e_hist[k] - a[k] * f_hist[k]
        u = v[n] - fb
        q = math.floor(u + d[n] + 0.5)
        clipped = False
        if q < lo:
            q = lo
            clipped = True
        elif q > hi:
            q = hi
            clipped = True
        if clipped:
            overloads += 1
            if order > 0:
                resets += 1
                for k in range(order):
                    e_hist[k] = 0.0
                    f_hist[k] = 0.0
        elif order > 0:
            for k in range(order - 1, 0, -1):
                e_hist[k] = e_hist[k - 1]
                f_hist[k] = f_hist[k - 1]
            e_hist[0] = q - u
            f_hist[0] = fb
        out[n] = q
    return overloads, resets


def levels_quantize_ref(
    v: np.ndarray,
    d: np.ndarray,
    lv: np.ndarray,
    lc: np.ndarray,
    b: np.ndarray,
    a: np.ndarray,
    e_hist: np.ndarray,
    f_hist: np.ndarray,
    out: np.ndarray,
) -> tuple[int, int]:
    """Error-feedback quantiser against true code levels, plain-Python reference.

    Like :func:`shape_quantize_ref`, but the output is the code whose *true*
    level (`lv`, sorted ascending, in LSB units; `lc` the matching codes) is
    nearest the dithered target, and the error fed back is that level minus the
    target, so ladder errors leave as shaped noise rather than distortion.
    Non-monotonic ladders need nothing special: the search runs over sorted
    levels.  A target more than half an LSB beyond the lowest or highest level
    counts as an overload and resets the filter state.
    """
    order = b.shape[0]
    m = lv.shape[0]
    overloads = 0
    resets = 0
    for n in range(v.shape[0]):
        fb = 0.0
        for k in range(order):
            fb += (a[k] - b[k]) * e_hist[k] - a[k] * f_hist[k]
        u = v[n] - fb
        target = u + d[n]
        lo = 0
        hi = m  # first index with lv[idx] >= target
        while lo < hi:
            mid = (lo + hi) // 2
            if lv[mid] < target:
                lo = mid + 1
            else:
                hi = mid
        if lo == 0:
            j = 0
        elif lo == m:
            j = m - 1
        elif target - lv[lo - 1] < lv[lo] - target:  # a tie goes up, as floor(t + 0.5)
            j = lo - 1
        else:
            j = lo
        clipped = target < lv[0] - 0.5 or target > lv[m - 1] + 0.5
        if clipped:
            overloads += 1
            if order > 0:
                resets += 1
                for k in range(order):
                    e_hist[k] = 0.0
                    f_hist[k] = 0.0
        elif order > 0:
            for k in range(order - 1, 0, -1):
                e_hist[k] = e_hist[k - 1]
                f_hist[k] = f_hist[k - 1]
            e_hist[0] = lv[j] - u
            f_hist[0] = fb
        out[n] = lc[j]
    return overloads, resets


def shape_quantize_py(
    v: np.ndarray,
    d: np.ndarray,
    b: np.ndarray,
    a: np.ndarray,
    lo: int,
    hi: int,
    e_hist: np.ndarray,
    f_hist: np.ndarray,
    out: np.ndarray,
) -> tuple[int, int]:
    """:func:`shape_quantize_ref` written for the CPython interpreter (short blocks).

    The same operations in the same order on Python floats (so the same bits, tested),
    but over lists instead of numpy scalars, which makes it several times faster than
    the reference when numba is not loaded.
    """
    order = b.shape[0]
    ab = [float(a[k]) - float(b[k]) for k in range(order)]
    al = [float(x) for x in a]
    eh = [float(x) for x in e_hist]
    fh = [float(x) for x in f_hist]
    res = [0] * v.shape[0]
    floor = math.floor
    overloads = 0
    resets = 0
    for n, (x, dn) in enumerate(zip(v.tolist(), d.tolist(), strict=True)):
        fb = 0.0
        for ck, ak, ek, fk in zip(ab, al, eh, fh, strict=True):
            fb += ck * ek - ak * fk
        u = x - fb
        q = floor(u + dn + 0.5)
        if q < lo or q > hi:
            q = lo if q < lo else hi
            overloads += 1
            if order > 0:
                resets += 1
                eh = [0.0] * order
                fh = [0.0] * order
        elif order > 0:
            eh.insert(0, q - u)
            eh.pop()
            fh.insert(0, fb)
            fh.pop()
        res[n] = q
    out[:] = res
    e_hist[:] = eh
    f_hist[:] = fh
    return overloads, resets


def levels_quantize_py(
    v: np.ndarray,
    d: np.ndarray,
    lv: np.ndarray,
    lc: np.ndarray,
    b: np.ndarray,
    a: np.ndarray,
    e_hist: np.ndarray,
    f_hist: np.ndarray,
    out: np.ndarray,
) -> tuple[int, int]:
    """:func:`levels_quantize_ref` written for the CPython interpreter (short blocks).

    The same arithmetic on Python floats over lists, with the level search done by
    :func:`bisect.bisect_left` (the same first index at or above the target), so the
    same bits (tested).
    """
    from bisect import bisect_left

    order = b.shape[0]
    levels = lv.tolist()
    codes = lc.tolist()
    m = len(levels)
    ab = [float(a[k]) - float(b[k]) for k in range(order)]
    al = [float(x) for x in a]
    eh = [float(x) for x in e_hist]
    fh = [float(x) for x in f_hist]
    res = [0] * v.shape[0]
    overloads = 0
    resets = 0
    for n, (x, dn) in enumerate(zip(v.tolist(), d.tolist(), strict=True)):
        fb = 0.0
        for ck, ak, ek, fk in zip(ab, al, eh, fh, strict=True):
            fb += ck * ek - ak * fk
        u = x - fb
        target = u + dn
        i = bisect_left(levels, target)
        if i == 0:
            j = 0
        elif i == m:
            j = m - 1
        elif target - levels[i - 1] < levels[i] - target:
            j = i - 1
        else:
            j = i
        if target < levels[0] - 0.5 or target > levels[m - 1] + 0.5:
            overloads += 1
            if order > 0:
                resets += 1
                eh = [0.0] * order
                fh = [0.0] * order
        elif order > 0:
            eh.insert(0, levels[j] - u)
            eh.pop()
            fh.insert(0, fb)
            fh.pop()
        res[n] = codes[j]
    out[:] = res
    e_hist[:] = eh
    f_hist[:] = fh
    return overloads, resets


_COMPILED: dict[str, Callable[..., Any]] = {}


def kernel(name: str, samples: int, plain_max: int = PLAIN_MAX_SAMPLES) -> Callable[..., Any]:
    """The kernel called `name` for a job of `samples`: compiled, or for the interpreter.

    The interpreter version (``name + "_py"``) serves jobs of at most `plain_max`
    samples (default :data:`PLAIN_MAX_SAMPLES`) while numba is not yet loaded; all
    versions give the same bits (tested), so the choice is only about time.
    """
    if name in _COMPILED or samples > plain_max:
        return compiled(name)
    return cast("Callable[..., Any]", globals()[name + "_py"])


def compiled(name: str) -> Callable[..., Any]:
    """Return the numba-compiled version of the kernel called `name`.

    Falls back to the reference when numba is not installed.
    """
    if name not in _COMPILED:
        ref = globals()[name + "_ref"]
        try:
            import numba
        except ImportError:  # pragma: no cover - numba is a declared dependency
            _COMPILED[name] = ref
        else:
            _COMPILED[name] = numba.njit(cache=True, nogil=True)(ref)
    return _COMPILED[name]


# -- IMA ADPCM: the encoder's trellis search (ladderpack.compress) ---------------------
#
# The step and index tables are the compress module's (IMA 1992); they are passed in, so
# this module stays free of imports. Paths that reach the same (predictor, index) state
# are merged keeping the smaller squared error (the first met on a tie), then the `width`
# best are kept in a stable order by error: every version gives the same codes.


def adpcm_trellis_py(
    x: np.ndarray, pred0: int, index0: int, width: int, steps: np.ndarray, out: np.ndarray
) -> None:
    """The trellis search on Python lists and a dict (short blocks; the reference's twin)."""
    table = [int(v) for v in steps]
    paths: list[tuple[int, int, int, int]] = [(0, int(pred0), int(index0), -1)]
    trail: list[tuple[int, int]] = []
    for target in (int(v) for v in x):
        seen: dict[tuple[int, int], tuple[int, int, int, int, int]] = {}
        for err, pred, index, back in paths:
            g = ima_greedy(pred, index, target, table)
            for code in (g, g ^ 8, (g & 8) | max(0, (g & 7) - 1), (g & 8) | min(7, (g & 7) + 1)):
                p, i = ima_step(pred, index, code, table)
                e = err + (p - target) * (p - target)
                old = seen.get((p, i))
                if old is None or e < old[0]:
                    seen[(p, i)] = (e, p, i, back, code)
        paths = []
        for e, p, i, back, code in sorted(seen.values(), key=lambda t: t[0])[:width]:
            trail.append((code, back))
            paths.append((e, p, i, len(trail) - 1))
    at, k = (paths[0][3] if paths else -1), len(x) - 1
    while at >= 0:
        code, at = trail[at]
        out[k] = code
        k -= 1


def ima_step(pred: int, index: int, code: int, table: list[int]) -> tuple[int, int]:
    """One IMA ADPCM decoding step (IMA 1992): the new (predictor, step index)."""
    step = table[index]
    diff = step >> 3
    if code & 4:
        diff += step
    if code & 2:
        diff += step >> 1
    if code & 1:
        diff += step >> 2
    pred = pred - diff if code & 8 else pred + diff
    pred = -32768 if pred < -32768 else 32767 if pred > 32767 else pred
    index += (-1, -1, -1, -1, 2, 4, 6, 8)[code & 7]
    return pred, 0 if index < 0 else 88 if index > 88 else index


def ima_greedy(pred: int, index: int, target: int, table: list[int]) -> int:
    """The recommended practice's encoder: the code closest to `target`, bit by bit."""
    step = table[index]
    diff = target - pred
    code = 8 if diff < 0 else 0
    diff = abs(diff)
    if diff >= step:
        code |= 4
        diff -= step
    step >>= 1
    if diff >= step:
        code |= 2
        diff -= step
    step >>= 1
    if diff >= step:
        code |= 1
    return code


def adpcm_trellis_ref(
    x: np.ndarray, pred0: int, index0: int, width: int, steps: np.ndarray, out: np.ndarray
) -> None:
    """The trellis search on fixed arrays (numba compiles this one; plain numpy too).

    Parameters
    ----------
    x : numpy.ndarray
        int64 target samples of a block (after its first sample).
    pred0, index0 : int
        The decoder's predictor and step index before them.
    width : int
        Paths kept per sample.
    steps : numpy.ndarray
        int64, the 89 IMA step sizes.
    out : numpy.ndarray
        uint8, receives one code per sample.
    """
    n = x.shape[0]
    cap = 4 * width
    p_err = np.zeros(width, np.int64)
    p_pred = np.zeros(width, np.int64)
    p_index = np.zeros(width, np.int64)
    p_back = np.zeros(width, np.int64)
    c_err = np.zeros(cap, np.int64)
    c_pred = np.zeros(cap, np.int64)
    c_index = np.zeros(cap, np.int64)
    c_back = np.zeros(cap, np.int64)
    c_code = np.zeros(cap, np.int64)
    order = np.zeros(cap, np.int64)
    trail_code = np.zeros(max(1, n * width), np.int64)
    trail_back = np.zeros(max(1, n * width), np.int64)
    p_pred[0] = pred0
    p_index[0] = index0
    p_back[0] = -1
    alive = 1
    kept_steps = 0
    for t in range(n):
        target = x[t]
        nc = 0
        for j in range(alive):
            pred = p_pred[j]
            index = p_index[j]
            step = steps[index]
            diff = target - pred
            g = 0
            if diff < 0:
                g = 8
                diff = -diff
            s = step
            if diff >= s:
                g |= 4
                diff -= s
            s >>= 1
            if diff >= s:
                g |= 2
                diff -= s
            s >>= 1
            if diff >= s:
                g |= 1
            for ci in range(4):
                if ci == 0:
                    code = g
                elif ci == 1:
                    code = g ^ 8
                elif ci == 2:
                    m = (g & 7) - 1
                    code = (g & 8) | (m if m > 0 else 0)
                else:
                    m = (g & 7) + 1
                    code = (g & 8) | (m if m < 7 else 7)
                d = step >> 3
                if code & 4:
                    d += step
                if code & 2:
                    d += step >> 1
                if code & 1:
                    d += step >> 2
                p = pred - d if code & 8 else pred + d
                if p < -32768:
                    p = -32768
                elif p > 32767:
                    p = 32767
                m = code & 7
                i = index - 1 if m < 4 else index + 2 * (m - 3)
                if i < 0:
                    i = 0
                elif i > 88:
                    i = 88
                e = p_err[j] + (p - target) * (p - target)
                found = -1
                for q in range(nc):
                    if c_pred[q] == p and c_index[q] == i:
                        found = q
                        break
                if found < 0:
                    c_err[nc] = e
                    c_pred[nc] = p
                    c_index[nc] = i
                    c_back[nc] = p_back[j]
                    c_code[nc] = code
                    nc += 1
                elif e < c_err[found]:
                    c_err[found] = e
                    c_back[found] = p_back[j]
                    c_code[found] = code
        for q in range(nc):  # a stable insertion sort of the candidates by error
            order[q] = q
            r = q
            while r > 0 and c_err[order[r - 1]] > c_err[q]:
                order[r] = order[r - 1]
                r -= 1
            order[r] = q
        alive = nc if nc < width else width
        for r in range(alive):
            q = order[r]
            trail_code[kept_steps] = c_code[q]
            trail_back[kept_steps] = c_back[q]
            p_err[r] = c_err[q]
            p_pred[r] = c_pred[q]
            p_index[r] = c_index[q]
            p_back[r] = kept_steps
            kept_steps += 1
    at = p_back[0] if n else -1
    k = n - 1
    while at >= 0:
        out[k] = trail_code[at]
        at = trail_back[at]
        k -= 1


# -- lossless decoding (ladderpack.compress) ---------------------------------------------
#
# The format is compress.py's: per block a 2-bit order and a 4-bit Rice parameter, the
# first `order` codes of each channel verbatim, then per code the zigzag residual's
# quotient in unary (16 ones: an escape, the value in bits + 3 bits), a zero and k low
# bits; bits MSB first through 32-bit words, every block starting on a word. These
# versions read whole fields at once; compress.decode_lossless reads bit by bit (the
# specification's twin) and the tests hold all three to the same codes and the same
# refusals.

#: Quotients from this value on are escaped (compress.ESCAPE_Q).
_ESCAPE_Q = 16
#: Extra width of an escaped value (compress.ESCAPE_EXTRA_BITS).
_ESCAPE_EXTRA = 3


def lossless_decode_ref(
    words: np.ndarray,
    block_words: np.ndarray,
    bits: int,
    samples: int,
    block_samples: int,
    channels: int,
    first_block: int,
    out: np.ndarray,
) -> int:
    """Decode a lossless stream's codes from `first_block` on into `out` (int64).

    Returns 0, or the block number plus one where the stream is damaged (it ends inside
    the block, or a code falls outside 0 .. 2**bits - 1); `out` then holds the codes
    before it.
    """
    nwords = len(words)
    nblocks = len(block_words)
    limit = (1 << bits) - 1
    at = 0
    for b in range(first_block, nblocks):
        pos = int(block_words[b]) * 32
        end = nwords * 32
        n = min(block_samples, samples - b * block_samples)
        if pos + 6 > end:
            return b + 1
        head = 0
        for _ in range(6):
            head = (head << 1) | ((int(words[pos >> 5]) >> (31 - (pos & 31))) & 1)
            pos += 1
        order = head >> 4
        k = head & 15
        h1 = [0, 0]
        h2 = [0, 0]
        for i in range(n):
            c = i % channels
            if i < order * channels:
                if pos + bits > end:
                    return b + 1
                x = 0
                for _ in range(bits):
                    x = (x << 1) | ((int(words[pos >> 5]) >> (31 - (pos & 31))) & 1)
                    pos += 1
            else:
                q = 0
                while q < _ESCAPE_Q:
                    if pos >= end:
                        return b + 1
                    bit = (int(words[pos >> 5]) >> (31 - (pos & 31))) & 1
                    pos += 1
                    if bit == 0:
                        break
                    q += 1
                width = bits + _ESCAPE_EXTRA if q == _ESCAPE_Q else k
                if pos + width > end:
                    return b + 1
                v = 0
                for _ in range(width):
                    v = (v << 1) | ((int(words[pos >> 5]) >> (31 - (pos & 31))) & 1)
                    pos += 1
                u = v if q == _ESCAPE_Q else (q << k) | v
                e = u >> 1 if u % 2 == 0 else -((u + 1) >> 1)
                if order == 0:
                    x = e
                elif order == 1:
                    x = h1[c] + e
                else:
                    x = 2 * h1[c] - h2[c] + e
            if x < 0 or x > limit:
                return b + 1
            h2[c] = h1[c]
            h1[c] = x
            out[at] = x
            at += 1
    return 0


def lossless_decode_py(
    words: np.ndarray,
    block_words: np.ndarray,
    bits: int,
    samples: int,
    block_samples: int,
    channels: int,
    first_block: int,
    out: np.ndarray,
) -> int:
    """:func:`lossless_decode_ref` on a Python list of the words (short streams)."""
    return lossless_decode_ref(
        cast("np.ndarray", words.tolist()),
        block_words,
        bits,
        samples,
        block_samples,
        channels,
        first_block,
        out,
    )
