"""Resampler, level and fades."""

from __future__ import annotations

import math
import os
import subprocess
import sys
from fractions import Fraction

import numpy as np
import pytest

from ladderpack.audio import Signal
from ladderpack.clock import plan_clock
from ladderpack.conform import (
    StreamResampler,
    apply_fades,
    normalise_peak,
    remove_dc,
    resample,
    resampler_spec,
)
from ladderpack.errors import OptionError

RATE_PAIRS = [(44100, 22050), (48000, 22050), (8000, 22050)]


def _tone(rate_in: int, freq_hz: float, seconds: float = 0.5) -> Signal:
    t = np.arange(int(rate_in * seconds)) / rate_in
    return Signal(np.cos(2 * np.pi * freq_hz * t + 0.4), float(rate_in))


def _fit_amplitude(y: np.ndarray, rate_hz: float, freq_hz: float) -> float:
    """Three-parameter least-squares sine fit at a known frequency (IEEE Std 1057)."""
    t = np.arange(y.size) / rate_hz
    d = np.stack(
        [np.cos(2 * np.pi * freq_hz * t), np.sin(2 * np.pi * freq_hz * t), np.ones_like(t)], axis=1
    )
    coef, *_ = np.linalg.lstsq(d, y, rcond=None)
    return float(np.hypot(coef[0], coef[1]))


def _middle(y: np.ndarray) -> np.ndarray:
    return y[y.size // 5 : -y.size // 5]


@pytest.mark.parametrize(("rate_in", "rate_out"), RATE_PAIRS)
@pytest.mark.parametrize("fraction", [0.02, 0.1, 0.25, 0.4, 0.45])
def test_passband_flat_within_005_db(rate_in: int, rate_out: int, fraction: float) -> None:
    # Spec from the issue: flat within 0.05 dB up to 0.45 x the lower rate.
    f = fraction * min(rate_in, rate_out)
    y = resample(_tone(rate_in, f), rate_out, bits=8).samples
    gain_db = 20 * math.log10(_fit_amplitude(_middle(y), rate_out, f))
    assert abs(gain_db) < 0.05


@pytest.mark.parametrize(("rate_in", "rate_out"), [(44100, 22050), (48000, 22050)])
@pytest.mark.parametrize("fraction", [0.505, 0.55, 0.7, 0.95])
@pytest.mark.parametrize("bits", [8, 16])
def test_downsampling_stopband(rate_in: int, rate_out: int, fraction: float, bits: int) -> None:
    # From 0.5 x the lower rate: attenuation >= max(90, 6.02 N + 12) dB. The tone's alias
    # lands in the output band; everything the output holds is leakage.
    f = fraction * rate_out
    y = _middle(resample(_tone(rate_in, f), rate_out, bits=bits).samples)
    atten_db = -20 * math.log10(np.sqrt(2) * y.std() + 1e-300)
    assert atten_db >= max(90.0, 6.02 * bits + 12.0)


@pytest.mark.parametrize("bits", [8, 16])
def test_upsampling_image_rejection(bits: int) -> None:
    # 8000 -> 22050: images of in-band tones above 0.5 x 8000 Hz must be removed.
    rate_in, rate_out = 8000, 22050
    y = _middle(resample(_tone(rate_in, 3000.0, seconds=2.0), rate_out, bits=bits).samples)
    win = np.blackman(y.size)  # sidelobes below -110 dB far from the tone
    spec = np.abs(np.fft.rfft(y * win)) / (win.sum() / 2)
    f = np.fft.rfftfreq(y.size, 1 / rate_out)
    images = spec[f >= 4000.0 + 60.0]
    assert 20 * math.log10(images.max()) <= -max(90.0, 6.02 * bits + 12.0)


@pytest.mark.parametrize(("rate_in", "rate_out"), [*RATE_PAIRS, (44100, "plan44100")])
def test_matches_the_band_limited_signal_at_the_exact_instants(
    rate_in: int, rate_out: object
) -> None:
    # Reference: the analytic signal. A sum of in-band cosines resampled perfectly is the
    # same sum evaluated at the output instants n / rate_out (sampling theorem); the
    # residual is what the pass band's ripple and the stop band leave, and it shows any
    # misalignment of the instants. The spec's 0.05 dB ripple alone would allow -44.8 dB
    # (a 0.58 % amplitude error); -80 dB also bounds the timing error to about 0.02 % of
    # a period of the highest tone.
    out = plan_clock(44100).achieved_rate_hz if rate_out == "plan44100" else Fraction(rate_out)
    rng = np.random.default_rng(5)
    low = min(rate_in, float(out))
    freqs = np.linspace(50.0, 0.42 * low, 9)
    phases = rng.uniform(0, 2 * np.pi, freqs.size)

    def wave(t: np.ndarray) -> np.ndarray:
        return (
            sum(np.cos(2 * np.pi * f * t + p) for f, p in zip(freqs, phases, strict=True))
            / freqs.size
        )

    got = resample(Signal(wave(np.arange(rate_in) / rate_in), float(rate_in)), out).samples
    ref = wave(np.arange(got.size) / float(out))
    a, b = _middle(got), _middle(ref)
    resid_db = 20 * math.log10(np.std(a - b) / np.std(b))
    assert resid_db < -80.0


@pytest.mark.parametrize(("rate_in", "rate_out"), RATE_PAIRS)
def test_agrees_with_scipy_resample_poly(rate_in: int, rate_out: int) -> None:
    # Reference resampler: scipy.signal.resample_poly (PyPI) for the rational ratio, with
    # its default Kaiser-windowed (beta 5) filter. Both are linear-phase and start
    # aligned; resample_poly's shorter filter rolls off earlier, so the comparison stays
    # below 0.3 x the lower rate and the residual bound is its (-60 dB).
    from scipy import signal as sps

    rng = np.random.default_rng(6)
    t = np.arange(rate_in) / rate_in
    freqs = np.linspace(50.0, 0.3 * min(rate_in, rate_out), 7)
    x = sum(np.cos(2 * np.pi * f * t + rng.uniform(0, 2 * np.pi)) for f in freqs) / len(freqs)
    g = math.gcd(rate_in, rate_out)
    ref = sps.resample_poly(x, rate_out // g, rate_in // g)
    ours = resample(Signal(x, float(rate_in)), rate_out).samples
    n = min(ours.size, ref.size)
    a, b = _middle(ours[:n]), _middle(ref[:n])
    assert 20 * math.log10(np.std(a - b) / np.std(b)) < -60.0


def test_same_bits_whatever_engine_the_cpu_would_pick() -> None:
    # libsoxr chooses a SIMD or a scalar engine by CPU (or by SOXR_USE_SIMD); the two
    # round differently. The resampler always asks for the scalar one, so a machine with
    # other vector units, or a user's environment forcing SIMD, gives the same bits.
    code = (
        "import sys, numpy as np; from ladderpack.conform import resample;"
        "from ladderpack.audio import Signal; from ladderpack.clock import plan_clock;"
        "x = np.random.default_rng(1).standard_normal(20000);"
        "y = resample(Signal(x, 44100.0), plan_clock(22050).achieved_rate_hz).samples;"
        "sys.stdout.buffer.write(y.tobytes())"
    )
    outs = []
    for forced in ("1", "0", None):
        env = {k: v for k, v in os.environ.items() if k != "SOXR_USE_SIMD"}
        if forced is not None:
            env["SOXR_USE_SIMD"] = forced
        outs.append(
            subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, check=True)
        )
    assert outs[0].stdout == outs[1].stdout == outs[2].stdout
    assert len(outs[0].stdout) == 8 * 10_000


def test_blocks_give_the_bits_of_one_call(rng: np.random.Generator) -> None:
    x = rng.standard_normal(50_003)
    for rate_in, rate_out in [(44100.0, plan_clock(22050).achieved_rate_hz), (8000.0, 22050)]:
        whole = resample(Signal(x, rate_in), rate_out, bits=12).samples
        for block in (1, 17, 4096, 50_003):
            rs = StreamResampler(rate_in, rate_out, x.size, bits=12)
            got = [
                rs.feed(x[i : i + block], last=i + block >= x.size) for i in range(0, x.size, block)
            ]
            np.testing.assert_array_equal(np.concatenate(got), whole)


def test_periodic_needs_a_whole_number_of_output_samples() -> None:
    with pytest.raises(OptionError, match="loop_rate"):
        resample(_tone(44100, 1000.0, 0.01), 22050.5, periodic=True)


def test_output_length_and_exact_rate() -> None:
    plan = plan_clock(44100)  # fractional divider: irrational-looking ratio
    y = resample(_tone(44100, 1000.0, 1.0), plan.achieved_rate_hz)
    assert y.frames == math.ceil(44100 * plan.achieved_rate_hz / 44100)
    assert y.rate_hz == float(plan.achieved_rate_hz)


def test_pitch_is_exact_at_achieved_rate() -> None:
    # Played at the achieved rate, a 1 kHz input must still be 1 kHz.
    plan = plan_clock(48000)
    rate = float(plan.achieved_rate_hz)
    y = _middle(resample(_tone(48000, 1000.0, 2.0), plan.achieved_rate_hz).samples)
    best = max(np.linspace(999.99, 1000.01, 21), key=lambda f: _fit_amplitude(y, rate, f))
    assert best == pytest.approx(1000.0, abs=0.0015)


def test_spec_attenuation_rule() -> None:
    assert resampler_spec(44100, 22050, 8).attenuation_db == 90.0
    assert resampler_spec(44100, 22050, 16).attenuation_db == pytest.approx(108.32)
    s = resampler_spec(8000, 22050, 8)
    assert (s.passband_hz, s.stopband_hz) == (3600.0, 4000.0)


def test_remove_dc_and_normalise() -> None:
    x = Signal(np.array([1.0, 3.0, 1.0, 3.0]), 8000.0)
    y = remove_dc(x)
    assert y.samples.mean() == 0.0
    z, gain_db = normalise_peak(y, headroom_db=6.0)
    assert np.max(np.abs(z.samples)) == pytest.approx(10 ** (-6 / 20))
    assert gain_db == pytest.approx(-6.0)


def test_fades_are_raised_cosine() -> None:
    x = apply_fades(Signal(np.ones(1000), 1000.0), fade_ms=10.0)
    assert x.samples[0] == 0.0 and x.samples[-1] == 0.0
    np.testing.assert_allclose(x.samples[:10], 0.5 - 0.5 * np.cos(np.pi * np.arange(10) / 10))
    assert np.all(x.samples[10:-10] == 1.0)
