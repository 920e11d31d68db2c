"""Measurement against IEEE 1241 definitions, BS.1770 and a reference meter."""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import soundfile

from ladderpack.measure import analyse, fit_sine, integrated_loudness, true_peak_dbtp

REPO = Path(__file__).resolve().parent.parent
FS = 48000.0


@pytest.mark.parametrize("known", [True, False])
def test_sine_fit_recovers_parameters(known: bool, rng: np.random.Generator) -> None:
    # IEEE Std 1057/1241 three- and four-parameter fits on a noisy synthetic capture.
    n = 20000
    t = np.arange(n) / FS
    f, a, ph, c = 1234.567, 0.7, 0.9, 0.05
    y = a * np.cos(2 * np.pi * f * t + ph) + c + 1e-3 * rng.standard_normal(n)
    fit = fit_sine(y, FS, freq_hz=f if known else None)
    assert fit.freq_hz == pytest.approx(f, abs=1e-3)
    assert fit.amplitude == pytest.approx(a, abs=1e-4)
    assert fit.phase_rad == pytest.approx(ph, abs=1e-3)
    assert fit.offset == pytest.approx(c, abs=1e-4)


@pytest.mark.parametrize("bits", [6, 8, 10, 12, 16])
def test_enob_of_ideal_quantiser_is_n(bits: int) -> None:
    # IEEE ENOB = log2(FSR / (NAD_rms sqrt(12))) gives N for an ideal N-bit quantiser
    # (REFERENCES.md section 1, IEEE 1057/1241 definition).
    n, cycles = 1 << 15, 2053
    half = 1 << (bits - 1)
    x = np.sin(2 * np.pi * cycles * np.arange(n) / n + 0.2) * (half - 0.5)
    y = np.floor(x + 0.5)
    r = analyse(y, FS, full_scale=half)
    assert r["enob_bits"] == pytest.approx(bits, abs=0.1)


@pytest.mark.parametrize("thd_target_db", [-40.0, -60.0, -80.0])
def test_thd_recovered(thd_target_db: float) -> None:
    # Known harmonics (2nd..5th) with a chosen total: THD must come back within 0.1 dB.
    n = 1 << 15
    t = np.arange(n) / FS
    f0 = 997.0
    rel = np.array([1.0, 0.5, 0.25, 0.125])
    scale = 10 ** (thd_target_db / 20) / math.sqrt(np.sum(rel**2))
    y = np.sin(2 * np.pi * f0 * t)
    for k, r in enumerate(rel, start=2):
        y += scale * r * np.sin(2 * np.pi * k * f0 * t + 0.3 * k)
    out = analyse(y, FS, freq_hz=f0)
    assert out["thd_db"] == pytest.approx(thd_target_db, abs=0.1)
    assert out["harmonics_dbc"][0] == pytest.approx(20 * math.log10(scale), abs=0.1)


def test_band_limit_and_a_weighting_lower_noise(rng: np.random.Generator) -> None:
    n = 1 << 15
    t = np.arange(n) / FS
    y = 0.5 * np.sin(2 * np.pi * 1000 * t) + 1e-3 * rng.standard_normal(n)
    full = analyse(y, FS, freq_hz=1000)
    band = analyse(y, FS, freq_hz=1000, band_hz=(20, 12000))
    aw = analyse(y, FS, freq_hz=1000, a_weighted=True)
    # White noise: half the band holds half the noise (+3 dB SINAD, within 0.5 dB).
    assert band["sinad_db"] - full["sinad_db"] == pytest.approx(
        10 * math.log10(24000 / 11980), abs=0.5
    )
    assert aw["sinad_db"] > full["sinad_db"]


def test_bs1770_reference_tone() -> None:
    # ITU-R BS.1770: a 0 dBFS 997 Hz sine in one channel reads -3.01 LKFS.
    t = np.arange(int(10 * FS)) / FS
    assert integrated_loudness(np.sin(2 * np.pi * 997 * t), FS) == pytest.approx(-3.01, abs=0.05)
    stereo = np.stack([np.sin(2 * np.pi * 997 * t)] * 2, axis=1)
    assert integrated_loudness(stereo, FS) == pytest.approx(0.0, abs=0.05)


@pytest.mark.parametrize("clip", ["door_chime.flac", "frost_warning.flac"])
def test_loudness_agrees_with_pyloudnorm(clip: str) -> None:
    # Reference implementation from PyPI: pyloudnorm.
    import pyloudnorm

    data, rate = soundfile.read(REPO / "demo_audio" / clip)
    ours = integrated_loudness(data, rate)
    ref = pyloudnorm.Meter(rate).integrated_loudness(data)
    assert ours == pytest.approx(ref, abs=0.1)


def test_true_peak_sees_intersample_peaks() -> None:
    # A sine at fs/4 with a 45 degree phase has samples at 0.707 of its peak: sample
    # peak -3.01 dB, true peak 0 dB.
    n = 4800
    x = np.sin(2 * np.pi * np.arange(n) / 4 + np.pi / 4)
    ramp = np.sin(np.linspace(0, np.pi / 2, 480)) ** 2  # soft edges: no Gibbs overshoot
    x[:480] *= ramp
    x[-480:] *= ramp[::-1]
    assert 20 * math.log10(np.max(np.abs(x))) == pytest.approx(-3.01, abs=0.01)
    assert true_peak_dbtp(x, FS) == pytest.approx(0.0, abs=0.05)


def test_stream_loudness_target_and_ceiling(tmp_path: Path) -> None:
    from ladderpack.stream import stream_clip

    asset = stream_clip(REPO / "demo_audio" / "door_chime.flac", loudness_lufs=-23.0)
    ld = asset.stats["loudness"]
    assert ld["lufs_out"] == pytest.approx(-23.0, abs=1e-6) and not ld["limited_by_true_peak"]
    loud = stream_clip(
        REPO / "demo_audio" / "door_chime.flac", loudness_lufs=-6.0, true_peak_dbtp=-1.0
    )
    ld = loud.stats["loudness"]
    assert ld["limited_by_true_peak"] and ld["true_peak_out_dbtp"] == pytest.approx(-1.0)
    assert loud.stats["overloads"] == 0


@pytest.mark.parametrize(
    ("bits", "dither", "penalty_db"),
    [(8, "tpdf", 4.77), (10, "tpdf", 4.77), (8, "rpdf", 3.01), (12, "none", 0.0)],
)
def test_preview_of_ideal_bundle_matches_theory(
    tmp_path: Path, bits: int, dither: str, penalty_db: float
) -> None:
    # Theory: SNR = 6.02 N + 1.76 dB for a full-scale sine (MT-229), less the dither
    # penalty (TPDF 4.77 dB, RPDF 3.01 dB; Lipshitz et al. 1992), less the 1 dB level.
    res = subprocess.run(
        [
            sys.executable,
            "-m",
            "ladderpack",
            "tone",
            "sine",
            "--bits",
            str(bits),
            "--rate-hz",
            "48000",
            "--coherent-record",
            "16384",
            "--dither",
            dither,
            "--seconds",
            "1",
            "-o",
            str(tmp_path),
        ],
        capture_output=True,
        text=True,
        cwd=REPO,
    )
    assert res.returncode == 0, res.stderr
    res = subprocess.run(
        [sys.executable, "-m", "ladderpack", "preview", str(tmp_path / "sine.json"), "--json"],
        capture_output=True,
        text=True,
        cwd=REPO,
    )
    assert res.returncode == 0, res.stderr
    r = json.loads(res.stdout)["analysis"]
    theory = 6.0206 * bits + 1.7609 - penalty_db - 1.0
    # preview measures in the stream's own 20 kHz band by default: the full-band theory
    # gains 10 log10(24 / 20) dB there (processing gain, MT-001)
    assert r["band_hz"] == [0.0, 20000.0]
    assert r["sinad_db"] == pytest.approx(theory + 10 * math.log10(24 / 20), abs=0.5)
    summary_pred = json.loads((tmp_path / "sine.json").read_text())["stats"][
        "predicted_full_scale_sine"
    ]["sinad_db"]
    # the summary's figure counts the noise in the 20 kHz band only: 20 of the 24 kHz
    # (processing gain 10 log10(fs / 2 BW), Kester, Analog Devices MT-001)
    assert summary_pred == pytest.approx(theory + 1.0 + 10 * math.log10(24 / 20), abs=0.05)


def test_preview_with_filter_and_levels(tmp_path: Path) -> None:
    import soundfile as sf

    assert (
        subprocess.run(
            [
                sys.executable,
                "-m",
                "ladderpack",
                "tone",
                "sine",
                "--bits",
                "8",
                "--freq-hz",
                "5000",
                "-o",
                str(tmp_path),
            ],
            cwd=REPO,
        ).returncode
        == 0
    )
    assert (
        subprocess.run(
            [
                sys.executable,
                "-m",
                "ladderpack",
                "ladder",
                "--bits",
                "8",
                "--levels-out",
                str(tmp_path / "lv.json"),
                "--trials",
                "2",
            ],
            cwd=REPO,
            capture_output=True,
        ).returncode
        == 0
    )
    res = subprocess.run(
        [
            sys.executable,
            "-m",
            "ladderpack",
            "preview",
            str(tmp_path / "sine.json"),
            "--levels",
            str(tmp_path / "lv.json"),
            "--playback-rate-hz",
            "48000",
            "--filter-corner-hz",
            "5000",
            "--json",
        ],
        capture_output=True,
        text=True,
        cwd=REPO,
    )
    assert res.returncode == 0, res.stderr
    r = json.loads(res.stdout)
    _data, rate = sf.read(r["file"])
    assert rate == 48000
    # A first-order RC at its corner passes -3.01 dB; the hold's sinc adds its own droop
    # at 5 kHz of a 22.05 kHz rate: 20 log10(sinc(5000 / 22049.7)) = -0.75 dB.
    hold = 20 * math.log10(np.sinc(5000 / 22049.744))
    assert r["analysis"]["amplitude_dbfs"] == pytest.approx(-1.0 - 3.01 + hold, abs=0.3)


def test_measure_command_on_wav_and_csv(tmp_path: Path) -> None:
    t = np.arange(48000) / FS
    y = 0.5 * np.sin(2 * np.pi * 1000 * t)
    soundfile.write(tmp_path / "cap.wav", y, 48000, subtype="FLOAT")
    (tmp_path / "scope.csv").write_text(
        "time,volts\n"
        + "\n".join(
            f"{tt:.8f},{1.65 + 1.2 * v:.8f}" for tt, v in zip(t[:4000], y[:4000] * 2, strict=True)
        )
    )
    res = subprocess.run(
        [
            sys.executable,
            "-m",
            "ladderpack",
            "measure",
            str(tmp_path / "cap.wav"),
            "--json",
            "--plot",
            str(tmp_path / "s.png"),
        ],
        capture_output=True,
        text=True,
        cwd=REPO,
    )
    assert res.returncode == 0, res.stderr
    r = json.loads(res.stdout)
    assert r["amplitude_dbfs"] == pytest.approx(20 * math.log10(0.5), abs=0.01)
    assert (tmp_path / "s.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    res = subprocess.run(
        [
            sys.executable,
            "-m",
            "ladderpack",
            "measure",
            str(tmp_path / "scope.csv"),
            "--rate-hz",
            "48000",
            "--full-scale",
            "1.2",
            "--json",
        ],
        capture_output=True,
        text=True,
        cwd=REPO,
    )
    r = json.loads(res.stdout)
    assert r["amplitude_dbfs"] == pytest.approx(0.0, abs=0.01)
    assert r["offset"] == pytest.approx(1.65, abs=1e-6)
    # without --rate-hz the rate comes from the time column (1/48000 s steps)
    own = subprocess.run(
        [sys.executable, "-m", "ladderpack", "measure", str(tmp_path / "scope.csv"), "--json"],
        capture_output=True,
        text=True,
        cwd=REPO,
    )
    assert own.returncode == 0, own.stderr
    assert json.loads(own.stdout)["rate_hz"] == pytest.approx(48000.0, rel=1e-6)
    (tmp_path / "bare.csv").write_text("\n".join(f"{v:.6f}" for v in y[:4000]) + "\n")
    bad = subprocess.run(
        [sys.executable, "-m", "ladderpack", "measure", str(tmp_path / "bare.csv")],
        capture_output=True,
        text=True,
        cwd=REPO,
    )
    assert bad.returncode == 2 and "--rate-hz" in bad.stderr


def test_plots_are_pngs(tmp_path: Path) -> None:
    for args in (
        ["plot", "ntf", "--shaping", "f-weighted-9", "-o", str(tmp_path / "n.png")],
        ["plot", "ntf", "--rate-hz", "96000", "--band-hz", "20000", "-o", str(tmp_path / "d.png")],
    ):
        assert (
            subprocess.run(
                [sys.executable, "-m", "ladderpack", *args], cwd=REPO, capture_output=True
            ).returncode
            == 0
        )
    assert (
        subprocess.run(
            [
                sys.executable,
                "-m",
                "ladderpack",
                "ladder",
                "--levels-out",
                str(tmp_path / "l.json"),
                "--trials",
                "2",
            ],
            cwd=REPO,
            capture_output=True,
        ).returncode
        == 0
    )
    assert (
        subprocess.run(
            [
                sys.executable,
                "-m",
                "ladderpack",
                "plot",
                "levels",
                str(tmp_path / "l.json"),
                "-o",
                str(tmp_path / "l.png"),
            ],
            cwd=REPO,
            capture_output=True,
        ).returncode
        == 0
    )
    for name in ("n.png", "d.png", "l.png"):
        data = (tmp_path / name).read_bytes()
        assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 10_000


def test_preview_uses_the_streams_own_levels(tmp_path: Path) -> None:
    # A stream made with --levels previews through those levels by default (a modelled
    # ladder whose top level sits 10 % low: the preview's peak must show it), 'ideal'
    # asks for the ideal ladder, and a changed levels file is refused by its digest.
    from ladderpack.bundle import write_bundle
    from ladderpack.errors import LadderpackError
    from ladderpack.levels import LevelSet
    from ladderpack.preview import render_preview
    from ladderpack.stream import stream_tone

    volts = np.arange(256) * (3.3 / 256)
    volts[128:] -= 0.1 * volts[128:] * (np.arange(128) / 127)  # upper half sags to -10 %
    lv = tmp_path / "sag.json"
    lv.write_text(LevelSet(8, volts, "model").to_json())
    asset = stream_tone("sine", bits=8, seconds=0.05, levels=str(lv), ramp_ms=0.0)
    write_bundle(asset, tmp_path)
    side = str(tmp_path / "sine.json")
    own = render_preview(side)
    ideal = render_preview(side, levels_path="ideal")
    # independent: the levels of the stream's own codes, through the same scaling
    from ladderpack.pack import unpack

    codes = unpack(asset.packed.words, asset.packed.layout, asset.sample_count).codes
    half = (volts[-1] - volts[0]) * 128 / 255
    np.testing.assert_allclose(own.samples, (volts[codes] - volts[0] - half) / half)
    assert not np.allclose(own.samples, ideal.samples)
    lv.write_text(LevelSet(8, volts * 1.01, "model").to_json())
    with pytest.raises(LadderpackError, match="--levels ideal"):
        render_preview(side)


def _iec_a_weighting_db(f: np.ndarray) -> np.ndarray:
    # IEC 61672-1:2013 Annex E analytic A-weighting: R_A(f) with the pole frequencies
    # 20.6, 107.7, 737.9 and 12194 Hz, normalised by +2.00 dB at 1 kHz (written here from
    # the standard's formula, independently of ladderpack.shaping).
    f2 = np.asarray(f, dtype=float) ** 2
    ra = (
        12194.0**2
        * f2**2
        / ((f2 + 20.6**2) * np.sqrt((f2 + 107.7**2) * (f2 + 737.9**2)) * (f2 + 12194.0**2))
    )
    return 20 * np.log10(ra) + 2.00


def test_noise_is_measured_directly_when_distortion_dominates(rng: np.random.Generator) -> None:
    # Known parts (IEEE Std 1241 definitions): a 997.3 Hz sine with 2nd and 3rd harmonics at
    # -26 and -32 dBc and white noise 80 dB below the signal, not coherent with the record.
    from ladderpack.measure import analyse

    rate, n, a = 48000.0, 48000, 0.8
    t = np.arange(n) / rate
    h2, h3, sigma = a * 10 ** (-26 / 20), a * 10 ** (-32 / 20), a / math.sqrt(2) * 1e-4
    y = (
        a * np.sin(2 * np.pi * 997.3 * t)
        + h2 * np.sin(2 * np.pi * 2 * 997.3 * t + 0.3)
        + h3 * np.sin(2 * np.pi * 3 * 997.3 * t + 1.1)
        + sigma * rng.standard_normal(n)
    )
    r = analyse(y, rate)
    assert r["snr_db"] == pytest.approx(80.0, abs=0.3)
    assert r["thd_db"] == pytest.approx(10 * math.log10((h2**2 + h3**2) / a**2), abs=0.02)
    sig, harm, noise = a * a / 2, (h2 * h2 + h3 * h3) / 2, sigma * sigma
    assert r["sinad_db"] == pytest.approx(10 * math.log10(sig / (harm + noise)), abs=0.02)


def test_a_weighting_weighs_signal_harmonics_and_noise_alike(rng: np.random.Generator) -> None:
    # A 3 kHz tone (A-weighting +1.2 dB there) with a -40 dBc 2nd harmonic and white noise:
    # the weighted SNR is the signal times A(3 kHz) over the noise density times the
    # A-weighting integrated over 0..fs/2 (IEC 61672-1 formula above, numerically).
    from ladderpack.measure import analyse

    rate, n, a, sigma = 48000.0, 1 << 16, 0.5, 1e-3
    t = np.arange(n) / rate
    f0 = 3000.7
    y = a * np.sin(2 * np.pi * f0 * t) + a * 0.01 * np.sin(4 * np.pi * f0 * t)
    y = y + sigma * rng.standard_normal(n)
    r = analyse(y, rate, a_weighted=True, weight_tone=True)  # the tone weighted too
    f = np.linspace(1.0, rate / 2, 200001)
    w = 10 ** (_iec_a_weighting_db(f) / 10)
    noise_w = sigma**2 * float(np.trapezoid(w, f)) / (rate / 2)
    sig_w = a * a / 2 * 10 ** (_iec_a_weighting_db(np.array([f0]))[0] / 10)
    assert r["snr_db"] == pytest.approx(10 * math.log10(sig_w / noise_w), abs=0.3)
    assert r["thd_n_db"] >= r["thd_db"]  # distortion plus noise is never below distortion
    harm_w = (a * 0.01) ** 2 / 2 * 10 ** (_iec_a_weighting_db(np.array([2 * f0]))[0] / 10)
    assert r["thd_db"] == pytest.approx(10 * math.log10(harm_w / sig_w), abs=0.05)


def test_sfdr_reads_a_spur_between_bins_right() -> None:
    # A spur half-way between two FFT bins (the Hann window's worst scalloping, 1.42 dB)
    # 70 dB below the carrier: SFDR must read 70.0 dB.
    from ladderpack.measure import analyse

    rate, n = 48000.0, 1 << 14
    t = np.arange(n) / rate
    bin_hz = rate / n
    y = 0.9 * np.sin(2 * np.pi * 1000.3 * t)
    y = y + 0.9 * 10 ** (-70 / 20) * np.sin(2 * np.pi * (517.5 * bin_hz) * t + 0.4)
    r = analyse(y, rate)
    assert r["sfdr_db"] == pytest.approx(70.0, abs=0.05)


def test_measure_finds_the_steady_part_of_a_ramped_capture(tmp_path: Path) -> None:
    # A 1 kHz sine at -1 dBFS, 10-bit TPDF (theory: 6.02 x 10 + 1.76 - 4.77 - 1.0 dB at
    # -1 dBFS = 56.2 dB, Lipshitz et al. 1992), with 50 ms raised-cosine ramps and 100 ms
    # of silence at both ends: measured whole it reads far lower; the steady part found
    # automatically gives the theory, and says what it used.
    import soundfile

    rate = 48000
    rng = np.random.default_rng(4)
    t = np.arange(rate) / rate
    tone = 10 ** (-1 / 20) * np.sin(2 * np.pi * 1000 * t)
    q = (np.round(tone * 512 + rng.triangular(-1, 0, 1, t.size)) / 512).astype(float)
    ramp = 0.5 - 0.5 * np.cos(np.pi * np.arange(2400) / 2400)
    env = np.concatenate(
        [np.zeros(4800), ramp, np.ones(q.size - 2 * 2400), ramp[::-1], np.zeros(4800)]
    )
    capture = np.concatenate([np.zeros(4800), q, np.zeros(4800)]) * env
    path = tmp_path / "ramped.wav"
    soundfile.write(path, capture, rate, subtype="FLOAT")
    res = subprocess.run(
        [sys.executable, "-m", "ladderpack", "measure", str(path), "--json"],
        capture_output=True,
        text=True,
        cwd=REPO,
    )
    assert res.returncode == 0, res.stderr
    r = json.loads(res.stdout)
    theory = 6.0206 * 10 + 1.7609 - 4.77 - 1.0
    assert r["sinad_db"] == pytest.approx(theory, abs=0.5)
    lo, hi = r["analysed_samples"]
    assert 4800 + 2400 <= lo <= 4800 + 2400 + 480 and capture.size - 7200 - 480 <= hi
    assert r["warnings"] == []


def test_measure_warns_on_a_capture_that_is_not_a_sine(tmp_path: Path) -> None:
    speech = REPO / "demo_audio" / "frost_warning.flac"
    res = subprocess.run(
        [sys.executable, "-m", "ladderpack", "measure", str(speech), "--json"],
        capture_output=True,
        text=True,
        cwd=REPO,
    )
    assert res.returncode == 0, res.stderr
    r = json.loads(res.stdout)
    assert r["warnings"] and "does not look like a sine" in r["warnings"][0]


def test_scope_csv_header_gives_the_sample_interval(tmp_path: Path) -> None:
    # A scope-style export: header lines naming the record and the sample interval
    # (1 us), then one value per line. The header lines are not samples, and the rate
    # (1 MHz) comes from the interval: a 10 kHz tone measures at 10 kHz.
    n = 5000
    y = 0.3 * np.sin(2 * np.pi * 10_000 * np.arange(n) / 1e6)
    lines = ["Record Length,5000", "Sample Interval,1.0E-06 s", "Units,V", "Volt"]
    lines += [f"{v:.9f}" for v in y]
    csv_path = tmp_path / "scope.csv"
    csv_path.write_text("\n".join(lines) + "\n")
    res = subprocess.run(
        [sys.executable, "-m", "ladderpack", "measure", str(csv_path), "--json"],
        capture_output=True,
        text=True,
        cwd=REPO,
    )
    assert res.returncode == 0, res.stderr
    r = json.loads(res.stdout)
    assert r["rate_hz"] == pytest.approx(1e6)
    assert r["freq_hz"] == pytest.approx(10_000.0, rel=1e-6)
    assert "header line 2" in r["rate_source"]
    assert r["analysed_samples"][1] <= n


def _line(y: np.ndarray, rate: float, f: float) -> complex:
    """Complex amplitude of the component at f (least squares, DC included)."""
    t = np.arange(y.size) / rate
    d = np.column_stack([np.cos(2 * np.pi * f * t), np.sin(2 * np.pi * f * t), np.ones_like(t)])
    (a, b, _c), *_ = np.linalg.lstsq(d, y, rcond=None)
    return complex(a, -b)


def test_preview_hold_is_the_exact_zero_order_hold() -> None:
    # A zero-order hold of period T has the transfer T sinc(fT) exp(-j pi f T): its image
    # of a tone f0 at fs - f0 sits 20 log10(f0 / (fs - f0)) below the tone (sin(pi(fs -
    # f0)/fs) = sin(pi f0/fs)), and the tone lags by T/2 (textbook sampling theory). A
    # 1 kHz tone at 48 kHz, heard at 192 kHz: image -33.44 dB, lag 10.42 us.
    from ladderpack.preview import analog_output

    fs, f0, n, over = 48000.0, 1000.0, 4800, 4
    levels = np.sin(2 * np.pi * f0 * np.arange(n) / fs)
    y = analog_output(levels, fs, over)
    rate = over * fs
    tone, image = _line(y, rate, f0), _line(y, rate, fs - f0)
    assert 20 * np.log10(abs(image) / abs(tone)) == pytest.approx(
        20 * np.log10(f0 / (fs - f0)), abs=0.01
    )
    lag = -np.angle(tone / _line(levels, fs, f0)) / (2 * np.pi * f0)
    assert lag == pytest.approx(0.5 / fs, abs=2e-8)
    # and the tone's magnitude carries the hold's droop, sinc(f0 / fs)
    assert abs(tone) == pytest.approx(np.sinc(f0 / fs), rel=1e-4)


def test_preview_rc_filter_is_exact() -> None:
    # A first-order RC (corner 5 kHz) after the hold: the 1 kHz tone is further scaled by
    # 1 / |1 + j f / fc| = 0.98058 and delayed by atan(f / fc) / (2 pi f) (RC network).
    from ladderpack.preview import analog_output

    fs, f0, n, over, fc = 48000.0, 1000.0, 9600, 4, 5000.0
    levels = np.sin(2 * np.pi * f0 * np.arange(n) / fs)
    plain = _line(analog_output(levels, fs, over)[over * 2400 :], over * fs, f0)
    rc = _line(analog_output(levels, fs, over, fc)[over * 2400 :], over * fs, f0)
    assert abs(rc) / abs(plain) == pytest.approx(1 / math.hypot(1, f0 / fc), rel=1e-5)
    assert -np.angle(rc / plain) == pytest.approx(math.atan(f0 / fc), abs=1e-5)


def test_preview_names_the_rendered_and_the_header_rate(tmp_path: Path) -> None:
    # The stream's achieved rate is fractional (44099.97 Hz at 125 MHz); a WAV header
    # holds whole hertz (RIFF/WAVE fmt chunk: a 32-bit integer rate), so the report gives
    # both, and the header is the rounded one (read back with soundfile).
    res = subprocess.run(
        [
            sys.executable,
            "-m",
            "ladderpack",
            "tone",
            "sine",
            "--rate-hz",
            "44100",
            "--seconds",
            "0.05",
            "-o",
            str(tmp_path),
        ],
        capture_output=True,
        text=True,
        cwd=REPO,
    )
    assert res.returncode == 0, res.stderr
    res = subprocess.run(
        [
            sys.executable,
            "-m",
            "ladderpack",
            "preview",
            str(tmp_path / "sine.json"),
            "--json",
            "--no-measure",
        ],
        capture_output=True,
        text=True,
        cwd=REPO,
    )
    assert res.returncode == 0, res.stderr
    r = json.loads(res.stdout)
    assert r["rate_hz"] != round(r["rate_hz"])
    assert r["wav_header_rate_hz"] == round(r["rate_hz"])
    assert soundfile.info(r["file"]).samplerate == r["wav_header_rate_hz"]


@pytest.mark.parametrize("f0", [3000.0, 4000.0, 6000.0, 8000.0, 12000.0])
def test_harmonics_folding_together_are_one_line(f0: float) -> None:
    # A bench tone at a simple fraction of 48 kHz whose only distortion is a second
    # harmonic at -60 dBc (known by construction): THD must read -60 dB. Before, the
    # folded harmonics were duplicate columns and THD read +4.36 dB at 6 kHz.
    rate, n = 48000.0, 48000
    t = np.arange(n) / rate
    y = 0.9 * np.sin(2 * np.pi * f0 * t) + 0.9e-3 * np.sin(2 * np.pi * 2 * f0 * t + 0.3)
    r = analyse(y, rate)
    if 2 * f0 % rate == 0 or (2 * f0) % (rate / 2) == 0:  # 2 f0 on DC or Nyquist: hidden
        assert r["hidden_harmonics"]
    else:
        assert abs(r["thd_db"] - -60.0) < 0.01, r["thd_db"]
    assert r["warnings"] and "relatively prime" in r["warnings"][0]


def test_a_relatively_prime_tone_has_no_folding_warning() -> None:
    rate, n = 48000.0, 48000
    t = np.arange(n) / rate
    y = np.sin(2 * np.pi * 997.0 * t) + 1e-3 * np.sin(2 * np.pi * 1994.0 * t)
    r = analyse(y, rate)
    assert not r["warnings"] and not r["merged_harmonics"] and not r["hidden_harmonics"]
    assert abs(r["thd_db"] - -60.0) < 0.01


def test_a_given_frequency_off_the_tone_is_warned(tmp_path: Path) -> None:
    # the tool's own preview: a stream at 22049.7 Hz in a WAV that says 22050 Hz
    res = subprocess.run(
        [sys.executable, "-m", "ladderpack", "tone", "sine", "--seconds", "0.5", "-o", "o"],
        cwd=tmp_path, capture_output=True, text=True,
    )  # fmt: skip
    assert res.returncode == 0, res.stderr
    subprocess.run(
        [sys.executable, "-m", "ladderpack", "preview", "o/sine.json"],
        cwd=tmp_path, capture_output=True, check=True,
    )  # fmt: skip

    def measure(*extra: str) -> dict:
        out = subprocess.run(
            [sys.executable, "-m", "ladderpack", "measure", "o/sine_preview.wav", "--json",
             *extra],
            cwd=tmp_path, capture_output=True, text=True,
        )  # fmt: skip
        assert out.returncode == 0, out.stderr
        return json.loads(out.stdout)

    side = json.loads((tmp_path / "o" / "sine.json").read_text())
    exact_rate = side["clock"]["achieved_rate_hz"]
    off = measure("--freq-hz", "1000")  # the tone's frequency, at the header's 22050 Hz
    assert any("free fit" in w for w in off["warnings"])
    # --rate-hz overrides the header's whole hertz, and says so
    right = measure("--rate-hz", repr(exact_rate))
    assert right["rate_hz"] == exact_rate and "--rate-hz" in right["rate_source"]


def test_preview_measures_in_the_streams_band(tmp_path: Path) -> None:
    res = subprocess.run(
        [sys.executable, "-m", "ladderpack", "tone", "sine", "--rate-hz", "48000",
         "--seconds", "0.5", "-o", "o"],
        cwd=tmp_path, capture_output=True, text=True,
    )  # fmt: skip
    assert "in the 0..20000 Hz band" in res.stdout
    res = subprocess.run(
        [sys.executable, "-m", "ladderpack", "preview", "o/sine.json", "--json"],
        cwd=tmp_path, capture_output=True, text=True,
    )  # fmt: skip
    assert json.loads(res.stdout)["analysis"]["band_hz"] == [0.0, 20000.0]


def _scope_csv(path: Path, layout: str) -> Path:
    # 1 kHz at a 2 us sample interval (500 kHz), 6000 samples, in a common scope layout:
    # a header naming the columns "X,CH1,Start,Increment," and a row of their values, then
    # a sample-number column (not time) and the channel's values
    lines = ["X,CH1,Start,Increment,", "Sequence,Volt,-6.000000e-03,2.000000e-06"]
    if layout == "no-interval":
        lines = ["X,CH1"]
    lines += [f"{k},{math.sin(2 * math.pi * 1000 * k * 2e-6):.6e}," for k in range(6000)]
    path.write_text("\n".join(lines) + "\n")
    return path


def test_a_scope_csv_reads_its_increment_not_the_sequence_column(tmp_path: Path) -> None:
    from ladderpack.audio import read_capture_csv

    x, rate, how = read_capture_csv(_scope_csv(tmp_path / "s.csv", "increment"))
    assert x.size == 6000 and rate == pytest.approx(500_000.0) and "Increment" in how
    _x, rate, _how = read_capture_csv(_scope_csv(tmp_path / "q.csv", "no-interval"))
    assert rate is None  # a column counting 0, 1, 2 ... is no time: --rate-hz is needed


def test_a_weighted_snr_weights_the_noise_not_the_tone(rng: np.random.Generator) -> None:
    # AES17 practice: A-weighted noise against the unweighted tone. IEC 61672-1 Table 3:
    # A-weighting at 100 Hz is -19.1 dB, so weighting the tone too reads 19.1 dB lower.
    rate, n = 48000.0, 48000
    t = np.arange(n) / rate
    y = 0.5 * np.sin(2 * np.pi * 100.0 * t) + 1e-4 * rng.standard_normal(n)
    usual = analyse(y, rate, a_weighted=True)
    both = analyse(y, rate, a_weighted=True, weight_tone=True)
    assert usual["snr_db"] - both["snr_db"] == pytest.approx(19.1, abs=0.1)
    assert not usual["tone_weighted"] and both["tone_weighted"]
