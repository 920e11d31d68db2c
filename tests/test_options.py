"""The option model, plan-before-work refusals and targets."""

from __future__ import annotations

import dataclasses
import re
import tracemalloc
from pathlib import Path

import numpy as np
import pytest

from ladderpack.audio import Signal
from ladderpack.errors import LadderpackError, OptionError
from ladderpack.options import (
    AnalysisOptions,
    ClipOptions,
    ClockOptions,
    LadderDesignSpec,
    MeasureOptions,
    NtfPlotSpec,
    StreamOptions,
    ToneSpec,
    WaveTableSpec,
    from_mapping,
    option_fields,
)
from ladderpack.targets import get_target

REPO = Path(__file__).resolve().parent.parent
CHIME = REPO / "demo_audio" / "door_chime.flac"


@pytest.mark.parametrize(
    ("kwargs", "field"),
    [
        ({"bits": 20}, "bits"),
        ({"bits": 8.0}, "bits"),
        ({"rate_hz": 0}, "rate_hz"),
        ({"rate_hz": float("nan")}, "rate_hz"),
        ({"dither": "gauss"}, "dither"),
        ({"idle_code": 256}, "idle_code"),
        ({"samples_per_word": 5}, "samples_per_word"),
        ({"crossfade_ms": 5.0}, "crossfade_ms"),
        ({"loop": True, "fade_ms": 2.0}, "fade_ms"),
        ({"ntf_order": 4}, "ntf_order"),
        ({"ntf_form": "fir"}, "ntf_form"),
        ({"force": True}, "force"),
        ({"true_peak_dbtp": -2.0}, "true_peak_dbtp"),
        ({"loudness_lufs": -16.0, "headroom_db": 3.0}, "headroom_db"),
        ({"loudness_lufs": 5.0}, "loudness_lufs"),
        ({"out_base": 25}, "out_base"),
        ({"target": "esp32"}, "target"),
        ({"flash_bytes": 1000}, "flash_reserve_bytes"),
    ],
)
def test_stream_options_refuse_bad_or_inapplicable_values(
    kwargs: dict[str, object], field: str
) -> None:
    with pytest.raises(OptionError) as info:
        StreamOptions(**kwargs)  # type: ignore[arg-type]
    assert info.value.field == field


def test_options_that_apply_together_are_accepted() -> None:
    StreamOptions(shaping="designed", ntf_order=4, ntf_form="fir", ntf_max_db=6.0)
    StreamOptions(loop=True, crossfade_ms=5.0)
    StreamOptions(loudness_lufs=-16.0, true_peak_dbtp=-2.0)
    StreamOptions(shaping="f-weighted-9", force=True)


def test_numbers_are_normalised_to_float() -> None:
    assert StreamOptions(rate_hz=22050).rate_hz == 22050.0
    assert isinstance(StreamOptions(rate_hz=22050).rate_hz, float)


def test_tone_refuses_clip_only_options() -> None:
    with pytest.raises(OptionError, match="headroom_db"):
        StreamOptions(headroom_db=3.0).check_for_tone()
    with pytest.raises(OptionError, match="seconds or cycles"):
        ToneSpec(seconds=2.0, cycles=10)


def test_from_mapping_names_file_and_field() -> None:
    with pytest.raises(LadderpackError) as info:
        from_mapping(StreamOptions, {"bits": "eight"}, file="m.toml", where="asset 'bell'")
    assert str(info.value).startswith("m.toml: asset 'bell'.bits: must be a whole number")
    with pytest.raises(LadderpackError, match="unknown key"):
        from_mapping(StreamOptions, {"bitz": 8}, file="m.toml")


# -- targets: figures from the vendor SDK headers (../shared/vendor/pico-sdk:
#    src/rp20x0/hardware_regs/include/hardware/platform_defs.h and regs/addressmap.h)


@pytest.mark.parametrize(
    ("name", "clock", "gpios", "pios", "ram"),
    [
        ("rp2040", 125_000_000, 30, 2, 0x20042000 - 0x20000000),
        ("rp2350", 150_000_000, 30, 3, 0x20082000 - 0x20000000),
        ("rp2350b", 150_000_000, 48, 3, 0x20082000 - 0x20000000),
    ],
)
def test_target_figures_match_the_sdk_headers(
    name: str, clock: int, gpios: int, pios: int, ram: int
) -> None:
    t = get_target(name)
    assert (t.sys_clock_hz, t.gpio_count, t.pio_blocks, t.ram_bytes) == (clock, gpios, pios, ram)


def test_target_supplies_defaults_and_explicit_options_win() -> None:
    o = StreamOptions(target="rp2350")
    assert (o.sys_clock_hz, o.ram_bytes, o.flash_bytes) == (150_000_000, 532480, 4 << 20)
    assert StreamOptions(target="rp2350", sys_clock_hz=125_000_000).sys_clock_hz == 125_000_000


def test_gpio_window() -> None:
    # RP2350 datasheet, PIO GPIOBASE: only 0 and 16 (pico-sdk regs/pio.h, PIO_GPIOBASE).
    b = get_target("rp2350b")
    assert b.gpio_window(40, 8) == 16
    assert b.gpio_window(0, 16) == 0
    assert b.gpio_window(20, 16) == 16
    with pytest.raises(OptionError, match="straddle"):
        b.gpio_window(10, 30)
    with pytest.raises(OptionError, match=r"GPIO 0\.\.29"):
        get_target("rp2040").gpio_window(40, 8)


def test_rp2350b_ladder_on_gpio_40_decodes_through_the_gpio_base() -> None:
    # SMx_PINCTRL layout (RP2040/RP2350 datasheets, PIO registers): OUT_BASE bits 4:0,
    # OUT_COUNT bits 25:20; on the RP2350 pin numbers are relative to GPIOBASE.
    from ladderpack.emit import c, micropython
    from ladderpack.stream import stream_signal

    sig = Signal(np.sin(np.arange(480) * 0.2), 48000.0)
    asset = stream_signal(sig, name="hi", target="rp2350b", out_base=40, rate_hz=16000)
    pinctrl = asset.sm.pinctrl
    assert asset.sm.gpio_base == 16
    assert pinctrl & 0x1F == 40 - 16
    assert (pinctrl >> 20) & 0x3F == 8
    assert asset.plan.sys_clock_hz == 150_000_000
    assert "#define HI_GPIO_BASE" in c.render_header(asset)
    assert "GPIO_BASE = 16" in micropython.render(asset, embed=False)


def test_rp2040_refuses_gpio_40() -> None:
    with pytest.raises(OptionError, match="out_base"):
        StreamOptions(out_base=40)


# -- plan before work


def test_mistyped_rate_is_named_in_a_warning() -> None:
    # 22.05 for 22.05 kHz: cheap to make (the resampler's memory does not grow with the
    # ratio), but the summary says what was probably meant.
    from ladderpack.stream import stream_clip

    tracemalloc.start()
    try:
        asset = stream_clip(CHIME, rate_hz=22.05)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert any("did you mean 22050 Hz" in w for w in asset.stats["warnings"])
    assert peak < 64 * 2**20
    assert "warnings" not in stream_clip(CHIME).stats


def test_flash_overflow_is_refused_before_processing(monkeypatch: pytest.MonkeyPatch) -> None:
    from ladderpack import stream

    def never(*args: object, **kwargs: object) -> None:
        raise AssertionError("processing started")

    monkeypatch.setattr(stream, "process", never)
    with pytest.raises(OptionError, match="bytes of flash"):
        stream.stream_clip(CHIME, flash_bytes=300_000)


def test_memory_limit_is_an_option() -> None:
    from ladderpack.stream import stream_clip

    with pytest.raises(OptionError, match=r"MiB limit"):
        stream_clip(CHIME, max_memory_mib=1.0)


def test_block_frames_refused_for_loops() -> None:
    from ladderpack.stream import stream_clip

    with pytest.raises(OptionError, match="block_frames"):
        stream_clip(CHIME, loop=True, block_frames=1000)


# -- one source for every surface


def _readme_row(flag: str, section: str | None = None) -> list[str] | None:
    """The README's row of `flag`: the first anywhere, or the first in `section`."""
    lines = (REPO / "README.md").read_text().splitlines()
    if section is not None:
        start = lines.index(section)
        end = next((k for k in range(start + 1, len(lines)) if lines[k].startswith("#")), None)
        lines = lines[start:end]
    for line in lines:
        if line.startswith(f"| `{flag}"):
            return [c.strip() for c in line.strip("|").split("|")]
    return None


#: The README section of a command's own option table (None: the first row anywhere).
SECTIONS: dict[type, str | None] = {
    StreamOptions: None,
    ToneSpec: None,
    WaveTableSpec: None,
    ClipOptions: None,
    ClockOptions: "### `ladderpack clock RATE_HZ`",
    LadderDesignSpec: "### `ladderpack ladder`",
    MeasureOptions: "### `ladderpack measure CAPTURE`",
    AnalysisOptions: "### `ladderpack measure CAPTURE`",
    NtfPlotSpec: "### `ladderpack plot levels LEVELS`, `ladderpack plot ntf`",
}


@pytest.mark.parametrize("cls", list(SECTIONS), ids=lambda c: c.__name__)
def test_readme_tables_agree_with_the_model(cls: type) -> None:
    for f, info, _hint in option_fields(cls):
        if not info.cli:
            continue
        flag = (info.flag or "--" + f.name.replace("_", "-")).split("/")[0]
        row = _readme_row(flag, SECTIONS[cls])
        assert row is not None, f"{flag} has no README row"
        default = row[2]
        if f.default is None or isinstance(f.default, tuple):
            continue
        if isinstance(f.default, bool):
            expect = "band-limited" if f.name == "band_limited" else "off"
            assert default == expect, (flag, default)
        elif isinstance(f.default, str):
            assert default == f"`{f.default}`", (flag, default)
        else:
            number = re.match(r"-?(0x[0-9a-fA-F]+|[\d.]+)", default.strip("`"))
            assert (
                number
                and float(int(number.group(), 0) if "x" in number.group() else number.group())
                == f.default
            ), (flag, default)
        if info.choices:
            for choice in info.choices:
                assert f"`{choice}`" in " ".join(row), (flag, choice)


def test_sidecar_options_are_the_model_dict() -> None:
    from ladderpack.stream import stream_signal

    sig = Signal(np.sin(np.arange(480) * 0.2), 48000.0)
    opts = StreamOptions(bits=10, rate_hz=16000)
    asset = stream_signal(sig, name="s", options=opts)
    assert asset.options == {"name": "s", **opts.to_dict()}
    again = from_mapping(
        StreamOptions, {k: v for k, v in asset.options.items() if k not in ("name",)}
    )
    assert dataclasses.asdict(again) == dataclasses.asdict(opts)
