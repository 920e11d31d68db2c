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

__all__ = ["compiled", "errfb_quantize_ref"]


def errfb_quantize_ref(
    v: np.ndarray,
    dither: np.ndarray,
    h: np.ndarray,
    lo: int,
    hi: int,
    clamp: float,
    out: np.ndarray,
) -> int:
    """Error-feedback quantiser, plain-Python reference.

    Implements ``u[n] = v[n] - sum_k h[k] e[n-1-k]``,
    ``y[n] = clip(floor(u[n] + d[n] + 0.5), lo, hi)``, ``e[n] = y[n] - u[n]``,
    so the noise transfer function is ``1 - sum_k h[k] z^-(k+1)`` (Lipshitz,
    Vanderkooy & Wannamaker 1991 sign convention).  The error fed back is
    clamped to +/-`clamp` LSB so a clipped sample cannot start a runaway.

    Parameters
    ----------
    v : numpy.ndarray
        float64 input in LSB units (code scale).
    dither : numpy.ndarray
        float64 dither in LSB, same length as `v`.
    h : numpy.ndarray
        float64 error-filter taps ``h[0] = h_1 ...`` (may be empty).
    lo, hi : int
        Lowest and highest code.
    clamp : float
        Largest magnitude of fed-back error, in LSB.
    out : numpy.ndarray
        int64 output array, same length as `v`; receives the codes.

    Returns
    -------
    int
        Number of samples that clipped (overloads).
    """
    order = h.shape[0]
    hist = np.zeros(max(order, 1))
    overloads = 0
    for n in range(v.shape[0]):
        fb = 0.0
        for k in range(order):
            fb += h[k] * hist[k]
        u = v[n] - fb
        q = math.floor(u + dither[n] + 0.5)
        if q < lo:
            q = lo
            overloads += 1
        elif q > hi:
            q = hi
            overloads += 1
        e = q - u
        if e > clamp:
            e = clamp
        elif e < -clamp:
            e = -clamp
        for k in range(order - 1, 0, -1):
            hist[k] = hist[k - 1]
        if order > 0:
            hist[0] = e
        out[n] = q
    return overloads


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
