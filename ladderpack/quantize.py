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

import numpy as np

from ladderpack import _kernels
from ladderpack.audio import Signal, check_signal
from ladderpack.conform import raised_cosine
from ladderpack.defaults import DITHERS, SHAPER_NAMES
from ladderpack.errors import OptionError

__all__ = [
    "DITHERS",
    "SHAPERS",
    "Codes",
    "QuantizeReport",
    "check_bits",
    "idle_ramp",
    "make_dither",
    "quantize",
    "signal_to_lsb",
    "with_idle_ramps",
]


#: Error-feedback filters available now, as taps h_1..h_K of NTF = 1 - sum h_k z^-k.
SHAPERS: dict[str, tuple[float, ...]] = {
    "none": (),
    "first-order": (1.0,),
}
assert tuple(SHAPERS) == SHAPER_NAMES

_DITHER_PEAK = {"tpdf": 1.0, "rpdf": 0.5, "none": 0.0}


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
    """

    dither: str
    shaping: str
    seed: int
    overloads: int


def check_bits(bits: int) -> int:
    """Validate a code width; return it as int.

    Raises
    ------
    OptionError
        Unless `bits` is a whole number 1..16.
    """
    if isinstance(bits, bool) or int(bits) != bits or not 1 <= int(bits) <= 16:
        raise OptionError(f"must be a whole number 1..16, got {bits!r}", field="bits")
    return int(bits)


def signal_to_lsb(x: np.ndarray, bits: int) -> np.ndarray:
    """Map float samples (full scale +/-1.0) to the code scale in LSB.

    ``0.0`` maps to mid-scale ``2**(bits-1)``, ``-1.0`` to code 0 and
    ``+1.0`` to ``2**bits`` (one past the top code, so a full-scale positive
    peak clips by one LSB).
    """
    half = float(1 << (bits - 1))
    return np.asarray(x, dtype=np.float64) * half + half


def make_dither(n: int, kind: str, rng: np.random.Generator) -> np.ndarray:
    """Draw `n` dither values in LSB.

    Parameters
    ----------
    n : int
        Number of values.
    kind : {'tpdf', 'rpdf', 'none'}
        Triangular (2 LSB peak-to-peak), rectangular (1 LSB) or zeros.
    rng : numpy.random.Generator
        Seeded generator; the same seed gives the same values.
    """
    if kind == "tpdf":
        return rng.random(n) - rng.random(n)
    if kind == "rpdf":
        return rng.random(n) - 0.5
    if kind == "none":
        return np.zeros(n)
    raise OptionError(f"must be one of {', '.join(DITHERS)}; got {kind!r}", field="dither")


def quantize(
    sig: Signal,
    *,
    bits: int,
    dither: str = "tpdf",
    shaping: str = "none",
    seed: int = 0,
) -> tuple[Codes, QuantizeReport]:
    """Dither and quantise a mono signal to unsigned codes.

    Parameters
    ----------
    sig : Signal
        Mono signal, nominal full scale +/-1.0.
    bits : int
        Code width N, 1..16.
    dither : {'tpdf', 'rpdf', 'none'}
        Dither added before rounding (default 'tpdf').
    shaping : {'none', 'first-order'}
        Error-feedback noise shaping.  'first-order' feeds the previous total
        error back, giving a noise transfer function ``1 - z^-1``.
    seed : int
        Seed for the dither generator (numpy PCG64).

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
    bits = check_bits(bits)
    check_signal(sig)
    if sig.samples.ndim != 1:
        raise OptionError("quantize expects a mono signal", field="samples")
    if shaping not in SHAPERS:
        raise OptionError(f"must be one of {', '.join(SHAPERS)}; got {shaping!r}", field="shaping")
    rng = np.random.default_rng(seed)
    v = signal_to_lsb(sig.samples, bits)
    d = make_dither(v.shape[0], dither, rng)
    hi = (1 << bits) - 1
    taps = np.asarray(SHAPERS[shaping], dtype=np.float64)
    if taps.size == 0:
        q = np.floor(v + d + 0.5)
        overloads = int(np.count_nonzero((q < 0) | (q > hi)))
        codes = np.clip(q, 0, hi).astype(np.uint16)
    else:
        out = np.empty(v.shape[0], dtype=np.int64)
        clamp = 0.5 + _DITHER_PEAK[dither]
        overloads = int(_kernels.compiled("errfb_quantize")(v, d, taps, 0, hi, clamp, out))
        codes = out.astype(np.uint16)
    return Codes(codes, bits), QuantizeReport(dither, shaping, int(seed), overloads)


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
