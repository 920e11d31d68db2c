"""Dither and quantisation of a conformed signal to unsigned N-bit codes.

The code scale puts silence at mid-scale ``2**(N-1)``: a float sample ``x``
(full scale +/-1.0) sits at ``x * 2**(N-1) + 2**(N-1)`` LSB and rounds to the
nearest code in ``0 .. 2**N - 1``.  Dither is non-subtractive: TPDF (sum of
two independent uniform variables, 2 LSB peak-to-peak) removes both
distortion and noise modulation; RPDF (1 LSB peak-to-peak) only the
distortion (Lipshitz, Wannamaker & Vanderkooy, "Quantization and Dither: A
Theoretical Survey", JAES 40(5), 1992).
"""

from __future__ import annotations

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
    "Codes",
    "QuantizeReport",
    "check_bits",
    "idle_ramp",
    "quantize",
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
    if dither not in _kernels.DITHER_DRAWS:
        raise OptionError(f"must be one of {', '.join(DITHERS)}; got {dither!r}", field="dither")
    if isinstance(shaper, str):
        if shaper not in CATALOGUE or CATALOGUE[shaper].design_rate_hz is not None:
            raise OptionError(
                f"pass a Shaper for {shaper!r}; by name only none, first-order and second-order",
                field="shaping",
            )
        shaper = CATALOGUE[shaper]
    v = signal_to_lsb(sig.samples, bits)
    out = np.empty(v.shape[0], dtype=np.int64)
    b = np.asarray(shaper.b, dtype=np.float64)
    a = np.asarray(shaper.a, dtype=np.float64)
    draws, state = _kernels.DITHER_DRAWS[dither], _kernels.seed_state(seed)
    if levels is None:
        overloads, resets = _kernels.compiled("shape_quantize")(
            v, b, a, draws, state, 0, (1 << bits) - 1, np.zeros(b.size), np.zeros(b.size), out
        )
    else:
        from ladderpack.levels import code_scale

        if levels.bits != bits:
            raise OptionError(
                f"the levels are for {levels.bits} bits, the stream is {bits}", field="levels"
            )
        lv, centre, half = code_scale(levels)
        v = np.asarray(sig.samples, dtype=np.float64) * half + centre
        order = np.argsort(lv, kind="stable")
        overloads, resets = _kernels.compiled("levels_quantize")(
            v,
            lv[order],
            order.astype(np.int64),
            b,
            a,
            draws,
            state,
            np.zeros(b.size),
            np.zeros(b.size),
            out,
        )
    report = QuantizeReport(dither, shaper.name, int(seed), int(overloads), int(resets))
    return Codes(out.astype(np.uint16), bits), report


def idle_ramp(idle_code: int, bits: int, n: int) -> np.ndarray:
    """Raised-cosine ramp of `n` codes from `idle_code` towards mid-scale.

    The first code is exactly `idle_code`; the curve would reach mid-scale one
    sample after the end, where the (faded-in) audio starts.
    """
    mid = 1 << (bits - 1)
    ramp = idle_code + (mid - idle_code) * raised_cosine(n)
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


class BlockQuantizer:
    """:func:`quantize` fed in blocks.

    The dither generator and the error filter's state carry across calls, so the
    codes are bit-identical to one whole call.

    Parameters are those of :func:`quantize` (without the signal).
    """

    def __init__(
        self,
        *,
        bits: int,
        dither: str = "tpdf",
        shaper: Shaper | str = "none",
        seed: int = 0,
        levels: LevelSet | None = None,
    ) -> None:
        from ladderpack.shaping import CATALOGUE

        self.bits = check_bits(bits)
        if dither not in _kernels.DITHER_DRAWS:
            raise OptionError(
                f"must be one of {', '.join(DITHERS)}; got {dither!r}", field="dither"
            )
        self.shaper = CATALOGUE[shaper] if isinstance(shaper, str) else shaper
        self.b = np.asarray(self.shaper.b, dtype=np.float64)
        self.a = np.asarray(self.shaper.a, dtype=np.float64)
        self.draws = _kernels.DITHER_DRAWS[dither]
        self.state = _kernels.seed_state(seed)
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
        """Quantise the next block of float samples; return its uint16 codes."""
        out = np.empty(x.shape[0], dtype=np.int64)
        if self.levels is None:
            v = signal_to_lsb(x, self.bits)
            o, r = _kernels.compiled("shape_quantize")(
                v,
                self.b,
                self.a,
                self.draws,
                self.state,
                0,
                (1 << self.bits) - 1,
                self.e_hist,
                self.f_hist,
                out,
            )
        else:
            v = np.asarray(x, dtype=np.float64) * self.half + self.centre
            o, r = _kernels.compiled("levels_quantize")(
                v,
                self.lv,
                self.lc,
                self.b,
                self.a,
                self.draws,
                self.state,
                self.e_hist,
                self.f_hist,
                out,
            )
        self.overloads += int(o)
        self.resets += int(r)
        return out.astype(np.uint16)
