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
    min_divider,
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
    # the bit-time budget bounds every writer: rate <= bus / (9 B + 3)
    for bus in (100_000, 400_000, 1_000_000):
        for fmt in (fast, reg):
            assert max_update_rate_hz(bus, fmt) < Fraction(bus, bus_bits_per_update(fmt))
    # and the state-machine writer's own: 40 B + 9 cycles an update at the divider that
    # meets UM10204 Table 10 (fast mode: t_LOW >= 1.3 us over two cycles -> 82 at 125 MHz)
    assert min_divider(400_000, 125_000_000) == 82  # 2 x 82 / 125 MHz = 1312 ns >= 1300 ns
    assert min_divider(100_000, 125_000_000) == 313  # SCL <= 100 kHz; t_LOW 5008 >= 4700 ns
    assert min_divider(1_000_000, 125_000_000) == 32  # SCL <= 1 MHz; t_LOW 512 >= 500 ns
    assert max_update_rate_hz(400_000, fast) == Fraction(125_000_000, 82 * 129)
    assert max_update_rate_hz(100_000, reg) == Fraction(125_000_000, 313 * 169)
    with pytest.raises(OptionError):
        max_update_rate_hz(3_400_000, fast)


@pytest.mark.parametrize("bus_hz", [100_000, 400_000, 1_000_000])
@pytest.mark.parametrize("sys_clock_hz", [48_000_000, 125_000_000, 133_000_000, 150_000_000])
def test_min_divider_meets_every_table_10_time(bus_hz: int, sys_clock_hz: int) -> None:
    # UM10204 Table 10 minimums (REFERENCES.md section 14, from memory), in ns
    table = {
        100_000: (4700, 4000, 4000, 4000, 250, 4700),
        400_000: (1300, 600, 600, 600, 100, 1300),
        1_000_000: (500, 260, 260, 260, 50, 500),
    }[bus_hz]
    cycles = (2, 2, 2, 2, 1, 5)  # the writer's t_LOW, t_HIGH, t_HD;STA, t_SU;STO, t_SU;DAT, t_BUF
    d = min_divider(bus_hz, sys_clock_hz)
    ns = Fraction(d * 10**9, sys_clock_hz)
    assert all(c * ns >= t for c, t in zip(cycles, table, strict=True))
    assert Fraction(sys_clock_hz, 4 * d) <= bus_hz
    # and one less fails one of them
    ns1 = Fraction((d - 1) * 10**9, sys_clock_hz)
    fails = [c * ns1 < t for c, t in zip(cycles, table, strict=True)]
    assert any(fails) or Fraction(sys_clock_hz, 4 * (d - 1)) > bus_hz


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
    assert d["divider"] == 100 and d["cycles_per_update"] == 200 and d["error_ppm"] == 0
    res = CliRunner().invoke(cli, ["clock", "50000", "--output", "i2c-dac"])
    assert res.exit_code != 0 and "more than the bus carries" in str(res.exception)


# -- streams ----------------------------------------------------------------------------


@pytest.mark.parametrize("command", ["fast", "register"])
def test_layout_words_round_trip_and_match_the_bytes(command: str) -> None:
    from ladderpack.outputs.i2c_dac import I2cDacLayout

    fmt = I2cDacFormat(0x62, command)
    lay = I2cDacLayout(fmt)
    codes = np.array([0, 1, 2048, 4095, 1234])
    words = lay.pack_codes(codes)
    assert words.size == lay.words_for(codes.size) == codes.size * fmt.bytes_per_update
    assert lay.unpack_words(words)[:, 0].tolist() == codes.tolist()
    # each word: the bus byte inverted in bits 31:24, bit 23 on an update's last byte
    per = fmt.bytes_per_update
    for k, c in enumerate(codes):
        w = words[k * per : (k + 1) * per].astype(np.int64)
        assert bytes(int(~x >> 24) & 0xFF for x in w) == fmt.update_bytes(int(c))
        assert [int(x >> 23) & 1 for x in w] == [0] * (per - 1) + [1]
        assert all(int(x) & 0x7FFFFF == 0 for x in w)
    with pytest.raises(OptionError):
        I2cDacLayout(I2cDacFormat(0x63, command)).unpack_words(words)  # another address


def test_state_machine_registers_name_the_pins() -> None:
    # Field positions from the RP2040 datasheet, PIO registers: EXECCTRL SIDE_EN 30,
    # SIDE_PINDIR 29, JMP_PIN 28:24, WRAP_TOP 16:12, WRAP_BOTTOM 11:7; SHIFTCTRL FJOIN_TX
    # 30, AUTOPULL 17, OUT_SHIFTDIR 19 (0: left); PINCTRL SIDESET_COUNT 31:29, SET_COUNT
    # 28:26, OUT_COUNT 25:20, SIDESET_BASE 14:10, SET_BASE 9:5, OUT_BASE 4:0.
    from ladderpack.outputs.i2c_dac import i2c_state_machine, plan_writer, writer_program

    prog = writer_program()
    plan = plan_writer(8000, I2cDacFormat(), bus_hz=400_000)
    sm = i2c_state_machine(prog, plan.clock, sda_pin=36, scl_pin=37, gpio_base=16)
    assert (sm.execctrl >> 30) & 1 and (sm.execctrl >> 29) & 1
    assert (sm.execctrl >> 24) & 31 == 20
    assert ((sm.execctrl >> 12) & 31, (sm.execctrl >> 7) & 31) == (prog.wrap, prog.wrap_target)
    assert (sm.shiftctrl >> 30) & 1 and not (sm.shiftctrl >> 17) & 1
    assert not (sm.shiftctrl >> 19) & 1
    f = sm.pinctrl
    assert (f >> 29, (f >> 26) & 7, (f >> 20) & 63) == (2, 1, 1)
    assert ((f >> 10) & 31, (f >> 5) & 31, f & 31) == (21, 20, 20)
    assert sm.clkdiv == plan.divider << 16


def test_stream_options_for_an_i2c_dac() -> None:
    from ladderpack.options import StreamOptions

    o = StreamOptions(output="i2c-dac", sda_pin=4)
    assert (o.bits, o.scl_pin, o.bus_hz, o.dac_address, o.dac_command) == (
        12,
        5,
        400_000,
        0x60,
        "fast",
    )
    rec = o.to_dict()
    assert {"bus_hz", "dac_address", "dac_command", "sda_pin", "scl_pin"} <= set(rec)
    assert "out_base" not in rec and "clock_pin" not in rec
    assert "frame_format" not in rec and "stereo" not in rec and "levels" not in rec
    # a ladder records none of the I2C keys (its records are unchanged)
    assert not {"bus_hz", "dac_address", "dac_command"} & set(StreamOptions().to_dict())
    bad = [
        ({"bits": 16}, "bits"),
        ({"stereo": True}, "stereo"),
        ({"bus_hz": 3_400_000}, "bus_hz"),
        ({"dac_address": 0x78}, "dac_address"),
        ({"idle_code": 4096}, "idle_code"),
        ({"scl_pin": 4}, "scl_pin"),
        ({"scl_pin": 30}, "scl_pin"),
        ({"data_pin": 7}, "data_pin"),
        ({"frame_format": "left-justified"}, "frame_format"),
        ({"pin_order": "msb-low"}, "pin_order"),
    ]
    for kw, field in bad:
        with pytest.raises(OptionError) as e:
            StreamOptions(**{"output": "i2c-dac", "sda_pin": 4, **kw})
        assert e.value.field == field, kw
    with pytest.raises(OptionError) as e:
        StreamOptions(bus_hz=100_000)
    assert e.value.field == "bus_hz"


def test_stream_refuses_a_rate_the_bus_cannot_carry() -> None:
    from ladderpack.stream import stream_tone

    with pytest.raises(OptionError) as e:
        stream_tone("sine", output="i2c-dac", rate_hz=13_000, seconds=0.01)
    assert e.value.field == "rate_hz" and "11816.979" in e.value.message
    a = stream_tone("sine", output="i2c-dac", rate_hz=13_000, bus_hz=1_000_000, seconds=0.01)
    assert a.summary()["i2c_dac"]["max_rate_hz"] == pytest.approx(125e6 / (32 * 129), abs=1e-3)
    # 8 kHz at 125 MHz is +64 ppm (divider 84, 186 cycles): over a 10 ppm tolerance the
    # summary points to the clock search
    a = stream_tone("sine", output="i2c-dac", rate_hz=8000, seconds=0.01, rate_tolerance_ppm=10)
    assert any("--find-sys-clock" in w for w in a.summary()["warnings"])
    assert a.summary()["rate_error_ppm"] == pytest.approx(64.004, abs=1e-3)


def test_staircase_codes_come_out_exact_and_on_whole_cycles() -> None:
    from ladderpack.outputs.i2c_dac import writer_cycles
    from ladderpack.stream import stream_tone

    codes = codes_for_volts(np.array([0.5, 1.25, 3.0]), 3.3).tolist()
    a = stream_tone(
        "staircase", output="i2c-dac", codes=codes, dwell_ms=3.0, rate_hz=1000.0, ramp_ms=0.0
    )
    got = a.packed.layout.unpack_words(a.packed.words)[:, 0]
    assert got.tolist() == [c for c in codes for _ in range(3)] + [0]  # then idle
    p = a.clock
    assert p.div_frac == 0 and p.sys_clock_hz == p.div_int * p.cycles_per_sample * 1000
    side = a.stats["i2c_dac"]
    assert side["pad"] == p.cycles_per_sample - writer_cycles(3, 0)
    assert side["address"] == 0x60 and side["sda_pin"] == 0 and side["scl_pin"] == 1


def test_manifest_builds_i2c_dac_streams_and_tables(tmp_path: Path) -> None:
    from ladderpack.build import build, load_manifest

    (tmp_path / "ladderpack.toml").write_text(
        "[project]\nout_dir = 'gen'\n\n"
        "[[asset]]\nname = 'volts'\ntone = 'staircase'\noutput = 'i2c-dac'\n"
        "codes = [100, 200]\ndwell_ms = 2\nrate_hz = 1000\nramp_ms = 0\ndac_address = 0x61\n\n"
        "[[asset]]\nname = 'levels'\ntable = 'i2c-dac'\nvolts = [0.5, 1.0]\n"
    )
    build(load_manifest(str(tmp_path / "ladderpack.toml")), echo=lambda _t: None)
    gen = tmp_path / "gen"
    assert (gen / "ladderpack_i2c.c").is_file() and (gen / "levels.c").is_file()
    assert "0x61u" in (gen / "volts.h").read_text()
