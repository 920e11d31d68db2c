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

import math
from dataclasses import dataclass
from fractions import Fraction

from ladderpack.defaults import DEFAULT_SYS_CLOCK_HZ
from ladderpack.errors import ClockError, OptionError

__all__ = ["DEFAULT_SYS_CLOCK_HZ", "ClockPlan", "plan_clock"]


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

    # Exact integer arithmetic: with rate = p/q, a candidate (d256, cycles) is off by
    # |256 f q - p d256 cycles| / (p d256 cycles); errors are compared by cross-multiplying.
    p, q = rate.numerator, rate.denominator
    target = 256 * sys_clock_hz * q

    def better(a: tuple[int, int, int, int], b: tuple[int, int, int, int] | None) -> bool:
        if b is None:
            return True
        lhs, rhs = a[0] * b[1], b[0] * a[1]
        return lhs < rhs or (lhs == rhs and a[2] < b[2])

    best_int: tuple[int, int, int, int] | None = None  # (err num, err den, cycles, d256)
    best_any: tuple[int, int, int, int] | None = None
    for cycles in range(min_cycles, max_cycles + 1):
        pc = p * cycles
        lo256 = target // pc
        lo_int = (target // (pc * 256)) * 256
        for d256 in {lo256, lo256 + 1, lo_int, lo_int + 256}:
            if not _DIV_MIN_256 <= d256 <= _DIV_MAX_256:
                continue
            den = pc * d256
            cand = (abs(target - den), den, cycles, d256)
            if better(cand, best_any):
                best_any = cand
            if d256 % 256 == 0 and better(cand, best_int):
                best_int = cand
    assert best_any is not None  # the range check above guarantees a candidate
    chosen = best_any
    if best_int is not None and Fraction(best_int[0] * 1_000_000, best_int[1]) <= Fraction(
        tolerance_ppm
    ):
        chosen = best_int
    cycles, d256 = chosen[2], chosen[3]
    div_int, div_frac = divmod(d256, 256)
    return ClockPlan(sys_clock_hz, rate, div_int, div_frac, cycles)
