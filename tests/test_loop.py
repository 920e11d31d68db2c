"""Looping streams: whole words, seamless seams, intro and outro ramps."""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest

from ladderpack.audio import Signal
from ladderpack.conform import loop_crossfade, loop_rate, resample
from ladderpack.stream import stream_signal


def _tone_loop(cycles: int = 50, rate: float = 44100.0, freq: float = 441.0) -> Signal:
    n = round(cycles * rate / freq)
    t = np.arange(n) / rate
    return Signal(np.sin(2 * np.pi * freq * t), rate)


@pytest.mark.parametrize("bits", [1, 3, 8, 10, 12, 16])
def test_loop_closes_on_a_word_boundary(bits: int) -> None:
    asset = stream_signal(_tone_loop(), name="l", bits=bits, loop=True, dither="none")
    spw = asset.packed.layout.samples_per_word
    assert len(asset.codes) % spw == 0
    assert asset.sample_count == asset.word_count * spw  # no padding in a loop


def test_no_ramp_or_fade_inside_a_loop() -> None:
    asset = stream_signal(_tone_loop(), name="l", bits=8, loop=True, dither="none", idle_code=0)
    codes = asset.codes.codes.astype(int)
    assert codes.min() < 40 and codes.max() > 215  # full swing from the first period on
    assert abs(int(codes[0]) - 128) < 40  # starts near the sine's zero, not at idle 0
    assert asset.intro is not None and asset.outro is not None
    from ladderpack.pack import unpack

    intro = unpack(asset.intro.words, asset.packed.layout).codes
    outro = unpack(asset.outro.words, asset.packed.layout).codes
    assert intro[0] == 0 and outro[-1] == 0  # from and back to the idle code
    spw = asset.packed.layout.samples_per_word
    # The loop program replays the last word once the FIFO is empty: it must be all idle.
    assert outro.size % spw == 0 and set(outro[-spw:].tolist()) == {0}
    assert np.all(np.diff(intro[: asset.stats["ramp_samples"]].astype(int)) >= 0)


def test_seam_is_as_smooth_as_the_middle() -> None:
    # A loop of whole cycles played twice in a row: the step across the seam is no larger
    # than the largest step inside the loop.
    asset = stream_signal(_tone_loop(), name="l", bits=12, loop=True, dither="none")
    c = asset.codes.codes.astype(int)
    inner = np.max(np.abs(np.diff(c)))
    seam = abs(c[0] - c[-1])
    assert seam <= inner


def test_periodic_resampling_matches_a_long_continuous_run() -> None:
    # Resampling one period with wrap-around must equal the middle of a resampled long
    # repetition of it (where the filter never sees an edge).
    one = _tone_loop(cycles=20)
    rate = loop_rate(one.frames, one.rate_hz, Fraction(22050), 4)
    short = resample(one, rate, bits=12, periodic=True).samples
    long = resample(Signal(np.tile(one.samples, 9), one.rate_hz), rate, bits=12).samples
    mid = long[4 * short.size : 5 * short.size]
    assert short.size % 4 == 0
    assert np.max(np.abs(mid - short)) < 1e-5  # below -100 dBFS


def test_loop_rate_rounds_to_whole_words() -> None:
    # 1000 input frames at 44100 Hz -> 22050 Hz is 500 samples; with 3 samples per word
    # (10-bit) 500 / 3 = 166.7 rounds to 167 words = 501 samples, so the loop is
    # resampled at 44100 * 501 / 1000 = 22094.1 Hz (+0.2 %).
    r = loop_rate(1000, 44100.0, Fraction(22050), 3)
    assert r == Fraction(44100 * 501, 1000)


def test_crossfade_hides_a_discontinuity() -> None:
    # A rising ramp jumps back at the seam; an equal-power crossfade folds the end onto
    # the start so the wrap no longer jumps.
    x = Signal(np.linspace(-0.5, 0.5, 4410), 44100.0)
    faded = loop_crossfade(x, crossfade_ms=20.0)
    k = 882
    assert faded.frames == 4410 - k
    assert abs(faded.samples[0] - faded.samples[-1]) < 0.01
    assert abs(x.samples[0] - x.samples[-1]) == pytest.approx(1.0)
