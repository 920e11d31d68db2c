"""Test waveforms, coherent and loop lengths, wavetables and phase increments.

Waveforms are synthesised directly at the stream's achieved rate, so nothing is
resampled and levels stay exact.  Levels are peak levels in dBFS (0 dBFS = full
scale +/-1.0); noise is scaled so its largest sample sits at the level.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ladderpack import portable
from ladderpack.audio import Signal
from ladderpack.defaults import TONE_KINDS
from ladderpack.errors import OptionError

__all__ = [
    "TONE_KINDS",
    "Tone",
    "ToneSynth",
    "coherent_cycles",
    "loop_cycles",
    "phase_increments",
    "synthesise",
    "truncation_spur_dbc",
    "wavetable",
]


@dataclass(frozen=True)
class Tone:
    """A synthesised test signal and what was asked for.

    Attributes
    ----------
    signal : Signal
        The samples at the stream rate.
    freq_hz : float or None
        The frequency used (after loop or coherent adjustment).
    requested_freq_hz : float or None
        The frequency asked for.
    cycles : int or None
        Whole cycles in the buffer (loop or coherent mode).
    """

    signal: Signal
    freq_hz: float | None = None
    requested_freq_hz: float | None = None
    cycles: int | None = None

    @property
    def freq_error_hz(self) -> float | None:
        """Used minus requested frequency, Hz."""
        if self.freq_hz is None or self.requested_freq_hz is None:
            return None
        return self.freq_hz - self.requested_freq_hz


def loop_cycles(freq_hz: float, samples: int, rate_hz: float) -> int:
    """Whole cycles nearest ``freq_hz`` that fit a loop of `samples` samples (at least 1)."""
    return max(1, round(freq_hz * samples / rate_hz))


def coherent_cycles(freq_hz: float, record: int, rate_hz: float) -> int:
    """Cycle count for coherent capture (IEEE Std 1241 practice).

    Returns the integer M nearest ``freq_hz * record / rate_hz`` that is
    co-prime with the record length, so the tone falls exactly on one FFT bin
    and every sample lands on a different phase.
    """
    target = freq_hz * record / rate_hz
    if not 0 < target < record / 2:
        raise OptionError(
            f"{freq_hz:g} Hz does not fit a {record}-sample record at {rate_hz:g} Hz",
            field="freq_hz",
        )
    base = max(1, round(target))
    for d in range(record):
        for m in (base - d, base + d):
            if 0 < m < record / 2 and math.gcd(m, record) == 1:
                return m
    raise OptionError(f"no cycle count co-prime with {record}", field="coherent_record")


def _harmonics(kind: str, phase: np.ndarray, f0_hz: float, rate_hz: float) -> np.ndarray:
    """Band-limited square, sawtooth or triangle: Fourier series up to Nyquist."""
    nmax = int((rate_hz / 2) // f0_hz)
    if kind == "sawtooth":
        n = np.arange(1, nmax + 1)
        amp = (2 / np.pi) * (-1.0) ** (n + 1) / n
    else:
        n = np.arange(1, nmax + 1, 2)
        amp = (
            4 / (np.pi * n)
            if kind == "square"
            else (8 / np.pi**2) * (-1.0) ** ((n - 1) // 2) / n**2
        )
    n = n[n * f0_hz < rate_hz / 2]
    amp = amp[: n.size]
    out = np.zeros_like(phase)
    for k, a in zip(n, amp, strict=True):
        out += a * portable.sin(k * phase)
    # Normalise to the series' own peak (the Gibbs overshoot of a square tends to
    # (2 / pi) Si(pi) = 1.179 of its amplitude), found on a fine grid over one period,
    # so the level asked for is the peak and nothing clips.
    return out / _series_peak(n, amp) if n.size else out


def _series_peak(n: np.ndarray, amp: np.ndarray) -> float:
    """Peak of ``sum amp_k sin(n_k theta)`` over a period.

    Found on a grid of 64 points per period of the highest harmonic (by an inverse
    FFT), then refined around the best point (a fine grid, then Newton steps).
    """
    m = 64 * int(n.max())
    spec = np.zeros(m // 2 + 1, dtype=np.complex128)
    spec[n] = -0.5j * m * amp  # irfft(spec)[j] = sum amp_k sin(2 pi n_k j / m)
    coarse = np.fft.irfft(spec, m)
    j = int(np.argmax(np.abs(coarse)))
    theta = 2 * np.pi * (j + np.linspace(-1.0, 1.0, 129)) / m
    fine = np.array([portable.dot(row, amp) for row in portable.sin(np.outer(theta, n))])
    t = float(theta[int(np.argmax(np.abs(fine)))])
    for _ in range(4):  # Newton steps on the derivative, to the extremum itself
        d1 = portable.dot(portable.cos(n * t), amp * n)
        d2 = -portable.dot(portable.sin(n * t), amp * n * n)
        if d2 == 0.0:
            break
        t -= d1 / d2
    exact = abs(portable.dot(portable.sin(n * t), amp))
    return float(max(np.abs(coarse[j]), np.max(np.abs(fine)), exact))


def synthesise(
    kind: str,
    *,
    rate_hz: float,
    samples: int,
    level_dbfs: float = -1.0,
    freq_hz: float = 1000.0,
    band_limited: bool = True,
    tones: list[tuple[float, float]] | None = None,
    f_start_hz: float = 20.0,
    f_end_hz: float = 20000.0,
    dc_value: float = 0.0,
    staircase_codes: list[int] | None = None,
    dwell_samples: int = 1,
    bits: int = 8,
    seed: int = 0,
) -> np.ndarray:
    """Synthesise `samples` samples of a test waveform at `rate_hz`.

    Parameters
    ----------
    kind : str
        One of :data:`TONE_KINDS`.
    rate_hz : float
        Sample rate, Hz.
    samples : int
        Length in samples (staircase: ignored, set by codes and dwell).
    level_dbfs : float
        Peak level, dBFS (multitone: the peak of the sum).
    freq_hz : float
        Fundamental for periodic kinds, Hz.
    band_limited : bool
        Square, sawtooth and triangle from their Fourier series up to Nyquist
        (True) or naive (False, aliased).
    tones : list of (freq_hz, level_db)
        Multitone components; levels relative to one another.
    f_start_hz, f_end_hz : float
        Exponential sweep range, Hz (Farina, AES 108th Convention 2000):
        ``x(t) = sin(2 pi f1 T / ln(f2/f1) (exp(t ln(f2/f1) / T) - 1))``.
    dc_value : float
        DC level as a fraction of full scale, -1..1 (kind 'dc').
    staircase_codes : list of int
        Codes the staircase visits (default every code, ascending).
    dwell_samples : int
        Samples each staircase step lasts.
    bits : int
        Ladder width, for the staircase's exact code levels.
    seed : int
        Noise seed.
    """
    n = np.arange(samples)
    amp = portable.db_to_amplitude(level_dbfs)
    nyquist = rate_hz / 2
    if kind in ("sine", "square", "sawtooth", "triangle") and not 0 < freq_hz < nyquist:
        raise OptionError(
            f"{freq_hz:g} Hz is not below Nyquist ({nyquist:g} Hz at the {rate_hz:g} Hz stream "
            "rate): it would play as an alias; lower it or raise --rate-hz",
            field="freq_hz",
        )
    if kind == "multitone" and tones:
        over = [f for f, _db in tones if not 0 < f < nyquist]
        if over:
            raise OptionError(
                f"{over[0]:g} Hz is not below Nyquist ({nyquist:g} Hz at the {rate_hz:g} Hz "
                "stream rate)",
                field="tones",
            )
    phase = 2 * np.pi * freq_hz * n / rate_hz
    if kind == "sine":
        return amp * portable.sin(phase)
    if kind in ("square", "sawtooth", "triangle"):
        if band_limited:
            return amp * _harmonics(kind, phase, freq_hz, rate_hz)
        frac = (freq_hz * n / rate_hz) % 1.0
        if kind == "square":
            return amp * np.where(frac < 0.5, 1.0, -1.0)
        if kind == "sawtooth":
            return amp * (2 * ((frac + 0.5) % 1.0) - 1)
        return amp * (1 - 4 * np.abs(((frac + 0.25) % 1.0) - 0.5))
    if kind == "multitone":
        if not tones:
            raise OptionError("give at least one frequency:level pair", field="tones")
        x = sum(
            portable.db_to_amplitude(db) * portable.sin(2 * np.pi * f * n / rate_hz + 0.7 * i * i)
            for i, (f, db) in enumerate(tones)
        )
        return amp * x / np.max(np.abs(x))
    if kind == "sweep":
        if not 0 < f_start_hz < f_end_hz <= rate_hz / 2:
            raise OptionError(f"need 0 < f_start < f_end <= {rate_hz / 2:g} Hz", field="sweep")
        t = n / rate_hz
        big_t = samples / rate_hz
        k = math.log(f_end_hz / f_start_hz)
        sweep = portable.exp(t * k / big_t) - 1
        return amp * portable.sin(2 * np.pi * f_start_hz * big_t / k * sweep)
    if kind in ("white", "pink"):
        rng = np.random.default_rng(seed)
        w = rng.standard_normal(samples)
        if kind == "pink":  # shape white noise by 1/sqrt(f): -3.01 dB per octave
            spec = np.fft.rfft(w)
            f = np.fft.rfftfreq(samples, 1 / rate_hz)
            spec[1:] /= np.sqrt(f[1:] / f[1])
            spec[0] = 0.0
            w = np.fft.irfft(spec, samples)
        return amp * w / np.max(np.abs(w))
    if kind == "dc":
        if not -1 <= dc_value <= 1:
            raise OptionError(f"must be -1..1 of full scale, got {dc_value!r}", field="dc_value")
        return np.full(samples, float(dc_value))
    if kind == "staircase":
        codes = list(range(1 << bits)) if staircase_codes is None else staircase_codes
        bad = [c for c in codes if not 0 <= c < (1 << bits)]
        if bad:
            raise OptionError(f"codes {bad[:5]} are outside 0..{(1 << bits) - 1}", field="codes")
        half = 1 << (bits - 1)
        return np.repeat((np.asarray(codes, dtype=np.float64) - half) / half, dwell_samples)
    if kind == "impulse":
        x = np.zeros(samples)
        x[samples // 2] = amp
        return x
    if kind == "step":
        x = np.zeros(samples)
        x[samples // 2 :] = amp
        return x
    raise OptionError(f"must be one of {', '.join(TONE_KINDS)}; got {kind!r}", field="kind")


def wavetable(
    kind: str,
    table_bits: int,
    *,
    bits: int,
    level_dbfs: float = -1.0,
    levels: int | None = None,
) -> np.ndarray:
    """One cycle of a waveform in ``2**table_bits`` entries, as ladder codes (no dither).

    Codes are the nearest to ``2**(bits-1) (1 + x)``, mid-scale being silence; with
    `levels` (a PWM slice's compare values ``0..levels-1``) the nearest to
    ``(levels - 1) (1 + x) / 2``.  Codes wider than 16 bits come as uint32.
    """
    if not 2 <= table_bits <= 16:
        raise OptionError(f"must be 2..16, got {table_bits}", field="table_bits")
    size = 1 << table_bits
    x = (
        synthesise(
            kind,
            rate_hz=float(size),
            samples=size,
            level_dbfs=level_dbfs,
            freq_hz=1.0,
            band_limited=False,
        )
        if kind != "sine"
        else (
            portable.db_to_amplitude(level_dbfs) * portable.sin(2 * np.pi * np.arange(size) / size)
        )
    )
    if levels is not None:
        half_l = (levels - 1) / 2
        return np.clip(np.floor(x * half_l + half_l + 0.5), 0, levels - 1).astype(np.uint16)
    half = 1 << (bits - 1)
    dtype = np.uint16 if bits <= 16 else np.uint32
    return np.clip(np.floor(x * half + half + 0.5), 0, (1 << bits) - 1).astype(dtype)


def phase_increments(
    freqs_hz: list[float], rate_hz: float, acc_bits: int = 32
) -> list[tuple[float, int, float]]:
    """Phase-accumulator increments: ``(requested, increment, actual frequency)`` each.

    ``increment = round(f 2^acc_bits / rate)``; the actual frequency is
    ``increment rate / 2^acc_bits`` and the resolution ``rate / 2^acc_bits``.
    """
    out = []
    for f in freqs_hz:
        if not 0 < f < rate_hz / 2:
            raise OptionError(
                f"{f:g} Hz must be between 0 and Nyquist {rate_hz / 2:g} Hz", field="freqs_hz"
            )
        inc = round(f * (1 << acc_bits) / rate_hz)
        out.append((float(f), inc, inc * rate_hz / (1 << acc_bits)))
    return out


def truncation_spur_dbc(table_bits: int) -> float:
    """Worst phase-truncation spur of a sine table addressed by `table_bits` bits, dBc.

    -6.02 dB per address bit (H. T. Nicholas III and H. Samueli, "An Analysis of the
    Output Spectrum of Direct Digital Frequency Synthesizers in the Presence of
    Phase-Accumulator Truncation", 41st Annual Frequency Control Symposium, 1987; the
    bound is quoted from memory and checked by FFT in the tests).
    """
    return -20 * math.log10(2) * table_bits


class ToneSynth:
    """A tone of :class:`~ladderpack.options.ToneSpec`, synthesised at a stream's rate.

    Its length is known before any sample is made (:meth:`samples_for`), so a stream
    can be planned and checked first.  Calling it returns the samples; :attr:`info`
    then holds the frequency used, the cycle counts and the length.

    Parameters
    ----------
    spec : ToneSpec
        The waveform.
    bits : int
        Ladder width (the staircase's exact code levels).
    loop : bool
        The stream repeats: whole cycles fill it and its length is whole words.
    seed : int
        Seed of the noise kinds.
    """

    PERIODIC = ("sine", "square", "sawtooth", "triangle")

    def __init__(self, spec: Any, *, bits: int, loop: bool, seed: int) -> None:
        self.spec, self.bits, self.loop, self.seed = spec, bits, loop, seed
        self.info: dict[str, Any] = {"kind": spec.kind, "level_dbfs": spec.level_dbfs}

    def _dwell(self, rate: float) -> int:
        return max(1, round(self.spec.dwell_ms * 1e-3 * rate))

    def samples_for(self, rate: float, spw: int) -> int:
        """Samples the tone will have at `rate` with `spw` samples per word."""
        s = self.spec
        if s.kind == "staircase":
            n = (len(s.codes) if s.codes is not None else 1 << self.bits) * self._dwell(rate)
            return n * (spw // math.gcd(n, spw)) if self.loop and n % spw else n
        if s.coherent_record is not None:
            rec = s.coherent_record
            if self.loop:
                return rec * spw // math.gcd(rec, spw)
            return rec * max(1, math.ceil(s.seconds * rate / rec))
        if s.cycles is not None:
            n = max(1, round(s.cycles * rate / s.freq_hz))
        else:
            n = max(1, round(s.seconds * rate))
        return max(spw, n - n % spw) if self.loop else n

    def __call__(self, rate: float, spw: int) -> Signal:
        """The tone's samples at `rate` (a :class:`Signal`)."""
        s = self.spec
        n = self.samples_for(rate, spw)
        if s.kind == "staircase":
            dwell = self._dwell(rate)
            x = synthesise(
                s.kind,
                rate_hz=rate,
                samples=0,
                staircase_codes=None if s.codes is None else list(s.codes),
                dwell_samples=dwell,
                bits=self.bits,
            )
            if self.loop and x.size % spw:
                x = np.tile(x, spw // math.gcd(x.size, spw))
            self.info.update(dwell_samples=dwell, steps=x.size // dwell)
            return Signal(x, rate)
        f = s.freq_hz
        if s.coherent_record is not None:
            m = coherent_cycles(s.freq_hz, s.coherent_record, rate)
            f = m * rate / s.coherent_record
            self.info.update(record=s.coherent_record, cycles_per_record=m)
        elif self.loop and (s.kind in self.PERIODIC or s.kind == "multitone"):
            c = loop_cycles(s.freq_hz, n, rate)
            f = c * rate / n
            self.info["cycles"] = c
        self.info["samples"] = n
        if s.kind in self.PERIODIC or s.coherent_record is not None:
            self.info.update(freq_hz=f, requested_freq_hz=s.freq_hz, freq_error_hz=f - s.freq_hz)
        elif s.kind == "multitone" and s.tones is not None:
            self.info["tones_hz"] = [float(t[0]) for t in s.tones]
        elif s.kind == "sweep":
            self.info.update(
                f_start_hz=s.f_start_hz,
                f_end_hz=s.f_end_hz if s.f_end_hz is not None else min(20000.0, 0.45 * rate),
            )
        elif s.kind in ("impulse", "step"):
            self.info["at_sample"] = n // 2
        x = synthesise(
            s.kind,
            rate_hz=rate,
            samples=n,
            level_dbfs=s.level_dbfs,
            freq_hz=f,
            band_limited=s.band_limited,
            tones=None if s.tones is None else [tuple(t) for t in s.tones],
            f_start_hz=s.f_start_hz,
            f_end_hz=s.f_end_hz if s.f_end_hz is not None else min(20000.0, 0.45 * rate),
            dc_value=s.dc_value,
            bits=self.bits,
            seed=self.seed,
        )
        return Signal(x, rate)
