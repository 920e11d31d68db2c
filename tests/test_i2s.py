"""I2S frame clock plan against the divider arithmetic and the frame's bit count."""

from __future__ import annotations

import json
import subprocess
import sys
from fractions import Fraction

import pytest

from ladderpack.errors import OptionError
from ladderpack.outputs.i2s import CYCLES_PER_BIT, plan_i2s

RATES = [8000, 11025, 16000, 22050, 32000, 44100, 48000, 96000]


@pytest.mark.parametrize("sys_hz", [125_000_000, 150_000_000, 122_880_000])
@pytest.mark.parametrize("slot_bits", [16, 32])
@pytest.mark.parametrize("rate", RATES)
def test_frame_rate_follows_the_divider(rate: int, slot_bits: int, sys_hz: int) -> None:
    # RP2040 datasheet, SMx_CLKDIV: the state machine runs at f_sys / (INT + FRAC / 256);
    # one frame is two slots of `slot_bits` bits, CYCLES_PER_BIT state-machine clocks each.
    p = plan_i2s(rate, sys_clock_hz=sys_hz, slot_bits=slot_bits)
    c = p.clock
    div = Fraction(c.div_int) + Fraction(c.div_frac, 256)
    assert c.cycles_per_sample == CYCLES_PER_BIT * 2 * slot_bits
    assert p.frame_rate_hz == Fraction(sys_hz) / (div * CYCLES_PER_BIT * 2 * slot_bits)
    assert p.bit_clock_hz == p.frame_rate_hz * 2 * slot_bits
    # the divider is the closest the 16.8 format allows (half a step either way)
    exact = Fraction(sys_hz) / (rate * c.cycles_per_sample)
    if c.fractional:
        assert abs(div - exact) <= Fraction(1, 512)
    else:
        assert abs(p.clock.error_ppm) <= 100


def test_audio_clocks_make_audio_rates_exact() -> None:
    # 122.88 MHz = 2560 x 48 kHz: an integer divider for 48 kHz with 16- or 32-bit slots;
    # the 125 MHz boot clock needs a fractional one for 44.1 and 48 kHz.
    for slot in (16, 32):
        assert not plan_i2s(48000, sys_clock_hz=122_880_000, slot_bits=slot).clock.fractional
    assert plan_i2s(44100).clock.fractional and plan_i2s(48000).clock.fractional


def test_slot_width_is_checked() -> None:
    with pytest.raises(OptionError) as info:
        plan_i2s(48000, slot_bits=24)
    assert info.value.field == "slot_bits"


def test_clock_command_shows_the_i2s_plan() -> None:
    run = subprocess.run(
        [sys.executable, "-m", "ladderpack", "clock", "48000", "--output", "i2s", "--json"],
        capture_output=True,
        text=True,
        check=True,
    )
    d = json.loads(run.stdout)
    assert (d["slot_bits"], d["bits_per_frame"], d["cycles_per_sample"]) == (32, 64, 128)
    assert d["sample_bits"] == [16, 24, 32]
    bad = subprocess.run(
        [sys.executable, "-m", "ladderpack", "clock", "48000", "--slot-bits", "16"],
        capture_output=True,
        text=True,
    )
    assert bad.returncode == 2 and "--slot-bits: applies to output i2s" in bad.stderr


# --- the stream: layout, program, registers, options, generated C -------------------------


@pytest.mark.parametrize("bits", [16, 24, 32])
def test_layout_packs_twos_complement_slots(bits: int) -> None:
    import numpy as np

    from ladderpack.outputs.i2s import I2sLayout

    rng = np.random.default_rng(1)
    codes = rng.integers(0, 1 << bits, 500, dtype=np.int64)
    lay = I2sLayout(bits)
    words = lay.pack_codes(codes.astype(np.uint32))
    # two's complement of (code - 2^(N-1)), placed in the slot's top bits (I2S sends the
    # MSB first; the bits below the sample are zero)
    signed = [(int(c) - (1 << (bits - 1))) & ((1 << bits) - 1) for c in codes]
    if bits == 16:
        assert [int(w) for w in words] == [(s << 16) | s for s in signed]
    else:
        slots = [s << (32 - bits) for s in signed]
        assert [int(w) for w in words] == [v for s in slots for v in (s, s)]
    back = lay.unpack_words(words)
    assert np.array_equal(back[:, 0], codes) and np.array_equal(back[:, 1], codes)


@pytest.mark.parametrize("bits", [16, 24, 32])
@pytest.mark.parametrize("frame_format", ["standard", "left-justified"])
def test_program_assembles_as_an_independent_assembler_does(bits: int, frame_format: str) -> None:
    import adafruit_pioasm

    from ladderpack.outputs.i2s import i2s_program

    prog = i2s_program(bits, frame_format)
    # adafruit-circuitpython-pioasm (PyPI) assembles the same source to the same words
    independent = adafruit_pioasm.Program(prog.source())
    assert list(independent.assembled) == list(prog.words)
    # 64 bit clocks a frame, two state-machine cycles each (one jmp loop pass per bit)
    assert len(prog.instructions) == (16 if bits == 16 else 8)


def test_state_machine_registers_follow_the_datasheet() -> None:
    from ladderpack.clock import plan_clock
    from ladderpack.outputs.i2s import I2sLayout, i2s_program, i2s_state_machine

    prog = i2s_program(16)
    clock = plan_clock(48000, min_cycles=128, max_cycles=128)
    sm = i2s_state_machine(prog, I2sLayout(16), clock, data_pin=9, clock_pin=10)
    # RP2040 datasheet, SMx_PINCTRL: SIDESET_COUNT 31:29, OUT_COUNT 25:20,
    # SIDESET_BASE 14:10, OUT_BASE 4:0; SMx_SHIFTCTRL: FJOIN_TX 30, PULL_THRESH 29:25
    # (0 = 32), OUT_SHIFTDIR 19 (0 = left), AUTOPULL 17.
    assert sm.pinctrl >> 29 == 2 and (sm.pinctrl >> 20) & 0x3F == 1
    assert (sm.pinctrl >> 10) & 0x1F == 10 and sm.pinctrl & 0x1F == 9
    assert sm.shiftctrl & (1 << 30) and not sm.shiftctrl & (0x1F << 25)
    assert not sm.shiftctrl & (1 << 19) and sm.shiftctrl & (1 << 17)
    assert (sm.execctrl >> 12) & 0x1F == 15 and (sm.execctrl >> 7) & 0x1F == 0
    with pytest.raises(OptionError, match="data pin"):
        i2s_state_machine(prog, I2sLayout(16), clock, data_pin=11, clock_pin=10)


def test_options_refuse_what_does_not_apply() -> None:
    from ladderpack.options import StreamOptions

    assert StreamOptions(output="i2s").bits == 16
    assert StreamOptions(output="i2s", data_pin=5).bit_clock_pin == 6
    for bad, field in (
        ({"bits": 12}, "bits"),
        ({"invert": True}, "invert"),
        ({"levels": "x.json"}, "levels"),
        ({"ramp_ms": 1.0}, "ramp_ms"),
        ({"bit_clock_pin": 0}, "bit_clock_pin"),
        ({"out_base": 3, "data_pin": 4}, "out_base"),
        ({"sda_pin": 3}, "sda_pin"),
    ):
        with pytest.raises(OptionError) as info:
            StreamOptions(output="i2s", **bad)
        assert info.value.field == field
    with pytest.raises(OptionError) as info:
        StreamOptions(frame_format="left-justified")
    assert info.value.field == "frame_format"
    # a ladder records no output keys: its sidecars and fingerprints stay as they were
    assert "output" not in StreamOptions().to_dict()


@pytest.mark.slow
def test_generated_c_compiles_pedantic_and_holds_the_bin(tmp_path) -> None:
    import shutil

    from ladderpack.bundle import write_bundle
    from ladderpack.stream import stream_tone

    gcc = shutil.which("gcc")
    assert gcc, ".ci/run installs gcc"
    asset = stream_tone("sine", name="amp", output="i2s", bits=24, seconds=0.002)
    write_bundle(asset, tmp_path)
    main = tmp_path / "main.c"
    main.write_text(
        '#include <stdio.h>\n#include "amp.h"\n'
        "int main(void) {\n    unsigned i;\n    for (i = 0; i < AMP_WORD_COUNT; ++i) {\n"
        '        printf("%08lx\\n", (unsigned long)amp_words[i]);\n    }\n    return 0;\n}\n'
    )
    exe = tmp_path / "dump"
    subprocess.run(
        [gcc, "-std=c99", "-pedantic", "-Wall", "-Wextra", "-Werror", "-o", str(exe),
         str(main), str(tmp_path / "amp.c")],
        check=True,
    )  # fmt: skip
    out = subprocess.run([str(exe)], check=True, capture_output=True, text=True).stdout.split()
    import numpy as np

    words = np.frombuffer((tmp_path / "amp.bin").read_bytes(), "<u4")
    assert [int(w, 16) for w in out] == [int(w) for w in words]
    side = json.loads((tmp_path / "amp.json").read_text())
    assert side["layout"]["output"] == "i2s" and side["program"]["entry"] == 7


def test_a_manifest_builds_an_i2s_asset(tmp_path) -> None:
    from click.testing import CliRunner

    from ladderpack.cli import cli

    (tmp_path / "ladderpack.toml").write_text(
        '[project]\nout_dir = "gen"\n\n[[asset]]\nname = "amp"\ntone = "sine"\n'
        'output = "i2s"\nbits = 16\nseconds = 0.002\ndata_pin = 9\n'
    )
    res = CliRunner().invoke(cli, ["build", str(tmp_path / "ladderpack.toml")])
    assert res.exit_code == 0, res.output
    side = json.loads((tmp_path / "gen" / "amp.json").read_text())
    assert side["options"]["output"] == "i2s" and side["state_machine"]["sideset_base"] == 10
    assert (tmp_path / "gen" / "ladderpack_i2s.c").is_file()


def test_pins_the_target_lacks_are_named() -> None:
    from ladderpack.options import StreamOptions

    with pytest.raises(OptionError) as info:
        StreamOptions(output="i2s", bit_clock_pin=29)  # word select would be GPIO 30
    assert info.value.field == "bit_clock_pin" and "word select" in info.value.message
