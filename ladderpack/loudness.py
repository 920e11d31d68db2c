"""Loudness (ITU-R BS.1770-4): K-weighting, gated integrated loudness, true peak.

Also the loudness normalisation of the conform stage: the gain that reaches a target
integrated loudness, held back so the true peak stays under a ceiling.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from ladderpack import portable
from ladderpack.audio import Signal
from ladderpack.errors import OptionError

__all__ = [
    "LoudnessMeter",
    "integrated_loudness",
    "k_weighting",
    "loudness_gain",
    "normalise_loudness",
    "true_peak_dbtp",
]


# BS.1770 K-weighting from the analog prototype (B. De Man's re-derivation, which
# reproduces the standard's 48 kHz coefficients; REFERENCES.md section 6).
_SHELF = (1681.974450955533, 3.999843853973347, 0.7071752369554196)
_HIGHPASS = (38.13547087602444, 0.5003270373238773)


def k_weighting(rate_hz: float) -> tuple[tuple[np.ndarray, np.ndarray], ...]:
    """The two K-weighting biquads ``((b, a), (b, a))`` for a sample rate."""
    f0, g, q = _SHELF
    k = math.tan(math.pi * f0 / rate_hz)
    vh = portable.db_to_amplitude(g)
    vb = float(portable.power(vh, 0.4996667741545416))
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


class LoudnessMeter:
    """Integrated loudness and true peak of a signal fed in blocks (ITU-R BS.1770-4).

    K-weighting runs with its filter state carried across blocks, the mean squares
    are summed per 100 ms hop (a gating block is four hops, 400 ms with 75 %
    overlap), and the 4x-oversampled true peak comes from a block-fed resampler;
    so the figures do not depend on the blocks, and memory does not grow with the
    clip.  :func:`integrated_loudness` and :func:`true_peak_dbtp` are this meter
    fed once.

    Parameters
    ----------
    rate_hz : float
        Sample rate, Hz.
    frames : int
        Total frames that will be fed (the true-peak resampler needs the length).
    channels : int
        Channels (columns of each block); all weighted 1 (L, R, C).
    gated : bool
        Measure the integrated loudness (default True).
    true_peak : bool
        Measure the true peak (default True).

    Examples
    --------
    >>> t = np.arange(48000) / 48000
    >>> m = LoudnessMeter(48000.0, t.size)
    >>> m.feed(np.sin(2 * np.pi * 997 * t))
    >>> round(m.integrated_lufs(), 1)
    -3.0
    """

    def __init__(
        self,
        rate_hz: float,
        frames: int,
        channels: int = 1,
        *,
        gated: bool = True,
        true_peak: bool = True,
    ) -> None:
        from ladderpack.conform import StreamResampler

        self.rate_hz = float(rate_hz)
        self.frames = int(frames)
        self.channels = int(channels)
        self.hop = round(0.1 * self.rate_hz)
        (self._bs, self._as), (self._bh, self._ah) = k_weighting(self.rate_hz)
        self._zs = np.zeros((2, self.channels))  # filter states, one column per channel
        self._zh = np.zeros((2, self.channels))
        self._carry = np.zeros((0, self.channels))  # K-weighted samples of an unfinished hop
        self._hops: list[np.ndarray] = []  # per hop: summed squares per channel
        self.gated = gated
        self._up = (
            [StreamResampler(self.rate_hz, 4 * self.rate_hz, self.frames) for _ in range(channels)]
            if true_peak
            else []
        )
        self._peak = 0.0
        self.fed = 0

    def feed(self, block: np.ndarray) -> None:
        """Add the next frames (1-D for one channel, else frames x channels)."""
        from scipy import signal as sps

        data = np.asarray(block, dtype=np.float64)
        if data.ndim == 1:
            data = data[:, None]
        self.fed += data.shape[0]
        last = self.fed >= self.frames
        if data.shape[0]:
            self._peak = max(self._peak, float(np.max(np.abs(data))))
        for ch, rs in enumerate(self._up):
            up = rs.feed(data[:, ch], last=last)
            if up.size:
                self._peak = max(self._peak, float(np.max(np.abs(up))))
        if not self.gated:
            return
        zs, self._zs = sps.lfilter(self._bs, self._as, data, axis=0, zi=self._zs)
        z, self._zh = sps.lfilter(self._bh, self._ah, zs, axis=0, zi=self._zh)
        z = np.concatenate([self._carry, z]) if self._carry.size else z
        whole = z.shape[0] - z.shape[0] % self.hop
        if whole:
            seg = z[:whole].reshape(-1, self.hop, self.channels)
            self._hops.append(np.sum(seg * seg, axis=1))
        self._carry = z[whole:]

    def integrated_lufs(self) -> float:
        """Gated integrated loudness, LUFS; ``-inf`` when every block is under -70 LKFS.

        Raises
        ------
        OptionError
            When fewer than 400 ms were fed.
        """
        hops = np.concatenate(self._hops) if self._hops else np.zeros((0, self.channels))
        if hops.shape[0] < 4:
            raise OptionError(
                "the audio is under 400 ms long; "
                "integrated loudness needs at least 400 ms (ITU-R BS.1770-4 gating blocks): "
                "set the level with headroom_db instead",
                field="loudness_lufs",
            )
        per_hop = hops.sum(axis=1)  # all channels weighted 1
        power = (per_hop[:-3] + per_hop[1:-2] + per_hop[2:-1] + per_hop[3:]) / (4 * self.hop)
        with np.errstate(divide="ignore"):
            lk = -0.691 + 10 * portable.log10(power)
        keep = lk > -70.0
        if not np.any(keep):
            return -math.inf
        rel = -0.691 + 10 * math.log10(float(np.mean(power[keep]))) - 10.0
        keep &= lk > rel
        return -0.691 + 10 * math.log10(float(np.mean(power[keep])))

    def true_peak_dbtp(self) -> float:
        """Largest absolute sample, original or 4x oversampled, in dBTP."""
        return 20 * math.log10(max(self._peak, 1e-300))


def integrated_loudness(x: np.ndarray, rate_hz: float) -> float:
    """Integrated loudness in LUFS (ITU-R BS.1770-4), channels in columns (L, R, C: G = 1).

    Gating blocks of 400 ms (four 100 ms hops, 75 % overlap), absolute gate -70 LKFS,
    relative gate 10 LU below the absolutely gated mean.  Returns ``-inf`` when every
    block is below the absolute gate.
    """
    data = np.asarray(x, dtype=np.float64)
    if data.ndim == 1:
        data = data[:, None]
    m = LoudnessMeter(rate_hz, data.shape[0], data.shape[1], true_peak=False)
    m.feed(data)
    return m.integrated_lufs()


def true_peak_dbtp(x: np.ndarray, rate_hz: float) -> float:
    """True peak in dBTP: the largest sample after 4x oversampling (BS.1770-4 Annex 2).

    Oversampling uses the stream's resampler (libsoxr VHQ), far steeper than the
    Annex's example 48-tap filter.
    """
    data = np.asarray(x, dtype=np.float64)
    if data.ndim == 1:
        data = data[:, None]
    m = LoudnessMeter(rate_hz, data.shape[0], data.shape[1], gated=False)
    m.feed(data)
    return m.true_peak_dbtp()


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
    m = LoudnessMeter(sig.rate_hz, sig.frames)
    m.feed(sig.samples)
    gain, report = loudness_gain(m, target_lufs=target_lufs, true_peak_dbtp=true_peak_dbtp)
    return Signal(sig.samples * portable.db_to_amplitude(gain), sig.rate_hz), gain, report


def loudness_gain(
    meter: LoudnessMeter, *, target_lufs: float, true_peak_dbtp: float = -1.0
) -> tuple[float, dict[str, Any]]:
    """The gain, dB, that brings a metered signal to `target_lufs` under a true-peak ceiling.

    Parameters
    ----------
    meter : LoudnessMeter
        A meter fed the whole signal.
    target_lufs : float
        Integrated loudness wanted, LUFS (<= 0).
    true_peak_dbtp : float
        Ceiling for the true peak after the gain, dBTP (<= 0).

    Returns
    -------
    (float, dict)
        The gain in dB, and ``lufs_in``, ``lufs_out``, ``true_peak_in_dbtp``,
        ``true_peak_out_dbtp``, ``limited_by_true_peak``.

    Raises
    ------
    OptionError
        For a target or ceiling above 0, or a signal whose every block is under the
        -70 LKFS gate.
    """
    for value, field in ((target_lufs, "loudness_lufs"), (true_peak_dbtp, "true_peak_dbtp")):
        if not math.isfinite(value) or value > 0:
            raise OptionError(f"must be a finite level <= 0, got {value!r}", field=field)
    lufs = meter.integrated_lufs()
    if not math.isfinite(lufs):
        raise OptionError(
            "the clip is silent (every block below the -70 LKFS gate)", field="loudness_lufs"
        )
    peak = meter.true_peak_dbtp()
    gain = target_lufs - lufs
    limited = peak + gain > true_peak_dbtp
    if limited:
        gain = true_peak_dbtp - peak
    return gain, {
        "lufs_in": lufs,
        "lufs_out": lufs + gain,
        "true_peak_in_dbtp": peak,
        "true_peak_out_dbtp": peak + gain,
        "limited_by_true_peak": limited,
    }
