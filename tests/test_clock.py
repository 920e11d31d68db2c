"""Clock plans checked with exact rational arithmetic."""

from __future__ import annotations

from fractions import Fraction

import pytest

from ladderpack.clock import plan_clock
from ladderpack.errors import ClockError, OptionError

SYS = 125_000_000  # RP2040 default system clock (RP2040 datasheet; MicroPython rp2 docs)


def _rate(div_int: int, div_frac: int, cycles: int, sys_hz: int = SYS) -> Fraction:
    # RP2040 datasheet, "Clock Dividers" (SMx_CLKDIV): f_SM = f_sys / (INT + FRAC/256).
    return Fraction(sys_hz * 256, (div_int * 256 + div_frac) * cycles)


@pytest.mark.parametrize(
    ("rate", "div_int", "div_frac", "cycles", "ppm"),
    [
        # Integer dividers within the default 100 ppm tolerance.
        (8000, 15625, 0, 1, 0.0),
        (22050, 5669, 0, 1, -11.599865),
        (48000, 2604, 0, 1, 64.004096),
        # 125e6 / 44100 = 2834.467...: the nearest integer is 165 ppm off, so the plan goes
        # fractional. REFERENCES.md section 7.3: INT 2834, FRAC 120, -0.57 ppm.
        (44100, 2834, 120, 1, -0.575),
    ],
)
def test_plans_at_125mhz(rate: int, div_int: int, div_frac: int, cycles: int, ppm: float) -> None:
    plan = plan_clock(rate)
    assert (plan.div_int, plan.div_frac, plan.cycles_per_sample) == (div_int, div_frac, cycles)
    exact = _rate(div_int, div_frac, cycles)
    assert plan.achieved_rate_hz == exact
    assert plan.error_ppm == pytest.approx(float((exact - rate) / rate * 10**6), abs=1e-9)
    assert plan.error_ppm == pytest.approx(ppm, abs=1e-3)
    assert plan.fractional == (div_frac != 0)


def test_zero_tolerance_takes_best_fractional() -> None:
    # REFERENCES.md section 7.3: 48 kHz at 125 MHz -> INT 2604, FRAC 43 (47999.976 Hz).
    plan = plan_clock(48000, tolerance_ppm=0.0)
    assert (plan.div_int, plan.div_frac) == (2604, 43)
    assert float(plan.achieved_rate_hz) == pytest.approx(47999.976, abs=5e-4)


def test_exact_integer_at_150mhz() -> None:
    # REFERENCES.md section 7.3: 48 kHz at 150 MHz (RP2350 default) -> INT 3125, exact.
    plan = plan_clock(48000, sys_clock_hz=150_000_000, tolerance_ppm=0.0)
    assert (plan.div_int, plan.div_frac, plan.error_ppm) == (3125, 0, 0.0)


def test_integer_preferred_within_tolerance_else_fractional() -> None:
    assert not plan_clock(44100, tolerance_ppm=200).fractional  # 2834 is +165 ppm
    assert plan_clock(44100, tolerance_ppm=100).fractional


def test_low_rate_uses_more_cycles() -> None:
    # 125e6 / 1000 = 125000 > 65536, the largest divider, so 2 cycles per sample.
    plan = plan_clock(1000)
    assert plan.cycles_per_sample == 2 and plan.achieved_rate_hz == 1000


@pytest.mark.parametrize(
    ("div_int", "div_frac", "register"),
    # SMx_CLKDIV: INT in bits 31:16, FRAC in 15:8; INT = 0 means 65536 (RP2040 datasheet).
    [(1, 0, 0x00010000), (2834, 120, 0x0B127800), (65536, 0, 0x00000000)],
)
def test_clkdiv_register_encoding(div_int: int, div_frac: int, register: int) -> None:
    rate = _rate(div_int, div_frac, 1)
    plan = plan_clock(rate, tolerance_ppm=0.0, max_cycles=1)
    assert (plan.div_int, plan.div_frac) == (div_int, div_frac)
    assert plan.clkdiv_register == register


def test_minimum_rate_is_sys_over_65536_cycles() -> None:
    # REFERENCES.md 7.3: minimum SM clock at 125 MHz is 1907.349 Hz (divider 65536).
    assert float(plan_clock(1907.349, max_cycles=1).achieved_rate_hz) == pytest.approx(
        1907.3486, abs=1e-3
    )
    with pytest.raises(ClockError, match="cannot be reached"):
        plan_clock(1900, max_cycles=1)


@pytest.mark.parametrize("rate", [0, -5, float("nan"), float("inf")])
def test_bad_rates(rate: float) -> None:
    with pytest.raises((OptionError, ClockError)):
        plan_clock(rate)


def test_rate_above_system_clock() -> None:
    with pytest.raises(ClockError, match="reachable range"):
        plan_clock(200e6)
