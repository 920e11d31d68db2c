"""Peak memory of block-wise stream processing on a one-hour 48 kHz stereo clip.

Run:  python bench/memory.py [--minutes 60]

Writes a synthetic clip (FLAC, 16-bit stereo) to a temporary folder, then in fresh
processes measures peak resident memory (getrusage ru_maxrss) of:
* block-wise processing of the whole clip (read, DC, resample to the 22.05 kHz plan
  rate, normalise, fade, quantise to 8 bits, pack, write the .bin),
* the whole `ladderpack stream` command on it (every bundle file written), and
* as the baseline, whole-clip processing of a shorter excerpt (--baseline-minutes),
  whose memory grows with the clip.
Target: under 300 MB for the one-hour clip.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time

import numpy as np
import soundfile

WORKER = r"""
import resource, sys, time
import numpy as np
from ladderpack.clock import plan_clock
from ladderpack.stream import stream_clip
mode, path, out = sys.argv[1:4]
t0 = time.perf_counter()
rate = plan_clock(22050).achieved_rate_hz
if mode == "command":
    import subprocess
    subprocess.run([sys.executable, "-m", "ladderpack", "stream", path, "-o", out,
                    "--flash-bytes", str(1 << 34)], check=True, capture_output=True)
    peak_mb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024
    print(f"{peak_mb:.1f} {time.perf_counter() - t0:.1f} 0")
    raise SystemExit
if mode == "blocks":
    asset = stream_clip(path, bits=8, block_frames=1 << 16, flash_bytes=1 << 34)
    words = asset.word_count
else:  # the whole-clip path: every sample in memory at once
    from ladderpack.audio import load_clip
    from ladderpack.stream import stream_signal
    asset = stream_signal(load_clip(path), name="whole", bits=8, flash_bytes=1 << 34)
    words = asset.word_count
peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
print(f"{peak_mb:.1f} {time.perf_counter() - t0:.1f} {words}")
"""


def make_clip(path: str, minutes: float, rate: int = 48000) -> None:
    n = int(minutes * 60 * rate)
    block = 1 << 20
    rng = np.random.default_rng(0)
    with soundfile.SoundFile(path, "w", rate, 2, subtype="PCM_16", format="FLAC") as f:
        for i in range(0, n, block):
            t = (np.arange(i, min(n, i + block)) / rate)[:, None]
            x = 0.3 * np.sin(2 * np.pi * np.array([[440.0, 660.0]]) * t)
            f.write(x + 0.01 * rng.standard_normal(x.shape))


def measure(mode: str, path: str, out: str) -> tuple[float, float, int]:
    res = subprocess.run(
        [sys.executable, "-c", WORKER, mode, path, out], check=True, capture_output=True, text=True
    )
    mb, secs, words = res.stdout.split()
    return float(mb), float(secs), int(words)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--minutes", type=float, default=60.0, help="clip length, minutes")
    ap.add_argument(
        "--baseline-minutes",
        type=float,
        default=5.0,
        help="length of the whole-clip baseline, minutes",
    )
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        long_clip = os.path.join(tmp, "long.flac")
        short_clip = os.path.join(tmp, "short.flac")
        t0 = time.perf_counter()
        make_clip(long_clip, args.minutes)
        make_clip(short_clip, args.baseline_minutes)
        print(f"made clips in {time.perf_counter() - t0:.0f} s")
        mb, secs, words = measure("blocks", long_clip, os.path.join(tmp, "long.bin"))
        print(
            f"blocks, {args.minutes:g} min 48 kHz stereo: peak {mb:.0f} MB, {secs:.0f} s, "
            f"{words} words"
        )
        mbc, secsc, _ = measure("command", long_clip, os.path.join(tmp, "bundle"))
        print(
            f"`ladderpack stream` on the {args.minutes:g} min clip (whole bundle): peak "
            f"{mbc:.0f} MB, {secsc:.0f} s"
        )
        mb2, secs2, _words2 = measure("blocks", short_clip, os.path.join(tmp, "short.bin"))
        print(f"blocks, {args.baseline_minutes:g} min: peak {mb2:.0f} MB, {secs2:.1f} s")
        mb3, secs3, _ = measure("whole", short_clip, "")
        print(
            f"whole-clip baseline, {args.baseline_minutes:g} min: peak {mb3:.0f} MB, {secs3:.1f} s"
        )
        print(
            "target: under 300 MB for the long clip -> "
            + ("met" if max(mb, mbc) < 300 else "NOT met")
        )


if __name__ == "__main__":
    main()
