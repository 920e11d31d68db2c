"""Whole-command speed and memory against the converter a user would otherwise run.

Run:  python bench/speed.py [--runs 5] [--quick]

Every figure is a whole process from a cold start (what a user or a firmware build pays),
timed several times in one run beside its baseline, with medians and ratios:

* ``ladderpack stream`` of a 60 s 44.1 kHz stereo clip to 8-bit 22.05 kHz, against
  ``sox -q IN -r 22050 -c 1 -b 8 OUT rate -v dither`` (Debian's sox: very-high-quality
  resampling plus dither);
* the same for a 10-minute clip, and with ``--loudness-lufs -23`` (peak memory too);
* a 2.3 s clip with designed shaping, with a warm kernel cache and a fresh one (a new
  ``NUMBA_CACHE_DIR``, as on a CI runner or a new build container);
* the start-up floor: a Python process importing numpy, soundfile and soxr;
* ``ladderpack --help`` against ``python3 -c pass``;
* ``ladderpack ladder --bits 12``.

Each goal is marked met, or missed by how much; README.md says where the time goes.
Needs sox on PATH (Debian package ``sox``). Benchmarks only: the tests never time.
"""

from __future__ import annotations

import argparse
import os
import re
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import soundfile

PY = sys.executable


def clip(path: Path, seconds: float, rate: int = 44100) -> Path:
    """A deterministic stereo test clip: two tones and a little noise, as 16-bit WAV.

    Written block by block, so this process stays small: a child's peak memory as the
    kernel reports it starts from the parent's size when it is spawned.
    """
    rng = np.random.default_rng(1)
    n = int(seconds * rate)
    block = 1 << 18
    with soundfile.SoundFile(path, "w", rate, 2, subtype="PCM_16") as f:
        for i in range(0, n, block):
            t = np.arange(i, min(n, i + block)) / rate
            out = np.empty((t.size, 2), dtype=np.float32)
            out[:, 0] = 0.4 * np.sin(2 * np.pi * 440 * t) + 0.01 * rng.standard_normal(t.size)
            out[:, 1] = 0.3 * np.sin(2 * np.pi * 660 * t)
            f.write(out)
    return path


def run(argv: list[str], env: dict[str, str] | None = None) -> tuple[float, float]:
    """Wall time (s) and this child's own peak resident memory (MB) of one command."""
    t0 = time.perf_counter()
    child = subprocess.Popen(argv, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env)
    _, status, usage = os.wait4(child.pid, 0)  # the rusage of this child alone
    wall = time.perf_counter() - t0
    child.returncode = os.waitstatus_to_exitcode(status)
    if child.returncode != 0:
        raise subprocess.CalledProcessError(child.returncode, argv)
    return wall, usage.ru_maxrss / 1024  # KiB on Linux


def median_time(argv: list[str], runs: int, env: dict[str, str] | None = None) -> float:
    return statistics.median(run(argv, env)[0] for _ in range(runs))


def verdict(goal: str, value: float, ratio: float | None = None) -> str:
    """``goal: met`` or ``goal: missed by ...`` for goals written "within Nx", "under Nx",
    "under N s", "under N ms", "under N MB" or "N s" (a time limit)."""
    m = re.fullmatch(r"(?:within |under )?([\d.]+) ?(x|s|ms|MB)", goal)
    if m is None:
        return goal
    limit, unit = float(m.group(1)), m.group(2)
    got = ratio if unit == "x" else value
    if got is None:
        return goal
    if got <= limit:
        return f"{goal}: met"
    return f"{goal}: missed by {got / limit:.1f}x ({got:.3g} {unit})"


def row(label: str, ours: float, base: float, base_label: str, goal: str) -> None:
    r = ours / base
    print(
        f"| {label} | {ours:.3f} s | {base:.3f} s ({base_label}) | {r:.1f}x | "
        f"{verdict(goal, ours, r)} |"
    )


def bank_rows(work: Path, lp: list[str], sox: str, runs: int) -> None:
    """The sound bank: 20 clips (5 s, 44.1 kHz stereo, 16-bit) to 8-bit 22.05 kHz ladder
    streams, `build --jobs 2` from an empty folder against `make -j2` running sox per clip;
    the no-op build of the same bank; and the cost per asset beyond its samples."""
    bank = work / "bank"
    bank.mkdir()
    names = [f"clip{k:02d}" for k in range(20)]
    for n in names:
        clip(bank / f"{n}.wav", 5.0)
    (bank / "ladderpack.toml").write_text(
        '[project]\nout_dir = "gen"\n\n[defaults]\nbits = 8\nrate_hz = 22050\n'
        "flash_bytes = 16777216\n\n"  # a 16 MiB board: the bank is 2.2 MB
        + "".join(f'[[asset]]\nname = "{n}"\nclip = "{n}.wav"\n\n' for n in names)
    )
    rule = (
        f"sox/%.wav: %.wav\n\t@mkdir -p sox && {sox} -q $< -r 22050 -c 1 -b 8 $@ rate -v dither\n"
    )
    (bank / "Makefile").write_text("all: " + " ".join(f"sox/{n}.wav" for n in names) + "\n" + rule)

    def fresh_build() -> float:
        shutil.rmtree(bank / "gen", ignore_errors=True)
        t0 = time.perf_counter()
        subprocess.run([*lp, "build", "--jobs", "2"], cwd=bank, check=True, capture_output=True)
        return time.perf_counter() - t0

    def fresh_make() -> float:
        shutil.rmtree(bank / "sox", ignore_errors=True)
        t0 = time.perf_counter()
        subprocess.run(["make", "-j2", "-s"], cwd=bank, check=True, capture_output=True)
        return time.perf_counter() - t0

    ours = statistics.median(fresh_build() for _ in range(runs))
    base = statistics.median(fresh_make() for _ in range(runs))
    row("sound bank: 20 clips of 5 s, build --jobs 2, empty folder", ours, base,
        "make -j2 with sox", "within 2x")  # fmt: skip

    def noop(argv: list[str]) -> float:
        t0 = time.perf_counter()
        subprocess.run(argv, cwd=bank, check=True, capture_output=True)
        return time.perf_counter() - t0

    ours = statistics.median(noop([*lp, "build"]) for _ in range(runs))
    base = statistics.median(noop(["make", "-j2", "-s"]) for _ in range(runs))
    row("the same bank, nothing changed (no-op build)", ours, base, "make no-op", "under 0.2 s")
    # cost per asset beyond its samples: 50 assets of 2 ms tones less the start-up
    tiny = work / "tiny"
    tiny.mkdir()
    (tiny / "ladderpack.toml").write_text(
        '[project]\nout_dir = "gen"\n\n'
        + "".join(
            f'[[asset]]\nname = "t{k}"\ntone = "sine"\nseconds = 0.002\nramp_ms = 0.5\n\n'
            for k in range(50)
        )
    )

    def tiny_build() -> float:
        shutil.rmtree(tiny / "gen", ignore_errors=True)
        t0 = time.perf_counter()
        subprocess.run([*lp, "build"], cwd=tiny, check=True, capture_output=True)
        return time.perf_counter() - t0

    whole = statistics.median(tiny_build() for _ in range(runs))
    start = median_time([*lp, "--help"], runs)
    print(
        f"| cost per asset beyond its samples (50 assets of 2 ms, less the start-up "
        f"{start:.3f} s) | {1000 * (whole - start) / 50:.1f} ms | | | "
        f"{verdict('under 10 ms', 1000 * (whole - start) / 50)} |"
    )


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--runs", type=int, default=5, help="runs per command (median)")
    ap.add_argument("--quick", action="store_true", help="skip the 10-minute clips")
    args = ap.parse_args()
    sox = shutil.which("sox")
    if sox is None:
        sys.exit("bench/speed.py needs sox on PATH (Debian package sox)")
    lp = [PY, "-m", "ladderpack"]
    # Byte-compile the package first, as installing it does: with PYTHONDONTWRITEBYTECODE
    # set (some containers set it) every run would otherwise compile the sources again.
    import compileall

    import ladderpack

    compileall.compile_dir(os.path.dirname(ladderpack.__file__), quiet=1)
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        c60 = clip(work / "c60.wav", 60.0)
        c2 = clip(work / "c2.wav", 2.3)
        out = work / "out"
        print(
            f"ladderpack whole-command speed, {time.strftime('%Y-%m-%d')}, "
            f"{os.cpu_count()} cores, medians of {args.runs} runs"
        )
        print("| job | ladderpack | baseline in the same run | ratio | goal |")
        print("|---|---|---|---|---|")
        ours = median_time(
            [*lp, "stream", str(c60), "-o", str(out), "--rate-hz", "22050"], args.runs
        )
        base = median_time(
            [
                sox,
                "-q",
                str(c60),
                "-r",
                "22050",
                "-c",
                "1",
                "-b",
                "8",
                str(work / "s.wav"),
                "rate",
                "-v",
                "dither",
            ],
            args.runs,
        )
        row("stream 60 s 44.1 kHz stereo to 8-bit 22.05 kHz", ours, base, "sox", "within 3x")
        floor = median_time([PY, "-c", "import numpy, soundfile, soxr"], args.runs)
        print(
            f"| the start-up floor: python importing numpy, soundfile and soxr | {floor:.3f} s "
            f"| {base:.3f} s (sox, 60 s clip) | {floor / base:.1f}x | |"
        )
        warm = median_time(
            [*lp, "stream", str(c2), "-o", str(out), "--shaping", "designed"], args.runs
        )
        cold_times = []
        for _ in range(args.runs):
            env = dict(os.environ, NUMBA_CACHE_DIR=tempfile.mkdtemp(dir=tmp))
            cold_times.append(
                run([*lp, "stream", str(c2), "-o", str(out), "--shaping", "designed"], env)[0]
            )
        cold = statistics.median(cold_times)
        base2 = median_time(
            [
                sox,
                "-q",
                str(c2),
                "-r",
                "22050",
                "-c",
                "1",
                "-b",
                "8",
                str(work / "s2.wav"),
                "rate",
                "-v",
                "dither",
            ],
            args.runs,
        )
        row("stream 2.3 s, designed shaping, warm kernel cache", warm, base2, "sox", "under 0.6 s")
        row("stream 2.3 s, designed shaping, fresh kernel cache", cold, base2, "sox", "under 2 s")
        bank_rows(work, lp, sox, args.runs)
        helpt = median_time([*lp, "--help"], args.runs)
        passt = median_time([PY, "-c", "pass"], args.runs)
        row("ladderpack --help", helpt, passt, "python3 -c pass", "under 3x")
        lad = median_time([*lp, "ladder", "--bits", "12"], max(1, args.runs // 2))
        print(f"| ladder --bits 12 | {lad:.3f} s | | | {verdict('under 2 s', lad)} |")
        if not args.quick:
            c600 = clip(work / "c600.wav", 600.0)
            # 10 minutes at 22.05 kHz, 8 bits is 13.2 MB: a board with 16 MiB of flash
            big = ["--flash-bytes", str(16 << 20)]
            ours = median_time([*lp, "stream", str(c600), "-o", str(out), *big], args.runs)
            base = median_time(
                [
                    sox,
                    "-q",
                    str(c600),
                    "-r",
                    "22050",
                    "-c",
                    "1",
                    "-b",
                    "8",
                    str(work / "s6.wav"),
                    "rate",
                    "-v",
                    "dither",
                ],
                args.runs,
            )
            row("stream 10 min 44.1 kHz stereo", ours, base, "sox", "within 1.5x")
            wall, peak = run(
                [*lp, "stream", str(c600), "-o", str(out), *big, "--loudness-lufs", "-23"]
            )
            print(
                f"| stream 10 min with --loudness-lufs -23 | {wall:.3f} s, peak "
                f"{peak:.0f} MB | | | {verdict('under 300 MB', peak)} |"
            )


if __name__ == "__main__":
    main()
