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

__all__ = ["compiled", "errfb_quantize_ref", "sinc_resample_ref"]


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
        acc0 = 0.0
        acc1 = 0.0
        for j in range(taps):
            xv = x[base + 1 + j]
            acc0 += table[p0, j] * xv
            acc1 += table[p0 + 1, j] * xv
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
