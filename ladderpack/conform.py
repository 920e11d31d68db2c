"""Conform a signal to the stream: DC, sample rate, level and fades.

Resampling meets explicit specifications (see :func:`resampler_spec`): flat
within 0.05 dB up to 0.45 x the lower of the two rates, and from 0.5 x that
rate an attenuation of at least ``max(90, 6.02 N + 12)`` dB for an N-bit
output.  The engine is libsoxr (through the ``soxr`` package) in its
very-high-quality mode, whose linear-phase filters keep the pass band to
0.4565 x the lower rate within 0.01 dB and stop from 0.5 x with about 170 dB;
it serves any ratio, including the irrational-looking ones a fractional
divider gives.  Its scalar double-precision engine is selected (not the SIMD
one the CPU would pick), so the same clip gives the same bits on every x86-64
machine.  Fed in blocks it gives exactly the samples of one whole call.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from fractions import Fraction
from typing import Any

import numpy as np

from ladderpack import portable
from ladderpack.audio import Signal, check_signal
from ladderpack.errors import OptionError

__all__ = [
    "ResamplerSpec",
    "StreamResampler",
    "apply_fades",
    "chunked_mean",
    "dbfs_to_amplitude",
    "loop_crossfade",
    "loop_rate",
    "normalise_peak",
    "remove_dc",
    "resample",
    "resampler_spec",
]

#: The soxr quality preset used (very high quality: 28-bit precision).
SOXR_QUALITY = "VHQ"

#: Working memory of one resampler, bytes (its filter banks and FIFOs; a generous bound).
RESAMPLER_BYTES = 32 << 20


@dataclass(frozen=True)
class ResamplerSpec:
    """Design targets of the resampling low-pass filter.

    Attributes
    ----------
    passband_hz : float
        Edge of the flat band (0.45 x the lower rate).
    stopband_hz : float
        Start of the stop band (0.5 x the lower rate).
    ripple_db : float
        Allowed pass-band deviation, +/- dB (0.05).
    attenuation_db : float
        Required stop-band attenuation in dB.
    """

    passband_hz: float
    stopband_hz: float
    ripple_db: float
    attenuation_db: float


def dbfs_to_amplitude(dbfs: float) -> float:
    """Convert a level in dBFS to a linear peak amplitude (0 dBFS = 1.0)."""
    return portable.db_to_amplitude(dbfs)


def resampler_spec(rate_in_hz: float, rate_out_hz: float, bits: int) -> ResamplerSpec:
    """Return the filter specification for a conversion between two rates.

    Parameters
    ----------
    rate_in_hz, rate_out_hz : float
        Input and output sample rates in hertz.
    bits : int
        Output code width N; the stop band must reach ``6.02 N + 12`` dB.
    """
    low = min(float(rate_in_hz), float(rate_out_hz))
    return ResamplerSpec(
        passband_hz=0.45 * low,
        stopband_hz=0.5 * low,
        ripple_db=0.05,
        attenuation_db=max(90.0, 6.02 * bits + 12.0),
    )


def _engine(rate_in_hz: float, rate_out_hz: float) -> Any:
    """A soxr stream resampler with the scalar double-precision engine.

    libsoxr picks a SIMD engine by CPU at creation unless ``SOXR_USE_SIMD`` is 0;
    the SIMD and scalar engines round differently, so the variable is set for the
    creation only (and restored), making the output the same on every machine.
    """
    import soxr

    saved = os.environ.get("SOXR_USE_SIMD")
    os.environ["SOXR_USE_SIMD"] = "0"
    try:
        return soxr.ResampleStream(
            rate_in_hz, rate_out_hz, 1, dtype="float64", quality=SOXR_QUALITY
        )
    finally:
        if saved is None:
            del os.environ["SOXR_USE_SIMD"]
        else:
            os.environ["SOXR_USE_SIMD"] = saved


def _step(rate_in_hz: float | Fraction, rate_out_hz: float | Fraction) -> Fraction:
    """Input samples per output sample, exact."""
    return Fraction(rate_in_hz) / Fraction(rate_out_hz)


class StreamResampler:
    """Resample a mono signal fed in blocks; the output does not depend on the blocks.

    Output sample ``n`` is the band-limited input at input time ``n * rate_in /
    rate_out`` (the input is silent before its start and after its end), and
    there are ``ceil(frames * rate_out / rate_in)`` of them, the last ones coming
    with the last block.  Equal rates pass the samples through unchanged.

    Parameters
    ----------
    rate_in_hz : float
        Input rate, Hz.
    rate_out_hz : float or Fraction
        Output rate, Hz: pass a ClockPlan's exact ``achieved_rate_hz`` so the
        stream's pitch and duration come out right.
    frames : int
        Total input frames.
    bits : int
        Output code width; the engine exceeds the stop band :func:`resampler_spec`
        asks for at any width up to 16, so it only documents the requirement.

    Examples
    --------
    >>> rs = StreamResampler(48000.0, 24000.0, 480)
    >>> sum(rs.feed(b, last=i == 3).size for i, b in enumerate(np.split(np.ones(480), 4)))
    240
    """

    def __init__(
        self, rate_in_hz: float, rate_out_hz: float | Fraction, frames: int, *, bits: int = 16
    ) -> None:
        step = _step(rate_in_hz, rate_out_hz)
        if step <= 0:
            raise OptionError(f"rates must be > 0 Hz, got {rate_out_hz!r}", field="rate_hz")
        self.step = step
        self.bits = bits
        self.identity = step == 1
        self.frames = int(frames)
        self.n_out = math.ceil(self.frames / step)
        self.fed = 0
        self.done = 0  # outputs emitted
        # silence appended to the last block so the engine's flush covers n_out
        self.tail = 2 * math.ceil(step) + 64
        self._rs = None if self.identity else _engine(float(rate_in_hz), float(rate_out_hz))

    def feed(self, x: np.ndarray, *, last: bool = False) -> np.ndarray:
        """Add input samples; return every output that can now be computed."""
        x = np.asarray(x, dtype=np.float64)
        self.fed += x.size
        if self._rs is None:
            return np.array(x)
        if last:
            x = np.concatenate([x, np.zeros(self.tail)])
        y = self._rs.resample_chunk(x, last=last)
        y = np.asarray(y[: self.n_out - self.done], dtype=np.float64)
        self.done += y.size
        if last and self.done < self.n_out:  # never expected: the tail covers it
            raise RuntimeError(f"resampler gave {self.done} of {self.n_out} samples")
        return y


def resample(
    sig: Signal,
    rate_out_hz: float | Fraction,
    *,
    bits: int = 16,
    periodic: bool = False,
) -> Signal:
    """Resample a mono signal to a new rate, rational or not.

    Output sample ``n`` is the band-limited input evaluated at input time
    ``n * rate_in / rate_out``, so long clips do not drift; the result is
    the same as feeding a :class:`StreamResampler` in blocks of any size.

    Parameters
    ----------
    sig : Signal
        Input signal (1-D samples).
    rate_out_hz : float or Fraction
        Target rate in hertz.  Pass a ClockPlan's exact ``achieved_rate_hz``
        so the stream's pitch and duration come out right.
    bits : int
        Output code width (the stop band it asks for, see :func:`resampler_spec`).
    periodic : bool
        Treat the input as one period of a loop (the filter wraps around the
        ends instead of seeing silence), for seamless repeating streams.  The
        period must come out a whole number of output samples (choose the rate
        with :func:`loop_rate`).

    Returns
    -------
    Signal
        ``ceil(frames * rate_out / rate_in)`` samples at `rate_out_hz`.

    Examples
    --------
    >>> y = resample(Signal(np.zeros(441), 44100.0), 22050)
    >>> y.frames, y.rate_hz
    (221, 22050.0)
    """
    check_signal(sig)
    if sig.samples.ndim != 1:
        raise OptionError("resample expects a mono signal; downmix first", field="samples")
    out_rate = float(Fraction(rate_out_hz))
    body = np.asarray(sig.samples, dtype=np.float64)
    if not periodic:
        rs = StreamResampler(sig.rate_hz, rate_out_hz, body.size, bits=bits)
        return Signal(rs.feed(body, last=True), out_rate)
    step = _step(sig.rate_hz, rate_out_hz)
    period = body.size / step
    if period.denominator != 1:
        raise OptionError(
            f"a period of {body.size} samples becomes {float(period):.6g} output samples, "
            "not a whole number; choose the rate with loop_rate()",
            field="rate_hz",
        )
    # The engine's impulse response spans a few hundred input samples per input or
    # output sample, whichever is longer: whole periods on both sides cover it, and the
    # middle period's outputs then start exactly on an output sample.
    guard = 1024 * max(1, math.ceil(step)) + 2048
    reps = -(-guard // max(1, body.size))
    tiled = np.tile(body, 2 * reps + 1)
    rs = StreamResampler(sig.rate_hz, rate_out_hz, tiled.size, bits=bits)
    y = rs.feed(tiled, last=True)
    n = int(period)
    return Signal(np.array(y[reps * n : (reps + 1) * n]), out_rate)


def loop_rate(frames: int, rate_in_hz: float, rate_out_hz: Fraction, multiple: int) -> Fraction:
    """Rate to resample a loop to so its length is a whole number of `multiple`.

    A loop of `frames` input samples becomes ``frames * rate_out / rate_in``
    output samples, rarely a whole number of words.  Resampling it to the
    returned rate instead gives exactly the nearest multiple of `multiple`
    samples (at least one), so the loop closes on a word boundary; played at
    `rate_out_hz` its pitch moves by ``returned / rate_out - 1``.
    """
    exact = Fraction(frames) * Fraction(rate_out_hz) / Fraction(rate_in_hz)
    words = max(1, round(exact / multiple))
    return Fraction(rate_in_hz) * words * multiple / frames


def loop_crossfade(sig: Signal, *, crossfade_ms: float) -> Signal:
    """Fold the end of a loop onto its start with an equal-power crossfade.

    The last ``K`` samples fade out over the first ``K``, which fade in; the
    result is ``K`` samples shorter and wraps from its end to its start
    without a jump.  ``crossfade_ms = 0`` returns the signal unchanged.
    """
    if not (math.isfinite(crossfade_ms) and crossfade_ms >= 0):
        raise OptionError(f"must be >= 0 ms, got {crossfade_ms!r}", field="crossfade_ms")
    k = min(round(crossfade_ms * 1e-3 * sig.rate_hz), sig.frames // 2)
    if k == 0:
        return sig
    x = np.array(sig.samples, dtype=np.float64)
    phase = (np.arange(k) + 0.5) / k * (np.pi / 2)
    head = x[:k] * portable.sin(phase) + x[-k:] * portable.cos(phase)
    return Signal(np.concatenate([head, x[k:-k]]), sig.rate_hz)


#: Chunk length over which partial sums are taken for the mean (see :func:`chunked_mean`).
MEAN_CHUNK = 1 << 16


def chunked_mean(x: np.ndarray) -> float:
    """Mean of a 1-D array, defined so that block-wise processing gets the same bits.

    Partial sums over fixed chunks of :data:`MEAN_CHUNK` samples (numpy) are added
    exactly (``math.fsum``); a reader that sees the clip in blocks of any size can
    form the same chunks and get the same value.
    """
    parts = [float(np.sum(x[i : i + MEAN_CHUNK])) for i in range(0, x.size, MEAN_CHUNK)]
    return math.fsum(parts) / x.size if x.size else 0.0


def remove_dc(sig: Signal) -> Signal:
    """Subtract the mean of each channel (mono: :func:`chunked_mean`)."""
    if sig.samples.ndim == 1:
        return Signal(sig.samples - chunked_mean(sig.samples), sig.rate_hz)
    return Signal(sig.samples - sig.samples.mean(axis=0), sig.rate_hz)


def normalise_peak(sig: Signal, *, headroom_db: float = 1.0) -> tuple[Signal, float]:
    """Scale so the largest absolute sample sits `headroom_db` below full scale.

    Parameters
    ----------
    sig : Signal
        Input signal.
    headroom_db : float
        Distance of the peak below 0 dBFS, in dB (default 1.0).

    Returns
    -------
    (Signal, float)
        The scaled signal and the gain applied, in dB.  A silent signal is
        returned unchanged with gain 0 dB.
    """
    if not (math.isfinite(headroom_db) and headroom_db >= 0):
        raise OptionError(f"must be >= 0 dB, got {headroom_db!r}", field="headroom_db")
    peak = float(np.max(np.abs(sig.samples))) if sig.frames else 0.0
    if peak == 0.0:
        return sig, 0.0
    gain = dbfs_to_amplitude(-headroom_db) / peak
    return Signal(sig.samples * gain, sig.rate_hz), 20.0 * math.log10(gain)


def raised_cosine(n: int) -> np.ndarray:
    """Rising raised-cosine (Hann half) window of `n` points from 0 towards 1.

    The first point is 0 and the curve would reach 1 one point after the end,
    so a fade followed by unity gain has no repeated sample.
    """
    if n <= 0:
        return np.zeros(0)
    return 0.5 - 0.5 * portable.cos(np.pi * np.arange(n) / n)


def apply_fades(sig: Signal, *, fade_ms: float = 5.0) -> Signal:
    """Apply raised-cosine fades of `fade_ms` milliseconds at both ends.

    A fade longer than half the clip is shortened to half the clip.
    """
    if not (math.isfinite(fade_ms) and fade_ms >= 0):
        raise OptionError(f"must be >= 0 ms, got {fade_ms!r}", field="fade_ms")
    n = min(round(fade_ms * 1e-3 * sig.rate_hz), sig.frames // 2)
    if n == 0:
        return sig
    x = np.array(sig.samples, dtype=np.float64)
    w = raised_cosine(n)
    x[:n] *= w
    x[-n:] *= w[::-1]
    return Signal(x, sig.rate_hz)
