"""The I2C DAC writer program on the emulated chip, driven through the vendor SDK.

The state-machine program of :mod:`ladderpack.outputs.i2c_dac` is loaded with the SDK's
PIO functions and fed its FIFO words by DMA from a test firmware (the player proper is
not built yet); rp2040js runs it with the state machines clocked by the harness's own
schedule. The bus is open-drain with pull-ups and a device that acknowledges its address
(``tests/chip/run.mjs``). The test's own decoder below reads the recorded SCL/SDA levels
as a receiver does (NXP UM10204: START is SDA falling while SCL is high, STOP SDA rising
while SCL is high, a bit is SDA at SCL's rising edge, the ninth bit of a byte the
acknowledge) and compares every update's bytes with the DAC's command format and its
start with the plan in system clocks.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from ladderpack.outputs.i2c_dac import I2cDacFormat, plan_writer, writer_program, writer_words
from tests.chip.harness import Firmware, run

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


def app(fmt: I2cDacFormat, codes: list[int], rate_hz: float) -> tuple[str, object]:
    plan = plan_writer(rate_hz, fmt, bus_hz=400_000)
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


def test_a_missing_acknowledge_is_reported(fw: Firmware, tmp_path: Path) -> None:
    fmt = I2cDacFormat(0x61, "fast")  # the device answers at 0x60 only
    source, _plan = app(fmt, [100, 200], 6250.0)
    (tmp_path / "empty").mkdir()
    image = fw.make(tmp_path / "empty", [], [], app=source)
    r = run(image, fw.mailbox(), extra={"i2c": {"sda": SDA, "scl": SCL, "address": 0x60, "ack": 1}})
    assert r.ended and r.events[-1][1] & 0xFF == 1  # IRQ flag 0 set by the writer
    tx = decode(r.wire)
    assert [t[1] for t in tx] == [list(fmt.update_bytes(c)) for c in (100, 200)]
    assert all(a == [1] * fmt.bytes_per_update for _s, _b, a in tx)  # nobody answered
