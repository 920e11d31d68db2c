"""I2S output: the clock plan of a state machine that drives bit clock, word select and data.

The frame is the I2S bus's (Philips Semiconductors, "I2S bus specification", 1986, revised
1996; from memory, not yet checked against the document): two channel slots per word-select
period, left while word select is low, data MSB first and one bit clock after the
word-select edge.  The state machine spends `cycles_per_bit` of its clocks on each bit
(the bit clock low for half of them, high for the other half, by side-set), so one frame
takes ``cycles_per_bit x 2 x slot_bits`` state-machine clocks and the frame rate is

    rate = f_sys / (D x cycles_per_bit x 2 x slot_bits)

with D the 16.8 fixed-point divider of :mod:`ladderpack.clock`.  An integer divider gives
a bit clock with no jitter; a fractional one stretches some state-machine periods by one
system clock, which an I2S receiver sees as bit-clock jitter (many DACs rebuild their
master clock from the bit clock, so it reaches the analog output).  The planner prefers
an integer divider within the tolerance, as for the ladder.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction

from ladderpack.clock import ClockPlan, plan_clock
from ladderpack.defaults import DEFAULT_SYS_CLOCK_HZ
from ladderpack.errors import OptionError

__all__ = ["SLOT_BITS", "I2sPlan", "plan_i2s"]

#: Channel slot widths: 16-bit slots carry 16-bit samples, 32-bit slots 16, 24 or 32.
SLOT_BITS = (16, 32)

#: State-machine clocks per bit: one with the bit clock low, one with it high.
CYCLES_PER_BIT = 2


@dataclass(frozen=True)
class I2sPlan:
    """An I2S frame clock: the divider, the frame (sample) rate and the bit clock.

    Attributes
    ----------
    clock : ClockPlan
        The state machine's divider; its ``cycles_per_sample`` is the cycles per frame.
    slot_bits : int
        Bits per channel slot (16 or 32); a frame holds two slots.
    """

    clock: ClockPlan
    slot_bits: int

    @property
    def bits_per_frame(self) -> int:
        """Bit clocks per frame (two slots)."""
        return 2 * self.slot_bits

    @property
    def frame_rate_hz(self) -> Fraction:
        """Frames (stereo samples) per second, exact."""
        return self.clock.achieved_rate_hz

    @property
    def bit_clock_hz(self) -> Fraction:
        """Bit-clock frequency, Hz, exact."""
        return self.frame_rate_hz * self.bits_per_frame

    def to_dict(self) -> dict[str, object]:
        """Plain-data description."""
        return {
            **self.clock.to_dict(),
            "slot_bits": self.slot_bits,
            "bits_per_frame": self.bits_per_frame,
            "cycles_per_bit": CYCLES_PER_BIT,
            "bit_clock_hz": float(self.bit_clock_hz),
            "sample_bits": [b for b in (16, 24, 32) if b <= self.slot_bits],
        }


def plan_i2s(
    rate_hz: float | int | Fraction,
    *,
    sys_clock_hz: int = DEFAULT_SYS_CLOCK_HZ,
    slot_bits: int = 32,
    tolerance_ppm: float = 100.0,
) -> I2sPlan:
    """Plan the state machine's divider for an I2S frame rate.

    Parameters
    ----------
    rate_hz : float, int or Fraction
        Requested frame (sample) rate, Hz.
    sys_clock_hz : int
        System clock, Hz (default 125 MHz).
    slot_bits : {16, 32}
        Bits per channel slot (default 32: room for 16-, 24- and 32-bit samples).
    tolerance_ppm : float
        Rate error accepted for an integer (jitter-free) divider, ppm (default 100).

    Raises
    ------
    OptionError
        For a slot width other than 16 or 32, or a bad rate or clock.
    ClockError
        When the divider's range cannot reach the rate.

    Examples
    --------
    >>> p = plan_i2s(48000)  # at 125 MHz: a fractional divider, 64 ppm fast
    >>> p.clock.div_int, p.clock.div_frac, round(float(p.bit_clock_hz)), p.clock.fractional
    (20, 88, 3072197, True)
    """
    if slot_bits not in SLOT_BITS:
        raise OptionError(f"must be 16 or 32, got {slot_bits!r}", field="slot_bits")
    cycles = CYCLES_PER_BIT * 2 * slot_bits
    clock = plan_clock(
        rate_hz,
        sys_clock_hz=sys_clock_hz,
        tolerance_ppm=tolerance_ppm,
        min_cycles=cycles,
        max_cycles=cycles,
    )
    return I2sPlan(clock, slot_bits)
