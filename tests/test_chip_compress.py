"""Compressed streams decoded on the emulated chip.

The C decoder (``templates/ladderpack_lossless.h``) is compiled with the vendor SDK and
arm-none-eabi-gcc (warnings as errors) into firmware that decodes a compressed stream
in RAM, 256 codes at a time, and compares every code with the codes the stream was made
from (the test's input, not a decoder's output); it starts at the first block and at a
later one (blocks decode on their own). Streams: the spoken demo clip at 8 bits as the
stream stage makes it, a 12-bit sine with noise, 16-bit noise (wide residuals) and a
spike in silence (the escape). The clocks the decoding takes are read from the emulator
(``run.mjs`` counts the core's busy clocks).
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from chip.harness import Firmware, run

from ladderpack import compress as cz
from ladderpack.emit import templates

pytestmark = pytest.mark.slow

ROOT = Path(__file__).resolve().parent.parent
CHUNK = 256


@pytest.fixture(scope="module")
def fw(tmp_path_factory: pytest.TempPathFactory) -> Firmware:
    return Firmware(tmp_path_factory.mktemp("fw_compress"))


def _c_list(values: np.ndarray, fmt: str) -> str:
    return ",".join(fmt.format(int(v)) for v in values)


def app(s: cz.LosslessStream, codes: np.ndarray, first_block: int) -> str:
    """Firmware: time one decoding pass, then decode again comparing every code."""
    want = codes[first_block * s.block_samples :]
    return f"""\
#include <stdint.h>
#include "pico/stdlib.h"
#include "ladderpack_lossless.h"

volatile uint32_t lp_test_mailbox;
static const uint32_t words[] = {{{_c_list(s.words, "0x{:08X}u")}}};
static const uint32_t block_words[] = {{{_c_list(s.block_words, "{}u")}}};
static const uint16_t want[] = {{{_c_list(want, "{}u")}}};
static const lp_lossless_stream_t stream = {{
    words, block_words, {s.block_words.size}u, {s.block_samples}u, {s.samples}u, {s.bits}u,
    {s.channels}u}};
static uint16_t buf[{CHUNK}];

static void report(uint32_t op, uint32_t index, uint32_t rc) {{
    lp_test_mailbox = (op << 24) | ((index & 0xFFFFu) << 8) | (rc & 0xFFu);
}}

int main(void) {{
    lp_lossless_t d;
    uint32_t n, i, total = 0u, bad = 0u, sink = 0u;
    report(1u, 0u, 0u);
    lp_lossless_start(&d, &stream, {first_block}u);
    while ((n = lp_lossless_decode(&d, buf, {CHUNK}u)) != 0u) {{
        sink += buf[n - 1u];
    }}
    report(2u, 0u, sink & 1u); /* the timed pass ends */
    lp_lossless_start(&d, &stream, {first_block}u);
    while ((n = lp_lossless_decode(&d, buf, {CHUNK}u)) != 0u) {{
        for (i = 0u; i < n; ++i) {{
            if (total + i >= {want.size}u || buf[i] != want[total + i]) {{
                ++bad;
            }}
        }}
        total += n;
    }}
    report(3u, total & 0xFFFFu, 0u);
    report(4u, total >> 16, 0u);
    report(5u, bad > 0xFFFFu ? 0xFFFFu : bad, 0u);
    report(0x7Fu, 0u, 0u);
    for (;;) {{
        tight_loop_contents();
    }}
}}
"""


def decode_on_chip(
    fw: Firmware, folder: Path, codes: np.ndarray, bits: int, first_block: int, channels: int = 1
):
    s = cz.encode_lossless(codes, bits, channels=channels)
    bundle = folder / "bundle"
    bundle.mkdir(exist_ok=True)
    for name, data in templates.decoder("ladderpack_lossless").items():
        (bundle / name).write_bytes(data)
    image = fw.make(bundle, [], [], app=app(s, codes, first_block))
    r = run(image, fw.mailbox(), max_cycles=400_000_000, tail=0)
    assert r.ended
    ev = {v >> 24: (v >> 8) & 0xFFFF for _c, v, _p in r.events}
    total = ev[3] | ev[4] << 16
    clocks = r.event_busy[1] - r.event_busy[0]
    return s, total, ev[5], clocks


def speech_codes() -> np.ndarray:
    from ladderpack.pack import unpack
    from ladderpack.stream import stream_clip

    a = stream_clip(str(ROOT / "demo_audio" / "frost_warning.flac"), bits=8, rate_hz=22050)
    p = a.packed
    return unpack(p.words, p.layout, p.sample_count).codes.astype(np.int64)


def test_the_spoken_clip_decodes_to_every_code(fw: Firmware, tmp_path: Path) -> None:
    codes = speech_codes()
    s, total, bad, clocks = decode_on_chip(fw, tmp_path, codes, 8, 0)
    assert (total, bad) == (codes.size, 0)
    per_code = clocks / codes.size
    # a 125 MHz RP2040 at 22.05 kHz has 5669 clocks a sample: issue 31 asks the C decoder
    # to stay under 10 % of them (measured 90 clocks a code, 1.6 %)
    assert per_code < 567, per_code
    print(f"lossless speech: {codes.size / s.nbytes:.2f}x, {per_code:.1f} clocks/code")


@pytest.mark.parametrize("kind", ["sine12", "noise16", "spike8", "stereo10"])
def test_other_streams_from_a_later_block(fw: Firmware, tmp_path: Path, kind: str) -> None:
    rng = np.random.default_rng(7)
    n = 5000
    if kind == "sine12":
        bits = 12
        x = 2048 + 1500 * np.sin(2 * np.pi * 300 * np.arange(n) / 22050)
        codes = np.clip(np.round(x + 3 * rng.standard_normal(n)), 0, 4095).astype(np.int64)
    elif kind == "noise16":
        bits, codes = 16, rng.integers(0, 65536, n)
    elif kind == "spike8":
        bits, codes = 8, np.full(n, 100, dtype=np.int64)
        codes[::700] = 255  # spikes in silence: escaped residuals
    else:  # two channels interleaved, each predicted from its own
        bits, t = 10, np.arange(n // 2) / 22050
        left = 512 + 400 * np.sin(2 * np.pi * 300 * t)
        right = 512 - 300 * np.sin(2 * np.pi * 1100 * t)
        codes = np.round(np.column_stack([left, right]).ravel()).astype(np.int64)
    channels = 2 if kind == "stereo10" else 1
    for first in (0, 3):
        _s, total, bad, _clocks = decode_on_chip(fw, tmp_path, codes, bits, first, channels)
        assert (total, bad) == (n - first * cz.BLOCK_SAMPLES, 0), (kind, first)


def adpcm_app(s: cz.AdpcmStream, want: np.ndarray, first_block: int) -> str:
    """Firmware: time one ADPCM decoding pass, then decode again comparing every sample."""
    tail = want[first_block * s.block_samples :]
    return f"""\
#include <stdint.h>
#include "pico/stdlib.h"
#include "ladderpack_adpcm.h"

volatile uint32_t lp_test_mailbox;
static const uint32_t headers[] = {{{_c_list(s.headers, "0x{:08X}u")}}};
static const uint8_t codes[] = {{{_c_list(s.packed, "0x{:02X}u")}}};
static const int16_t want[] = {{{_c_list(tail, "{}")}}};
static const lp_adpcm_stream_t stream = {{
    headers, codes, {s.blocks}u, {s.block_samples}u, {s.samples}u, {s.channels}u}};
static int16_t buf[{CHUNK}];

static void report(uint32_t op, uint32_t index, uint32_t rc) {{
    lp_test_mailbox = (op << 24) | ((index & 0xFFFFu) << 8) | (rc & 0xFFu);
}}

int main(void) {{
    lp_adpcm_t d;
    uint32_t n, i, total = 0u, bad = 0u, sink = 0u;
    report(1u, 0u, 0u);
    lp_adpcm_start(&d, &stream, {first_block}u);
    while ((n = lp_adpcm_decode(&d, buf, {CHUNK}u)) != 0u) {{
        sink += (uint32_t)buf[n - 1u];
    }}
    report(2u, 0u, sink & 1u); /* the timed pass ends */
    lp_adpcm_start(&d, &stream, {first_block}u);
    while ((n = lp_adpcm_decode(&d, buf, {CHUNK}u)) != 0u) {{
        for (i = 0u; i < n; ++i) {{
            if (total + i >= {tail.size}u || buf[i] != want[total + i]) {{
                ++bad;
            }}
        }}
        total += n;
    }}
    report(3u, total & 0xFFFFu, 0u);
    report(4u, total >> 16, 0u);
    report(5u, bad > 0xFFFFu ? 0xFFFFu : bad, 0u);
    report(0x7Fu, 0u, 0u);
    for (;;) {{
        tight_loop_contents();
    }}
}}
"""


@pytest.mark.parametrize("channels", [1, 2])
def test_adpcm_decodes_on_the_chip_as_the_references_do(
    fw: Firmware, tmp_path: Path, channels: int
) -> None:
    from test_compress import ima_decode, voice

    x = voice(12000)
    if channels == 2:  # two voices interleaved, each coded on its own
        x = np.column_stack([x[:6000], voice(6000, seed=9) // 2]).ravel()
    s = cz.encode_adpcm(x, block_samples=1000, channels=channels)
    want = cz.decode_adpcm(s)
    # the recommended practice's decoder, written in test_compress.py, agrees block by
    # block and channel by channel
    for b in range(s.blocks):
        for c in range(channels):
            h = int(s.headers[b * channels + c])
            pred, index = (h & 0xFFFF) - ((h & 0x8000) << 1), h >> 16
            at = slice(1000 * b + channels + c, 1000 * (b + 1), channels)
            assert ima_decode(s.nibbles[at].tolist(), pred, index) == want[at].tolist()
    bundle = tmp_path / "bundle"
    bundle.mkdir()
    for name, data in templates.decoder("ladderpack_adpcm").items():
        (bundle / name).write_bytes(data)
    for first in (0, 5):
        image = fw.make(bundle, [], [], app=adpcm_app(s, want, first))
        r = run(image, fw.mailbox(), max_cycles=400_000_000, tail=0)
        assert r.ended
        ev = {v >> 24: (v >> 8) & 0xFFFF for _c, v, _p in r.events}
        assert (ev[3] | ev[4] << 16, ev[5]) == (x.size - 1000 * first, 0)
        per_sample = (r.event_busy[1] - r.event_busy[0]) / (x.size - 1000 * first)
        assert per_sample < 567  # under 10 % of 125 MHz at 22.05 kHz (measured: 89, 94)
        print(f"adpcm, {channels} channel(s): {per_sample:.1f} clocks/sample")


# -- the ladder's players with compressed streams ------------------------------------------
# The same scenarios as tests/test_chip_c.py and test_chip_micropython.py, the streams made
# with --compress lossless: the C player decodes them into two RAM buffers from the DMA
# interrupt, the MicroPython player block by block in viper. Every sample on the pins is
# compared with the codes of the same stream made uncompressed (its .bin, read by the
# harness's own decoder): a bundle of a compressed stream has only the compressed form.

import test_chip_c  # noqa: E402 - the C player's scenarios, reused
from chip.harness import Step, Stream, run_micropython  # noqa: E402
from test_chip_c import (  # noqa: E402
    assert_period,
    check_once,
    decompose_loop,
    play_once_steps,
    played,
    stops_ramp_from_where_they_are,
)
from test_chip_micropython import assert_ok  # noqa: E402
from test_chip_micropython import played as mp_played  # noqa: E402

from ladderpack.bundle import bundle_files  # noqa: E402
from ladderpack.stream import stream_tone  # noqa: E402


def make(folder: Path, name: str, **opts: object) -> Stream:
    """The compressed bundle in `folder`; the stream as its uncompressed twin decodes."""
    twin = folder / "uncompressed"
    twin.mkdir(exist_ok=True)
    raw = test_chip_c.make(twin, name, **{**opts, "compress": "none"})
    test_chip_c.make(folder, name, **opts)
    return raw


def test_compressed_streams_play_every_sample(fw: Firmware, tmp_path: Path) -> None:
    # widths 1..16, both shift directions and pin orders, inverted or not; long enough for
    # several refills of the 64-word buffers
    streams = [
        make(
            tmp_path,
            f"z{bits}",
            bits=bits,
            seconds=0.004,
            shift="left" if bits % 2 else "right",
            pin_order="msb-low" if bits % 3 == 0 else "msb-high",
            invert=bits % 4 == 1,
            program=("autopull", "pull", "loop")[bits % 3],
            samples_per_word=1 if bits % 3 == 1 else None,
            out_base=2,
            compress="lossless",
        )
        for bits in range(1, 17)
    ]
    r = run(fw.make(tmp_path, [s.name for s in streams], play_once_steps(16)), fw.mailbox())
    check_once(r, streams)


def test_a_compressed_stream_stops_from_where_it_is(fw: Firmware, tmp_path: Path) -> None:
    s = make(tmp_path, "zcut", seconds=0.004, level_dbfs=-0.5, ramp_ms=0.004, compress="lossless")
    # the delays are busy-wait clocks: the refills' interrupts stretch them (by about a
    # third at this rate), so the last stop comes at about 4/5 of the stream
    stops_ramp_from_where_they_are(fw, tmp_path, s, (1 / 7, 1 / 3, 1 / 2, 3 / 5))


@pytest.mark.parametrize("program", ["loop", "autopull"])
def test_a_compressed_loop_ends_on_a_pass_boundary(
    fw: Firmware, tmp_path: Path, program: str
) -> None:
    s = make(tmp_path, "zlp", loop=True, cycles=40, program=program, ramp_ms=0.01,
             compress="lossless")  # fmt: skip
    pass_clocks = int(s.codes.size * s.layout.sample_period_clocks)
    delays = [1, 50, pass_clocks // 3, pass_clocks - 40, 2 * pass_clocks + 7]
    steps = [Step("init", 0, 0)]
    for d in delays:
        steps += [Step("start", 0, 1), Step("delay", 0, d), Step("request_stop"), Step("wait")]
    steps += [Step("start", 0, 0), Step("wait"), Step("deinit")]
    r = run(fw.make(tmp_path, [s.name], steps), fw.mailbox())
    assert all(rc == 0 for rc in r.results()), r.results()
    for k in range(len(delays)):
        codes, times = played(r, s, 1 + 4 * k, 4 + 4 * k)
        assert decompose_loop(codes, s) >= 1
        assert_period(times[int(np.argmax(codes != s.layout.idle_code)) :], s)
        assert np.abs(np.diff(codes)).max() <= s.max_step
    base = 1 + 4 * len(delays)
    codes, _t = played(r, s, base, base + 1)
    assert decompose_loop(codes, s) == 1  # loop=false plays one pass


def mp_make(folder: Path, name: str, **opts: object) -> tuple[Stream, dict[str, bytes]]:
    """A compressed tone for the MicroPython player: the board's files, and the stream as
    its uncompressed twin decodes."""
    settings: dict[str, object] = {"freq_hz": 440.0, "seconds": 0.12, "rate_hz": 22050.0,
                                   "ramp_ms": 1.0, "bits": 8, **opts}  # fmt: skip
    if "cycles" in opts:
        settings.pop("seconds")
    twin = folder / "uncompressed"
    twin.mkdir(exist_ok=True)
    plain = bundle_files(stream_tone("sine", name=name, **{**settings, "compress": "none"}))
    for fname, data in plain.items():
        (twin / fname).write_bytes(data)
    made = bundle_files(stream_tone("sine", name=name, compress="lossless", **settings))
    assert len(made[f"{name}.bin"]) < len(plain[f"{name}.bin"])
    board = {f"{name}.py": made[f"{name}.py"], f"{name}.bin": made[f"{name}.bin"]}
    return Stream.load(twin, name), board


@pytest.mark.parametrize(
    "opts",
    [
        {"bits": 8},
        {"bits": 12, "shift": "left", "pin_order": "msb-low", "invert": True},
        {"bits": 10, "program": "pull", "samples_per_word": 1, "chunk_words": 64},
    ],
    ids=["8-bit", "12-bit-left-reversed-inverted", "10-bit-pull-short-blocks"],
)
def test_micropython_plays_a_compressed_stream(tmp_path: Path, opts: dict[str, object]) -> None:
    s, files = mp_make(tmp_path, "zmp", **opts)
    r = run_micropython(files, [{"code": "import zmp\nzmp.play()\n"}], tmp_path)
    assert_ok(r)
    codes, times = mp_played(r, s, 0)
    np.testing.assert_array_equal(codes[: s.codes.size], s.codes)
    assert np.all(codes[s.codes.size :] == s.layout.idle_code)
    assert_period(times, s)


def test_micropython_compressed_loop_and_stop(tmp_path: Path) -> None:
    s, files = mp_make(tmp_path, "zml", loop=True, cycles=60, program="autopull")
    pass_ms = s.codes.size / 22.05
    steps = [
        {
            "code": "import zml\nfrom machine import Timer\np = zml.Player()\n"
            f"Timer(period={round(1.5 * pass_ms)}, mode=Timer.ONE_SHOT, "
            "callback=lambda t: p.stop())\np.play(loop=True)\n"
        }
    ]
    r = run_micropython(files, steps, tmp_path)
    assert_ok(r)
    codes, _t = mp_played(r, s, 0)
    assert decompose_loop(codes, s) == 2  # stopped in the second pass: it finishes it
    assert np.abs(np.diff(codes)).max() <= s.max_step


def test_micropython_compressed_stream_stops_from_where_it_is(tmp_path: Path) -> None:
    s, files = mp_make(tmp_path, "zms", seconds=0.2, level_dbfs=-0.5)
    steps = [{"code": "import zms\np = zms.Player()\n"},
             {"code": "p.play()\n", "interrupt_after": 10_000_000}]  # fmt: skip
    r = run_micropython(files, steps, tmp_path)
    assert r.ended and "KeyboardInterrupt" in r.output()
    codes, _t = mp_played(r, s, 1)
    s.assert_cut_short(codes)


def test_micropython_decodes_adpcm_as_the_reference_does(tmp_path: Path) -> None:
    import hashlib

    from test_compress import voice

    from ladderpack.emit.micropython import ADPCM_DECODER

    x = voice(22050)  # one second at 22.05 kHz
    s = cz.encode_adpcm(x)
    want = cz.decode_adpcm(s)
    words = ((want.astype(np.int64) << 16) | (want & 0xFFFF)) & 0xFFFFFFFF
    digest = hashlib.sha256(words.astype("<u4").tobytes()).hexdigest()
    bs = s.block_samples
    module = (
        "import array\nimport micropython\n"
        + ADPCM_DECODER
        + f"""

def decode_all(path):
    import hashlib, time
    h = hashlib.sha256()
    blocks = {s.headers.size}
    with open(path, "rb") as f:
        heads = array.array("I", bytes(4 * blocks))
        f.readinto(heads)
        src = bytearray({bs // 2})
        dst = array.array("I", bytes({4 * bs}))
        cfg = array.array("i", [0, 0, 0, 1, 0, 0])
        spent = 0
        for b in range(blocks):
            n = min({bs}, {s.samples} - b * {bs})
            f.readinto(memoryview(src)[: (n + 1) // 2])
            hd = heads[b]
            cfg[0] = n
            cfg[1] = (hd & 0xFFFF) - ((hd & 0x8000) << 1)
            cfg[2] = hd >> 16
            t = time.ticks_us()
            _adpcm_block(src, dst, cfg)
            spent += time.ticks_diff(time.ticks_us(), t)
            h.update(memoryview(dst)[:n])
    return h.digest().hex(), spent
"""
    )
    files = {"zad.py": module.encode(), "zad.bin": s.to_bytes()}
    steps = [{"code": "import zad\nprint('RESULT', *zad.decode_all('zad.bin'))\n"}]
    r = run_micropython(files, steps, tmp_path)
    assert_ok(r)
    m = re.search(r"RESULT ([0-9a-f]{64}) (\d+)", r.output())
    assert m is not None, r.output()[-2000:]
    got, spent_us = m.group(1), m.group(2)
    assert got == digest
    # the decoding's share of a 125 MHz RP2040 at 22.05 kHz (issue 31: MicroPython under
    # 50 %): one second of samples decoded in this many microseconds (measured: 47622)
    assert int(spent_us) < 500_000, spent_us
    print(f"micropython adpcm: {int(spent_us) / 1e4:.1f} % of the CPU at 22.05 kHz")


# -- I2S with IMA ADPCM ---------------------------------------------------------------------
# A 16-bit mono I2S stream made with --compress adpcm: the C player decodes it into two RAM
# buffers from the DMA interrupt, the MicroPython player block by block in viper. Every
# frame on the lines (the I2S test's own decoder, tests/test_chip_i2s.py) is compared with
# the host's reference decoder of the bundle's .bin (ladderpack.compress, itself checked
# against audioop and the recommended practice in tests/test_compress.py).

import test_chip_i2s  # noqa: E402
from test_chip_i2s import CLOCK, DATA, decode_i2s, frames_of  # noqa: E402


def adpcm_bundle(folder: Path, name: str, **opts: object) -> test_chip_i2s.Expected:
    """Write the ADPCM I2S bundle; the frames as the reference decoder makes them."""
    import json

    from ladderpack.bundle import write_bundle

    base: dict[str, object] = {
        "output": "i2s", "freq_hz": 440.0, "seconds": 0.06, "rate_hz": 22050.0,
        "data_pin": DATA, "bit_clock_pin": CLOCK, "level_dbfs": -1.0, "compress": "adpcm",
    }  # fmt: skip
    base.update(opts)
    if "cycles" in opts:
        base.pop("seconds")
    write_bundle(stream_tone("sine", name=name, **base), folder)
    side = json.loads((folder / f"{name}.json").read_text())
    comp = side["stats"]["compression"]
    # 4 bits a sample and a header word a block (blocks of 256 samples here: 3.86x)
    assert comp["kind"] == "adpcm" and comp["pcm16_ratio"] > 3.8 and comp["sinad_db"] > 20
    coded = cz.adpcm_from_bytes(
        (folder / f"{name}.bin").read_bytes(),
        samples=comp["samples"],
        block_samples=comp["block_samples"],
    )
    d = cz.decode_adpcm(coded)
    clk = side["clock"]
    return test_chip_i2s.Expected(
        name, 16, d, d, 128 * (clk["div_int"] + clk["div_frac"] / 256),
        side["options"]["frame_format"],
    )  # fmt: skip


def test_i2s_adpcm_c_plays_every_frame_and_fades_on_a_stop(fw: Firmware, tmp_path: Path) -> None:
    exp = adpcm_bundle(tmp_path, "zadp", chunk_words=256)
    r = test_chip_i2s.build_and_run(fw, tmp_path, "zadp", [("init", 0), ("start", 0), ("wait", 0)])
    assert r.ended and all(rc == 0 for rc in r.results()), r.results()
    left, right, t = frames_of(*decode_i2s(r.changes, exp.frame_format), 16)
    np.testing.assert_array_equal(left, exp.left)
    np.testing.assert_array_equal(right, exp.right)
    test_chip_i2s.assert_period(t, exp)
    # stopped about half way: a prefix of the frames, then a fade to silence
    stop_at = int(exp.left.size * 0.5 * exp.period_clocks)
    ops = [("init", 0), ("start", 0), ("delay", stop_at), ("stop", 0)]
    r = test_chip_i2s.build_and_run(fw, tmp_path, "zadp", ops)
    assert r.ended and all(rc == 0 for rc in r.results()), r.results()
    left, right, _t = frames_of(*decode_i2s(r.changes, exp.frame_format), 16)
    n = 0
    while n < left.size and left[n] == exp.left[n]:
        n += 1
    assert 100 < n < exp.left.size - 100, n
    fade = left[n:]
    assert fade.size <= 64 + 1 and fade[-1] == 0 and right[-1] == 0
    assert np.all(np.abs(fade[1:]) <= np.abs(fade[:-1]) + 1)  # never grows


def test_i2s_adpcm_c_loop_ends_on_a_pass(fw: Firmware, tmp_path: Path) -> None:
    exp = adpcm_bundle(tmp_path, "zadl", loop=True, cycles=30, freq_hz=2205.0)
    frames = exp.left.size
    ops = [("init", 0), ("start", 1), ("delay", int(2.5 * frames * 5669)), ("stop", 0)]
    r = test_chip_i2s.build_and_run(fw, tmp_path, "zadl", ops)
    assert r.ended and all(rc == 0 for rc in r.results()), r.results()
    left, _right, _t = frames_of(*decode_i2s(r.changes, exp.frame_format), 16)
    passes, rest = divmod(left.size - 1, frames)  # the outro: one silent frame
    assert rest == 0 and passes >= 3, (left.size, frames)
    np.testing.assert_array_equal(left[:-1], np.tile(exp.left, passes))
    assert left[-1] == 0


def test_i2s_adpcm_micropython_plays_every_frame(tmp_path: Path) -> None:
    from ladderpack.bundle import bundle_files

    exp = adpcm_bundle(tmp_path, "zadm", chunk_words=256)
    made = bundle_files(stream_tone("sine", name="zadm", output="i2s", freq_hz=440.0,
                                    seconds=0.06, rate_hz=22050.0, data_pin=DATA,
                                    bit_clock_pin=CLOCK, level_dbfs=-1.0, compress="adpcm",
                                    chunk_words=256))  # fmt: skip
    files = {"zadm.py": made["zadm.py"], "zadm.bin": made["zadm.bin"]}
    r = run_micropython(files, [{"code": "import zadm\nzadm.play()\n"}], tmp_path,
                        watch_pins=[DATA, CLOCK, CLOCK + 1])  # fmt: skip
    assert_ok(r)
    left, right, t = frames_of(*decode_i2s(r.changes, exp.frame_format), 16)
    np.testing.assert_array_equal(left, exp.left)
    np.testing.assert_array_equal(right, exp.right)
    test_chip_i2s.assert_period(t, exp)


# -- I2S: stereo ADPCM and lossless ---------------------------------------------------------
# Stereo ADPCM codes each channel on its own; lossless keeps every frame's codes (a mono
# frame's once, a stereo frame's left and right alternating). Expected frames: for ADPCM
# the host's reference decoder of the bundle's .bin, for lossless the .bin of the same
# stream made uncompressed (tests/test_chip_i2s.py's own reading of it).


def i2s_stored(
    folder: Path, name: str, compress: str, stereo: bool, **opts: object
) -> tuple[test_chip_i2s.Expected, dict[str, bytes]]:
    """Write the compressed I2S bundle; what should come out, and the bundle's files."""
    import json

    from ladderpack.audio import Signal
    from ladderpack.bundle import bundle_files
    from ladderpack.stream import stream_signal

    t = np.arange(1600) / 22050.0
    left = 0.8 * np.sin(2 * np.pi * 440 * t)
    x = np.stack([left, -0.5 * np.sin(2 * np.pi * 1500 * t)], 1) if stereo else left
    base: dict[str, object] = {
        "output": "i2s", "stereo": stereo, "bits": 16, "data_pin": DATA,
        "bit_clock_pin": CLOCK, "chunk_words": 256, **opts,
    }  # fmt: skip

    def make(where: Path, how: str) -> dict[str, bytes]:
        where.mkdir(exist_ok=True)
        files = bundle_files(stream_signal(Signal(x, 22050.0), name=name, compress=how, **base),
                             embed_words_max=0)  # fmt: skip
        for fname, data in files.items():
            (where / fname).write_bytes(data)
        return files

    files = make(folder, compress)
    side = json.loads((folder / f"{name}.json").read_text())
    comp = side["stats"]["compression"]
    assert comp["kind"] == compress and comp["channels"] == (2 if stereo else 1)
    if compress == "lossless":
        make(folder / "plain", "none")
        exp = test_chip_i2s.Expected.load(folder / "plain", name)
        assert comp["ratio"] > (1.2 if stereo else 2.4), comp  # a loud 16-bit tone: 1.25x, 2.5x
        return exp, files
    assert comp["pcm16_ratio"] > 3.8 and comp["sinad_db"] > 20, comp
    d = cz.decode_stored((folder / f"{name}.bin").read_bytes(), comp, bits=16)
    clk = side["clock"]
    left_d, right_d = (d[0::2], d[1::2]) if stereo else (d, d)
    return test_chip_i2s.Expected(
        name, 16, left_d, right_d, 128 * (clk["div_int"] + clk["div_frac"] / 256),
        side["options"]["frame_format"],
    ), files  # fmt: skip


STORED_CASES = [("adpcm", True), ("lossless", False), ("lossless", True)]


@pytest.mark.parametrize(("compress", "stereo"), STORED_CASES)
def test_i2s_stored_c_plays_every_frame(
    fw: Firmware, tmp_path: Path, compress: str, stereo: bool
) -> None:
    exp, _files = i2s_stored(tmp_path, "zst", compress, stereo)
    assert not stereo or not np.array_equal(exp.left, exp.right)
    r = test_chip_i2s.build_and_run(fw, tmp_path, "zst", [("init", 0), ("start", 0), ("wait", 0)])
    assert r.ended and all(rc == 0 for rc in r.results()), r.results()
    left, right, t = frames_of(*decode_i2s(r.changes, exp.frame_format), 16)
    np.testing.assert_array_equal(left, exp.left)
    np.testing.assert_array_equal(right, exp.right)
    test_chip_i2s.assert_period(t, exp)


def test_i2s_lossless_stereo_c_stop_fades_both_channels(fw: Firmware, tmp_path: Path) -> None:
    exp, _files = i2s_stored(tmp_path, "zsf", "lossless", True)
    stop_at = int(exp.left.size * 0.5 * exp.period_clocks)
    ops = [("init", 0), ("start", 0), ("delay", stop_at), ("stop", 0)]
    r = test_chip_i2s.build_and_run(fw, tmp_path, "zsf", ops)
    assert r.ended and all(rc == 0 for rc in r.results()), r.results()
    left, right, _t = frames_of(*decode_i2s(r.changes, exp.frame_format), 16)
    n = 0
    while n < left.size and left[n] == exp.left[n] and right[n] == exp.right[n]:
        n += 1
    assert 100 < n < exp.left.size - 100, n
    for fade in (left[n:], right[n:]):
        assert fade.size <= 64 + 1 and fade[-1] == 0
        assert np.all(np.abs(fade[1:]) <= np.abs(fade[:-1]) + 1)  # never grows


def test_i2s_stereo_adpcm_c_loop_ends_on_a_pass(fw: Firmware, tmp_path: Path) -> None:
    exp, _files = i2s_stored(tmp_path, "zsl", "adpcm", True, loop=True)
    frames = exp.left.size
    stop_at = int(2.5 * frames * exp.period_clocks)
    ops = [("init", 0), ("start", 1), ("delay", stop_at), ("stop", 0)]
    r = test_chip_i2s.build_and_run(fw, tmp_path, "zsl", ops)
    assert r.ended and all(rc == 0 for rc in r.results()), r.results()
    left, right, _t = frames_of(*decode_i2s(r.changes, exp.frame_format), 16)
    passes, rest = divmod(left.size - 1, frames)  # the outro: one silent frame
    assert rest == 0 and passes >= 3, (left.size, frames)
    np.testing.assert_array_equal(left[:-1], np.tile(exp.left, passes))
    np.testing.assert_array_equal(right[:-1], np.tile(exp.right, passes))
    assert left[-1] == 0 and right[-1] == 0


@pytest.mark.parametrize(("compress", "stereo"), STORED_CASES)
def test_i2s_stored_micropython_plays_every_frame(
    tmp_path: Path, compress: str, stereo: bool
) -> None:
    exp, made = i2s_stored(tmp_path, "zsm", compress, stereo)
    files = {"zsm.py": made["zsm.py"], "zsm.bin": made["zsm.bin"]}
    r = run_micropython(files, [{"code": "import zsm\nzsm.play()\n"}], tmp_path,
                        watch_pins=[DATA, CLOCK, CLOCK + 1])  # fmt: skip
    assert_ok(r)
    left, right, t = frames_of(*decode_i2s(r.changes, exp.frame_format), 16)
    np.testing.assert_array_equal(left, exp.left)
    np.testing.assert_array_equal(right, exp.right)
    test_chip_i2s.assert_period(t, exp)


# -- two ladders, compressed ----------------------------------------------------------------
# Left and right codes alternate in the compressed stream, each predicted from its own
# channel; the players decode pairs back into frames. Expected codes from an uncompressed
# twin (tests/test_chip_stereo.py's own decoder of its .bin).

import test_chip_stereo  # noqa: E402


def stereo_pair(folder: Path, name: str, **opts: object) -> tuple[Any, dict[str, bytes]]:
    twin = folder / "uncompressed"
    twin.mkdir(exist_ok=True)
    two, _plain = test_chip_stereo.make(twin, name, **{**opts, "compress": "none"})
    _two, files = test_chip_stereo.make(folder, name, **{**opts, "compress": "lossless"})
    return two, files


@pytest.mark.parametrize(
    ("bits", "opts"),
    [
        (8, {"out_base": 8}),
        (6, {"out_base": 2, "pin_order": "msb-low", "invert": True, "shift": "left"}),
    ],
)
def test_compressed_stereo_c_plays_both_ladders(
    fw: Firmware, tmp_path: Path, bits: int, opts: dict[str, object]
) -> None:
    two, _files = stereo_pair(tmp_path, "zduet", bits=bits, **opts)
    ops = [("init", 0), ("start", 0), ("wait", 0)]
    image = fw.make(tmp_path, [], [], app=test_chip_stereo.app("zduet", ops))
    r = run(image, fw.mailbox())
    assert r.ended and all(rc == 0 for rc in r.results()), r.results()
    left, right, _t = test_chip_stereo.played(r, two)
    n = two.left.size
    np.testing.assert_array_equal(left[:n], two.left)
    np.testing.assert_array_equal(right[:n], two.right)


def test_compressed_stereo_micropython_plays_both_ladders(tmp_path: Path) -> None:
    two, files = stereo_pair(tmp_path, "zduet", bits=8, out_base=8, chunk_words=32)
    board = {"zduet.py": files["zduet.py"], "zduet.bin": files["zduet.bin"]}
    r = run_micropython(board, [{"code": "import zduet\nzduet.play()\n"}], tmp_path)
    assert_ok(r)
    left, right, _t = test_chip_stereo.played(r, two)
    n = two.left.size
    np.testing.assert_array_equal(left[:n], two.left)
    np.testing.assert_array_equal(right[:n], two.right)
