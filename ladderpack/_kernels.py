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
from typing import Any, cast

import numpy as np

__all__ = [
    "PLAIN_MAX_SAMPLES",
    "compiled",
    "kernel",
    "levels_quantize_ref",
    "shape_quantize_ref",
]

#: Blocks up to this many samples run the plain-Python twin unless numba is already
#: loaded: importing numba and loading a cached kernel costs about half a second, and
#: compiling one with an empty cache about two, which the twin beats on short clips.
PLAIN_MAX_SAMPLES = 60_000


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


_COMPILED: dict[str, Callable[..., Any]] = {}


def kernel(name: str, samples: int) -> Callable[..., Any]:
    """The kernel called `name` for a block of `samples`: compiled, or its plain twin.

    The twin serves blocks of at most :data:`PLAIN_MAX_SAMPLES` while numba is not
    yet loaded; both give the same bits (tested), so the choice is only about time.
    """
    if name in _COMPILED or samples > PLAIN_MAX_SAMPLES:
        return compiled(name)
    return cast("Callable[..., Any]", globals()[name + "_ref"])


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
