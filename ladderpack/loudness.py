"""Loudness (ITU-R BS.1770-4): K-weighting, gated integrated loudness, true peak.

Also the loudness normalisation of the conform stage: the gain that reaches a target
integrated loudness, held back so the true peak stays under a ceiling.
"""

from __future__ import annotations

import math

import numpy as np

from ladderpack.audio import Signal
from ladderpack.errors import OptionError

__all__ = ["integrated_loudness", "k_weighting", "normalise_loudness", "true_peak_dbtp"]


# BS.1770 K-weighting from the analog prototype (B. De Man's re-derivation, which
# reproduces the standard's 48 kHz coefficients; REFERENCES.md section 6).
_SHELF = (1681.974450955533, 3.999843853973347, 0.7071752369554196)
_HIGHPASS = (38.13547087602444, 0.5003270373238773)


def k_weighting(rate_hz: float) -> tuple[tuple[np.ndarray, np.ndarray], ...]:
    """The two K-weighting biquads ``((b, a), (b, a))`` for a sample rate."""
    f0, g, q = _SHELF
    k = math.tan(math.pi * f0 / rate_hz)
    vh = 10 ** (g / 20)
    vb = vh**0.4996667741545416
    a0 = 1 + k / q + k * k
    b_shelf = np.array(
        [(vh + vb * k / q + k * k) / a0, 2 * (k * k - vh) / a0, (vh - vb * k / q + k * k) / a0]
    )
    a_shelf = np.array([1.0, 2 * (k * k - 1) / a0, (1 - k / q + k * k) / a0])
    f0, q = _HIGHPASS
    k = math.tan(math.pi * f0 / rate_hz)
    a0 = 1 + k / q + k * k
    b_hp = np.array([1.0, -2.0, 1.0])
    a_hp = np.array([1.0, 2 * (k * k - 1) / a0, (1 - k / q + k * k) / a0])
    return (b_shelf, a_shelf), (b_hp, a_hp)


def integrated_loudness(x: np.ndarray, rate_hz: float) -> float:
    """Integrated loudness in LUFS (ITU-R BS.1770-4), channels in columns (L, R, C: G = 1).

    Returns ``-inf`` when every block is below the absolute gate.
    """
    from scipy import signal as sps

    data = np.asarray(x, dtype=np.float64)
    if data.ndim == 1:
        data = data[:, None]
    (bs, as_), (bh, ah) = k_weighting(rate_hz)
    z = sps.lfilter(bh, ah, sps.lfilter(bs, as_, data, axis=0), axis=0)
    block = round(0.4 * rate_hz)
    hop = round(0.1 * rate_hz)
    if data.shape[0] < block:
        raise OptionError("need at least 400 ms for integrated loudness", field="samples")
    starts = range(0, data.shape[0] - block + 1, hop)
    sq = np.cumsum(np.vstack([np.zeros((1, z.shape[1])), z**2]), axis=0)
    ms = np.array([(sq[s + block] - sq[s]) / block for s in starts])  # (blocks, channels)
    power = ms.sum(axis=1)
    with np.errstate(divide="ignore"):
        lk = -0.691 + 10 * np.log10(power)
    keep = lk > -70.0
    if not np.any(keep):
        return -math.inf
    rel = -0.691 + 10 * math.log10(float(np.mean(power[keep]))) - 10.0
    keep &= lk > rel
    return -0.691 + 10 * math.log10(float(np.mean(power[keep])))


def true_peak_dbtp(x: np.ndarray, rate_hz: float) -> float:
    """True peak in dBTP: the largest sample after 4x oversampling (BS.1770-4 Annex 2).

    Oversampling uses the project's windowed-sinc resampler, far steeper than the
    Annex's example 48-tap filter.
    """
    from ladderpack.conform import resample

    data = np.asarray(x, dtype=np.float64)
    if data.ndim == 1:
        data = data[:, None]
    peak = 0.0
    for ch in range(data.shape[1]):
        up = resample(Signal(data[:, ch], float(rate_hz)), 4 * float(rate_hz), bits=16).samples
        peak = max(peak, float(np.max(np.abs(up))), float(np.max(np.abs(data[:, ch]))))
    return 20 * math.log10(max(peak, 1e-300))


_true_peak = true_peak_dbtp  # normalise_loudness's parameter shadows the name


def normalise_loudness(
    sig: Signal, *, target_lufs: float, true_peak_dbtp: float = -1.0
) -> tuple[Signal, float, dict[str, float]]:
    """Scale to an integrated loudness (ITU-R BS.1770-4) under a true-peak ceiling.

    The gain that reaches `target_lufs` is reduced if the 4x-oversampled true
    peak would exceed `true_peak_dbtp`, so the target never clips.

    Returns
    -------
    (Signal, float, dict)
        The scaled signal, the gain in dB, and the measured loudness and true
        peak before and after (``lufs_in``, ``lufs_out``, ``true_peak_in_dbtp``,
        ``true_peak_out_dbtp``, ``limited_by_true_peak``).
    """
    for value, field in ((target_lufs, "loudness_lufs"), (true_peak_dbtp, "true_peak_dbtp")):
        if not math.isfinite(value) or value > 0:
            raise OptionError(f"must be a finite level <= 0, got {value!r}", field=field)
    lufs = integrated_loudness(sig.samples, sig.rate_hz)
    if not math.isfinite(lufs):
        raise OptionError(
            "the clip is silent (every block below the -70 LKFS gate)", field="loudness_lufs"
        )
    peak = _true_peak(sig.samples, sig.rate_hz)
    gain = target_lufs - lufs
    limited = peak + gain > true_peak_dbtp
    if limited:
        gain = true_peak_dbtp - peak
    out = Signal(sig.samples * 10 ** (gain / 20), sig.rate_hz)
    return (
        out,
        gain,
        {
            "lufs_in": lufs,
            "lufs_out": lufs + gain,
            "true_peak_in_dbtp": peak,
            "true_peak_out_dbtp": peak + gain,
            "limited_by_true_peak": limited,
        },
    )
