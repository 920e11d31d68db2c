"""Noise-shaping filters: a catalogue of published sets and a designer for any rate.

Conventions (Lipshitz, Vanderkooy & Wannamaker, "Minimally Audible Noise
Shaping", JAES 39(11), 1991): the requantiser feeds its total error back so
the output is ``Y = X + NTF(z) E`` with a monic noise transfer function

    NTF(z) = B(z) / A(z),  B = 1 + b1 z^-1 + ...,  A = 1 + a1 z^-1 + ...

The published error-feedback sets are FIR (``A = 1``) and are quoted as taps
``h_k`` of ``NTF = 1 - sum h_k z^-k``, so ``b_k = -h_k``.

Gerzon-Craven noise-shaping theorem (AES 87th Convention, 1989, preprint 2822):
for a monic, minimum-phase NTF the average of ``ln |NTF|`` over 0..fs/2 is
zero, so pushing noise down in one band pushes it up elsewhere by the same
log-area.  The designer therefore minimises *weighted* noise: with a
weighting ``W(f)`` (how audible noise at ``f`` is), the best monic filter of
order K is the linear-prediction (prediction-error) filter of a process whose
spectrum is ``W``: it minimises ``integral W |NTF|^2`` and is minimum phase by
construction (autocorrelation method, Levinson-Durbin).  Its peak gain is then
bounded, either by flattening the weighting (FIR form) or by placing poles at
``gamma`` times the zeros, ``NTF = A(z) / A(z / gamma)`` (IIR form, the
bandwidth-expansion used for delta-sigma NTFs; Schreier & Temes,
*Understanding Delta-Sigma Data Converters*, 2005, on bounding the NTF's
out-of-band gain).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ladderpack import portable
from ladderpack.defaults import SHAPER_NAMES, WEIGHTING_NAMES
from ladderpack.errors import OptionError
from ladderpack.options import NtfPlotSpec

__all__ = [
    "CATALOGUE",
    "NOISE_GRID_POINTS",
    "WEIGHTINGS",
    "Shaper",
    "a_weighting_db",
    "design_shaper",
    "get_shaper",
    "predict_noise",
    "threshold_db",
    "weighting",
]

_GRID = 4096  # frequency points over 0..fs/2 for integrals

#: Frequency points over 0..fs/2 of the designer's and the noise figures' integrals: an
#: audio band narrower than fs / 2 / this holds none of them.
NOISE_GRID_POINTS = _GRID


@dataclass(frozen=True)
class Shaper:
    """A noise-shaping filter.

    Attributes
    ----------
    name : str
        Catalogue name or ``"designed"``.
    b : tuple of float
        NTF numerator coefficients after the leading 1.
    a : tuple of float
        NTF denominator coefficients after the leading 1 (zeros for FIR),
        same length as `b`.
    design_rate_hz : float or None
        Sample rate the filter was designed for (None: any rate).
    source : str
        Where the coefficients come from.
    """

    name: str
    b: tuple[float, ...]
    a: tuple[float, ...]
    design_rate_hz: float | None
    source: str

    @property
    def order(self) -> int:
        """Filter order K."""
        return len(self.b)

    def response(self, freqs_hz: np.ndarray, rate_hz: float) -> np.ndarray:
        """Complex NTF at the given frequencies for sample rate `rate_hz`."""
        w = 2 * np.pi * np.asarray(freqs_hz, dtype=np.float64) / rate_hz
        return _freqz([1.0, *self.b], [1.0, *self.a], w)

    def impulse(self, n: int = 4096) -> np.ndarray:
        """First `n` samples of the NTF's impulse response."""
        from scipy import signal as sps  # only needed here

        x = np.zeros(n)
        x[0] = 1.0
        return sps.lfilter([1.0, *self.b], [1.0, *self.a], x)

    def to_dict(self) -> dict[str, object]:
        """Plain-data description."""
        return {
            "name": self.name,
            "b": list(self.b),
            "a": list(self.a),
            "order": self.order,
            "design_rate_hz": self.design_rate_hz,
            "source": self.source,
        }


def _poly_at(coeffs: np.ndarray, c: np.ndarray, s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Real and imaginary parts of ``sum_k coeffs[k] z^-k`` at ``z^-1 = c - i s``.

    Horner's rule in real arithmetic, one IEEE operation per ufunc: the same bits on
    every CPU.
    """
    pr = np.full_like(c, float(coeffs[-1]))
    pi = np.zeros_like(c)
    for coef in np.asarray(coeffs, dtype=np.float64)[-2::-1]:
        pr, pi = pr * c + pi * s + float(coef), pi * c - pr * s
    return pr, pi


def _num_den(
    b: np.ndarray | list[float], a: np.ndarray | list[float], omega: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Real and imaginary parts of b(z) and a(z) at `omega`, the same on every machine."""
    w = np.asarray(omega, dtype=np.float64)
    c, s = portable.cos(w), portable.sin(w)
    return (*_poly_at(np.asarray(b), c, s), *_poly_at(np.asarray(a), c, s))


def _freqz(
    b: np.ndarray | list[float], a: np.ndarray | list[float], omega: np.ndarray
) -> np.ndarray:
    """Frequency response of b(z)/a(z) at angular frequencies `omega` (rad/sample)."""
    br, bi, ar, ai = _num_den(b, a, omega)
    den = ar * ar + ai * ai
    out = np.empty(br.shape, dtype=np.complex128)
    out.real = (br * ar + bi * ai) / den
    out.imag = (bi * ar - br * ai) / den
    return out


def _power_response(
    b: np.ndarray | list[float], a: np.ndarray | list[float], omega: np.ndarray
) -> np.ndarray:
    """``|b(z)/a(z)|**2`` at `omega`, computed the same way on every machine."""
    br, bi, ar, ai = _num_den(b, a, omega)
    return (br * br + bi * bi) / (ar * ar + ai * ai)


def _on_grid(x: np.ndarray) -> np.ndarray:
    """Coefficients rounded to multiples of 2**-40, with no negative zero.

    A last-bit difference anywhere upstream cannot then reach the sidecar or the quantiser.
    """
    return np.rint(np.asarray(x, dtype=np.float64) * 2.0**40) / 2.0**40 + 0.0


def _fir(name: str, taps: tuple[float, ...], rate: float | None, source: str) -> Shaper:
    return Shaper(name, tuple(-t for t in taps), tuple(0.0 for _ in taps), rate, source)


_LVW91 = "Lipshitz, Vanderkooy & Wannamaker, 'Minimally Audible Noise Shaping', JAES 39(11), 1991"
_W92 = "Wannamaker, 'Psychoacoustically Optimal Noise Shaping', JAES 40(7/8), 1992"

#: Fixed filters.  Published sets: coefficients as transcribed in two independent
#: secondary sources that agree digit for digit (see REFERENCES.md section 3.2).
CATALOGUE: dict[str, Shaper] = {
    s.name: s
    for s in (
        _fir("none", (), None, "no shaping"),
        _fir("first-order", (1.0,), None, "NTF = 1 - z^-1"),
        _fir("second-order", (2.0, -1.0), None, "NTF = (1 - z^-1)^2"),
        _fir(
            "modified-e-9",
            (1.662, -1.263, 0.4827, -0.2913, 0.1268, -0.1124, 0.03252, -0.01265, -0.03524),
            44100.0,
            _LVW91 + ", appendix (2)",
        ),
        _fir(
            "improved-e-5",
            (2.033, -2.165, 1.959, -1.590, 0.6149),
            44100.0,
            _LVW91 + ", appendix (5)",
        ),
        _fir(
            "improved-e-9",
            (2.847, -4.685, 6.214, -7.184, 6.639, -5.032, 3.263, -1.632, 0.4191),
            44100.0,
            _LVW91 + ", appendix (6)",
        ),
        _fir("f-weighted-3", (1.623, -0.982, 0.109), 44100.0, _W92 + ", Table 3"),
        _fir(
            "f-weighted-9",
            (2.412, -3.370, 3.937, -4.174, 3.353, -2.205, 1.281, -0.569, 0.0847),
            44100.0,
            _W92 + ", Table 3",
        ),
    )
}

assert (*CATALOGUE, "designed") == SHAPER_NAMES

#: Largest relative distance from a published filter's design rate allowed without force.
RATE_TOLERANCE = 0.05


def get_shaper(name: str, rate_hz: float, *, force: bool = False) -> Shaper:
    """Look up a catalogue filter and check it suits the stream rate.

    Raises
    ------
    OptionError
        For an unknown name, or a published filter more than 5 % from its
        design rate unless `force` is set (its notch would sit at the wrong
        frequency).
    """
    if name not in CATALOGUE:
        raise OptionError(
            f"must be one of {', '.join([*CATALOGUE, 'designed'])}; got {name!r}", field="shaping"
        )
    s = CATALOGUE[name]
    if s.design_rate_hz and abs(rate_hz / s.design_rate_hz - 1) > RATE_TOLERANCE and not force:
        raise OptionError(
            f"{name} was designed for {s.design_rate_hz:g} Hz but the stream runs at "
            f"{rate_hz:.6g} Hz; use shaping 'designed' for this rate, or force it (--force)",
            field="shaping",
        )
    return s


def a_weighting_db(freqs_hz: np.ndarray) -> np.ndarray:
    """A-weighting in dB, IEC 61672-1:2013 Annex E (equation E.6 with A1000 = -2.000 dB).

    The pole frequencies f1..f4 follow from the standard's design values
    (REFERENCES.md section 5).
    """
    f = np.asarray(freqs_hz, dtype=np.float64)
    f1, f2, f3, f4 = 20.598997057618316, 107.65264864304629, 737.8622307362901, 12194.217147998012
    f2s = f * f
    num = f4**2 * f2s**2
    den = (f2s + f1**2) * np.sqrt(f2s + f2**2) * np.sqrt(f2s + f3**2) * (f2s + f4**2)
    with np.errstate(divide="ignore"):
        return 20 * portable.log10(num / den) + 2.000


def threshold_db(freqs_hz: np.ndarray) -> np.ndarray:
    """Threshold in quiet, dB SPL: Terhardt's approximation (Hearing Research 1, 1979).

    ``3.64 (f/kHz)^-0.8 - 6.5 exp(-0.6 (f/kHz - 3.3)^2) + 1e-3 (f/kHz)^4``;
    the formula is from memory of its wide use in perceptual coding (e.g.
    Painter & Spanias, Proc. IEEE 88(4), 2000).
    """
    k = np.maximum(np.asarray(freqs_hz, dtype=np.float64), 10.0) / 1000.0
    k2 = k * k
    d = k - 3.3
    return 3.64 * portable.power(k, -0.8) - 6.5 * portable.exp(-0.6 * (d * d)) + 1e-3 * (k2 * k2)


#: Noise weightings for the designer: power weights as a function of frequency.
WEIGHTINGS = WEIGHTING_NAMES


def weighting(kind: str, freqs_hz: np.ndarray) -> np.ndarray:
    """Power weighting W(f) (how audible noise at f is), normalised to max 1.

    'a-weighting' uses IEC 61672-1 A-weighting; 'threshold' the inverse of the
    threshold in quiet (noise is heard by how far it rises above threshold);
    'flat' weighs every frequency equally.
    """
    f = np.asarray(freqs_hz, dtype=np.float64)
    if kind == "a-weighting":
        w = portable.power(10.0, a_weighting_db(np.maximum(f, 1.0)) / 10)
    elif kind == "threshold":
        w = portable.power(10.0, -threshold_db(f) / 10)
    elif kind == "flat":
        w = np.ones_like(f)
    else:
        raise OptionError(
            f"must be one of {', '.join(WEIGHTINGS)}; got {kind!r}", field="weighting"
        )
    return w / np.max(w)


def _grid(rate_hz: float) -> np.ndarray:
    return (np.arange(_GRID) + 0.5) * (rate_hz / 2) / _GRID


def _lpc(spectrum: np.ndarray, order: int) -> np.ndarray:
    """Prediction-error filter [1, a1..aK] of a process with a given power spectrum.

    `spectrum` is sampled on the uniform half-band grid (autocorrelation method).
    """
    k = np.arange(order + 1)
    omega = np.pi * (np.arange(_GRID) + 0.5) / _GRID
    r = portable.row_means(spectrum[None, :] * portable.cos(k[:, None] * omega[None, :]))
    r[0] *= 1.0 + 1e-9  # white-noise floor keeps the Toeplitz system well conditioned
    return levinson(r, order)


def levinson(r: np.ndarray, order: int) -> np.ndarray:
    """Prediction-error filter ``[1, a1..aK]`` from autocorrelation values, by recursion.

    Solves the Toeplitz normal equations ``sum_j a_j r[|i - j|] = -r[i]``
    (i = 1..K) with the Levinson-Durbin recursion (N. Levinson, J. Math. Phys. 25,
    1947; J. Durbin, Rev. Int. Stat. Inst. 28, 1960) in O(K^2) operations.

    Parameters
    ----------
    r : numpy.ndarray
        Autocorrelation at lags 0..K (at least K + 1 values, r[0] > 0).
    order : int
        Filter order K.

    Examples
    --------
    >>> levinson(np.array([1.0, 0.5]), 1).tolist()  # r[k] = 0.5**k: a first-order process
    [1.0, -0.5]
    """
    a = np.zeros(order + 1)
    a[0] = 1.0
    err = float(r[0])
    for m in range(1, order + 1):
        acc = float(r[m] + portable.dot(a[1:m], r[m - 1 : 0 : -1]))
        k = -acc / err
        a[1:m] = a[1:m] + k * a[m - 1 : 0 : -1]
        a[m] = k
        err *= 1.0 - k * k
    return a


def _peak_db(b: np.ndarray, a: np.ndarray) -> float:
    omega = np.pi * (np.arange(_GRID) + 0.5) / _GRID
    return float(10 * portable.log10(np.max(_power_response(b, a, omega))))


def design_shaper(
    rate_hz: float,
    *,
    band_hz: float,
    weighting_kind: str = "a-weighting",
    order: int = 8,
    max_gain_db: float = 20.0,
    form: str = "auto",
) -> Shaper:
    """Design the noise-shaping filter that minimises the noise heard.

    Parameters
    ----------
    rate_hz : float
        Stream sample rate in hertz.
    band_hz : float
        Audio band in hertz.  Noise above it is not weighted (oversampled
        streams push their noise there).
    weighting_kind : {'a-weighting', 'threshold', 'flat'}
        How audible noise is across the band (see :func:`weighting`).
    order : int
        Filter order K, 1..16.
    max_gain_db : float
        Bound on the NTF's peak gain, dB (stability and headroom).
    form : {'auto', 'fir', 'iir'}
        FIR (flattened weighting) or IIR (poles at gamma x zeros); 'auto'
        keeps whichever predicts less weighted noise.

    Returns
    -------
    Shaper
        Monic, minimum-phase NTF meeting the peak bound.
    """
    if isinstance(order, bool) or not isinstance(order, int) or not 1 <= order <= 16:
        raise OptionError(f"must be a whole number 1..16, got {order!r}", field="ntf_order")
    if not (math.isfinite(max_gain_db) and max_gain_db > 0):
        raise OptionError(f"must be > 0 dB, got {max_gain_db!r}", field="ntf_max_db")
    if not (math.isfinite(band_hz) and band_hz > 0):
        raise OptionError(f"must be > 0 Hz, got {band_hz!r}", field="band_hz")
    if form not in ("auto", "fir", "iir"):
        raise OptionError(f"must be auto, fir or iir; got {form!r}", field="ntf_form")
    f = _grid(rate_hz)
    w = weighting(weighting_kind, f) * (f <= band_hz)
    w = np.maximum(w, 1e-7)  # above the band: almost free, never exactly zero
    candidates = []
    if form in ("auto", "fir"):
        candidates.append(_design_fir(w, order, max_gain_db))
    if form in ("auto", "iir"):
        candidates.append(_design_iir(w, order, max_gain_db))
    best = min(candidates, key=lambda ba: _weighted_power(ba, w))
    b, a = _on_grid(best[0]), _on_grid(best[1])
    name = "designed"
    source = (
        f"designed for {rate_hz:.6g} Hz, band {band_hz:g} Hz, {weighting_kind} weighting, "
        f"order {order}, peak <= {max_gain_db:g} dB"
    )
    return Shaper(
        name, tuple(float(x) for x in b[1:]), tuple(float(x) for x in a[1:]), float(rate_hz), source
    )


def _weighted_power(ba: tuple[np.ndarray, np.ndarray], w: np.ndarray) -> float:
    omega = np.pi * (np.arange(_GRID) + 0.5) / _GRID
    return float(portable.mean(w * _power_response(ba[0], ba[1], omega)))


def _design_fir(w: np.ndarray, order: int, max_gain_db: float) -> tuple[np.ndarray, np.ndarray]:
    ones = np.ones(order + 1)
    ones[1:] = 0.0
    b = _lpc(w, order)
    if _peak_db(b, ones) <= max_gain_db:
        return b, ones
    lo, hi = -12.0, 6.0  # log10 of the flat floor mixed into the weighting
    for _ in range(40):
        mid = 0.5 * (lo + hi)
        if _peak_db(_lpc(w + _floor(mid, w), order), ones) <= max_gain_db:
            hi = mid
        else:
            lo = mid
    return _lpc(w + _floor(hi, w), order), ones


def _floor(log10_share: float, w: np.ndarray) -> float:
    """The flat floor ``10**log10_share * mean(w)`` mixed into the weighting."""
    return float(portable.power(10.0, log10_share)) * float(portable.mean(w))


def _design_iir(w: np.ndarray, order: int, max_gain_db: float) -> tuple[np.ndarray, np.ndarray]:
    b = _lpc(w, order)
    powers = np.arange(order + 1)
    lo, hi = 0.0, 1.0  # pole radius gamma: 0 gives the FIR filter, 1 gives NTF = 1
    if _peak_db(b, b * lo**powers) <= max_gain_db:
        return b, np.concatenate([[1.0], np.zeros(order)])
    for _ in range(40):
        mid = 0.5 * (lo + hi)
        if _peak_db(b, b * mid**powers) <= max_gain_db:
            hi = mid
        else:
            lo = mid
    return b, b * hi**powers


def predict_noise(
    shaper: Shaper, rate_hz: float, *, band_hz: float, weighting_kind: str = "a-weighting"
) -> dict[str, float]:
    """Predicted noise of a shaper relative to plain (unshaped) quantisation, in dB.

    The quantiser's total error is white, so the output noise spectrum is
    ``sigma^2 |NTF(f)|^2`` whatever the dither; these figures are ratios to
    ``|NTF| = 1`` with the same dither.

    Returns
    -------
    dict
        ``total_db`` (whole band 0..fs/2), ``in_band_db`` (0..band_hz),
        ``weighted_db`` (weighted over 0..band_hz), ``peak_db`` (largest
        |NTF|), and ``log_integral_db`` (mean of 20 log10 |NTF| over 0..fs/2;
        0 for a minimum-phase NTF by the Gerzon-Craven theorem).
    """
    key = (tuple(shaper.b), tuple(shaper.a), float(rate_hz), float(band_hz), weighting_kind)
    if key not in _PREDICTED:  # a build asks for the same few shapers asset after asset
        _PREDICTED[key] = _predict_noise(shaper, rate_hz, band_hz, weighting_kind)
    return dict(_PREDICTED[key])


#: :func:`predict_noise` results by coefficients, rate, band and weighting.
_PREDICTED: dict[tuple[Any, ...], dict[str, float]] = {}


def _predict_noise(
    shaper: Shaper, rate_hz: float, band_hz: float, weighting_kind: str
) -> dict[str, float]:
    f = _grid(rate_hz)
    h2 = _power_response([1.0, *shaper.b], [1.0, *shaper.a], 2 * np.pi * f / rate_hz)
    band = f <= band_hz
    w = weighting(weighting_kind, f) * band

    def db(x: float) -> float:
        return float(10 * portable.log10(np.array(x)))

    return {
        "total_db": db(portable.mean(h2)),
        "in_band_db": db(portable.mean(h2[band])),
        "weighted_db": db(portable.dot(w, h2) / math.fsum(w.tolist())),
        "peak_db": db(float(np.max(h2))),
        "log_integral_db": float(portable.mean(10 * portable.log10(h2))),
    }


def plotted_shaper(spec: NtfPlotSpec) -> tuple[Shaper, float]:
    """The shaper ``plot ntf`` draws, and its audio band, Hz.

    A designed filter takes the spec's band, weighting and order and the default peak
    bound of its width (:func:`ladderpack.defaults.default_ntf_max_db`); a fixed or
    published one is looked up at the rate.
    """
    from ladderpack.defaults import default_band_hz, default_ntf_max_db

    band = spec.band_hz or default_band_hz(spec.rate_hz)
    if spec.shaping == "designed":
        shaper = design_shaper(
            spec.rate_hz,
            band_hz=band,
            weighting_kind=spec.weighting,
            order=spec.ntf_order,
            max_gain_db=default_ntf_max_db(spec.bits),
        )
    else:
        shaper = get_shaper(spec.shaping, spec.rate_hz, force=spec.force)
    return shaper, band
