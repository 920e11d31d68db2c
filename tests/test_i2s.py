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
    assert bad.returncode == 2 and "only with --output i2s" in bad.stderr
