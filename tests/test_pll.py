"""System clocks from the PLL: the settings against the datasheet formula, exactly.

RP2040 datasheet 2.18 and RP2350 datasheet 8.6 (the same PLL), as the vendored SDK 2.2.0
encodes them: ``FOUTPOSTDIV = FREF / REFDIV x FBDIV / (POSTDIV1 x POSTDIV2)``, FBDIV
16..320, VCO 750..1600 MHz (``hardware/pll.h``), post dividers 1..7 with POSTDIV1 >=
POSTDIV2 and the reference no more than VCO / 16 (``pll_init``); the SDK's defaults for
125 and 150 MHz (``hardware/clocks.h``) are VCO 1500 MHz / 6 / 2 and / 5 / 2.
"""

from __future__ import annotations

import json
import subprocess
import sys
from fractions import Fraction

import pytest

from ladderpack.clock import find_sys_clocks, pll_settings
from ladderpack.outputs import get_output

RATES = [8000, 11025, 16000, 22050, 32000, 44100, 48000, 96000]
XOSC = 12_000_000


def test_every_setting_follows_the_formula_and_the_limits() -> None:
    settings = pll_settings(10_000_000, 200_000_000)
    assert settings
    for f, s in settings.items():
        assert Fraction(XOSC, s.refdiv) * s.fbdiv / (s.postdiv1 * s.postdiv2) == f
        assert 16 <= s.fbdiv <= 320 and 750e6 <= s.vco_hz <= 1600e6
        assert 1 <= s.postdiv2 <= s.postdiv1 <= 7
        assert Fraction(XOSC, s.refdiv) <= s.vco_hz / 16


def test_no_reachable_clock_is_missed() -> None:
    # an independent enumeration of every (FBDIV, POSTDIV1, POSTDIV2) with REFDIV 1
    lo, hi = 48_000_000, 133_000_000
    brute = set()
    for fb in range(16, 321):
        vco = XOSC * fb
        if 750_000_000 <= vco <= 1_600_000_000:
            for p1 in range(1, 8):
                for p2 in range(1, p1 + 1):
                    f = Fraction(vco, p1 * p2)
                    if f.denominator == 1 and lo <= f <= hi:
                        brute.add(int(f))
    assert set(pll_settings(lo, hi)) == brute


def test_the_sdk_default_clocks() -> None:
    s125 = pll_settings(125_000_000, 125_000_000)[125_000_000]
    s150 = pll_settings(150_000_000, 150_000_000)[150_000_000]
    assert (int(s125.vco_hz), s125.postdiv1, s125.postdiv2) == (1_500_000_000, 6, 2)
    assert (int(s150.vco_hz), s150.postdiv1, s150.postdiv2) == (1_500_000_000, 5, 2)


@pytest.mark.parametrize("output", ["ladder", "i2s", "pwm"])
@pytest.mark.parametrize("rate", RATES)
def test_found_clocks_make_the_rate(rate: int, output: str) -> None:
    # each output's own planner, from its registered object
    planner = get_output(output).clock_planner(rate, {})
    found = find_sys_clocks(rate, planner=planner, min_hz=48_000_000, max_hz=133_000_000, limit=5)
    assert found, (rate, output)
    # any exact clock in range with a whole number of system clocks per sample (per frame
    # of 128 state-machine cycles for I2S) must be found first
    exact_possible = [
        f
        for f in pll_settings(48_000_000, 133_000_000)
        if f % rate == 0 and (output != "i2s" or (f // rate) % 128 == 0)
    ]
    for c in found:
        p = c.plan
        assert not p.fractional
        if output == "pwm":
            clocks = Fraction(p.div_int * 16 + p.div_frac, 16) * (p.top + 1) * p.periods_per_sample
        else:
            clocks = Fraction(p.div_int * 256 + p.div_frac, 256) * p.cycles_per_sample
            assert output != "i2s" or p.cycles_per_sample == 128
        achieved = Fraction(c.sys_clock_hz) / clocks  # the datasheet's rate, exactly
        assert achieved == p.achieved_rate_hz
        assert Fraction(c.pll.xosc_hz) * c.pll.fbdiv / (c.pll.postdiv1 * c.pll.postdiv2) == (
            c.sys_clock_hz
        )
        if exact_possible and output != "pwm":
            assert achieved == rate
    if exact_possible and output != "pwm":
        # ranked by distance from the 125 MHz boot clock
        d = [abs(c.sys_clock_hz - 125_000_000) for c in found]
        assert d == sorted(d)


def test_44k1_cannot_be_exact_from_a_12_mhz_crystal() -> None:
    # 44100 = 2^2 3^2 5^2 7^2; every PLL output is 12 MHz x FBDIV / (P1 P2), whose only 3
    # is the crystal's one: no whole number of clocks per sample, so the smallest error
    # comes first
    found = find_sys_clocks(44100, planner=get_output("i2s").clock_planner(44100, {}))
    assert all(c.plan.error_ppm != 0 for c in found)
    errors = [abs(c.plan.error_ppm) for c in found]
    assert errors == sorted(errors)


def test_clock_command_lists_them() -> None:
    res = subprocess.run(
        [sys.executable, "-m", "ladderpack", "clock", "48000", "--output", "i2s",
         "--find-sys-clock", "--json"],
        capture_output=True, text=True, check=True,
    )  # fmt: skip
    d = json.loads(res.stdout)
    first = d["clocks"][0]
    assert first["sys_clock_hz"] == 61_440_000 and first["exact"] and first["div_int"] == 10
    assert first["pll"]["fbdiv"] == 128 and (
        first["pll"]["postdiv1"],
        first["pll"]["postdiv2"],
    ) == (5, 5)


# The table's rates a fast write can carry: at 400 kHz up to about 12 k updates a second,
# at 1 MHz (Fast-mode Plus) up to about 30 k.
@pytest.mark.parametrize(
    ("rate", "bus"),
    [(8000, 400_000), (6250, 400_000), (11025, 400_000), (16000, 1_000_000),
     (22050, 1_000_000)],
)  # fmt: skip
def test_clocks_for_the_i2c_writer(rate: int, bus: int) -> None:
    from ladderpack.outputs.i2c_dac import I2cDacFormat, plan_writer

    fmt = I2cDacFormat(command="fast")
    found = find_sys_clocks(
        rate,
        planner=lambda f: plan_writer(rate, fmt, bus_hz=bus, sys_clock_hz=f),
        limit=4,
    )
    assert found
    for c in found:
        p = c.plan
        # f_sys / (divider x cycles per update), the bus no faster than asked
        assert p.achieved_rate_hz == Fraction(c.sys_clock_hz, p.divider * p.cycles_per_update)
        assert p.bus_hz <= bus and p.cycles_per_update >= 129
        assert Fraction(c.pll.xosc_hz) * c.pll.fbdiv / (c.pll.postdiv1 * c.pll.postdiv2) == (
            c.sys_clock_hz
        )
    if found[0].plan.error_ppm == 0:
        d = [abs(c.sys_clock_hz - 125_000_000) for c in found]
        assert d == sorted(d)
