"""Flash and RAM budgets, checked against hand-worked arithmetic."""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest

from ladderpack.audio import Signal
from ladderpack.budget import TargetProfile, check_budget, stream_budget
from ladderpack.errors import OptionError
from ladderpack.stream import stream_signal

RATE_22K = Fraction(125_000_000, 5669)  # plan for 22050 Hz at 125 MHz: 22049.744 Hz


def test_longest_stream_default_target_8_bit() -> None:
    # 2 MiB = 2097152 bytes, less 256 KiB = 262144 reserved -> 1835008 bytes available
    # = 458752 words; 4 samples per word -> 1835008 samples; / 22049.744 Hz = 83.2213 s.
    b = stream_budget(
        1000,
        samples_per_word=4,
        rate_hz=RATE_22K,
        target=TargetProfile(),
        player_chunk_words=1024,
        embedded=False,
    )
    assert b.target.flash_available_bytes == 1_835_008
    assert b.max_samples == 1_835_008
    assert b.max_duration_s == pytest.approx(83.2213, abs=1e-4)
    # 1000 words = 4000 bytes: 4000 / 2097152 = 0.19073 % of the flash.
    assert b.stream_bytes == 4000
    assert b.flash_share == pytest.approx(0.0019073, abs=1e-7)
    # Two DMA buffers of 1024 words = 8192 bytes of RAM.
    assert b.ram_bytes == 8192 and b.fits


def test_longest_stream_12_bit_48k() -> None:
    # 458752 words x 2 samples = 917504 samples at 125e6/2604 = 48003.072 Hz -> 19.113 s.
    b = stream_budget(
        1,
        samples_per_word=2,
        rate_hz=Fraction(125_000_000, 2604),
        target=TargetProfile(),
        player_chunk_words=1024,
        embedded=False,
    )
    assert b.max_samples == 917_504
    assert b.max_duration_s == pytest.approx(19.1134, abs=1e-4)


def test_embedded_words_count_in_ram() -> None:
    # 300 embedded words = 1200 bytes, plus 2 x 64-word buffers = 512 bytes -> 1712.
    b = stream_budget(
        300,
        samples_per_word=4,
        rate_hz=RATE_22K,
        target=TargetProfile(),
        player_chunk_words=64,
        embedded=True,
    )
    assert b.ram_bytes == 1712


def test_refusal_names_the_numbers() -> None:
    # 16 KiB flash, nothing reserved: 16384 bytes = 4096 words = 16384 samples at 8 bits;
    # at 8000 Hz that is 2.048 s. A 5000-word (20000-byte) stream does not fit.
    t = TargetProfile(flash_bytes=16384, flash_reserve_bytes=0)
    b = stream_budget(
        5000,
        samples_per_word=4,
        rate_hz=Fraction(8000),
        target=t,
        player_chunk_words=16,
        embedded=False,
    )
    assert not b.fits
    with pytest.raises(OptionError, match=r"needs 20000 bytes .* 16384 are available.*2\.048 s"):
        check_budget(b)


def test_ram_refusal() -> None:
    t = TargetProfile(ram_bytes=4096)
    b = stream_budget(
        10,
        samples_per_word=4,
        rate_hz=Fraction(8000),
        target=t,
        player_chunk_words=1024,
        embedded=False,
    )
    with pytest.raises(OptionError, match="8192 bytes of RAM"):
        check_budget(b)


def test_bad_profiles() -> None:
    with pytest.raises(OptionError, match="flash_reserve_bytes"):
        TargetProfile(flash_bytes=1000, flash_reserve_bytes=2000)
    with pytest.raises(OptionError, match="ram_bytes"):
        TargetProfile(ram_bytes=-1)


def test_pipeline_refuses_a_stream_that_cannot_fit() -> None:
    t = np.arange(48000) / 48000  # one second
    sig = Signal(0.5 * np.sin(2 * np.pi * 440 * t), 48000.0)
    with pytest.raises(OptionError, match="bytes of flash"):
        stream_signal(
            sig, name="big", bits=8, rate_hz=22050, flash_bytes=8192, flash_reserve_bytes=0
        )
    asset = stream_signal(sig, name="big", bits=8, rate_hz=22050)
    assert asset.budget is not None
    assert asset.budget.stream_bytes == asset.byte_count


def test_flash_refusal_comes_from_the_plan_before_any_sample(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    # The 2.3 s demo chime at 22.05 kHz, 8 bits, needs 50716 bytes; a 16 KiB flash with
    # nothing reserved holds 16384 (worked by hand: 4 samples a word). The refusal must
    # come from the plan: processing is not even started.
    from pathlib import Path

    import ladderpack.stream as st
    from ladderpack.errors import LadderpackError

    def no_processing(*_a: object, **_k: object) -> None:
        raise AssertionError("the clip was processed before the budget was checked")

    monkeypatch.setattr(st, "process", no_processing)
    clip = Path(__file__).resolve().parents[1] / "demo_audio" / "door_chime.flac"
    with pytest.raises(LadderpackError, match="flash"):
        st.stream_clip(clip, flash_bytes=16384, flash_reserve_bytes=0)
