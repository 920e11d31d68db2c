"""Golden files: every output format, rendered from inputs in the repository.

Run ``python tests/golden.py --refresh`` from the repository root to rewrite
``tests/golden/`` after a deliberate change to an output; ``tests/test_golden.py``
compares fresh renders with these files byte for byte, so no output changes
unnoticed.  The scenarios run the command line in-process (click's test runner)
and collect every file each writes.
"""

from __future__ import annotations

import shutil
import sys
import tempfile
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
GOLDEN = Path(__file__).resolve().parent / "golden"

_MANIFEST = """\
[project]
out_dir = "gen"

[defaults]
bits = 8
rate_hz = 16000
out_base = 16

[[asset]]
name = "beep"
tone = "sine"
freq_hz = 1000
seconds = 0.01
ramp_ms = 1.0

[[asset]]
name = "saw_table"
table = "wave"
kind = "sawtooth"
table_bits = 4
freqs_hz = [440, 880]

[[asset]]
name = "fix"
table = "correction"
levels = "ladder_levels.json"
in_bits = 6
"""

#: Scenario name -> list of command lines (run in order in one folder; ``{chime}``
#: is the demo chime clip).  Every file the commands leave behind is golden.
SCENARIOS: dict[str, list[list[str]]] = {
    "clip_8bit": [
        [
            "stream",
            "{chime}",
            "-o",
            ".",
            "--name",
            "chime",
            "--bits",
            "8",
            "--rate-hz",
            "8000",
            "--out-base",
            "16",
            "--embed-words-max",
            "0",
        ],
    ],
    "clip_8bit_lossless": [
        [
            "stream",
            "{chime}",
            "-o",
            ".",
            "--name",
            "zchime",
            "--bits",
            "8",
            "--rate-hz",
            "8000",
            "--compress",
            "lossless",
        ],
    ],
    "i2s_adpcm": [
        [
            "tone",
            "sine",
            "-o",
            ".",
            "--name",
            "zamp",
            "--output",
            "i2s",
            "--rate-hz",
            "16000",
            "--seconds",
            "0.1",
            "--compress",
            "adpcm",
        ],
    ],
    "tone_12bit_loop": [
        [
            "tone",
            "sine",
            "-o",
            ".",
            "--name",
            "bench",
            "--bits",
            "12",
            "--rate-hz",
            "48000",
            "--seconds",
            "0.005",
            "--loop",
            "--pin-order",
            "msb-low",
            "--invert",
            "--shift",
            "left",
            "--ramp-ms",
            "0.5",
        ],
    ],
    "i2s_24bit_loop": [
        [
            "tone",
            "sine",
            "-o",
            ".",
            "--name",
            "amp",
            "--output",
            "i2s",
            "--bits",
            "24",
            "--frame-format",
            "left-justified",
            "--rate-hz",
            "48000",
            "--seconds",
            "0.002",
            "--loop",
            "--data-pin",
            "9",
            "--bit-clock-pin",
            "10",
        ],
    ],
    "pwm_loop": [
        [
            "tone",
            "sine",
            "-o",
            ".",
            "--name",
            "buzzer",
            "--output",
            "pwm",
            "--rate-hz",
            "16000",
            "--seconds",
            "0.003",
            "--loop",
            "--pwm-pin",
            "13",
            "--ramp-ms",
            "0.5",
        ],
    ],
    "i2c_dac_loop": [
        [
            "tone",
            "sine",
            "-o",
            ".",
            "--name",
            "sensor_check",
            "--output",
            "i2c-dac",
            "--rate-hz",
            "4000",
            "--seconds",
            "0.004",
            "--loop",
            "--sda-pin",
            "4",
            "--scl-pin",
            "5",
            "--ramp-ms",
            "0.5",
            "--dac-command",
            "register",
            "--dac-address",
            "0x61",
        ],
    ],
    "tone_shaped_levels": [
        [
            "ladder",
            "--bits",
            "6",
            "--trials",
            "4",
            "--levels-out",
            "lad6.json",
            "--spice",
            "lad6.cir",
        ],
        [
            "tone",
            "multitone",
            "-o",
            ".",
            "--name",
            "shaped",
            "--bits",
            "6",
            "--rate-hz",
            "44100",
            "--seconds",
            "0.004",
            "--tones",
            "1000:0,3000:-6",
            "--shaping",
            "designed",
            "--ntf-order",
            "4",
            "--levels",
            "lad6.json",
            "--program",
            "pull",
            "--samples-per-word",
            "1",
            "--ramp-ms",
            "0.2",
        ],
    ],
    "tables": [
        [
            "table",
            "wave",
            "-o",
            ".",
            "--name",
            "tri",
            "--kind",
            "triangle",
            "--table-bits",
            "5",
            "--freqs-hz",
            "100,1000",
        ],
        ["ladder", "--bits", "5", "--trials", "4", "--levels-out", "lad5.json"],
        ["table", "correction", "lad5.json", "-o", ".", "--name", "corr", "--in-bits", "7"],
        ["sweep", "--bits", "10", "--out-base", "2", "--mode", "n1", "-o", "sweep_n1.py"],
        ["sweep", "--bits", "8", "--read", "meter", "-o", "sweep_meter.py"],
        ["table", "i2c-dac", "-o", ".", "--name", "trims", "--volts", "0.25,1.65,3.2"],
        [
            "table",
            "i2c-dac",
            "-o",
            ".",
            "--name",
            "ripple",
            "--wave",
            "triangle",
            "--points",
            "8",
            "--dac-command",
            "register",
        ],
    ],
    "build": [
        ["ladder", "--bits", "8", "--trials", "4", "--levels-out", "ladder_levels.json"],
        ["build", "ladderpack.toml", "--depfile", "gen.d"],
    ],
}

#: Files a scenario writes that are not outputs of the tool (inputs, build state).
#: Not outputs: the manifest itself, and the bookkeeping files (state, record, lock).
_SKIP = {"ladderpack.toml"}


def render_scenario(name: str, work: Path) -> dict[str, bytes]:
    """Run a scenario in `work` and return every file it wrote (relative path -> bytes)."""
    from click.testing import CliRunner

    from ladderpack.cli import cli

    work.mkdir(parents=True, exist_ok=True)
    if name == "build":
        (work / "ladderpack.toml").write_text(_MANIFEST, encoding="utf-8")
    chime = str(REPO / "demo_audio" / "door_chime.flac")
    runner = CliRunner()
    import os

    old = os.getcwd()
    os.chdir(work)
    try:
        for argv in SCENARIOS[name]:
            args = [a.replace("{chime}", chime) for a in argv]
            res = runner.invoke(cli, args, catch_exceptions=False)
            if res.exit_code != 0:
                raise RuntimeError(f"{name}: {' '.join(args)} exited {res.exit_code}: {res.output}")
    finally:
        os.chdir(old)
    out: dict[str, bytes] = {}
    for p in sorted(work.rglob("*")):
        if p.is_file() and p.name not in _SKIP and not p.name.startswith(".ladderpack"):
            out[p.relative_to(work).as_posix()] = p.read_bytes()
    return out


def refresh() -> None:
    """Rewrite every golden file from a fresh render."""
    if GOLDEN.exists():
        shutil.rmtree(GOLDEN)
    for name in SCENARIOS:
        with tempfile.TemporaryDirectory() as tmp:
            files = render_scenario(name, Path(tmp))
        for rel, data in files.items():
            dest = GOLDEN / name / rel
            dest.parent.mkdir(parents=True, exist_ok=True)
            dest.write_bytes(data)
        print(f"{name}: {len(files)} files")


if __name__ == "__main__":
    if sys.argv[1:] != ["--refresh"]:
        sys.exit("usage: python tests/golden.py --refresh")
    sys.path.insert(0, str(REPO))
    refresh()
