"""Chip facts against the vendor SDK's own headers, for every target.

Source of truth: the register headers of the vendored pico-sdk 2.2.0
(``src/<platform>/hardware_regs/include/hardware/regs/*.h`` and ``platform_defs.h``),
which transcribe the RP2040 and RP2350 datasheets. They are parsed here with code of
the tests' own; ladderpack's table (``ladderpack.targets.REGISTERS``) is what is checked.
Then every generated file of every output, for every target, is scanned: each value a
``# sdk:`` comment names must be what the target's headers say, and no peripheral
address may appear anywhere else as a bare literal.
"""

from __future__ import annotations

import functools
import re
from pathlib import Path

import pytest
from chip.harness import sdk_path
from click.testing import CliRunner

from ladderpack.cli import cli
from ladderpack.targets import REGISTERS, TARGETS

_DEFINE = re.compile(r"^#define\s+([A-Z0-9_]+)\s+(?:_u\()?(0x[0-9a-fA-F]+|\d+)\)?\s*$", re.M)


@functools.cache
def sdk_defines(platform: str) -> dict[str, int]:
    """Every numeric ``#define`` of the platform's register headers and platform_defs.h."""
    inc = sdk_path() / "src" / platform / "hardware_regs" / "include" / "hardware"
    out: dict[str, int] = {}
    for header in [*sorted((inc / "regs").glob("*.h")), inc / "platform_defs.h"]:
        for name, value in _DEFINE.findall(header.read_text()):
            out.setdefault(name, int(value, 0))
    return out


def sdk_eval(platform: str, expr: str) -> int:
    """``NAME``, or names joined by ``+`` / ``-``, valued from the headers."""
    defs = sdk_defines(platform)
    terms = expr.split()
    value = defs[terms[0]]
    for op, name in zip(terms[1::2], terms[2::2], strict=True):
        assert op in "+-", expr
        value = value + defs[name] if op == "+" else value - defs[name]
    return value


@pytest.mark.parametrize("platform", sorted(REGISTERS))
def test_every_register_fact_matches_the_sdk_header(platform: str) -> None:
    defs = sdk_defines(platform)
    wrong = {
        name: (hex(value), hex(defs[name]) if name in defs else "missing")
        for name, value in REGISTERS[platform].items()
        if defs.get(name) != value
    }
    assert not wrong


@pytest.mark.parametrize("name", sorted(TARGETS))
def test_target_pio_blocks_and_windows_match_the_sdk(name: str) -> None:
    t = TARGETS[name]
    defs = sdk_defines(t.platform)
    assert t.pio_blocks == defs["NUM_PIOS"]
    assert t.pio_bases() == tuple(defs[f"PIO{k}_BASE"] for k in range(defs["NUM_PIOS"]))


def test_rp2350_pwm_is_not_where_the_rp2040s_was() -> None:
    # RP2350 addressmap.h: PLL_SYS_BASE 0x40050000 (the RP2040's PWM_BASE), PWM_BASE
    # 0x400a8000; dma.h: DMA_TIMER0_OFFSET 0x440 (0x420 on the RP2040).
    assert sdk_defines("rp2350")["PLL_SYS_BASE"] == sdk_defines("rp2040")["PWM_BASE"]
    assert TARGETS["rp2350"].reg("PWM_BASE") == sdk_defines("rp2350")["PWM_BASE"]
    assert TARGETS["rp2350"].reg("DMA_TIMER0_OFFSET") == 0x440


# -- every generated file, every output, every target --------------------------------------

#: One bundle per output system (and the stereo forms), small and quick.
OUTPUT_ARGS = {
    "ladder": ["--bits", "8", "--out-base", "2"],
    "ladder-stereo": ["--bits", "6", "--stereo", "--out-base", "0"],
    "i2s": ["--output", "i2s", "--data-pin", "10"],
    "pwm": ["--output", "pwm", "--pwm-pin", "15"],
    "pwm-stereo": ["--output", "pwm", "--stereo", "--pwm-pin", "14"],
    "pwm-timer": ["--output", "pwm", "--pwm-pin", "3", "--rate-hz", "44100"],
    "i2c-dac": ["--output", "i2c-dac", "--out-base", "4", "--rate-hz", "8000"],
}


def make_bundle(folder: Path, target: str, output: str) -> Path:
    args = [
        "tone", "sine", "--seconds", "0.005", "--target", target, "-o", str(folder),
        "--name", "t", "--embed-words-max", "100000", *OUTPUT_ARGS[output],
    ]  # fmt: skip
    res = CliRunner().invoke(cli, args, catch_exceptions=False)
    assert res.exit_code == 0, res.output
    return folder


@functools.cache
def _bundle(target: str, output: str, root: str) -> dict[str, str]:
    folder = make_bundle(Path(root) / f"{target}-{output}", target, output)
    return {
        p.name: p.read_text()
        for p in sorted(folder.iterdir())
        if p.suffix in (".py", ".c", ".h", ".pio", ".json")
    }


_HEX = re.compile(r"\b0x[0-9A-Fa-f]+\b")


def _is_peripheral(value: int) -> bool:
    """In the APB/AHB peripheral or SIO ranges of either chip (addressmap.h of both)."""
    return 0x40000000 <= value < 0x60000000 or 0xD0000000 <= value < 0xE0000000


def _code_lines(name: str, text: str) -> list[str]:
    """Lines that are code, not data: arrays of stream words are left out."""
    if name.endswith(".py"):
        text = re.sub(r"array\.array\(\"[IH]\", \[[^\]]*\]\)", "DATA", text)
    elif name.endswith((".c", ".h")):
        text = re.sub(r"=\s*\{[^}]*\}", "= DATA", text)
    else:
        return []
    return text.splitlines()


@pytest.fixture(scope="module")
def bundles_root(tmp_path_factory: pytest.TempPathFactory) -> str:
    return str(tmp_path_factory.mktemp("targets"))


@pytest.mark.parametrize("output", sorted(OUTPUT_ARGS))
@pytest.mark.parametrize("target", sorted(TARGETS))
def test_every_address_in_every_generated_file_is_the_named_register(
    target: str, output: str, bundles_root: str
) -> None:
    platform = TARGETS[target].platform
    checked = 0
    for name, text in _bundle(target, output, bundles_root).items():
        for line in _code_lines(name, text):
            code, _, comment = line.partition("#")
            if "sdk:" in comment:
                exprs = [e.strip() for e in comment.split("sdk:", 1)[1].split(",")]
                values = [int(v, 0) for v in re.findall(r"\b(?:0x[0-9A-Fa-f]+|\d+)\b", code)]
                assert values == [sdk_eval(platform, e) for e in exprs], (name, line)
                checked += len(values)
                continue
            assert "mem32[" not in code or not _HEX.search(code.split("mem32[", 1)[1]), line
            big = [v for v in _HEX.findall(code) if _is_peripheral(int(v, 16))]
            assert not big, (name, line)
    if output.startswith("pwm") or output in ("ladder", "ladder-stereo", "i2s", "i2c-dac"):
        assert checked >= 5  # the MicroPython module names its registers


@pytest.mark.parametrize("output", ["pwm", "pwm-timer", "pwm-stereo"])
@pytest.mark.parametrize("target", sorted(TARGETS))
def test_pwm_dreq_is_the_slices_wrap_or_timer0(target: str, output: str, bundles_root: str) -> None:
    # dreq.h: DREQ_PWM_WRAP0 + slice when paced by the wrap, else DREQ_DMA_TIMER0.
    import json

    files = _bundle(target, output, bundles_root)
    side = json.loads(files["t.json"])["stats"]["pwm"]
    defs = sdk_defines(TARGETS[target].platform)
    want = (
        defs["DREQ_PWM_WRAP0"] + side["slice"]
        if side["pacing"] == "wrap"
        else defs["DREQ_DMA_TIMER0"]
    )
    assert side["dreq"] == want
    assert re.search(rf"^DREQ = {want}\b", files["t.py"], re.M)
