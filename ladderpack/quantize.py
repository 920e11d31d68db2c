"""Dither and quantisation of a conformed signal to unsigned N-bit codes.

The code scale puts silence at mid-scale ``2**(N-1)``: a float sample ``x``
(full scale +/-1.0) sits at ``x * 2**(N-1) + 2**(N-1)`` LSB and rounds to the
nearest code in ``0 .. 2**N - 1``.  Dither is non-subtractive: TPDF (sum of
two independent uniform variables, 2 LSB peak-to-peak) removes both
distortion and noise modulation; RPDF (1 LSB peak-to-peak) only the
distortion (Lipshitz, Wannamaker & Vanderkooy, "Quantization and Dither: A
Theoretical Survey", JAES 40(5), 1992).  The uniform draws come from numpy's
PCG64 generator seeded with the stream's seed (O'Neill, "PCG: A Family of
Simple Fast Space-Efficient Statistically Good Algorithms for Random Number
Generation", 2014), taken in order, so blocks give the draws of one whole call.

Without noise shaping and feedback every sample is independent and numpy
rounds the whole block; with feedback the serial loop of :mod:`_kernels` runs.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from ladderpack import _kernels
from ladderpack.audio import Signal, check_signal
from ladderpack.conform import raised_cosine
from ladderpack.defaults import DITHERS
from ladderpack.errors import OptionError
from ladderpack.options import check_bits

if TYPE_CHECKING:
    from ladderpack.levels import LevelSet
    from ladderpack.shaping import Shaper

__all__ = [
    "DITHERS",
    "BlockQuantizer",
    "CodeScale",
    "Codes",
    "DitherSource",
    "QuantizeReport",
    "check_bits",
    "idle_ramp",
    "nearest_levels_block",
    "predicted_full_scale_sine",
    "quantize",
    "round_block",
    "signal_to_lsb",
    "with_idle_ramps",
]


@dataclass(frozen=True)
class Codes:
    """Unsigned ladder codes.

    Attributes
    ----------
    codes : numpy.ndarray
        uint16 codes in ``0 .. 2**bits - 1``.
    bits : int
        Code width N (1..16).
    """

    codes: np.ndarray
    bits: int

    @property
    def mid_code(self) -> int:
        """Mid-scale code ``2**(bits-1)``, the level of silence."""
        return 1 << (self.bits - 1)

    @property
    def max_code(self) -> int:
        """Largest code ``2**bits - 1``."""
        return (1 << self.bits) - 1

    def __len__(self) -> int:
        return int(self.codes.shape[0])


@dataclass(frozen=True)
class QuantizeReport:
    """What the quantiser did.

    Attributes
    ----------
    dither : str
        Dither kind used.
    shaping : str
        Error-feedback filter name.
    seed : int
        Seed of the dither generator.
    overloads : int
        Samples that had to be clipped to the code range.
    resets : int
        Times the shaping filter's state was reset after a clip.
    """

    dither: str
    shaping: str
    seed: int
    overloads: int
    resets: int = 0


@dataclass(frozen=True)
class CodeScale:
    """Where full scale and silence fall on the code scale.

    A float sample ``x`` sits at ``x * half + half`` LSB and rounds to a code in
    ``0 .. top``.

    Attributes
    ----------
    top : int
        Highest code (up to 65535 for a ladder or PWM; 2**32 - 1 for 32-bit I2S samples).
    half : float
        LSB from silence to full scale.
    """

    top: int
    half: float

    @classmethod
    def for_bits(cls, bits: int) -> CodeScale:
        """N-bit codes: codes 0..2^N - 1, silence at 2^(N-1) (+1.0 clips by one LSB).

        A ladder is 1..16 bits wide, an I2S sample up to 32.
        """
        if isinstance(bits, bool) or not isinstance(bits, int) or not 1 <= bits <= 32:
            raise OptionError(f"must be a whole number 1..32, got {bits!r}", field="bits")
        return cls((1 << bits) - 1, float(1 << (bits - 1)))

    @property
    def dtype(self) -> type[np.unsignedinteger]:
        """The unsigned integer type that holds every code (uint16, or uint32 above)."""
        return np.uint16 if self.top < 1 << 16 else np.uint32

    @classmethod
    def for_levels(cls, count: int) -> CodeScale:
        """Any number of evenly spaced levels (a PWM slice's compare values 0..TOP+1, say).

        Codes 0..count-1 with -1.0 and +1.0 on the outer levels and silence half way.

        Examples
        --------
        >>> CodeScale.for_levels(1418)
        CodeScale(top=1417, half=708.5)
        """
        if isinstance(count, bool) or not isinstance(count, int) or not 2 <= count <= 1 << 16:
            raise OptionError(f"must be a whole number 2..65536, got {count!r}", field="levels")
        return cls(count - 1, (count - 1) / 2)

    @property
    def levels(self) -> int:
        """Number of codes."""
        return self.top + 1


def signal_to_lsb(x: np.ndarray, bits: int) -> np.ndarray:
    """Map float samples (full scale +/-1.0) to the code scale in LSB.

    ``0.0`` maps to mid-scale ``2**(bits-1)``, ``-1.0`` to code 0 and
    ``+1.0`` to ``2**bits`` (one past the top code, so a full-scale positive
    peak clips by one LSB).
    """
    half = float(1 << (bits - 1))
    return np.asarray(x, dtype=np.float64) * half + half


def quantize(
    sig: Signal,
    *,
    bits: int,
    dither: str = "tpdf",
    shaper: Shaper | str = "none",
    seed: int = 0,
    levels: LevelSet | None = None,
) -> tuple[Codes, QuantizeReport]:
    """Dither and quantise a mono signal to unsigned codes, with optional noise shaping.

    Parameters
    ----------
    sig : Signal
        Mono signal, nominal full scale +/-1.0.
    bits : int
        Code width N, 1..16.
    dither : {'tpdf', 'rpdf', 'none'}
        Dither added before rounding (default 'tpdf'), drawn inside the
        quantiser loop from a generator seeded by `seed`.
    shaper : Shaper or str
        Error-feedback noise-shaping filter, or the name of one in
        :data:`ladderpack.shaping.CATALOGUE` without a design rate
        ('none', 'first-order', 'second-order').
    seed : int
        Dither seed; the same seed gives the same codes.
    levels : LevelSet, optional
        The ladder's true level for every code (measured or modelled).  Each
        sample then takes the code whose true level is nearest the dithered
        target and the true error is fed back, so the ladder's errors become
        (shaped) noise instead of distortion.  An ideal LevelSet gives exactly
        the plain result.

    Returns
    -------
    (Codes, QuantizeReport)

    Examples
    --------
    >>> import numpy as np
    >>> c, r = quantize(Signal(np.zeros(4), 8000.0), bits=8, dither="none")
    >>> c.codes.tolist(), r.overloads
    ([128, 128, 128, 128], 0)
    """
    from ladderpack.shaping import CATALOGUE

    bits = check_bits(bits)
    check_signal(sig)
    if sig.samples.ndim != 1:
        raise OptionError("quantize expects a mono signal", field="samples")
    if dither not in DITHERS:
        raise OptionError(f"must be one of {', '.join(DITHERS)}; got {dither!r}", field="dither")
    if isinstance(shaper, str):
        if shaper not in CATALOGUE or CATALOGUE[shaper].design_rate_hz is not None:
            raise OptionError(
                f"pass a Shaper for {shaper!r}; by name only none, first-order and second-order",
                field="shaping",
            )
        shaper = CATALOGUE[shaper]
    if levels is not None and levels.bits != bits:
        raise OptionError(
            f"the levels are for {levels.bits} bits, the stream is {bits}", field="levels"
        )
    q = BlockQuantizer(bits=bits, dither=dither, shaper=shaper, seed=seed, levels=levels)
    codes = q.feed(sig.samples)
    report = QuantizeReport(dither, shaper.name, int(seed), q.overloads, q.resets)
    return Codes(codes, bits), report


def idle_ramp(idle_code: int, bits: int, n: int, *, mid: float | None = None) -> np.ndarray:
    """Raised-cosine ramp of `n` codes from `idle_code` towards mid-scale.

    The first code is exactly `idle_code`; the curve would reach mid-scale one
    sample after the end, where the (faded-in) audio starts.  `mid` is the level of
    silence when it is not ``2**(bits-1)`` (a PWM slice's ``(levels - 1) / 2``).
    """
    centre = float(1 << (bits - 1)) if mid is None else float(mid)
    ramp = idle_code + (centre - idle_code) * raised_cosine(n)
    return np.floor(ramp + 0.5).astype(np.uint16)


def with_idle_ramps(audio: Codes, *, idle_code: int = 0, ramp_samples: int) -> Codes:
    """Put a ramp from the idle code before the audio and back after it.

    The pins hold `idle_code` when nothing plays.  Jumping from there to
    mid-scale (silence) would click, so the stream opens with a raised-cosine
    ramp up to mid-scale and closes with the mirror image back to idle.
    """
    if not 0 <= idle_code <= audio.max_code:
        raise OptionError(
            f"must be 0..{audio.max_code} for {audio.bits} bits, got {idle_code}", field="idle_code"
        )
    ramp = idle_ramp(idle_code, audio.bits, ramp_samples)
    return Codes(np.concatenate([ramp, audio.codes, ramp[::-1]]), audio.bits)


def predicted_full_scale_sine(
    half_lsb: float, dither: str, in_band_gain_db: float, band_hz: float, rate_hz: float
) -> dict[str, float]:
    """SINAD and ENOB a full-scale sine would get from the quantiser, in the band.

    Signal power ``half_lsb^2 / 2`` LSB^2 over the error power in 0..band_hz: the total
    sigma^2 = 1/12 + dither variance (RPDF 1/12, TPDF 1/6: Lipshitz et al. 1992) is
    white over 0..rate/2, so the band holds band / (rate / 2) of it, times the noise
    shaper's mean power gain over the band (`in_band_gain_db`, 0 without shaping).

    Examples
    --------
    >>> predicted_full_scale_sine(128.0, "none", 0.0, 11025.0, 22050.0)["sinad_db"]
    49.926
    """
    sigma2 = 1 / 12 + {"none": 0.0, "rpdf": 1 / 12, "tpdf": 1 / 6}[dither]
    share = min(1.0, band_hz / (rate_hz / 2))
    noise = sigma2 * share * 10 ** (in_band_gain_db / 10)
    sinad = 10 * math.log10(half_lsb**2 / 2 / noise)
    return {"sinad_db": round(sinad, 3), "enob_bits": round((sinad - 1.76) / 6.02, 3)}


class DitherSource:
    """Seeded dither values in LSB, drawn in order.

    Drawing ``n1`` then ``n2`` values gives exactly the ``n1 + n2`` values of one
    draw, so a stream quantised in blocks gets the dither of one whole call.

    Parameters
    ----------
    kind : {'tpdf', 'rpdf', 'none'}
        TPDF: the difference of two uniform draws on [0, 1) (triangular, 2 LSB
        peak-to-peak); RPDF: one draw minus 1/2 (1 LSB peak-to-peak); none: zeros.
    seed : int
        Seed of numpy's PCG64 generator (0 .. 2**63 - 1).

    Examples
    --------
    >>> d = DitherSource("tpdf", seed=0)
    >>> bool(np.all(np.abs(d.draw(1000)) < 1.0))
    True
    """

    def __init__(self, kind: str, seed: int) -> None:
        if kind not in DITHERS:
            raise OptionError(f"must be one of {', '.join(DITHERS)}; got {kind!r}", field="dither")
        self.kind = kind
        self._rng = np.random.Generator(np.random.PCG64(int(seed)))

    def draw(self, n: int) -> np.ndarray:
        """The next `n` dither values, float64 LSB."""
        if self.kind == "none":
            return np.zeros(n)
        if self.kind == "rpdf":
            return self._rng.random(n) - 0.5
        r = self._rng.random(2 * n)
        return r[0::2] - r[1::2]


def round_block(v: np.ndarray, d: np.ndarray, lo: int, hi: int) -> tuple[np.ndarray, int]:
    """Round dithered samples to codes without feedback, the whole block at once.

    The same arithmetic as the feedback kernel with no filter
    (``clip(floor(v + d + 0.5), lo, hi)``), so the codes are bit-identical.

    Returns
    -------
    (numpy.ndarray, int)
        int64 codes and the number of clipped samples.
    """
    q = np.floor(v + d + 0.5)
    overloads = int(np.count_nonzero(q < lo) + np.count_nonzero(q > hi))
    return np.clip(q, lo, hi).astype(np.int64), overloads


def nearest_levels_block(
    v: np.ndarray, d: np.ndarray, lv: np.ndarray, lc: np.ndarray
) -> tuple[np.ndarray, int]:
    """Nearest true level for each dithered sample without feedback, vectorised.

    The same choice as the levels kernel with no filter (a tie goes up; targets
    beyond the outer levels by more than half an LSB count as clipped).

    Parameters
    ----------
    v, d : numpy.ndarray
        Targets and dither, LSB.
    lv, lc : numpy.ndarray
        True levels sorted ascending (LSB) and their codes.

    Returns
    -------
    (numpy.ndarray, int)
        int64 codes and the number of clipped samples.
    """
    target = v + d
    m = lv.size
    hi = np.searchsorted(lv, target, side="left")  # first index with lv >= target
    below = np.clip(hi - 1, 0, m - 1)
    above = np.clip(hi, 0, m - 1)
    take_below = (hi == m) | ((hi > 0) & (target - lv[below] < lv[above] - target))
    j = np.where(take_below, below, above)
    overloads = int(np.count_nonzero((target < lv[0] - 0.5) | (target > lv[m - 1] + 0.5)))
    return lc[j], overloads


class BlockQuantizer:
    """:func:`quantize` fed in blocks.

    The dither generator and the error filter's state carry across calls, so the
    codes are bit-identical to one whole call.

    Parameters are those of :func:`quantize` (without the signal), and `scale`: a
    :class:`CodeScale` other than the N-bit ladder's (any number of evenly spaced
    levels, as a PWM slice has); `bits` then only names the code width.
    """

    def __init__(
        self,
        *,
        bits: int,
        dither: str = "tpdf",
        shaper: Shaper | str = "none",
        seed: int = 0,
        levels: LevelSet | None = None,
        scale: CodeScale | None = None,
    ) -> None:
        from ladderpack.shaping import CATALOGUE

        if scale is not None and levels is not None:
            raise OptionError("give a code scale or true levels, not both", field="levels")
        self.scale = CodeScale.for_bits(bits) if scale is None else scale
        self.bits = check_bits(bits) if self.scale.top < 1 << 16 else int(bits)
        self.dither = DitherSource(dither, seed)
        self.shaper = CATALOGUE[shaper] if isinstance(shaper, str) else shaper
        self.b = np.asarray(self.shaper.b, dtype=np.float64)
        self.a = np.asarray(self.shaper.a, dtype=np.float64)
        self.e_hist = np.zeros(self.b.size)
        self.f_hist = np.zeros(self.b.size)
        self.levels = levels
        if levels is not None:
            from ladderpack.levels import code_scale

            lv, self.centre, self.half = code_scale(levels)
            order = np.argsort(lv, kind="stable")
            self.lv, self.lc = lv[order], order.astype(np.int64)
        self.overloads = 0
        self.resets = 0

    def feed(self, x: np.ndarray) -> np.ndarray:
        """Quantise the next block of float samples; return its codes.

        The codes are uint16, or uint32 for codes wider than 16 bits.
        """
        n = int(x.shape[0])
        d = self.dither.draw(n)
        r = 0
        if self.levels is None:
            half = self.scale.half
            v = np.asarray(x, dtype=np.float64) * half + half
            top = self.scale.top
            if self.b.size == 0:
                out, o = round_block(v, d, 0, top)
            else:
                out = np.empty(n, dtype=np.int64)
                o, r = _kernels.kernel("shape_quantize", n)(
                    v, d, self.b, self.a, 0, top, self.e_hist, self.f_hist, out
                )
        else:
            v = np.asarray(x, dtype=np.float64) * self.half + self.centre
            if self.b.size == 0:
                out, o = nearest_levels_block(v, d, self.lv, self.lc)
            else:
                out = np.empty(n, dtype=np.int64)
                o, r = _kernels.kernel("levels_quantize", n)(
                    v, d, self.lv, self.lc, self.b, self.a, self.e_hist, self.f_hist, out
                )
        self.overloads += int(o)
        self.resets += int(r)
        return out.astype(self.scale.dtype)
