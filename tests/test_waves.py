"""Test waveforms and synthesis tables against their published definitions."""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import signal as sps

from ladderpack.stream import stream_tone
from ladderpack.waves import (
    coherent_cycles,
    phase_increments,
    synthesise,
    truncation_spur_dbc,
    wavetable,
)

REPO = Path(__file__).resolve().parent.parent
FS = 48000.0


def test_exponential_sweep_follows_farina() -> None:
    # Farina, "Simultaneous measurement of impulse response and distortion with a swept-sine
    # technique", AES 108th Convention, 2000: f(t) = f1 exp(t ln(f2/f1) / T). Measured from
    # the zero crossings (linear interpolation): each half period gives the frequency at
    # its midpoint.
    n = int(2 * FS)
    f1, f2 = 50.0, 10000.0
    x = synthesise("sweep", rate_hz=FS, samples=n, level_dbfs=0.0, f_start_hz=f1, f_end_hz=f2)
    i = np.flatnonzero(np.signbit(x[:-1]) != np.signbit(x[1:]))
    tz = (i + x[i] / (x[i] - x[i + 1])) / FS
    inst = 0.5 / np.diff(tz)
    mid_t = 0.5 * (tz[1:] + tz[:-1])
    expected = f1 * np.exp(mid_t * math.log(f2 / f1) / (n / FS))
    rel = inst / expected - 1
    low = (expected > 60) & (expected < 2000)
    assert np.max(np.abs(rel[low])) < 0.001
    # Higher up, linear interpolation of the crossings scatters the single estimates, so
    # check their average over each half-octave band instead.
    for lo in (2000.0, 2828.0, 4000.0, 5657.0):
        band = (expected >= lo) & (expected < lo * 1.414)
        assert abs(float(np.mean(rel[band]))) < 0.001


def test_pink_noise_slope() -> None:
    # Pink noise: power density falls 10 log10(2) = 3.01 dB per octave.
    x = synthesise("pink", rate_hz=FS, samples=1 << 20, seed=3)
    f, p = sps.welch(x, fs=FS, nperseg=1 << 14)
    sel = (f >= 50) & (f <= 10000)
    slope = np.polyfit(np.log2(f[sel]), 10 * np.log10(p[sel]), 1)[0]
    assert slope == pytest.approx(-3.0103, abs=0.5)


def test_white_noise_is_flat_and_seeded() -> None:
    a = synthesise("white", rate_hz=FS, samples=1 << 18, seed=1)
    b = synthesise("white", rate_hz=FS, samples=1 << 18, seed=1)
    np.testing.assert_array_equal(a, b)
    f, p = sps.welch(a, fs=FS, nperseg=4096)
    sel = (f >= 100) & (f <= 20000)
    assert abs(np.polyfit(np.log2(f[sel]), 10 * np.log10(p[sel]), 1)[0]) < 0.3


@pytest.mark.parametrize("kind", ["square", "sawtooth", "triangle"])
def test_band_limited_shapes_stop_at_nyquist(kind: str) -> None:
    # Fourier series: square 4/(pi n) for odd n, sawtooth 2/(pi n), triangle 8/(pi^2 n^2);
    # coherent record so each harmonic sits in one bin.
    n, cycles = 1 << 15, 331
    f0 = cycles * FS / n
    x = synthesise(kind, rate_hz=FS, samples=n, level_dbfs=0.0, freq_hz=f0)
    mag = np.abs(np.fft.rfft(x)) / (n / 2)
    harmonics = [k for k in range(1, int(FS / 2 // f0) + 1)]
    # the waveform is scaled so its peak is the level: compare the series' shape
    scale = mag[cycles] / (2 / math.pi if kind == "sawtooth" else 4 / math.pi)
    if kind == "triangle":
        scale = mag[cycles] / (8 / math.pi**2)
    for k in harmonics[:9]:
        if kind == "sawtooth":
            expected = 2 / (math.pi * k)
        elif k % 2 == 0:
            expected = 0.0
        else:
            expected = 4 / (math.pi * k) if kind == "square" else 8 / (math.pi**2 * k * k)
        assert mag[k * cycles] == pytest.approx(scale * expected, abs=1e-9)
    others = np.ones(mag.size, bool)
    others[[k * cycles for k in harmonics]] = False
    assert np.max(mag[others]) < 1e-9  # nothing else: no aliased component anywhere


def test_naive_square_aliases() -> None:
    n, cycles = 1 << 15, 331
    x = synthesise(
        "square", rate_hz=FS, samples=n, level_dbfs=0.0, freq_hz=cycles * FS / n, band_limited=False
    )
    mag = np.abs(np.fft.rfft(x)) / (n / 2)
    on_harmonics = np.zeros(mag.size, bool)
    on_harmonics[np.arange(cycles, mag.size, cycles)] = True
    assert np.max(mag[~on_harmonics]) > 1e-4  # aliased products fall between harmonics


@pytest.mark.parametrize(("record", "freq"), [(4096, 1000.0), (4096, 997.0), (10000, 1000.0)])
def test_coherent_cycles_are_coprime_and_leak_nothing(record: int, freq: float) -> None:
    # Coherent sampling (IEEE Std 1241): M cycles in N samples, gcd(M, N) = 1; the tone
    # sits in one bin and every other bin is numerical noise. REFERENCES.md 4: N = 4096 at
    # 48 kHz near 1 kHz gives M = 85.
    m = coherent_cycles(freq, record, FS)
    assert math.gcd(m, record) == 1
    if record == 4096 and freq == 1000.0:
        assert m == 85
    x = np.sin(2 * np.pi * m * np.arange(record) / record + 0.3)
    mag = np.abs(np.fft.rfft(x)) / (record / 2)
    assert mag[m] == pytest.approx(1.0, abs=1e-12)
    mag[m] = 0
    assert 20 * np.log10(np.max(mag) + 1e-300) < -250


@pytest.mark.parametrize("table_bits", [6, 8, 10])
def test_phase_truncation_spur_matches_bound(table_bits: int) -> None:
    # 32-bit accumulator indexing a 2^P-entry sine table of 16-bit codes (so amplitude
    # quantisation stays far below the phase spurs). The increment's low bits make the
    # accumulator period 2^20 samples; the worst spur, measured over that period, must
    # sit within 1 dB of the bound -6.02 P dBc (Nicholas & Samueli 1987).
    tab = wavetable("sine", table_bits, bits=16, level_dbfs=0.0).astype(np.float64)
    period = 1 << 20
    inc = (12345 * 2 + 1) << (32 - 20)  # odd multiple of 2^12
    acc = (np.arange(period, dtype=np.uint64) * np.uint64(inc)) & np.uint64(0xFFFFFFFF)
    y = tab[(acc >> np.uint64(32 - table_bits)).astype(np.int64)]
    mag = np.abs(np.fft.rfft(y - y.mean()))
    k = int(np.argmax(mag))
    carrier = mag[k]
    mag[k] = 0
    worst = 20 * np.log10(mag.max() / carrier)
    assert worst == pytest.approx(truncation_spur_dbc(table_bits), abs=1.0)


def test_phase_increments() -> None:
    # f = inc rate / 2^32; resolution rate / 2^32.
    ((f, inc, actual),) = phase_increments([1000.0], 48000.0)
    assert inc == round(1000 * 2**32 / 48000)
    assert abs(actual - f) <= 48000 / 2**33


def test_staircase_dwells_exactly(tmp_path: Path) -> None:
    asset = stream_tone("staircase", bits=6, rate_hz=8000, dwell_ms=2.0, codes=[3, 10, 60, 0])
    dwell = asset.stats["tone"]["dwell_samples"]
    assert dwell == 16
    start = asset.stats["ramp_samples"]
    codes = asset.codes.codes[start : start + 4 * dwell]
    assert codes.tolist() == [3] * dwell + [10] * dwell + [60] * dwell + [0] * dwell


def test_every_code_staircase_is_exact() -> None:
    asset = stream_tone("staircase", bits=8, rate_hz=8000, dwell_ms=1.0)
    start, dwell = asset.stats["ramp_samples"], asset.stats["tone"]["dwell_samples"]
    steps = asset.codes.codes[start : start + 256 * dwell].reshape(256, dwell)
    assert np.all(steps == np.arange(256)[:, None])


def test_loop_mode_moves_frequency_to_whole_cycles() -> None:
    asset = stream_tone("sine", bits=8, rate_hz=22050, freq_hz=1000.0, seconds=0.05, loop=True)
    info = asset.stats["tone"]
    rate = float(asset.plan.achieved_rate_hz)
    assert info["cycles"] * rate / info["samples"] == pytest.approx(info["freq_hz"])
    assert abs(info["freq_error_hz"]) <= rate / info["samples"] / 2
    assert len(asset.codes) == info["samples"]


def test_dc_level_is_exact() -> None:
    asset = stream_tone("dc", bits=8, dc_value=0.5, seconds=0.01, rate_hz=8000)
    start = asset.stats["ramp_samples"]
    body = asset.codes.codes[start : start + asset.stats["audio_samples"]]
    assert set(body.tolist()) == {192}


def test_tone_command_json(tmp_path: Path) -> None:
    res = subprocess.run(
        [
            sys.executable,
            "-m",
            "ladderpack",
            "tone",
            "multitone",
            "--tones",
            "1000:0,3000:-6",
            "--bits",
            "10",
            "-o",
            str(tmp_path),
            "--json",
        ],
        capture_output=True,
        text=True,
        cwd=REPO,
    )
    assert res.returncode == 0, res.stderr
    s = json.loads(res.stdout)
    assert s["tone"]["kind"] == "multitone" and s["bits"] == 10
    bad = subprocess.run(
        [
            sys.executable,
            "-m",
            "ladderpack",
            "tone",
            "staircase",
            "--codes",
            "0-300",
            "--bits",
            "8",
            "-o",
            str(tmp_path / "b"),
        ],
        capture_output=True,
        text=True,
        cwd=REPO,
    )
    assert bad.returncode == 2 and "outside 0..255" in bad.stderr


@pytest.mark.parametrize("kind", ["square", "sawtooth", "triangle"])
@pytest.mark.parametrize("freq_hz", [1000.0, 97.0, 7000.0])
def test_band_limited_level_is_the_peak(kind: str, freq_hz: float) -> None:
    # The level is the waveform's peak. Reference computed here: the textbook Fourier
    # series (square 4/(pi n), odd n; sawtooth 2/(pi n) (-1)^(n+1); triangle
    # 8/(pi^2 n^2) (-1)^((n-1)/2), odd n) below Nyquist, its continuous peak found by
    # bounded minimisation (scipy.optimize) around the best of a dense grid.
    from scipy.optimize import minimize_scalar

    from ladderpack.waves import synthesise

    rate, level = 48000.0, 10 ** (-1 / 20)
    n = np.arange(1, int(rate / 2 / freq_hz) + 2)
    n = n[n * freq_hz < rate / 2]
    if kind == "sawtooth":
        a = 2 / (np.pi * n) * (-1.0) ** (n + 1)
    else:
        n = n[n % 2 == 1]
        a = 4 / (np.pi * n) if kind == "square" else 8 / np.pi**2 * (-1.0) ** ((n - 1) // 2) / n**2

    def series(theta: float | np.ndarray) -> np.ndarray:
        return np.sin(np.multiply.outer(np.atleast_1d(theta), n)) @ a

    grid = np.linspace(0, 2 * np.pi, 40 * int(n.max()) + 1)
    best = grid[int(np.argmax(np.abs(series(grid))))]
    step = grid[1] - grid[0]
    res = minimize_scalar(
        lambda th: -abs(float(series(th)[0])),
        bounds=(best - step, best + step),
        method="bounded",
        options={"xatol": 1e-12},
    )
    peak = -res.fun
    x = synthesise(kind, rate_hz=rate, samples=4800, level_dbfs=-1.0, freq_hz=freq_hz)
    want = level * series(2 * np.pi * freq_hz * np.arange(4800) / rate) / peak
    np.testing.assert_allclose(x, want, atol=1e-7)
    assert np.max(np.abs(x)) <= level + 1e-9


def test_square_gibbs_overshoot_is_normalised_away() -> None:
    # A square from many harmonics overshoots by the Wilbraham-Gibbs constant
    # (2 / pi) Si(pi) = 1.17898 (scipy.special.sici): normalised to its peak, the
    # fundamental's amplitude is 4 / pi / 1.17898 of the level.
    from scipy.special import sici

    from ladderpack.waves import synthesise

    rate, f = 192000.0, 100.0
    x = synthesise("square", rate_hz=rate, samples=int(rate / f) * 10, level_dbfs=0.0, freq_hz=f)
    fundamental = 2 * np.abs(np.fft.rfft(x)[10]) / x.size
    gibbs = 2 / np.pi * sici(np.pi)[0]
    assert fundamental == pytest.approx(4 / np.pi / gibbs, rel=2e-3)


@pytest.mark.parametrize("freq_hz", [22050.0, 30000.0])
def test_tones_at_or_above_nyquist_are_refused(freq_hz: float) -> None:
    from ladderpack.errors import OptionError
    from ladderpack.waves import synthesise

    with pytest.raises(OptionError, match="Nyquist"):
        synthesise("sine", rate_hz=44100.0, samples=10, freq_hz=freq_hz)
    with pytest.raises(OptionError, match="Nyquist"):
        synthesise("multitone", rate_hz=44100.0, samples=10, tones=[(1000.0, 0.0), (freq_hz, 0)])


@pytest.mark.parametrize(
    ("args", "line"),
    [
        (["multitone", "--tones", "1000:0,3000:-6"], "tone     multitone of 1000, 3000 Hz"),
        (["sweep", "--f-start-hz", "50", "--f-end-hz", "5000"], "exponential sweep 50 to 5000 Hz"),
        (["impulse"], "tone     impulse at sample"),
    ],
)
def test_tone_summary_for_kinds_without_one_frequency(
    tmp_path: Path, args: list[str], line: str
) -> None:
    res = subprocess.run(
        [
            sys.executable,
            "-m",
            "ladderpack",
            "tone",
            *args,
            "--seconds",
            "0.02",
            "-o",
            str(tmp_path),
        ],
        capture_output=True,
        text=True,
    )
    assert res.returncode == 0, res.stderr
    assert line in res.stdout and "requested" not in res.stdout.splitlines()[0]
