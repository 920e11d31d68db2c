"""Benchmark a no-op `ladderpack build` of a 50-asset manifest.

Run:  python bench/build.py

Makes a manifest of 50 assets (10 clips, 30 tones, 10 wavetables) in a temporary
folder, builds it once, then times repeated no-op builds as a fresh process each time
(interpreter start-up included).  Baseline in the same run: a bare `python -c pass`
and `ladderpack --help`.  Goal: a no-op build under 0.5 s.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import tempfile
import time

REPO = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def timed(cmd: list[str], cwd: str, repeat: int = 5) -> float:
    best = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        subprocess.run(cmd, cwd=cwd, check=True, capture_output=True)
        best = min(best, time.perf_counter() - t0)
    return best


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        os.makedirs(os.path.join(tmp, "clips"))
        lines = ['[project]\nout_dir = "gen"\n', "[defaults]\nbits = 8\nrate_hz = 16000\n"]
        for i in range(10):
            shutil.copy(
                os.path.join(REPO, "demo_audio", "door_chime.flac"),
                os.path.join(tmp, "clips", f"c{i}.flac"),
            )
            lines.append(f'[[asset]]\nname = "clip_{i}"\nclip = "clips/c{i}.flac"\n')
        for i in range(30):
            lines.append(
                f'[[asset]]\nname = "tone_{i}"\ntone = "sine"\nfreq_hz = {200 + 50 * i}'
                "\nseconds = 0.05\n"
            )
        for i in range(10):
            lines.append(f'[[asset]]\nname = "table_{i}"\ntable = "wave"\ntable_bits = {4 + i}\n')
        with open(os.path.join(tmp, "ladderpack.toml"), "w") as fh:
            fh.write("\n".join(lines))
        lp = [sys.executable, "-m", "ladderpack"]
        t0 = time.perf_counter()
        subprocess.run([*lp, "build"], cwd=tmp, check=True, capture_output=True)
        print(f"first build of 50 assets: {time.perf_counter() - t0:.2f} s")
        noop = timed([*lp, "build"], tmp)
        check = timed([*lp, "build", "--check"], tmp)
        bare = timed([sys.executable, "-c", "pass"], tmp)
        helpt = timed([*lp, "--help"], tmp)
        print(f"no-op build: {noop:.3f} s   (--check: {check:.3f} s)")
        print(f"baselines: python -c pass {bare:.3f} s, ladderpack --help {helpt:.3f} s")
        print("goal: no-op build under 0.5 s -> " + ("met" if noop < 0.5 else "NOT met"))


if __name__ == "__main__":
    main()
