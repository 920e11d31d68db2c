"""I2C DAC streams on the emulated chip: the writer program, the C player, MicroPython.

First the state-machine program of :mod:`ladderpack.outputs.i2c_dac` alone, loaded with
the SDK's PIO functions and fed by DMA from a test firmware; then whole bundles through
the bundle's C player (``ladderpack_i2c.c``, built with the vendor SDK 2.2.0, warnings as
errors) and its MicroPython module (the vendored v1.27.0 image). rp2040js runs them with
the state machines clocked by the harness's own schedule. The bus is open-drain with
pull-ups and a device that acknowledges its address (``tests/chip/run.mjs``). The test's
own decoder below reads the recorded SCL/SDA levels as a receiver does (NXP UM10204:
START is SDA falling while SCL is high, STOP SDA rising while SCL is high, a bit is SDA
at SCL's rising edge, the ninth bit of a byte the acknowledge) and compares every
update's bytes with the DAC's command format and its start with the plan in system
clocks.
"""

from __future__ import annotations

import json
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest
from chip.harness import Firmware, player_app, run, run_micropython

from ladderpack.bundle import bundle_files, write_bundle
from ladderpack.outputs.i2c_dac import I2cDacFormat, plan_writer, writer_program, writer_words
from ladderpack.stream import stream_tone

pytestmark = pytest.mark.slow

SDA, SCL = 4, 5


@pytest.fixture(scope="module")
def fw(tmp_path_factory: pytest.TempPathFactory) -> Firmware:
    return Firmware(tmp_path_factory.mktemp("fw_i2c"))


def decode(wire: np.ndarray) -> list[tuple[int, list[int], list[int]]]:
    """Transactions as (START cycle, bytes, acknowledge bits) from [cycle, scl | sda << 1]."""
    out: list[tuple[int, list[int], list[int]]] = []
    scl, sda = 1, 1
    cur: tuple[int, list[int], list[int]] | None = None
    bits: list[int] = []
    for cycle, v in wire:
        s, d = int(v & 1), int((v >> 1) & 1)
        if s and scl and d != sda:  # SDA changes while SCL is high
            if not d:  # START
                cur, bits = (int(cycle), [], []), []
            elif cur is not None:  # STOP
                out.append(cur)
                cur = None
        elif s and not scl and cur is not None:  # SCL rising: sample SDA
            bits.append(d)
            if len(bits) == 9:
                cur[1].append(int("".join(map(str, bits[:8])), 2))
                cur[2].append(bits[8])
                bits = []
        scl, sda = s, d
    return out


def app(
    fmt: I2cDacFormat, codes: list[int], rate_hz: float | Fraction, bus_hz: int = 400_000
) -> tuple[str, object]:
    plan = plan_writer(rate_hz, fmt, bus_hz=bus_hz)
    prog = writer_program()
    words = writer_words(fmt, np.array(codes))
    text = f"""\
#include <stdbool.h>
#include <stdint.h>
#include "pico/stdlib.h"
#include "hardware/dma.h"
#include "hardware/gpio.h"
#include "hardware/pio.h"

volatile uint32_t lp_test_mailbox;
static const uint16_t prog_words[] = {{{", ".join(f"0x{w:04X}u" for w in prog.words)}}};
static const uint32_t words[] = {{{", ".join(f"0x{int(w):08X}u" for w in words)}}};

int main(void) {{
    pio_program_t program = {{
        .instructions = prog_words, .length = {len(prog.words)}u, .origin = -1
    }};
    PIO pio = pio0;
    uint sm = 0u;
    uint offset;
    uint32_t mask = (1u << {SDA}u) | (1u << {SCL}u);
    pio_sm_config c = pio_get_default_sm_config();
    int ch = dma_claim_unused_channel(true);
    dma_channel_config d;
    offset = (uint)pio_add_program(pio, &program);
    sm_config_set_wrap(&c, offset + {prog.wrap_target}u, offset + {prog.wrap}u);
    sm_config_set_sideset(&c, 2u, true, true);  /* one pin, optional, on pin directions */
    sm_config_set_sideset_pins(&c, {SCL}u);
    sm_config_set_out_pins(&c, {SDA}u, 1u);
    sm_config_set_set_pins(&c, {SDA}u, 1u);
    sm_config_set_jmp_pin(&c, {SDA}u);
    sm_config_set_out_shift(&c, false, false, 32u);
    sm_config_set_fifo_join(&c, PIO_FIFO_JOIN_TX);
    sm_config_set_clkdiv_int_frac8(&c, {plan.divider}u, 0u);
    pio_sm_set_pins_with_mask(pio, sm, 0u, mask);     /* both outputs 0: open drain */
    pio_sm_set_pindirs_with_mask(pio, sm, 0u, mask);  /* released */
    gpio_pull_up({SDA}u);
    gpio_pull_up({SCL}u);
    pio_gpio_init(pio, {SDA}u);
    pio_gpio_init(pio, {SCL}u);
    pio_sm_init(pio, sm, offset, &c);
    pio_sm_put(pio, sm, {plan.pad}u);                 /* Y = the pad count */
    pio_sm_exec(pio, sm, pio_encode_pull(false, false));
    pio_sm_exec(pio, sm, pio_encode_mov(pio_y, pio_osr));
    pio_interrupt_clear(pio, 0u);
    d = dma_channel_get_default_config((uint)ch);
    channel_config_set_transfer_data_size(&d, DMA_SIZE_32);
    channel_config_set_read_increment(&d, true);
    channel_config_set_write_increment(&d, false);
    channel_config_set_dreq(&d, pio_get_dreq(pio, sm, true));
    dma_channel_configure((uint)ch, &d, &pio->txf[sm], words, {words.size}u, true);
    while (!pio_sm_is_tx_fifo_full(pio, sm) && dma_channel_is_busy((uint)ch)) {{
        tight_loop_contents();
    }}
    pio_sm_set_enabled(pio, sm, true);
    while (dma_channel_is_busy((uint)ch) || !pio_sm_is_tx_fifo_empty(pio, sm)) {{
        tight_loop_contents();
    }}
    busy_wait_at_least_cycles({plan.divider * plan.cycles_per_update * 2}u);
    lp_test_mailbox = (0x7Fu << 24) | (pio_interrupt_get(pio, 0u) ? 1u : 0u);
    for (;;) {{
        tight_loop_contents();
    }}
}}
"""
    return text, plan


@pytest.mark.parametrize("command", ["fast", "register"])
def test_every_update_on_the_bus_at_its_tick(fw: Firmware, tmp_path: Path, command: str) -> None:
    fmt = I2cDacFormat(0x60, command)
    codes = [0, 4095, 2048, 1234, 3210, 7]
    source, plan = app(fmt, codes, 6250.0)
    (tmp_path / "empty").mkdir()
    image = fw.make(tmp_path / "empty", [], [], app=source)
    r = run(image, fw.mailbox(), extra={"i2c": {"sda": SDA, "scl": SCL, "address": 0x60, "ack": 1}})
    assert r.ended
    assert r.events[-1][1] & 0xFF == 0  # no missing acknowledge reported (IRQ 0 clear)
    tx = decode(r.wire)
    assert [t[1] for t in tx] == [list(fmt.update_bytes(c)) for c in codes]
    assert all(a == [0] * fmt.bytes_per_update for _s, _b, a in tx)  # every byte acknowledged
    starts = np.array([t[0] for t in tx])
    assert np.all(np.diff(starts) == plan.divider * plan.cycles_per_update)  # one a tick


def test_a_missing_acknowledge_ends_the_transfer_and_keeps_the_tick(
    fw: Firmware, tmp_path: Path
) -> None:
    # UM10204: a master that sees no acknowledge generates a STOP (or a repeated START);
    # the writer's branches take equal cycles, so every update still starts on its tick.
    fmt = I2cDacFormat(0x61, "fast")  # the device answers at 0x60 only
    source, plan = app(fmt, [100, 200, 300, 400], 6250.0)
    (tmp_path / "empty").mkdir()
    image = fw.make(tmp_path / "empty", [], [], app=source)
    r = run(image, fw.mailbox(), extra={"i2c": {"sda": SDA, "scl": SCL, "address": 0x60, "ack": 1}})
    assert r.ended and r.events[-1][1] & 0xFF == 1  # IRQ flag (0 + SM 0) set by the writer
    tx = decode(r.wire)
    assert [t[1] for t in tx] == [[fmt.address_byte]] * 4  # a STOP right after the address
    assert all(a == [1] for _s, _b, a in tx)  # nobody answered
    starts = np.array([t[0] for t in tx])
    assert np.all(np.diff(starts) == plan.divider * plan.cycles_per_update)  # exact period


def bus_times(wire: np.ndarray) -> dict[str, int]:
    """The shortest of each UM10204 Table 10 time on the recorded lines, system clocks.

    `wire` rows are [cycle, scl | sda << 1] at each change. SCL low and high count only
    inside transfers (between a START and its STOP); data set-up is an SDA change while
    SCL is low to SCL's next rising edge.
    """
    out = {k: 1 << 62 for k in ("t_low", "t_high", "t_hd_sta", "t_su_sto", "t_su_dat", "t_buf")}
    scl, sda, busy = 1, 1, False
    scl_since, sda_change, start_at, stop_at = 0, None, None, None
    for cycle, v in wire:
        cyc, s, d = int(cycle), int(v & 1), int((v >> 1) & 1)
        if s != scl:
            if busy:
                key = "t_low" if s else "t_high"  # the level that just ended
                out[key] = min(out[key], cyc - scl_since)
            if not s and start_at is not None:  # first SCL fall after a START
                out["t_hd_sta"] = min(out["t_hd_sta"], cyc - start_at)
                start_at = None
            if s and sda_change is not None:
                out["t_su_dat"] = min(out["t_su_dat"], cyc - sda_change)
                sda_change = None
            scl_since = cyc
        if d != sda:
            if s and scl and not d:  # START
                if stop_at is not None:
                    out["t_buf"] = min(out["t_buf"], cyc - stop_at)
                busy, start_at = True, cyc
            elif s and scl and d:  # STOP
                out["t_su_sto"] = min(out["t_su_sto"], cyc - scl_since)
                busy, stop_at = False, cyc
            elif not s:
                sda_change = cyc
        scl, sda = s, d
    return out


@pytest.mark.parametrize("bus_hz", [100_000, 400_000, 1_000_000])
def test_bus_times_meet_um10204_at_the_highest_rate(
    fw: Firmware, tmp_path: Path, bus_hz: int
) -> None:
    # NXP UM10204 Table 10 minimums (REFERENCES.md section 14, from memory), in ns, for
    # Standard-mode, Fast-mode and Fast-mode Plus; the writer at the highest update rate
    # its plan allows (no pad: updates back to back), decoded from the lines.
    table = {
        100_000: {"t_low": 4700, "t_high": 4000, "t_hd_sta": 4000, "t_su_sto": 4000,
                  "t_su_dat": 250, "t_buf": 4700},
        400_000: {"t_low": 1300, "t_high": 600, "t_hd_sta": 600, "t_su_sto": 600,
                  "t_su_dat": 100, "t_buf": 1300},
        1_000_000: {"t_low": 500, "t_high": 260, "t_hd_sta": 260, "t_su_sto": 260,
                    "t_su_dat": 50, "t_buf": 500},
    }[bus_hz]  # fmt: skip
    fmt = I2cDacFormat(0x60, "register")
    top = plan_writer(1000.0, fmt, bus_hz=bus_hz).max_rate_hz
    source, plan = app(fmt, [0, 4095, 2730, 1365], top, bus_hz=bus_hz)
    assert plan.pad == 0 and plan.achieved_rate_hz == top
    (tmp_path / "empty").mkdir()
    image = fw.make(tmp_path / "empty", [], [], app=source)
    r = run(image, fw.mailbox(), extra={"i2c": {"sda": SDA, "scl": SCL, "address": 0x60, "ack": 1}})
    tx = decode(r.wire)
    assert [t[1] for t in tx] == [list(fmt.update_bytes(c)) for c in (0, 4095, 2730, 1365)]
    ns_per_clock = 10**9 / 125_000_000
    got = {k: v * ns_per_clock for k, v in bus_times(r.wire).items()}
    short = {k: (got[k], table[k]) for k in table if got[k] < table[k]}
    assert not short, short
    # SCL's fastest full period within a byte stays at or below the bus speed
    assert (got["t_low"] + got["t_high"]) * 1e-9 >= 1 / bus_hz


# --- whole bundles through the players ---------------------------------------------------

BUS = {"sda": SDA, "scl": SCL, "address": 0x60, "ack": 1}


def updates_of(words: np.ndarray) -> list[list[int]]:
    """The bus bytes of each update, read from FIFO words as the sidecar's ``layout.word``
    describes them (the byte inverted in bits 31:24, bit 23 on an update's last)."""
    out: list[list[int]] = []
    cur: list[int] = []
    for w in words.astype(np.int64):
        cur.append(int(~w >> 24) & 0xFF)
        if (w >> 23) & 1:
            out.append(cur)
            cur = []
    assert not cur, "the words end mid-update"
    return out


def code_of(update: list[int]) -> int:
    """The code of one update: MCP4725 fast write (address, 0 0 PD1 PD0 D11..D8, D7..D0)
    or write DAC register (address, 0 1 0 x x PD1 PD0 x, D11..D4, D3..D0 0 0 0 0)."""
    if len(update) == 3:
        return ((update[1] & 0x0F) << 8) | update[2]
    return (update[2] << 4) | (update[3] >> 4)


class Bundle:
    """What a bundle says should come out: its updates and the clocks between them."""

    def __init__(self, folder: Path, name: str) -> None:
        side = json.loads((folder / f"{name}.json").read_text())
        self.name = name
        self.words = np.frombuffer((folder / f"{name}.bin").read_bytes(), "<u4")
        self.updates = updates_of(self.words)
        self.codes = [code_of(u) for u in self.updates]
        clk = side["clock"]
        self.period = clk["div_int"] * clk["cycles_per_sample"]
        self.idle = side["stream"]["idle_code"]
        self.loop = bool(side["options"].get("loop"))
        src = (folder / f"{name}.c").read_text()
        self.intro = self._array(src, f"{name}_intro_words")
        self.outro = self._array(src, f"{name}_outro_words")

    @staticmethod
    def _array(src: str, symbol: str) -> list[list[int]]:
        if symbol not in src:
            return []
        body = src.split(f"{symbol}[", 1)[1].split("{", 1)[1].split("}", 1)[0]
        words = [int(t.strip().rstrip("u"), 16) for t in body.split(",") if t.strip()]
        return updates_of(np.array(words, dtype=np.uint32))


def make(folder: Path, name: str, **opts: object) -> Bundle:
    base: dict[str, object] = {
        "output": "i2c-dac",
        "sda_pin": SDA,
        "scl_pin": SCL,
        "rate_hz": 8000.0,
        "freq_hz": 250.0,
        "seconds": 0.02,
        "ramp_ms": 2.0,
    }
    kind = str(opts.pop("kind", "sine"))
    write_bundle(stream_tone(kind, name=name, **{**base, **opts}), folder)
    if opts.get("compress", "none") == "none":
        return Bundle(folder, name)
    # a compressed stream (--compress lossless): what the same stream made uncompressed says
    plain = folder / "plain"
    plain.mkdir(exist_ok=True)
    write_bundle(stream_tone(kind, name=name, **{**base, **opts, "compress": "none"}), plain)
    return Bundle(plain, name)


#: The C and MicroPython scenarios run on the stream as words and compressed (issue 31).
COMPRESS = pytest.mark.parametrize("compress", ["none", "lossless"])


def c_app(name: str, ops: list[tuple[str, int]], tail: str = "") -> str:
    return player_app(
        name,
        ops,
        header="ladderpack_i2c.h",
        fn="lp_i2c",
        player_type="lp_i2c_player_t",
        stream_type="lp_i2c_stream_t",
        init_macro="I2C_INIT",
        tail=tail,
    )


def bus_run(fw: Firmware, folder: Path, name: str, ops: list[tuple[str, int]], **kw: object):
    tail = str(kw.pop("tail", ""))
    image = fw.make(folder, [], [], app=c_app(name, ops, tail))
    return run(image, fw.mailbox(), extra={"i2c": {**BUS, **kw.pop("bus", {})}}, **kw)


def assert_on_ticks(tx: list[tuple[int, list[int], list[int]]], period: int) -> None:
    starts = np.array([t[0] for t in tx])
    assert np.all(np.diff(starts) == period), np.unique(np.diff(starts))
    assert all(a == [0] * len(b) for _s, b, a in tx)  # every byte acknowledged


@pytest.mark.parametrize(
    ("command", "compress"), [("fast", "none"), ("register", "none"), ("fast", "lossless"),
                              ("register", "lossless")]
)  # fmt: skip
def test_player_writes_every_update_on_its_tick(
    fw: Firmware, tmp_path: Path, command: str, compress: str
) -> None:
    b = make(tmp_path, "level", dac_command=command, compress=compress)
    nack = "    report(11u, 0u, lp_i2c_nack_seen(&player) ? 1 : 0);\n"
    r = bus_run(fw, tmp_path, "level", [("init", 0), ("start", 0), ("wait", 0)], tail=nack)
    assert r.ended and r.results()[:2] == [0, 0]
    assert [v & 0xFF for _c, v, _p in r.events if v >> 24 == 11] == [0]  # no missing ack
    tx = decode(r.wire)
    assert [t[1] for t in tx] == b.updates  # every update, byte for byte
    assert_on_ticks(tx, b.period)  # each one sample period after the one before
    assert b.codes[0] == b.idle and b.codes[-1] == b.idle  # from and back to idle


@COMPRESS
def test_player_stop_ramps_down_from_the_code_it_was_on(
    fw: Firmware, tmp_path: Path, compress: str
) -> None:
    b = make(tmp_path, "cut", seconds=0.05, ramp_ms=0.0, kind="dc", dc_value=0.9, compress=compress)
    period = b.period
    r = bus_run(
        fw,
        tmp_path,
        "cut",
        [("init", 0), ("start", 0), ("delay", 100 * period), ("stop", 0)],
    )
    assert r.ended and r.results()[:2] == [0, 0]
    tx = decode(r.wire)
    assert_on_ticks(tx, period)  # no gap where the stop came in
    codes = [code_of(t[1]) for t in tx]
    n = 0
    while n < len(codes) and codes[n] == b.codes[n]:
        n += 1
    assert 90 < n < len(b.codes) - 64, n
    ramp = codes[n:]
    assert len(ramp) == 64 and ramp[-1] == b.idle  # LP_I2C_RAMP_UPDATES, down to idle
    assert all(x >= y for x, y in zip([codes[n - 1], *ramp], ramp, strict=False))


@COMPRESS
def test_player_loop_and_hold_code(fw: Firmware, tmp_path: Path, compress: str) -> None:
    b = make(tmp_path, "wobble", loop=True, seconds=0.004, compress=compress)
    period = len(b.updates) * b.period
    tail = (
        "    rc = lp_i2c_hold_code(&player, 1234u); report(12u, 0u, rc);\n"
        # the old name still compiles (a macro of the new one, until 0.3)
        "    rc = lp_i2c_write_code(&player, 5000u); report(12u, 1u, rc);\n"
    )
    r = bus_run(
        fw,
        tmp_path,
        "wobble",
        [
            ("init", 0),
            ("start", 1),
            ("delay", int(2.5 * period + 2 * b.period * len(b.intro))),
            ("request_stop", 0),
            ("wait", 0),
        ],
        tail=tail,
    )
    assert r.ended and r.results()[:2] == [0, 0]
    assert [(v >> 8 & 0xFF, v & 0xFF) for _c, v, _p in r.events if v >> 24 == 12] == [
        (0, 0),
        (1, 0xF9),  # LP_I2C_ERR_CODE (-7)
    ]
    tx = decode(r.wire)
    got = [t[1] for t in tx]
    assert got[-1] == list(I2cDacFormat(0x60).update_bytes(1234))  # the DC level on demand
    got = got[:-1]
    assert_on_ticks(tx[:-1], b.period)
    k = len(b.intro)
    assert got[:k] == b.intro
    body = got[k : len(got) - len(b.outro)]
    assert got[len(got) - len(b.outro) :] == b.outro
    passes, rest = divmod(len(body), len(b.updates))
    assert rest == 0 and passes >= 2 and body == b.updates * passes  # whole passes


def test_player_reports_a_missing_acknowledge(fw: Firmware, tmp_path: Path) -> None:
    make(tmp_path, "lost", seconds=0.002, dac_address=0x62)
    nack = "    report(11u, 0u, lp_i2c_nack_seen(&player) ? 1 : 0);\n"
    r = bus_run(fw, tmp_path, "lost", [("init", 0), ("start", 0), ("wait", 0)], tail=nack)
    assert r.ended and [v & 0xFF for _c, v, _p in r.events if v >> 24 == 11] == [1]
    assert all(a == [1] * len(b) for _s, b, a in decode(r.wire))


def test_player_builds_for_rp2350(fw2350: Firmware, tmp_path: Path) -> None:
    make(tmp_path, "level", target="rp2350b", sda_pin=34, scl_pin=35)
    ops = [("init", 0), ("start", 0), ("wait", 0)]
    image = fw2350.make(tmp_path, [], [], app=c_app("level", ops))
    assert image.stat().st_size > 0


def board(
    folder: Path, kind: str, name: str, *, embed: bool, **opts: object
) -> tuple[dict[str, bytes], Bundle]:
    """A MicroPython board's files for a 4 kHz stream (the module, and the .bin unless
    embedded), and what the bundle says should come out."""
    asset = stream_tone(
        kind,
        name=name,
        output="i2c-dac",
        sda_pin=SDA,
        scl_pin=SCL,
        rate_hz=4000.0,
        **opts,
    )
    files = bundle_files(asset, embed_words_max=100_000 if embed else 0)
    for fname, data in files.items():
        (folder / fname).write_bytes(data)
    keep = [f"{name}.py"] + ([] if embed and asset.compressed is None else [f"{name}.bin"])
    if asset.compressed is None:
        return {k: files[k] for k in keep}, Bundle(folder, name)
    plain = folder / "plain"  # what the same stream made uncompressed says
    plain.mkdir()
    for fname, data in bundle_files(stream_tone(
        kind, name=name, output="i2c-dac", sda_pin=SDA, scl_pin=SCL, rate_hz=4000.0,
        **{**opts, "compress": "none"},
    )).items():  # fmt: skip
        (plain / fname).write_bytes(data)
    return {k: files[k] for k in keep}, Bundle(plain, name)


@COMPRESS
def test_micropython_writes_every_update(tmp_path: Path, compress: str) -> None:
    files, b = board(
        tmp_path, "sine", "hum", embed=False, freq_hz=250.0, seconds=0.02, ramp_ms=2.0,
        chunk_words=64, compress=compress,
    )  # fmt: skip
    steps = [
        {"code": "import hum\np = hum.Player()\np.play()\nprint('nack', p.nack_seen())\n"},
        {"code": "p.hold_code(3000)\nprint('nack', p.nack_seen())\n"},
    ]
    r = run_micropython(files, steps, tmp_path, i2c=BUS)
    assert r.ended and "Traceback" not in r.output(), r.output()[-2000:]
    assert r.output().count("nack False") == 2, r.output()[-500:]
    tx = decode(r.wire)
    got = [t[1] for t in tx]
    assert got[:-1] == b.updates and code_of(got[-1]) == 3000
    assert_on_ticks(tx[:-1], b.period)


@COMPRESS
def test_micropython_ctrl_c_ramps_down(tmp_path: Path, compress: str) -> None:
    files, b = board(tmp_path, "dc", "hold", embed=True, dc_value=0.8, seconds=0.1, ramp_ms=0.0,
                     compress=compress, chunk_words=128)  # fmt: skip
    steps = [
        {"code": "import hold\np = hold.Player()\n"},
        {"code": "p.play()\n", "interrupt_after": 5_000_000},  # 40 ms in
    ]
    r = run_micropython(files, steps, tmp_path, i2c=BUS)
    assert r.ended and "KeyboardInterrupt" in r.output(), r.output()[-2000:]
    tx = decode(r.wire)
    codes = [code_of(t[1]) for t in tx]
    n = 0
    while n < len(codes) and codes[n] == b.codes[n]:
        n += 1
    assert 0 < n < len(b.codes) - 64, n
    assert len(codes) - n == 64 and codes[-1] == b.idle
    assert all(x >= y for x, y in zip(codes[n - 1 :], codes[n:], strict=False))
    # the stream on its ticks up to the stop; the ramp, made once the bus has gone idle
    # (the DAC holds its code meanwhile), on its own ticks
    assert_on_ticks(tx[:n], b.period)
    assert_on_ticks(tx[n:], b.period)
    assert tx[n][0] - tx[n - 1][0] >= b.period


@COMPRESS
def test_micropython_loop_runs_until_ctrl_c_and_ends_on_its_outro(
    tmp_path: Path, compress: str
) -> None:
    files, b = board(
        tmp_path, "sine", "wave", embed=True, freq_hz=500.0, seconds=0.004, ramp_ms=1.0,
        loop=True, compress=compress,
    )  # fmt: skip
    one_pass = len(b.updates) * b.period
    steps = [
        {"code": "import wave\np = wave.Player()\n"},
        {"code": "p.play(loop=True)\n", "interrupt_after": int(8.5 * one_pass)},
    ]
    r = run_micropython(files, steps, tmp_path, i2c=BUS)
    assert r.ended and "KeyboardInterrupt" in r.output(), r.output()[-2000:]
    tx = decode(r.wire)
    assert_on_ticks(tx, b.period)  # intro, passes and outro back to back
    got = [t[1] for t in tx]
    k = len(b.intro)
    assert k and got[:k] == b.intro  # the ramp up from idle
    assert got[len(got) - len(b.outro) :] == b.outro  # and down again, after a whole pass
    body = got[k : len(got) - len(b.outro)]
    passes, rest = divmod(len(body), len(b.updates))
    assert rest == 0 and passes >= 2 and body == b.updates * passes


def test_a_system_clock_from_the_pll_makes_8k_updates_exact(fw: Firmware, tmp_path: Path) -> None:
    # At 125 MHz 8 kHz fast writes are +64 ppm off (divider 84, 186 cycles); 124.8 MHz =
    # 12 MHz x 104 / 5 / 2 (clock --find-sys-clock --output i2c-dac) makes them exact:
    # 15600 system clocks an update.
    from ladderpack.clock import pll_settings

    assert 124_800_000 in pll_settings(124_000_000, 125_000_000)
    b = make(tmp_path, "exact8k", sys_clock_hz=124_800_000, seconds=0.005)
    assert b.period == 15_600
    header = (tmp_path / "exact8k.h").read_text()
    assert "#define EXACT8K_SET_SYS_CLOCK() set_sys_clock_pll(" in header
    source = c_app("exact8k", [("init", 0), ("start", 0), ("wait", 0)])
    source = source.replace(
        '#include "pico/stdlib.h"', '#include "pico/stdlib.h"\n#include "hardware/clocks.h"'
    )
    source = source.replace("    int rc;\n", "    int rc;\n    EXACT8K_SET_SYS_CLOCK();\n", 1)
    image = fw.make(tmp_path, [], [], app=source)
    r = run(image, fw.mailbox(), extra={"i2c": BUS, "sys_clock_hz": 124_800_000})
    # the player accepts the clock (clock_get_hz(clk_sys) is the planned one)
    assert r.ended and all(rc == 0 for rc in r.results()), r.results()
    tx = decode(r.wire)
    assert [t[1] for t in tx] == b.updates
    assert_on_ticks(tx, 15_600)
