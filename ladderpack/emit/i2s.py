"""The files of an I2S stream: C header and source, ``.pio`` text, MicroPython module.

The words and the program are laid out as for a ladder stream (:mod:`ladderpack.emit.c`);
the defines and the initialiser are the I2S player's (:mod:`ladderpack.emit.player_i2s`).
"""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np

from ladderpack._version import __version__
from ladderpack.asset import StreamAsset
from ladderpack.emit.c import _array_lines, _banner, chunked, header_frame, init_macro, pll_lines
from ladderpack.emit.names import comment_safe
from ladderpack.outputs.i2s import I2sLayout, i2s_entry

__all__ = ["render_header", "render_pio", "render_source", "render_source_chunks"]


def _layout(asset: StreamAsset) -> I2sLayout:
    lay = asset.packed.layout
    assert isinstance(lay, I2sLayout)
    return lay


def _defines(asset: StreamAsset) -> list[tuple[str, str, str]]:
    p, sm, lay = asset.clock, asset.state_machine, _layout(asset)
    rate = p.achieved_rate_hz
    frames = asset.sample_count
    return [
        ("BITS", f"{lay.bits}u", "sample width, bits (in 32-bit slots)"),
        ("FRAME_COUNT", f"{frames}u", "frames (left and right sample) in the stream"),
        ("WORD_COUNT", f"{asset.word_count}u", "32-bit FIFO words"),
        ("WORDS_PER_FRAME", f"{lay.words_per_frame}u", "1: left in bits 31:16; 2: a word a slot"),
        ("STEREO", "1" if lay.stereo else "0", "0: the mono sample is sent in both slots"),
        ("LOOP", "1" if asset.loop else "0", "1: a loop, with an outro of one silent frame"),
        ("OUTRO_WORD_COUNT", f"{0 if asset.outro is None else asset.outro.words.size}u", ""),
        ("REQUESTED_RATE_HZ", f"{float(p.requested_rate_hz)!r}", "frame rate asked for"),
        ("RATE_HZ", f"{float(rate)!r}", "achieved frame (sample) rate"),
        ("RATE_NUM", f"{rate.numerator}ull", "achieved rate = RATE_NUM / RATE_DEN Hz"),
        ("RATE_DEN", f"{rate.denominator}ull", ""),
        ("BIT_CLOCK_HZ", f"{float(rate * 64)!r}", "64 bit clocks per frame"),
        ("SYS_CLOCK_HZ", f"{p.sys_clock_hz}u", "system clock the plan assumes"),
        ("CLKDIV_INT", f"{p.div_int}u", "clock divider, integer part (65536 is 0 in the register)"),
        ("CLKDIV_FRAC", f"{p.div_frac}u", "clock divider, fraction in 1/256 (not 0: jitter)"),
        ("CYCLES_PER_FRAME", f"{p.cycles_per_sample}u", "state-machine cycles per frame"),
        ("DATA_PIN", f"{sm.out_base}u", "serial data GPIO"),
        ("CLOCK_PIN", f"{sm.sideset_base}u", "bit clock GPIO; word select on the next"),
        ("GPIO_BASE", f"{sm.gpio_base}u", "PIO GPIO base (16 for GPIO 32 and above)"),
        ("PROGRAM_LENGTH", f"{len(asset.pio_program.instructions)}u", "instructions"),
        ("PROGRAM_WRAP_TARGET", f"{asset.pio_program.wrap_target}u", "relative to load offset"),
        ("PROGRAM_WRAP", f"{asset.pio_program.wrap}u", "relative to load offset"),
        ("PROGRAM_ENTRY", f"{i2s_entry(asset.pio_program)}u", "where execution starts"),
        ("REG_CLKDIV", f"0x{sm.clkdiv:08X}u", "SMx_CLKDIV"),
        ("REG_EXECCTRL", f"0x{sm.execctrl:08X}u", "SMx_EXECCTRL, program at offset 0"),
        ("REG_SHIFTCTRL", f"0x{sm.shiftctrl:08X}u", "SMx_SHIFTCTRL"),
        ("REG_PINCTRL", f"0x{sm.pinctrl:08X}u", "SMx_PINCTRL"),
    ]


def _init_macro(asset: StreamAsset) -> list[str]:
    n, P = asset.name, asset.name.upper()
    outro = f"{n}_outro_words" if asset.loop else "NULL"
    fields = [
        f"{n}_words",
        f"{P}_WORD_COUNT",
        outro,
        f"{P}_OUTRO_WORD_COUNT",
        f"{n}_program",
        f"{P}_PROGRAM_LENGTH",
        f"{P}_PROGRAM_WRAP_TARGET",
        f"{P}_PROGRAM_WRAP",
        f"{P}_PROGRAM_ENTRY",
        f"{P}_DATA_PIN",
        f"{P}_CLOCK_PIN",
        f"({P}_CLKDIV_INT & 0xFFFFu)",
        f"{P}_CLKDIV_FRAC",
        f"{P}_BITS",
        f"{P}_WORDS_PER_FRAME",
        f"{P}_LOOP",
        f"{P}_SYS_CLOCK_HZ",
        f"{P}_GPIO_BASE",
    ]
    return init_macro("lp_i2s_stream_t", "ladderpack_i2s.h", f"{P}_I2S_INIT", fields)


def render_header(asset: StreamAsset) -> str:
    """Return the C header of an I2S stream."""
    prefix = asset.name.upper()
    guard = f"LADDERPACK_{prefix}_H"
    lines = header_frame(asset, _defines(asset))
    lines += pll_lines(asset)
    lines += [
        "",
        f"extern const uint32_t {asset.name}_words[{prefix}_WORD_COUNT];",
        f"extern const uint16_t {asset.name}_program[{prefix}_PROGRAM_LENGTH];",
    ]
    if asset.loop:
        lines.append(f"extern const uint32_t {asset.name}_outro_words[{prefix}_OUTRO_WORD_COUNT];")
    lines += ["", *_init_macro(asset), "", f"#endif /* {guard} */", ""]
    return "\n".join(lines)


def source_lines(asset: StreamAsset) -> Iterator[str]:
    """The C source of an I2S stream, line by line."""
    prefix = asset.name.upper()
    lay = _layout(asset)
    yield from _banner(asset).split("\n")
    yield f'#include "{asset.name}.h"'
    yield ""
    yield f"/* Frames in FIFO order, two's complement, {lay.to_dict()['sample_order']};"
    yield " * const, so they stay in flash, and uint32_t, so they are word-aligned for DMA. */"
    yield f"const uint32_t {asset.name}_words[{prefix}_WORD_COUNT] = {{"
    yield from _array_lines(asset.packed.words, 8)
    yield "};"
    if asset.loop and asset.outro is not None:
        yield ""
        yield f"const uint32_t {asset.name}_outro_words[{prefix}_OUTRO_WORD_COUNT] = {{"
        yield from _array_lines(asset.outro.words, 8)
        yield "};"
    yield ""
    variant = asset.pio_program.variant
    yield f"/* State-machine program ({variant}; side-set: bit clock, word select):"
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
    """Return the C source of an I2S stream."""
    return b"".join(render_source_chunks(asset)).decode()


def render_pio(asset: StreamAsset) -> str:
    """Return the ``.pio`` text: the program plus its configuration as comments."""
    lay, p, sm = _layout(asset), asset.clock, asset.state_machine
    clk = int(sm.sideset_base or 0)
    notes = [
        f"; Generated by ladderpack {__version__} from "
        f"{comment_safe(asset.source.get('file', 'generated signal'))}. Do not edit.",
        f"; I2S ({asset.pio_program.variant[4:]} frame): data on GPIO {sm.out_base}, bit clock on "
        f"GPIO {clk} (side-set bit 0), word select on GPIO {clk + 1} (side-set bit 1)",
        f"; {lay.bits}-bit samples in 32-bit slots, {lay.to_dict()['sample_order']}; out shift "
        "left, autopull at 32 bits, TX FIFO joined (8 deep)",
        f"; start at address {i2s_entry(asset.pio_program)} (loads the bit counter)",
        f"; clock divider {p.div_int} + {p.div_frac}/256 at {p.sys_clock_hz} Hz, "
        f"{p.cycles_per_sample} cycles per frame -> {float(p.achieved_rate_hz):.6f} Hz",
    ]
    return "\n".join(notes) + "\n\n" + asset.pio_program.source()
