"""Measuring captures: sine fits, SINAD/THD/SFDR/ENOB, A-weighting, loudness, true peak.

Definitions follow IEEE Std 1241 / 1057 (sine fitting and dynamic metrics):

* three-parameter fit at a known frequency: least squares of
  ``A cos(wt) + B sin(wt) + C``; four-parameter fit: Gauss-Newton on the frequency
  as well, started from the interpolated FFT peak;
* SINAD = signal rms over the rms of everything else (noise, harmonics, spurs),
  DC excluded; ENOB (IEEE) = log2(FSR / (NAD_rms sqrt(12))), and the full-scale-sine
  form (SINAD - 1.76) / 6.02;
* THD = sqrt(sum of harmonic powers) / fundamental, harmonics 2..K folded into
  0..fs/2; SNR excludes harmonics; SFDR = fundamental over the largest spur.

Loudness follows ITU-R BS.1770-4: K-weighting (pre-filter and RLB high-pass, from the
analog prototype that reproduces the 48 kHz table, so any rate works), 400 ms blocks
with 75 % overlap, an absolute gate at -70 LKFS and a relative gate 10 LU below; true
peak from 4x oversampling (Annex 2).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, TypedDict

import numpy as np

from ladderpack.errors import OptionError
from ladderpack.loudness import integrated_loudness, k_weighting, true_peak_dbtp
from ladderpack.options import AnalysisOptions, MeasureOptions

__all__ = [
    "SineFit",
    "analyse",
    "fit_sine",
    "integrated_loudness",
    "k_weighting",
    "sine_share",
    "steady_part",
    "true_peak_dbtp",
]


@dataclass(frozen=True)
class SineFit:
    """Result of a sine fit ``amplitude cos(2 pi f t + phase) + offset``."""

    freq_hz: float
    amplitude: float
    phase_rad: float
    offset: float
    residual: np.ndarray

    def model(self, t: np.ndarray) -> np.ndarray:
        """The fitted sine at times `t` (seconds)."""
        return self.amplitude * np.cos(2 * np.pi * self.freq_hz * t + self.phase_rad) + self.offset


def _fit3(y: np.ndarray, t: np.ndarray, f: float) -> tuple[np.ndarray, np.ndarray]:
    w = 2 * np.pi * f * t
    d = np.column_stack([np.cos(w), np.sin(w), np.ones_like(t)])
    coef, *_ = np.linalg.lstsq(d, y, rcond=None)
    return coef, d


def _peak_freq(y: np.ndarray, rate_hz: float) -> float:
    """Interpolated FFT peak (Hann window, parabolic on log magnitude)."""
    n = y.size
    spec = np.abs(np.fft.rfft((y - y.mean()) * np.hanning(n)))
    k = int(np.argmax(spec[1:])) + 1
    if 1 <= k < spec.size - 1:
        a, b, c = np.log(spec[k - 1 : k + 2] + 1e-300)
        k = k + 0.5 * (a - c) / (a - 2 * b + c)
    return float(k * rate_hz / n)


def fit_sine(
    y: np.ndarray, rate_hz: float, *, freq_hz: float | None = None, iterations: int = 12
) -> SineFit:
    """IEEE Std 1057/1241 sine fit.

    Parameters
    ----------
    y : numpy.ndarray
        Samples.
    rate_hz : float
        Sample rate, Hz.
    freq_hz : float, optional
        Known frequency: three-parameter fit.  Omitted: four-parameter fit
        (frequency too), started from the interpolated FFT peak.
    iterations : int
        Most Gauss-Newton steps of the four-parameter fit.
    """
    y = np.asarray(y, dtype=np.float64)
    if y.size < 8:
        raise OptionError(f"need at least 8 samples to fit a sine, got {y.size}", field="samples")
    t = np.arange(y.size) / rate_hz
    f = float(freq_hz) if freq_hz is not None else _peak_freq(y, rate_hz)
    coef, _ = _fit3(y, t, f)
    if freq_hz is None:
        last = math.inf
        for _ in range(iterations):
            a, b, _c = coef
            w = 2 * np.pi * f * t
            d = np.column_stack(
                [np.cos(w), np.sin(w), np.ones_like(t), t * (-a * np.sin(w) + b * np.cos(w))]
            )
            step, *_ = np.linalg.lstsq(d, y, rcond=None)
            coef = step[:3]
            dw = step[3]
            f += dw / (2 * np.pi)
            if abs(dw) >= last:
                break
            last = abs(dw)
        coef, _ = _fit3(y, t, f)
    a, b, c = coef
    amp = float(math.hypot(a, b))
    phase = float(math.atan2(-b, a))
    resid = y - (a * np.cos(2 * np.pi * f * t) + b * np.sin(2 * np.pi * f * t) + c)
    return SineFit(f, amp, phase, float(c), resid)


#: 1 / golden ratio, the interval kept at each step of a golden-section search.
_INV_PHI = (math.sqrt(5.0) - 1.0) / 2.0


def _golden_min(func: Callable[[float], float], lo: float, hi: float, xtol: float) -> float:
    """Smallest value of a unimodal `func` on [lo, hi], by golden-section search.

    Kiefer's method (J. Kiefer, "Sequential minimax search for a maximum", Proc. AMS
    4(3), 1953): the bracket shrinks by 1/phi per evaluation until it is under `xtol`.
    """
    a, b = lo, hi
    c, d = b - _INV_PHI * (b - a), a + _INV_PHI * (b - a)
    fc, fd = func(c), func(d)
    while b - a > xtol:
        if fc < fd:
            b, d, fd = d, c, fc
            c = b - _INV_PHI * (b - a)
            fc = func(c)
        else:
            a, c, fc = c, d, fd
            d = a + _INV_PHI * (b - a)
            fd = func(d)
    return min(fc, fd)


def _largest_spur(
    resid: np.ndarray, t: np.ndarray, rate_hz: float, power: np.ndarray, inband: np.ndarray
) -> float:
    """Amplitude of the largest spur in the fit residual.

    The highest few peaks of the Hann periodogram are candidates; each one's amplitude
    comes from a three-parameter least-squares fit at the frequency that maximises it
    (bounded search within one bin), so a spur between bins is not read low or high by
    the window's scalloping.
    """
    n = resid.size
    bin_hz = rate_hz / n
    p = np.where(inband, power, 0.0)
    best = 0.0
    for k in np.argsort(p)[::-1][:4]:
        if p[k] <= 0:
            break
        f = float(k * bin_hz)

        def neg_amp(fq: float) -> float:
            coef, _ = _fit3(resid, t, fq)
            return -math.hypot(coef[0], coef[1])

        lo_f, hi_f = max(f - bin_hz, 1e-3), min(f + bin_hz, rate_hz / 2)
        best = max(best, -_golden_min(neg_amp, lo_f, hi_f, bin_hz * 1e-4), -neg_amp(f))
    return best


def a_weighting_gain(freqs_hz: np.ndarray) -> np.ndarray:
    """A-weighting as a power gain (IEC 61672-1 Annex E)."""
    from ladderpack.shaping import a_weighting_db

    return 10 ** (a_weighting_db(np.maximum(np.asarray(freqs_hz), 1e-3)) / 10)


def _fold(f: float, rate_hz: float) -> float:
    f = f % rate_hz
    return rate_hz - f if f > rate_hz / 2 else f


class ToneAnalysis(TypedDict):
    """Dynamic metrics of a test tone (IEEE Std 1241 definitions); see :func:`analyse`."""

    freq_hz: float
    amplitude: float
    amplitude_dbfs: float
    offset: float
    phase_rad: float
    sinad_db: float
    snr_db: float
    thd_db: float
    thd_n_db: float
    sfdr_db: float
    enob_bits: float
    enob_sine_bits: float
    noise_dbfs: float
    harmonics_dbc: list[float]
    band_hz: list[float]
    a_weighted: bool
    tone_weighted: bool
    window: str
    merged_harmonics: list[list[int]]
    hidden_harmonics: dict[str, list[int]]
    warnings: list[str]


def analyse(
    y: np.ndarray,
    rate_hz: float,
    *,
    freq_hz: float | None = None,
    full_scale: float = 1.0,
    harmonics: int = 10,
    band_hz: tuple[float, float] | None = None,
    a_weighted: bool = False,
    weight_tone: bool = False,
) -> ToneAnalysis:
    """Dynamic metrics of a captured test tone.

    Parameters
    ----------
    y : numpy.ndarray
        Samples (any units; `full_scale` is the peak of a full-scale sine in
        the same units).
    rate_hz : float
        Sample rate of the capture, Hz.
    freq_hz : float, optional
        Test-tone frequency if known (three-parameter fit); otherwise found.
    full_scale : float
        Peak amplitude of a full-scale sine; FSR = 2 x full_scale.
    harmonics : int
        Highest harmonic counted in THD (2..harmonics), default 10.
    band_hz : (float, float), optional
        Band for noise and distortion, Hz (default 0..fs/2, DC excluded).
    a_weighted : bool
        Weight noise and distortion by IEC 61672-1 A-weighting.  The tone itself is
        not weighted (the usual practice, as in AES17: weighted noise against the
        unweighted signal), unless `weight_tone`.
    weight_tone : bool
        With `a_weighted`, weight the tone too: the ratio of weighted powers (a 100 Hz
        tone then reads 19.1 dB lower, its A-weighting).

    Returns
    -------
    dict
        freq_hz, amplitude, amplitude_dbfs, offset, sinad_db, snr_db, thd_db,
        thd_n_db, sfdr_db, enob_bits (IEEE), enob_sine_bits ((SINAD-1.76)/6.02),
        noise_dbfs, harmonics_dbc, window and its correction.
    """
    y = np.asarray(y, dtype=np.float64)
    fit = fit_sine(y, rate_hz, freq_hz=freq_hz)
    f0 = fit.freq_hz
    t = np.arange(y.size) / rate_hz
    # Harmonics fitted jointly (cos and sin of each, least squares) on the fit residual;
    # what remains after removing them is the noise, measured directly rather than as
    # the difference of two large powers.
    # Harmonics that fold onto the same frequency (within the record's resolution) are
    # one column, not two that split the power arbitrarily; those that fold onto DC,
    # Nyquist or the fundamental itself cannot be told from them and are not fitted.
    resolution = rate_hz / y.size
    cols: list[np.ndarray] = []
    kept: list[float] = []
    groups: list[list[int]] = []
    hidden: dict[str, list[int]] = {"dc": [], "nyquist": [], "fundamental": []}
    for k in range(2, harmonics + 1):
        fk = _fold(k * f0, rate_hz)
        if fk < resolution:
            hidden["dc"].append(k)
            continue
        if abs(fk - rate_hz / 2) < resolution:
            hidden["nyquist"].append(k)
            continue
        if abs(fk - f0) < resolution:
            hidden["fundamental"].append(k)
            continue
        for gi, g in enumerate(kept):
            if abs(fk - g) < resolution:
                groups[gi].append(k)
                break
        else:
            w = 2 * np.pi * fk * t
            cols += [np.cos(w), np.sin(w)]
            kept.append(fk)
            groups.append([k])
    harm_amp = [0.0] * (harmonics - 1)
    noise_resid = fit.residual
    if cols:
        d = np.column_stack(cols)
        coef, *_ = np.linalg.lstsq(d, fit.residual, rcond=None)
        noise_resid = fit.residual - d @ coef
        for i, group in enumerate(groups):  # a merged group's line is its lowest's
            harm_amp[group[0] - 2] = math.hypot(coef[2 * i], coef[2 * i + 1])
    warnings: list[str] = []
    if freq_hz is not None:
        # a given frequency the tone does not have: the fit at it leaks the tone into the
        # residual (a WAV header's whole-hertz rate does this to a tone at its exact rate)
        free = fit_sine(y, rate_hz)
        cost = 10 * math.log10(
            max(float(np.mean(fit.residual**2)), 1e-300)
            / max(float(np.mean(free.residual**2)), 1e-300)
        )
        if cost > 0.1:  # the given frequency leaves more than 2 % more residual power
            warnings.append(
                f"the tone is at {free.freq_hz:.6f} Hz by a free fit, "
                f"{free.freq_hz - freq_hz:+.6f} Hz from --freq-hz {freq_hz:g}, which costs "
                f"{cost:.2f} dB of SINAD: drop --freq-hz, or give the capture's exact rate "
                "with --rate-hz"
            )
    merged = [g for g in groups if len(g) > 1]
    if merged or any(hidden.values()):
        said = [
            f"harmonics {', '.join(map(str, g))} fall together at "
            f"{_fold(g[0] * f0, rate_hz):.6g} Hz (one line, counted as harmonic {g[0]})"
            for g in merged
        ] + [
            f"harmonic{'s' if len(ks) > 1 else ''} {', '.join(map(str, ks))} "
            f"fall{'' if len(ks) > 1 else 's'} on "
            f"{ {'dc': 'DC', 'nyquist': 'Nyquist'}.get(where, 'the fundamental') } "
            "and cannot be measured"
            for where, ks in hidden.items()
            if ks
        ]
        warnings.append(
            "the tone is a simple fraction of the sample rate: "
            + "; ".join(said)
            + ". Distortion hides there: use a tone whose cycle count in the record is "
            "relatively prime to its length (IEEE Std 1241, coherent sampling)"
        )
    n = y.size
    win = np.hanning(n)
    freqs = np.fft.rfftfreq(n, 1 / rate_hz)

    def periodogram(x: np.ndarray) -> np.ndarray:
        # power per bin of a Hann-windowed spectrum, corrected by the window's mean square
        p = np.abs(np.fft.rfft(x * win)) ** 2 / (np.sum(win**2) * n / 2)
        p[0] = 0.0
        if n % 2 == 0:
            p[-1] /= 2
        return p

    lo, hi = band_hz if band_hz is not None else (0.0, rate_hz / 2)
    inband = (freqs >= lo) & (freqs <= hi) & (freqs > 0)
    limited = band_hz is not None or a_weighted

    def weight_at(f: float) -> float:
        return float(a_weighting_gain(np.array([f]))[0]) if a_weighted else 1.0

    # Signal, harmonics and noise weighted the same way: each line by the weighting at its
    # own frequency, the noise spectrum bin by bin.
    sig_power = fit.amplitude**2 / 2 * (weight_at(f0) if weight_tone else 1.0)
    harm_power = 0.0
    for k, a in enumerate(harm_amp, start=2):  # each line once (merged ones are 0)
        fk = _fold(k * f0, rate_hz)
        if a > 0 and lo <= fk <= hi:
            harm_power += a * a / 2 * weight_at(fk)
    if limited:
        pw = periodogram(noise_resid)
        weight = a_weighting_gain(freqs) if a_weighted else np.ones_like(freqs)
        noise_power = float(np.sum(pw[inband] * weight[inband]))
    else:
        noise_power = float(np.mean(noise_resid**2))
    noise_power = max(noise_power, 1e-300)
    nad_power = noise_power + harm_power
    fsr = 2 * full_scale
    nad_rms = math.sqrt(nad_power)
    spur = _largest_spur(fit.residual, t, rate_hz, periodogram(fit.residual), inband)
    sinad = 10 * math.log10(sig_power / nad_power)
    return {
        "freq_hz": f0,
        "amplitude": fit.amplitude,
        "amplitude_dbfs": 20 * math.log10(max(fit.amplitude, 1e-300) / full_scale),
        "offset": fit.offset,
        "phase_rad": fit.phase_rad,
        "sinad_db": sinad,
        "snr_db": 10 * math.log10(sig_power / noise_power),
        "thd_db": 10 * math.log10(max(harm_power, 1e-300) / sig_power),
        "thd_n_db": -sinad,
        "sfdr_db": 20 * math.log10(fit.amplitude / max(spur, 1e-300)),
        "enob_bits": math.log2(fsr / (nad_rms * math.sqrt(12))),
        "enob_sine_bits": (sinad - 1.76) / 6.02,
        "noise_dbfs": 10 * math.log10(noise_power / (full_scale**2 / 2)),
        "harmonics_dbc": [20 * math.log10(max(a, 1e-300) / fit.amplitude) for a in harm_amp],
        "band_hz": [lo, hi],
        "a_weighted": a_weighted,
        "tone_weighted": bool(a_weighted and weight_tone),
        "merged_harmonics": merged,
        "hidden_harmonics": {k: v for k, v in hidden.items() if v},
        "warnings": warnings,
        "window": "hann (power-corrected) for band-limited and weighted noise; harmonics and "
        "spurs by least-squares fits; time-domain residual otherwise",
    }


def steady_part(y: np.ndarray, rate_hz: float, *, tolerance_db: float = 0.2) -> slice:
    """The steady part of a capture: the longest run of blocks at the tone's level.

    The capture is cut into blocks of 20 periods of its strongest tone (at least 5 ms
    and 32 samples), so a block's RMS varies by well under `tolerance_db` for a steady
    sine; the reference level is the median RMS of the blocks above half the loudest,
    and the steady part is the longest run of consecutive blocks within `tolerance_db`
    of it, less one block at each end that borders something else (our own rule: common
    practice). Ramps, fades and silence at either end fall outside it.

    Parameters
    ----------
    y : numpy.ndarray
        Samples.
    rate_hz : float
        Sample rate, Hz.
    tolerance_db : float
        How far a block's RMS may stray from the reference, dB.
    """
    y = np.asarray(y, dtype=np.float64)
    if y.size < 64:
        return slice(0, y.size)
    f0 = max(_peak_freq(y, rate_hz), 1.0)
    size = max(32, round(max(0.005, 20.0 / f0) * rate_hz))
    count = y.size // size
    if count < 3:
        return slice(0, y.size)
    blocks = y[: count * size].reshape(count, size)
    rms = np.sqrt(np.mean((blocks - blocks.mean(axis=1, keepdims=True)) ** 2, axis=1))
    loud = rms[rms >= 0.5 * rms.max()]
    ref = float(np.median(loud))
    ok = np.abs(20 * np.log10(np.maximum(rms, 1e-300) / max(ref, 1e-300))) <= tolerance_db
    best, run_start = (0, 0), -1
    for i, good in enumerate([*ok, False]):
        if good and run_start < 0:
            run_start = i
        elif not good and run_start >= 0:
            if i - run_start > best[1] - best[0]:
                best = (run_start, i)
            run_start = -1
    first, last = best
    if first > 0:
        first += 1  # the block next to a ramp or silence may hold a little of it
    if last < count:
        last -= 1
    if last <= first:
        return slice(0, y.size)
    lo, hi = first * size, last * size
    if last == count:
        hi = y.size  # the last, partial block joins a steady end
    return slice(lo, hi)


def sine_share(y: np.ndarray, rate_hz: float) -> float:
    """Share of a capture's AC power that a fitted sine explains (1.0 for a clean tone)."""
    y = np.asarray(y, dtype=np.float64)
    fit = fit_sine(y, rate_hz)
    ac = float(np.mean((y - y.mean()) ** 2))
    return min(1.0, (fit.amplitude**2 / 2) / ac) if ac > 0 else 0.0


def analysis_band(
    rate_hz: float, low_hz: float | None, high_hz: float | None
) -> tuple[float, float] | None:
    """The band to analyse, Hz.

    None for the whole record, else (low, high) with the missing edge DC or Nyquist.
    """
    if low_hz is None and high_hz is None:
        return None
    return (low_hz or 0.0, high_hz if high_hz is not None else rate_hz / 2)


def measure_capture(
    path: str, spec: MeasureOptions, analysis: AnalysisOptions
) -> tuple[dict[str, Any], np.ndarray]:
    """Read a captured test tone and analyse its steady part (``ladderpack measure``).

    Parameters
    ----------
    path : str
        A sound file (WAV, FLAC...) or a CSV of samples (a scope's export).
    spec : MeasureOptions
        Its rate (when the file does not say or says it rounded), channel, full scale and
        trims.
    analysis : AnalysisOptions
        The tone, harmonics, band and weighting of the analysis.

    Returns
    -------
    report : dict
        :func:`analyse`'s figures, with ``rate_hz`` and its source, the samples analysed
        and how they were chosen, the sine's share of the power, and warnings.
    samples : numpy.ndarray
        The samples analysed (for a spectrum plot).

    Raises
    ------
    OptionError
        For a CSV without a rate, or trims that leave nothing.
    """
    from ladderpack.audio import load_clip, read_capture_csv

    rate_note = "from the file"
    if path.lower().endswith((".csv", ".txt")):
        y, stated, how = read_capture_csv(path)
        if spec.rate_hz is not None:
            rate, rate_note = float(spec.rate_hz), "from --rate-hz"
        elif stated is not None:
            rate, rate_note = stated, f"from {how}"
        else:
            raise OptionError(
                "a CSV capture without a sample interval in its header or a time column "
                "needs --rate-hz",
                field="rate_hz",
            )
    else:
        sig = load_clip(path, channel=spec.channel)
        y, rate = sig.samples, sig.rate_hz
        if spec.rate_hz is not None:  # the user knows better than the header (a rounded rate)
            rate_note = f"from --rate-hz, over the file's header ({rate:g} Hz)"
            rate = float(spec.rate_hz)
    total = y.size
    if spec.trim_start_s is not None or spec.trim_end_s is not None:
        lo = round((spec.trim_start_s or 0.0) * rate)
        hi = total - round((spec.trim_end_s or 0.0) * rate)
        if not 0 <= lo < hi - 8:
            raise OptionError(
                f"the trims leave nothing of the {total / rate:.3f} s capture", field="trim"
            )
        part, part_note = slice(lo, hi), "as trimmed"
    else:
        part = steady_part(y, rate)
        part_note = "the steady part, found" if part != slice(0, total) else "all of it"
    y = y[part]
    share = sine_share(y, rate)
    r: dict[str, Any] = dict(
        analyse(
            y,
            rate,
            freq_hz=analysis.freq_hz,
            full_scale=spec.full_scale,
            harmonics=analysis.harmonics,
            band_hz=analysis_band(rate, analysis.band_low_hz, analysis.band_high_hz),
            a_weighted=analysis.a_weighting,
            weight_tone=analysis.weight_tone,
        )
    )
    r["rate_hz"] = rate
    r["rate_source"] = rate_note
    r["analysed_samples"] = [part.start or 0, part.stop if part.stop is not None else total]
    r["analysed_part"] = part_note
    r["total_samples"] = total
    r["sine_share"] = share
    cycles = r["freq_hz"] * y.size / rate
    if cycles < 2:
        r["warnings"] = [
            *(r.get("warnings") or []),
            f"the record holds {cycles:.3g} cycles of a {r['freq_hz']:.4g} Hz tone at "
            f"{rate:g} Hz ({rate_note}): an implausible rate; give the capture's rate with "
            "--rate-hz",
        ]
    r["warnings"] = list(r.get("warnings") or []) + (
        [
            f"the capture does not look like a sine: a fitted sine holds only "
            f"{100 * share:.1f} % of its power, so these figures mean little"
        ]
        if share < 0.5
        else []
    )
    return r, y
