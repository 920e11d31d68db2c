"""PWM output: a hardware PWM slice whose compare value is the sample.

The slice's behaviour, from the vendor SDK (tag 2.2.0: ``hardware/pwm.h`` and the
register headers ``hardware/regs/pwm.h``, ``dma.h``, ``dreq.h``; REFERENCES.md
section 13, generated from the datasheets' register descriptions):

* in free-running mode the counter runs at ``f_sys / div``, with the divider in 8.4
  fixed point: ``DIV_INT`` 1..255 and ``DIV_FRAC`` 0..15 sixteenths;
* it counts up to ``TOP`` (16 bits) and wraps to 0, so one PWM period is ``TOP + 1``
  counts and the carrier is ``f_sys / (div (TOP + 1))``;
* an output is asserted while the counter is below its compare value and deasserted
  when the counter reaches it: compare value ``CC`` gives the duty ``CC / (TOP + 1)``,
  from 0 (always low) to ``TOP + 1`` (always high), so a slice has ``TOP + 2``
  distinct levels;
* ``DREQ_PWM_WRAPn`` asks the DMA for one transfer per wrap of slice n, and a DMA pacing
  timer asks at ``f_sys X / Y`` (X and Y 16 bits each).

Each sample is held for a whole number K of PWM periods.  With K = 1 the slice's own
wrap request paces the DMA; with K > 1 a pacing timer with ``X = 1`` and
``Y = div (TOP + 1) K`` system clocks does, a whole number of PWM periods, so every
new compare value is latched at the same point of the period and the rate is exact
with no jitter.  A fractional PWM divider spreads each period over unequal numbers of
system clocks, which is jitter; the planner avoids it while an integer divider comes
within the rate tolerance.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from ladderpack.defaults import DEFAULT_SYS_CLOCK_HZ
from ladderpack.errors import ClockError, OptionError
from ladderpack.targets import REGISTERS

__all__ = [
    "DREQ_DMA_TIMER0",
    "DREQ_PWM_WRAP0",
    "PwmPlan",
    "PwmSetup",
    "PwmStereoLayout",
    "RcFilter",
    "plan_pwm",
    "pwm_slice",
    "reconstruction_filter",
]

#: DMA request numbers by SDK platform (``hardware/regs/dreq.h``), from the target data.
DREQ_PWM_WRAP0 = {chip: regs["DREQ_PWM_WRAP0"] for chip, regs in REGISTERS.items()}
DREQ_DMA_TIMER0 = {chip: regs["DREQ_DMA_TIMER0"] for chip, regs in REGISTERS.items()}

_TOP_MAX = 0xFFFF
_DIV_INT_MAX = 255
_Y_MAX = 0xFFFF
#: Most PWM periods one sample is held for.
PERIODS_MAX = 64
#: Default lowest carrier, as a multiple of the sample rate: four periods per sample
#: put the carrier and its images two octaves above the band's edge (common practice
#: for a single-pole or two-pole RC reconstruction filter; no published source).
DEFAULT_CARRIER_FACTOR = 4


@dataclass(frozen=True)
class PwmPlan:
    """A PWM slice setting and the sample rate and resolution it gives.

    Attributes
    ----------
    sys_clock_hz : int
        System clock, Hz.
    requested_rate_hz : fractions.Fraction
        Sample rate asked for, Hz.
    div_int, div_frac : int
        PWM clock divider, ``div_int + div_frac / 16`` (1..255, 0..15).
    top : int
        Counter wrap value TOP (the period is TOP + 1 counts).
    periods_per_sample : int
        PWM periods each sample is held for (K).
    """

    sys_clock_hz: int
    requested_rate_hz: Fraction
    div_int: int
    div_frac: int
    top: int
    periods_per_sample: int

    @property
    def divider(self) -> Fraction:
        """The PWM clock divider as an exact fraction."""
        return Fraction(self.div_int * 16 + self.div_frac, 16)

    @property
    def fractional(self) -> bool:
        """True when the divider has a fraction (period jitter of one system clock)."""
        return self.div_frac != 0

    @property
    def carrier_hz(self) -> Fraction:
        """PWM frequency ``f_sys / (div (TOP + 1))``, Hz, exact."""
        return Fraction(self.sys_clock_hz) / (self.divider * (self.top + 1))

    @property
    def achieved_rate_hz(self) -> Fraction:
        """Sample rate ``carrier / K``, Hz, exact."""
        return self.carrier_hz / self.periods_per_sample

    @property
    def error_ppm(self) -> float:
        """Achieved minus requested rate, parts per million."""
        return float((self.achieved_rate_hz / self.requested_rate_hz - 1) * 1_000_000)

    @property
    def levels(self) -> int:
        """Distinct output levels: compare values 0..TOP+1."""
        return self.top + 2

    @property
    def effective_bits(self) -> float:
        """Resolution in bits, ``log2(levels)``."""
        return math.log2(self.levels)

    @property
    def divider_text(self) -> str:
        """The divider as the summary prints it, ``INT+FRAC/16``."""
        return f"{self.div_int}+{self.div_frac}/16"

    @property
    def sys_clocks_per_sample(self) -> Fraction:
        """System clocks between samples (a whole number with an integer divider)."""
        return self.divider * (self.top + 1) * self.periods_per_sample

    @property
    def pacing(self) -> str:
        """What asks the DMA for each sample: ``"wrap"`` (K = 1) or ``"timer"``."""
        return "wrap" if self.periods_per_sample == 1 else "timer"

    @property
    def timer_xy(self) -> tuple[int, int] | None:
        """Pacing-timer X and Y for ``pacing == "timer"``: ``f_sys X / Y`` is the rate."""
        if self.pacing != "timer":
            return None
        per = self.sys_clocks_per_sample
        return per.denominator, per.numerator

    def to_dict(self) -> dict[str, object]:
        """Plain-data description (rates as floats, exact ones also as fractions)."""
        return {
            "sys_clock_hz": self.sys_clock_hz,
            "requested_rate_hz": float(self.requested_rate_hz),
            "achieved_rate_hz": float(self.achieved_rate_hz),
            "achieved_rate_exact": f"{self.achieved_rate_hz.numerator}/"
            f"{self.achieved_rate_hz.denominator}",
            "error_ppm": round(self.error_ppm, 6),
            "div_int": self.div_int,
            "div_frac": self.div_frac,
            "fractional_divider": self.fractional,
            "top": self.top,
            "periods_per_sample": self.periods_per_sample,
            "carrier_hz": float(self.carrier_hz),
            "levels": self.levels,
            "effective_bits": round(self.effective_bits, 4),
            "pacing": self.pacing,
            "timer_xy": list(self.timer_xy) if self.timer_xy else None,
        }


def plan_pwm(
    rate_hz: float | int | Fraction,
    *,
    sys_clock_hz: int = DEFAULT_SYS_CLOCK_HZ,
    min_carrier_hz: float | None = None,
    tolerance_ppm: float = 100.0,
) -> PwmPlan:
    """Choose a PWM slice setting for a sample rate: exact rate, most levels.

    Every whole number of periods per sample K (1..64) and integer divider (1..255) is
    tried with the two TOP values around the rate; settings whose carrier is below
    `min_carrier_hz`, or whose pacing timer would need a fraction of a system clock
    or more than 65535 clocks, are dropped.  Resolution comes first, since the stream
    is resampled to whatever rate is achieved (its pitch stays exact): of the settings
    keeping at least 95 % of the most levels, the one with the most levels within
    `tolerance_ppm` wins (then the smallest error, then the fewest periods), or when
    none is that close, the one with the smallest error; the summary gives it.
    Fractional dividers, whose periods jitter by one system clock, are used only when
    no integer divider works.

    Parameters
    ----------
    rate_hz : float, int or Fraction
        Requested sample rate, Hz.
    sys_clock_hz : int
        System clock, Hz (default 125 MHz).
    min_carrier_hz : float, optional
        Lowest acceptable PWM frequency, Hz (default four times the sample rate).
    tolerance_ppm : float
        Largest accepted rate error, ppm (default 100).

    Raises
    ------
    OptionError
        For a rate, clock or carrier that is not a positive number.
    ClockError
        When no setting reaches the rate with the carrier asked for.

    Examples
    --------
    >>> p = plan_pwm(22050)
    >>> p.top, p.periods_per_sample, p.div_int, p.levels, round(p.error_ppm, 1)
    (1416, 4, 1, 1418, 164.8)
    """
    try:
        rate = Fraction(rate_hz)
    except (TypeError, ValueError):
        raise OptionError(f"must be a number of Hz, got {rate_hz!r}", field="rate_hz") from None
    if rate <= 0:
        raise OptionError(f"must be > 0 Hz, got {rate_hz!r}", field="rate_hz")
    if isinstance(sys_clock_hz, bool) or not isinstance(sys_clock_hz, int) or sys_clock_hz <= 0:
        raise OptionError(
            f"must be a whole number of Hz > 0, got {sys_clock_hz!r}", field="sys_clock_hz"
        )
    carrier_min = (
        DEFAULT_CARRIER_FACTOR * rate if min_carrier_hz is None else Fraction(min_carrier_hz)
    )
    if carrier_min <= 0:
        raise OptionError(f"must be > 0 Hz, got {min_carrier_hz!r}", field="min_carrier_hz")
    if not (math.isfinite(tolerance_ppm) and tolerance_ppm >= 0):
        raise OptionError(f"must be >= 0 ppm, got {tolerance_ppm!r}", field="rate_tolerance_ppm")
    sys_hz = Fraction(sys_clock_hz)

    def candidates(fractions: bool) -> tuple[np.ndarray, ...]:
        """Every (divider, TOP + 1, K) meeting the carrier and pacing limits, as arrays."""
        k = np.arange(1, PERIODS_MAX + 1)[:, None, None]
        d16 = np.arange(16, (_DIV_INT_MAX + 1) * 16, 1 if fractions else 16)[None, :, None]
        counts = float(sys_hz) * 16 / (d16 * k * float(rate))  # TOP + 1 for the exact rate
        top1 = np.concatenate([np.floor(counts), np.ceil(counts)], axis=2)
        top1 = np.clip(top1, 1, _TOP_MAX + 2).astype(np.int64)
        k, d16 = np.broadcast_arrays(k, d16, top1)[:2]
        clocks16 = d16 * top1 * k  # system clocks per sample, in sixteenths
        ok = (top1 >= 2) & (top1 <= _TOP_MAX + 1)
        ok &= float(sys_hz) * 16 / (d16 * top1) >= float(carrier_min) * (1 - 1e-12)
        ok &= (k == 1) | ((clocks16 % 16 == 0) & (clocks16 // 16 <= _Y_MAX))
        d16, top1, k = d16[ok], top1[ok], k[ok]
        err = (float(sys_hz) * 16 / (d16 * top1 * k) / float(rate) - 1) * 1e6
        return d16, top1, k, err

    def pick(d16: np.ndarray, top1: np.ndarray, k: np.ndarray, err: np.ndarray) -> PwmPlan:
        # Resolution first (the stream is resampled to whatever rate is achieved): keep the
        # settings with at least 95 % of the most levels; among them the most levels
        # within the tolerance, else the smallest error.
        good = top1 >= 0.95 * top1.max()
        within = good & (np.abs(err) <= tolerance_ppm)
        if np.any(within):
            order = np.lexsort((k, np.abs(err), -top1, ~within))
        else:
            order = np.lexsort((k, -top1, np.abs(err), ~good))
        i = int(order[0])
        d, t, n = int(d16[i]), int(top1[i]), int(k[i])
        return PwmPlan(sys_clock_hz, rate, d // 16, d % 16, t - 1, n)

    found = candidates(fractions=False)
    if found[0].size == 0:  # no integer divider at all: fractional ones (jitter)
        found = candidates(fractions=True)
    if found[0].size == 0:
        slowest = float(sys_hz) / _Y_MAX
        raise ClockError(
            f"no PWM setting reaches {float(rate):g} Hz with a carrier of at least "
            f"{float(carrier_min):g} Hz at a {sys_clock_hz} Hz system clock"
            + (
                f" (below {slowest:.0f} Hz the DMA pacing timer cannot count a sample: ask "
                "for a carrier equal to the rate, one PWM period per sample)"
                if float(rate) < slowest
                else ""
            )
        )
    chosen = pick(*found)
    return chosen


@dataclass(frozen=True)
class RcFilter:
    """Identical first-order RC low-pass sections, each buffered (no loading between them).

    Attributes
    ----------
    poles : int
        Number of sections.
    r_ohms : float
        Resistor of each section, ohms.
    c_farads : float
        Capacitor of each section, farads.
    """

    poles: int
    r_ohms: float
    c_farads: float

    @property
    def corner_hz(self) -> float:
        """-3 dB frequency of one section, ``1 / (2 pi R C)``, Hz."""
        return 1.0 / (2 * math.pi * self.r_ohms * self.c_farads)

    def gain_db(self, freq_hz: float) -> float:
        """Gain of the whole filter at `freq_hz`: ``-10 poles log10(1 + (f / fc)^2)`` dB."""
        return -10 * self.poles * math.log10(1 + (freq_hz / self.corner_hz) ** 2)


def reconstruction_filter(
    plan: PwmPlan,
    band_hz: float,
    *,
    poles: int = 2,
    droop_db: float = 1.0,
    r_ohms: float = 10_000.0,
) -> RcFilter:
    """RC sections that pass the band and take the carrier down, from standard parts.

    Each section's corner is put where the whole filter loses `droop_db` at the band's
    edge (first-order section: ``|H|^2 = 1 / (1 + (f / fc)^2)``), and the capacitor is the
    largest E12 value (IEC 60063) at or below the one that corner needs, so the droop
    stays within `droop_db`.  Buffer each section (an op-amp follower) so the next does
    not load it; the PWM pin then drives only the first resistor.

    Parameters
    ----------
    plan : PwmPlan
        The slice's plan (for the carrier).
    band_hz : float
        Highest frequency to pass, Hz.
    poles : int
        Number of identical sections (default 2).
    droop_db : float
        Largest loss at `band_hz`, dB (default 1).
    r_ohms : float
        Resistor of each section, ohms (default 10 kohm: under 0.33 mA from a 3.3 V pin).

    Examples
    --------
    >>> p = plan_pwm(22050)
    >>> f = reconstruction_filter(p, 10000.0)
    >>> f.c_farads, round(f.gain_db(10000.0), 2), round(f.gain_db(float(p.carrier_hz)), 1)
    (4.7e-10, -0.73, -17.8)
    """
    from ladderpack.ladder import E_SERIES

    if not (math.isfinite(band_hz) and 0 < band_hz < float(plan.carrier_hz)):
        raise OptionError(
            f"must be above 0 and below the carrier {float(plan.carrier_hz):g} Hz, got {band_hz!r}",
            field="band_hz",
        )
    if isinstance(poles, bool) or not isinstance(poles, int) or not 1 <= poles <= 4:
        raise OptionError(f"must be a whole number 1..4, got {poles!r}", field="poles")
    if not (math.isfinite(droop_db) and droop_db > 0):
        raise OptionError(f"must be > 0 dB, got {droop_db!r}", field="droop_db")
    fc = band_hz / math.sqrt(10 ** (droop_db / poles / 10) - 1)
    ideal = 1.0 / (2 * math.pi * r_ohms * fc)
    e12 = E_SERIES["E24"][::2]  # E12 is every other E24 value (IEC 60063)
    decade = 10 ** math.floor(math.log10(ideal))
    values = [m * decade * k for k in (0.1, 1.0) for m in e12]
    c = max(v for v in values if v <= ideal * (1 + 1e-9))
    return RcFilter(poles, r_ohms, float(f"{c:.3g}"))


def pwm_slice(gpio: int) -> tuple[int, str]:
    """The PWM slice and channel ('A' or 'B') of a GPIO.

    GPIO 2n and 2n + 1 are channels A and B of slice n mod 8; on the RP2350B, GPIO 32
    and above reach slices 8..11 (the SDK's ``pwm_gpio_to_slice_num``).
    """
    slice_ = (gpio >> 1) & 7 if gpio < 32 else 8 + ((gpio >> 1) & 3)
    return slice_, "B" if gpio & 1 else "A"


@dataclass(frozen=True)
class PwmSetup:
    """Where a PWM stream goes: the plan, the pin and how the DMA is paced.

    Attributes
    ----------
    plan : PwmPlan
        Divider, TOP and periods per sample.
    pin : int
        The PWM pin (for stereo, channel A's; channel B is the next GPIO).
    stereo : bool
        Both channels of the slice carry a channel of the stream.
    chip : str
        ``"rp2040"`` or ``"rp2350"`` (for the DMA request numbers).
    """

    plan: PwmPlan
    pin: int
    stereo: bool = False
    chip: str = "rp2040"

    @property
    def slice(self) -> int:
        """The pin's PWM slice."""
        return pwm_slice(self.pin)[0]

    @property
    def channel(self) -> str:
        """The pin's channel of the slice, ``"A"`` or ``"B"``."""
        return pwm_slice(self.pin)[1]

    @property
    def dreq(self) -> int:
        """The DMA request that paces the stream: the slice's wrap, or pacing timer 0."""
        if self.plan.pacing == "wrap":
            return DREQ_PWM_WRAP0[self.chip] + self.slice
        return DREQ_DMA_TIMER0[self.chip]

    def to_dict(self) -> dict[str, object]:
        """Plain-data description (the sidecar's ``pwm``)."""
        return {
            "pin": self.pin,
            "slice": self.slice,
            "channel": "A and B" if self.stereo else self.channel,
            "stereo": self.stereo,
            "dreq": self.dreq,
            "transfer_bits": 32 if self.stereo else 16,
        }


@dataclass(frozen=True)
class PwmStereoLayout:
    """Compare values of a stereo PWM stream: one 32-bit word a frame.

    Channel A is in bits 15:0 and B in bits 31:16 (the layout of the slice's CC
    register, datasheet 4.5.3).  Codes come interleaved (A, B, A, B, ...); a mono
    stream uses the ladder's :class:`~ladderpack.pack.WordLayout` of two 16-bit values
    a word instead.
    """

    bits: int = 16
    stereo: bool = True

    @property
    def channels(self) -> int:
        """Codes per frame."""
        return 2

    @property
    def words_per_frame(self) -> int:
        """Words per frame: one."""
        return 1

    def words_for(self, frames: int) -> int:
        """Words needed for `frames` frames."""
        return frames

    def pack_codes(self, codes: np.ndarray) -> np.ndarray:
        """Interleaved codes (whole frames) -> uint32 words."""
        c = np.asarray(codes, dtype=np.uint32)
        if c.size % 2:
            raise OptionError("a stereo stream needs whole A/B pairs", field="codes")
        return c[0::2] | (c[1::2] << np.uint32(16))

    def unpack_words(self, words: np.ndarray) -> np.ndarray:
        """Words -> codes, shape (frames, 2): channel A and B of every frame."""
        w = np.asarray(words, dtype=np.int64)
        return np.stack([w & 0xFFFF, w >> 16], axis=1)

    def to_dict(self) -> dict[str, object]:
        """Plain-data description (the sidecar's ``layout``)."""
        return {
            "output": "pwm",
            "bits": 16,
            "channels": "stereo",
            "words_per_frame": 1,
            "sample_order": "channel A in bits 15:0, B in bits 31:16",
        }
