"""Conform a signal to the stream: DC, sample rate, level and fades.

Resampling uses a polyphase windowed-sinc filter designed from explicit
specifications (see :func:`resampler_spec`): flat within 0.05 dB up to
0.45 x the lower of the two rates, and from 0.5 x that rate an attenuation of
at least ``max(90, 6.02 N + 12)`` dB for an N-bit output.  The prototype is a
Kaiser-windowed sinc (Kaiser 1974; Oppenheim & Schafer, *Discrete-Time Signal
Processing*, Kaiser design formulas), tabulated as a polyphase bank of 1024
phases per input sample with linear interpolation between phases, so the
exact, usually irrational-looking ratio of a clock plan is served directly.
"""

from __future__ import annotations

import functools
import math
import os
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from ladderpack import _kernels
from ladderpack.audio import Signal, check_signal
from ladderpack.errors import OptionError

__all__ = [
    "ResamplerSpec",
    "SincKernel",
    "StreamResampler",
    "apply_fades",
    "chunked_mean",
    "dbfs_to_amplitude",
    "design_kernel",
    "kaiser_beta",
    "loop_crossfade",
    "loop_rate",
    "normalise_peak",
    "remove_dc",
    "resample",
    "resampler_spec",
]

#: Polyphase table rows per input sample.
PHASES = 1024


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
    return 10.0 ** (dbfs / 20.0)


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


@dataclass(frozen=True)
class SincKernel:
    """A Kaiser-windowed sinc tabulated as a polyphase filter bank.

    Row ``p`` of `table` holds the taps for an output that falls ``p / phases``
    of an input sample after input sample ``i``; tap ``j`` multiplies input
    ``i - half + 1 + j``.  Between rows the taps are interpolated linearly,
    so any ratio, rational or not, is served from one table.

    Attributes
    ----------
    table : numpy.ndarray
        ``(phases + 1, 2 * half)`` taps; every row sums to 1 (unit DC gain).
    phases : int
        Number of table rows per input sample.
    half : int
        Taps on each side of the output instant.
    spec : ResamplerSpec
        The specification the kernel was designed for.
    """

    table: np.ndarray
    phases: int
    half: int
    spec: ResamplerSpec


def kaiser_beta(attenuation_db: float) -> float:
    """Kaiser window shape parameter for a stop-band attenuation in dB.

    Kaiser's formulas (Kaiser 1974; Oppenheim & Schafer, *Discrete-Time Signal
    Processing*): ``0.1102 (A - 8.7)`` above 50 dB, ``0.5842 (A - 21)^0.4 +
    0.07886 (A - 21)`` from 21 to 50 dB, 0 below.
    """
    a = float(attenuation_db)
    if a > 50:
        return 0.1102 * (a - 8.7)
    if a >= 21:
        return 0.5842 * (a - 21) ** 0.4 + 0.07886 * (a - 21)
    return 0.0


def kernel_half(spec: ResamplerSpec, rate_in_hz: float, *, margin_db: float = 3.0) -> int:
    """Taps on each side of the output instant of the kernel :func:`design_kernel` makes.

    Cheap: lets a plan know the table's size (``(PHASES + 1) x 2 half`` doubles)
    before designing it.
    """
    atten = spec.attenuation_db + margin_db
    width = 2.0 * math.pi * (spec.stopband_hz - spec.passband_hz) / float(rate_in_hz)
    return math.ceil(0.5 * (atten - 8.0) / (2.285 * width)) + 1


@functools.lru_cache(maxsize=16)
def design_kernel(
    spec: ResamplerSpec, rate_in_hz: float, *, phases: int = PHASES, margin_db: float = 3.0
) -> SincKernel:
    """Design the Kaiser-windowed sinc low-pass for a resampler.

    The length comes from Kaiser's order estimate ``M = (A - 8) / (2.285 dw)``
    and the shape parameter from ``scipy.signal.kaiser_beta`` (Kaiser 1974;
    Oppenheim & Schafer), with `margin_db` of attenuation beyond the spec.

    Parameters
    ----------
    spec : ResamplerSpec
        Pass-band edge, stop-band edge and attenuation.
    rate_in_hz : float
        Input sample rate in hertz; the kernel is laid out in input samples.
    phases : int
        Rows of the table per input sample (default 1024; linear
        interpolation between rows then errs about -140 dB against a
        16384-row table).
    margin_db : float
        Attenuation designed in beyond the specification, in dB.
    """
    atten = spec.attenuation_db + margin_db
    rate_in = float(rate_in_hz)
    width = 2.0 * math.pi * (spec.stopband_hz - spec.passband_hz) / rate_in  # rad/sample
    half_span = 0.5 * (atten - 8.0) / (2.285 * width)  # M / 2, in input samples
    half = kernel_half(spec, rate_in, margin_db=margin_db)
    beta = kaiser_beta(atten)
    fc = 0.5 * (spec.passband_hz + spec.stopband_hz) / rate_in  # cycles per input sample
    frac = np.arange(phases + 1)[:, None] / phases
    tau = frac - (np.arange(2 * half)[None, :] - half + 1)  # output time minus input time
    inside = np.abs(tau) < half_span
    arg = np.sqrt(np.clip(1.0 - (tau / half_span) ** 2, 0.0, None))
    window = np.where(inside, np.i0(beta * arg) / np.i0(beta), 0.0)
    table = 2.0 * fc * np.sinc(2.0 * fc * tau) * window
    table /= table.sum(axis=1, keepdims=True)
    return SincKernel(np.ascontiguousarray(table), phases, half, spec)


def resample(
    sig: Signal,
    rate_out_hz: float | Fraction,
    *,
    bits: int = 16,
    kernel: SincKernel | None = None,
    periodic: bool = False,
) -> Signal:
    """Resample a mono signal to a new rate, rational or not.

    Output sample ``n`` is the band-limited input evaluated at input time
    ``n * rate_in / rate_out`` (exact rational arithmetic for the instant,
    so long clips do not drift).

    Parameters
    ----------
    sig : Signal
        Input signal (1-D samples).
    rate_out_hz : float or Fraction
        Target rate in hertz.  Pass a ClockPlan's exact ``achieved_rate_hz``
        so the stream's pitch and duration come out right.
    bits : int
        Output code width, which sets the stop-band attenuation.
    kernel : SincKernel, optional
        A kernel from :func:`design_kernel` to reuse.
    periodic : bool
        Treat the input as one period of a loop (the filter wraps around
        the ends instead of seeing silence), for seamless repeating streams.

    Returns
    -------
    Signal
        ``ceil(frames * rate_out / rate_in)`` samples at `rate_out_hz`.
    """
    check_signal(sig)
    if sig.samples.ndim != 1:
        raise OptionError("resample expects a mono signal; downmix first", field="samples")
    step = Fraction(sig.rate_hz) / Fraction(rate_out_hz)
    if step.denominator > 1 << 40:  # keep the kernel's integer instants inside int64
        step = step.limit_denominator(1 << 40)
    out_rate = float(Fraction(rate_out_hz))
    n_out = math.ceil(sig.frames / step)
    if step == 1:
        return Signal(np.array(sig.samples, dtype=np.float64), out_rate)
    if kernel is None:
        kernel = design_kernel(resampler_spec(sig.rate_hz, out_rate, bits), sig.rate_hz)
    half = kernel.half
    body = np.asarray(sig.samples, dtype=np.float64)
    if periodic:
        reps = -(-(half + 1) // body.size)
        tiled = np.tile(body, reps)
        x = np.concatenate([tiled[tiled.size - half :], body, tiled[: half + 1]])
    else:
        x = np.concatenate([np.zeros(half), body, np.zeros(half + 1)])
    y = np.empty(n_out)
    num, den = step.numerator, step.denominator
    step_int, step_rem = divmod(num, den)
    run = _kernels.compiled("sinc_resample")
    # Outputs are independent, so split them across threads (the kernel releases the
    # GIL); each part starts at its own exact instant, so the result does not depend
    # on the split.
    parts = min(os.cpu_count() or 1, 4) if n_out >= 1 << 17 else 1
    bounds = [n_out * k // parts for k in range(parts + 1)]

    def part(k: int) -> None:
        lo, hi = bounds[k], bounds[k + 1]
        base, rem = divmod(lo * num, den)
        run(x, kernel.table, base, rem, step_int, step_rem, den, y[lo:hi])

    if parts == 1:
        part(0)
    else:
        with ThreadPoolExecutor(max_workers=parts) as pool:
            list(pool.map(part, range(parts)))
    return Signal(y, out_rate)


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
    head = x[:k] * np.sin(phase) + x[-k:] * np.cos(phase)
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


class StreamResampler:
    """The same resampler as :func:`resample`, fed in blocks.

    Output sample ``n`` is computed from exactly the inputs and with exactly the
    arithmetic :func:`resample` uses, so the concatenated output is bit-identical
    whatever the block sizes.  Only the input window still needed is kept.

    Parameters
    ----------
    rate_in_hz : float
        Input rate, Hz.
    rate_out_hz : float or Fraction
        Output rate, Hz.
    frames : int
        Total input frames (sets the output length, as in :func:`resample`).
    bits : int
        Output code width (sets the stop band).
    """

    def __init__(
        self, rate_in_hz: float, rate_out_hz: float | Fraction, frames: int, *, bits: int = 16
    ) -> None:
        step = Fraction(rate_in_hz) / Fraction(rate_out_hz)
        if step.denominator > 1 << 40:
            step = step.limit_denominator(1 << 40)
        self.step = step
        self.identity = step == 1
        self.n_out = math.ceil(frames / step)
        self.frames = frames
        if not self.identity:
            self.kernel = design_kernel(
                resampler_spec(rate_in_hz, float(Fraction(rate_out_hz)), bits), rate_in_hz
            )
            self.half = self.kernel.half
            self.buf = np.zeros(self.half)  # the leading zero padding
        self.buf_start = 0  # padded index of buf[0]
        self.fed = 0
        self.done = 0  # outputs emitted

    def _base(self, n: int) -> tuple[int, int]:
        return divmod(n * self.step.numerator, self.step.denominator)

    def _run(self, out: np.ndarray) -> None:
        """Compute outputs ``done .. done + out.size`` into `out`.

        Outputs are independent, so a large block is split across threads (the
        kernel releases the GIL); each part starts at its own exact instant, so the
        result does not depend on the split.
        """
        step_int, step_rem = divmod(self.step.numerator, self.step.denominator)
        run = _kernels.compiled("sinc_resample")
        parts = min(os.cpu_count() or 1, 4) if out.size >= 1 << 17 else 1
        bounds = [out.size * k // parts for k in range(parts + 1)]

        def part(k: int) -> None:
            lo, hi = bounds[k], bounds[k + 1]
            base, rem = self._base(self.done + lo)
            run(
                self.buf,
                self.kernel.table,
                base - self.buf_start,
                rem,
                step_int,
                step_rem,
                self.step.denominator,
                out[lo:hi],
            )

        if parts == 1:
            part(0)
        else:
            with ThreadPoolExecutor(max_workers=parts) as pool:
                list(pool.map(part, range(parts)))

    def feed(self, x: np.ndarray, *, last: bool = False) -> np.ndarray:
        """Add input samples; return every output that can now be computed."""
        x = np.asarray(x, dtype=np.float64)
        self.fed += x.size
        if self.identity:
            return np.array(x)
        tail = np.zeros(self.half + 1) if last else np.zeros(0)
        self.buf = np.concatenate([self.buf, x, tail])
        avail = self.buf_start + self.buf.size  # padded samples held, up to this index
        # Output n reads padded indices base(n) + 1 .. base(n) + 2 half.
        hi = self.n_out if last else self.done
        if not last:
            lo_n, hi_n = self.done, self.n_out
            while lo_n < hi_n:  # largest n with base(n) + 2 half < avail
                mid = (lo_n + hi_n) // 2
                if self._base(mid)[0] + 2 * self.half < avail:
                    lo_n = mid + 1
                else:
                    hi_n = mid
            hi = lo_n
        out = np.empty(hi - self.done)
        if out.size:
            self._run(out)
            self.done = hi
        keep_from = self._base(self.done)[0] if self.done < self.n_out else avail
        drop = max(0, keep_from - self.buf_start)
        self.buf = self.buf[drop:]
        self.buf_start += drop
        return out


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
    return 0.5 - 0.5 * np.cos(np.pi * np.arange(n) / n)


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
