"""The files of an I2C DAC stream: C header and source, ``.pio`` text, MicroPython module.

The words and the program are laid out as for the other outputs (:mod:`ladderpack.emit.c`);
the defines and the initialiser are the I2C player's (:mod:`ladderpack.emit.player_i2c`),
the module drives the same program through ``rp2.StateMachine`` and ``rp2.DMA``.
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

import numpy as np

from ladderpack._version import __version__
from ladderpack.asset import StreamAsset
from ladderpack.emit.c import (
    _array_lines,
    _banner,
    _count,
    chunked,
    header_frame,
    init_macro,
    pll_lines,
)
from ladderpack.emit.micropython import (
    _literal,
    feed_methods,
    mp_program_body,
    pio_registers_text,
    set_clock_text,
)
from ladderpack.emit.names import comment_safe
from ladderpack.outputs.i2c_dac import I2cDacLayout
from ladderpack.targets import target_of

__all__ = [
    "render_header",
    "render_micropython",
    "render_pio",
    "render_source",
    "render_source_chunks",
]


def _layout(asset: StreamAsset) -> I2cDacLayout:
    lay = asset.packed.layout
    assert isinstance(lay, I2cDacLayout)
    return lay


def _i2c(asset: StreamAsset) -> dict[str, Any]:
    return dict(asset.stats["i2c_dac"])


def _defines(asset: StreamAsset) -> list[tuple[str, str, str]]:
    p, sm, lay, i2c = asset.clock, asset.state_machine, _layout(asset), _i2c(asset)
    rate = p.achieved_rate_hz
    fmt = lay.fmt
    return [
        ("BITS", "12u", "DAC code width"),
        ("UPDATE_COUNT", f"{asset.sample_count}u", "DAC updates (samples) in the stream"),
        ("WORD_COUNT", f"{asset.word_count}u", "32-bit FIFO words: one bus byte each"),
        ("WORDS_PER_UPDATE", f"{lay.words_per_update}u", "bytes of an update, address included"),
        ("ADDRESS", f"0x{fmt.address:02X}u", "the DAC's 7-bit I2C address"),
        (
            "COMMAND",
            "0u" if fmt.command == "fast" else "1u",
            "0: fast write; 1: write DAC register",
        ),
        ("POWER_DOWN", f"{fmt.power_down}u", "PD1 PD0 bits (0: normal operation)"),
        ("IDLE_CODE", f"{asset.idle_code}u", "code held when nothing plays"),
        ("LOOP", "1" if asset.loop else "0", "1: a loop, with an intro and an outro"),
        ("INTRO_WORD_COUNT", f"{_count(asset.intro)}u", ""),
        ("OUTRO_WORD_COUNT", f"{_count(asset.outro)}u", ""),
        ("REQUESTED_RATE_HZ", f"{float(p.requested_rate_hz)!r}", "update rate asked for"),
        ("RATE_HZ", f"{float(rate)!r}", "achieved update (sample) rate"),
        ("RATE_NUM", f"{rate.numerator}ull", "achieved rate = RATE_NUM / RATE_DEN Hz"),
        ("RATE_DEN", f"{rate.denominator}ull", ""),
        ("BUS_HZ", f"{i2c['bus_hz']!r}", "SCL frequency: four state-machine cycles a bit"),
        ("SYS_CLOCK_HZ", f"{p.sys_clock_hz}u", "system clock the plan assumes"),
        ("CLKDIV_INT", f"{p.div_int}u", "whole clock divider: no jitter"),
        ("CYCLES_PER_UPDATE", f"{p.cycles_per_sample}u", "state-machine cycles per update"),
        ("PAD", f"{i2c['pad']}u", "Y: cycles counted after the STOP, minus one"),
        ("SDA_PIN", f"{sm.out_base}u", "SDA GPIO (open drain)"),
        ("SCL_PIN", f"{sm.sideset_base}u", "SCL GPIO (open drain)"),
        ("GPIO_BASE", f"{sm.gpio_base}u", "PIO GPIO base (16 for GPIO 32 and above)"),
        ("PROGRAM_LENGTH", f"{len(asset.pio_program.instructions)}u", "instructions"),
        ("PROGRAM_WRAP_TARGET", f"{asset.pio_program.wrap_target}u", "relative to load offset"),
        ("PROGRAM_WRAP", f"{asset.pio_program.wrap}u", "relative to load offset"),
        ("REG_CLKDIV", f"0x{sm.clkdiv:08X}u", "SMx_CLKDIV"),
        ("REG_EXECCTRL", f"0x{sm.execctrl:08X}u", "SMx_EXECCTRL, program at offset 0"),
        ("REG_SHIFTCTRL", f"0x{sm.shiftctrl:08X}u", "SMx_SHIFTCTRL"),
        ("REG_PINCTRL", f"0x{sm.pinctrl:08X}u", "SMx_PINCTRL"),
    ]


def _init_macro(asset: StreamAsset) -> list[str]:
    n, P = asset.name, asset.name.upper()
    intro = f"{n}_intro_words" if _count(asset.intro) else "NULL"
    outro = f"{n}_outro_words" if _count(asset.outro) else "NULL"
    fields = [
        f"{n}_words",
        f"{P}_WORD_COUNT",
        intro,
        f"{P}_INTRO_WORD_COUNT",
        outro,
        f"{P}_OUTRO_WORD_COUNT",
        f"{n}_program",
        f"{P}_PROGRAM_LENGTH",
        f"{P}_PROGRAM_WRAP_TARGET",
        f"{P}_PROGRAM_WRAP",
        f"{P}_SDA_PIN",
        f"{P}_SCL_PIN",
        f"({P}_CLKDIV_INT & 0xFFFFu)",
        f"{P}_PAD",
        f"{P}_ADDRESS",
        f"{P}_COMMAND",
        f"{P}_POWER_DOWN",
        f"{P}_WORDS_PER_UPDATE",
        f"{P}_IDLE_CODE",
        f"{P}_LOOP",
        f"{P}_SYS_CLOCK_HZ",
        f"{P}_GPIO_BASE",
    ]
    return init_macro("lp_i2c_stream_t", "ladderpack_i2c.h", f"{P}_I2C_INIT", fields)


def render_header(asset: StreamAsset) -> str:
    """Return the C header of an I2C DAC stream."""
    prefix = asset.name.upper()
    lines = header_frame(asset, _defines(asset))
    lines += pll_lines(asset)
    lines += [
        "",
        f"extern const uint32_t {asset.name}_words[{prefix}_WORD_COUNT];",
        f"extern const uint16_t {asset.name}_program[{prefix}_PROGRAM_LENGTH];",
    ]
    for part, key in ((asset.intro, "intro"), (asset.outro, "outro")):
        if _count(part):
            count = f"{prefix}_{key.upper()}_WORD_COUNT"
            lines.append(f"extern const uint32_t {asset.name}_{key}_words[{count}];")
    lines += ["", *_init_macro(asset), "", f"#endif /* LADDERPACK_{prefix}_H */", ""]
    return "\n".join(lines)


def source_lines(asset: StreamAsset) -> Iterator[str]:
    """The C source of an I2C DAC stream, line by line."""
    prefix = asset.name.upper()
    yield from _banner(asset).split("\n")
    yield f'#include "{asset.name}.h"'
    yield ""
    yield "/* Updates in bus order, one byte a word: the byte inverted in bits 31:24, bit 23 on"
    yield " * an update's last byte; const, so they stay in flash, and word-aligned for DMA. */"
    yield f"const uint32_t {asset.name}_words[{prefix}_WORD_COUNT] = {{"
    yield from _array_lines(asset.packed.words, 8)
    yield "};"
    for part, key in ((asset.intro, "intro"), (asset.outro, "outro")):
        if part is not None and _count(part):
            yield ""
            yield f"const uint32_t {asset.name}_{key}_words[{prefix}_{key.upper()}_WORD_COUNT] = {{"
            yield from _array_lines(part.words, 8)
            yield "};"
    yield ""
    yield "/* State-machine program (side-set: SCL pin direction, optional):"
    for ins in asset.pio_program.instructions:
        yield f" *   {ins.text()}"
    yield " */"
    yield f"const uint16_t {asset.name}_program[{prefix}_PROGRAM_LENGTH] = {{"
    yield from _array_lines(np.array(asset.pio_program.words), 4)
    yield "};"


def render_source_chunks(asset: StreamAsset, chunk_chars: int = 1 << 20) -> Iterator[bytes]:
    """The C source as byte chunks of about `chunk_chars`."""
    return chunked(source_lines(asset), chunk_chars)


def render_source(asset: StreamAsset) -> str:
    """Return the C source of an I2C DAC stream."""
    return b"".join(render_source_chunks(asset)).decode()


def render_pio(asset: StreamAsset) -> str:
    """Return the ``.pio`` text: the program plus its configuration as comments."""
    p, sm, lay, i2c = asset.clock, asset.state_machine, _layout(asset), _i2c(asset)
    notes = [
        f"; Generated by ladderpack {__version__} from "
        f"{comment_safe(asset.source.get('file', 'generated signal'))}. Do not edit.",
        f"; I2C DAC writer: SDA on GPIO {sm.out_base} (out, set and jmp pin), SCL on GPIO "
        f"{sm.sideset_base} (side-set on pin directions: .side_set 1 opt pindirs)",
        "; open drain: both pins' outputs stay 0 and a line is driven low by making its pin "
        "an output",
        f"; one FIFO word a byte (inverted in bits 31:24, bit 23 on an update's last), "
        f"{lay.words_per_update} a DAC update; out shift left, no autopull, TX FIFO joined",
        f"; before it runs: Y = {i2c['pad']} (pull, then mov y, osr); a missing acknowledge "
        "sets IRQ flag (0 + state machine) mod 4",
        f"; clock divider {p.div_int} at {p.sys_clock_hz} Hz: SCL {i2c['bus_hz']:g} Hz, "
        f"{p.cycles_per_sample} cycles an update -> {float(p.achieved_rate_hz):.6f} Hz",
    ]
    return "\n".join(notes) + "\n\n" + asset.pio_program.source()


# -- MicroPython ------------------------------------------------------------------------

_MP_TEMPLATE = """\
# Generated by ladderpack {version} from {source}.
# Do not edit: regenerate it instead.
#
# Wiring: SDA on GPIO {sda}, SCL on GPIO {scl}, the DAC's ground to the board's. The lines
# are open-drain and need pull-up resistors to 3.3 V (the pins' weak internal pull-ups are
# turned on, far too weak for 400 kHz: fit 2.2 to 4.7 kohm). Never pull them up to 5 V.
# The DAC's output drives only a light load: buffer it.
#
# Use:  import {name}; {name}.play()            (blocks until the stream ends)
#       (Ctrl-C or stop() ramps a stream down to IDLE_CODE; the ramp starts a few
#       milliseconds later, the DAC holding its code meanwhile)
#       p = {name}.Player(); p.write_code(2048) (a DC level: the DAC holds it)
#       p.play(loop=True)                       (a loop runs until p.stop() or Ctrl-C)
import array

import rp2
from machine import Pin, freq, mem32

try:
    from typing import TYPE_CHECKING
except ImportError:
    TYPE_CHECKING = False  # type: ignore[misc]  # MicroPython has no typing module
if TYPE_CHECKING:
    from rp2.asm_pio import *  # noqa: F403  (names the assembler provides)

NAME = {name!r}
BITS = 12
UPDATE_COUNT = {updates}
WORD_COUNT = {words}
WORDS_PER_UPDATE = {per}  # one bus byte a word: inverted in bits 31:24, bit 23 on the last
ADDRESS = 0x{address:02X}
COMMAND = {command!r}  # 'fast' (2 data bytes) or 'register' (write DAC register, 3)
POWER_DOWN = {power_down}
IDLE_CODE = {idle}
RATE_HZ = {rate!r}
BUS_HZ = {bus!r}
SYS_CLOCK_HZ = {sys_clock}
CLKDIV_REG = 0x{clkdiv:08X}
CYCLES_PER_UPDATE = {cycles}
PAD = {pad}  # Y: cycles counted after the STOP, minus one
SDA_PIN = {sda}
SCL_PIN = {scl}
GPIO_BASE = {gpio_base}
LOOP = {loop}
BIN_FILE = {bin_file!r}
CHUNK_WORDS = {chunk_words}
{words_literal}
INTRO = {intro}
OUTRO = {outro}
RAMP_UPDATES = 64  # a stream stopped early ramps to IDLE_CODE over this many updates

{registers}


@rp2.asm_pio(
    out_init=rp2.PIO.IN_LOW,
    set_init=rp2.PIO.IN_LOW,
    sideset_init=rp2.PIO.IN_LOW,
    out_shiftdir=rp2.PIO.SHIFT_LEFT,
    autopull=False,
    pull_thresh=32,
    fifo_join=rp2.PIO.JOIN_TX,
)
def i2c_program() -> None:
{body}


def _update(code: int) -> "list[int]":
    \"\"\"The FIFO words of one update of `code`.\"\"\"
    if COMMAND == "fast":
        data = [(POWER_DOWN << 4) | (code >> 8), code & 0xFF]
    else:
        data = [0x40 | (POWER_DOWN << 1), code >> 4, (code & 0xF) << 4]
    out = [((~b & 0xFF) << 24) for b in [ADDRESS << 1] + data]
    out[-1] |= 1 << 23
    return out


def _code_of(w: "list[int]") -> int:
    b = [int(~x >> 24) & 0xFF for x in w]
    if COMMAND == "fast":
        return ((b[1] & 0x0F) << 8) | b[2]
    return (b[2] << 4) | (b[3] >> 4)


class Player:
    \"\"\"Writes the stream's updates on state machine sm_id, fed by DMA from two buffers.

    A stream ends on its own ramp to the idle code; stop() or Ctrl-C on a stream ramps
    down at once from the code last sent; stop() on a loop finishes the current pass and
    its outro.
    \"\"\"

    def __init__(self, sm_id: int = 0, path: str = BIN_FILE, chunk_words: int = CHUNK_WORDS):
        if freq() != SYS_CLOCK_HZ:
            raise ValueError(
                "system clock is %d Hz, the stream was planned for %d Hz: remake it with "
                "--sys-clock-hz %d (or call machine.freq(%d) first)"
                % (freq(), SYS_CLOCK_HZ, freq(), SYS_CLOCK_HZ)
            )
        self.path = path
        if GPIO_BASE:
            rp2.PIO(sm_id // 4).gpio_base(Pin(GPIO_BASE))  # type: ignore[attr-defined]
        Pin(SDA_PIN, Pin.IN, Pin.PULL_UP)
        Pin(SCL_PIN, Pin.IN, Pin.PULL_UP)
        self.sm = rp2.StateMachine(sm_id, i2c_program, freq=SYS_CLOCK_HZ // 256,
                                   out_base=Pin(SDA_PIN), set_base=Pin(SDA_PIN),
                                   sideset_base=Pin(SCL_PIN), jmp_pin=Pin(SDA_PIN))
        self.pio = _PIO_BASE[sm_id // 4]
        self.idx = sm_id % 4
        self.reg = self.pio + _SM_STRIDE * self.idx  # add an SM0 offset
        mem32[self.reg + _SM0_CLKDIV] = CLKDIV_REG  # the exact whole divider
        # EXECCTRL SIDE_PINDIR: side-set drives SCL's direction
        mem32[self.reg + _SM0_EXECCTRL] |= 1 << _SIDE_PINDIR_LSB
        self.origin = mem32[self.reg + _SM0_ADDR]  # the program's load address
        self.txf = self.pio + _TXF0 + _TXF_STRIDE * self.idx
        self.dma = rp2.DMA()
        self.ctrl = self.dma.pack_ctrl(size=2, inc_read=True, inc_write=False,
                                       treq_sel=_DREQ_PIO_TX0[sm_id // 4] + self.idx)
        self.bufs = [array.array("I", bytes(4 * chunk_words)) for _ in range(2)]
        self.running = False
        self.sent, self.cur_n = 0, 0
        self._start()
        self._go()  # waits at its first pull, the bus idle

    def _send(self, buf: "array.array[int]", count: int) -> None:
        while self.dma.active():
            pass
        if self.cur_n:
            self.sent += self.cur_n
        self.cur, self.cur_n = buf, count
        self.dma.config(read=buf, write=self.txf, count=count, ctrl=self.ctrl, trigger=True)

    def _drained(self) -> bool:
        if self.dma.active() or self.sm.tx_fifo():
            return False
        # the pull at the program's start stalls once the last update's period is over
        return bool(mem32[self.pio + _FDEBUG] & (1 << (_TXSTALL_LSB + self.idx)))

    def _start(self) -> None:
        self.sm.active(0)
        self.sm.restart()
        mem32[self.reg + _SM0_INSTR] = self.origin  # jmp to the program's start
        self.sm.put(PAD)
        self.sm.exec("pull()")
        self.sm.exec("mov(y, osr)")

    def _go(self) -> None:
        mem32[self.pio + _FDEBUG] = 1 << (_TXSTALL_LSB + self.idx)  # clear TXSTALL
        mem32[self.pio + _IRQ] = 1 << self.idx  # clear the acknowledge flag
        self.sm.active(1)

    def nack_seen(self) -> bool:
        \"\"\"True when a byte went unacknowledged since the last play() or write_code().\"\"\"
        return bool(mem32[self.pio + _IRQ] & (1 << self.idx))

    def write_code(self, code: int) -> None:
        \"\"\"Write one code (0..4095) while nothing plays; returns after its update.\"\"\"
        if not 0 <= code <= 4095:
            raise ValueError("a 12-bit DAC takes codes 0..4095")
        mem32[self.pio + _FDEBUG] = 1 << (_TXSTALL_LSB + self.idx)
        mem32[self.pio + _IRQ] = 1 << self.idx
        for w in _update(code):
            self.sm.put(w)
        while not self._drained():
            pass

    def stop(self) -> None:
        \"\"\"Ask a running play() to finish (safe to call from an interrupt handler).\"\"\"
        self.running = False

    def _ramp_down(self) -> None:
        # where the stream is: the words the DMA has handed to the FIFO
        done = self.cur_n
        if self.dma.active():
            self.dma.active(0)
            done = self.cur_n - self.dma.count  # type: ignore[attr-defined]
        sent = self.sent + done
        if 0 < sent < WORD_COUNT:
            first = (sent - 1) // WORDS_PER_UPDATE * WORDS_PER_UPDATE
            update = [self._word(k) for k in range(first, first + WORDS_PER_UPDATE)]
            for w in update[sent - first:]:
                self.sm.put(w)  # finish the update under way
            import math

            # the ramp is made while the bus goes idle (the DAC holds its code), then
            # sent by DMA, one update a sample period again
            code = _code_of(update)
            ramp = array.array("I")
            for k in range(1, RAMP_UPDATES + 1):
                g = (1 + math.cos(math.pi * k / RAMP_UPDATES)) / 2
                ramp.extend(_update(IDLE_CODE + int((code - IDLE_CODE) * g)))
            while not self._drained():
                pass
            self._start()
            self._send(ramp, len(ramp))
            self._go()
        while not self._drained():
            pass

    def _word(self, k: int) -> int:
        if WORDS is not None:
            return WORDS[k]
        with open(self.path, "rb") as f:
            f.seek(4 * k)
            b = f.read(4)
        return b[0] | b[1] << 8 | b[2] << 16 | b[3] << 24

    def play(self, loop: bool = LOOP) -> None:
        \"\"\"Play once, or repeat (loop=True) until stop() is called; blocks until the
        last update's period is over.\"\"\"
        self.running = True
        self._start()
        self.sent, self.cur_n = 0, 0
        try:
            if INTRO is not None:
                self._send(INTRO, len(INTRO))
                self._go()
                self.sent, self.cur_n = 0, 0
            if WORDS is not None:
                self._play_words(WORDS, loop)
            else:
                self._play_file(loop)
            if not LOOP:
                while self.dma.active():
                    if not self.running:
                        self._ramp_down()
                        return
            while self.dma.active():
                pass
            if OUTRO is not None:
                self._send(OUTRO, len(OUTRO))
            while not self._drained():
                pass
        except KeyboardInterrupt:
            if LOOP:
                while self.dma.active():
                    pass
                if OUTRO is not None:
                    self._send(OUTRO, len(OUTRO))
                while not self._drained():
                    pass
            else:
                self._ramp_down()
            raise
        finally:
            self.running = False

{feed}
    def close(self) -> None:
        \"\"\"Release the DMA channel and the state machine (the lines stay released).\"\"\"
        self.dma.close()
        self.sm.active(0)


def play(sm_id: int = 0, loop: bool = LOOP) -> None:
    \"\"\"Play the stream once (or loop until Ctrl-C), then release the hardware.\"\"\"
    p = Player(sm_id)
    try:
        p.play(loop)
    finally:
        p.close()
"""


def render_micropython(asset: StreamAsset, *, embed: bool = False) -> str:
    """Return the MicroPython module of an I2C DAC stream.

    Parameters
    ----------
    asset : StreamAsset
        The stream.
    embed : bool
        Embed the words as an ``array('I', ...)`` literal (short streams only).
    """
    p, sm, lay, i2c = asset.clock, asset.state_machine, _layout(asset), _i2c(asset)
    words_literal = (
        ("WORDS = " + _literal(asset.packed)) if embed else "WORDS = None  # read from BIN_FILE"
    )
    text = _MP_TEMPLATE.format(
        registers=pio_registers_text(target_of(asset.options)),
        version=__version__,
        source=comment_safe(asset.source.get("file", "generated signal")),
        name=asset.name,
        updates=asset.sample_count,
        words=asset.word_count,
        per=lay.words_per_update,
        address=lay.fmt.address,
        command=lay.fmt.command,
        power_down=lay.fmt.power_down,
        idle=asset.idle_code,
        rate=float(p.achieved_rate_hz),
        bus=float(i2c["bus_hz"]),
        sys_clock=p.sys_clock_hz,
        clkdiv=sm.clkdiv,
        cycles=p.cycles_per_sample,
        pad=i2c["pad"],
        sda=sm.out_base,
        scl=int(sm.sideset_base or 0),
        gpio_base=sm.gpio_base,
        loop=asset.loop,
        bin_file=f"{asset.name}.bin",
        chunk_words=int(asset.options.get("chunk_words", 1024)),
        words_literal=words_literal,
        intro=_literal(asset.intro),
        outro=_literal(asset.outro),
        body="\n".join(mp_program_body(asset.pio_program)),
        feed=feed_methods("self._ramp_down()  # a stream stops at once, ramping down"),
    )
    return text + set_clock_text(asset)
