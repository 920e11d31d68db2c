"""I2S streams on the emulated chip: the bundle's C player built with the real SDK.

Firmware is compiled from the bundle's ``ladderpack_i2s.c`` and asset sources with CMake,
arm-none-eabi-gcc and the vendor SDK 2.2.0 (warnings as errors on our files), and run on
rp2040js with the state machines clocked by the harness's cycle-accurate schedule
(``tests/chip/run.mjs``), which records every change of the data, bit-clock and
word-select pins. The test's own decoder (below) samples data and word select on each
rising bit-clock edge and cuts the bits into slots at the word-select edges, as a
receiver does: in the standard format the slot's MSB is one bit clock after the edge
(Philips Semiconductors, "I2S bus specification", 1986, revised 1996: from memory, as
the module notes), in the left-justified format on it. Every sample of both slots is
compared with the words of the ``.bin``, decoded here from the sidecar's description,
and the frame period with the plan in system clocks (RP2040 datasheet 3.5.5: a state
machine runs once every INT + FRAC/256 clocks; 128 state-machine cycles per frame).
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest
from chip.harness import Firmware, player_app, run

from ladderpack.bundle import write_bundle
from ladderpack.stream import stream_tone

pytestmark = pytest.mark.slow

DATA, CLOCK = 2, 3  # GPIO of the serial data and the bit clock (word select on 4)


@pytest.fixture(scope="module")
def fw(tmp_path_factory: pytest.TempPathFactory) -> Firmware:
    return Firmware(tmp_path_factory.mktemp("fw_i2s"))


@dataclass
class Expected:
    """What the bundle says should come out: both slots of every frame, and the clock."""

    name: str
    bits: int
    left: np.ndarray  # two's complement sample values
    right: np.ndarray
    period_clocks: float
    frame_format: str

    @classmethod
    def load(cls, folder: Path, name: str) -> Expected:
        side = json.loads((folder / f"{name}.json").read_text())
        bits, clk = side["layout"]["bits"], side["clock"]
        w = np.frombuffer((folder / f"{name}.bin").read_bytes(), "<u4").astype(np.int64)
        if bits == 16:  # left in bits 31:16, right in 15:0 (sidecar: sample_order)
            left, right = w >> 16, w & 0xFFFF
        else:  # a word a slot, the sample in the top bits
            left, right = w[0::2] >> (32 - bits), w[1::2] >> (32 - bits)
        sign = 1 << (bits - 1)
        return cls(
            name,
            bits,
            (left ^ sign) - sign,
            (right ^ sign) - sign,
            128 * (clk["div_int"] + clk["div_frac"] / 256),
            side["options"]["frame_format"],
        )


def decode_i2s(changes: np.ndarray, frame_format: str) -> tuple[np.ndarray, np.ndarray]:
    """Slots from the recorded pin changes: (values as 32-bit words, start cycles), with
    the channel (0 left, 1 right) in the values' array's second column.

    `changes` rows are (cycle, levels): bit 0 data, bit 1 bit clock, bit 2 word select.
    """
    cyc, v = changes[:, 0], changes[:, 1]
    bclk = (v >> 1) & 1
    rise = np.flatnonzero((bclk[1:] == 1) & (bclk[:-1] == 0)) + 1
    if bclk[0] == 1:
        rise = np.concatenate([[0], rise])
    data, ws, t = v[rise] & 1, (v[rise] >> 2) & 1, cyc[rise]
    # word-select edges; before the first bit the line is taken as the other channel in
    # the standard format (the transmitter starts on an edge), else as the first level
    before = 1 - ws[0] if frame_format == "standard" else ws[0]
    edges = np.flatnonzero(np.diff(np.concatenate([[before], ws])) != 0)
    starts = edges + (1 if frame_format == "standard" else 0)
    slots, times = [], []
    for s in starts:
        if s + 32 > data.size:
            break  # the clock stopped: an unfinished slot
        word = 0
        for b in data[s : s + 32]:
            word = (word << 1) | int(b)
        # the word select belongs to the slot from its MSB to the bit before its LSB; the
        # I2S frame is left while WS is low (Philips I2S bus specification), a
        # left-justified frame left while LRCK is high (codec datasheets; REFERENCES.md
        # section 14, from memory)
        channel = int(ws[s]) if frame_format == "standard" else 1 - int(ws[s])
        slots.append((word, channel))
        times.append(int(t[s]))
    return np.array(slots, dtype=np.int64).reshape(-1, 2), np.array(times, dtype=np.int64)


def frames_of(slots: np.ndarray, times: np.ndarray, bits: int) -> tuple[np.ndarray, ...]:
    """(left, right, left-slot start cycles) of whole frames, samples as signed values."""
    assert slots.shape[0] % 2 == 0 or slots[-1, 1] == 0
    n = slots.shape[0] // 2
    pairs = slots[: 2 * n].reshape(n, 2, 2)
    assert np.all(pairs[:, 0, 1] == 0) and np.all(pairs[:, 1, 1] == 1), "left, then right"
    words = pairs[:, :, 0]
    pad = (1 << (32 - bits)) - 1
    assert np.all(words & pad == 0), "bits below the sample are zero"
    vals = words >> (32 - bits)
    sign = 1 << (bits - 1)
    vals = (vals ^ sign) - sign
    return vals[:, 0], vals[:, 1], times[: 2 * n : 2]


def app(name: str, ops: list[tuple[str, int]]) -> str:
    """A main program playing the asset through the I2S player (``request``: request_stop)."""
    return player_app(
        name,
        [("request_stop" if op == "request" else op, arg) for op, arg in ops],
        header="ladderpack_i2s.h",
        fn="lp_i2s",
        player_type="lp_i2s_player_t",
        stream_type="lp_i2s_stream_t",
        init_macro="I2S_INIT",
    )


def build_and_run(fw: Firmware, folder: Path, name: str, ops: list[tuple[str, int]], **kw):
    image = fw.make(folder, [], [], app=app(name, ops))
    return run(image, fw.mailbox(), extra={"watch_pins": [DATA, CLOCK, CLOCK + 1]}, **kw)


def make(folder: Path, name: str, **opts: object) -> Expected:
    base: dict[str, object] = {
        "output": "i2s",
        "freq_hz": 1000.0,
        "seconds": 0.004,
        "rate_hz": 22050.0,
        "data_pin": DATA,
        "bit_clock_pin": CLOCK,
    }
    base.update(opts)
    if "cycles" in opts:
        base.pop("seconds")
    write_bundle(stream_tone("sine", name=name, **base), folder)
    return Expected.load(folder, name)


def assert_period(times: np.ndarray, exp: Expected) -> None:
    gaps = np.diff(times)
    if exp.period_clocks.is_integer():
        assert np.all(gaps == exp.period_clocks), np.unique(gaps)
    else:  # fractional divider: the frame period dithers by a clock, exact on average
        assert gaps.min() >= np.floor(exp.period_clocks) - 1
        assert gaps.max() <= np.ceil(exp.period_clocks) + 1
        assert abs((times[-1] - times[0]) - exp.period_clocks * gaps.size) <= 1.0


@pytest.mark.parametrize(
    ("bits", "frame_format", "rate_hz"),
    [
        (16, "standard", 22050.0),
        (24, "standard", 48828.125),  # 125 MHz / (20 x 128): an integer divider
        (32, "left-justified", 22050.0),
        (16, "left-justified", 48828.125),
    ],
)
def test_every_frame_reaches_the_lines(
    fw: Firmware, tmp_path: Path, bits: int, frame_format: str, rate_hz: float
) -> None:
    exp = make(tmp_path, "chirp", bits=bits, frame_format=frame_format, rate_hz=rate_hz)
    r = build_and_run(fw, tmp_path, "chirp", [("init", 0), ("start", 0), ("wait", 0)])
    assert r.ended and all(rc == 0 for rc in r.results()), r.results()
    slots, times = decode_i2s(r.changes, exp.frame_format)
    left, right, t = frames_of(slots, times, bits)
    assert np.array_equal(left, exp.left) and np.array_equal(right, exp.right)
    assert np.array_equal(left, right)  # mono: the sample in both slots
    assert_period(t, exp)
    assert left[-1] == 0  # the stream ends on silence


def test_a_stopped_stream_fades_out_to_silence(fw: Firmware, tmp_path: Path) -> None:
    exp = make(tmp_path, "hum", bits=24, seconds=0.02, freq_hz=440.0)
    # stop about a third of the way in: 150 frames of 5669 system clocks
    ops = [("init", 0), ("start", 0), ("delay", 150 * 5669), ("stop", 0)]
    r = build_and_run(fw, tmp_path, "hum", ops)
    assert r.ended and all(rc == 0 for rc in r.results()), r.results()
    slots, times = decode_i2s(r.changes, exp.frame_format)
    left, right, _t = frames_of(slots, times, 24)
    n = 0
    while n < left.size and left[n] == exp.left[n]:
        n += 1
    assert 100 < n < exp.left.size - 100, n  # cut short, well inside the stream
    fade = left[n:]
    assert fade.size <= 64 + 1 and fade[-1] == 0 and right[-1] == 0
    assert np.all(np.abs(np.diff(np.abs(fade))) <= np.abs(exp.left[n - 1]) + 1)
    assert np.all(np.abs(fade[1:]) <= np.abs(fade[:-1]) + 1)  # never grows


def test_a_loop_repeats_until_stopped_then_ends_on_a_pass(fw: Firmware, tmp_path: Path) -> None:
    exp = make(tmp_path, "drone", bits=16, loop=True, cycles=20, freq_hz=2205.0)
    frames = exp.left.size
    ops = [("init", 0), ("start", 1), ("delay", int(2.5 * frames * 5669)), ("stop", 0)]
    r = build_and_run(fw, tmp_path, "drone", ops)
    assert r.ended and all(rc == 0 for rc in r.results()), r.results()
    slots, times = decode_i2s(r.changes, exp.frame_format)
    left, _right, t = frames_of(slots, times, 16)
    passes, rest = divmod(left.size - 1, frames)  # the outro: one silent frame
    assert rest == 0 and passes >= 3, (left.size, frames)
    assert np.array_equal(left[:-1], np.tile(exp.left, passes)) and left[-1] == 0
    assert_period(t, exp)


def test_the_player_builds_for_rp2350(fw2350: Firmware, tmp_path: Path) -> None:
    make(tmp_path, "tick", bits=32, target="rp2350")
    image = fw2350.make(tmp_path, [], [], app=app("tick", [("init", 0), ("start", 0)]))
    assert image.stat().st_size > 0


# --- the MicroPython player, on the vendored MicroPython image ----------------------------


def board_files(folder: Path, name: str, *, embed: bool, **opts: object) -> tuple[Expected, dict]:
    from ladderpack.bundle import bundle_files

    base: dict[str, object] = {
        "output": "i2s",
        "freq_hz": 1000.0,
        "seconds": 0.01,
        "rate_hz": 22050.0,
        "data_pin": DATA,
        "bit_clock_pin": CLOCK,
        "chunk_words": 64,  # several buffers; 64 frames last 2.9 ms at 22.05 kHz
    }
    base.update(opts)
    if "cycles" in opts:
        base.pop("seconds")
    files = bundle_files(
        stream_tone("sine", name=name, **base), embed_words_max=100_000 if embed else 0
    )
    for fname, data in files.items():
        (folder / fname).write_bytes(data)
    board = {f"{name}.py": files[f"{name}.py"], f"{name}.bin": files[f"{name}.bin"]}
    return Expected.load(folder, name), board


@pytest.mark.parametrize("embed", [False, True], ids=["file", "embedded"])
@pytest.mark.parametrize(("bits", "frame_format"), [(16, "standard"), (24, "left-justified")])
def test_micropython_plays_every_frame(
    tmp_path: Path, embed: bool, bits: int, frame_format: str
) -> None:
    from chip.harness import run_micropython

    exp, files = board_files(tmp_path, "ping", embed=embed, bits=bits, frame_format=frame_format)
    r = run_micropython(
        files,
        [{"code": "import ping\nping.play()\n"}],
        tmp_path,
        watch_pins=[DATA, CLOCK, CLOCK + 1],
    )
    assert r.ended and "Traceback" not in r.output(), r.output()[-2000:]
    slots, times = decode_i2s(r.changes, exp.frame_format)
    left, right, t = frames_of(slots, times, bits)
    assert np.array_equal(left, exp.left) and np.array_equal(right, exp.right)
    assert_period(t, exp)


def test_micropython_interrupted_stream_fades_out(tmp_path: Path) -> None:
    from chip.harness import run_micropython

    exp, files = board_files(tmp_path, "buzz", embed=False, bits=16, seconds=0.05)
    steps = [
        {"code": "import buzz\np = buzz.Player()\n"},
        {"code": "p.play()\n", "interrupt_after": 2_500_000},  # 20 ms in
    ]
    r = run_micropython(files, steps, tmp_path, watch_pins=[DATA, CLOCK, CLOCK + 1])
    assert r.ended and "KeyboardInterrupt" in r.output(), r.output()[-2000:]
    slots, times = decode_i2s(r.changes, exp.frame_format)
    left, _right, _t = frames_of(slots, times, 16)
    n = 0
    while n < left.size and left[n] == exp.left[n]:
        n += 1
    assert 0 < n < exp.left.size - 64, (n, exp.left.size)
    fade = left[n:]
    assert 0 < fade.size <= 64 + 1 and fade[-1] == 0
    assert np.all(np.abs(fade[1:]) <= np.abs(fade[:-1]) + 1)


@pytest.mark.parametrize("bits", [16, 24])
def test_stereo_slots_carry_their_own_channel(fw: Firmware, tmp_path: Path, bits: int) -> None:
    from ladderpack.audio import Signal
    from ladderpack.stream import stream_signal

    t = np.arange(1200) / 48000.0
    x = np.stack([0.8 * np.sin(2 * np.pi * 440 * t), -0.5 * np.sin(2 * np.pi * 1500 * t)], 1)
    asset = stream_signal(
        Signal(x, 48000.0),
        name="duet",
        output="i2s",
        stereo=True,
        bits=bits,
        data_pin=DATA,
        bit_clock_pin=CLOCK,
    )
    write_bundle(asset, tmp_path)
    exp = Expected.load(tmp_path, "duet")
    assert not np.array_equal(exp.left, exp.right)
    r = build_and_run(fw, tmp_path, "duet", [("init", 0), ("start", 0), ("wait", 0)])
    assert r.ended and all(rc == 0 for rc in r.results()), r.results()
    slots, times = decode_i2s(r.changes, exp.frame_format)
    left, right, t_ = frames_of(slots, times, bits)
    assert np.array_equal(left, exp.left) and np.array_equal(right, exp.right)
    assert_period(t_, exp)


def test_micropython_stereo(tmp_path: Path) -> None:
    from chip.harness import run_micropython

    from ladderpack.audio import Signal
    from ladderpack.bundle import bundle_files
    from ladderpack.stream import stream_signal

    t = np.arange(400) / 16000.0
    x = np.stack([0.8 * np.sin(2 * np.pi * 440 * t), -0.5 * np.sin(2 * np.pi * 1500 * t)], 1)
    asset = stream_signal(
        Signal(x, 16000.0),
        name="duet",
        output="i2s",
        stereo=True,
        bits=24,
        rate_hz=16000.0,
        data_pin=DATA,
        bit_clock_pin=CLOCK,
        chunk_words=64,
    )
    files = bundle_files(asset, embed_words_max=0)
    for fname, data in files.items():
        (tmp_path / fname).write_bytes(data)
    exp = Expected.load(tmp_path, "duet")
    board = {"duet.py": files["duet.py"], "duet.bin": files["duet.bin"]}
    r = run_micropython(
        board,
        [{"code": "import duet\nduet.play()\n"}],
        tmp_path,
        watch_pins=[DATA, CLOCK, CLOCK + 1],
    )
    assert r.ended and "Traceback" not in r.output(), r.output()[-2000:]
    slots, times = decode_i2s(r.changes, exp.frame_format)
    left, right, t_ = frames_of(slots, times, 24)
    assert np.array_equal(left, exp.left) and np.array_equal(right, exp.right)
    assert_period(t_, exp)


def test_micropython_loop_repeats_until_ctrl_c(tmp_path: Path) -> None:
    from chip.harness import run_micropython

    exp, files = board_files(
        tmp_path, "drone", embed=True, bits=16, loop=True, cycles=20, freq_hz=2205.0
    )
    frames = exp.left.size
    steps = [
        {"code": "import drone\np = drone.Player()\n"},
        {"code": "p.play(loop=True)\n", "interrupt_after": int(4.5 * frames * 5669)},
    ]
    r = run_micropython(files, steps, tmp_path, watch_pins=[DATA, CLOCK, CLOCK + 1])
    assert r.ended and "KeyboardInterrupt" in r.output(), r.output()[-2000:]
    slots, times = decode_i2s(r.changes, exp.frame_format)
    left, _right, t = frames_of(slots, times, 16)
    passes = 0
    while np.array_equal(left[passes * frames : (passes + 1) * frames], exp.left):
        passes += 1
    assert passes >= 2, passes  # whole passes, back to back
    fade = left[passes * frames :]
    assert fade.size and fade[-1] == 0  # then a fade out to silence
    assert_period(t[: passes * frames], exp)


def test_a_system_clock_from_the_pll_makes_48k_exact(fw: Firmware, tmp_path: Path) -> None:
    # 61.44 MHz = 12 MHz x 128 / 5 / 5 (clock --find-sys-clock): 48 kHz frames of 128
    # state-machine cycles with the integer divider 10, no jitter
    exp = make(tmp_path, "amp48", bits=16, rate_hz=48000.0, sys_clock_hz=61_440_000, seconds=0.002)
    assert exp.period_clocks == 1280.0
    header = (tmp_path / "amp48.h").read_text()
    assert "#define AMP48_SET_SYS_CLOCK() set_sys_clock_pll(" in header
    source = app("amp48", [("init", 0), ("start", 0), ("wait", 0)])
    source = source.replace(
        '#include "pico/stdlib.h"', '#include "pico/stdlib.h"\n#include "hardware/clocks.h"'
    )
    source = source.replace("    int rc;\n", "    int rc;\n    AMP48_SET_SYS_CLOCK();\n", 1)
    image = fw.make(tmp_path, [], [], app=source)
    r = run(
        image,
        fw.mailbox(),
        extra={"watch_pins": [DATA, CLOCK, CLOCK + 1], "sys_clock_hz": 61_440_000},
    )
    # the player accepts the clock (clock_get_hz(clk_sys) is the planned one)
    assert r.ended and all(rc == 0 for rc in r.results()), r.results()
    slots, times = decode_i2s(r.changes, exp.frame_format)
    left, right, t = frames_of(slots, times, 16)
    assert np.array_equal(left, exp.left) and np.array_equal(right, exp.right)
    assert np.all(np.diff(t) == 1280)  # every frame exactly 1280 system clocks


def test_micropython_sets_the_planned_clock(tmp_path: Path) -> None:
    from chip.harness import run_micropython

    exp, files = board_files(
        tmp_path, "amp48", embed=True, bits=16, rate_hz=48000.0, sys_clock_hz=61_440_000,
        seconds=0.004,
    )  # fmt: skip
    code = "import amp48\namp48.set_clock()\namp48.play()\n"
    r = run_micropython(files, [{"code": code}], tmp_path, watch_pins=[DATA, CLOCK, CLOCK + 1])
    assert r.ended and "Traceback" not in r.output(), r.output()[-2000:]
    slots, times = decode_i2s(r.changes, exp.frame_format)
    left, right, t = frames_of(slots, times, 16)
    assert np.array_equal(left, exp.left) and np.array_equal(right, exp.right)
    assert np.all(np.diff(t) == 1280)
