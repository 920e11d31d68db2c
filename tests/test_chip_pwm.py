"""PWM streams on the emulated chip: the bundle's players on the real SDK and MicroPython.

Firmware is compiled from the bundle's ``ladderpack_pwm.c`` and asset sources with CMake,
arm-none-eabi-gcc and the vendor SDK 2.2.0 (warnings as errors on our files); the
MicroPython module runs on the vendored MicroPython image. The harness
(``tests/chip/run.mjs``) clocks every enabled PWM slice on its own exact schedule from the
registers the player wrote (a count every DIV system clocks, 8.4 fixed point; a wrap
after TOP; the compare register latched at the wrap: RP2040 datasheet 4.5.2) and paces
the DMA by the slice's wrap request or by the DMA pacing timer (X / Y system clocks,
datasheet 2.5.3.3), and records the compare value each PWM period starts with: the pin's
duty for that period is that value / (TOP + 1). Every period is compared with the values
decoded here from the ``.bin`` and the sidecar (each sample held for K periods), and the
period with the plan in system clocks.
"""

from __future__ import annotations

import dataclasses
import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest
from chip.harness import Firmware, player_app, run, run_micropython

from ladderpack.bundle import bundle_files
from ladderpack.stream import stream_tone

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def fw(tmp_path_factory: pytest.TempPathFactory) -> Firmware:
    return Firmware(tmp_path_factory.mktemp("fw_pwm"))


@dataclass
class Expected:
    """The bundle's compare values and the slice's plan, as the sidecar gives them."""

    codes: np.ndarray
    intro: np.ndarray
    outro: np.ndarray
    idle: int
    slice: int
    channel: str
    periods_per_sample: int
    period_clocks: float

    @classmethod
    def load(cls, folder: Path, name: str) -> Expected:
        side = json.loads((folder / f"{name}.json").read_text())
        clk, pwm = side["clock"], side["pwm"]
        n = side["stream"]["sample_count"]
        # 16-bit values, little-endian, in playing order (sidecar layout: two a word,
        # the first in bits 15:0)
        codes = np.frombuffer((folder / f"{name}.bin").read_bytes(), "<u2")[:n].astype(int)
        src = (folder / f"{name}.c").read_text()
        head = (folder / f"{name}.h").read_text()

        def part(which: str) -> np.ndarray:
            import re

            m = re.search(rf"{name}_{which}_words\[[^\]]*\]\s*=\s*\{{([^}}]*)\}}", src)
            if m is None:
                return np.zeros(0, int)
            words = [int(v, 16) for v in re.findall(r"0x[0-9A-Fa-f]+", m.group(1))]
            # the player sends TRANSFER_COUNT values: a last odd half-word is padding
            count = re.search(rf"{name.upper()}_{which.upper()}_TRANSFER_COUNT\s+(\d+)u", head)
            assert count is not None
            values = [h for w in words for h in (w & 0xFFFF, w >> 16)]
            return np.array(values[: int(count.group(1))], int)

        return cls(
            codes,
            part("intro"),
            part("outro"),
            side["stream"]["idle_code"],
            pwm["slice"],
            pwm["channel"],
            clk["periods_per_sample"],
            (clk["div_int"] + clk["div_frac"] / 16) * (clk["top"] + 1),
        )


def per_period(periods: np.ndarray, exp: Expected) -> tuple[np.ndarray, np.ndarray]:
    """(compare value of the stream's channel, wrap cycle) of every recorded period."""
    rows = periods[periods[:, 1] == exp.slice]
    cc = rows[:, 2]
    value = (cc >> 16) & 0xFFFF if exp.channel == "B" else cc & 0xFFFF
    return value, rows[:, 0]


def find(seq: np.ndarray, part: np.ndarray) -> int:
    """Where `part` starts in `seq` (it must be there)."""
    for o in range(seq.size - part.size + 1):
        if seq[o] == part[0] and np.array_equal(seq[o : o + part.size], part):
            return o
    raise AssertionError(f"{part.size} values not found in {seq.size} periods")


def assert_periods(times: np.ndarray, exp: Expected) -> None:
    gaps = np.diff(times)
    if float(exp.period_clocks).is_integer():
        assert np.all(gaps == exp.period_clocks), np.unique(gaps)
    else:  # a fractional divider: counts of INT or INT + 1 clocks, exact on average
        assert abs(gaps.mean() - exp.period_clocks) < 1.0


def app(name: str, ops: list[tuple[str, int]]) -> str:
    """A main program playing the asset through the PWM player, then a moment for the
    last value to show."""
    return player_app(
        name,
        ops,
        header="ladderpack_pwm.h",
        fn="lp_pwm",
        player_type="lp_pwm_player_t",
        stream_type="lp_pwm_stream_t",
        init_macro="PWM_INIT",
        init_args="&player, &stream",
        tail="    busy_wait_at_least_cycles(20000u);\n",
    )


def make(folder: Path, name: str, **opts: object) -> tuple[Expected, dict[str, bytes]]:
    base: dict[str, object] = {
        "output": "pwm",
        "freq_hz": 1000.0,
        "seconds": 0.004,
        "rate_hz": 22050.0,
        "ramp_ms": 0.5,
        "pwm_pin": 5,
    }
    base.update(opts)
    if "cycles" in opts:
        base.pop("seconds")
    embed = bool(base.pop("embed", False))
    files = bundle_files(
        stream_tone("sine", name=name, **base), embed_words_max=100_000 if embed else 0
    )
    for fname, data in files.items():
        (folder / fname).write_bytes(data)
    if base.get("compress", "none") == "none":
        return Expected.load(folder, name), files
    # a compressed stream (--compress lossless): what the same stream uncompressed says
    plain = folder / "plain"
    plain.mkdir()
    for fname, data in bundle_files(
        stream_tone("sine", name=name, **{**base, "compress": "none"})
    ).items():
        (plain / fname).write_bytes(data)
    return Expected.load(plain, name), files


@pytest.mark.parametrize(
    ("rate_hz", "min_carrier_hz", "pin", "compress"),
    [
        (22050.0, None, 5, "none"),  # four periods a sample, paced by a DMA timer; channel B
        (44100.0, 44100.0, 8, "none"),  # one period a sample, paced by the slice's wrap; A
        (22050.0, None, 5, "lossless"),  # the same, decoded on the chip (issue 31)
        (44100.0, 44100.0, 8, "lossless"),
    ],
)
def test_c_player_every_period_holds_its_sample(
    fw: Firmware,
    tmp_path: Path,
    rate_hz: float,
    min_carrier_hz: float | None,
    pin: int,
    compress: str,
) -> None:
    exp, _files = make(
        tmp_path, "chirp", rate_hz=rate_hz, min_carrier_hz=min_carrier_hz, pwm_pin=pin,
        compress=compress,
    )  # fmt: skip
    image = fw.make(tmp_path, [], [], app=app("chirp", [("init", 0), ("start", 0), ("wait", 0)]))
    r = run(image, fw.mailbox(), extra={"pwm_slices": [exp.slice]})
    assert r.ended and all(rc == 0 for rc in r.results()), r.results()
    values, times = per_period(r.periods, exp)
    want = np.repeat(exp.codes, exp.periods_per_sample)
    start = find(values, want)
    assert np.all(values[:start] == exp.idle) and np.all(values[start + want.size :] == exp.idle)
    assert_periods(times, exp)


@pytest.mark.parametrize(
    ("op", "idle_code", "compress"),
    [
        ("stop", 0, "none"),
        ("request_stop", 0, "none"),
        ("request_stop", 200, "none"),
        ("stop", 0, "lossless"),
        ("request_stop", 200, "lossless"),
    ],
)
def test_c_player_stop_ramps_every_period_to_idle(
    fw: Firmware, tmp_path: Path, op: str, idle_code: int, compress: str
) -> None:
    # A stop cuts the stream short and ramps to the idle code, every period within the
    # stream's largest step. A mono stream's DMA moves 16-bit transfers: the ramp made at
    # run time must hold one value a halfword, or every other period plays 0 (issue 26).
    exp, _files = make(
        tmp_path, "hum", seconds=0.02, freq_hz=440.0, idle_code=idle_code, compress=compress
    )
    per_sample = exp.period_clocks * exp.periods_per_sample
    ops = [("init", 0), ("start", 0), ("delay", int(150 * per_sample)), (op, 0)]
    ops += [("wait", 0)] if op == "request_stop" else []
    image = fw.make(tmp_path, [], [], app=app("hum", ops))
    r = run(image, fw.mailbox(), extra={"pwm_slices": [exp.slice]})
    assert r.ended and all(rc == 0 for rc in r.results()), r.results()
    values, _t = per_period(r.periods, exp)
    want = np.repeat(exp.codes, exp.periods_per_sample)
    start = find(values, want[:50])
    played = values[start:]
    n = 0
    while n < played.size and n < want.size and played[n] == want[n]:
        n += 1
    assert 100 < n < want.size - 100, n  # cut short inside the stream
    step = int(np.abs(np.diff(np.concatenate([[exp.idle], exp.codes, [exp.idle]]))).max())
    assert np.abs(np.diff(played)).max() <= step
    assert played[-1] == exp.idle == idle_code
    if idle_code:
        assert played.min() > 0  # no zero halves between the ramp's values


@pytest.mark.parametrize("compress", ["none", "lossless"])
def test_c_player_loop_and_rp2350_build(
    fw: Firmware, fw2350: Firmware, tmp_path: Path, compress: str
) -> None:
    exp, _files = make(tmp_path, "drone", loop=True, cycles=10, freq_hz=2205.0, compress=compress)
    per_pass = exp.codes.size * exp.period_clocks * exp.periods_per_sample
    # then a DC level on demand (a compare value held at once), and one out of range
    top1 = int(json.loads((tmp_path / "drone.json").read_text())["clock"]["top"]) + 1
    ops = [("init", 0), ("start", 1), ("delay", int(2.5 * per_pass)), ("stop", 0),
           ("delay", int(8 * exp.period_clocks)), ("hold", 123), ("hold", top1 + 1)]  # fmt: skip
    image = fw.make(tmp_path, [], [], app=app("drone", ops))
    r = run(image, fw.mailbox(), extra={"pwm_slices": [exp.slice]})
    assert r.ended and r.results() == [0, 0, 0, 0, 0, 0, -7], r.results()  # LP_PWM_ERR_CODE
    values, _t = per_period(r.periods, exp)
    k = exp.periods_per_sample
    body = np.repeat(exp.codes, k)
    start = find(values, np.repeat(exp.intro, k)) + exp.intro.size * k
    passes = 0
    while np.array_equal(values[start : start + body.size], body):
        start += body.size
        passes += 1
    assert passes >= 3
    outro = np.repeat(exp.outro, k)
    assert np.array_equal(values[start : start + outro.size], outro)
    rest = values[start + outro.size :]
    held = int(np.argmax(rest == 123))
    assert np.all(rest[:held] == exp.idle) and held > 0 and np.all(rest[held:] == 123)
    # the same bundle builds for the RP2350 with its SDK platform
    assert fw2350.make(tmp_path, [], [], app=app("drone", ops)).stat().st_size > 0


@pytest.mark.parametrize(
    ("rate_hz", "embed", "compress"),
    [
        (22050.0, False, "none"),
        (11025.0, False, "none"),
        (16000.0, True, "none"),
        (22050.0, False, "lossless"),
    ],
)
def test_micropython_every_period_holds_its_sample(
    tmp_path: Path, rate_hz: float, embed: bool, compress: str
) -> None:
    exp, files = make(tmp_path, "ping", rate_hz=rate_hz, seconds=0.01, chunk_words=64, embed=embed,
                      compress=compress)  # fmt: skip
    board = {"ping.py": files["ping.py"], "ping.bin": files["ping.bin"]}
    code = "import ping\np = ping.Player()\np.play()\np.hold_code(77)\n"
    r = run_micropython(board, [{"code": code}], tmp_path, pwm_slices=[exp.slice])
    assert r.ended and "Traceback" not in r.output(), r.output()[-2000:]
    values, times = per_period(r.periods, exp)
    want = np.repeat(exp.codes, exp.periods_per_sample)
    start = find(values, want)
    rest = values[start + want.size :]  # idle, then the DC level held on demand
    held = int(np.argmax(rest == 77))
    assert held > 0 and np.all(rest[:held] == exp.idle) and np.all(rest[held:] == 77)
    assert_periods(times, exp)


@pytest.mark.parametrize("compress", ["none", "lossless"])
def test_micropython_interrupt_ramps_down_and_a_loop_ends_on_its_outro(
    tmp_path: Path, compress: str
) -> None:
    exp, files = make(tmp_path, "buzz", seconds=0.05, chunk_words=64, compress=compress)
    board = {"buzz.py": files["buzz.py"], "buzz.bin": files["buzz.bin"]}
    steps = [
        {"code": "import buzz\np = buzz.Player()\n"},
        {"code": "p.play()\n", "interrupt_after": 2_500_000},  # 20 ms in
    ]
    r = run_micropython(board, steps, tmp_path, pwm_slices=[exp.slice])
    assert r.ended and "KeyboardInterrupt" in r.output(), r.output()[-2000:]
    values, _t = per_period(r.periods, exp)
    want = np.repeat(exp.codes, exp.periods_per_sample)
    start = find(values, want[:50])
    played = values[start:]
    n = 0
    while n < played.size and n < want.size and played[n] == want[n]:
        n += 1
    assert 100 < n < want.size - 100, n
    assert played[-1] == exp.idle
    step = int(np.abs(np.diff(np.concatenate([[exp.idle], exp.codes, [exp.idle]]))).max())
    assert np.abs(np.diff(played)).max() <= step


@pytest.mark.parametrize("compress", ["none", "lossless"])
def test_stereo_uses_both_channels_of_the_slice(
    fw: Firmware, tmp_path: Path, compress: str
) -> None:
    from ladderpack.audio import Signal
    from ladderpack.bundle import write_bundle
    from ladderpack.stream import stream_signal

    t = np.arange(2000) / 48000.0
    x = np.stack([0.8 * np.sin(2 * np.pi * 440 * t), -0.5 * np.sin(2 * np.pi * 1500 * t)], 1)

    def asset(how: str) -> object:
        return stream_signal(Signal(x, 48000.0), name="duet", output="pwm", stereo=True,
                             pwm_pin=6, ramp_ms=0.5, compress=how)  # fmt: skip

    write_bundle(asset(compress), tmp_path)
    write_bundle(asset("none"), tmp_path / "plain")  # the values, as words
    side = json.loads((tmp_path / "duet.json").read_text())
    clk = side["clock"]
    words = np.frombuffer((tmp_path / "plain" / "duet.bin").read_bytes(), "<u4").astype(np.int64)
    a_codes, b_codes = words & 0xFFFF, words >> 16  # channel A in bits 15:0, B in 31:16
    assert not np.array_equal(a_codes, b_codes)
    image = fw.make(tmp_path, [], [], app=app("duet", [("init", 0), ("start", 0), ("wait", 0)]))
    r = run(image, fw.mailbox(), extra={"pwm_slices": [3]})  # GPIO 6 and 7: slice 3
    assert r.ended and all(rc == 0 for rc in r.results()), r.results()
    rows = r.periods[r.periods[:, 1] == 3]
    k = clk["periods_per_sample"]
    for values, want in ((rows[:, 2] & 0xFFFF, a_codes), (rows[:, 2] >> 16, b_codes)):
        start = find(values, np.repeat(want, k))
        assert np.all(values[start + want.size * k :] == side["stream"]["idle_code"])


@pytest.mark.parametrize("compress", ["none", "lossless"])
def test_micropython_stereo(tmp_path: Path, compress: str) -> None:
    from ladderpack.audio import Signal
    from ladderpack.stream import stream_signal

    t = np.arange(800) / 16000.0
    x = np.stack([0.8 * np.sin(2 * np.pi * 440 * t), -0.5 * np.sin(2 * np.pi * 1500 * t)], 1)
    asset = stream_signal(
        Signal(x, 16000.0),
        name="duet",
        output="pwm",
        stereo=True,
        pwm_pin=6,
        ramp_ms=0.5,
        rate_hz=16000.0,
        chunk_words=64,
        compress=compress,
    )
    files = bundle_files(asset, embed_words_max=0)
    side = json.loads(files["duet.json"])
    plain = bundle_files(dataclasses.replace(asset, lossless=None), embed_words_max=0)
    words = np.frombuffer(plain["duet.bin"], "<u4").astype(np.int64)  # the values, as words
    board = {"duet.py": files["duet.py"], "duet.bin": files["duet.bin"]}
    r = run_micropython(board, [{"code": "import duet\nduet.play()\n"}], tmp_path, pwm_slices=[3])
    assert r.ended and "Traceback" not in r.output(), r.output()[-2000:]
    rows = r.periods[r.periods[:, 1] == 3]
    k = side["clock"]["periods_per_sample"]
    for values, want in ((rows[:, 2] & 0xFFFF, words & 0xFFFF), (rows[:, 2] >> 16, words >> 16)):
        start = find(values, np.repeat(want, k))
        assert np.all(values[start + want.size * k :] == side["stream"]["idle_code"])


@pytest.mark.parametrize("compress", ["none", "lossless"])
def test_micropython_loop_repeats_until_ctrl_c(tmp_path: Path, compress: str) -> None:
    exp, files = make(tmp_path, "drone", loop=True, cycles=10, freq_hz=2205.0, embed=True,
                      compress=compress)  # fmt: skip
    board = {"drone.py": files["drone.py"], "drone.bin": files["drone.bin"]}
    k = exp.periods_per_sample
    per_pass = exp.codes.size * exp.period_clocks * k
    steps = [
        {"code": "import drone\np = drone.Player()\n"},
        {"code": "p.play(loop=True)\n", "interrupt_after": int(4.5 * per_pass)},
    ]
    r = run_micropython(board, steps, tmp_path, pwm_slices=[exp.slice])
    assert r.ended and "KeyboardInterrupt" in r.output(), r.output()[-2000:]
    values, _t = per_period(r.periods, exp)
    body = np.repeat(exp.codes, k)
    start = find(values, np.repeat(exp.intro, k)) + exp.intro.size * k
    passes = 0
    while np.array_equal(values[start : start + body.size], body):
        start += body.size
        passes += 1
    assert passes >= 2, passes
    assert values[-1] == exp.idle  # then a ramp down to the idle code
