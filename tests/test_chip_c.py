"""The C player, built with the real SDK and run on an emulated RP2040.

Firmware is compiled from the bundle's own ``ladderpack_player.c`` and asset sources with
CMake, arm-none-eabi-gcc and the vendor SDK 2.2.0 (``-Wall -Wextra -Wconversion
-Wsign-conversion -Werror`` on our files), and run on rp2040js with the state machines
clocked by the harness's cycle-accurate schedule (``tests/chip/run.mjs``). Every sample
that reaches the ladder pins is compared with the codes decoded from the ``.bin`` and the
sidecar by the harness's own decoder, and the sample period with the plan in system
clocks (RP2040 datasheet 3.5.5: a state machine runs once every INT + FRAC/256 clocks).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from chip.harness import Firmware, Run, Step, Stream, run

from ladderpack.bundle import write_bundle
from ladderpack.stream import stream_tone

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def fw(tmp_path_factory: pytest.TempPathFactory) -> Firmware:
    return Firmware(tmp_path_factory.mktemp("fw2040"))


def make(folder: Path, name: str, **opts: object) -> Stream:
    """A short tone bundle at a high rate (so the emulator runs it quickly)."""
    defaults: dict[str, object] = {
        "freq_hz": 5000.0,
        "seconds": 0.0006,
        "rate_hz": 250000.0,
        "ramp_ms": 0.02,
        "bits": 8,
    }
    defaults.update(opts)
    if "cycles" in opts:
        defaults.pop("seconds")
    asset = stream_tone("sine", name=name, **defaults)
    write_bundle(asset, folder)
    return Stream.load(folder, name)


def window(run_: Run, key: str, start: int, end: int) -> np.ndarray:
    s = run_.samples.get(key, np.zeros((0, 2), np.int64))
    return s[(s[:, 0] >= start) & (s[:, 0] <= end)]


def played(run_: Run, stream: Stream, start_step: int, end_step: int, key: str = "0.0"):
    """Codes and sample times between two steps' reports."""
    w = window(run_, key, run_.event_cycle(start_step - 1), run_.event_cycle(end_step))
    return stream.layout.pins_to_code(w[:, 1]), w[:, 0]


def assert_period(times: np.ndarray, stream: Stream) -> None:
    period = stream.layout.sample_period_clocks
    gaps = np.diff(times)
    if float(period).is_integer():
        assert np.all(gaps == period), (np.unique(gaps), period)
    else:  # a fractional divider: each state-machine clock is INT or INT + 1 clocks
        slack = stream.layout.cycles
        assert gaps.min() >= np.floor(period) and gaps.max() <= np.ceil(period) + slack
        assert abs(gaps.mean() - period) < 1.0


def play_once_steps(count: int) -> list[Step]:
    steps: list[Step] = []
    for i in range(count):
        steps += [Step("init", 0, i), Step("start"), Step("wait"), Step("deinit")]
    return steps


def check_once(run_: Run, streams: list[Stream], key: str = "0.0") -> None:
    assert run_.ended
    assert all(rc == 0 for rc in run_.results()), run_.results()
    for i, s in enumerate(streams):
        codes, times = played(run_, s, 4 * i + 1, 4 * i + 3, key)
        # The loop program repeats its closing word of idle codes until stopped: the
        # samples after the stream (at most one word by the wait's end) are idle.
        extra = codes[s.codes.size :]
        assert extra.size <= s.layout.spw and np.all(extra == s.layout.idle_code), s.name
        np.testing.assert_array_equal(codes[: s.codes.size], s.codes, err_msg=s.name)
        assert_period(times, s)
        # after the wait the pins hold the idle code
        pins_after = run_.events[4 * i + 2][2]
        assert s.layout.pins_to_code(np.array([pins_after]))[0] == s.layout.idle_code


def test_every_bit_depth_plays_every_sample(fw: Firmware, tmp_path: Path) -> None:
    # Bit depths 1..16, alternating shift directions and pin orders.
    streams = [
        make(
            tmp_path,
            f"b{bits}",
            bits=bits,
            shift="left" if bits % 2 else "right",
            pin_order="msb-low" if bits % 3 == 0 else "msb-high",
            out_base=2,
        )
        for bits in range(1, 17)
    ]
    r = run(fw.make(tmp_path, [s.name for s in streams], play_once_steps(16)), fw.mailbox())
    check_once(r, streams)


@pytest.mark.parametrize("program", ["autopull", "pull", "loop"])
@pytest.mark.parametrize("invert", [False, True])
def test_program_variants_and_inversion(
    fw: Firmware, tmp_path: Path, program: str, invert: bool
) -> None:
    spw = 1 if program == "pull" else None
    streams = [
        make(
            tmp_path,
            f"v{bits}",
            bits=bits,
            program=program,
            invert=invert,
            samples_per_word=spw,
            idle_code=idle,
            out_base=base,
        )
        for bits, idle, base in ((8, 0, 16), (10, 512, 0), (12, 4095, 5))
    ]
    r = run(fw.make(tmp_path, [s.name for s in streams], play_once_steps(3)), fw.mailbox())
    check_once(r, streams)


def test_fractional_divider_period(fw: Firmware, tmp_path: Path) -> None:
    s = make(tmp_path, "frac", rate_hz=44100.0 * 4, rate_tolerance_ppm=0.0)
    assert s.layout.div_frac != 0
    r = run(fw.make(tmp_path, [s.name], play_once_steps(1)), fw.mailbox())
    check_once(r, [s])


def test_play_twice_gives_the_same_samples(fw: Firmware, tmp_path: Path) -> None:
    s = make(tmp_path, "twice", ramp_ms=0.004)
    steps = [Step("init", 0, 0), Step("start"), Step("wait"), Step("start"), Step("wait")]
    r = run(fw.make(tmp_path, [s.name], steps), fw.mailbox())
    assert r.results() == [0] * 5
    for a, b in ((1, 2), (3, 4)):
        codes, _t = played(r, s, a, b)
        np.testing.assert_array_equal(codes, s.codes)


def test_ramp_zero_returns_to_idle(fw: Firmware, tmp_path: Path) -> None:
    s = make(tmp_path, "noramp", ramp_ms=0.0)
    r = run(fw.make(tmp_path, [s.name], play_once_steps(1)), fw.mailbox())
    check_once(r, [s])
    assert s.codes[-1] == s.layout.idle_code
    assert s.max_step >= np.abs(np.diff(s.codes)).max()


def decompose_loop(codes: np.ndarray, s: Stream) -> int:
    """Number of whole passes in intro + passes + outro; fails if it is not that.

    The loop program reports the end once its closing word of idle codes is on the pins,
    so idle samples at the very end may still be on their way: trailing idle codes are
    compared without their count.
    """
    idle = s.layout.idle_code
    outro = s.outro
    while outro.size and outro[-1] == idle:
        outro = outro[:-1]
    while codes.size and codes[-1] == idle:
        codes = codes[:-1]
    # likewise the idle samples a previous playback of the loop program left behind
    intro = s.intro
    while intro.size and intro[0] == idle:
        intro = intro[1:]
    while codes.size and codes[0] == idle:
        codes = codes[1:]
    n_i, n_l, n_o = intro.size, s.codes.size, outro.size
    np.testing.assert_array_equal(codes[:n_i], intro)
    body = codes[n_i : codes.size - n_o]
    np.testing.assert_array_equal(codes[codes.size - n_o :], outro)
    assert body.size % n_l == 0, (body.size, n_l)
    passes = body.size // n_l
    np.testing.assert_array_equal(body, np.tile(s.codes, passes))
    return passes


@pytest.mark.parametrize("program", ["loop", "autopull"])
def test_loop_stop_at_many_points_ends_on_a_pass_boundary(
    fw: Firmware, tmp_path: Path, program: str
) -> None:
    s = make(tmp_path, "lp", loop=True, cycles=3, program=program, ramp_ms=0.01)
    pass_clocks = int(s.codes.size * s.layout.sample_period_clocks)
    delays = [1, 50, pass_clocks // 3, pass_clocks // 2, pass_clocks - 40, 2 * pass_clocks + 7]
    steps = [Step("init", 0, 0)]
    for d in delays:
        steps += [Step("start", 0, 1), Step("delay", 0, d), Step("request_stop"), Step("wait")]
    # played once (loop=false), and stopped during the intro
    steps += [Step("start", 0, 0), Step("wait"), Step("start", 0, 1), Step("stop"), Step("deinit")]
    r = run(fw.make(tmp_path, [s.name], steps), fw.mailbox())
    assert all(rc == 0 for rc in r.results()), r.results()
    for k in range(len(delays)):
        codes, times = played(r, s, 1 + 4 * k, 4 + 4 * k)
        assert decompose_loop(codes, s) >= 1
        # timed from the first non-idle sample (idle ones left by the previous playback
        # of the loop program come before a restart)
        assert_period(times[int(np.argmax(codes != s.layout.idle_code)) :], s)
        assert np.abs(np.diff(codes)).max() <= s.max_step
    base = 1 + 4 * len(delays)
    codes, _t = played(r, s, base, base + 1)
    assert decompose_loop(codes, s) == 1  # loop=false plays one pass
    codes, _t = played(r, s, base + 2, base + 3)
    assert decompose_loop(codes, s) == 1  # a stop during the intro: one pass, then outro
    assert s.layout.pins_to_code(np.array([r.final_pins]))[0] == s.layout.idle_code


def test_stop_a_stream_ramps_from_where_it_is(fw: Firmware, tmp_path: Path) -> None:
    s = make(tmp_path, "cut", seconds=0.002, level_dbfs=-0.5, ramp_ms=0.004)
    stops_ramp_from_where_they_are(fw, tmp_path, s, (1 / 7, 1 / 3, 1 / 2, 4 / 5))


def stops_ramp_from_where_they_are(
    fw: Firmware, tmp_path: Path, s: Stream, shares: tuple[float, ...]
) -> None:
    """Play `s` and stop it 10 clocks in and at each share of its length (busy-wait
    clocks); every playback is a prefix of the stream, then a ramp to idle."""
    total = int(s.codes.size * s.layout.sample_period_clocks)
    delays = [10, *(int(total * f) for f in shares)]
    steps = [Step("init", 0, 0)]
    for d in delays:
        steps += [Step("start"), Step("delay", 0, d), Step("request_stop"), Step("wait")]
    r = run(fw.make(tmp_path, [s.name], steps), fw.mailbox())
    assert all(rc == 0 for rc in r.results())
    for k in range(len(delays)):
        codes, times = played(r, s, 1 + 4 * k, 4 + 4 * k)
        s.assert_cut_short(codes)
        assert_period(times, s)


def test_deinit_while_playing_and_two_pio_blocks(fw: Firmware, tmp_path: Path) -> None:
    a = make(tmp_path, "aa", out_base=0, bits=8, seconds=0.002)
    b = make(tmp_path, "bb", out_base=10, bits=12, loop=True, cycles=4)
    steps = [
        Step("init", 0, 0, 0),  # pio0
        Step("init", 1, 1, 1),  # pio1
        Step("start", 0, 0),
        Step("start", 1, 1),
        Step("delay", 0, 20000),
        Step("deinit", 0),  # stream: ramps down at once, then releases
        Step("deinit", 1),  # loop: finishes its pass and plays the outro, then releases
        Step("init", 2, 0, 0),  # the freed channels and state machine can be claimed again
        Step("start", 2, 0),
        Step("wait", 2),
    ]
    r = run(fw.make(tmp_path, [a.name, b.name], steps), fw.mailbox())
    assert r.results() == [0] * 10
    codes_a, _t = played(r, a, 2, 5, key="0.0")
    assert codes_a[-1] == a.layout.idle_code
    assert np.abs(np.diff(codes_a)).max() <= a.max_step
    codes_b, times_b = played(r, b, 3, 6, key="1.0")
    assert decompose_loop(codes_b, b) >= 1
    assert_period(times_b, b)
    codes_again, _t = played(r, a, 8, 9, key="0.0")
    np.testing.assert_array_equal(codes_again, a.codes)


def test_errors_are_codes_not_panics(fw: Firmware, tmp_path: Path) -> None:
    s = make(tmp_path, "er", bits=8)
    wrong = make(tmp_path, "clk", bits=8, sys_clock_hz=150_000_000)
    steps = [
        Step("init", 0, 1),  # planned for 150 MHz: LP_ERR_CLOCK
        Step("init", 0, 0),
        Step("init", 1, 0),
        Step("init", 2, 0),
        Step("init", 3, 0),  # four players on pio0: every state machine claimed
        Step("start", 0, 0),
        Step("start", 0, 0),  # already playing: LP_ERR_BUSY
        Step("hold", 0, 300),  # out of range for 8 bits: LP_ERR_CODE
        Step("wait", 0),
    ]
    r = run(fw.make(tmp_path, [s.name, wrong.name], steps), fw.mailbox())
    assert r.results() == [-3, 0, 0, 0, 0, 0, -6, -7, 0]


def test_hold_code_puts_a_dc_level_on_the_pins(fw: Firmware, tmp_path: Path) -> None:
    s = make(tmp_path, "dc", bits=8)
    steps = [
        Step("init", 0, 0),
        Step("hold", 0, 200),
        Step("wait"),
        Step("delay", 0, 5000),
        Step("hold", 0, 37),
        Step("wait"),
        Step("start"),  # back to idle first, then the stream
        Step("wait"),
    ]
    r = run(fw.make(tmp_path, [s.name], steps), fw.mailbox())
    assert r.results() == [0] * 8
    code_at = [s.layout.pins_to_code(np.array([e[2]]))[0] for e in r.events]
    assert code_at[2] == 200 and code_at[3] == 200 and code_at[5] == 37
    codes, _t = played(r, s, 1, 5)
    assert np.abs(np.diff(codes)).max() <= s.max_step
    codes, _t = played(r, s, 6, 7)
    assert np.abs(np.diff(codes)).max() <= s.max_step
    assert codes[-s.codes.size :].tolist() == s.codes.tolist()


def test_deinit_after_hold_code_ramps_back_to_the_idle_code(fw: Firmware, tmp_path: Path) -> None:
    # the header's promise: after deinit the pins keep the idle code (issue 26, item 8)
    s = make(tmp_path, "dcoff", bits=8, idle_code=10)
    steps = [Step("init", 0, 0), Step("hold", 0, 200), Step("wait"), Step("deinit")]
    r = run(fw.make(tmp_path, [s.name], steps), fw.mailbox())
    assert r.results() == [0] * 4
    code_at = [s.layout.pins_to_code(np.array([e[2]]))[0] for e in r.events]
    assert code_at[2] == 200 and code_at[3] == 10
    assert s.layout.pins_to_code(np.array([r.final_pins]))[0] == 10
    codes, _t = played(r, s, 2, 3)  # up to the held code and, at deinit, back down
    assert 200 in codes and codes[-1] == 10
    assert np.abs(np.diff(codes)).max() <= s.max_step


def test_builds_for_rp2350(fw2350: Firmware, tmp_path: Path) -> None:
    # Compile only: the emulator is an RP2040. The same warnings, the RP2350's SDK.
    streams = [
        make(tmp_path, "p2", target="rp2350", loop=True, cycles=3),
        make(tmp_path, "p3", target="rp2350", bits=12),
    ]
    image = fw2350.make(tmp_path, [s.name for s in streams], play_once_steps(2))
    assert image.stat().st_size > 1000


def readme_c_example() -> str:
    text = (Path(__file__).resolve().parents[1] / "README.md").read_text()
    part = text[text.index("**C, vendor SDK.**") :]
    start = part.index("```c\n") + 5
    return part[start : part.index("```", start)]


def test_readme_c_example_runs(tmp_path_factory: pytest.TempPathFactory, tmp_path: Path) -> None:
    # The README's example, verbatim, with a main() that reports its result.
    fw_readme = Firmware(tmp_path_factory.mktemp("fwreadme"))
    s = make(tmp_path, "door_chime", out_base=16, seconds=0.001)
    app = (
        '#include "pico/stdlib.h"\n'
        + readme_c_example()
        + "\nvolatile uint32_t lp_test_mailbox;\n"
        + "int main(void) {\n"
        + "    int rc = ring();\n"
        + "    lp_test_mailbox = (3u << 24) | (uint32_t)(rc & 0xFF);\n"
        + "    lp_test_mailbox = 0x7Fu << 24;\n"
        + "    for (;;) { tight_loop_contents(); }\n"
        + "}\n"
    )
    r = run(fw_readme.make(tmp_path, [], [], app=app), fw_readme.mailbox())
    assert r.ended and r.results() == [0]
    codes = s.layout.pins_to_code(r.samples["0.0"][:, 1])
    np.testing.assert_array_equal(codes, s.codes)
    assert s.layout.pins_to_code(np.array([r.final_pins]))[0] == s.layout.idle_code


def test_hold_volts_through_the_embedded_level_table(fw: Firmware, tmp_path: Path) -> None:
    # A modelled 8-bit ladder (ladder --levels-out) embedded with the stream; the code
    # for 1.000 V is checked against the nearest level computed here from the LevelSet.
    import json

    from ladderpack.ladder import ideal_ladder, perturbed
    from ladderpack.levels import LevelSet

    lad = perturbed(ideal_ladder(8), np.random.default_rng(3), tolerance=0.01)
    volts = np.array(lad.levels())
    path = tmp_path / "lad.json"
    path.write_text(LevelSet(8, volts, "model").to_json())
    s = make(tmp_path, "lv", levels=str(path))
    steps = [Step("init", 0, 0), Step("hold_volts", 0, 1000), Step("wait")]
    r = run(fw.make(tmp_path, [s.name], steps, levels=s.name), fw.mailbox())
    want = int(np.argmin(np.abs(np.array(json.loads(path.read_text())["volts"]) - 1.0)))
    assert r.results()[1] % 256 == want  # the report carries the code's low byte
    assert s.layout.pins_to_code(np.array([r.events[2][2]]))[0] == want
