"""The command line: bad input, determinism, the demo."""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import soundfile

from ladderpack.cli import main

REPO = Path(__file__).resolve().parent.parent


def run(*args: str, cwd: Path | None = None) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "ladderpack", *args], capture_output=True, text=True, cwd=cwd or REPO
    )


@pytest.fixture
def clip(tmp_path: Path) -> Path:
    t = np.arange(4410) / 44100
    path = tmp_path / "beep.wav"
    soundfile.write(path, 0.5 * np.sin(2 * np.pi * 880 * t), 44100)
    return path


def _bad_wav_nan(tmp_path: Path) -> Path:
    x = np.zeros(100)
    x[37] = np.nan
    path = tmp_path / "nan.wav"
    soundfile.write(path, x, 8000, subtype="FLOAT")
    return path


def _empty_wav(tmp_path: Path) -> Path:
    path = tmp_path / "empty.wav"
    soundfile.write(path, np.zeros(0), 8000)
    return path


def _not_audio(tmp_path: Path) -> Path:
    path = tmp_path / "notes.wav"
    path.write_text("this is not a sound file\n")
    return path


def _file_as_folder(tmp_path: Path) -> Path:
    blocker = tmp_path / "blocker"
    blocker.write_text("a file where a folder should be")
    return blocker / "out"


CASES = {
    "missing file": (lambda p, c: [str(p / "nope.wav")], "no such file"),
    "not audio": (lambda p, c: [str(_not_audio(p))], "not a readable sound file"),
    "empty clip": (lambda p, c: [str(_empty_wav(p))], "at least 1 sample"),
    "nan samples": (lambda p, c: [str(_bad_wav_nan(p))], "frame 37"),
    "bits 0": (lambda p, c: [str(c), "--bits", "0"], "bits: must be a whole number 1..16"),
    "bits 17": (lambda p, c: [str(c), "--bits", "17"], "bits: must be a whole number 1..16"),
    "unreachable rate": (lambda p, c: [str(c), "--rate-hz", "1"], "--rate-hz: 1 Hz cannot"),
    "bad channel": (lambda p, c: [str(c), "--channel", "3"], "channel: file has 1 channel"),
    "pins off the chip": (lambda p, c: [str(c), "--bits", "12", "--out-base", "20"], "GPIO 20..31"),
    "idle code too big": (lambda p, c: [str(c), "--bits", "4", "--idle-code", "16"], "--idle-code"),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_bad_input_one_line_exit_2_no_output(tmp_path: Path, clip: Path, case: str) -> None:
    make_args, expected = CASES[case]
    out_dir = tmp_path / "out"
    res = run("stream", *make_args(tmp_path, clip), "-o", str(out_dir))
    assert res.returncode == 2, res.stderr
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("ladderpack: error: ")
    assert expected in lines[0]
    assert "Traceback" not in res.stderr
    assert not out_dir.exists()


def test_unwritable_output_folder(tmp_path: Path, clip: Path) -> None:
    target = _file_as_folder(tmp_path)
    res = run("stream", str(clip), "-o", str(target))
    assert res.returncode == 2
    assert "cannot create output folder" in res.stderr and len(res.stderr.splitlines()) == 1


def test_failed_write_leaves_no_partial_files(
    tmp_path: Path, clip: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    import ladderpack.emit as emit

    out_dir = tmp_path / "out"
    emit.write_files({"beep.bin": b"old"}, out_dir)  # an earlier output of ours
    real_replace = os.replace
    calls = {"n": 0}

    def failing_fsync(fd: int) -> None:
        calls["n"] += 1
        if calls["n"] == 3:
            raise OSError(28, "No space left on device")

    monkeypatch.setattr(emit.os, "fsync", failing_fsync)
    monkeypatch.setattr(emit.os, "replace", real_replace)
    with pytest.raises(SystemExit) as exc:
        main(["stream", str(clip), "-o", str(out_dir)])
    assert exc.value.code == 2
    assert sorted(os.listdir(out_dir)) == sorted(["beep.bin", *emit.BOOK_NAMES[::2]])
    assert (out_dir / "beep.bin").read_bytes() == b"old"


def test_stream_json_summary(tmp_path: Path, clip: Path) -> None:
    res = run("stream", str(clip), "-o", str(tmp_path / "o"), "--bits", "10", "--json")
    assert res.returncode == 0, res.stderr
    summary = json.loads(res.stdout)
    assert summary["bits"] == 10 and summary["requested_rate_hz"] == 22050.0
    assert summary["words"] == -(-summary["samples"] // 3)
    assert summary["bytes"] == 4 * summary["words"]
    assert sorted(Path(f).name for f in summary["files"]) == [
        "beep.bin",
        "beep.c",
        "beep.h",
        "beep.json",
        "beep.pio",
        "beep.py",
        "ladderpack_common.h",
        "ladderpack_lossless.h",
        "ladderpack_player.c",
        "ladderpack_player.h",
    ]


def test_byte_identical_across_runs_and_folders(tmp_path: Path, clip: Path) -> None:
    a, b = tmp_path / "a", tmp_path / "b" / "deeper"
    assert run("stream", str(clip), "-o", str(a)).returncode == 0
    assert run("stream", str(clip), "-o", str(b), cwd=tmp_path).returncode == 0
    names = sorted(os.listdir(a))
    assert names == sorted(os.listdir(b))
    for n in names:
        assert (a / n).read_bytes() == (b / n).read_bytes(), n
    side = (a / "beep.json").read_text()
    assert str(tmp_path) not in side


def test_sidecar_records_options_and_hashes(tmp_path: Path, clip: Path) -> None:
    import hashlib

    assert (
        run("stream", str(clip), "-o", str(tmp_path), "--seed", "9", "--dither", "rpdf").returncode
        == 0
    )
    side = json.loads((tmp_path / "beep.json").read_text())
    assert side["options"]["seed"] == 9 and side["options"]["dither"] == "rpdf"
    assert side["source"]["sha256"] == hashlib.sha256(clip.read_bytes()).hexdigest()
    for name, digest in side["files"].items():
        assert hashlib.sha256((tmp_path / name).read_bytes()).hexdigest() == digest


def test_clock_command(tmp_path: Path) -> None:
    res = run("clock", "44100", "--json")
    assert res.returncode == 0
    plan = json.loads(res.stdout)
    assert (plan["div_int"], plan["div_frac"]) == (2834, 120)


@pytest.mark.slow
def test_demo_runs_end_to_end(tmp_path: Path) -> None:
    res = run("demo", str(tmp_path / "demo"))
    assert res.returncode == 0, res.stderr
    files = sorted(os.listdir(tmp_path / "demo"))
    for stem in ("door_chime", "frost_warning", "bench_sine_1khz_loop"):
        for ext in (".bin", ".c", ".h", ".json", ".pio", ".py"):
            assert stem + ext in files
    chime = json.loads((tmp_path / "demo" / "door_chime.json").read_text())
    assert chime["state_machine"]["out_base"] == 16 and chime["stream"]["bits"] == 8
    # the station's I2S amplifier and PWM variants, each a folder of its own
    for folder, output in (("i2s_amp", "i2s"), ("pwm", "pwm")):
        for stem in ("door_chime", "frost_warning"):
            side = json.loads((tmp_path / "demo" / folder / f"{stem}.json").read_text())
            assert side["options"]["output"] == output
        assert (tmp_path / "demo" / folder / f"ladderpack_{output}.c").is_file()
    bench = json.loads((tmp_path / "demo" / "bench_sine_1khz_loop.json").read_text())
    assert bench["state_machine"]["out_base"] == 0 and bench["stream"]["bits"] == 12
    assert bench["options"]["loop"] and bench["stats"]["program_variant"] == "loop"
    import adafruit_pioasm

    for stem in ("door_chime", "frost_warning", "bench_sine_1khz_loop"):
        # Every emitted program assembles identically in the independent assembler
        # (adafruit-circuitpython-pioasm, PyPI).
        side = json.loads((tmp_path / "demo" / f"{stem}.json").read_text())
        text = (tmp_path / "demo" / f"{stem}.pio").read_text()
        assert list(adafruit_pioasm.Program(text).assembled) == side["program"]["words"]
    # the I2C bench: a 12-bit DAC stepping through the test voltages in a loop; its
    # writer program (side-set on pin directions, irq rel) assembles identically too
    folder = tmp_path / "demo" / "i2c_bench"
    side = json.loads((folder / "bench_volts.json").read_text())
    assert side["options"]["output"] == "i2c-dac" and side["options"]["loop"]
    assert (folder / "ladderpack_i2c.c").is_file()
    prog = adafruit_pioasm.Program((folder / "bench_volts.pio").read_text())
    assert list(prog.assembled) == side["program"]["words"]
    assert prog.pio_kwargs["sideset_pindirs"] and prog.pio_kwargs["sideset_enable"]
    words = np.frombuffer((folder / "bench_volts.bin").read_bytes(), "<u4").astype(np.int64)
    data = (~words >> 24) & 0xFF
    codes = ((data[1::3] & 0x0F) << 8) | data[2::3]  # MCP4725 fast write
    volts = 3.3 * np.unique(codes) / 4096  # datasheet: Vout = Vref x code / 4096
    assert np.allclose(volts, [0.5, 1.0, 1.5, 2.0, 2.5, 3.0], atol=3.3 / 8192)


@pytest.mark.parametrize(
    "command",
    [
        "stream",
        "clock",
        "demo",
        "ladder",
        "levels",
        "sweep",
        "table correction",
        "table wave",
        "table i2c-dac",
        "tone",
        "measure",
        "preview",
        "build",
        "code",
        "plot ntf",
        "plot levels",
    ],
)
def test_every_option_documented_in_help_and_readme(command: str) -> None:
    from ladderpack.cli import cli

    readme = (REPO / "README.md").read_text()
    help_text = run(*command.split(), "--help").stdout
    cmd = cli
    for part in command.split():
        cmd = cmd.commands[part]  # type: ignore[attr-defined]
    for param in cmd.params:
        if param.name == "help" or not getattr(param, "opts", None):
            continue
        for opt in [o for o in param.opts if o.startswith("--")]:
            assert opt in help_text, opt
            in_code = re.search(r"`[^`]*" + re.escape(opt) + r"(?![\w-])[^`]*`", readme)
            assert in_code, f"{command} {opt} missing from README"
        if getattr(param, "help", None) is not None and param.param_type_name == "option":
            assert param.help, param.name


def test_cli_defaults_match_library() -> None:
    # python-soundfile habit: the library function and its CLI wrapper keep one set of
    # defaults.  Both come from the option model; check the derived click options and
    # what the library records when given nothing.
    import numpy as np

    from ladderpack.audio import Signal
    from ladderpack.cli.common import _TEXT_PARSERS
    from ladderpack.cli.streams import stream
    from ladderpack.options import StreamOptions, option_fields
    from ladderpack.stream import stream_signal

    params = {p.name: p.default for p in stream.params}
    for f, info, _hint in option_fields(StreamOptions):
        if info.cli and f.name in _TEXT_PARSERS:  # text given is parsed; none: the model's
            assert params[f.name] is None, f.name
        elif info.cli:
            assert params[f.name] == f.default, f.name
    asset = stream_signal(Signal(np.zeros(480), 48000.0), name="x")
    assert asset.options == {"name": "x", **StreamOptions().to_dict()}


def test_help_does_not_load_numba_or_scipy() -> None:
    # Kernels are compiled on first use, so the command line starts fast.
    code = (
        "import sys, ladderpack.cli, ladderpack.stream; "
        "print('numba' in sys.modules, 'scipy' in sys.modules)"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True).stdout
    assert out.split() == ["False", "False"]


def test_tone_help_shows_only_the_options_a_tone_takes() -> None:
    # a tone refuses the clip-only options, so its --help must not offer them
    from click.testing import CliRunner

    from ladderpack.cli import cli
    from ladderpack.options import StreamOptions

    flags = ["--" + n.replace("_", "-") for n in StreamOptions.CLIP_ONLY]
    tone_help = CliRunner().invoke(cli, ["tone", "--help"]).output
    stream_help = CliRunner().invoke(cli, ["stream", "--help"]).output
    assert not [f for f in flags if f + " " in tone_help]
    assert all(f + " " in stream_help for f in flags)
    res = CliRunner().invoke(cli, ["tone", "sine", "--crossfade-ms", "5"])
    assert res.exit_code == 2 and "No such option" in res.output


def test_command_line_errors_name_options_as_typed(tmp_path: Path) -> None:
    # the library's field names are the manifest's (loudness_lufs); on the command line
    # the error names the flag the user typed, and a build keeps the manifest's spelling
    res = run("tone", "sine", "--bits", "40", "-o", str(tmp_path / "o"))
    assert "error: --bits: " in res.stderr
    res = run("table", "i2c-dac", "--volts", "9", "-o", str(tmp_path / "t"))
    assert "error: --volts: " in res.stderr
