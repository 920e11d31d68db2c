"""The SPI DAC output on the host: the frame, the plan, the program's timing, the options.

The frame's bits are the write command of the common dual 12-bit SPI DACs (Microchip
MCP4822/MCP4922 data sheets, "Write Command Register"; from memory): bit 15 A/B (0: DAC
A), bit 14 BUF, bit 13 GA (1: gain 1x), bit 12 SHDN (1: on), bits 11:0 the code. The
program's timing is checked by this test's own walk through the instructions (each takes
one cycle plus its delay; ``jmp x--`` loops X + 1 times, RP2040 datasheet, PIO
instruction set), against the plan and the data sheets' minimum times (from memory).
"""

from __future__ import annotations

import itertools
import json
import subprocess
import sys
from fractions import Fraction
from pathlib import Path

import pytest

from ladderpack.errors import OptionError
from ladderpack.options import StreamOptions
from ladderpack.outputs.spi_dac import (
    TIMING_NS,
    SpiDacFormat,
    base_cycles,
    plan_spi,
    spi_program,
)
from ladderpack.pio import Program


@pytest.mark.parametrize(
    ("fmt", "channel", "code", "word"),
    [
        (SpiDacFormat(), 0, 0x123, 0b0011_0001_0010_0011),  # A, unbuffered, 1x, on
        (SpiDacFormat(gain=2), 0, 0xFFF, 0b0001_1111_1111_1111),  # GA = 0: 2x
        (SpiDacFormat(buffered=True), 1, 0, 0b1111_0000_0000_0000),  # B, BUF, 1x, on
        (SpiDacFormat(stereo=True, gain=2, buffered=True), 1, 0x800, 0b1101_1000_0000_0000),
    ],
)
def test_frames_follow_the_write_command(fmt: SpiDacFormat, channel: int, code: int, word: int):
    assert fmt.frame(channel, code) == word


def walk(program: Program, y: int, samples: int) -> tuple[list[int], list[int], list[int]]:
    """Cycle counts of a program run (no stalls): CS rises, LDAC falls, SCK rises in frames.

    Side-set bit 0 is SCK, bit 1 CS, bit 2 LDAC (when the program has three side pins).
    """
    cycle, pc, x = 0, program.wrap_target, 0
    cs, sck, ldac = 1, 0, 1
    rises, latches, edges = [], [], []
    latch = program.sideset.count == 3
    while len(rises) < samples * (2 if "B" in program.name else 1) and cycle < 10**7:
        ins = program.instructions[pc]
        side = ins.side or 0
        nsck, ncs, nldac = side & 1, (side >> 1) & 1, (side >> 2) & 1 if latch else 1
        if ncs and not cs:
            rises.append(cycle)
        if latch and not nldac and ldac:
            latches.append(cycle)
        if nsck and not sck and not ncs:
            edges.append(cycle)
        cs, sck, ldac = ncs, nsck, nldac
        cycle += 1 + ins.delay
        nxt = pc + 1
        if ins.op == "set" and ins.args[0] == "x":
            x = int(ins.args[1])
        elif ins.op == "mov" and ins.args == ("x", "y"):
            x = y
        elif ins.op == "jmp" and ins.args[0] == "x--":
            if x:
                nxt = int(ins.args[1])
            x = (x - 1) & 0xFFFFFFFF
        if pc == program.wrap:
            nxt = program.wrap_target if nxt == pc + 1 else nxt
        pc = nxt
    return rises, latches, edges


FORMATS = [
    SpiDacFormat(),
    SpiDacFormat(latch=True),
    SpiDacFormat(stereo=True),
    SpiDacFormat(stereo=True, latch=True, gain=2, buffered=True),
]


@pytest.mark.parametrize("fmt", FORMATS, ids=["mono", "mono-latch", "stereo", "stereo-latch"])
@pytest.mark.parametrize("rate", [8000, 16000, 22050, 44100, 48000])
def test_program_updates_once_a_sample_period_as_planned(fmt: SpiDacFormat, rate: int) -> None:
    plan = plan_spi(rate, fmt, sck_hz=10_000_000)
    # the divider and cycles a sample give the achieved rate exactly
    assert plan.achieved_rate_hz == Fraction(125_000_000, plan.divider * plan.cycles_per_sample)
    # a whole divider and whole cycles: 22.05 and 44.1 kHz (3^2 7^2 in them) come within
    # 165 ppm at 125 MHz, the others exact or within 64 ppm (the summary warns past 100)
    assert abs(plan.error_ppm) < 170 and plan.sck_hz <= 10_000_000
    prog = spi_program(fmt, name="t_B" if fmt.stereo else "t")
    assert len(prog.instructions) <= 32  # one PIO block's instruction memory
    rises, latches, edges = walk(prog, plan.pad, 6)
    per = 2 if fmt.stereo else 1
    ticks = latches if fmt.latch else rises[per - 1 :: per]
    assert {b - a for a, b in itertools.pairwise(ticks)} == {plan.cycles_per_sample}
    assert len(edges) >= 16 * len(rises)  # 16 SCK rises a frame
    # every timed interval at least its data-sheet minimum at this divider
    for key, ns in plan.times_ns().items():
        assert ns >= TIMING_NS[key], (key, ns)
    assert plan.pad == plan.cycles_per_sample - base_cycles(fmt) - 1 >= 0


def test_a_rate_the_wires_cannot_carry_is_refused() -> None:
    fast = plan_spi(8000, SpiDacFormat(stereo=True, latch=True), sck_hz=20_000_000)
    with pytest.raises(OptionError, match="more than the wires carry"):
        plan_spi(float(fast.max_rate_hz) * 1.01, SpiDacFormat(stereo=True, latch=True),
                 sck_hz=20_000_000)  # fmt: skip
    with pytest.raises(OptionError) as e:
        StreamOptions(output="spi-dac", rate_hz=600_000.0)  # mono: at most 510 k
    assert e.value.field == "rate_hz"


def test_options_belong_to_the_spi_dac() -> None:
    o = StreamOptions(output="spi-dac", data_pin=2, latch=True, stereo=True, dac_gain=2)
    assert (o.bits, o.bit_clock_pin) == (12, 3)  # SCK after SDI; CS 4, LDAC 5
    rec = o.to_dict()
    assert rec["output"] == "spi-dac" and rec["latch"] is True and rec["dac_gain"] == 2
    assert "out_base" not in rec and "levels" not in rec
    # its own options are refused elsewhere, and a ladder's record is unchanged
    with pytest.raises(OptionError, match="sck_hz: applies to output spi-dac, not to output i2s"):
        StreamOptions(output="i2s", sck_hz=1_000_000)
    assert not {"sck_hz", "latch", "dac_gain", "vref_buffer"} & set(StreamOptions().to_dict())
    for kw, field in (
        ({"bits": 16}, "bits"),
        ({"dac_gain": 3}, "dac_gain"),
        ({"idle_code": 4096}, "idle_code"),
        ({"data_pin": 4, "bit_clock_pin": 3}, "bit_clock_pin"),  # SDI on CS
        ({"bit_clock_pin": 28, "latch": True}, "bit_clock_pin"),  # LDAC would be GPIO 30
        ({"levels": "x.json"}, "levels"),
    ):
        with pytest.raises(OptionError) as e:
            StreamOptions(output="spi-dac", **kw)
        assert e.value.field == field, kw


def test_command_line_bundle_and_preview(tmp_path: Path) -> None:
    run = [sys.executable, "-m", "ladderpack"]
    res = subprocess.run(
        [*run, "tone", "sine", "--output", "spi-dac", "--stereo", "--latch", "--seconds",
         "0.01", "--data-pin", "10", "--bit-clock-pin", "11", "--name", "duo", "-o",
         str(tmp_path), "--json"],
        capture_output=True, text=True,
    )  # fmt: skip
    assert res.returncode == 0, res.stderr
    summary = json.loads(res.stdout)
    assert summary["output"] == "spi-dac" and summary["stereo"] is True
    assert summary["spi_dac"]["pins"] == [10, 11, 12, 13] and summary["program"] == "spi-dac-latch"
    names = {p.name for p in tmp_path.iterdir()}
    assert {"duo.bin", "duo.h", "duo.c", "duo.py", "duo.pio", "duo.json"} <= names
    assert {"ladderpack_spi.h", "ladderpack_spi.c"} <= names
    res = subprocess.run(
        [*run, "preview", str(tmp_path / "duo.json"), "--channel", "1", "-o",
         str(tmp_path / "duo_b.wav")],
        capture_output=True, text=True,
    )  # fmt: skip
    assert res.returncode == 0, res.stderr
    assert (tmp_path / "duo_b.wav").stat().st_size > 1000
    # a short tone is measured over its whole audio: a tone has no fades to trim
    res = subprocess.run(
        [*run, "preview", str(tmp_path / "duo.json"), "--json", "-o", str(tmp_path / "a.wav")],
        capture_output=True, text=True,
    )  # fmt: skip
    assert res.returncode == 0, res.stderr
    got = json.loads(res.stdout)["analysis"]
    assert abs(got["freq_hz"] - 1000.0) < 1e-3 and got["sinad_db"] > 60


def test_player_files_are_their_templates_line_for_line() -> None:
    # the players are C files in ladderpack/templates: a generated player differs from its
    # template only by the version on its first line, so a compiler's line numbers match
    from ladderpack._version import __version__
    from ladderpack.emit.templates import source
    from ladderpack.outputs.spi_dac import HEADER_NAME, SOURCE_NAME
    from ladderpack.stream import stream_tone

    asset = stream_tone("sine", name="t", output="spi-dac", seconds=0.002)
    from ladderpack.bundle import bundle_files

    files = bundle_files(asset)
    for name in (HEADER_NAME, SOURCE_NAME):
        made, tpl = files[name].decode().splitlines(), source(name).splitlines()
        assert len(made) == len(tpl)
        diff = [(a, b) for a, b in zip(made, tpl, strict=True) if a != b]
        assert diff == [(tpl[0].replace("@@VERSION@@", __version__), tpl[0])]
