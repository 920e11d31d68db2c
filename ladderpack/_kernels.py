"""Serial inner loops (private).

Each loop is written once as plain Python operating on numpy arrays.  The
plain function is the reference; :func:`compiled` returns the same function
compiled by numba (imported only when a kernel is first needed, so the
command line starts fast).  Tests run both on seeded inputs and require
bit-identical results.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np

__all__ = [
    "DITHER_DRAWS",
    "compiled",
    "levels_quantize_ref",
    "seed_state",
    "shape_quantize_ref",
    "sinc_resample_ref",
]


#: Dither draws per sample for each kind: none 0, RPDF 1, TPDF 2.
DITHER_DRAWS = {"none": 0, "rpdf": 1, "tpdf": 2}

_M32 = 0xFFFFFFFF
_INV24 = 1.0 / (1 << 24)


def seed_state(seed: int) -> np.ndarray:
    """Four 32-bit lanes of xorshift128 state from an integer seed (splitmix64 mixing).

    The state is never all zero, so the generator's period is 2**128 - 1.
    """
    mask64 = (1 << 64) - 1
    z = (int(seed) * 0x9E3779B97F4A7C15 + 0x632BE59BD9B4E019) & mask64
    lanes = []
    for _ in range(2):
        z = (z + 0x9E3779B97F4A7C15) & mask64
        x = z
        x = ((x ^ (x >> 30)) * 0xBF58476D1CE4E5B9) & mask64
        x = ((x ^ (x >> 27)) * 0x94D049BB133111EB) & mask64
        x ^= x >> 31
        lanes += [x & _M32, x >> 32]
    if not any(lanes):
        lanes[0] = 1
    return np.array(lanes, dtype=np.int64)


def shape_quantize_ref(
    v: np.ndarray,
    b: np.ndarray,
    a: np.ndarray,
    draws: int,
    rng: np.ndarray,
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
    * ``u = v[n] - f[n]``; ``y = clip(floor(u + d + 0.5), lo, hi)``;
    * total error ``e[n] = y - u``, so ``Y = V + NTF E`` (Lipshitz, Vanderkooy &
      Wannamaker 1991 convention: NTF = 1 - H).

    Dither ``d`` comes from an xorshift128 generator (Marsaglia, "Xorshift
    RNGs", J. Stat. Software 8(14), 2003) held in `rng`: RPDF is one 24-bit
    uniform draw minus 1/2, TPDF the difference of two draws.  A sample that
    clips counts as an overload and resets the filter state, so clipping can
    never start a limit cycle or a runaway.

    Parameters
    ----------
    v : numpy.ndarray
        float64 input in LSB (code scale).
    b, a : numpy.ndarray
        float64 NTF numerator and denominator coefficients after the leading 1,
        same length K (0..16).
    draws : int
        Dither draws per sample: 0 none, 1 RPDF, 2 TPDF.
    rng : numpy.ndarray
        int64[4] generator state (32-bit lanes), updated in place.
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
    s0 = rng[0]
    s1 = rng[1]
    s2 = rng[2]
    s3 = rng[3]
    overloads = 0
    resets = 0
    for n in range(v.shape[0]):
        d = 0.0
        for k in range(draws):
            t = s0 ^ ((s0 << 11) & 0xFFFFFFFF)
            s0 = s1
            s1 = s2
            s2 = s3
            s3 = s3 ^ (s3 >> 19) ^ t ^ (t >> 8)
            r = (s3 >> 8) * _INV24
            if k == 0:
                d += r
            else:
                d -= r
        if draws == 1:
            d -= 0.5
        fb = 0.0
        for k in range(order):
            fb += (a[k] - b[k]) * e_hist[k] - a[k] * f_hist[k]
        u = v[n] - fb
        q = math.floor(u + d + 0.5)
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
    rng[0] = s0
    rng[1] = s1
    rng[2] = s2
    rng[3] = s3
    return overloads, resets


def levels_quantize_ref(
    v: np.ndarray,
    lv: np.ndarray,
    lc: np.ndarray,
    b: np.ndarray,
    a: np.ndarray,
    draws: int,
    rng: np.ndarray,
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
    s0 = rng[0]
    s1 = rng[1]
    s2 = rng[2]
    s3 = rng[3]
    overloads = 0
    resets = 0
    for n in range(v.shape[0]):
        d = 0.0
        for k in range(draws):
            t = s0 ^ ((s0 << 11) & 0xFFFFFFFF)
            s0 = s1
            s1 = s2
            s2 = s3
            s3 = s3 ^ (s3 >> 19) ^ t ^ (t >> 8)
            r = (s3 >> 8) * _INV24
            if k == 0:
                d += r
            else:
                d -= r
        if draws == 1:
            d -= 0.5
        fb = 0.0
        for k in range(order):
            fb += (a[k] - b[k]) * e_hist[k] - a[k] * f_hist[k]
        u = v[n] - fb
        target = u + d
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
    rng[0] = s0
    rng[1] = s1
    rng[2] = s2
    rng[3] = s3
    return overloads, resets


def sinc_resample_ref(
    x: np.ndarray,
    table: np.ndarray,
    base: int,
    rem: int,
    step_int: int,
    step_rem: int,
    den: int,
    out: np.ndarray,
) -> None:
    """Polyphase windowed-sinc interpolation at exact rational instants, reference.

    Output ``n`` is taken at input instant ``base + rem / den`` advanced by
    ``step_int + step_rem / den`` per output, kept exact in integers.  Its
    taps are interpolated linearly between rows ``p0`` and ``p0 + 1`` of the
    phase table.

    Parameters
    ----------
    x : numpy.ndarray
        float64 input, zero-padded so that tap ``j`` of the output at input
        instant ``i + f`` reads ``x[i + 1 + j]``.
    table : numpy.ndarray
        ``(phases + 1, taps)`` float64 phase table.
    base, rem : int
        Input instant of the first output: ``base + rem / den``.
    step_int, step_rem : int
        Instant advance per output: ``step_int + step_rem / den``.
    den : int
        Common denominator (``0 <= rem, step_rem < den``).
    out : numpy.ndarray
        float64 output; its length is the number of outputs.
    """
    phases = table.shape[0] - 1
    taps = table.shape[1]
    for n in range(out.shape[0]):
        p = rem / den * phases
        p0 = int(p)
        if p0 > phases - 1:
            p0 = phases - 1
        a = p - p0
        xs = x[base + 1 : base + 1 + taps]
        t0 = table[p0]
        t1 = table[p0 + 1]
        # Four partial sums per row: independent chains the compiler can keep in flight.
        s0 = s1 = s2 = s3 = 0.0
        u0 = u1 = u2 = u3 = 0.0
        whole = taps - taps % 4
        for j in range(0, whole, 4):
            s0 += t0[j] * xs[j]
            s1 += t0[j + 1] * xs[j + 1]
            s2 += t0[j + 2] * xs[j + 2]
            s3 += t0[j + 3] * xs[j + 3]
            u0 += t1[j] * xs[j]
            u1 += t1[j + 1] * xs[j + 1]
            u2 += t1[j + 2] * xs[j + 2]
            u3 += t1[j + 3] * xs[j + 3]
        for j in range(whole, taps):
            s0 += t0[j] * xs[j]
            u0 += t1[j] * xs[j]
        acc0 = (s0 + s1) + (s2 + s3)
        acc1 = (u0 + u1) + (u2 + u3)
        out[n] = acc0 + a * (acc1 - acc0)
        base += step_int
        rem += step_rem
        if rem >= den:
            rem -= den
            base += 1


_COMPILED: dict[str, Callable[..., Any]] = {}


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
