"""Clock plans: how the state machine reaches a sample rate.

A PIO state machine runs at ``f_sys / D`` where ``D`` is the 16.8 fixed-point
clock divider (RP2040 datasheet, section "Clock Dividers", register
``SMx_CLKDIV``: integer part 1..65536 in bits 31:16, with 0 meaning 65536,
fraction in 1/256 steps in bits 15:8).  The ladder program spends a whole
number of state-machine cycles on each sample, so the sample rate is

    rate = f_sys / (D * cycles_per_sample)

A fractional divider is exact on average but stretches some state-machine
periods by one system clock (a first-order delta-sigma), which is jitter.  An
integer divider has none, so the planner prefers one whenever its rate error
is within the user's tolerance.  The stream is then resampled to the
*achieved* rate, so pitch and duration stay exact whichever plan wins.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable
from dataclasses import dataclass
from fractions import Fraction
from typing import Any

from ladderpack.defaults import DEFAULT_SYS_CLOCK_HZ
from ladderpack.errors import ClockError, OptionError

__all__ = [
    "DEFAULT_SYS_CLOCK_HZ",
    "RATED_SYS_CLOCK_HZ",
    "ClockChoice",
    "ClockPlan",
    "PllSetting",
    "find_sys_clocks",
    "plan_clock",
    "pll_settings",
]


_DIV_MIN_256 = 1 * 256  # divider 1.0
_DIV_MAX_256 = 65536 * 256  # divider 65536.0 (integer field 0, fraction 0)


@dataclass(frozen=True)
class ClockPlan:
    """A state-machine clock setting and the sample rate it gives.

    Attributes
    ----------
    sys_clock_hz : int
        System clock feeding the PIO block, in hertz.
    requested_rate_hz : fractions.Fraction
        Sample rate asked for, in hertz.
    div_int : int
        Integer part of the clock divider, 1..65536.
    div_frac : int
        Fractional part of the divider in 1/256 steps, 0..255 (0 when
        `div_int` is 65536).
    cycles_per_sample : int
        State-machine cycles spent on each sample.
    """

    sys_clock_hz: int
    requested_rate_hz: Fraction
    div_int: int
    div_frac: int
    cycles_per_sample: int

    @property
    def divider(self) -> Fraction:
        """The clock divider ``div_int + div_frac / 256`` as an exact fraction."""
        return Fraction(self.div_int * 256 + self.div_frac, 256)

    @property
    def sm_clock_hz(self) -> Fraction:
        """State-machine clock in hertz (exact)."""
        return Fraction(self.sys_clock_hz) / self.divider

    @property
    def achieved_rate_hz(self) -> Fraction:
        """Sample rate the state machine really produces, in hertz (exact)."""
        return self.sm_clock_hz / self.cycles_per_sample

    @property
    def divider_text(self) -> str:
        """The divider as the summary prints it, ``INT+FRAC/256``."""
        return f"{self.div_int}+{self.div_frac}/256"

    @property
    def error_ppm(self) -> float:
        """Achieved rate minus requested, in parts per million of the request."""
        return float(
            (self.achieved_rate_hz - self.requested_rate_hz) / self.requested_rate_hz * 1_000_000
        )

    @property
    def fractional(self) -> bool:
        """True when the divider has a fraction (period jitter of one system clock)."""
        return self.div_frac != 0

    @property
    def jitter_s(self) -> float:
        """Peak-to-peak sample-edge jitter in seconds (0 for an integer divider)."""
        return 1.0 / self.sys_clock_hz if self.fractional else 0.0

    @property
    def clkdiv_register(self) -> int:
        """Value for the ``SMx_CLKDIV`` register (INT in 31:16, FRAC in 15:8)."""
        return ((self.div_int & 0xFFFF) << 16) | (self.div_frac << 8)

    def to_dict(self) -> dict[str, object]:
        """Plain-data description for summaries and sidecars."""
        return {
            "sys_clock_hz": self.sys_clock_hz,
            "requested_rate_hz": float(self.requested_rate_hz),
            "achieved_rate_hz": float(self.achieved_rate_hz),
            "achieved_rate_exact": f"{self.achieved_rate_hz.numerator}/"
            f"{self.achieved_rate_hz.denominator}",
            "error_ppm": round(self.error_ppm, 6),
            "div_int": self.div_int,
            "div_frac": self.div_frac,
            "divider": float(self.divider),
            "fractional_divider": self.fractional,
            "cycles_per_sample": self.cycles_per_sample,
            "clkdiv_register": self.clkdiv_register,
        }


def _as_fraction(value: float | int | Fraction, field: str) -> Fraction:
    try:
        frac = Fraction(value)
    except (TypeError, ValueError, OverflowError):
        raise OptionError(
            f"expected a positive finite number, got {value!r}", field=field
        ) from None
    if frac <= 0:
        raise OptionError(f"must be positive, got {value!r}", field=field)
    return frac


def plan_clock(
    rate_hz: float | int | Fraction,
    *,
    sys_clock_hz: int = DEFAULT_SYS_CLOCK_HZ,
    tolerance_ppm: float = 100.0,
    min_cycles: int = 1,
    max_cycles: int = 32,
) -> ClockPlan:
    """Choose the divider and cycles per sample closest to a sample rate.

    Parameters
    ----------
    rate_hz : float, int or Fraction
        Requested sample rate in hertz.
    sys_clock_hz : int
        System clock in hertz (default 125 MHz, the RP2040 boot default).
    tolerance_ppm : float
        Largest rate error, in parts per million, accepted for an integer
        (jitter-free) divider.  If no integer divider comes this close, the
        closest fractional divider is used.  Default 100 ppm.
    min_cycles, max_cycles : int
        Range of state-machine cycles per sample to consider.  One ``out``
        instruction with delay covers 1..32.

    Returns
    -------
    ClockPlan
        The chosen plan.  Ties go to the fewest cycles per sample.

    Raises
    ------
    ClockError
        If the rate lies outside what the divider range can reach.
    OptionError
        If an argument is out of range.

    Examples
    --------
    >>> p = plan_clock(8000)
    >>> p.div_int, p.div_frac, p.cycles_per_sample, p.error_ppm
    (15625, 0, 1, 0.0)
    """
    rate = _as_fraction(rate_hz, "rate_hz")
    if int(sys_clock_hz) != sys_clock_hz or sys_clock_hz <= 0:
        raise OptionError(
            f"must be a positive whole number of hertz, got {sys_clock_hz!r}", field="sys_clock_hz"
        )
    sys_clock_hz = int(sys_clock_hz)
    if not (math.isfinite(tolerance_ppm) and tolerance_ppm >= 0):
        raise OptionError(f"must be >= 0, got {tolerance_ppm!r}", field="rate_tolerance_ppm")
    if not 1 <= min_cycles <= max_cycles:
        raise OptionError(
            f"need 1 <= min_cycles <= max_cycles, got {min_cycles}..{max_cycles}",
            field="cycles_per_sample",
        )

    fastest = Fraction(sys_clock_hz, min_cycles)
    slowest = Fraction(sys_clock_hz, 65536 * max_cycles)
    if not slowest <= rate <= fastest:
        raise ClockError(
            f"{float(rate):.6g} Hz cannot be reached from a {sys_clock_hz} Hz system clock with "
            f"{min_cycles}..{max_cycles} cycles per sample; reachable range is "
            f"{float(slowest):.6g} Hz to {float(fastest):.6g} Hz",
            field="rate_hz",
        )

    cycles, d256 = _best_divider(
        rate, sys_clock_hz, Fraction(tolerance_ppm), min_cycles, max_cycles
    )
    div_int, div_frac = divmod(d256, 256)
    return ClockPlan(sys_clock_hz, rate, div_int, div_frac, cycles)


@functools.lru_cache(maxsize=512)
def _best_divider(
    rate: Fraction, sys_clock_hz: int, tolerance_ppm: Fraction, min_cycles: int, max_cycles: int
) -> tuple[int, int]:
    """The search of :func:`plan_clock`: ``(cycles, divider x 256)``.

    Cached: a build plans the same rate for every asset (a pure function of exact
    arguments, so the cache cannot change a plan).
    """
    # Exact integer arithmetic: with rate = p/q, a candidate (d256, cycles) is off by
    # |256 f q - p d256 cycles| / (p d256 cycles); errors are compared by cross-multiplying.
    p, q = rate.numerator, rate.denominator
    target = 256 * sys_clock_hz * q

    # The best error so far of any divider and of integer ones, as (numerator,
    # denominator, cycles, d256); a candidate wins on a smaller error, then fewer cycles.
    # The comparison is written out in the loop (it runs for every cycle count).
    any_n, any_d, any_c, any_s = -1, 1, 0, 0
    int_n, int_d, int_c, int_s = -1, 1, 0, 0
    for cycles in range(min_cycles, max_cycles + 1):
        pc = p * cycles
        lo256 = target // pc
        lo_int = (target // (pc * 256)) * 256
        for d256 in {lo256, lo256 + 1, lo_int, lo_int + 256}:
            if not _DIV_MIN_256 <= d256 <= _DIV_MAX_256:
                continue
            den = pc * d256
            num = abs(target - den)
            lhs, rhs = num * any_d, any_n * den
            if any_n < 0 or lhs < rhs or (lhs == rhs and cycles < any_c):
                any_n, any_d, any_c, any_s = num, den, cycles, d256
            if d256 % 256 == 0:
                lhs, rhs = num * int_d, int_n * den
                if int_n < 0 or lhs < rhs or (lhs == rhs and cycles < int_c):
                    int_n, int_d, int_c, int_s = num, den, cycles, d256
    best_any = (any_n, any_d, any_c, any_s) if any_n >= 0 else None
    best_int = (int_n, int_d, int_c, int_s) if int_n >= 0 else None
    assert best_any is not None  # the range check above guarantees a candidate
    chosen = best_any
    if best_int is not None and Fraction(best_int[0] * 1_000_000, best_int[1]) <= tolerance_ppm:
        chosen = best_int
    return chosen[2], chosen[3]


# -- system clocks from the PLL ---------------------------------------------------------

#: Crystal of the common boards, Hz (SDK ``XOSC_HZ``, 12 MHz for RP2040 and RP2350).
XOSC_HZ = 12_000_000
#: VCO range, Hz (SDK 2.2.0 ``hardware/pll.h``: PICO_PLL_VCO_MIN/MAX_FREQ_HZ, from the
#: datasheets' PLL chapter).
VCO_MIN_HZ, VCO_MAX_HZ = 750_000_000, 1_600_000_000
#: Feedback divider range (SDK ``pll_init``: 16..320).
FBDIV_MIN, FBDIV_MAX = 16, 320
#: Post dividers, each 1..7, POSTDIV1 >= POSTDIV2 (SDK ``pll_init``: "postdiv1 is
#: designed to operate with a higher input frequency than postdiv2").
POSTDIV_MAX = 7
#: Highest system clock each chip is rated for at its default core voltage, Hz: RP2040
#: 133 MHz (RP2040 datasheet, from memory; the SDK's 200 MHz mode raises the core
#: voltage to 1.15 V, hardware/clocks.h), RP2350 150 MHz (RP2350 datasheet, the SDK's
#: default clock).
RATED_SYS_CLOCK_HZ = {"rp2040": 133_000_000, "rp2350": 150_000_000}


@dataclass(frozen=True)
class PllSetting:
    """A system-PLL setting: ``f_sys = XOSC / REFDIV x FBDIV / (POSTDIV1 x POSTDIV2)``.

    Attributes
    ----------
    refdiv, fbdiv, postdiv1, postdiv2 : int
        The PLL's reference, feedback and two post dividers.
    xosc_hz : int
        Crystal frequency, Hz.
    """

    refdiv: int
    fbdiv: int
    postdiv1: int
    postdiv2: int
    xosc_hz: int = XOSC_HZ

    @property
    def vco_hz(self) -> Fraction:
        """VCO frequency, Hz."""
        return Fraction(self.xosc_hz, self.refdiv) * self.fbdiv

    @property
    def sys_clock_hz(self) -> Fraction:
        """Output (system clock) frequency, Hz, exact."""
        return self.vco_hz / (self.postdiv1 * self.postdiv2)

    def to_dict(self) -> dict[str, object]:
        """Plain-data description (the sidecar's ``pll``)."""
        return {
            "xosc_hz": self.xosc_hz,
            "refdiv": self.refdiv,
            "fbdiv": self.fbdiv,
            "vco_hz": int(self.vco_hz),
            "postdiv1": self.postdiv1,
            "postdiv2": self.postdiv2,
            "sys_clock_hz": int(self.sys_clock_hz),
        }


def pll_settings(min_hz: int, max_hz: int, *, xosc_hz: int = XOSC_HZ) -> dict[int, PllSetting]:
    """Every whole-hertz system clock the PLL reaches in ``min_hz .. max_hz``.

    With REFDIV 1 (the SDK's ``PLL_SYS_REFDIV`` and what ``set_sys_clock_pll`` and
    MicroPython's ``machine.freq`` use), FBDIV 16..320 with the VCO in 750..1600 MHz, and
    post dividers 1..7 with POSTDIV1 >= POSTDIV2.  Where several settings give one
    clock, the one the SDK's ``check_sys_clock_hz`` would find is kept: the highest VCO,
    then the largest POSTDIV1.

    Examples
    --------
    >>> s = pll_settings(125_000_000, 125_000_000)[125_000_000]
    >>> s.fbdiv, int(s.vco_hz), s.postdiv1, s.postdiv2
    (125, 1500000000, 6, 2)
    """
    out: dict[int, PllSetting] = {}
    for fbdiv in range(FBDIV_MAX, FBDIV_MIN - 1, -1):
        vco = xosc_hz * fbdiv
        if not VCO_MIN_HZ <= vco <= VCO_MAX_HZ:
            continue
        for pd1 in range(POSTDIV_MAX, 0, -1):
            for pd2 in range(pd1, 0, -1):
                if vco % (pd1 * pd2):
                    continue
                f = vco // (pd1 * pd2)
                if min_hz <= f <= max_hz and f not in out:
                    out[f] = PllSetting(1, fbdiv, pd1, pd2, xosc_hz)
    return out


@dataclass(frozen=True)
class ClockChoice:
    """A system clock that makes a rate exact, with its PLL setting and the rate plan.

    Attributes
    ----------
    pll : PllSetting
        How the PLL makes the clock.
    plan : object
        The output's plan at that clock (:class:`ClockPlan`, or a PWM plan).
    """

    pll: PllSetting
    plan: Any

    @property
    def sys_clock_hz(self) -> int:
        """The system clock, Hz."""
        return int(self.pll.sys_clock_hz)


def find_sys_clocks(
    rate_hz: float | int | Fraction,
    *,
    min_hz: int = 48_000_000,
    max_hz: int = 133_000_000,
    near_hz: int = DEFAULT_SYS_CLOCK_HZ,
    tolerance_ppm: float = 0.0,
    min_cycles: int = 1,
    max_cycles: int = 32,
    planner: Callable[[int], Any] | None = None,
    limit: int = 10,
) -> list[ClockChoice]:
    """System clocks in a range that make `rate_hz` exact with an integer divider.

    For each clock the PLL reaches (:func:`pll_settings`), the output's planner finds the
    best integer (jitter-free) divider: by default a state machine's divider x cycles per
    sample (the ladder's); an output's own planner comes from its object
    (``Output.clock_planner``: the I2S frame's divider x 128 cycles, the PWM slice's
    divider x (TOP + 1) x periods per sample, the I2C writer's).  Clocks whose rate
    error is within `tolerance_ppm` (default 0: exact) are ranked by their distance from
    `near_hz` (the clock the firmware runs at now).  When no clock is that close, the
    clocks with the smallest error are returned instead, best first (check
    ``choice.plan.error_ppm``): 44.1 kHz, for one, needs the factors 3^2 x 7^2, which no
    divider of a 12 MHz crystal's PLL output has.

    Parameters
    ----------
    rate_hz : float, int or Fraction
        Sample (frame) rate wanted, Hz.
    min_hz, max_hz : int
        Range of system clocks to search, Hz.
    near_hz : int
        Clock to rank by distance from, Hz.
    tolerance_ppm : float
        Rate error accepted as exact enough, ppm (default 0).
    min_cycles, max_cycles : int
        The default planner's range of state-machine cycles per sample.
    planner : callable, optional
        An output's planner, ``planner(sys_clock_hz) -> plan`` (a plan with
        ``fractional``, ``error_ppm`` and ``achieved_rate_hz``), used instead of the
        default.
    limit : int
        Most clocks returned.

    Examples
    --------
    >>> frame = lambda f: plan_clock(48000, sys_clock_hz=f, min_cycles=128, max_cycles=128)
    >>> [c.sys_clock_hz for c in find_sys_clocks(48000, planner=frame)]
    [61440000]
    """
    rate = _as_fraction(rate_hz, "rate_hz")
    if not 0 < min_hz <= max_hz:
        raise OptionError(
            f"need 0 < min <= max, got {min_hz}..{max_hz} Hz", field="min_sys_clock_hz"
        )
    if not (math.isfinite(tolerance_ppm) and tolerance_ppm >= 0):
        raise OptionError(f"must be >= 0, got {tolerance_ppm!r}", field="rate_tolerance_ppm")
    every: list[ClockChoice] = []
    for f, pll in sorted(pll_settings(min_hz, max_hz).items()):
        try:
            if planner is not None:
                plan: Any = planner(f)
            else:
                plan = plan_clock(
                    rate,
                    sys_clock_hz=f,
                    tolerance_ppm=1e9,
                    min_cycles=min_cycles,
                    max_cycles=max_cycles,
                )
        except (ClockError, OptionError):
            continue
        if not plan.fractional:
            every.append(ClockChoice(pll, plan))
    close = [c for c in every if abs(c.plan.error_ppm) <= tolerance_ppm]
    if close:
        close.sort(key=lambda c: (abs(c.sys_clock_hz - near_hz), c.sys_clock_hz))
        return close[:limit]
    every.sort(key=lambda c: (abs(c.plan.error_ppm), abs(c.sys_clock_hz - near_hz)))
    return every[:limit]
