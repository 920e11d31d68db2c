"""Reliability: bad input matrix, hostile names, interrupted and full-disk writes."""

from __future__ import annotations

import json
import os
import resource
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import soundfile
from helpers import cc_strict, ladderpack_cli, small_asset
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from ladderpack.bundle import bundle_files
from ladderpack.emit.names import C_KEYWORDS, asset_identifier
from ladderpack.errors import LadderpackError

REPO = Path(__file__).resolve().parent.parent


run = ladderpack_cli


def _wav(path: Path, data: np.ndarray, rate: int = 16000, subtype: str = "PCM_16") -> Path:
    soundfile.write(path, data, rate, subtype=subtype)
    return path


@pytest.fixture
def earlier(tmp_path: Path) -> Path:
    """An output folder holding a previous good bundle of 'clip'."""
    src = _wav(tmp_path / "good.wav", 0.3 * np.sin(np.arange(4000) / 5.0))
    out = tmp_path / "out"
    res = run("stream", str(src), "--name", "clip", "-o", str(out))
    assert res.returncode == 0, res.stderr
    return out


def _snapshot(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir())}


def _truncated(tmp: Path) -> Path:
    good = _wav(tmp / "t.wav", np.zeros(1000))
    bad = tmp / "clip.wav"
    bad.write_bytes(good.read_bytes()[:30])
    return bad


def _corrupt(tmp: Path) -> Path:
    good = _wav(tmp / "c.flac", np.zeros(1000), subtype="PCM_16")
    data = bytearray(good.read_bytes())
    data[4:40] = b"\x00" * 36
    bad = tmp / "clip.flac"
    bad.write_bytes(bytes(data))
    return bad


BAD_INPUTS = {
    "truncated header": (_truncated, "not a readable sound file"),
    "corrupt header": (_corrupt, "not a readable sound file"),
    "zero-length clip": (lambda t: _wav(t / "clip.wav", np.zeros(0)), "at least 1 sample"),
    "nan samples": (
        lambda t: _wav(t / "clip.wav", np.array([0.0, np.nan, 0.1]), subtype="FLOAT"),
        "NaN or infinity",
    ),
    "inf samples": (
        lambda t: _wav(t / "clip.wav", np.array([0.0, np.inf, 0.1]), subtype="FLOAT"),
        "NaN or infinity",
    ),
}


@pytest.mark.parametrize("case", sorted(BAD_INPUTS))
def test_bad_clips_leave_earlier_outputs_intact(tmp_path: Path, earlier: Path, case: str) -> None:
    make, message = BAD_INPUTS[case]
    before = _snapshot(earlier)
    res = run("stream", str(make(tmp_path)), "--name", "clip", "-o", str(earlier))
    assert res.returncode == 2 and message in res.stderr, res.stderr
    assert len(res.stderr.strip().splitlines()) == 1
    assert _snapshot(earlier) == before


@pytest.mark.parametrize(
    ("data", "subtype", "rate"),
    [
        (np.array([0.5]), "PCM_16", 16000),  # one sample
        (0.4 * np.sin(np.arange(3000) / 3.0), "PCM_24", 44100),
        (0.4 * np.sin(np.arange(3000) / 3.0), "FLOAT", 96000),
        (np.tile(0.01 * np.arange(32), (2000, 1)), "FLOAT", 8000),  # 32 channels
        (0.4 * np.sin(np.arange(50) / 3.0), "PCM_16", 192000),  # extreme ratio: 192 k -> 8 k
        (0.4 * np.sin(np.arange(400) / 3.0), "PCM_16", 2000),  # 2 k -> 96 k
    ],
)
def test_unusual_but_valid_clips_work(
    tmp_path: Path, data: np.ndarray, subtype: str, rate: int
) -> None:
    clip = _wav(tmp_path / "u.wav", data, rate, subtype)
    out_rate = "8000" if rate == 192000 else ("96000" if rate == 2000 else "22050")
    res = run("stream", str(clip), "--rate-hz", out_rate, "-o", str(tmp_path / "o"), "--json")
    assert res.returncode == 0, res.stderr
    assert json.loads(res.stdout)["samples"] > 0


def test_unwritable_folder(tmp_path: Path) -> None:
    blocker = tmp_path / "file"
    blocker.write_text("x")
    clip = _wav(tmp_path / "c.wav", np.zeros(100))
    res = run("stream", str(clip), "-o", str(blocker / "sub"))
    assert res.returncode == 2 and "cannot create output folder" in res.stderr


def test_full_disk_leaves_earlier_outputs(tmp_path: Path, earlier: Path) -> None:
    # A file-size limit (RLIMIT_FSIZE) makes the big C source fail to write, as a full
    # disk would; Python ignores SIGXFSZ, so the write raises EFBIG.
    clip = _wav(tmp_path / "long.wav", 0.3 * np.sin(np.arange(160000) / 7.0))
    before = _snapshot(earlier)

    def limit() -> None:
        resource.setrlimit(resource.RLIMIT_FSIZE, (20000, 20000))

    res = run("stream", str(clip), "--name", "clip", "-o", str(earlier), preexec_fn=limit)
    assert res.returncode == 2 and "cannot write output" in res.stderr, res.stderr
    assert _snapshot(earlier) == before


@pytest.mark.slow
def test_killed_process_leaves_earlier_outputs(tmp_path: Path, earlier: Path) -> None:
    # Kill the process mid-run; the earlier bundle must be untouched, and the next run
    # removes any temporary files the killed one left.
    # long enough that the signal, a second in (after the imports), lands mid-job: a
    # signal during the interpreter's start or after main() returned cannot be handled
    clip = _wav(tmp_path / "long.wav", 0.3 * np.sin(np.arange(8_000_000) / 7.0))
    before = _snapshot(earlier)
    proc = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "ladderpack",
            "stream",
            str(clip),
            "--name",
            "clip",
            "-o",
            str(earlier),
            "--flash-bytes",
            str(1 << 30),
        ],
        cwd=REPO,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    deadline = time.time() + 30
    while time.time() < deadline:
        if any(p.name.endswith(".part") for p in earlier.iterdir()):
            break
        time.sleep(0.005)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    finals = {p.name: p.read_bytes() for p in earlier.iterdir() if not p.name.endswith(".part")}
    assert set(finals) == set(before)
    assert res_ok(
        run(
            "stream", str(clip), "--name", "clip", "-o", str(earlier), "--flash-bytes", str(1 << 30)
        )
    )
    assert not [p for p in earlier.iterdir() if p.name.endswith(".part")]


def res_ok(res: subprocess.CompletedProcess[str]) -> bool:
    return res.returncode == 0


@pytest.mark.slow
def test_ctrl_c_is_clean(tmp_path: Path, earlier: Path) -> None:
    # long enough that the signal, a second in (after the imports), lands mid-job: a
    # signal during the interpreter's start or after main() returned cannot be handled
    clip = _wav(tmp_path / "long.wav", 0.3 * np.sin(np.arange(8_000_000) / 7.0))
    before = _snapshot(earlier)
    proc = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "ladderpack",
            "stream",
            str(clip),
            "--name",
            "clip",
            "-o",
            str(earlier),
            "--flash-bytes",
            str(1 << 30),
        ],
        cwd=REPO,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        text=True,
    )
    time.sleep(1.0)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=60)
    if proc.returncode == 130:
        assert "interrupted" in err
        assert _snapshot(earlier) == before
    else:  # finished before the signal arrived: a complete new bundle
        assert proc.returncode == 0
    assert not [p for p in earlier.iterdir() if p.name.endswith(".part")]


def test_internal_error_exit_1_and_debug(tmp_path: Path) -> None:
    code = (
        "import ladderpack.cli as c, ladderpack.clock as k\n"
        "def boom(*a, **kw): raise ZeroDivisionError('boom')\n"
        "c.__dict__['_boom'] = boom\nimport ladderpack.clock\n"
        "ladderpack.clock.plan_clock = boom\n"
        "c.main({args})"
    )
    res = subprocess.run(
        [sys.executable, "-c", code.format(args="['clock', '8000']")],
        capture_output=True,
        text=True,
        cwd=REPO,
    )
    assert res.returncode == 1 and "internal error: ZeroDivisionError" in res.stderr
    assert "Traceback" not in res.stderr
    res = subprocess.run(
        [sys.executable, "-c", code.format(args="['--debug', 'clock', '8000']")],
        capture_output=True,
        text=True,
        cwd=REPO,
    )
    assert res.returncode == 1 and "Traceback" in res.stderr


HOSTILE = [
    "door chime",
    "Ünïcödé ☃",
    "int",
    "class",
    "for",
    "2nd",
    "a */ b",
    "q\"uote's",
    "new\nline",
    "../../etc/passwd",
    "a/b\\c",
    "..x",
    "main",
    "NULL",
    "_Bool",
    "__init__",
    "x" * 200,  # the longest identifier (longer ones are refused: file-name limits)
]


@pytest.mark.parametrize("name", HOSTILE)
def test_hostile_names_become_safe_identifiers(name: str) -> None:
    ident = asset_identifier(name)
    assert ident.isascii() and ident.replace("_", "a").isalnum() and not ident[0].isdigit()
    assert ident not in C_KEYWORDS and "/" not in ident and ".." not in ident


def test_name_without_letters_is_refused() -> None:
    with pytest.raises(LadderpackError, match="no letters or digits"):
        asset_identifier("../..")


def test_two_names_one_identifier_refused(tmp_path: Path) -> None:
    clip = _wav(tmp_path / "c.wav", np.zeros(200))
    assert (
        run("stream", str(clip), "--name", "Door Chime", "-o", str(tmp_path / "o")).returncode == 0
    )
    res = run("stream", str(clip), "--name", "door-chime", "-o", str(tmp_path / "o"))
    assert res.returncode == 2 and "same identifier 'door_chime'" in res.stderr


def test_hostile_source_file_name_stays_in_comments(tmp_path: Path) -> None:
    weird = tmp_path / "evil * #include <x> \u2603 'q\".wav"  # no '/' in a file name
    _wav(weird, 0.2 * np.sin(np.arange(500) / 4.0))
    out = tmp_path / "o"
    assert run("stream", str(weird), "--name", "evil", "-o", str(out)).returncode == 0
    cc_strict(tmp_path / "e.o", out / "evil.c", compile_only=True)
    import ast

    ast.parse((out / "evil.py").read_text())


@settings(
    max_examples=12,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture],
)
@given(st.text(min_size=1, max_size=40))
def test_any_name_gives_compiling_c_and_parsing_python(
    tmp_path_factory: pytest.TempPathFactory, name: str
) -> None:
    try:
        asset = small_asset(8, name=name, seconds=0.002)
    except LadderpackError:
        return  # no letters or digits: refused with a message
    folder = tmp_path_factory.mktemp("n")
    for fname, data in bundle_files(asset).items():
        (folder / fname).write_bytes(data)
    cc_strict(folder / "a.o", folder / f"{asset.name}.c", compile_only=True)
    import ast

    ast.parse((folder / f"{asset.name}.py").read_text(), feature_version=(3, 4))


@settings(max_examples=150, deadline=None)
@given(st.text(max_size=300))
def test_csv_reader_only_raises_tool_errors(text: str) -> None:
    import tempfile

    from ladderpack.levels import read_sweep_csv

    with tempfile.NamedTemporaryFile("w", suffix=".csv", delete=False, encoding="utf-8") as fh:
        fh.write(text)
    try:
        read_sweep_csv(fh.name, 3, fill="model")
    except LadderpackError:
        pass
    finally:
        os.unlink(fh.name)


@settings(max_examples=150, deadline=None)
@given(
    st.one_of(
        st.text(max_size=300),
        st.lists(
            st.sampled_from(
                [
                    "[project]",
                    "out_dir = 'g'",
                    "[defaults]",
                    "bits = 8",
                    "bits = 'x'",
                    "[[asset]]",
                    "name = 'a'",
                    "tone = 'sine'",
                    "clip = 'none.wav'",
                    "table = 'wave'",
                    "rate_hz = 1e99",
                    "seconds = -1",
                    "freq_hz = []",
                    "x = 1",
                    "[asset]",
                    "name = 3",
                    "levels = 'q'",
                ]
            ),
            max_size=12,
        ).map("\n".join),
    )
)
def test_manifest_reader_only_raises_tool_errors(text: str) -> None:
    import tempfile

    from ladderpack.build import load_manifest

    with tempfile.NamedTemporaryFile("w", suffix=".toml", delete=False, encoding="utf-8") as fh:
        fh.write(text)
    try:
        load_manifest(fh.name)
    except LadderpackError:
        pass
    finally:
        os.unlink(fh.name)


@pytest.mark.parametrize("text", ["a */ b", "/* x", "line\nbreak", "tab\there", "\u2603"])
def test_comment_text_is_neutralised(text: str) -> None:
    from ladderpack.emit.names import comment_safe

    safe = comment_safe(text)
    assert "*/" not in safe and "/*" not in safe and "\n" not in safe and safe.isascii()
