"""Two ladders (stereo) on the emulated chip: the stereo C player and MicroPython module.

Firmware is compiled from the bundle's ``ladderpack_stereo.c`` and asset sources with the
vendor SDK 2.2.0 (warnings as errors on our files) and run on rp2040js with the state
machines clocked by the harness's cycle-accurate schedule; the MicroPython module runs
on the vendored MicroPython image. Every sample that reaches the 2N pins is split into
the two ladders' codes here, with the sidecar's pin order and inversion undone for each
ladder on its own (code of the test's own), and compared with the ``.bin``; the sample
period with the plan in system clocks (RP2040 datasheet 3.5.5).
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest
from chip.harness import Firmware, player_app, run, run_micropython

from ladderpack.audio import Signal
from ladderpack.bundle import bundle_files
from ladderpack.stream import stream_signal

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def fw(tmp_path_factory: pytest.TempPathFactory) -> Firmware:
    return Firmware(tmp_path_factory.mktemp("fw_stereo"))


@dataclass
class Two:
    """The bundle as the tests decode it: both ladders' codes, the pins and the clock."""

    n: int
    out_base: int
    msb_high: bool
    invert: bool
    left: np.ndarray
    right: np.ndarray
    idle: int
    period: float
    max_step: int

    def split(self, pins: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """GPIO output words -> (left, right) codes."""
        x = (np.asarray(pins, np.int64) >> self.out_base) & ((1 << (2 * self.n)) - 1)
        return self._code(x & ((1 << self.n) - 1)), self._code(x >> self.n)

    def _code(self, v: np.ndarray) -> np.ndarray:
        m = (1 << self.n) - 1
        if self.invert:
            v = v ^ m
        if self.msb_high:
            return v
        out = np.zeros_like(v)
        for k in range(self.n):  # ladder bit k on pin n - 1 - k
            out |= ((v >> k) & 1) << (self.n - 1 - k)
        return out

    @classmethod
    def load(cls, files: dict[str, bytes], name: str) -> Two:
        side = json.loads(files[f"{name}.json"])
        lay, clk = side["layout"], side["clock"]
        n, spw = lay["channel_bits"], lay["samples_per_word"]
        words = np.frombuffer(files[f"{name}.bin"], "<u4").astype(np.int64)
        shifts = [
            k * 2 * n if lay["shift"] == "right" else 32 - (k + 1) * 2 * n for k in range(spw)
        ]
        slots = np.stack([(words >> s) & ((1 << (2 * n)) - 1) for s in shifts], 1).reshape(-1)
        base = side["state_machine"]["out_base"]
        two = cls(n, base, lay["pin_order"] == "msb-high", lay["invert"], slots, slots, 0, 0, 0)
        left, right = two.split(slots << base)
        count = side["stream"]["sample_count"]
        idle = side["options"]["idle_code"]
        seq = np.concatenate([[[idle, idle]], np.stack([left, right], 1), [[idle, idle]]])
        return cls(
            n,
            base,
            two.msb_high,
            two.invert,
            left[:count],
            right[:count],
            idle,
            clk["cycles_per_sample"] * (clk["div_int"] + clk["div_frac"] / 256),
            int(np.abs(np.diff(seq, axis=0)).max()),
        )


def make(folder: Path, name: str, **opts: object) -> tuple[Two, dict[str, bytes]]:
    t = np.arange(600) / 48000.0
    x = np.stack([0.9 * np.sin(2 * np.pi * 440 * t), -0.6 * np.sin(2 * np.pi * 1500 * t)], 1)
    base: dict[str, object] = {"stereo": True, "rate_hz": 48000.0, "ramp_ms": 0.2}
    base.update(opts)
    asset = stream_signal(Signal(x, 48000.0), name=name, **base)
    files = bundle_files(asset, embed_words_max=0)
    for fname, data in files.items():
        (folder / fname).write_bytes(data)
    return Two.load(files, name), files


def app(name: str, ops: list[tuple[str, int]]) -> str:
    return player_app(
        name,
        ops,
        header="ladderpack_stereo.h",
        fn="lp_stereo_player",  # the old names (aliases of lp_stereo_*, until 0.3)
        player_type="lp_stereo_player_t",
        stream_type="lp_stereo_stream_t",
        init_macro="STEREO_INIT",
    )


def played(r, two: Two) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    s = r.samples["0.0"]
    left, right = two.split(s[:, 1])
    return left, right, s[:, 0]


@pytest.mark.parametrize(
    ("bits", "opts"),
    [
        (8, {"out_base": 8}),
        (6, {"out_base": 2, "pin_order": "msb-low", "invert": True, "shift": "left"}),
    ],
)
def test_both_ladders_get_every_sample(
    fw: Firmware, tmp_path: Path, bits: int, opts: dict[str, object]
) -> None:
    two, _files = make(tmp_path, "duet", bits=bits, **opts)
    assert not np.array_equal(two.left, two.right)
    image = fw.make(tmp_path, [], [], app=app("duet", [("init", 0), ("start", 0), ("wait", 0)]))
    r = run(image, fw.mailbox())
    assert r.ended and all(rc == 0 for rc in r.results()), r.results()
    left, right, times = played(r, two)
    n = two.left.size
    assert np.array_equal(left[:n], two.left) and np.array_equal(right[:n], two.right)
    gaps = np.diff(times[:n])
    assert abs(gaps.mean() - two.period) < 1.0


def test_stop_and_hold_ramp_each_ladder(fw: Firmware, tmp_path: Path) -> None:
    two, _files = make(tmp_path, "duet", bits=8, out_base=8)
    target = 200 | (30 << 8)  # left 200, right 30
    ops = [
        ("init", 0),
        ("start", 0),
        ("delay", int(250 * two.period)),
        ("stop", 0),
        ("hold", target),
        ("wait", 0),
    ]
    image = fw.make(tmp_path, [], [], app=app("duet", ops))
    r = run(image, fw.mailbox())
    assert r.ended and all(rc == 0 for rc in r.results()), r.results()
    left, right, _t = played(r, two)
    k = 0
    while k < left.size and k < two.left.size and left[k] == two.left[k]:
        k += 1
    assert 100 < k < two.left.size - 100, k  # cut short inside the stream
    assert np.abs(np.diff(left)).max() <= two.max_step
    assert np.abs(np.diff(right)).max() <= two.max_step
    assert (left[-1], right[-1]) == (200, 30)  # the held frame, reached by ramps


def test_micropython_plays_both_ladders(tmp_path: Path) -> None:
    two, files = make(tmp_path, "duet", bits=8, out_base=8, chunk_words=32)
    board = {"duet.py": files["duet.py"], "duet.bin": files["duet.bin"]}
    r = run_micropython(board, [{"code": "import duet\nduet.play()\n"}], tmp_path)
    assert r.ended and "Traceback" not in r.output(), r.output()[-2000:]
    left, right, _t = played(r, two)
    n = two.left.size
    assert np.array_equal(left[:n], two.left) and np.array_equal(right[:n], two.right)


def test_stereo_player_builds_for_rp2350(fw2350: Firmware, tmp_path: Path) -> None:
    make(tmp_path, "duet", bits=12, out_base=2, target="rp2350", loop=True)
    image = fw2350.make(tmp_path, [], [], app=app("duet", [("init", 0), ("start", 1)]))
    assert image.stat().st_size > 0


def test_stereo_loop_repeats_and_ends_on_its_outro(fw: Firmware, tmp_path: Path) -> None:
    two, files = make(tmp_path, "drone", bits=8, out_base=8, loop=True)
    side = json.loads(files["drone.json"])
    frames = side["stream"]["sample_count"]
    ops = [("init", 0), ("start", 1), ("delay", int(2.5 * frames * two.period)), ("stop", 0)]
    image = fw.make(tmp_path, [], [], app=app("drone", ops))
    r = run(image, fw.mailbox())
    assert r.ended and all(rc == 0 for rc in r.results()), r.results()
    left, right, _t = played(r, two)
    # find the first pass after the intro, then whole passes to the end of the loop
    start = next(
        k
        for k in range(left.size - frames)
        if np.array_equal(left[k : k + frames], two.left)
        and np.array_equal(right[k : k + frames], two.right)
    )
    passes = 0
    while np.array_equal(left[start : start + frames], two.left):
        assert np.array_equal(right[start : start + frames], two.right)
        start += frames
        passes += 1
    assert passes >= 3
    assert left[-1] == right[-1] == two.idle  # the outro ends both ladders on idle
    import re

    # no step larger than the stream's own largest (intro, seam and outro included)
    bound = int(re.search(r"DRONE_MAX_STEP\s+(\d+)u", files["drone.h"].decode()).group(1))
    assert np.abs(np.diff(left)).max() <= bound and np.abs(np.diff(right)).max() <= bound
