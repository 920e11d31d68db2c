"""Block-wise processing of long clips equals whole-clip processing bit for bit."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import soundfile

from ladderpack import conform
from ladderpack.audio import Signal, load_clip
from ladderpack.clock import plan_clock
from ladderpack.pack import unpack
from ladderpack.quantize import BlockQuantizer, quantize
from ladderpack.stream import stream_clip


def _whole(path: Path, rate: object, bits: int, **kw: object) -> np.ndarray:
    sig = load_clip(path)
    x = conform.resample(conform.remove_dc(sig), rate, bits=bits)  # type: ignore[arg-type]
    x, _ = conform.normalise_peak(x, headroom_db=1.0)
    x = conform.apply_fades(x, fade_ms=5.0)
    codes, _ = quantize(x, bits=bits, **kw)  # type: ignore[arg-type]
    return codes.codes


@pytest.fixture(scope="module")
def clip(tmp_path_factory: pytest.TempPathFactory) -> Path:
    rng = np.random.default_rng(7)
    n = 150_001
    t = np.arange(n) / 44100
    x = np.stack(
        [
            0.4 * np.sin(2 * np.pi * 440 * t) + 0.05 * rng.standard_normal(n) + 0.01,
            0.3 * np.sin(2 * np.pi * 660 * t),
        ],
        axis=1,
    )
    path = tmp_path_factory.mktemp("blocks") / "long.flac"
    soundfile.write(path, x, 44100, subtype="PCM_24")
    return path


@pytest.mark.parametrize("block", [997, 4096, 65536, 100_000, 1 << 20])
@pytest.mark.parametrize(
    ("bits", "dither", "shaper"), [(8, "tpdf", "none"), (12, "rpdf", "second-order")]
)
def test_blocks_equal_whole_clip(
    clip: Path, block: int, bits: int, dither: str, shaper: str
) -> None:
    # The stream stage reads the clip in blocks; the reference is the whole-array
    # conform and quantise functions applied to the whole clip at once.
    rate = plan_clock(22050).achieved_rate_hz
    whole = _whole(clip, rate, bits, dither=dither, shaper=shaper, seed=3)
    asset = stream_clip(
        clip, bits=bits, dither=dither, shaping=shaper, seed=3, ramp_ms=0.0, block_frames=block
    )
    got = unpack(asset.packed.words, asset.packed.layout, asset.sample_count).codes
    # without ramps one idle sample (code 0) closes the stream, so it ends on the idle code
    np.testing.assert_array_equal(got[:-1], whole)
    assert got[-1] == 0
    assert (asset.codes is None) == (block < 150_001)  # codes kept only for one block


def test_stream_resampler_equals_resample(rng: np.random.Generator) -> None:
    x = rng.standard_normal(30_011)
    rate = plan_clock(44100).achieved_rate_hz
    whole = conform.resample(Signal(x, 48000.0), rate, bits=12).samples
    for block in (1, 13, 4096, 30_011):
        rs = conform.StreamResampler(48000.0, rate, x.size, bits=12)
        got = [rs.feed(x[i : i + block], last=i + block >= x.size) for i in range(0, x.size, block)]
        np.testing.assert_array_equal(np.concatenate(got), whole)


def test_block_quantizer_equals_quantize(rng: np.random.Generator) -> None:
    x = rng.uniform(-0.9, 0.9, 10_000)
    whole, _ = quantize(Signal(x, 8000.0), bits=10, shaper="second-order", seed=5)
    q = BlockQuantizer(bits=10, shaper="second-order", seed=5)
    got = np.concatenate([q.feed(x[i : i + 333]) for i in range(0, x.size, 333)])
    np.testing.assert_array_equal(got, whole.codes)


def test_chunked_mean_is_exact_enough() -> None:
    x = np.full(200_000, 0.1)
    assert conform.chunked_mean(x) == pytest.approx(0.1, rel=1e-15)


@pytest.mark.parametrize("bits", [1, 7, 10, 16])
def test_pack_blocks_equals_pack(bits: int, rng: np.random.Generator) -> None:
    from ladderpack.pack import WordLayout, pack, pack_blocks
    from ladderpack.quantize import Codes

    codes = rng.integers(0, 1 << bits, 1001).astype(np.uint16)
    lay = WordLayout(bits, shift_right=bits % 2 == 0)
    whole = pack(Codes(codes, bits), lay, pad_code=1).words
    got = np.concatenate(
        list(pack_blocks((codes[i : i + 37] for i in range(0, 1001, 37)), lay, pad_code=1))
    )
    np.testing.assert_array_equal(got, whole)


@pytest.mark.parametrize("block", [1000, 65536, 99_999])
def test_stream_bundle_identical_in_blocks(clip: Path, block: int) -> None:
    # The whole bundle (bin, C, MicroPython, sidecar) is byte-identical whether the clip
    # is processed whole or in blocks of any size.
    from ladderpack.bundle import bundle_files
    from ladderpack.stream import stream_clip

    whole = bundle_files(stream_clip(clip, bits=10, shaping="second-order", dither="tpdf"))
    blocks = bundle_files(
        stream_clip(clip, bits=10, shaping="second-order", dither="tpdf", block_frames=block)
    )
    assert whole.keys() == blocks.keys()
    for name in whole:
        assert whole[name] == blocks[name], name


def test_write_bundle_streams_the_same_bytes(tmp_path: Path) -> None:
    from helpers import small_asset

    from ladderpack.bundle import bundle_files, write_bundle

    asset = small_asset(12, seconds=0.2)
    write_bundle(asset, tmp_path)
    for name, data in bundle_files(asset).items():
        assert (tmp_path / name).read_bytes() == data, name


@pytest.mark.parametrize("block", [997, 65536, 1 << 20])
def test_loudness_normalised_blocks_equal_whole_clip(clip: Path, block: int) -> None:
    # Loudness normalisation measures in the same pass as the peak (K-weighting state,
    # 100 ms hop sums and the true-peak resampler all carried across blocks); the
    # reference is the whole-array normalise_loudness applied to the whole clip.
    from ladderpack.loudness import normalise_loudness

    rate = plan_clock(22050).achieved_rate_hz
    sig = load_clip(clip)
    x = conform.resample(conform.remove_dc(sig), rate, bits=8)
    x, gain_db, report = normalise_loudness(x, target_lufs=-20.0, true_peak_dbtp=-1.0)
    whole, _ = quantize(conform.apply_fades(x, fade_ms=5.0), bits=8, seed=3)
    asset = stream_clip(clip, bits=8, seed=3, ramp_ms=0.0, loudness_lufs=-20.0, block_frames=block)
    got = unpack(asset.packed.words, asset.packed.layout, asset.sample_count).codes
    np.testing.assert_array_equal(got[:-1], whole.codes)
    assert asset.stats["gain_db"] == round(gain_db, 6)
    assert asset.stats["loudness"]["lufs_in"] == round(report["lufs_in"], 4)


def test_loudness_meter_blocks_equal_one_call(rng: np.random.Generator) -> None:
    from ladderpack.loudness import LoudnessMeter

    x = rng.standard_normal((48_017, 2)) * 0.1
    whole = LoudnessMeter(48000.0, x.shape[0], 2)
    whole.feed(x)
    for block in (1000, 4800, 33_333):
        m = LoudnessMeter(48000.0, x.shape[0], 2)
        for i in range(0, x.shape[0], block):
            m.feed(x[i : i + block])
        assert m.integrated_lufs() == whole.integrated_lufs()
        assert m.true_peak_dbtp() == whole.true_peak_dbtp()


def test_memory_stays_flat_with_clip_length(tmp_path: Path) -> None:
    # Peak traced memory of a blocked stream (loudness normalisation included, which
    # needs the whole clip measured before any sample is scaled) grows only by the
    # packed words it returns (4 bytes per word, plus one copy when they are joined),
    # not with the clip.
    import tracemalloc

    peaks, words = [], []
    for seconds in (20, 60):
        n = seconds * 44100
        t = np.arange(n) / 44100
        path = tmp_path / f"c{seconds}.wav"
        soundfile.write(path, np.stack([0.3 * np.sin(2 * np.pi * 440 * t)] * 2, 1), 44100)
        del t
        tracemalloc.start()
        asset = stream_clip(path, loudness_lufs=-20.0, block_frames=65536)
        peaks.append(tracemalloc.get_traced_memory()[1])
        tracemalloc.stop()
        words.append(asset.packed.words.nbytes)
    grown = peaks[1] - peaks[0]
    assert grown < 2 * (words[1] - words[0]) + (4 << 20), (peaks, words)


def test_progress_reports_every_block_in_order(clip: Path) -> None:
    seen: list[tuple[str, float]] = []
    stream_clip(clip, block_frames=4096, progress=lambda stage, share: seen.append((stage, share)))
    shares = [share for _, share in seen]
    assert shares == sorted(shares) and shares[0] == 0.0 and shares[-1] == 1.0
    stages = [stage for stage, _ in seen]
    assert stages.count("resample") == -(-150_001 // 4096)  # one report per block read
    assert [s for i, s in enumerate(stages) if i == 0 or s != stages[i - 1]] == [
        "read",
        "resample",
        "quantise",
        "pack",
    ]


@pytest.mark.parametrize(
    "kw",
    [
        {"bits": 8},
        {"bits": 10, "ramp_ms": 0.0, "idle_code": 700},
        {"bits": 12, "pin_order": "msb-low", "invert": True, "idle_code": 4095},
        {"bits": 3, "ramp_ms": 1.0, "dither": "none"},
    ],
)
@pytest.mark.parametrize("block", [997, None])
def test_largest_step_found_while_processing_equals_unpacking(
    clip: Path, kw: dict[str, object], block: int | None
) -> None:
    # The step the players bound their ramps by is taken from the code blocks as they
    # are packed; the reference unpacks the finished words (padding included).
    from ladderpack.asset import largest_step

    asset = stream_clip(clip, block_frames=block, **kw)  # type: ignore[arg-type]
    assert "max_step" in asset.__dict__  # filled by processing, not computed again
    assert asset.max_step == largest_step(asset)


def test_c_source_is_written_in_bounded_chunks() -> None:
    # Each chunk handed to the writer stays near the requested size, however long the
    # stream: multi-line items of hex literals must not pile up (the C text of a
    # 10-minute stream is 45 MB).
    from ladderpack.emit.c import render_source, render_source_chunks
    from ladderpack.stream import stream_tone

    asset = stream_tone("sine", seconds=40.0, flash_bytes=1 << 24)  # 220 500 words
    chunks = list(render_source_chunks(asset, chunk_chars=20_000))
    assert len(chunks) >= 4
    assert max(len(c) for c in chunks) < 20_000 + 900_000  # one item of 64 Ki words at most
    assert b"".join(chunks).decode() == render_source(asset)
