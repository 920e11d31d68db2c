"""Noise shaping: published filters, the designer, measured spectra and stability."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal as sps

from ladderpack.audio import Signal
from ladderpack.errors import OptionError
from ladderpack.quantize import quantize, signal_to_lsb
from ladderpack.shaping import (
    CATALOGUE,
    Shaper,
    a_weighting_db,
    design_shaper,
    get_shaper,
    predict_noise,
)

FS = 44100.0
PUBLISHED = ["modified-e-9", "improved-e-5", "improved-e-9", "f-weighted-3", "f-weighted-9"]


def _db(shaper: Shaper, f_hz: float, rate: float = FS) -> float:
    return float(20 * np.log10(np.abs(shaper.response(np.array([f_hz]), rate))[0]))


@pytest.mark.parametrize(
    ("f_hz", "db"),
    # F-weighted 9-tap set (Wannamaker 1992, Table 3) with NTF = 1 - H: |NTF| in dB at
    # 0/1/2/3/4/6/8/10/12/15/18/20 kHz and 22.05 kHz, REFERENCES.md section 3.2.
    [
        (0, -12.0),
        (1000, -13.4),
        (2000, -18.0),
        (3000, -25.0),
        (4000, -23.3),
        (6000, -11.7),
        (8000, -2.3),
        (10000, -1.4),
        (12000, -5.8),
        (15000, 5.1),
        (18000, 21.0),
        (20000, 25.5),
        (22050, 27.0),
    ],
)
def test_f_weighted_9_shape(f_hz: float, db: float) -> None:
    assert _db(CATALOGUE["f-weighted-9"], f_hz) == pytest.approx(db, abs=0.1)


def test_sign_convention() -> None:
    # The opposite sign (NTF = 1 + H) would give +4.9 dB at DC (REFERENCES.md 3.1).
    h = [-x for x in CATALOGUE["f-weighted-9"].b]
    wrong = Shaper("wrong", tuple(h), (0.0,) * 9, FS, "")
    assert _db(wrong, 0.0) == pytest.approx(4.9, abs=0.1)


@pytest.mark.parametrize(
    ("name", "min_db", "min_hz", "nyq_db", "white_db"),
    # REFERENCES.md 3.2 table: NTF minimum (at f), NTF at 22.05 kHz, white-noise power gain.
    [
        ("modified-e-9", -21.4, 3450, 13.9, 7.56),
        ("improved-e-5", -27.2, 4040, 19.4, 12.19),
        ("improved-e-9", -29.2, 3320, 31.8, 23.10),
        ("f-weighted-3", -19.3, 3880, 11.4, 6.64),
        ("f-weighted-9", -25.2, 3150, 27.0, 18.40),
    ],
)
def test_published_sets(
    name: str, min_db: float, min_hz: float, nyq_db: float, white_db: float
) -> None:
    s = CATALOGUE[name]
    f = np.linspace(1, FS / 2, 44100)
    mag = 20 * np.log10(np.abs(s.response(f, FS)))
    assert mag.min() == pytest.approx(min_db, abs=0.1)
    assert f[np.argmin(mag)] == pytest.approx(min_hz, abs=30)
    assert _db(s, FS / 2) == pytest.approx(nyq_db, abs=0.1)
    assert 10 * math.log10(1 + sum(x * x for x in s.b)) == pytest.approx(white_db, abs=0.01)


@pytest.mark.parametrize("name", [*PUBLISHED, "first-order", "second-order"])
def test_log_integral_is_zero_for_published_sets(name: str) -> None:
    # Gerzon-Craven theorem: mean of ln|NTF| over 0..fs/2 is 0 for a monic minimum-phase
    # NTF; REFERENCES.md 3.3 gives |mean| < 3e-4 on an 8192-point grid for the sets.
    s = CATALOGUE[name]
    f = (np.arange(8192) + 0.5) * (FS / 2) / 8192
    with np.errstate(divide="ignore"):
        mean_ln = float(np.mean(np.log(np.abs(s.response(f, FS)))))
    # (1 - z^-1)^k has its zeros on the unit circle at DC: the grid integral converges
    # more slowly there, so those get a looser tolerance.
    tol = 1e-3 if name in ("first-order", "second-order") else 3e-4
    assert abs(mean_ln) < tol


def test_non_minimum_phase_ntf_has_positive_log_integral() -> None:
    # NTF = 1 - 2 z^-1 has its zero outside the unit circle.
    s = Shaper("nmp", (-2.0,), (0.0,), None, "")
    f = (np.arange(8192) + 0.5) * (FS / 2) / 8192
    assert float(np.mean(np.log(np.abs(s.response(f, FS))))) == pytest.approx(math.log(2), abs=1e-3)


def test_published_sets_refused_far_from_44k1() -> None:
    assert get_shaper("f-weighted-9", 44099.97).name == "f-weighted-9"
    with pytest.raises(OptionError, match="designed for 44100 Hz"):
        get_shaper("f-weighted-9", 48000.0)
    assert get_shaper("f-weighted-9", 48000.0, force=True).name == "f-weighted-9"
    assert get_shaper("second-order", 8000.0).name == "second-order"


@pytest.mark.parametrize(
    ("f_hz", "table_db"),
    # IEC 61672-1 Table 3, evaluated at the exact base-ten frequencies 1000 x 10^(n/10)
    # (REFERENCES.md section 5), within 0.05 dB.
    [
        (1000 * 10 ** (-15 / 10), -39.4),
        (1000 * 10 ** (-12 / 10), -26.2),
        (100.0, -19.1),
        (1000 * 10 ** (-9 / 10), -16.1),
        (1000.0, 0.0),
        (1000 * 10 ** (6 / 10), 1.0),
        (10000.0, -2.5),
        (1000 * 10 ** (12 / 10), -6.6),
    ],
)
def test_a_weighting(f_hz: float, table_db: float) -> None:
    assert float(a_weighting_db(np.array([f_hz]))[0]) == pytest.approx(table_db, abs=0.05)


DESIGN_CASES = [
    (22050.0, 11025.0, "threshold", 8),
    (44100.0, 20000.0, "threshold", 8),
    (48000.0, 20000.0, "a-weighting", 12),
    (16000.0, 8000.0, "threshold", 4),
    (88200.0, 11025.0, "flat", 8),
    (96000.0, 20000.0, "a-weighting", 16),
]


@pytest.mark.parametrize(("rate", "band", "weighting", "order"), DESIGN_CASES)
@pytest.mark.parametrize("form", ["fir", "iir"])
def test_designed_filters_obey_theorem_and_bound(
    rate: float, band: float, weighting: str, order: int, form: str
) -> None:
    s = design_shaper(
        rate, band_hz=band, weighting_kind=weighting, order=order, max_gain_db=15.0, form=form
    )
    p = predict_noise(s, rate, band_hz=band, weighting_kind=weighting)
    assert abs(p["log_integral_db"]) < 0.1  # Gerzon-Craven: 0 dB for minimum phase
    assert p["peak_db"] <= 15.0 + 1e-6
    zeros = np.roots([1.0, *s.b])
    poles = np.roots([1.0, *s.a])
    assert np.all(np.abs(zeros) < 1) and np.all(np.abs(poles) < 1)
    assert p["weighted_db"] < 0  # never worse than no shaping for its own weighting


@pytest.mark.parametrize(
    ("rate", "band", "weighting", "order"), DESIGN_CASES[:3] + DESIGN_CASES[4:5]
)
def test_measured_noise_matches_prediction(
    rate: float, band: float, weighting: str, order: int, rng: np.random.Generator
) -> None:
    # Quantise busy low-level program at 12 bits with TPDF; the error spectrum must follow
    # sigma^2 |NTF|^2 (sigma^2 = LSB^2/4) within 1 dB across the band.
    s = design_shaper(rate, band_hz=band, weighting_kind=weighting, order=order, max_gain_db=15.0)
    x = np.clip(0.15 * rng.standard_normal(1 << 20), -0.9, 0.9)
    codes, report = quantize(Signal(x, rate), bits=12, dither="tpdf", shaper=s, seed=5)
    assert report.overloads == 0
    err = codes.codes - signal_to_lsb(x, 12)
    f, pxx = sps.welch(err, fs=rate, window="hann", nperseg=2048)
    predicted = 2 * 0.25 / rate * np.abs(s.response(f, rate)) ** 2
    sel = (f > 40) & (f < band) & (predicted > 2 * 0.25 / rate * 10 ** (-30 / 10))
    diff_db = 10 * np.log10(pxx[sel] / predicted[sel])
    assert np.max(np.abs(diff_db)) < 1.0


def _in_band_noise(err: np.ndarray, rate: float, band: float) -> float:
    f, pxx = sps.welch(err, fs=rate, window="hann", nperseg=4096)
    return float(np.sum(pxx[f <= band]))


def test_oversampled_design_gains_20_db_in_band(rng: np.random.Generator) -> None:
    # 4x oversampling: 88.2 kHz stream, 11.025 kHz band, 8-bit ladder, default bound.
    rate, band, bits = 88200.0, 11025.0, 8
    s = design_shaper(rate, band_hz=band, weighting_kind="flat", order=8, max_gain_db=20.0)
    t = np.arange(1 << 18) / rate
    x = 0.5 * np.sin(2 * np.pi * 1000 * t) + 0.05 * rng.standard_normal(t.size)
    shaped, rep = quantize(Signal(x, rate), bits=bits, dither="tpdf", shaper=s, seed=1)
    plain, _ = quantize(Signal(x, rate), bits=bits, dither="tpdf", seed=1)
    v = signal_to_lsb(x, bits)
    gain_db = 10 * np.log10(
        _in_band_noise(plain.codes - v, rate, band) / _in_band_noise(shaped.codes - v, rate, band)
    )
    assert rep.overloads == 0
    assert gain_db >= 20.0
    assert gain_db == pytest.approx(
        -predict_noise(s, rate, band_hz=band, weighting_kind="flat")["in_band_db"], abs=1.5
    )


@pytest.mark.parametrize("name", ["designed", "improved-e-9"])
def test_full_scale_square_and_clipped_burst_stay_stable(
    name: str, rng: np.random.Generator
) -> None:
    rate, band, bits = 88200.0, 11025.0, 8
    s = (
        design_shaper(rate, band_hz=band, weighting_kind="flat", order=8, max_gain_db=20.0)
        if name == "designed"
        else CATALOGUE[name]
    )
    t = np.arange(1 << 16) / rate
    square = np.sign(np.sin(2 * np.pi * 441 * t))  # full scale: clips at the top code
    burst = np.clip(3.0 * np.sin(2 * np.pi * 300 * t[: 1 << 14]), -1.2, 1.2)  # clipped burst
    quiet = 0.3 * np.sin(2 * np.pi * 1000 * t)
    x = np.concatenate([square, burst, quiet])
    codes, report = quantize(Signal(x, rate), bits=bits, dither="tpdf", shaper=s, seed=2)
    assert report.overloads > 0 and report.resets == report.overloads
    v = signal_to_lsb(x, bits)
    err = codes.codes - v
    # No runaway: away from the clipped samples the error stays within the feedback bound.
    bound = 1.5 * float(np.sum(np.abs(s.impulse())))
    clipped = (codes.codes == 0) | (codes.codes == 255)
    assert float(np.max(np.abs(err[~clipped]))) <= bound
    # No limit cycle afterwards: the quiet tail's in-band noise is what the same tail gets
    # when quantised on its own.
    tail = slice(x.size - quiet.size + 4096, x.size)
    alone, _ = quantize(Signal(quiet, rate), bits=bits, dither="tpdf", shaper=s, seed=9)
    ref = alone.codes[4096:] - signal_to_lsb(quiet, bits)[4096:]
    ratio_db = 10 * np.log10(
        _in_band_noise(err[tail], rate, band) / _in_band_noise(ref, rate, band)
    )
    assert abs(ratio_db) < 1.0


def test_designer_rejects_bad_arguments() -> None:
    with pytest.raises(OptionError, match="ntf_order"):
        design_shaper(44100, band_hz=20000, order=17)
    with pytest.raises(OptionError, match="ntf_max_db"):
        design_shaper(44100, band_hz=20000, max_gain_db=0)


def test_published_shaper_on_a_narrow_ladder_warns() -> None:
    # improved-e-9 raises the total noise 23.10 dB (the published-set table above): with
    # TPDF (1/12 + 1/6 LSB^2) sigma^2 = 0.25 x 10^2.31 = 51.0 LSB^2, sigma = 7.14 LSB, so
    # its 4-sigma peaks take 28.6 LSB = 22 % of the 128 LSB half-scale at 8 bits, and a
    # full-scale sine keeps 10 log10(128^2 / 2 / 51.0) = 22.1 dB (worked by hand).
    from ladderpack.stream import stream_tone

    narrow = stream_tone("sine", bits=8, rate_hz=44100.0, shaping="improved-e-9", seconds=0.05)
    (warning,) = narrow.summary()["warnings"]
    assert "+23.1 dB" in warning and "28.6 LSB" in warning and "22 %" in warning
    assert "22.1 dB SNR" in warning
    wide = stream_tone("sine", bits=16, rate_hz=44100.0, shaping="improved-e-9", seconds=0.05)
    assert wide.summary()["warnings"] == []
    plain = stream_tone("sine", bits=3, rate_hz=44100.0, seconds=0.05)
    assert plain.summary()["warnings"] == []  # no shaper, nothing to warn about


@pytest.mark.parametrize(
    ("rate", "band"), [(176400.0, 20000.0), (44100.0, 20000.0), (48000.0, 8000.0)]
)
def test_predicted_full_scale_sine_is_the_in_band_figure(rate: float, band: float) -> None:
    # SNR = 6.02 N + 1.76 dB + 10 log10(fs / (2 BW)) (processing gain of oversampling:
    # W. Kester, Analog Devices tutorial MT-001), less the dither's noise penalty: TPDF
    # adds 2 LSB^2/12 to the 1/12 of plain quantising, 10 log10(3) = 4.77 dB (Lipshitz,
    # Wannamaker & Vanderkooy 1992).
    from ladderpack.stream import stream_tone

    a = stream_tone("sine", bits=8, rate_hz=rate, band_hz=band, seconds=0.01)
    got = a.summary()["predicted_full_scale_sine"]
    want = 6.02 * 8 + 1.76 + 10 * math.log10(rate / (2 * band)) - 10 * math.log10(3)
    assert got["sinad_db"] == pytest.approx(want, abs=0.02)


def test_readme_oversampling_figures() -> None:
    # The README quotes these for an order-8 design at 4x oversampling (160 kHz stream,
    # 20 kHz band, 8 bits); the flat one is measured against the prediction above
    # (test_oversampled_design_gains_20_db_in_band, within 1.5 dB).
    import re
    from pathlib import Path

    from ladderpack.options import StreamOptions
    from ladderpack.stream import _shaper_for

    text = (Path(__file__).resolve().parents[1] / "README.md").read_text()
    sentence = text[text.index("at 4x oversampling") :][:600]
    quoted = [float(v) for v in re.findall(r"(\d+\.\d) dB", sentence)]
    figures = []
    for w in ("threshold", "flat"):
        opts = StreamOptions(rate_hz=160000.0, shaping="designed", weighting=w, bits=8)
        p = predict_noise(
            _shaper_for(opts, 160000.0, 20000.0), 160000.0, band_hz=20000.0, weighting_kind=w
        )
        figures.append((w, p))
    threshold, flat = figures[0][1], figures[1][1]
    assert quoted[:3] == [
        round(-threshold["weighted_db"], 1),
        round(-threshold["in_band_db"], 1),
        round(-flat["in_band_db"], 1),
    ]


@pytest.mark.parametrize("order", [1, 2, 5, 8, 16])
def test_levinson_agrees_with_scipy_solve_toeplitz(order: int) -> None:
    # Reference: scipy.linalg.solve_toeplitz (PyPI) on the same normal equations.
    from scipy import linalg

    from ladderpack.shaping import levinson

    rng = np.random.default_rng(order)
    x = np.convolve(rng.standard_normal(4000), [1.0, 0.8, 0.3, -0.2])
    r = np.array([x[: x.size - k] @ x[k:] for k in range(order + 1)]) / x.size
    ref = linalg.solve_toeplitz(r[:order], -r[1 : order + 1])
    np.testing.assert_allclose(levinson(r, order)[1:], ref, rtol=0, atol=1e-12)
