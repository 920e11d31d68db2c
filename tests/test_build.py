"""Manifest builds: incremental, depfile with real make, CMake, check mode, errors."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest
from helpers import require_tool

from ladderpack.build import STATE_NAME, build, load_manifest
from ladderpack.errors import LadderpackError

REPO = Path(__file__).resolve().parent.parent

MANIFEST = """\
[project]
out_dir = "gen"

[defaults]
bits = 8
rate_hz = 16000
out_base = 16

[[asset]]
name = "chime"
clip = "clips/chime.flac"

[[asset]]
name = "speech"
clip = "clips/speech.flac"
bits = 10

[[asset]]
name = "tone"
tone = "sine"
freq_hz = 1000
seconds = 0.02
loop = true

[[asset]]
name = "table"
table = "wave"
table_bits = 6
"""


@pytest.fixture
def project(tmp_path: Path) -> Path:
    (tmp_path / "clips").mkdir()
    shutil.copy(REPO / "demo_audio" / "door_chime.flac", tmp_path / "clips" / "chime.flac")
    shutil.copy(REPO / "demo_audio" / "frost_warning.flac", tmp_path / "clips" / "speech.flac")
    (tmp_path / "ladderpack.toml").write_text(MANIFEST)
    return tmp_path


def _build(project: Path, **kw: object) -> tuple[list[str], list[str]]:
    lines: list[str] = []
    res = build(load_manifest(project / "ladderpack.toml"), echo=lines.append, **kw)  # type: ignore[arg-type]
    return res.built, res.up_to_date


def _touch_later(path: Path) -> None:
    st = path.stat()
    os.utime(path, ns=(st.st_atime_ns, st.st_mtime_ns + 2_000_000_000))


def _touch_newer_than_all(path: Path, tree: Path) -> None:
    """Make `path` newer than every other file of `tree`, and all of them older than
    now, whatever time the builds so far took (no clock arithmetic on their speed)."""
    now = time.time_ns()
    for p in tree.rglob("*"):
        if p.is_file():
            os.utime(p, ns=(now - 20_000_000_000, now - 20_000_000_000))
    os.utime(path, ns=(now - 10_000_000_000, now - 10_000_000_000))


def test_incremental_builds(project: Path) -> None:
    built, _ = _build(project)
    assert built == ["chime", "speech", "tone", "table"]
    built, fresh = _build(project)
    assert built == [] and len(fresh) == 4
    _touch_later(project / "clips" / "chime.flac")
    built, _ = _build(project)
    assert built == ["chime"]
    # Changing a default rebuilds the assets that use it, not the one that overrides it.
    (project / "ladderpack.toml").write_text(MANIFEST.replace("bits = 8\n", "bits = 9\n", 1))
    built, _ = _build(project)
    assert built == ["chime", "tone"]


@pytest.mark.parametrize("jobs", [1, 2])
def test_build_reports_progress_per_asset(project: Path, jobs: int) -> None:
    seen: list[tuple[int, int]] = []
    built, _ = _build(project, jobs=jobs, progress=lambda done, total: seen.append((done, total)))
    assert len(built) == 4
    assert seen == [(k, 4) for k in range(1, 5)]
    seen.clear()
    _build(project, jobs=jobs, progress=lambda done, total: seen.append((done, total)))
    assert seen == []  # nothing to make, nothing reported


def test_index_lists_every_asset(project: Path) -> None:
    _build(project)
    text = (project / "gen" / "assets.py").read_text()
    ns: dict[str, object] = {}
    exec(text, ns)
    names = [row[0] for row in ns["ASSETS"]]  # type: ignore[attr-defined]
    assert names == sorted(["chime", "speech", "tone", "table"])


def test_outputs_identical_across_folders_and_jobs(
    project: Path, tmp_path_factory: pytest.TempPathFactory
) -> None:
    other = tmp_path_factory.mktemp("elsewhere") / "deep" / "copy"
    shutil.copytree(project, other)
    _build(project)
    lines: list[str] = []
    build(load_manifest(other / "ladderpack.toml"), jobs=2, echo=lines.append)
    a, b = project / "gen", other / "gen"
    names = sorted(p.name for p in a.iterdir() if p.name != STATE_NAME)
    assert names == sorted(p.name for p in b.iterdir() if p.name != STATE_NAME)
    for n in names:
        assert (a / n).read_bytes() == (b / n).read_bytes(), n
        assert str(project) not in (a / n).read_bytes().decode("latin-1")


def test_check_mode(project: Path) -> None:
    def check() -> list[tuple[str, str]]:
        out: list[str] = []
        return build(
            load_manifest(project / "ladderpack.toml"), check=True, echo=out.append
        ).problems

    assert [n for n, _ in check()] == ["chime", "speech", "tone", "table", "index"]
    _build(project)
    assert check() == []
    with open(project / "gen" / "tone.c", "a") as fh:
        fh.write("/* hand edit */\n")
    assert check() == [("tone", "tone.c was edited by hand")]
    _build(project)
    # --check goes by content: a touched but unchanged input is not stale ...
    _touch_later(project / "clips" / "speech.flac")
    assert check() == []
    # ... a changed one is
    shutil.copy(project / "clips" / "chime.flac", project / "clips" / "speech.flac")
    assert [n for n, _ in check()] == ["speech"]
    res = subprocess.run(
        [sys.executable, "-m", "ladderpack", "build", "--check"],
        cwd=project,
        capture_output=True,
        text=True,
    )
    assert res.returncode == 1 and "speech" in res.stderr


def test_check_on_a_fresh_clone_goes_by_content(project: Path) -> None:
    # A project that commits its generated files, cloned: no build state (it is not
    # committed, or it is and every file time is new) and every file time changed. The
    # outputs match their inputs byte for byte (SHA-256 by hashlib), so nothing is stale.
    _build(project)
    (project / "gen" / STATE_NAME).unlink()
    now = time.time_ns()
    for i, p in enumerate(sorted(project.rglob("*"))):
        if p.is_file():  # checkout order: outputs may come out older than inputs
            os.utime(p, ns=(now - i * 1_000_000, now - i * 1_000_000))
    out: list[str] = []
    res = build(load_manifest(project / "ladderpack.toml"), check=True, echo=out.append)
    assert res.problems == [], out
    # an output that no longer matches is still found, and named
    with open(project / "gen" / "chime.h", "a") as fh:
        fh.write("/* edited */\n")
    res = build(load_manifest(project / "ladderpack.toml"), check=True, echo=out.append)
    assert res.problems == [("chime", "chime.h differs from what its inputs give")]


BAD = [
    (
        "[[asset]]\nname = 'a'\nclip = 'clips/chime.flac'\nbitz = 8\n",
        "asset 'a'.bitz",
        "unknown key",
    ),
    (
        "[[asset]]\nname = 'a'\nclip = 'clips/chime.flac'\nbits = '8'\n",
        "asset 'a'.bits",
        "expected int",
    ),
    (
        "[[asset]]\nname = 'a'\nclip = 'clips/chime.flac'\ntone = 'sine'\n",
        "asset 'a'",
        "exactly one of clip, tone or table",
    ),
    ("[[asset]]\nclip = 'clips/chime.flac'\n", "name", "needs a name"),
    (
        "[[asset]]\nname = 'a b'\ntone = 'sine'\n[[asset]]\nname = 'a-b'\ntone = 'sine'\n",
        "asset 'a-b'.name",
        "both become 'a_b'",
    ),
    ("[[asset]]\nname = 'a'\nclip = 'clips/none.flac'\n", "asset 'a'.clip", "does not exist"),
    ("[[asset]]\nname = 'a'\ntable = 'maze'\n", "asset 'a'.table", "expected one of"),
    ("[project]\nout = 'x'\n", "project", "unknown key"),
    ("[[asset]\n", "", "not valid TOML"),
    ("[defaults]\nbits = true\n[[asset]]\nname='a'\ntone='sine'\n", "bits", "boolean"),
    ("[[asset]]\nname = 'a'\ntone = 'sine'\nseconds = 1.0\ncycles = 3\n", "cycles", "not both"),
]


@pytest.mark.parametrize(("text", "where", "message"), BAD)
def test_manifest_errors(project: Path, text: str, where: str, message: str) -> None:
    path = project / "ladderpack.toml"
    path.write_text(text)
    with pytest.raises(LadderpackError) as exc:
        load_manifest(path)
    assert str(path) in str(exc.value) and where in str(exc.value) and message in str(exc.value)
    res = subprocess.run(
        [sys.executable, "-m", "ladderpack", "build"], cwd=project, capture_output=True, text=True
    )
    assert res.returncode == 2 and len(res.stderr.splitlines()) == 1


def _copy_example(kind: str, dest: Path) -> Path:
    shutil.copytree(REPO / "examples" / kind, dest / "examples" / kind)
    (dest / "demo_audio").mkdir()
    shutil.copy(REPO / "demo_audio" / "door_chime.flac", dest / "demo_audio")
    return dest / "examples" / kind


def _ladderpack_env() -> dict[str, str]:
    env = dict(os.environ)
    bindir = os.path.dirname(sys.executable)
    env["PATH"] = bindir + os.pathsep + env.get("PATH", "")
    return env


@pytest.mark.slow
def test_make_with_depfile(tmp_path: Path) -> None:
    # Real GNU make reads the depfile: the second run does nothing, and touching the clip
    # remakes exactly that asset (and the program that links it).
    make = require_tool("make")
    ex = _copy_example("make", tmp_path)
    env = _ladderpack_env()
    first = subprocess.run([make], cwd=ex, capture_output=True, text=True, env=env)
    assert first.returncode == 0, first.stderr
    # a clean first build prints no error (make once tried to remake the depfile through
    # the asset rule and ran ladderpack with --only deps.d)
    assert "ladderpack: error" not in first.stdout + first.stderr
    assert "--only deps.d" not in first.stdout
    second = subprocess.run([make], cwd=ex, capture_output=True, text=True, env=env)
    assert "is up to date" in second.stdout and "ladderpack build" not in second.stdout
    # Newer than everything make has seen, however long the builds took.
    _touch_newer_than_all(tmp_path / "demo_audio" / "door_chime.flac", tmp_path)
    third = subprocess.run([make], cwd=ex, capture_output=True, text=True, env=env)
    runs = [ln for ln in third.stdout.splitlines() if ln.startswith("ladderpack build")]
    assert runs == ["ladderpack build ladderpack.toml --only door_chime --depfile generated/deps.d"]
    assert "door_chime: built" in third.stdout and "bench_tone: built" not in third.stdout
    fourth = subprocess.run([make], cwd=ex, capture_output=True, text=True, env=env)
    assert "is up to date" in fourth.stdout
    table = subprocess.run([str(ex / "host")], capture_output=True, text=True).stdout
    assert "door_chime" in table and "sine_table" in table


@pytest.mark.slow
def test_cmake_example(tmp_path: Path) -> None:
    # Real CMake (Debian package cmake) configures and builds the example.
    cmake = require_tool("cmake")
    ex = _copy_example("cmake", tmp_path)
    env = _ladderpack_env()
    bdir = tmp_path / "build"
    subprocess.run(
        [cmake, "-S", str(ex), "-B", str(bdir)], check=True, capture_output=True, env=env
    )
    subprocess.run([cmake, "--build", str(bdir)], check=True, capture_output=True, env=env)
    out = subprocess.run([str(bdir / "host")], capture_output=True, text=True).stdout
    assert out.splitlines()[0].split() == [
        "asset",
        "kind",
        "rate_hz",
        "bits",
        "samples",
        "words",
        "bytes",
    ]
    assert [ln.split()[0] for ln in out.splitlines()[1:]] == [
        "bench_tone",
        "door_chime",
        "sine_table",
    ]


def _manifest(tmp_path: Path, body: str) -> Path:
    shutil.copy(REPO / "demo_audio" / "door_chime.flac", tmp_path / "chime.flac")
    path = tmp_path / "ladderpack.toml"
    path.write_text(body)
    return path


def test_manifest_takes_every_stream_option_from_the_model(tmp_path: Path) -> None:
    # loudness_lufs (a float with no default) and target were refused before the option
    # model; any StreamOptions field is a manifest key now.
    m = load_manifest(
        _manifest(
            tmp_path,
            '[defaults]\ntarget = "rp2350"\n\n[[asset]]\nname = "a"\nclip = "chime.flac"\n'
            "loudness_lufs = -18.0\ntrue_peak_dbtp = -2\n",
        )
    )
    assert m.assets[0].options["loudness_lufs"] == -18.0
    assert m.flash_bytes == 4 * 1024 * 1024  # the rp2350 target's default


@pytest.mark.parametrize(
    ("asset", "message"),
    [
        ('clip = "chime.flac"\nbits = 40', "asset 'a'.bits: must be a whole number 1..16"),
        ('clip = "chime.flac"\ncrossfade_ms = 5.0', "asset 'a'.crossfade_ms: applies only"),
        ('tone = "sine"\nheadroom_db = 3.0', "asset 'a'.headroom_db: does not apply"),
        ('tone = "sine"\nseconds = -1.0', "asset 'a'.seconds: must be a number > 0"),
        ('table = "wave"\ntable_bits = 1', "asset 'a'.table_bits: must be a whole number 2..16"),
    ],
)
def test_manifest_values_checked_by_the_model(tmp_path: Path, asset: str, message: str) -> None:
    path = _manifest(tmp_path, f'[[asset]]\nname = "a"\n{asset}\n')
    with pytest.raises(LadderpackError) as info:
        load_manifest(path)
    assert str(info.value).startswith(f"{path}: {message}"), str(info.value)


def test_a_compressed_asset_counts_its_compressed_bytes(project: Path, tmp_path: Path) -> None:
    # 60 000 bytes for streams: the spoken clip at 8 bits is 88 916 bytes raw and 31 824
    # compressed, so it fits only compressed, and the build's flash total says so
    text = MANIFEST.replace(
        "out_base = 16\n", "out_base = 16\nflash_bytes = 300000\nflash_reserve_bytes = 240000\n"
    ).replace('clip = "clips/speech.flac"\nbits = 10\n', 'clip = "clips/speech.flac"\n')
    text = text.split('[[asset]]\nname = "tone"')[0]  # chime and speech only
    (project / "ladderpack.toml").write_text(text)
    with pytest.raises(LadderpackError, match="flash"):
        _build(project)
    for clip in ("chime", "speech"):
        line = f'clip = "clips/{clip}.flac"\n'
        text = text.replace(line, line + 'compress = "lossless"\n')
    (project / "ladderpack.toml").write_text(text)
    built, _ = _build(project)
    assert built == ["chime", "speech"]
    ns: dict[str, object] = {}
    exec((project / "gen" / "assets.py").read_text(), ns)
    rows = {r[0]: r for r in ns["ASSETS"]}  # type: ignore[attr-defined]
    assert rows["speech"][7] == (project / "gen" / "speech.bin").stat().st_size < 88916 // 2
    c = (project / "gen" / "assets.c").read_text()
    assert "speech_words" not in c and "chime_words" not in c  # no words array: NULL
    gcc = shutil.which("gcc")
    if gcc:  # the index and the compressed sources compile together (gcc, Debian)
        gen = project / "gen"
        for src in ("assets.c", "speech.c", "chime.c"):
            subprocess.run(
                [gcc, "-std=c11", "-Wall", "-Wextra", "-Werror", "-fsyntax-only",
                 "-I", str(gen), str(gen / src)],
                check=True, capture_output=True,
            )  # fmt: skip


def test_an_adpcm_asset_in_a_manifest(tmp_path: Path) -> None:
    # an I2S asset stored as IMA ADPCM: its index row counts the coded bytes, has no words
    # array, and the index and sources compile together (gcc, Debian)
    (tmp_path / "ladderpack.toml").write_text(
        '[project]\nout_dir = "gen"\n\n[[asset]]\nname = "amp"\ntone = "sine"\n'
        'seconds = 0.2\noutput = "i2s"\ncompress = "adpcm"\n'
    )
    built, _ = _build(tmp_path)
    assert built == ["amp"]
    gen = tmp_path / "gen"
    ns: dict[str, object] = {}
    exec((gen / "assets.py").read_text(), ns)
    (row,) = ns["ASSETS"]  # type: ignore[misc]
    assert row[7] == (gen / "amp.bin").stat().st_size < row[6] * 4 // 7
    assert "amp_words" not in (gen / "assets.c").read_text()
    gcc = shutil.which("gcc")
    if gcc:
        for src in ("assets.c", "amp.c"):
            subprocess.run(
                [gcc, "-std=c11", "-Wall", "-Wextra", "-Werror", "-fsyntax-only",
                 "-I", str(gen), str(gen / src)],
                check=True, capture_output=True,
            )  # fmt: skip
