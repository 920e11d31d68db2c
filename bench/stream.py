"""Benchmark the stream hot spots against baselines run in the same process.

Run:  python bench/stream.py [--seconds 60]

Prints throughput of
* the resampler (libsoxr VHQ with its scalar engine, for the same bits on every machine)
  against the SIMD engine libsoxr would pick by itself and scipy.signal.resample_poly
  (its default Kaiser filter, rational ratios only) on the same input,
* the error-feedback quantiser kernel compiled by numba against its plain-Python twin,
* the whole stream pipeline on a synthetic clip.
"""

from __future__ import annotations

import argparse
import time
from collections.abc import Callable

import numpy as np
import soxr
from scipy import signal as sps

from ladderpack import _kernels
from ladderpack.audio import Signal
from ladderpack.clock import plan_clock
from ladderpack.conform import resample
from ladderpack.stream import stream_signal


def best_of(fn: Callable[[], object], repeat: int = 3) -> float:
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--seconds", type=float, default=60.0, help="clip length, s")
    args = ap.parse_args()
    rng = np.random.default_rng(0)
    n = int(44100 * args.seconds)
    x = rng.standard_normal(n) * 0.1
    sig = Signal(x, 44100.0)

    print(f"input: {args.seconds:g} s of noise at 44100 Hz ({n} samples)")
    for label, rate in (
        ("44100 -> 22050", 22050),
        ("44100 -> plan(22050)", plan_clock(22050).achieved_rate_hz),
    ):
        t_ours = best_of(lambda r=rate: resample(sig, r, bits=8))
        t_poly = best_of(lambda: sps.resample_poly(x, 1, 2))
        t_soxr = best_of(lambda r=rate: soxr.resample(x, 44100, float(r), quality="VHQ"))
        print(
            f"resample {label:22s} ours {n / t_ours / 1e6:7.2f} Msample/s | "
            f"soxr VHQ, SIMD engine {n / t_soxr / 1e6:7.2f} | resample_poly 1/2 "
            f"{n / t_poly / 1e6:7.2f}"
        )

    m = 200_000
    v = rng.uniform(0, 255, m)
    b, a = np.array([-1.0]), np.array([0.0])
    out = np.empty(m, np.int64)
    jit = _kernels.compiled("shape_quantize")

    d = rng.random(m) - rng.random(m)

    def run(fn, n):  # type: ignore[no-untyped-def]
        return fn(v[:n], d[:n], b, a, 0, 255, np.zeros(1), np.zeros(1), out[:n])

    run(jit, 10)  # compile (or load from the cache) first
    t_jit = best_of(lambda: run(jit, m))
    t_ref = best_of(lambda: run(_kernels.shape_quantize_ref, m), repeat=1)
    t_py = best_of(lambda: run(_kernels.shape_quantize_py, m), repeat=1)
    print(
        f"error-feedback quantiser: numba {m / t_jit / 1e6:8.2f} Msample/s | "
        f"plain Python {m / t_ref / 1e6:8.3f} Msample/s ({t_ref / t_jit:.0f}x) | "
        f"interpreter version {m / t_py / 1e6:8.3f} Msample/s"
    )

    t_all = best_of(
        lambda: stream_signal(
            sig, name="bench", bits=8, shaping="first-order", flash_bytes=1 << 30
        ),
        repeat=1,
    )
    print(
        f"whole stream pipeline (8-bit, first-order shaping): {t_all:.2f} s for "
        f"{args.seconds:g} s of audio ({args.seconds / t_all:.0f}x real time)"
    )


if __name__ == "__main__":
    main()
