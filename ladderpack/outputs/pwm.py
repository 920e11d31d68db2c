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
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass
from fractions import Fraction
from typing import Any

import numpy as np

from ladderpack._version import __version__
from ladderpack.asset import StreamAsset
from ladderpack.defaults import DEFAULT_SYS_CLOCK_HZ, default_band_hz
from ladderpack.emit import Content, binary, templates
from ladderpack.emit.c import (
    _array_lines,
    _banner,
    chunked,
    compressed_header_lines,
    compressed_source_lines,
    header_frame,
    init_macro,
    pll_lines,
)
from ladderpack.emit.micropython import _literal, sdk_constants, set_clock_text
from ladderpack.emit.names import comment_safe
from ladderpack.errors import ClockError, OptionError
from ladderpack.options import StreamOptions, WaveTableSpec
from ladderpack.outputs.base import (
    ClockReport,
    Compressed,
    OutputPlan,
    PreviewModel,
    SummaryLines,
    WaveTable,
    jitter_text,
    uncompressed,
)
from ladderpack.pack import Packed, WordLayout, unpack
from ladderpack.quantize import CodeScale, predicted_full_scale_sine
from ladderpack.targets import REGISTERS, get_target, target_of
from ladderpack.waves import wavetable

__all__ = [
    "DREQ_DMA_TIMER0",
    "DREQ_PWM_WRAP0",
    "OUTPUT",
    "PwmOutput",
    "PwmPlan",
    "PwmSetup",
    "PwmStereoLayout",
    "RcFilter",
    "plan_pwm",
    "pwm_slice",
    "reconstruction_filter",
    "render_header",
    "render_micropython",
    "render_source",
    "render_source_chunks",
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


def _setup(asset: StreamAsset) -> tuple[PwmSetup, PwmPlan]:
    setup = asset.setup
    assert setup is not None
    return setup, setup.plan


def _transfers(asset: StreamAsset, packed: Packed | None) -> int:
    """DMA transfers of a part: one per sample (16-bit mono, 32-bit stereo)."""
    return 0 if packed is None else int(packed.sample_count)


def _defines(asset: StreamAsset) -> list[tuple[str, str, str]]:
    s, p = _setup(asset)
    rate = p.achieved_rate_hz
    x, y = p.timer_xy or (0, 0)
    return [
        ("LEVELS", f"{p.levels}u", "compare values 0..TOP+1: duty 0 to 100 %"),
        ("SAMPLE_COUNT", f"{asset.sample_count}u", "samples in the stream, ramps included"),
        ("TRANSFER_COUNT", f"{_transfers(asset, asset.packed)}u", "DMA transfers"),
        ("WORD_COUNT", f"{asset.word_count}u", "32-bit words"),
        ("STEREO", "1" if s.stereo else "0", "1: channel A in bits 15:0, B in 31:16"),
        ("IDLE_CODE", f"{asset.idle_code}u", "compare value before and after"),
        ("MAX_STEP", f"{asset.max_step}u", "largest step between consecutive values"),
        ("LOOP", "1" if asset.loop else "0", "1: a loop, with separate intro and outro"),
        ("INTRO_TRANSFER_COUNT", f"{_transfers(asset, asset.intro)}u", "loops: ramp up"),
        ("OUTRO_TRANSFER_COUNT", f"{_transfers(asset, asset.outro)}u", "loops: ramp down"),
        ("INTRO_WORD_COUNT", f"{_words(asset.intro)}u", ""),
        ("OUTRO_WORD_COUNT", f"{_words(asset.outro)}u", ""),
        ("REQUESTED_RATE_HZ", f"{float(p.requested_rate_hz)!r}", "sample rate asked for"),
        ("RATE_HZ", f"{float(rate)!r}", "achieved sample rate"),
        ("RATE_NUM", f"{rate.numerator}ull", "achieved rate = RATE_NUM / RATE_DEN Hz"),
        ("RATE_DEN", f"{rate.denominator}ull", ""),
        ("CARRIER_HZ", f"{float(p.carrier_hz)!r}", "PWM frequency"),
        ("SYS_CLOCK_HZ", f"{p.sys_clock_hz}u", "system clock the plan assumes"),
        ("DIV_INT", f"{p.div_int}u", "PWM clock divider, integer part"),
        ("DIV_FRAC", f"{p.div_frac}u", "PWM clock divider, fraction in 1/16 (not 0: jitter)"),
        ("TOP", f"{p.top}u", "counter wrap value"),
        ("PERIODS_PER_SAMPLE", f"{p.periods_per_sample}u", "PWM periods each sample lasts"),
        ("TIMER_X", f"{x}u", "DMA pacing timer X (0: paced by the slice's wrap)"),
        ("TIMER_Y", f"{y}u", "DMA pacing timer Y"),
        ("PIN", f"{s.pin}u", f"the PWM pin: slice {s.slice}, channel {s.channel}"),
        ("SLICE", f"{s.slice}u", "PWM slice"),
    ]


def _words(packed: Packed | None) -> int:
    return 0 if packed is None else int(packed.words.size)


def _init_macro(asset: StreamAsset) -> list[str]:
    n, P = asset.name, asset.name.upper()
    intro = f"{n}_intro_words" if _words(asset.intro) else "NULL"
    outro = f"{n}_outro_words" if _words(asset.outro) else "NULL"
    fields = [
        f"{n}_words" if asset.compressed is None else "NULL",
        f"{P}_TRANSFER_COUNT",
        intro,
        f"{P}_INTRO_TRANSFER_COUNT",
        outro,
        f"{P}_OUTRO_TRANSFER_COUNT",
        f"{P}_PIN",
        f"{P}_STEREO",
        f"{P}_DIV_INT",
        f"{P}_DIV_FRAC",
        f"{P}_TOP",
        f"{P}_PERIODS_PER_SAMPLE",
        f"{P}_TIMER_X",
        f"{P}_TIMER_Y",
        f"{P}_SYS_CLOCK_HZ",
        f"{P}_LOOP",
        f"{P}_IDLE_CODE",
        f"{P}_MAX_STEP",
        f"&{n}_lossless" if asset.lossless is not None else "NULL",
    ]
    return init_macro("lp_pwm_stream_t", "ladderpack_pwm.h", f"{P}_PWM_INIT", fields)


def render_header(asset: StreamAsset) -> str:
    """Return the C header of a PWM stream."""
    prefix = asset.name.upper()
    guard = f"LADDERPACK_{prefix}_H"
    lines = header_frame(asset, _defines(asset))
    lines += pll_lines(asset)
    lines += compressed_header_lines(asset) or [
        "",
        f"extern const uint32_t {asset.name}_words[{prefix}_WORD_COUNT];",
    ]
    for part in ("intro", "outro"):
        if _words(getattr(asset, part)):
            lines.append(
                f"extern const uint32_t {asset.name}_{part}_words"
                f"[{prefix}_{part.upper()}_WORD_COUNT];"
            )
    lines += ["", *_init_macro(asset), "", f"#endif /* {guard} */", ""]
    return "\n".join(lines)


def source_lines(asset: StreamAsset) -> Iterator[str]:
    """The C source of a PWM stream, line by line."""
    prefix = asset.name.upper()
    s, _p = _setup(asset)
    order = (
        "one word a sample, channel A in bits 15:0, B in 31:16"
        if s.stereo
        else "two 16-bit values a word, the first in bits 15:0"
    )
    yield from _banner(asset).split("\n")
    yield f'#include "{asset.name}.h"'
    yield ""
    if asset.compressed is not None:
        yield from compressed_source_lines(asset)
    else:
        yield f"/* Compare values in playing order, {order};"
        yield " * const, so they stay in flash, and uint32_t, so they are word-aligned for DMA. */"
        yield f"const uint32_t {asset.name}_words[{prefix}_WORD_COUNT] = {{"
        yield from _array_lines(asset.packed.words, 8)
        yield "};"
    for part in ("intro", "outro"):
        packed = getattr(asset, part)
        if _words(packed):
            yield ""
            count = f"{prefix}_{part.upper()}_WORD_COUNT"
            yield f"const uint32_t {asset.name}_{part}_words[{count}] = {{"
            yield from _array_lines(packed.words, 8)
            yield "};"


def render_source_chunks(asset: StreamAsset, chunk_chars: int = 1 << 20) -> Iterator[bytes]:
    """The C source as byte chunks of about `chunk_chars`."""
    return chunked(source_lines(asset), chunk_chars)


def render_source(asset: StreamAsset) -> str:
    """Return the C source of a PWM stream."""
    return b"".join(render_source_chunks(asset)).decode()


_MP_TEMPLATE = """\
# Generated by ladderpack {version} from {source}.
# Do not edit: regenerate it instead.
#
# Wiring: PWM on GPIO {pin} (slice {slice}, channel {channel}{stereo_note}). Never connect a
# speaker or headphones to the pin: filter the carrier ({carrier:.0f} Hz) with an RC
# low-pass (see the README), buffer it and feed a suitable amplifier; the carrier's power
# otherwise ends in the amplifier and the tweeter. Start at a low volume and leave
# mains-powered gear to qualified people.
#
# Use:  import {name}; {name}.play()            (blocks until the stream ends)
#       p = {name}.Player(); p.play(loop=True)  (a loop runs until p.stop() or Ctrl-C)
import array

import rp2
from machine import Pin, freq, mem32

try:
    from typing import TYPE_CHECKING
except ImportError:
    TYPE_CHECKING = False  # type: ignore[misc]  # MicroPython has no typing module
if TYPE_CHECKING:
    from typing import Iterator

NAME = {name!r}
LEVELS = {levels}  # compare values 0..TOP+1
SAMPLE_COUNT = {samples}
TRANSFERS = {transfers}
STEREO = {stereo}
IDLE_CODE = {idle}
MAX_STEP = {max_step}
RATE_HZ = {rate!r}
SYS_CLOCK_HZ = {sys_clock}
PIN = {pin}
SLICE = {slice}
DIV_REG = 0x{div_reg:03X}  # 8.4: DIV_INT {div_int}, DIV_FRAC {div_frac}
TOP = {top}
TIMER_X = {timer_x}  # DMA pacing timer X/Y (0: paced by the slice's wrap)
TIMER_Y = {timer_y}
DREQ = {dreq}  # DREQ_PWM_WRAP0 + slice, or DREQ_DMA_TIMER0
LOOP = {loop}
BIN_FILE = {bin_file!r}
CHUNK_WORDS = {chunk_words}
{words_literal}
INTRO = {intro}
INTRO_TRANSFERS = {intro_transfers}
OUTRO = {outro}
OUTRO_TRANSFERS = {outro_transfers}

{registers}
# Slice n's registers lie _SLICE_STRIDE * n above slice 0's. A mono value is a 16-bit
# write: the bus repeats it in both halves of CC (RP2040 datasheet 2.1.4).
_SLICE = _PWM_BASE + _SLICE_STRIDE * SLICE
_SIZE = 2 if STEREO else 1


def _value(a: int, b: int) -> int:
    return a | (b << 16) if STEREO else a


def _ramp(a: int, b: int) -> "array.array[int]":
    \"\"\"Raised-cosine ramps of both channels from (a, b) to IDLE_CODE, no step above
    MAX_STEP; the last value is IDLE_CODE.\"\"\"
    import math

    step = MAX_STEP or 1
    n = int(math.ceil(math.pi / 2 * max(abs(a - IDLE_CODE), abs(b - IDLE_CODE)) / step)) + 1
    out = array.array("I" if STEREO else "H")
    pa, pb = a, b
    for k in range(1, n + 1):
        w = (1 + math.cos(math.pi * k / n)) / 2
        ca = IDLE_CODE if k == n else int(math.floor(IDLE_CODE + (a - IDLE_CODE) * w + 0.5))
        cb = IDLE_CODE if k == n else int(math.floor(IDLE_CODE + (b - IDLE_CODE) * w + 0.5))
        pa = max(pa - step, min(pa + step, ca))
        pb = max(pb - step, min(pb + step, cb))
        out.append(_value(pa, pb))
    out.append(_value(IDLE_CODE, IDLE_CODE))
    return out


class Player:
    \"\"\"Plays the stream on the slice of PIN, fed by two DMA channels chained to each
    other: one plays a buffer while the other's is refilled, with no gap between them
    (a PWM slice has no FIFO to cover one).

    A natural end plays the stream's closing ramp; stop() on a loop finishes the current
    pass and plays the outro; Ctrl-C or stop() on a stream ramps down at once.
    \"\"\"

    def __init__(self, path: str = BIN_FILE, chunk_words: int = CHUNK_WORDS):
        if freq() != SYS_CLOCK_HZ:
            raise ValueError(
                "system clock is %d Hz, the stream was planned for %d Hz: remake it with "
                "--sys-clock-hz %d (or call machine.freq(%d) first)"
                % (freq(), SYS_CLOCK_HZ, freq(), SYS_CLOCK_HZ)
            )
        self.path = path
        mem32[_SLICE + _CSR] = 0  # stop the slice while it is set up
        mem32[_SLICE + _DIV] = DIV_REG
        mem32[_SLICE + _TOP] = TOP
        mem32[_SLICE + _CC] = IDLE_CODE | (IDLE_CODE << _CC_B_LSB)
        mem32[_SLICE + _CTR] = 0
        Pin(PIN, Pin.ALT, alt=Pin.ALT_PWM)
        if STEREO:
            Pin(PIN + 1, Pin.ALT, alt=Pin.ALT_PWM)
        mem32[_SLICE + _CSR] = 1 << _CSR_EN_LSB
        if TIMER_X:
            mem32[_TIMER0] = (TIMER_X << _TIMER_X_LSB) | TIMER_Y
        self.dma = (rp2.DMA(), rp2.DMA())
        self.bufs = [array.array("I", bytes(4 * chunk_words)) for _ in range(2)]
        self.holds = [None, None]  # type: list[array.array[int] | None]
        self.running = False

    def _ctrl(self, k: int, chain: bool) -> int:
        # DMA.channel: MicroPython's attribute, missing from the stubs
        other = (self.dma[1 - k] if chain else self.dma[k]).channel  # type: ignore[attr-defined]
        return self.dma[k].pack_ctrl(size=_SIZE, inc_read=True, inc_write=False,
                                     treq_sel=DREQ, chain_to=other)

    def _arm(self, k: int, buf: "array.array[int]", count: int, chain: bool, now: bool) -> None:
        self.dma[k].config(read=buf, write=_SLICE + _CC, count=count,
                           ctrl=self._ctrl(k, chain), trigger=now)

    def _busy(self) -> bool:
        return bool(self.dma[0].active() or self.dma[1].active())

    def _wait(self) -> None:
        while self._busy():
            pass

    def stop(self) -> None:
        \"\"\"Ask a running play() to finish (safe to call from an interrupt handler).\"\"\"
        self.running = False

    def hold_code(self, code: int) -> None:
        \"\"\"Hold one compare value (0..TOP + 1, every channel) while nothing plays.\"\"\"
        if not 0 <= code <= TOP + 1:
            raise ValueError("compare values are 0..%d" % (TOP + 1))
        mem32[_SLICE + _CC] = code | (code << _CC_B_LSB)

    def _ramp_down(self) -> None:
        for d in self.dma:
            d.active(0)
        cc = mem32[_SLICE + _CC]
        r = _ramp(cc & 0xFFFF, (cc >> 16) if STEREO else cc & 0xFFFF)
        self._arm(0, r, len(r), False, True)
        self._wait()

    def _free(self, buf: "array.array[int]") -> None:
        # wait until no running channel reads `buf`
        while any(self.dma[j].active() and self.holds[j] is buf for j in (0, 1)):
            pass

    def _parts(self, loop: bool) -> "Iterator[tuple[array.array[int], int, bool]]":
        \"\"\"(buffer, transfers, last) in playing order: intro, the stream (once, or until
        stop() for a loop), outro, a closing idle value; file chunks are read as they are
        needed, into a buffer no channel is reading.\"\"\"
        if INTRO is not None:
            yield INTRO, INTRO_TRANSFERS, False
        first = True
        while first or (loop and self.running):
            first = False
            if WORDS is not None:
                yield WORDS, TRANSFERS, False
                continue
            per_word = 1 if STEREO else 2
            left = TRANSFERS
            with open(self.path, "rb") as f:
                which = 0
                while left > 0:
                    buf = self.bufs[which]
                    self._free(buf)
                    n = f.readinto(buf) // 4
                    if n == 0:
                        break
                    count = min(n * per_word, left)
                    left -= count
                    yield buf, count, False
                    which ^= 1
        if OUTRO is not None:
            yield OUTRO, OUTRO_TRANSFERS, False
        # written once the last value has been latched, so the end is on the idle code
        yield array.array("I", [_value(IDLE_CODE, IDLE_CODE)]), 1, True

    def play(self, loop: bool = LOOP) -> None:
        \"\"\"Play once, or repeat (loop=True) until stop() is called; blocks until the
        last value has been handed to the slice.\"\"\"
        self.running = True
        self.holds = [None, None]
        k = 0
        started = False
        try:
            for buf, count, last in self._parts(loop):
                # wait until channel k is free, then arm it; the other channel starts it
                # by its chain when its own part ends (CHUNK_WORDS sets how long that is)
                while self.dma[k].active():
                    if not self.running and not LOOP:
                        self._ramp_down()
                        return
                self.holds[k] = buf
                self._arm(k, buf, count, not last, not started)
                started = True
                k ^= 1
            while self._busy():
                if not self.running and not LOOP:
                    self._ramp_down()
                    return
        except KeyboardInterrupt:
            self._ramp_down()
            raise
        finally:
            self.running = False

    def close(self) -> None:
        \"\"\"Release the DMA channels (the slice keeps the idle code).\"\"\"
        for d in self.dma:
            d.close()


def play(loop: bool = LOOP) -> None:
    \"\"\"Play the stream once (or loop until Ctrl-C), then release the DMA channel.\"\"\"
    p = Player()
    try:
        p.play(loop)
    finally:
        p.close()
"""


def render_micropython(asset: StreamAsset, *, embed: bool = False) -> str:
    """Return the MicroPython module of a PWM stream.

    Parameters
    ----------
    asset : StreamAsset
        The stream.
    embed : bool
        Embed the values as an ``array('I', ...)`` literal (short streams only).
    """
    s, p = _setup(asset)
    x, y = p.timer_xy or (0, 0)
    words_literal = (
        ("WORDS = " + _literal(asset.packed)) if embed else "WORDS = None  # read from BIN_FILE"
    )
    target = target_of(asset.options)
    registers = (
        f"# {target.name.upper()} registers (vendor SDK hardware/regs: addressmap.h, pwm.h, "
        "dma.h)\n"
    )
    registers += sdk_constants(
        target,
        [
            ("_PWM_BASE", "PWM_BASE"),
            ("_SLICE_STRIDE", "PWM_CH1_CSR_OFFSET - PWM_CH0_CSR_OFFSET"),
            ("_CSR", "PWM_CH0_CSR_OFFSET"),
            ("_CSR_EN_LSB", "PWM_CH0_CSR_EN_LSB"),
            ("_DIV", "PWM_CH0_DIV_OFFSET"),
            ("_CTR", "PWM_CH0_CTR_OFFSET"),
            ("_CC", "PWM_CH0_CC_OFFSET"),
            ("_CC_B_LSB", "PWM_CH0_CC_B_LSB"),
            ("_TOP", "PWM_CH0_TOP_OFFSET"),
            ("_TIMER0", "DMA_BASE + DMA_TIMER0_OFFSET"),
            ("_TIMER_X_LSB", "DMA_TIMER0_X_LSB"),
        ],
    )
    text = _MP_TEMPLATE.format(
        registers=registers,
        version=__version__,
        source=comment_safe(asset.source.get("file", "generated signal")),
        name=asset.name,
        pin=s.pin,
        slice=s.slice,
        channel=s.channel,
        stereo_note=f", and B on GPIO {s.pin + 1}" if s.stereo else "",
        carrier=float(p.carrier_hz),
        levels=p.levels,
        samples=asset.sample_count,
        transfers=_transfers(asset, asset.packed),
        stereo=s.stereo,
        idle=asset.idle_code,
        max_step=asset.max_step,
        rate=float(p.achieved_rate_hz),
        sys_clock=p.sys_clock_hz,
        div_reg=(p.div_int << 4) | p.div_frac,
        div_int=p.div_int,
        div_frac=p.div_frac,
        top=p.top,
        timer_x=x,
        timer_y=y,
        dreq=s.dreq,
        loop=asset.loop,
        bin_file=f"{asset.name}.bin",
        chunk_words=int(asset.options.get("chunk_words", 1024)),
        words_literal=words_literal,
        intro=_literal(asset.intro),
        intro_transfers=_transfers(asset, asset.intro),
        outro=_literal(asset.outro),
        outro_transfers=_transfers(asset, asset.outro),
    )
    if asset.lossless is not None:
        text = _with_stored(text, asset)
    return text + set_clock_text(asset)


#: A compressed stream's passes: block by block, each decoded into a buffer no channel is
#: reading (the buffers alternate across passes too).
_STORED_PARTS = """\
    def _stored_parts(self) -> "Iterator[tuple[array.array[int], int, bool]]":
        \"\"\"A pass of a compressed stream, block by block, each decoded into a buffer no
        channel is reading.\"\"\"
        blocks, per_block, samples, stream_words, longest, bits, channels = STORED
        index = array.array("I", bytes(4 * (blocks + 1)))
        src = array.array("I", bytes(4 * (longest + 1)))
        # a value a slot (mono: two a word, the first low; stereo: A | B << 16)
        cfg = array.array("i", [0, bits, 1 if STEREO else 2, 1, 0, 0, channels, 0, 16])
        with open(self.path, "rb") as f:
            f.readinto(memoryview(index)[:blocks])
            index[blocks] = stream_words
            for b in range(blocks):
                buf = self.bufs[self.which]  # the buffer after the last one, across passes
                self._free(buf)
                f.seek(4 * (blocks + index[b]))
                f.readinto(memoryview(src)[: index[b + 1] - index[b]])
                n = min(per_block, samples - b * per_block)
                cfg[0] = n
                words = _lossless_block(src, buf, cfg)
                yield buf, (words if STEREO else n), False
                self.which ^= 1

"""

#: The parts of a compressed stream's playback: as the words' (``_parts``), each pass
#: decoded block by block, the first block before the intro plays.
_STORED_PARTS_METHOD = """\
    def _parts(self, loop: bool) -> "Iterator[tuple[array.array[int], int, bool]]":
        \"\"\"(buffer, transfers, last) in playing order: intro, the stream's blocks (once,
        or pass after pass until stop() for a loop), outro, a closing idle value.\"\"\"
        self.which = 0
        stored = self._stored_parts()
        head = next(stored)  # decoded before the intro plays
        if INTRO is not None:
            yield INTRO, INTRO_TRANSFERS, False
        first = True
        while first or (loop and self.running):
            if not first:
                stored = self._stored_parts()
                head = next(stored)
            first = False
            yield head
            yield from stored
        if OUTRO is not None:
            yield OUTRO, OUTRO_TRANSFERS, False
        # written once the last value has been latched, so the end is on the idle code
        yield array.array("I", [_value(IDLE_CODE, IDLE_CODE)]), 1, True
"""


def _with_stored(text: str, asset: StreamAsset) -> str:
    """The module of a compressed stream: its numbers, the decoder, the passes' source."""
    from ladderpack.emit.micropython import LOSSLESS_DECODER, replace_method

    ll = asset.lossless
    assert ll is not None
    desc = (
        f"# Stored compressed (--compress lossless): the .bin holds {ll.blocks} block offsets, "
        "then the bit\n# stream; each block decodes on its own into transfers.\n"
        f"STORED = ({ll.blocks}, {ll.block_samples}, {ll.samples}, {int(ll.words.size)}, "
        f"{ll.max_block_words}, {ll.bits}, {ll.channels})  # blocks, values a block,\n# values, "
        "stream words, longest block, bits a value, channels\n"
    )
    text = replace_method(text, "_parts", _STORED_PARTS + _STORED_PARTS_METHOD)
    pairs = [
        ("import array\n", "import array\nimport micropython\n"),
        ("\nclass Player", "\n" + desc + LOSSLESS_DECODER + "\n\nclass Player"),
    ]
    for old, new in pairs:
        assert old in text, old
        text = text.replace(old, new, 1)
    return text


# -- the registered object -------------------------------------------------------------


class PwmOutput:
    """A hardware PWM slice on one pin (two for stereo), paced by DMA; no state machine."""

    name = "pwm"

    def default_bits(self) -> int:
        """16: compare values are halfwords (the levels follow from the plan)."""
        return 16

    def check_bits(self, bits: int) -> None:
        """Nothing to check: a PWM stream's width is not the user's (no ``width`` group)."""

    def check_options(self, opts: StreamOptions) -> None:
        """A stereo stream on a slice's channel A (an even GPIO); the pins on the target."""
        if opts.compress == "adpcm":
            raise OptionError(
                "IMA ADPCM codes 16-bit samples: a PWM stream's compare values take "
                "--compress lossless (every value kept) or none",
                field="compress",
            )
        if opts.stereo and opts.pwm_pin % 2:
            raise OptionError(
                f"a stereo PWM stream uses both channels of a slice: give its channel A "
                f"(an even GPIO), got GPIO {opts.pwm_pin}",
                field="pwm_pin",
            )
        if opts.pwm_pin + int(opts.stereo) >= int(opts.gpio_count or 0):
            raise OptionError(
                f"the PWM pin GPIO {opts.pwm_pin} is not on the target (GPIO 0.."
                f"{int(opts.gpio_count or 0) - 1})"
                + get_target(opts.target).more_pins_hint(opts.pwm_pin + int(opts.stereo)),
                field="pwm_pin",
            )

    def gpio_base(self, opts: StreamOptions) -> int:
        """0 (a PWM slice needs no PIO block; kept for the common interface)."""
        return 0

    def recorded_options(self, opts: StreamOptions, recorded: dict[str, Any]) -> dict[str, Any]:
        """The generic record (no ``bits``: the plan's levels say it)."""
        return recorded

    def plan(self, opts: StreamOptions, ident: str) -> OutputPlan:
        """The slice's divider, TOP and pacing; halfword compare values in FIFO words."""
        pwm_plan = plan_pwm(
            opts.rate_hz,
            sys_clock_hz=int(opts.sys_clock_hz or 0),
            min_carrier_hz=opts.min_carrier_hz,
            tolerance_ppm=opts.rate_tolerance_ppm,
        )
        if pwm_plan.levels - 1 > 0xFFFF:
            raise OptionError(
                f"the plan's TOP {pwm_plan.top} leaves compare values above 65535; ask for "
                "a higher --rate-hz or --min-carrier-hz",
                field="min_carrier_hz",
            )
        scale = CodeScale.for_levels(pwm_plan.levels)
        if opts.idle_code > scale.top:
            raise OptionError(
                f"must be 0..{scale.top} for this slice's {pwm_plan.levels} levels, got "
                f"{opts.idle_code}",
                field="idle_code",
            )
        setup = PwmSetup(pwm_plan, opts.pwm_pin, stereo=opts.stereo, chip=opts.target[:6])
        common: dict[str, Any] = {
            "clock": pwm_plan,
            "idle_code": opts.idle_code,
            "channel_idle": opts.idle_code,
            "scale": scale,
            "setup": setup,
        }
        if opts.stereo:  # one word a frame: A in bits 15:0, B in 31:16
            return OutputPlan(
                layout=PwmStereoLayout(), samples_per_word=1, per_word=1, code_bits=opts.bits,
                whole_frames=True, **common,
            )  # fmt: skip
        # compare values are 16 bits: two to a word, the first in bits 15:0 (little-endian
        # halfwords, the order 16-bit DMA transfers read them)
        layout = WordLayout(16, shift_right=True, per_word=2)
        return OutputPlan(
            layout=layout, samples_per_word=2, per_word=2, code_bits=layout.bits, **common
        )

    def stats(self, plan: OutputPlan, opts: StreamOptions) -> dict[str, Any]:
        """The slice's plan and set-up."""
        setup: PwmSetup = plan.setup
        return {"pwm": {**setup.plan.to_dict(), **setup.to_dict()}}

    def variant(self, plan: OutputPlan) -> str:
        """``pwm-wrap`` or ``pwm-timer``: what paces the DMA."""
        setup: PwmSetup = plan.setup
        return f"pwm-{setup.plan.pacing}"

    def compress(self, packed: Packed, opts: StreamOptions) -> Compressed:
        """``--compress lossless``: every compare value the DMA writes (A and B alternate).

        The code width is that of the largest value (at most 16 bits: TOP + 1 = 65536
        is refused); a mono stream's padding slot is left out (the DMA never writes it).
        Blocks no longer than a MicroPython player's buffer.

        Raises
        ------
        OptionError
            When a value needs 17 bits.
        """
        if opts.compress != "lossless":
            return uncompressed(packed)
        from ladderpack.compress import encode_lossless

        lay = packed.layout
        if isinstance(lay, PwmStereoLayout):
            values, ch, per = lay.unpack_words(packed.words).ravel(), 2, 1
        else:
            values, ch, per = unpack(packed.words, lay, packed.sample_count).codes, 1, 2
        values = np.asarray(values, dtype=np.int64)
        bits = max(1, int(values.max(initial=0)).bit_length())
        if bits > 16:
            raise OptionError(
                "compare values up to 65536 (TOP 65535, a carrier at or below "
                "f_sys / 65536) need 17 bits; the lossless codec takes 16: raise "
                "--min-carrier-hz (a smaller TOP), or use --compress none",
                field="compress",
            )
        block = ch * per * max(1, min(512, int(opts.chunk_words)))
        coded = encode_lossless(values, bits, block_samples=block, channels=ch)
        return Compressed(coded, None, packed)

    def summary(self, asset: StreamAsset) -> dict[str, Any]:
        """Stereo or mono, and the slice's carrier, levels, pacing and pin."""
        p: PwmPlan = asset.plan  # type: ignore[assignment]
        setup: PwmSetup = asset.setup
        return {
            "stereo": bool(asset.options.get("stereo", False)),
            "pwm": {
                "carrier_hz": round(float(p.carrier_hz), 3),
                "levels": p.levels,
                "effective_bits": round(p.effective_bits, 3),
                "top": p.top,
                "periods_per_sample": p.periods_per_sample,
                "pacing": p.pacing,
                "pin": setup.pin,
                "slice": setup.slice,
            },
        }

    def summary_lines(self, summary: Mapping[str, Any]) -> SummaryLines:
        """The pin(s), slice and levels; TOP, carrier and pacing on the divider line."""
        pwm = summary["pwm"]
        stereo = bool(summary.get("stereo"))
        pins = f"GPIO {pwm['pin']} and {pwm['pin'] + 1}" if stereo else f"GPIO {pwm['pin']}"
        kind = (
            f"{'stereo ' if stereo else ''}PWM on {pins} (slice {pwm['slice']}), "
            f"{pwm['levels']} levels ({pwm['effective_bits']:.2f} bits)"
        )
        pacing = "the slice's wrap" if pwm["pacing"] == "wrap" else "a DMA pacing timer"
        divider = (
            f"{summary['divider']} ({jitter_text(summary)}), TOP {pwm['top']}, carrier "
            f"{pwm['carrier_hz']:.0f} Hz, {pwm['periods_per_sample']} PWM period(s) per "
            f"sample, paced by {pacing}"
        )
        return SummaryLines(kind, "sample", divider)

    def sidecar_blocks(self, asset: StreamAsset) -> dict[str, Any]:
        """The slice's set-up (no program)."""
        setup: PwmSetup = asset.setup
        return {"pwm": setup.to_dict()}

    def files(self, asset: StreamAsset, *, embed: bool) -> dict[str, Content]:
        """Words, C header and source, MicroPython module, the PWM player."""
        n, stored = asset.name, asset.compressed
        return {  # a compressed stream's .bin is its stored form, read block by block
            f"{n}.bin": binary.render_chunks(asset.packed) if stored is None else stored.to_bytes(),
            f"{n}.h": render_header(asset).encode(),
            f"{n}.c": render_source_chunks(asset),
            f"{n}.py": render_micropython(asset, embed=embed and stored is None).encode(),
            **templates.player("ladderpack_pwm"),
        }

    def preview_model(self, layout: Mapping[str, Any], sidecar: Mapping[str, Any]) -> PreviewModel:
        """Compare values: a pin's mean over a period, duty = value / (TOP + 1)."""
        levels = int(sidecar["clock"]["levels"])
        half = (levels - 1) / 2
        if layout.get("channels") == "stereo":
            frames = PwmStereoLayout()

            def decode2(words: np.ndarray, count: int, channel: int) -> np.ndarray:
                got = frames.unpack_words(words[: frames.words_for(count)])
                return np.asarray(got[:count, channel])

            def stored2(data: bytes, comp: Mapping[str, Any]) -> np.ndarray:
                from ladderpack.compress import decode_stored

                return frames.pack_codes(decode_stored(data, comp, bits=16))

            return PreviewModel(frames, 16, 2, levels, half, False, decode2, stored2)
        mono = WordLayout(16, shift_right=True, per_word=2)

        def decode1(words: np.ndarray, count: int, channel: int) -> np.ndarray:
            return np.asarray(unpack(words, mono, count).codes)

        def stored1(data: bytes, comp: Mapping[str, Any]) -> np.ndarray:
            from ladderpack.compress import decode_stored
            from ladderpack.pack import pack
            from ladderpack.quantize import Codes

            values = decode_stored(data, comp, bits=16).astype(np.uint16)
            return pack(Codes(values, 16), mono).words

        return PreviewModel(mono, 16, 1, levels, half, False, decode1, stored1)

    def wave_table(self, spec: WaveTableSpec) -> WaveTable:
        """Compare values 0..TOP + 1 of the slice the rate plans."""
        pwm = plan_pwm(
            spec.rate_hz,
            sys_clock_hz=int(spec.sys_clock_hz or 0),
            tolerance_ppm=spec.rate_tolerance_ppm,
        )
        tab = wavetable(
            spec.kind, spec.table_bits, bits=16, level_dbfs=spec.level_dbfs, levels=pwm.levels
        )
        coding = f"pwm compare values 0..{pwm.top + 1} (TOP {pwm.top}, {pwm.levels} levels)"
        return WaveTable(float(pwm.achieved_rate_hz), tab, 16, coding)

    def clock_report(
        self, rate_hz: float, opts: StreamOptions, settings: Mapping[str, Any]
    ) -> ClockReport:
        """The slice's plan, its predicted SINAD and an RC reconstruction filter."""
        plan = plan_pwm(
            rate_hz,
            sys_clock_hz=int(opts.sys_clock_hz or 0),
            min_carrier_hz=settings.get("min_carrier_hz"),
            tolerance_ppm=opts.rate_tolerance_ppm,
        )
        d = plan.to_dict()
        chip = "rp2040" if opts.target == "rp2040" else "rp2350"
        d["dreq"] = (DREQ_PWM_WRAP0 if plan.pacing == "wrap" else DREQ_DMA_TIMER0)[chip]
        rate = float(plan.achieved_rate_hz)
        band = default_band_hz(rate)
        half = CodeScale.for_levels(plan.levels).half
        plain = predicted_full_scale_sine(half, "tpdf", 0.0, band, rate)
        d["predicted_full_scale_sine"] = {"band_hz": band, "dither": "tpdf", **plain}
        # The filter passes the resampler's flat band (0.45 x the rate, at most 20 kHz).
        fband = min(20000.0, 0.45 * rate)
        carrier = float(plan.carrier_hz)
        filt = reconstruction_filter(plan, fband)
        # fundamental of a 50 % square wave between 0 and V: 2 V / pi (Fourier series)
        ripple = 2 * 3.3 / math.pi * 10 ** (filt.gain_db(carrier) / 20)
        d["reconstruction_filter"] = {
            "poles": filt.poles,
            "r_ohms": filt.r_ohms,
            "c_farads": filt.c_farads,
            "corner_hz": filt.corner_hz,
            "band_hz": fband,
            "gain_at_band_db": filt.gain_db(fband),
            "gain_at_carrier_db": filt.gain_db(carrier),
            "carrier_ripple_volts_peak_at_3v3": ripple,
        }
        kind = "fractional (1 system clock of jitter)" if plan.fractional else "integer (no jitter)"
        lines = [
            f"requested  {rate_hz:g} Hz at {plan.sys_clock_hz} Hz system clock",
            f"achieved   {float(plan.achieved_rate_hz):.6f} Hz ({plan.error_ppm:+.3f} ppm)",
            f"carrier    {float(plan.carrier_hz):.3f} Hz, TOP {plan.top}",
            f"divider    {plan.div_int} + {plan.div_frac}/16, {kind}",
            f"levels     {plan.levels} (compare 0..{plan.top + 1}), {plan.effective_bits:.2f} bits",
            f"predict    full-scale sine SINAD {plain['sinad_db']:.1f} dB, ENOB "
            f"{plain['enob_bits']:.2f} bits in 0..{band:g} Hz (TPDF dither)",
            f"filter     {filt.poles} buffered RC sections of {filt.r_ohms / 1e3:g} kohm and "
            f"{filt.c_farads * 1e12:g} pF: {filt.gain_db(fband):+.2f} dB at {fband:.0f} Hz, "
            f"{filt.gain_db(carrier):+.1f} dB at the carrier",
            f"           carrier left at 50 % duty from a 3.3 V pin: {ripple * 1e3:.0f} mV peak "
            "(more poles, or the amplifier's own bandwidth, take it further)",
        ]
        if plan.pacing == "wrap":
            lines.append(
                f"pacing     one sample per PWM wrap (DREQ_PWM_WRAP0 + slice = {d['dreq']} + n)"
            )
        else:
            x, y = plan.timer_xy or (0, 0)
            lines.append(
                f"pacing     {plan.periods_per_sample} PWM periods per sample: DMA timer "
                f"X/Y = {x}/{y} (DREQ_DMA_TIMER0 = {d['dreq']})"
            )
        return ClockReport(d, lines)

    def clock_planner(self, rate_hz: float, settings: Mapping[str, Any]) -> Callable[[int], Any]:
        """The slice's divider x (TOP + 1) x periods a sample, at each clock."""
        carrier = settings.get("min_carrier_hz")
        return lambda f: plan_pwm(
            rate_hz, sys_clock_hz=f, min_carrier_hz=carrier, tolerance_ppm=1e9
        )

    def clock_row(self, plan: Any) -> tuple[dict[str, Any], str]:
        """Divider, TOP, periods per sample and levels."""
        row = {
            "div_int": plan.div_int,
            "div_frac": plan.div_frac,
            "top": plan.top,
            "periods_per_sample": plan.periods_per_sample,
            "levels": plan.levels,
        }
        text = f"TOP {plan.top}, {plan.periods_per_sample} period(s) a sample, {plan.levels} levels"
        return row, text


#: The registered object.
OUTPUT = PwmOutput()
