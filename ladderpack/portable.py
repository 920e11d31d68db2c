"""Elementary functions whose results do not depend on the machine.

numpy picks its ``sin``, ``cos``, ``exp``, ``log`` and ``power`` kernels by CPU (SIMD
code for AVX2, AVX-512 or NEON, each with its own last-bit rounding), and ``dot``,
``@`` and ``linalg`` go to a BLAS whose kernels are chosen by CPU and thread count. A
last-bit difference that reaches an output file, or moves a value across a rounding
boundary, breaks the promise that the same inputs give the same bytes on every machine.

Everything here is computed with IEEE 754 basic operations only (``+ - * /``, ``rint``,
``frexp``, ``ldexp``), each correctly rounded by the standard and applied one numpy ufunc
at a time, so no compiler can fuse them: the results are bit-identical on every CPU.
Sums go through :func:`math.fsum`, which is correctly rounded (Shewchuk's algorithm), so
their order cannot matter. Accuracy is within a few units in the last place, which the
tests check against numpy's own functions.

Methods: argument reduction by Cody and Waite (W. J. Cody, W. Waite, *Software Manual
for the Elementary Functions*, 1980) with the split constants of fdlibm (Sun
Microsystems, 1993: ``__ieee754_rem_pio2``, ``__ieee754_exp``, ``__ieee754_log``), and
Taylor series of ``sin``, ``cos``, ``exp`` and ``atanh`` on the reduced ranges, taken to
where the next term is below 2**-60 of the result.

Examples
--------
>>> float(cos(np.array([0.0]))[0]), float(exp(np.array([0.0]))[0])
(1.0, 1.0)
>>> round(float(log10(np.array([1000.0]))[0]), 12)
3.0
"""

from __future__ import annotations

import math

import numpy as np

__all__ = [
    "cos",
    "db_to_amplitude",
    "dot",
    "exp",
    "log",
    "log10",
    "mean",
    "power",
    "row_means",
    "sin",
]

# pi/2 in three parts of 33 significant bits each (fdlibm's PIO2_1, PIO2_2, PIO2_3), so
# n * part is exact for |n| < 2**20.
_PIO2_1 = 1.57079632673412561417e00
_PIO2_2 = 6.07710050630396597660e-11
_PIO2_3 = 2.02226624871116645580e-21
_TWO_OVER_PI = 6.36619772367581382433e-01
# ln 2 in two parts (fdlibm's ln2_hi, ln2_lo): n * ln2_hi is exact for |n| < 2**20.
_LN2_HI = 6.93147180369123816490e-01
_LN2_LO = 1.90821492927058770002e-10
_INV_LN2 = 1.44269504088896338700e00
_INV_LN10 = 0.43429448190325182765
_LN10 = 2.30258509299404568402

_SIN = [(-1.0) ** k / math.factorial(2 * k + 1) for k in range(10)]  # r, r^3 .. r^19
_COS = [(-1.0) ** k / math.factorial(2 * k) for k in range(11)]  # 1, r^2 .. r^20
_EXP = [1.0 / math.factorial(k) for k in range(16)]  # 1, r .. r^15
_ATANH = [1.0 / (2 * k + 1) for k in range(14)]  # s, s^3 .. s^27


def _horner(coeffs: list[float], z: np.ndarray) -> np.ndarray:
    acc = np.full_like(z, coeffs[-1])
    for c in reversed(coeffs[:-1]):
        acc = acc * z
        acc = acc + c
    return acc


def _as_array(x: np.ndarray | float) -> np.ndarray:
    return np.asarray(x, dtype=np.float64)


def _sincos(x: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    n = np.rint(x * _TWO_OVER_PI)
    r = x - n * _PIO2_1
    r = r - n * _PIO2_2
    r = r - n * _PIO2_3
    z = r * r
    s = r * _horner(_SIN, z)
    c = _horner(_COS, z)
    q = np.mod(n, 4.0).astype(np.int64)  # exact: n is a whole number
    return s, c, q


def sin(x: np.ndarray | float) -> np.ndarray:
    """Sine of `x` (radians), the same bits on every machine."""
    x = _as_array(x)
    s, c, q = _sincos(x)
    return np.choose(q, [s, c, -s, -c])


def cos(x: np.ndarray | float) -> np.ndarray:
    """Cosine of `x` (radians), the same bits on every machine."""
    x = _as_array(x)
    s, c, q = _sincos(x)
    return np.choose(q, [c, -s, -c, s])


def exp(x: np.ndarray | float) -> np.ndarray:
    """Exponential of `x`, the same bits on every machine (0 below -745, inf above 709.78)."""
    x = _as_array(x)
    xc = np.clip(x, -745.2, 709.78)
    n = np.rint(xc * _INV_LN2)
    r = xc - n * _LN2_HI
    r = r - n * _LN2_LO
    p = _horner(_EXP, r)
    out = np.ldexp(p, n.astype(np.int64))
    return np.where(x > 709.78, np.inf, out)


def log(x: np.ndarray | float) -> np.ndarray:
    """Natural logarithm of `x` (``-inf`` at 0, ``nan`` below), the same bits everywhere."""
    x = _as_array(x)
    pos = np.where((x > 0) & np.isfinite(x), x, 1.0)
    m, e = np.frexp(pos)  # pos = m 2**e, m in [0.5, 1)
    low = m < 0.7071067811865476
    m = np.where(low, m * 2.0, m)
    e = np.where(low, e - 1, e).astype(np.float64)
    s = (m - 1.0) / (m + 1.0)
    lm = 2.0 * s * _horner(_ATANH, s * s)
    out = e * _LN2_HI + (e * _LN2_LO + lm)
    out = np.where(x > 0, out, np.where(x == 0, -np.inf, np.nan))
    return np.where(np.isinf(x) & (x > 0), np.inf, out)


def log10(x: np.ndarray | float) -> np.ndarray:
    """Base-10 logarithm of `x`, the same bits on every machine."""
    return log(x) * _INV_LN10


def power(x: np.ndarray | float, y: np.ndarray | float) -> np.ndarray:
    """``x ** y`` for ``x >= 0`` (``0 ** y`` is 0 for y > 0), the same bits everywhere."""
    x = _as_array(x)
    y = _as_array(y)
    out = exp(y * log(np.where(x > 0, x, 1.0)))
    return np.where(x > 0, out, np.where(y > 0, 0.0, np.where(y == 0, 1.0, np.inf)))


def db_to_amplitude(db: float) -> float:
    """``10 ** (db / 20)`` as a Python float, the same bits on every machine.

    Examples
    --------
    >>> round(db_to_amplitude(-6.0206), 4)
    0.5
    """
    return float(exp(np.array(db / 20.0 * _LN10)))


def dot(a: np.ndarray, b: np.ndarray) -> float:
    """Sum of ``a * b``, correctly rounded (no BLAS, so no kernel or thread dependence)."""
    return math.fsum((_as_array(a) * _as_array(b)).tolist())


def mean(a: np.ndarray) -> float:
    """Mean of every element, correctly rounded (so no summation order can matter)."""
    arr = _as_array(a)
    return math.fsum(arr.ravel().tolist()) / arr.size


def row_means(a: np.ndarray) -> np.ndarray:
    """Mean of each row of a 2-D array, each correctly rounded."""
    arr = _as_array(a)
    return np.array([math.fsum(row) / arr.shape[1] for row in arr.tolist()])
