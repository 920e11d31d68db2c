"""Reading clips: formats, channels, validation."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import soundfile

from ladderpack.audio import Signal, check_signal, load_clip
from ladderpack.errors import AudioFileError, OptionError, SignalError

FORMATS = [
    ("wav", "WAV", "PCM_16"),
    ("flac", "FLAC", "PCM_24"),
    ("ogg", "OGG", "VORBIS"),
    ("aiff", "AIFF", "PCM_16"),
    ("wav", "WAV", "FLOAT"),
]


@pytest.mark.parametrize(("ext", "fmt", "subtype"), FORMATS)
def test_reads_every_format_and_downmixes(tmp_path: Path, ext: str, fmt: str, subtype: str) -> None:
    t = np.arange(8000) / 16000
    left, right = 0.5 * np.sin(2 * np.pi * 500 * t), 0.25 * np.sin(2 * np.pi * 500 * t)
    path = tmp_path / f"clip.{ext}"
    soundfile.write(path, np.stack([left, right], 1), 16000, format=fmt, subtype=subtype)
    mix = load_clip(path)
    assert mix.rate_hz == 16000 and mix.channels == 1 and mix.frames == 8000
    tol = 0.02 if subtype == "VORBIS" else 1e-4  # lossy codec
    np.testing.assert_allclose(mix.samples, (left + right) / 2, atol=tol)
    np.testing.assert_allclose(load_clip(path, channel=1).samples, right, atol=tol)


def test_many_channels(tmp_path: Path) -> None:
    data = np.tile(np.linspace(-0.5, 0.5, 32), (100, 1))
    path = tmp_path / "c32.wav"
    soundfile.write(path, data, 8000, subtype="FLOAT")
    assert load_clip(path).samples == pytest.approx(np.zeros(100), abs=1e-7)
    assert load_clip(path, channel=31).samples[0] == pytest.approx(0.5)
    with pytest.raises(OptionError, match=r"numbered 0\.\.31"):
        load_clip(path, channel=32)


def test_missing_and_folder(tmp_path: Path) -> None:
    with pytest.raises(AudioFileError, match="no such file"):
        load_clip(tmp_path / "none.wav")
    with pytest.raises(AudioFileError, match="is a folder"):
        load_clip(tmp_path)


def test_truncated_header(tmp_path: Path) -> None:
    good = tmp_path / "good.wav"
    soundfile.write(good, np.zeros(100), 8000)
    bad = tmp_path / "bad.wav"
    bad.write_bytes(good.read_bytes()[:20])
    with pytest.raises(AudioFileError, match=r"bad\.wav: not a readable sound file"):
        load_clip(bad)


@pytest.mark.parametrize("value", [np.nan, np.inf, -np.inf])
def test_non_finite_rejected(value: float) -> None:
    x = np.zeros(10)
    x[4] = value
    with pytest.raises(SignalError, match="frame 4"):
        check_signal(Signal(x, 8000.0), source="x.wav")


def test_bad_rate_rejected() -> None:
    with pytest.raises(SignalError, match="rate_hz"):
        check_signal(Signal(np.zeros(3), 0.0))
