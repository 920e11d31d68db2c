"""I2C DAC updates: the command bytes, the bus budget and the level tables.

The bytes follow the Microchip MCP4725 datasheet (DS22039, "Write commands": fast write
``0 0 PD1 PD0 D11..D8, D7..D0``; write DAC register ``0 1 0 x x PD1 PD0 x, D11..D4,
D3..D0 0000``), cited from memory, and agree with an independent driver's worked bytes
(an mbed MCP4725 example: address byte 0xC0 for 7-bit 0x60, command 0x40, then
``n >> 4`` and ``(n << 4) & 0xF0``; fast write ``(n >> 8) & 0x0F`` then ``n & 0xFF``).
The bus budget counts 9 bit times a byte (8 data bits and the acknowledge) and one each
for START, STOP and bus free (NXP UM10204).
"""

from __future__ import annotations

import ast
import subprocess
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest
from helpers import cc_strict

from ladderpack.errors import OptionError
from ladderpack.outputs.i2c_dac import (
    I2cDacFormat,
    bus_bits_per_update,
    codes_for_volts,
    max_update_rate_hz,
)


def test_bytes_match_the_worked_examples() -> None:
    n = 0x9C4  # 2500
    reg = I2cDacFormat(0x60, "register").update_bytes(n)
    assert list(reg) == [0xC0, 0x40, n >> 4, (n << 4) & 0xF0]
    fast = I2cDacFormat(0x60, "fast").update_bytes(n)
    assert list(fast) == [0xC0, (n >> 8) & 0x0F, n & 0xFF]
    # power-down bits: PD1 PD0 in bits 5:4 of a fast write, bits 2:1 of the command byte
    assert I2cDacFormat(0x61, "fast", power_down=3).update_bytes(0)[:2] == bytes([0xC2, 0x30])
    assert I2cDacFormat(0x61, "register", power_down=2).update_bytes(0)[1] == 0x44


@pytest.mark.parametrize("command", ["fast", "register"])
def test_every_code_round_trips(command: str) -> None:
    fmt = I2cDacFormat(0x62, command)
    codes = np.arange(4096)
    data = fmt.data(codes)
    assert [fmt.decode(bytes(row)) for row in data] == list(codes)


def test_bus_budget() -> None:
    fast, reg = I2cDacFormat(command="fast"), I2cDacFormat(command="register")
    assert bus_bits_per_update(fast) == 9 * 3 + 3 and bus_bits_per_update(reg) == 9 * 4 + 3
    assert max_update_rate_hz(400_000, fast) == Fraction(400_000, 30)
    assert max_update_rate_hz(100_000, reg) == Fraction(100_000, 39)
    with pytest.raises(OptionError):
        max_update_rate_hz(3_400_000, fast)


def test_codes_for_volts_and_refusals() -> None:
    # output = Vref x code / 4096 (MCP4725 datasheet): the nearest code, clipped
    assert list(codes_for_volts(np.array([0.0, 1.0, 2.5, 3.3, 5.0]), 3.3)) == [
        0, 1241, 3103, 4095, 4095,
    ]  # fmt: skip
    for bad in (0x00, 0x07, 0x78, 0x80):  # reserved or not 7-bit (UM10204)
        with pytest.raises(OptionError):
            I2cDacFormat(bad)
    with pytest.raises(OptionError):
        I2cDacFormat(0x60, "burst")


@pytest.mark.slow
def test_table_command_writes_c_and_micropython(tmp_path: Path) -> None:
    from click.testing import CliRunner

    from ladderpack.cli import cli

    res = CliRunner().invoke(
        cli,
        ["table", "i2c-dac", "--volts", "0,1.0,2.5", "--dac-address", "0x61",
         "--dac-command", "register", "-o", str(tmp_path), "--name", "lv"],
    )  # fmt: skip
    assert res.exit_code == 0, res.output
    main = tmp_path / "main.c"
    main.write_text(
        '#include <stdio.h>\n#include "lv.h"\nint main(void) {\n    unsigned i;\n'
        "    for (i = 0; i < LV_COUNT; ++i) {\n"
        '        printf("%u %u %u %u\\n", (unsigned)lv_updates[i][0], (unsigned)lv_updates[i][1],'
        " (unsigned)lv_updates[i][2], (unsigned)lv_codes[i]);\n    }\n"
        '    printf("%u\\n", (unsigned)LV_ADDRESS);\n    return 0;\n}\n'
    )
    exe = tmp_path / "dump"
    cc_strict(exe, main, tmp_path / "lv.c")  # gcc -std=c99 -pedantic -Wall -Wextra -Werror
    lines = subprocess.run([str(exe)], check=True, capture_output=True, text=True).stdout.split(
        "\n"
    )
    rows = [list(map(int, ln.split())) for ln in lines[:3]]
    assert [r[3] for r in rows] == [0, 1241, 3103] and int(lines[3]) == 0x61
    fmt = I2cDacFormat(0x61, "register")
    for r in rows:
        assert fmt.decode(bytes(r[:3])) == r[3]
    mod = ast.parse((tmp_path / "lv.py").read_text())
    names = {t.id for n in mod.body if isinstance(n, ast.Assign) for t in n.targets}
    assert {"ADDRESS", "UPDATES", "CODES", "VOLTS"} <= names


def test_writer_program_words_and_plan() -> None:
    import adafruit_pioasm

    from ladderpack.outputs.i2c_dac import plan_writer, writer_cycles, writer_program, writer_words

    prog = writer_program()
    # adafruit-circuitpython-pioasm (PyPI) assembles the same source to the same words
    assert list(adafruit_pioasm.Program(prog.source()).assembled) == list(prog.words)
    fmt = I2cDacFormat(0x60, "fast")
    words = writer_words(fmt, np.array([0xABC]))
    # one byte a word, inverted (a 1 drives SDA low) in bits 31:24, the last flagged
    assert [int(w) for w in words] == [
        (~0xC0 & 0xFF) << 24, (~0x0A & 0xFF) << 24, ((~0xBC & 0xFF) << 24) | 1 << 23,
    ]  # fmt: skip
    for rate in (2000, 6250, 8000, 11025):
        for bus in (100_000, 400_000, 1_000_000):
            try:
                p = plan_writer(rate, fmt, bus_hz=bus)
            except OptionError:
                assert Fraction(125_000_000, -(-125_000_000 // (4 * bus)) * 129) < rate
                continue
            # the datasheet's state-machine rate f_sys / divider over the cycles per update
            assert p.achieved_rate_hz == Fraction(125_000_000, p.divider * p.cycles_per_update)
            assert p.bus_hz <= bus and p.cycles_per_update >= writer_cycles(3, 0) == 129
            assert abs(p.error_ppm) < 1000
    assert plan_writer(6250, fmt).error_ppm == 0.0


def test_clock_command_plans_the_writer() -> None:
    import json as _json

    from click.testing import CliRunner

    from ladderpack.cli import cli

    res = CliRunner().invoke(cli, ["clock", "6250", "--output", "i2c-dac", "--json"])
    assert res.exit_code == 0, res.output
    d = _json.loads(res.output)
    assert d["divider"] == 80 and d["cycles_per_update"] == 250 and d["error_ppm"] == 0
    res = CliRunner().invoke(cli, ["clock", "50000", "--output", "i2c-dac"])
    assert res.exit_code != 0 and "more than the bus carries" in str(res.exception)
