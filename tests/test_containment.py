"""A build step that never damages what it did not write (containment, ownership,
names, escaping, untrusted read-backs, whole-set replace, one writer per folder).

Each test attempts the attack and shows: decoy files unchanged (hashed), exit status 2
with one line on stderr, and no injected text turned into code (gcc -Werror on the C,
``ast`` on the Python, GNU make on the depfile).
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import subprocess
import sys
import textwrap
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from helpers import cc_strict, require_tool

import ladderpack.emit as emit
from ladderpack.build import STATE_NAME, build, load_manifest, make_escape
from ladderpack.errors import LadderpackError

REPO = Path(__file__).resolve().parent.parent
TONE = 'tone = "sine"\nfreq_hz = 1000\nseconds = 0.01\nramp_ms = 1.0\n'


def _manifest(root: Path, body: str, out_dir: str = "gen") -> Path:
    text = f'[project]\nout_dir = "{out_dir}"\n\n[defaults]\nbits = 8\nrate_hz = 16000\n\n'
    (root / "ladderpack.toml").write_text(text + body)
    return root / "ladderpack.toml"


def _asset(name: str, extra: str = "") -> str:
    return f'[[asset]]\nname = "{name}"\n{TONE}{extra}\n'


def _hashes(folder: Path) -> dict[str, str]:
    return {
        p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.rglob("*"))
        if p.is_file()
    }


def _cli(*args: str, cwd: Path) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "ladderpack", *args], cwd=cwd, capture_output=True, text=True
    )


def _one_line_exit_2(res: subprocess.CompletedProcess[str]) -> None:
    assert res.returncode == 2, res.stderr
    assert len(res.stderr.strip().splitlines()) == 1, res.stderr
    assert "Traceback" not in res.stderr


# -- containment --------------------------------------------------------------------


@pytest.mark.parametrize("out_dir", ["../elsewhere", "/tmp/ladderpack-abs-target", "sub/../.."])
def test_manifest_cannot_send_outputs_outside_its_folder(tmp_path: Path, out_dir: str) -> None:
    root = tmp_path / "proj"
    root.mkdir()
    decoy = tmp_path / "elsewhere"
    decoy.mkdir()
    (decoy / "beep.c").write_text("int precious;\n")
    before = _hashes(tmp_path)
    mf = _manifest(root, _asset("beep"), out_dir=out_dir)
    with pytest.raises(LadderpackError, match="inside the manifest's folder"):
        load_manifest(mf)
    _one_line_exit_2(_cli("build", str(mf), cwd=root))
    after = _hashes(tmp_path)
    assert {k: v for k, v in after.items() if not k.startswith("proj/")} == {
        k: v for k, v in before.items() if not k.startswith("proj/")
    }
    assert not Path("/tmp/ladderpack-abs-target").exists()


def test_symlinked_out_dir_is_resolved_before_the_check(tmp_path: Path) -> None:
    root = tmp_path / "proj"
    root.mkdir()
    (tmp_path / "victim").mkdir()
    (root / "gen").symlink_to(tmp_path / "victim")
    with pytest.raises(LadderpackError, match="resolves to"):
        load_manifest(_manifest(root, _asset("beep")))


def test_command_line_out_dir_may_go_anywhere(tmp_path: Path) -> None:
    root = tmp_path / "proj"
    root.mkdir()
    mf = _manifest(root, _asset("beep"), out_dir="../elsewhere")
    res = _cli("build", str(mf), "--out-dir", str(tmp_path / "chosen"), cwd=root)
    assert res.returncode == 0, res.stderr
    assert (tmp_path / "chosen" / "beep.c").exists()


# -- ownership ----------------------------------------------------------------------


def test_users_files_in_the_way_are_never_replaced(tmp_path: Path) -> None:
    # out_dir "." with the user's own assets.py and beep.c beside the manifest.
    (tmp_path / "assets.py").write_text("print('mine')\n")
    (tmp_path / "beep.c").write_text("int mine;\n")
    before = _hashes(tmp_path)
    mf = _manifest(tmp_path, _asset("beep"), out_dir=".")
    res = _cli("build", str(mf), cwd=tmp_path)
    _one_line_exit_2(res)
    assert "not written by ladderpack" in res.stderr and "beep.c" in res.stderr
    after = _hashes(tmp_path)
    assert {k: after[k] for k in before if k != "ladderpack.toml"} == {
        k: v for k, v in before.items() if k != "ladderpack.toml"
    }


def test_own_files_are_replaced_and_recorded(tmp_path: Path) -> None:
    emit.write_files({"a.txt": b"1"}, tmp_path)
    emit.write_files({"a.txt": b"2"}, tmp_path)
    assert (tmp_path / "a.txt").read_bytes() == b"2"
    assert emit.owned_files(tmp_path) == {"a.txt": hashlib.sha256(b"2").hexdigest()}


def test_a_symlink_in_the_way_is_not_followed(tmp_path: Path) -> None:
    victim = tmp_path / "victim.c"
    victim.write_text("int precious;\n")
    out = tmp_path / "out"
    out.mkdir()
    (out / "beep.c").symlink_to(victim)
    with pytest.raises(LadderpackError, match="not written by ladderpack"):
        emit.write_files({"beep.c": b"x"}, out)
    assert victim.read_text() == "int precious;\n"


# -- names --------------------------------------------------------------------------


@pytest.mark.parametrize("name", ["assets", "ladderpack_player", "rp2", "machine", "boot"])
def test_reserved_names_are_refused(tmp_path: Path, name: str) -> None:
    res = _cli("build", str(_manifest(tmp_path, _asset(name))), cwd=tmp_path)
    _one_line_exit_2(res)
    assert "reserved" in res.stderr
    assert not (tmp_path / "gen").exists()


@pytest.mark.parametrize(
    ("first", "second", "symbol"),
    [
        (_asset("door", "loop = true\n"), _asset("door_intro"), "DOOR_INTRO_WORD_COUNT"),
        (_asset("bell"), _asset("bell_requested"), "BELL_REQUESTED_RATE_HZ"),
        (_asset("player"), _asset("chime"), "LADDERPACK_PLAYER_H"),
    ],
    ids=["loop-intro", "rate-define", "player-guard"],
)
def test_symbol_clashes_are_refused_before_writing(
    tmp_path: Path, first: str, second: str, symbol: str
) -> None:
    res = _cli("build", str(_manifest(tmp_path, first + second)), cwd=tmp_path)
    _one_line_exit_2(res)
    assert symbol in res.stderr
    assert not (tmp_path / "gen" / "assets.c").exists()


def test_index_of_many_assets_compiles(tmp_path: Path) -> None:
    # gcc -std=c99 -Werror over the index, which includes every asset's header.
    body = _asset("door", "loop = true\n") + _asset("bell") + _asset("frost")
    build(load_manifest(_manifest(tmp_path, body)), echo=lambda s: None)
    cc_strict(
        tmp_path / "a.o",
        tmp_path / "gen" / "assets.c",
        compile_only=True,
        extra=("-I", str(tmp_path / "gen")),
    )


# -- nothing unescaped, nothing trusted ------------------------------------------------


def test_depfile_names_are_escaped_for_make(tmp_path: Path) -> None:
    # GNU make reads the depfile: hostile but legal names become plain prerequisites,
    # and `make -n` runs no command from them.
    make = require_tool("make")
    clip_name = "door chime #2: 50% $HOME.flac"
    shutil.copy(REPO / "demo_audio" / "door_chime.flac", tmp_path / clip_name)
    mf = _manifest(tmp_path, f'[[asset]]\nname = "chime"\nclip = "{clip_name}"\n')
    res = _cli("build", str(mf), "--depfile", "gen.d", cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    (tmp_path / "Makefile").write_text(
        "include gen.d\nall: gen/chime.c\n\t@echo made\n", encoding="utf-8"
    )
    dry = subprocess.run([make, "-n", "all"], cwd=tmp_path, capture_output=True, text=True)
    assert dry.returncode == 0, dry.stderr
    assert dry.stdout.splitlines() == ["echo made"]
    db = subprocess.run([make, "-p", "-q", "all"], cwd=tmp_path, capture_output=True, text=True)
    assert f"gen/chime.c: ladderpack.toml {clip_name}" in db.stdout.replace("\\", "")


@pytest.mark.parametrize("bad", ["a\nrm -rf x:y.flac", "tab\there.flac", "back\\slash.flac"])
def test_depfile_refuses_names_make_cannot_carry(tmp_path: Path, bad: str) -> None:
    shutil.copy(REPO / "demo_audio" / "door_chime.flac", tmp_path / bad)
    clip = json.dumps(bad)  # a TOML basic string accepts JSON escapes
    mf = _manifest(tmp_path, f'[[asset]]\nname = "chime"\nclip = {clip}\n')
    res = _cli("build", str(mf), "--depfile", "gen.d", cwd=tmp_path)
    _one_line_exit_2(res)
    assert "depfile" in res.stderr
    assert not (tmp_path / "gen.d").exists() and not (tmp_path / "gen").exists()


def test_make_escape_examples() -> None:
    # GNU make (Debian's make, checked by the test above): $$ for $, backslash before
    # space, # and :; % is literal in a prerequisite and refused in a target.
    assert make_escape("a b#c:d%e$f") == "a\\ b\\#c\\:d%e$$f"
    with pytest.raises(LadderpackError):
        make_escape("gen%/x.c", target=True)


def _state(tmp_path: Path) -> Path:
    build(load_manifest(_manifest(tmp_path, _asset("beep"))), echo=lambda s: None)
    return tmp_path / "gen" / STATE_NAME


def test_edited_state_field_is_not_pasted_into_c(tmp_path: Path) -> None:
    state = _state(tmp_path)
    doc = json.loads(state.read_text())
    doc["assets"]["beep"]["entry"]["kind"] = 'tone", 0}; int evil(void) { return 1; } //'
    state.write_text(json.dumps(doc))
    build(load_manifest(tmp_path / "ladderpack.toml"), echo=lambda s: None)
    text = (tmp_path / "gen" / "assets.c").read_text()
    assert "evil" not in text
    cc_strict(
        tmp_path / "a.o",
        tmp_path / "gen" / "assets.c",
        compile_only=True,
        extra=("-I", str(tmp_path / "gen")),
    )


@pytest.mark.parametrize(
    "content", ["[1, 2]", "{", '{"assets": 5}', '{"assets": {"beep": []}}', "[" * 5000]
)
def test_damaged_state_file_means_rebuild(tmp_path: Path, content: str) -> None:
    state = _state(tmp_path)
    state.write_text(content)
    lines: list[str] = []
    res = build(load_manifest(tmp_path / "ladderpack.toml"), echo=lines.append)
    assert res.built == ["beep"]
    assert json.loads(state.read_text())["assets"]["beep"]["entry"]["name"] == "beep"


def test_sidecar_asset_field_cannot_leave_the_bundle(tmp_path: Path) -> None:
    out = tmp_path / "b"
    assert _cli("tone", "sine", "--seconds", "0.01", "-o", str(out), cwd=tmp_path).returncode == 0
    side = out / "sine.json"
    doc = json.loads(side.read_text())
    doc["asset"] = "../x/victim"
    side.write_text(json.dumps(doc))
    res = _cli("preview", str(side), "-o", str(tmp_path / "p.wav"), cwd=tmp_path)
    _one_line_exit_2(res)
    assert "asset" in res.stderr


@pytest.mark.parametrize(
    "edit",
    [
        lambda d: d["layout"].update(bits="eight"),
        lambda d: d["stream"].update(sample_count=-5),
        lambda d: d.pop("layout"),
    ],
    ids=["bits text", "negative count", "no layout"],
)
def test_bad_sidecar_fields_exit_2(tmp_path: Path, edit: object) -> None:
    out = tmp_path / "b"
    assert _cli("tone", "sine", "--seconds", "0.01", "-o", str(out), cwd=tmp_path).returncode == 0
    side = out / "sine.json"
    doc = json.loads(side.read_text())
    edit(doc)  # type: ignore[operator]
    side.write_text(json.dumps(doc))
    _one_line_exit_2(_cli("preview", str(side), "-o", str(tmp_path / "p.wav"), cwd=tmp_path))


# -- whole sets ---------------------------------------------------------------------

_KILLER = textwrap.dedent(
    """
    import os, sys
    import ladderpack.emit as emit
    target = sys.argv[2]
    def hook(step):
        if step == target:
            os._exit(9)
    emit._step_hook = hook
    emit.write_files({n: (n + "-new").encode() for n in ("a.bin", "a.c", "a.json")}, sys.argv[1])
    """
)
_STEPS = [
    "temp a.bin",
    "temp a.c",
    "temp a.json",
    "journal written",
    "journal committed",
    "moved a.bin",
    "moved a.c",
    "moved a.json",
    f"moved {emit.RECORD_NAME}",
    "done",
]


@pytest.mark.parametrize("step", _STEPS)
def test_killed_replace_leaves_the_old_or_the_new_set(tmp_path: Path, step: str) -> None:
    names = ("a.bin", "a.c", "a.json")
    emit.write_files({n: (n + "-old").encode() for n in names}, tmp_path)
    res = subprocess.run(
        [sys.executable, "-c", _KILLER, str(tmp_path), step], capture_output=True, text=True
    )
    assert res.returncode == 9, res.stderr
    with emit.folder_lock(tmp_path):
        emit.recover(tmp_path)  # what the next run does first
    got = {n: (tmp_path / n).read_bytes() for n in names}
    old = {n: (n + "-old").encode() for n in names}
    new = {n: (n + "-new").encode() for n in names}
    committed = _STEPS.index(step) >= _STEPS.index("journal committed")
    assert got == (new if committed else old)
    assert not [p for p in os.listdir(tmp_path) if p.endswith(".part")]
    assert not emit.pending_journal(tmp_path)
    assert set(emit.owned_files(tmp_path)) == set(names)


def test_check_recognises_an_interrupted_replace(tmp_path: Path) -> None:
    _state(tmp_path)
    (tmp_path / "gen" / emit.JOURNAL_NAME).write_text('{"moves": []}')
    res = _cli("build", "--check", cwd=tmp_path)
    assert res.returncode == 1
    assert "interrupted" in res.stdout


# -- one writer per folder ------------------------------------------------------------


def test_second_writer_waits_then_gives_up(tmp_path: Path) -> None:
    holder = subprocess.Popen(
        [
            sys.executable,
            "-c",
            "import sys, time, ladderpack.emit as e\n"
            "with e.folder_lock(sys.argv[1]):\n    print('held', flush=True); time.sleep(30)\n",
            str(tmp_path),
        ],
        stdout=subprocess.PIPE,
        text=True,
    )
    try:
        assert holder.stdout is not None and holder.stdout.readline().strip() == "held"
        with (
            pytest.raises(LadderpackError, match="another ladderpack run"),
            emit.folder_lock(tmp_path, wait_s=0.3),
        ):
            pass
    finally:
        holder.kill()
        holder.wait()
    with emit.folder_lock(tmp_path, wait_s=5):  # free again once the holder is gone
        pass


def test_two_builds_on_one_folder_both_succeed(tmp_path: Path) -> None:
    mf = _manifest(tmp_path, _asset("beep") + _asset("bell"))
    procs = [
        subprocess.Popen(
            [sys.executable, "-m", "ladderpack", "build", str(mf)],
            cwd=tmp_path,
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
        )
        for _ in range(2)
    ]
    for p in procs:
        _out, err = p.communicate(timeout=120)
        assert p.returncode == 0, err
    assert _cli("build", "--check", cwd=tmp_path).returncode == 0


# -- bad input refused cleanly -------------------------------------------------------


def test_named_pipe_as_clip_is_refused_at_once(tmp_path: Path) -> None:
    fifo = tmp_path / "clip.wav"
    os.mkfifo(fifo)
    res = subprocess.run(
        [sys.executable, "-m", "ladderpack", "stream", str(fifo), "-o", str(tmp_path / "o")],
        capture_output=True,
        text=True,
        timeout=60,
    )
    _one_line_exit_2(res)
    assert "named pipe" in res.stderr


@pytest.mark.parametrize("fmt", ["WAV", "AIFF"])
def test_truncated_clip_is_refused(tmp_path: Path, fmt: str) -> None:
    # The data/SSND chunk length (Microsoft RIFF WAVE; Apple AIFF 1.3) promises more
    # bytes than the file holds.
    import numpy as np
    import soundfile as sf

    whole = tmp_path / f"c.{fmt.lower()}"
    sf.write(whole, np.zeros(30000), 44100, subtype="PCM_16", format=fmt)
    cut = tmp_path / f"cut.{fmt.lower()}"
    cut.write_bytes(whole.read_bytes()[: whole.stat().st_size // 3])
    res = _cli("stream", str(cut), "-o", str(tmp_path / "o"), cwd=tmp_path)
    _one_line_exit_2(res)
    assert "cut short" in res.stderr
    assert _cli("stream", str(whole), "-o", str(tmp_path / "o"), cwd=tmp_path).returncode == 0


@pytest.mark.parametrize(
    ("body", "field"),
    [
        ('[[asset]]\nname = "t"\ntable = "wave"\nfreqs_hz = ["a", 2]\n', "freqs_hz"),
        ('[[asset]]\nname = "t"\ntone = "multitone"\ntones = [[1, "x"]]\n', "tones"),
        ('[[asset]]\nname = "t"\ntone = "sine"\n\n[defaults]\nflash_bytes = inf\n', "flash"),
        ('[[asset]]\nname = "t"\ntone = "sine"\nheadroom_db = 1e300\n', "headroom_db"),
        ("x = " + "[" * 3000 + "]" * 3000 + "\n", "nested"),
    ],
    ids=["text in freqs", "junk tones", "flash inf", "huge headroom", "deep nesting"],
)
def test_bad_manifest_values_exit_2(tmp_path: Path, body: str, field: str) -> None:
    (tmp_path / "ladderpack.toml").write_text(body)
    res = _cli("build", cwd=tmp_path)
    _one_line_exit_2(res)
    assert field in res.stderr


def test_huge_headroom_on_the_command_line(tmp_path: Path) -> None:
    clip = str(REPO / "demo_audio" / "door_chime.flac")  # a clip option: tone has none
    res = _cli("stream", clip, "--headroom-db", "1e300", "-o", str(tmp_path / "o"), cwd=tmp_path)
    _one_line_exit_2(res)


def test_json_output_is_strict(tmp_path: Path) -> None:
    # RFC 8259 has no NaN or Infinity: every --json output must parse strictly.
    res = _cli("tone", "dc", "--seconds", "0.01", "--json", "-o", str(tmp_path / "o"), cwd=tmp_path)
    assert res.returncode == 0, res.stderr

    def refuse(name: str) -> None:
        raise ValueError(name)

    json.loads(res.stdout, parse_constant=refuse)
    json.loads((tmp_path / "o" / "dc.json").read_text(), parse_constant=refuse)


def test_json_text_writes_null_for_non_finite_numbers() -> None:
    # RFC 8259 section 6: "Numeric values that cannot be represented ... (such as Infinity
    # and NaN) are not permitted."  The standard library would write them as bare words.
    from ladderpack.reading import json_text

    doc = {"snr_db": float("inf"), "nested": [float("nan"), 1.5], "bits": 8}
    assert json.dumps(doc, sort_keys=True).count("Infinity") == 1
    assert json_text(doc, indent=None) == '{"bits": 8, "nested": [null, 1.5], "snr_db": null}'


def test_levels_json_with_nan_is_refused(tmp_path: Path) -> None:
    bad = tmp_path / "l.json"
    bad.write_text('{"format": "ladderpack-levels", "bits": 1, "volts": [0, NaN]}')
    res = _cli("table", "correction", str(bad), "-o", str(tmp_path / "o"), cwd=tmp_path)
    _one_line_exit_2(res)
    assert "NaN is not JSON" in res.stderr


def _sweep(tmp_path: Path, text: str) -> subprocess.CompletedProcess[str]:
    csv = tmp_path / "sweep.csv"
    csv.write_bytes(text.encode("utf-8"))
    return _cli("levels", str(csv), "--bits", "2", "-o", str(tmp_path / "l.json"), cwd=tmp_path)


def test_csv_with_byte_order_mark_is_read(tmp_path: Path) -> None:
    res = _sweep(tmp_path, "\ufeffcode,volts\n0,0.0\n1,0.8\n2,1.6\n3,2.4\n")
    assert res.returncode == 0, res.stderr


def test_csv_with_semicolons_is_named_as_such(tmp_path: Path) -> None:
    res = _sweep(tmp_path, "code;volts\n0;0.0\n1;0.8\n2;1.6\n3;2.4\n")
    _one_line_exit_2(res)
    assert "';'" in res.stderr and "comma" in res.stderr


# -- hostile input on the newer surfaces (each test is an issue's repro) --------------------


@pytest.mark.parametrize(
    "args",
    [
        ["--output", "i2s", "--name", "ladderpack_i2s"],
        ["--output", "pwm", "--name", "ladderpack_pwm"],
        ["--output", "i2c-dac", "--rate-hz", "4000", "--name", "ladderpack_i2c"],
        ["--stereo", "--name", "ladderpack_stereo"],
        ["--name", "ladderpack_pwm"],  # a ladder asset beside a PWM asset's player
    ],
)
def test_player_file_names_are_reserved(tmp_path: Path, args: list[str]) -> None:
    res = _cli("tone", "sine", "--seconds", "0.05", "-o", "b", *args, cwd=tmp_path)
    _one_line_exit_2(res)
    assert "reserved" in res.stderr and not (tmp_path / "b").exists()


def test_every_shared_file_of_every_output_is_a_reserved_name(tmp_path: Path) -> None:
    # the reserved list comes from the registry the players take their names from: a
    # bundle's files are the asset's own or a registered player's, for every output
    from ladderpack.bundle import bundle_files
    from ladderpack.emit.names import RESERVED_NAMES
    from ladderpack.stream import stream_tone

    kinds = [
        {}, {"stereo": True}, {"output": "i2s"}, {"output": "pwm"},
        {"output": "i2c-dac", "rate_hz": 4000.0},
    ]  # fmt: skip
    for opts in kinds:
        files = bundle_files(stream_tone("sine", name="t", seconds=0.01, **opts))
        shared = {Path(n).stem for n in files if Path(n).stem != "t"}
        assert shared and shared <= set(RESERVED_NAMES), (opts, shared)


_TERMINATOR = textwrap.dedent(
    """
    import os, signal, sys
    import ladderpack.emit as emit
    from ladderpack.cli import signals_as_interrupt
    signals_as_interrupt()  # what main() does first
    target = sys.argv[2]
    def hook(step):
        if step == target:
            os.kill(os.getpid(), getattr(signal, sys.argv[3]))
    emit._step_hook = hook
    try:
        emit.write_files({n: (n + "-new").encode() for n in ("a.bin", "a.c", "a.json")},
                         sys.argv[1])
    except KeyboardInterrupt:
        sys.exit(143)
    """
)


@pytest.mark.parametrize("sig", ["SIGTERM", "SIGHUP"])
@pytest.mark.parametrize("step", _STEPS[:-1])
def test_sigterm_and_sighup_at_any_step_leave_a_whole_set(
    tmp_path: Path, step: str, sig: str
) -> None:
    # as Ctrl-C: no .part file, no pending journal, the old set or the whole new one,
    # without a next run to finish anything
    names = ("a.bin", "a.c", "a.json")
    emit.write_files({n: (n + "-old").encode() for n in names}, tmp_path)
    res = subprocess.run(
        [sys.executable, "-c", _TERMINATOR, str(tmp_path), step, sig],
        capture_output=True, text=True,
    )  # fmt: skip
    assert res.returncode == 143, res.stderr
    got = {n: (tmp_path / n).read_bytes() for n in names}
    committed = _STEPS.index(step) >= _STEPS.index("journal committed")
    assert got == {n: (n + ("-new" if committed else "-old")).encode() for n in names}
    assert not [p for p in os.listdir(tmp_path) if p.endswith(".part")]
    assert not emit.pending_journal(tmp_path)


def test_sigterm_exit_status_and_message(tmp_path: Path) -> None:
    import signal
    import time

    proc = subprocess.Popen(
        [sys.executable, "-m", "ladderpack", "tone", "white", "--seconds", "600",
         "--rate-hz", "48000", "--flash-bytes", "67108864", "-o", "o"],
        cwd=tmp_path, stderr=subprocess.PIPE, text=True,
    )  # fmt: skip
    time.sleep(1.5)  # after the imports, in the job
    proc.send_signal(signal.SIGTERM)
    _out, err = proc.communicate(timeout=60)
    if proc.returncode == 143:
        assert "interrupted" in err and "Traceback" not in err
    else:  # finished first on a fast machine: a whole bundle
        assert proc.returncode == 0
    assert not list(tmp_path.rglob("*.part"))


def test_staircase_range_is_bounded_before_it_is_expanded(tmp_path: Path) -> None:
    # expanding 0-4000000000 first ran out of memory
    res = _cli("tone", "staircase", "--bits", "16", "--codes", "0-4000000000", "-o", "s",
               cwd=tmp_path)  # fmt: skip
    _one_line_exit_2(res)
    assert "codes" in res.stderr and not (tmp_path / "s").exists()


def test_a_read_error_on_a_clip_names_the_file(tmp_path: Path) -> None:
    if not Path("/proc/self/mem").exists():
        pytest.skip("no /proc/self/mem here (Linux only)")
    res = _cli("stream", "/proc/self/mem", "-o", "s", cwd=tmp_path)
    _one_line_exit_2(res)
    assert "/proc/self/mem" in res.stderr
    mf = _manifest(tmp_path, '[[asset]]\nname = "m"\nclip = "/proc/self/mem"\n')
    res = _cli("build", str(mf), cwd=tmp_path)
    _one_line_exit_2(res)
    assert "/proc/self/mem" in res.stderr


def _wav_with_rate(path: Path, rate: int) -> Path:
    # RIFF/WAVE: the fmt chunk's sample rate is the little-endian uint32 at byte 24
    # (Microsoft RIFF specification), written here by hand over a valid file
    import soundfile

    soundfile.write(path, np.zeros(800), 8000, subtype="PCM_16")
    data = bytearray(path.read_bytes())
    data[24:28] = rate.to_bytes(4, "little")
    path.write_bytes(bytes(data))
    return path


def _aiff_with_rate(path: Path, exponent: int, mantissa: int) -> Path:
    # AIFF COMM chunk: the sample rate is an 80-bit IEEE 754 extended float (Apple AIFF
    # 1.3) after channels (2 bytes), frames (4) and sample size (2)
    import soundfile

    soundfile.write(path, np.zeros(800), 8000, format="AIFF", subtype="PCM_16")
    data = bytearray(path.read_bytes())
    at = data.index(b"COMM") + 8 + 8
    data[at : at + 10] = exponent.to_bytes(2, "big") + mantissa.to_bytes(8, "big")
    path.write_bytes(bytes(data))
    return path


@pytest.mark.parametrize(
    "make",
    [
        lambda p: _wav_with_rate(p / "huge.wav", 2147483647),
        lambda p: _aiff_with_rate(p / "inf.aiff", 0x7FFF, 1 << 63),  # infinity
        lambda p: _aiff_with_rate(p / "big.aiff", 0x7FFE, 1 << 63),  # about 1e4932
    ],
    ids=["wav-2147483647", "aiff-inf", "aiff-1e4932"],
)
def test_absurd_header_rates_are_refused(tmp_path: Path, make: object) -> None:
    clip = make(tmp_path)  # type: ignore[operator]
    res = _cli("stream", str(clip), "-o", "s", cwd=tmp_path)
    _one_line_exit_2(res)
    assert clip.name in res.stderr and "sample rate" in res.stderr


def test_check_works_on_a_read_only_tree(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # A read-only file system refuses to create the lock (EROFS); root ignores chmod, so
    # the refusal is made where the lock is opened. A check only reads: it goes on.
    import errno

    from ladderpack.build import build, load_manifest

    mf = _manifest(tmp_path, _asset("beep"))
    assert build(load_manifest(mf), echo=lambda _s: None).problems == []
    real_open = os.open

    def read_only(path: str, *args: object, **kw: object) -> int:
        if str(path).endswith(emit.LOCK_NAME):
            raise OSError(errno.EROFS, "Read-only file system", path)
        return real_open(path, *args, **kw)  # type: ignore[arg-type]

    monkeypatch.setattr(emit.os, "open", read_only)
    before = _hashes(tmp_path)
    res = build(load_manifest(mf), check=True, echo=lambda _s: None)
    assert res.problems == [] and _hashes(tmp_path) == before
    with pytest.raises(emit.OutputError, match="Read-only"):
        build(load_manifest(mf), echo=lambda _s: None)  # a build must write: refused


def test_a_build_updates_the_folder_record_once(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    # Each asset used to be its own replace: the record re-read and rewritten and the
    # folder listed once per asset, so a build's cost grew with the square of its size.
    # Now one replace takes every output, the index and the state: constant work per
    # build besides the files themselves, so a build is linear in its number of assets.
    from ladderpack.build import build, load_manifest

    mf = _manifest(tmp_path, "".join(_asset(f"a{k}") for k in range(24)))
    calls = {"replace": 0, "listdir": 0, "record": 0}
    real_replace, real_listdir, real_owned = emit._replace, emit.os.listdir, emit.owned_files

    def count(key: str, fn: Any) -> Any:
        def wrapped(*a: Any, **kw: Any) -> Any:
            calls[key] += 1
            return fn(*a, **kw)

        return wrapped

    monkeypatch.setattr(emit, "_replace", count("replace", real_replace))
    monkeypatch.setattr(emit.os, "listdir", count("listdir", real_listdir))
    monkeypatch.setattr(emit, "owned_files", count("record", real_owned))
    res = build(load_manifest(mf), echo=lambda _s: None)
    assert len(res.built) == 24
    assert calls == {"replace": 1, "listdir": 1, "record": 1}, calls


@pytest.mark.parametrize(
    ("where", "value"),
    [
        (("stats",), "not an object"),
        (("options", "fade_ms"), "nan"),
        (("clock", "achieved_rate_hz"), 1e-300),
        (("stats", "ramp_samples"), -5),
        (("options",), [1, 2]),
    ],
    ids=["stats-string", "fade-nan-text", "rate-1e-300", "ramp-negative", "options-list"],
)
def test_preview_validates_every_field_it_reads(
    tmp_path: Path, where: tuple[str, ...], value: object
) -> None:
    import json

    res = _cli("tone", "sine", "--seconds", "0.01", "-o", "b", "--name", "t", cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    side_path = tmp_path / "b" / "t.json"
    side = json.loads(side_path.read_text())
    node = side
    for k in where[:-1]:
        node = node[k]
    node[where[-1]] = value
    side_path.write_text(json.dumps(side))
    res = _cli("preview", str(side_path), "-o", str(tmp_path / "p.wav"), cwd=tmp_path)
    _one_line_exit_2(res)
    assert "t.json" in res.stderr and where[0] in res.stderr
    assert not (tmp_path / "p.wav").exists()


def test_an_asset_name_too_long_for_a_file_name_is_refused(tmp_path: Path) -> None:
    res = _cli("tone", "sine", "--seconds", "0.01", "-o", "n", "--name", "x" * 300, cwd=tmp_path)
    _one_line_exit_2(res)
    assert "255" in res.stderr and not (tmp_path / "n").exists()
    mf = _manifest(tmp_path, _asset("y" * 300))
    res = _cli("build", str(mf), cwd=tmp_path)
    _one_line_exit_2(res)
    assert "ladderpack.toml" in res.stderr


@pytest.mark.parametrize(
    "args",
    [
        ["--volts", "0.5,4,-1"],  # 4 V and -1 V are outside 0..Vref (3.3 V)
        ["--volts", "0.5", "--vref-volts", "1e-320"],
    ],
    ids=["volts-out-of-range", "vref-tiny"],
)
def test_i2c_dac_table_refuses_what_the_dac_cannot_give(tmp_path: Path, args: list[str]) -> None:
    res = _cli("table", "i2c-dac", *args, "-o", "t", cwd=tmp_path)
    _one_line_exit_2(res)
    assert not (tmp_path / "t").exists()


def test_i2c_dac_table_prints_each_code_and_its_error(tmp_path: Path) -> None:
    # output = Vref x code / 4096 (MCP4725 datasheet): 1.0 V at 3.3 V is code 1241
    res = _cli("table", "i2c-dac", "--volts", "1.0", "-o", "t", cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    assert "1.0000 V -> code 1241 = 0.9998 V (-0.17 mV)" in res.stdout


@pytest.mark.parametrize(("volts", "code"), [("1e17", 255), ("1e15", 255), ("-1e17", 0)])
def test_code_far_outside_the_ladder_takes_the_nearest_end(
    tmp_path: Path, volts: str, code: int
) -> None:
    res = _cli("code", "--volts", volts, "--json", cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    import json

    d = json.loads(res.stdout)
    assert d["code"] == code and d["in_range"] is False


@pytest.mark.parametrize(
    "args",
    [
        ["--target", "rp2040", "--gpio-count", "2000", "--output", "pwm", "--pwm-pin", "1999"],
        ["--target", "rp2350", "--gpio-count", "48", "--out-base", "40"],
        ["--sys-clock-hz", "10000000000"],  # beyond the PLL; overflowed uint32_t in C
    ],
    ids=["gpio-2000", "rp2350-48-gpios", "clock-10GHz"],
)
def test_chip_facts_are_not_free_options(tmp_path: Path, args: list[str]) -> None:
    res = _cli("tone", "sine", "--seconds", "0.01", "-o", "g", *args, cwd=tmp_path)
    _one_line_exit_2(res)
    assert not (tmp_path / "g").exists()


def test_a_build_over_the_flash_fails_before_writing(tmp_path: Path) -> None:
    # two assets that each fit, together over a 64 KiB flash less 32 KiB reserved
    body = "flash_bytes = 65536\nflash_reserve_bytes = 32768\n\n"
    long_tone = 'tone = "sine"\nfreq_hz = 1000\nseconds = 1.5\nramp_ms = 1.0\n'
    text = (
        '[project]\nout_dir = "gen"\n\n[defaults]\nbits = 8\nrate_hz = 16000\n' + body
        + "".join(f'[[asset]]\nname = "a{k}"\n{long_tone}\n' for k in range(2))
    )  # fmt: skip
    (tmp_path / "ladderpack.toml").write_text(text)
    res = _cli("build", "ladderpack.toml", cwd=tmp_path)
    _one_line_exit_2(res)
    assert "ladderpack.toml" in res.stderr and "flash" in res.stderr
    assert not (tmp_path / "gen").exists() or not list((tmp_path / "gen").glob("a*"))
    (tmp_path / "ladderpack.toml").write_text(
        text.replace('out_dir = "gen"', 'out_dir = "gen"\nover_flash = "warn"')
    )
    res = _cli("build", "ladderpack.toml", cwd=tmp_path)
    assert res.returncode == 0 and "OVER the flash" in res.stdout


@pytest.mark.parametrize(
    "body",
    [
        'tone = "sine"\nseconds = 0.01\noutput = "i2c-dac"\nrate_hz = 22050\n',  # bus
        'tone = "sine"\nseconds = 0.01\nrate_hz = 0.5\n',  # unreachable rate
        'tone = "sine"\nseconds = 60\nrate_hz = 48000\n',  # flash
        'tone = "sine"\nseconds = 0.01\noutput = "pwm"\nmin_carrier_hz = 100000000\n',
        'table = "wave"\ntable_bits = 8\nfreqs_hz = [440]\nrate_hz = 0.5\n',  # table rate
    ],
    ids=["i2c-rate", "unreachable-rate", "flash", "pwm-carrier", "table-rate"],
)
def test_plan_time_errors_in_a_build_name_the_manifest_and_asset(tmp_path: Path, body: str) -> None:
    mf = _manifest(tmp_path, _asset("fine") + f'[[asset]]\nname = "second"\n{body}\n')
    res = _cli("build", str(mf), cwd=tmp_path)
    _one_line_exit_2(res)
    assert "ladderpack.toml: asset 'second'" in res.stderr, res.stderr


def test_a_band_too_narrow_to_measure_is_refused(tmp_path: Path) -> None:
    res = _cli("tone", "sine", "--shaping", "designed", "--band-hz", "1e-300", "--seconds",
               "0.01", "-o", "b", cwd=tmp_path)  # fmt: skip
    _one_line_exit_2(res)
    assert "--band-hz" in res.stderr and "nan" not in res.stderr.lower()


@pytest.mark.parametrize(
    ("rate", "bus", "ok"),
    [
        ("11817", "400000", True),  # the highest rate, rounded up: within 100 ppm
        ("3096", "100000", True),
        ("12266", "400000", False),  # beyond: the message gives a different maximum
    ],
)
def test_the_highest_i2c_rate_rounded_is_accepted(
    tmp_path: Path, rate: str, bus: str, ok: bool
) -> None:
    res = _cli("clock", rate, "--output", "i2c-dac", "--bus-hz", bus, cwd=tmp_path)
    if ok:
        assert res.returncode == 0, res.stderr
    else:
        _one_line_exit_2(res)
        said = res.stderr.split("at most ")[1].split(" ")[0]
        assert float(said) != float(rate)  # never "more than X: at most X"


@pytest.mark.parametrize(
    ("args", "said"),
    [
        (["--output", "i2s", "--data-pin", "15", "--bit-clock-pin", "46"], "the I2S lines"),
        (["--stereo", "--bits", "12", "--out-base", "10"], "two 12-bit ladders"),
        (
            [
                "--output",
                "i2c-dac",
                "--rate-hz",
                "1000",
                "--freq-hz",
                "100",
                "--sda-pin",
                "10",
                "--scl-pin",
                "40",
            ],
            "the I2C lines",
        ),
    ],
    ids=["i2s", "stereo", "i2c"],
)
def test_pin_window_errors_name_the_output_and_its_lines(
    tmp_path: Path, args: list[str], said: str
) -> None:
    # RP2350B: a state machine reaches GPIO 0..31 or 16..47 (PIO GPIOBASE)
    res = _cli("tone", "sine", "--target", "rp2350b", "--seconds", "0.01", "-o", "w", *args,
               cwd=tmp_path)  # fmt: skip
    _one_line_exit_2(res)
    rest = res.stderr.split("error: ", 1)[1]
    assert said in rest and "-bit ladder from" not in rest


@pytest.mark.parametrize(
    ("volts", "bits", "said"),
    [
        ([0, 1, 2], 2, "volts: expected 4 levels for 2 bits, got 3"),
        ([1.0] * 256, 8, "must span a range"),
        ([[0]] * 256, 8, "got nested lists of shape (256, 1)"),
    ],
    ids=["too-few", "all-equal", "nested"],
)
def test_malformed_levels_say_what_is_wrong_once(
    tmp_path: Path, volts: list[object], bits: int, said: str
) -> None:
    import json

    doc = {"format": "ladderpack-levels", "format_version": 1, "bits": bits, "volts": volts}
    (tmp_path / "lv.json").write_text(json.dumps(doc))
    res = subprocess.run(
        [sys.executable, "-W", "error::RuntimeWarning", "-m", "ladderpack", "code", "--volts",
         "1", "--levels", "lv.json"],
        cwd=tmp_path, capture_output=True, text=True,
    )  # fmt: skip
    _one_line_exit_2(res)
    assert "lv.json" in res.stderr and said in res.stderr
    assert "volts: volts" not in res.stderr


@pytest.mark.parametrize(
    ("extra", "said"),
    [
        ('tone = "sin"\n', "asset 'a'.tone: must be one of"),
        ('tone = "multitone"\ntones = [1000, 2000]\n', "list of 2 numbers (e.g. [1000, -6]"),
    ],
    ids=["tone-kind", "tones-format"],
)
def test_manifest_errors_name_what_the_user_wrote(tmp_path: Path, extra: str, said: str) -> None:
    mf = _manifest(tmp_path, f'[[asset]]\nname = "a"\n{extra}\n')
    res = _cli("build", str(mf), cwd=tmp_path)
    _one_line_exit_2(res)
    assert said in res.stderr and ".kind" not in res.stderr


def test_a_loudness_target_on_a_short_clip_names_the_clip_and_option(tmp_path: Path) -> None:
    import soundfile

    soundfile.write(tmp_path / "short.wav", 0.3 * np.sin(np.arange(8000) * 0.1), 44100)
    res = _cli("stream", "short.wav", "--loudness-lufs", "-23", "-o", "s", cwd=tmp_path)
    _one_line_exit_2(res)
    assert "short.wav: --loudness-lufs:" in res.stderr and "400 ms" in res.stderr
    mf = _manifest(tmp_path, '[[asset]]\nname = "b"\nclip = "short.wav"\nloudness_lufs = -23\n')
    res = _cli("build", str(mf), cwd=tmp_path)
    _one_line_exit_2(res)
    assert "asset 'b'" in res.stderr and "loudness_lufs" in res.stderr


@pytest.mark.parametrize("args", [["--out-base", "36"], ["--output", "pwm", "--pwm-pin", "36"]])
def test_pins_beyond_the_rp2350a_point_to_the_rp2350b(tmp_path: Path, args: list[str]) -> None:
    # RP2350 datasheet: the QFN-60 package has GPIO 0..29, the QFN-80 (RP2350B) 0..47
    res = _cli("tone", "sine", "--target", "rp2350", "-o", "x", *args, cwd=tmp_path)
    _one_line_exit_2(res)
    assert "--target rp2350b" in res.stderr


def test_an_output_folder_named_as_an_output_kind_is_warned(tmp_path: Path) -> None:
    res = _cli("tone", "sine", "--seconds", "0.01", "-o", "i2s", cwd=tmp_path)
    assert res.returncode == 0 and "--output i2s" in res.stderr
    res = _cli("tone", "sine", "--seconds", "0.01", "--output", "i2s", "-o", "i2s", cwd=tmp_path)
    assert res.returncode == 0 and "warning" not in res.stderr


def test_a_clean_check_says_so_and_the_index_names_each_output(tmp_path: Path) -> None:
    i2s = '[[asset]]\nname = "amp"\ntone = "sine"\nseconds = 0.01\noutput = "i2s"\nbits = 16\n\n'
    mf = _manifest(tmp_path, _asset("beep") + i2s)
    assert _cli("build", str(mf), cwd=tmp_path).returncode == 0
    res = _cli("build", str(mf), "--check", cwd=tmp_path)
    assert res.returncode == 0 and "2 asset(s) up to date" in res.stdout
    c = (tmp_path / "gen" / "assets.c").read_text()
    assert '{"amp", "tone", "i2s", ' in c and '{"beep", "tone", "ladder", ' in c
    assert "const char *output;" in (tmp_path / "gen" / "assets.h").read_text()


def test_option_refusals_and_player_comments_say_the_truth(tmp_path: Path) -> None:
    # --ramp-ms is every output's that holds a DC level (the registry's), not only a ladder's
    from ladderpack.outputs import takers

    res = _cli("tone", "sine", "--output", "i2s", "--ramp-ms", "3", "-o", "x", cwd=tmp_path)
    _one_line_exit_2(res)
    level = takers("level")
    assert {"ladder", "pwm", "i2c-dac"} <= set(level)
    assert ", ".join(level[:-1]) + " and " + level[-1] in res.stderr
    # the stereo player's header names the stereo macro
    from ladderpack.emit import player_stereo

    header = player_stereo.render_header()
    assert "<NAME>_STEREO_INIT" in header and "<NAME>_LADDER_INIT" not in header
