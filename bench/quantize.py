"""Benchmark the quantiser kernel and the whole stream pipeline.

Run:  python bench/quantize.py

Prints, in one process:
* samples per second of the numba error-feedback kernel (TPDF dither in the loop) for
  filter orders 1, 5 and 9 on 10^7 samples;
* baselines: the plain-Python reference, the interpreter version for short blocks,
  plain numpy rounding (no feedback), and a straightforward C loop doing the same work
  (compiled with gcc -O2 and called through ctypes);
* the real-time factor of the stream pipeline on a 60 s, 44.1 kHz stereo clip, both
  in-process (warm) and as the `ladderpack stream` command (cold start included).
"""

from __future__ import annotations

import ctypes
import os
import shutil
import subprocess
import sys
import tempfile
import time

import numpy as np
import soundfile

from ladderpack import _kernels
from ladderpack.quantize import DitherSource
from ladderpack.stream import stream_clip

C_LOOP = r"""
#include <math.h>
#include <stdint.h>
long shape(const double *v, const double *d, long n, const double *b, int order,
           long lo, long hi, long *out) {
    double eh[16] = {0}, fh[16] = {0};
    long over = 0;
    for (long i = 0; i < n; ++i) {
        double fb = 0.0;
        for (int k = 0; k < order; ++k) fb += -b[k] * eh[k];
        double u = v[i] - fb;
        double q = floor(u + d[i] + 0.5);
        if (q < lo || q > hi) {
            q = q < lo ? lo : hi;
            ++over;
            for (int k = 0; k < order; ++k) { eh[k] = 0.0; fh[k] = 0.0; }
        } else {
            for (int k = order - 1; k > 0; --k) eh[k] = eh[k - 1];
            eh[0] = q - u;
        }
        out[i] = (long)q;
    }
    return over;
}
"""


def best_of(fn, repeat: int = 3) -> float:  # type: ignore[no-untyped-def]
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def c_baseline(tmp: str):  # type: ignore[no-untyped-def]
    gcc = shutil.which("gcc")
    if gcc is None:
        return None
    src = os.path.join(tmp, "shape.c")
    lib = os.path.join(tmp, "libshape.so")
    with open(src, "w") as fh:
        fh.write(C_LOOP)
    subprocess.run([gcc, "-O2", "-shared", "-fPIC", "-o", lib, src, "-lm"], check=True)
    return ctypes.CDLL(lib).shape


def main() -> None:
    n = 10_000_000
    rng = np.random.default_rng(0)
    v = rng.uniform(20, 235, n)
    d = DitherSource("tpdf", 0).draw(n)
    out = np.empty(n, np.int64)
    k = _kernels.compiled("shape_quantize")
    print(f"error-feedback quantiser, TPDF in the loop, {n:.0e} samples")
    rates = {}
    for order in (1, 5, 9):
        b = -np.linspace(1.0, 0.1, order)
        a = np.zeros(order)
        k(v[:10], d[:10], b, a, 0, 255, np.zeros(order), np.zeros(order), out[:10])
        t = best_of(
            lambda b=b, a=a, order=order: k(
                v, d, b, a, 0, 255, np.zeros(order), np.zeros(order), out
            )
        )
        rates[order] = n / t
        print(f"  numba kernel, order {order}: {n / t / 1e6:7.1f} M samples/s")
    m = 100_000
    b9 = -np.linspace(1.0, 0.1, 9)
    for label, fn in (
        ("plain-Python reference", _kernels.shape_quantize_ref),
        ("interpreter version (short blocks)", _kernels.shape_quantize_py),
    ):
        t = best_of(
            lambda fn=fn: fn(
                v[:m], d[:m], b9, np.zeros(9), 0, 255, np.zeros(9), np.zeros(9), out[:m]
            ),
            repeat=1,
        )
        print(f"  {label}, order 9: {m / t / 1e6:7.3f} M samples/s")

    def numpy_round() -> None:
        d = rng.random(n) - rng.random(n)
        np.clip(np.floor(v + d + 0.5), 0, 255, out=v.copy())

    t = best_of(numpy_round)
    print(f"  numpy rounding (no feedback): {n / t / 1e6:7.1f} M samples/s")
    with tempfile.TemporaryDirectory() as tmp:
        shape = c_baseline(tmp)
        if shape is not None:
            dp = ctypes.POINTER(ctypes.c_double)
            args = (
                v.ctypes.data_as(dp),
                d.ctypes.data_as(dp),
                ctypes.c_long(n),
                b9.ctypes.data_as(dp),
                ctypes.c_int(9),
                ctypes.c_long(0),
                ctypes.c_long(255),
                out.ctypes.data_as(ctypes.POINTER(ctypes.c_long)),
            )
            t = best_of(lambda: shape(*args))
            print(
                f"  C loop (gcc -O2), order 9: {n / t / 1e6:7.1f} M samples/s; numba order 9 "
                f"is {100 * rates[9] * t / n:.0f} % of it"
            )

        clip = os.path.join(tmp, "clip60.wav")
        sr = 44100
        tt = np.arange(60 * sr) / sr
        x = np.stack([0.3 * np.sin(2 * np.pi * 440 * tt), 0.3 * np.sin(2 * np.pi * 554 * tt)], 1)
        x += 0.02 * rng.standard_normal(x.shape)
        soundfile.write(clip, x, sr, subtype="PCM_16")
        stream_clip(clip)  # warm: numba cache, imports
        t = best_of(lambda: stream_clip(clip))
        print(
            f"stream pipeline, 60 s 44.1 kHz stereo -> 8-bit 22.05 kHz, in-process: {t:.3f} s "
            f"({60 / t:.0f}x real time)"
        )
        t = best_of(lambda: stream_clip(clip, shaping="designed"))
        print(f"  with a designed order-8 shaper: {t:.3f} s ({60 / t:.0f}x real time)")
        t = best_of(
            lambda: subprocess.run(
                [sys.executable, "-m", "ladderpack", "stream", clip, "-o", os.path.join(tmp, "o")],
                check=True,
                capture_output=True,
            ),
            repeat=2,
        )
        print(
            f"  as the command (interpreter, imports and file writing included): {t:.2f} s "
            f"({60 / t:.0f}x real time)"
        )


if __name__ == "__main__":
    main()
