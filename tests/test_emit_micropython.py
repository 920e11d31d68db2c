"""Generated MicroPython: valid Python whose constants agree with the sidecar."""

from __future__ import annotations

import ast
import json
from pathlib import Path

import pytest
from helpers import mypy_micropython, small_asset

from ladderpack.bundle import bundle_files


def _constants(source: str) -> dict[str, object]:
    tree = ast.parse(source)
    out: dict[str, object] = {}
    for node in tree.body:
        if isinstance(node, ast.Assign) and len(node.targets) == 1:
            target = node.targets[0]
            if isinstance(target, ast.Name) and target.id.isupper():
                try:
                    out[target.id] = ast.literal_eval(node.value)
                except ValueError:
                    out[target.id] = ast.unparse(node.value)
    return out


@pytest.mark.parametrize("bits", [1, 8, 12, 16])
@pytest.mark.parametrize("embed_max", [0, 10**6])
def test_module_parses_and_matches_sidecar(bits: int, embed_max: int) -> None:
    asset = small_asset(bits, out_base=2, idle_code=1)
    files = bundle_files(asset, embed_words_max=embed_max)
    src = files[f"{asset.name}.py"].decode()
    side = json.loads(files[f"{asset.name}.json"])
    c = _constants(src)
    assert c["BITS"] == side["stream"]["bits"] == bits
    assert c["SAMPLE_COUNT"] == side["stream"]["sample_count"]
    assert c["WORD_COUNT"] == side["stream"]["word_count"]
    assert c["IDLE_CODE"] == side["stream"]["idle_code"] == 1
    assert c["RATE_HZ"] == side["clock"]["achieved_rate_hz"]
    assert c["SYS_CLOCK_HZ"] == side["clock"]["sys_clock_hz"]
    assert c["CLKDIV_INT"] == side["clock"]["div_int"]
    assert c["CLKDIV_FRAC"] == side["clock"]["div_frac"]
    assert c["CLKDIV_REG"] == side["state_machine"]["clkdiv"] == side["clock"]["clkdiv_register"]
    assert c["OUT_BASE"] == side["state_machine"]["out_base"] == 2
    assert c["PULL_THRESHOLD"] == side["layout"]["pull_threshold"]
    assert c["BIN_FILE"] == f"{asset.name}.bin" and c["BIN_FILE"] in side["files"]
    if embed_max:
        assert c["WORDS"].startswith("array.array")  # type: ignore[union-attr]
        assert src.count("0x") >= asset.word_count
    else:
        assert c["WORDS"] is None
    assert f"out(pins, {bits})" in src
    assert "autopull=True" in src and f"pull_thresh={side['layout']['pull_threshold']}" in src


def test_out_init_matches_idle_code() -> None:
    # The pins start at the idle code (bit k of the code on GPIO out_base + k).
    asset = small_asset(4, idle_code=0b0101)
    src = bundle_files(asset)[f"{asset.name}.py"].decode()
    expected = "OUT_HIGH, rp2.PIO.OUT_LOW, rp2.PIO.OUT_HIGH, rp2.PIO.OUT_LOW"
    assert expected in src


@pytest.mark.parametrize("loop", [False, True])
@pytest.mark.parametrize("embed_max", [0, 10**6])
def test_player_type_checks_against_rp2_stubs(tmp_path: Path, loop: bool, embed_max: int) -> None:
    # mypy --strict against the PyPI stubs of MicroPython's rp2 port.
    asset = small_asset(8, loop=loop, out_base=16)
    src = bundle_files(asset, embed_words_max=embed_max)[f"{asset.name}.py"].decode()
    module = tmp_path / f"{asset.name}.py"
    module.write_text(src)
    res = mypy_micropython(module, tmp_path)
    assert res.returncode == 0, res.stdout + res.stderr


@pytest.mark.parametrize("bits", [1, 8, 16])
def test_player_is_micropython_syntax(bits: int) -> None:
    # MicroPython implements Python 3.4 syntax plus a few later features; parsing with
    # feature_version=(3, 4) rejects anything newer (f-strings, walrus, match ...).
    asset = small_asset(bits, loop=True)
    src = bundle_files(asset)[f"{asset.name}.py"].decode()
    ast.parse(src, feature_version=(3, 4))
    tree = ast.parse(src)
    assert not any(isinstance(n, ast.JoinedStr) for n in ast.walk(tree))
    assert "rp2.DMA()" in src and "treq_sel" in src


@pytest.mark.parametrize("output", ["i2s", "pwm", "i2c-dac"])
def test_other_outputs_type_check_and_parse_as_micropython(tmp_path: Path, output: str) -> None:
    # The other outputs' modules: Python 3.4 syntax (as above) and mypy --strict against
    # the PyPI stubs of MicroPython's rp2 port.
    from ladderpack.stream import stream_tone

    asset = stream_tone("sine", name="probe", output=output, rate_hz=8000, seconds=0.002, loop=True)
    src = bundle_files(asset, embed_words_max=10**6)["probe.py"].decode()
    ast.parse(src, feature_version=(3, 4))
    assert not any(isinstance(n, ast.JoinedStr) for n in ast.walk(ast.parse(src)))
    module = tmp_path / "probe.py"
    module.write_text(src)
    res = mypy_micropython(module, tmp_path)
    assert res.returncode == 0, res.stdout + res.stderr
