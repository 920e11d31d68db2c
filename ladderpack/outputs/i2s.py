"""I2S output: the clock plan of a state machine that drives bit clock, word select and data.

The frame is the I2S bus's (Philips Semiconductors, "I2S bus specification", 1986, revised
1996; from memory, not yet checked against the document): two channel slots per word-select
period, left while word select is low, data MSB first and one bit clock after the
word-select edge.  The state machine spends `cycles_per_bit` of its clocks on each bit
(the bit clock low for half of them, high for the other half, by side-set), so one frame
takes ``cycles_per_bit x 2 x slot_bits`` state-machine clocks and the frame rate is

    rate = f_sys / (D x cycles_per_bit x 2 x slot_bits)

with D the 16.8 fixed-point divider of :mod:`ladderpack.clock`.  An integer divider gives
a bit clock with no jitter; a fractional one stretches some state-machine periods by one
system clock, which an I2S receiver sees as bit-clock jitter (many DACs rebuild their
master clock from the bit clock, so it reaches the analog output).  The planner prefers
an integer divider within the tolerance, as for the ladder.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass
from fractions import Fraction
from typing import Any

import numpy as np

from ladderpack._version import __version__
from ladderpack.asset import StreamAsset
from ladderpack.clock import ClockPlan, plan_clock
from ladderpack.defaults import DEFAULT_SYS_CLOCK_HZ, I2S_SAMPLE_BITS
from ladderpack.defaults import FRAME_FORMATS as _FRAME_FORMATS
from ladderpack.emit import Content, binary, templates
from ladderpack.emit.c import (
    chunked,
    fifo_stream_header,
    fifo_stream_source_lines,
    init_macro,
)
from ladderpack.emit.micropython import (
    _literal,
    feed_methods,
    mp_program_body,
    pio_registers_text,
    set_clock_text,
    with_stored,
)
from ladderpack.emit.names import comment_safe
from ladderpack.errors import OptionError
from ladderpack.options import StreamOptions, WaveTableSpec
from ladderpack.outputs.base import (
    ClockReport,
    Compressed,
    OutputPlan,
    PreviewModel,
    SummaryLines,
    WaveTable,
    cycles_divider,
    state_machine_blocks,
    uncompressed,
)
from ladderpack.pack import Packed
from ladderpack.pio import Instruction, Program, SideSet, StateMachineConfig, wrap_execctrl
from ladderpack.targets import get_target, target_of
from ladderpack.waves import wavetable

__all__ = [
    "FRAME_FORMATS",
    "OUTPUT",
    "SAMPLE_BITS",
    "SLOT_BITS",
    "I2sLayout",
    "I2sOutput",
    "I2sPlan",
    "i2s_entry",
    "i2s_program",
    "i2s_state_machine",
    "plan_i2s",
    "render_header",
    "render_micropython",
    "render_pio",
    "render_source",
    "render_source_chunks",
]


#: Channel slot widths: 16-bit slots carry 16-bit samples, 32-bit slots 16, 24 or 32.
SLOT_BITS = (16, 32)

#: State-machine clocks per bit: one with the bit clock low, one with it high.
CYCLES_PER_BIT = 2


@dataclass(frozen=True)
class I2sPlan:
    """An I2S frame clock: the divider, the frame (sample) rate and the bit clock.

    Attributes
    ----------
    clock : ClockPlan
        The state machine's divider; its ``cycles_per_sample`` is the cycles per frame.
    slot_bits : int
        Bits per channel slot (16 or 32); a frame holds two slots.
    """

    clock: ClockPlan
    slot_bits: int

    @property
    def bits_per_frame(self) -> int:
        """Bit clocks per frame (two slots)."""
        return 2 * self.slot_bits

    @property
    def frame_rate_hz(self) -> Fraction:
        """Frames (stereo samples) per second, exact."""
        return self.clock.achieved_rate_hz

    @property
    def bit_clock_hz(self) -> Fraction:
        """Bit-clock frequency, Hz, exact."""
        return self.frame_rate_hz * self.bits_per_frame

    def to_dict(self) -> dict[str, object]:
        """Plain-data description."""
        return {
            **self.clock.to_dict(),
            "slot_bits": self.slot_bits,
            "bits_per_frame": self.bits_per_frame,
            "cycles_per_bit": CYCLES_PER_BIT,
            "bit_clock_hz": float(self.bit_clock_hz),
            "sample_bits": [b for b in (16, 24, 32) if b <= self.slot_bits],
        }


def plan_i2s(
    rate_hz: float | int | Fraction,
    *,
    sys_clock_hz: int = DEFAULT_SYS_CLOCK_HZ,
    slot_bits: int = 32,
    tolerance_ppm: float = 100.0,
) -> I2sPlan:
    """Plan the state machine's divider for an I2S frame rate.

    Parameters
    ----------
    rate_hz : float, int or Fraction
        Requested frame (sample) rate, Hz.
    sys_clock_hz : int
        System clock, Hz (default 125 MHz).
    slot_bits : {16, 32}
        Bits per channel slot (default 32: room for 16-, 24- and 32-bit samples).
    tolerance_ppm : float
        Rate error accepted for an integer (jitter-free) divider, ppm (default 100).

    Raises
    ------
    OptionError
        For a slot width other than 16 or 32, or a bad rate or clock.
    ClockError
        When the divider's range cannot reach the rate.

    Examples
    --------
    >>> p = plan_i2s(48000)  # at 125 MHz: a fractional divider, 64 ppm fast
    >>> p.clock.div_int, p.clock.div_frac, round(float(p.bit_clock_hz)), p.clock.fractional
    (20, 88, 3072197, True)
    """
    if slot_bits not in SLOT_BITS:
        raise OptionError(f"must be 16 or 32, got {slot_bits!r}", field="slot_bits")
    cycles = CYCLES_PER_BIT * 2 * slot_bits
    clock = plan_clock(
        rate_hz,
        sys_clock_hz=sys_clock_hz,
        tolerance_ppm=tolerance_ppm,
        min_cycles=cycles,
        max_cycles=cycles,
    )
    return I2sPlan(clock, slot_bits)


# -- the stream: layout, program and state machine -------------------------------------

#: Sample widths an I2S stream carries, each in a 32-bit channel slot.
SAMPLE_BITS = I2S_SAMPLE_BITS

#: Frame formats: ``standard`` (the I2S bus: the MSB one bit clock after the word-select
#: edge) and ``left-justified`` (the MSB on the word-select edge).
FRAME_FORMATS = _FRAME_FORMATS

#: Bits per channel slot of a stream (the planner also knows 16-bit slots).
STREAM_SLOT_BITS = 32


@dataclass(frozen=True)
class I2sLayout:
    """How I2S samples sit in 32-bit FIFO words, in the order the state machine sends them.

    Codes are offset binary (``0 .. 2**bits - 1``, silence at ``2**(bits-1)``), the
    quantiser's scale; the words hold two's complement, which is offset binary with
    its most significant bit inverted.  Every frame carries a left and a right sample:
    a mono stream sends its sample in both.

    * 16-bit samples: one word per frame, the left sample in bits 31:16 and the right
      in bits 15:0 (the program sends each slot's 16 data bits, then 16 zero bits).
    * 24- and 32-bit samples: one word per slot, the sample in the word's most
      significant bits and zeros below (two words per frame).

    The state machine shifts left (most significant bit first, as I2S sends).

    Attributes
    ----------
    bits : int
        Sample width: 16, 24 or 32.
    stereo : bool
        Codes hold interleaved left/right pairs (else one code per frame, sent in both
        slots).

    Examples
    --------
    >>> lay = I2sLayout(16)
    >>> [hex(w) for w in lay.pack_codes(np.array([0x8000, 0x8001, 0x7FFF]))]
    ['0x0', '0x10001', '0xffffffff']
    """

    bits: int
    stereo: bool = False

    def __post_init__(self) -> None:
        if self.bits not in SAMPLE_BITS:
            raise OptionError(
                f"an I2S sample is 16, 24 or 32 bits, got {self.bits!r}", field="bits"
            )

    @property
    def channels(self) -> int:
        """Codes per frame: 2 for a stereo stream, 1 for mono."""
        return 2 if self.stereo else 1

    @property
    def words_per_frame(self) -> int:
        """FIFO words per frame (1 for 16-bit samples, else 2)."""
        return 1 if self.bits == 16 else 2

    @property
    def pull_threshold(self) -> int:
        """Autopull threshold, bits (always a whole word)."""
        return 32

    @property
    def mid_code(self) -> int:
        """The code of silence (two's complement zero)."""
        return 1 << (self.bits - 1)

    def words_for(self, frames: int) -> int:
        """Words needed for `frames` frames."""
        return frames * self.words_per_frame

    def _slots(self, codes: np.ndarray) -> np.ndarray:
        """Two's complement slot values (uint64), left and right for every frame."""
        c = np.asarray(codes, dtype=np.uint64)
        c = c ^ np.uint64(self.mid_code)  # offset binary -> two's complement
        if not self.stereo:
            c = np.repeat(c, 2)
        elif c.size % 2:
            raise OptionError("a stereo stream needs whole left/right pairs", field="codes")
        return c

    def pack_codes(self, codes: np.ndarray) -> np.ndarray:
        """Codes (whole frames) -> uint32 FIFO words."""
        s = self._slots(codes)
        if self.bits == 16:
            return ((s[0::2] << np.uint64(16)) | s[1::2]).astype(np.uint32)
        return (s << np.uint64(32 - self.bits)).astype(np.uint32)

    def unpack_words(self, words: np.ndarray) -> np.ndarray:
        """FIFO words -> codes, shape (frames, 2): left and right of every frame."""
        w = np.asarray(words, dtype=np.uint64)
        if self.bits == 16:
            s = np.stack([w >> np.uint64(16), w & np.uint64(0xFFFF)], axis=1)
        else:
            s = (w >> np.uint64(32 - self.bits)).reshape(-1, 2)
        return (s ^ np.uint64(self.mid_code)).astype(np.int64)

    def to_dict(self) -> dict[str, object]:
        """Plain-data description (the sidecar's ``layout``)."""
        return {
            "output": "i2s",
            "bits": self.bits,
            "slot_bits": STREAM_SLOT_BITS,
            "channels": "stereo" if self.stereo else "mono",
            "words_per_frame": self.words_per_frame,
            "sample_order": (
                "left in bits 31:16, right in bits 15:0"
                if self.bits == 16
                else "one slot per word, left first, sample in the top bits"
            ),
            "coding": "two's complement",
            "shift": "left",
            "pull_threshold": self.pull_threshold,
        }


def _side(ws: int, bclk: int) -> int:
    """Side-set value: bit 0 drives the bit clock, bit 1 the word select."""
    return (ws << 1) | bclk


def i2s_program(bits: int, frame_format: str = "standard", *, name: str = "i2s_out") -> Program:
    """The state-machine program that sends I2S frames, two cycles per bit.

    Side-set drives the bit clock (side-set pin 0) and the word select (pin 1); ``out
    pins, 1`` puts each data bit on the data pin while the bit clock is low, and the
    receiver samples it on the rising edge.  Each slot is 32 bits; a ``jmp x--`` loop
    sends all but its last bit, whose second cycle reloads the counter for the next
    slot.  In the standard format the word select changes with that last bit, one bit
    clock before the next slot's MSB; left-justified changes it with the MSB.

    The word select's level per channel follows each format's own convention: the I2S
    frame sends the left channel while WS is low (Philips I2S bus specification, 1986,
    rev. 1996), while left-justified DACs and codecs take the left channel while LRCK is
    high (REFERENCES.md section 14, from memory of common codec datasheets: check the
    part in hand, some offer both polarities).

    For 16-bit samples the program sends a slot's 16 data bits from the word, then 16
    zero bits (``mov pins, null``), so one word carries a frame.

    Execution must start at :func:`i2s_entry` (the last instruction: it loads the
    counter, then wraps to the left slot).

    Parameters
    ----------
    bits : {16, 24, 32}
        Sample width.
    frame_format : {'standard', 'left-justified'}
        Where the word-select edge falls.
    name : str
        Program name.
    """
    if bits not in SAMPLE_BITS:
        raise OptionError(f"an I2S sample is 16, 24 or 32 bits, got {bits!r}", field="bits")
    if frame_format not in FRAME_FORMATS:
        raise OptionError(
            f"must be one of {', '.join(FRAME_FORMATS)}, got {frame_format!r}",
            field="frame_format",
        )
    lead = frame_format == "standard"
    ins: list[Instruction] = []
    for ws in (0, 1) if lead else (1, 0):  # WS of the left slot, then of the right
        nxt = 1 - ws if lead else ws  # word select during the slot's last bit
        top = len(ins)
        if bits == 16:
            ins += [
                Instruction("out", ("pins", 1), side=_side(ws, 0)),
                Instruction("jmp", ("x--", top), side=_side(ws, 1)),  # 16 data bits
                Instruction("mov", ("pins", "null"), side=_side(ws, 0)),
                Instruction("set", ("y", 13), side=_side(ws, 1)),
                Instruction("mov", ("pins", "null"), side=_side(ws, 0)),
                Instruction("jmp", ("y--", top + 4), side=_side(ws, 1)),  # 14 zero bits
                Instruction("mov", ("pins", "null"), side=_side(nxt, 0)),  # the last bit
                Instruction("set", ("x", 15), side=_side(nxt, 1)),
            ]
        else:
            ins += [
                Instruction("out", ("pins", 1), side=_side(ws, 0)),
                Instruction("jmp", ("x--", top), side=_side(ws, 1)),  # 31 bits
                Instruction("out", ("pins", 1), side=_side(nxt, 0)),  # the last bit
                Instruction("set", ("x", 30), side=_side(nxt, 1)),
            ]
    return Program(
        name,
        tuple(ins),
        wrap_target=0,
        wrap=len(ins) - 1,
        sideset=SideSet(2),
        autopull=True,
        variant=f"i2s-{frame_format}",
    )


def i2s_entry(program: Program) -> int:
    """Address execution starts at: the last instruction (it loads the bit counter)."""
    return len(program.instructions) - 1


def i2s_state_machine(
    program: Program,
    layout: I2sLayout,
    clock: ClockPlan,
    *,
    data_pin: int,
    clock_pin: int,
    gpio_count: int = 30,
    gpio_base: int = 0,
) -> StateMachineConfig:
    """The state machine's registers for an I2S stream (program loaded at address 0).

    Parameters
    ----------
    program : Program
        From :func:`i2s_program`.
    layout : I2sLayout
        The stream's layout (autopull threshold 32, shift left).
    clock : ClockPlan
        The frame clock; its ``cycles_per_sample`` is the cycles per frame.
    data_pin : int
        GPIO of the serial data.
    clock_pin : int
        GPIO of the bit clock; the word select is on the next GPIO.
    gpio_count, gpio_base : int
        The target's GPIO count and the PIO block's GPIO base.

    Raises
    ------
    OptionError
        For pins the target lacks, overlapping pins, or pins outside the PIO block's
        32-GPIO window.
    """
    for name, pin, n in (("data_pin", data_pin, 1), ("clock_pin", clock_pin, 2)):
        if isinstance(pin, bool) or not isinstance(pin, int) or pin < 0:
            raise OptionError(f"must be a GPIO number >= 0, got {pin!r}", field=name)
        if pin + n > gpio_count:
            raise OptionError(
                f"GPIO {pin}..{pin + n - 1} needed, but the target has GPIO 0..{gpio_count - 1}",
                field=name,
            )
        if not (gpio_base <= pin and pin + n <= gpio_base + 32):
            raise OptionError(
                f"GPIO {pin}..{pin + n - 1} are outside the PIO window "
                f"{gpio_base}..{gpio_base + 31}",
                field=name,
            )
    if data_pin in (clock_pin, clock_pin + 1):
        raise OptionError(
            f"the data pin GPIO {data_pin} is also the bit clock (GPIO {clock_pin}) or word "
            f"select (GPIO {clock_pin + 1})",
            field="data_pin",
        )
    execctrl = wrap_execctrl(program)
    shiftctrl = (
        (1 << 30)  # FJOIN_TX: 8-deep TX FIFO
        | (0 << 25)  # PULL_THRESH 0 means 32
        | (0 << 19)  # OUT_SHIFTDIR left: MSB first
        | (1 << 18)  # IN_SHIFTDIR (reset value, unused)
        | (1 << 17)  # AUTOPULL
    )
    # PINCTRL: SIDESET_COUNT 31:29, OUT_COUNT 25:20, SIDESET_BASE 14:10, OUT_BASE 4:0.
    pinctrl = (
        (program.sideset.field_bits << 29)
        | (1 << 20)
        | ((clock_pin - gpio_base) << 10)
        | (data_pin - gpio_base)
    )
    return StateMachineConfig(
        clock.clkdiv_register,
        execctrl,
        shiftctrl,
        pinctrl,
        data_pin,
        1,
        True,
        gpio_base,
        sideset_base=clock_pin,
        sideset_count=2,
    )


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
        ("SAMPLE_COUNT", f"{frames}u", "samples (frames: left and right) in the stream"),
        ("FRAME_COUNT", f"{asset.name.upper()}_SAMPLE_COUNT", "old name, kept until 0.3"),
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
        f"{n}_words" if asset.compressed is None else "NULL",
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
        f"&{n}_adpcm" if asset.adpcm is not None else "NULL",
        f"&{n}_lossless" if asset.lossless is not None else "NULL",
    ]
    return init_macro("lp_i2s_stream_t", "ladderpack_i2s.h", f"{P}_I2S_INIT", fields)


def render_header(asset: StreamAsset) -> str:
    """Return the C header of an I2S stream."""
    return fifo_stream_header(asset, _defines(asset), _init_macro(asset))


def source_lines(asset: StreamAsset) -> Iterator[str]:
    """The C source of an I2S stream, line by line."""
    order = _layout(asset).to_dict()["sample_order"]
    variant = asset.pio_program.variant
    return fifo_stream_source_lines(
        asset,
        (
            f"/* Frames in FIFO order, two's complement, {order};",
            " * const, so they stay in flash, and uint32_t, so they are word-aligned for DMA. */",
        ),
        f"/* State-machine program ({variant}; side-set: bit clock, word select):",
    )


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


_TEMPLATE = """\
# Generated by ladderpack {version} from {source}.
# Do not edit: regenerate it instead.
#
# Wiring: I2S data on GPIO {data_pin}, bit clock on GPIO {clock_pin}, word select (LR clock)
# on GPIO {ws_pin}; the DAC's or amplifier's ground to the board's. Check its logic level
# (3.3 V here) and supply limits. A class-D amplifier drives a speaker with real power:
# start at a low gain, mind the speaker's rating, and leave mains-powered gear to
# qualified people.
#
# Use:  import {name}; {name}.play()            (blocks until the stream ends)
#       p = {name}.Player(); p.play(loop=True)  (a loop runs until p.stop() or Ctrl-C)
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
BITS = {bits}  # sample width, in 32-bit slots, two's complement
SAMPLE_COUNT = {frames}  # frames: left and right
FRAME_COUNT = SAMPLE_COUNT  # the old name, kept until version 0.3
WORD_COUNT = {words}
WORDS_PER_FRAME = {wpf}  # 1: left in bits 31:16, right in 15:0; 2: one word a slot
RATE_HZ = {rate!r}
SYS_CLOCK_HZ = {sys_clock}
CLKDIV_REG = 0x{clkdiv:08X}
CYCLES_PER_FRAME = {cycles}
DATA_PIN = {data_pin}
CLOCK_PIN = {clock_pin}  # word select on CLOCK_PIN + 1
GPIO_BASE = {gpio_base}
ENTRY = {entry}  # the program starts at its last instruction (it loads the bit counter)
LOOP = {loop}
BIN_FILE = {bin_file!r}
CHUNK_WORDS = {chunk_words}
{words_literal}
OUTRO = {outro}
FADE_FRAMES = 64  # a stream stopped early fades out over this many frames

{registers}


@rp2.asm_pio(
    out_init=rp2.PIO.OUT_LOW,
    sideset_init=[rp2.PIO.OUT_LOW, rp2.PIO.OUT_LOW],
    out_shiftdir=rp2.PIO.SHIFT_LEFT,
    autopull=True,
    pull_thresh=32,
    fifo_join=rp2.PIO.JOIN_TX,
)
def i2s_program() -> None:
{body}


def _fade(left: int, right: int) -> "array.array[int]":
    \"\"\"Frames fading two slot values (samples in the top BITS of a word) to silence.\"\"\"
    import math

    keep = 0xFFFFFFFF ^ ((1 << (32 - BITS)) - 1) if BITS < 32 else 0xFFFFFFFF
    sl = left - (1 << 32) if left & 0x80000000 else left
    sr = right - (1 << 32) if right & 0x80000000 else right
    out = array.array("I")
    for k in range(1, FADE_FRAMES + 1):
        w = (1 + math.cos(math.pi * k / FADE_FRAMES)) / 2
        vl = int(sl * w) & keep
        vr = int(sr * w) & keep
        if WORDS_PER_FRAME == 1:
            out.append(vl | (vr >> 16))
        else:
            out.append(vl)
            out.append(vr)
    return out


class Player:
    \"\"\"Plays the stream on state machine sm_id, fed by DMA from two buffers in turn.

    A stream ends on a silent frame; stop() or Ctrl-C on a stream fades out at once from
    the frame last sent; stop() on a loop finishes the current pass.
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
        self.sm = rp2.StateMachine(sm_id, i2s_program, freq=SYS_CLOCK_HZ // 256,
                                   out_base=Pin(DATA_PIN), sideset_base=Pin(CLOCK_PIN))
        self.pio = _PIO_BASE[sm_id // 4]
        self.idx = sm_id % 4
        self.reg = self.pio + _SM_STRIDE * self.idx  # add an SM0 offset
        mem32[self.reg + _SM0_CLKDIV] = CLKDIV_REG  # the exact 16.8 divider
        self.origin = mem32[self.reg + _SM0_ADDR]  # the program's load address
        self.txf = self.pio + _TXF0 + _TXF_STRIDE * self.idx
        self.dma = rp2.DMA()
        self.ctrl = self.dma.pack_ctrl(size=2, inc_read=True, inc_write=False,
                                       treq_sel=_DREQ_PIO_TX0[sm_id // 4] + self.idx)
        self.bufs = [array.array("I", bytes(4 * chunk_words)) for _ in range(2)]
        self.running = False
        self.sent = 0  # words handed to the DMA before the current transfer
        self.cur_n = 0  # words of the current transfer

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
        # autopull stalls on the empty FIFO once the last word has left the shift register
        return bool(mem32[self.pio + _FDEBUG] & (1 << (_TXSTALL_LSB + self.idx)))

    def _start(self) -> None:
        self.sm.active(0)
        self.sm.restart()
        mem32[self.reg + _SM0_INSTR] = self.origin + ENTRY  # jmp to the entry

    def _go(self) -> None:
        mem32[self.pio + _FDEBUG] = 1 << (_TXSTALL_LSB + self.idx)  # clear TXSTALL
        self.sm.active(1)

    def stop(self) -> None:
        \"\"\"Ask a running play() to finish (safe to call from an interrupt handler).\"\"\"
        self.running = False

    def _fade_out(self) -> None:
        # where the stream is: the words the DMA has handed to the FIFO
        done = self.cur_n
        if self.dma.active():
            self.dma.active(0)
            done = self.cur_n - self.dma.count  # type: ignore[attr-defined]
        sent = self.sent + done
        if 0 < sent < WORD_COUNT:
            frame = (sent - 1) // WORDS_PER_FRAME
            if WORDS_PER_FRAME == 1:
                w = self._word(frame)
                left, right = w & 0xFFFF0000, (w << 16) & 0xFFFFFFFF
            else:
                left, right = self._word(2 * frame), self._word(2 * frame + 1)
                if sent % 2:
                    self.sm.put(right)  # finish the frame the FIFO holds half of
            for w in _fade(left, right):
                self.sm.put(w)
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
        last frame has left.\"\"\"
        self.running = True
        self.sent, self.cur_n = 0, 0
        self._start()
        try:
            if WORDS is not None:
                self._play_words(WORDS, loop)
            else:
                self._play_file(loop)
            if not LOOP:
                while self.dma.active():
                    if not self.running:
                        self._fade_out()
                        return
            while self.dma.active():
                pass
            if OUTRO is not None:
                for w in OUTRO:
                    self.sm.put(w)
            while not self._drained():
                pass
        except KeyboardInterrupt:
            self._fade_out()
            raise
        finally:
            self.dma.active(0)
            self.running = False

{feed}
    def close(self) -> None:
        \"\"\"Release the DMA channel and the state machine.\"\"\"
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
    """Return the MicroPython module of an I2S stream.

    Parameters
    ----------
    asset : StreamAsset
        The stream.
    embed : bool
        Embed the words as an ``array('I', ...)`` literal (short streams only).
    """
    lay, p, sm = asset.packed.layout, asset.clock, asset.state_machine
    assert isinstance(lay, I2sLayout)
    clock_pin = int(sm.sideset_base or 0)
    words_literal = (
        ("WORDS = " + _literal(asset.packed)) if embed else "WORDS = None  # read from BIN_FILE"
    )
    text = set_clock_after(
        _TEMPLATE.format(
            registers=pio_registers_text(target_of(asset.options)),
            version=__version__,
            source=comment_safe(asset.source.get("file", "generated signal")),
            name=asset.name,
            bits=lay.bits,
            frames=asset.sample_count,
            words=asset.word_count,
            wpf=lay.words_per_frame,
            rate=float(p.achieved_rate_hz),
            sys_clock=p.sys_clock_hz,
            clkdiv=sm.clkdiv,
            cycles=p.cycles_per_sample,
            data_pin=sm.out_base,
            clock_pin=clock_pin,
            ws_pin=clock_pin + 1,
            gpio_base=sm.gpio_base,
            entry=i2s_entry(asset.pio_program),
            loop=asset.loop,
            bin_file=f"{asset.name}.bin",
            chunk_words=int(asset.options.get("chunk_words", 1024)),
            words_literal=words_literal,
            outro=_literal(asset.outro),
            body="\n".join(mp_program_body(asset.pio_program)),
            feed=feed_methods("self._fade_out()  # a stream stops at once, fading out"),
        ),
        asset,
    )
    if asset.compressed is None:
        return text
    return with_stored(
        text,
        asset,
        stop_line="self._fade_out()  # a stream stops at once, fading out",
        lossless_cfg="[0, 16, 1, 0, 0, 0x8000, channels, 1, 16]",  # I2S frames, two's complement
    )


def set_clock_after(text: str, asset: StreamAsset) -> str:
    """`text` with a ``set_clock()`` when the stream needs a clock other than the default."""
    return text + set_clock_text(asset)


# -- the registered object -------------------------------------------------------------


def _lines(pins: tuple[int, ...]) -> str:
    return (
        f"the I2S lines (data GPIO {pins[0]}, bit clock GPIO {pins[1]}, word select GPIO {pins[2]})"
    )


def _pins(opts: StreamOptions) -> tuple[int, int, int]:
    """Data, bit clock and word select (the GPIO after the bit clock)."""
    bclk = int(opts.bit_clock_pin if opts.bit_clock_pin is not None else opts.data_pin + 1)
    return (opts.data_pin, bclk, bclk + 1)


class I2sOutput:
    """An I2S DAC or amplifier: data by OUT, bit clock and word select by side-set."""

    name = "i2s"

    def default_bits(self) -> int:
        """16 bits, the common DAC's sample."""
        return 16

    def check_bits(self, bits: int) -> None:
        """16, 24 or 32 bits."""
        if bits not in I2S_SAMPLE_BITS:
            raise OptionError(f"an I2S sample is 16, 24 or 32 bits, got {bits}", field="bits")

    def check_options(self, opts: StreamOptions) -> None:
        """A 16, 24 or 32-bit sample; three distinct pins on the target, in one window."""
        self.check_bits(opts.bits)
        if opts.bit_clock_pin is None:
            object.__setattr__(opts, "bit_clock_pin", opts.data_pin + 1)
        pins = _pins(opts)
        if opts.data_pin in pins[1:]:
            raise OptionError(
                f"the data pin GPIO {opts.data_pin} is also the bit clock or word select "
                f"(GPIO {pins[1]} and {pins[2]})",
                field="bit_clock_pin",
            )
        count = int(opts.gpio_count or 0)
        if max(pins) >= count:
            raise OptionError(
                f"the I2S lines need GPIO {pins[0]} (data), {pins[1]} (bit clock) and "
                f"{pins[2]} (word select), but the target has GPIO 0..{count - 1}"
                + get_target(opts.target).more_pins_hint(max(pins)),
                field="bit_clock_pin" if pins[2] >= count else "data_pin",
            )
        if opts.compress == "adpcm" and opts.bits != 16:
            raise OptionError(
                f"IMA ADPCM codes 16-bit samples, got --bits {opts.bits}: use --bits 16",
                field="compress",
            )
        if opts.compress == "lossless" and opts.bits != 16:
            raise OptionError(
                f"I2S streams are stored losslessly compressed with 16-bit samples, got "
                f"--bits {opts.bits}: use --bits 16, or --compress none",
                field="compress",
            )
        self.gpio_base(opts)

    def gpio_base(self, opts: StreamOptions) -> int:
        """The PIO GPIO base reaching the three lines."""
        pins = _pins(opts)
        lo, hi = min(pins), max(pins)
        return get_target(opts.target).gpio_window(
            lo, hi - lo + 1, int(opts.gpio_count or 0), what=_lines(pins), field="data_pin"
        )

    def recorded_options(self, opts: StreamOptions, recorded: dict[str, Any]) -> dict[str, Any]:
        """The generic record."""
        return recorded

    def plan(self, opts: StreamOptions, ident: str) -> OutputPlan:
        """The frame clock (128 cycles a frame), the frame layout and the I2S program."""
        layout = I2sLayout(opts.bits, stereo=opts.stereo)
        clock = plan_i2s(
            opts.rate_hz,
            sys_clock_hz=int(opts.sys_clock_hz or 0),
            slot_bits=STREAM_SLOT_BITS,
            tolerance_ppm=opts.rate_tolerance_ppm,
        ).clock
        program = i2s_program(opts.bits, opts.frame_format, name=f"{ident}_i2s")
        sm = i2s_state_machine(
            program,
            layout,
            clock,
            data_pin=opts.data_pin,
            clock_pin=int(opts.bit_clock_pin or 0),
            gpio_count=int(opts.gpio_count or 0),
            gpio_base=self.gpio_base(opts),
        )
        return OutputPlan(
            layout=layout,
            clock=clock,
            samples_per_word=1,
            per_word=Fraction(1, layout.words_per_frame),
            idle_code=layout.mid_code,
            channel_idle=layout.mid_code,
            code_bits=opts.bits,
            program=program,
            sm=sm,
            ramps=False,
            whole_frames=True,
        )

    def stats(self, plan: OutputPlan, opts: StreamOptions) -> dict[str, Any]:
        """The frame, its bit clock and the three pins."""
        return {
            "i2s": {
                **I2sPlan(plan.clock, STREAM_SLOT_BITS).to_dict(),
                "frame_format": opts.frame_format,
                "data_pin": opts.data_pin,
                "bit_clock_pin": opts.bit_clock_pin,
                "word_select_pin": int(opts.bit_clock_pin or 0) + 1,
            }
        }

    def variant(self, plan: OutputPlan) -> str:
        """The I2S program's variant."""
        assert plan.program is not None
        return plan.program.variant

    def compress(self, packed: Packed, opts: StreamOptions) -> Compressed:
        """``--compress lossless`` or ``adpcm`` (16-bit samples, mono or stereo).

        Lossless keeps the frames' codes (a mono frame's once; a stereo frame's left and
        right alternating, each predicted from its own channel). ADPCM codes the samples,
        each channel on its own, and gives the words they decode to, which the players
        send instead of the stream's, with their SINAD against the uncompressed samples.
        Blocks hold no more frames than a MicroPython player's buffer (a word a frame),
        an even count, so each block's codes start on a byte.
        """
        if opts.compress not in ("lossless", "adpcm"):
            return uncompressed(packed)
        import dataclasses

        from ladderpack.compress import decode_adpcm, encode_adpcm, encode_lossless, sinad_db

        lay = packed.layout
        assert isinstance(lay, I2sLayout) and lay.bits == 16
        ch = lay.channels
        frames = lay.unpack_words(packed.words)  # offset codes, (frames, 2)
        codes = (frames if lay.stereo else frames[:, :1]).ravel()
        block = max(2, min(1024, int(opts.chunk_words)) // 2 * 2) * ch
        if opts.compress == "lossless":
            return Compressed(encode_lossless(codes, 16, block_samples=block, channels=ch),
                              None, packed)  # fmt: skip
        x = codes - lay.mid_code
        coded = encode_adpcm(x, block_samples=block, channels=ch)
        d = decode_adpcm(coded)
        words = lay.pack_codes(d + lay.mid_code)
        return Compressed(None, coded, dataclasses.replace(packed, words=words), sinad_db(x, d))

    def summary(self, asset: StreamAsset) -> dict[str, Any]:
        """Stereo or mono, and the frame and pins."""
        i2s = asset.stats["i2s"]
        return {
            "stereo": bool(asset.options.get("stereo", False)),
            "i2s": {
                "bit_clock_hz": i2s["bit_clock_hz"],
                "bits_per_frame": i2s["bits_per_frame"],
                "cycles_per_bit": i2s["cycles_per_bit"],
                "frame_format": i2s["frame_format"],
                "pins": [i2s["data_pin"], i2s["bit_clock_pin"], i2s["word_select_pin"]],
            },
        }

    def summary_lines(self, summary: Mapping[str, Any]) -> SummaryLines:
        """The sample width, the frame and its pins; counted in frames."""
        stereo = bool(summary.get("stereo"))
        kind = f"{summary['bits']}-bit" + (
            ", stereo I2S" if stereo else " I2S, mono in both channels"
        )
        i2s = summary["i2s"]
        d, b, w = i2s["pins"]
        line = (
            f"{i2s['frame_format']} frame, {i2s['bits_per_frame']} bits "
            f"({i2s['cycles_per_bit']} cycles each), bit clock "
            f"{i2s['bit_clock_hz']:.1f} Hz; data GPIO {d}, bit clock {b}, word select {w}"
        )
        divider = cycles_divider(summary, "sample (one frame)")
        return SummaryLines(kind, "sample", divider, [("i2s", line)])

    def sidecar_blocks(self, asset: StreamAsset) -> dict[str, Any]:
        """The program (with its entry point) and the state machine's registers."""
        return state_machine_blocks(asset, entry=i2s_entry(asset.pio_program))

    def files(self, asset: StreamAsset, *, embed: bool) -> dict[str, Content]:
        """Words, C header and source, MicroPython module, PIO source, the I2S player."""
        n, stored = asset.name, asset.compressed
        return {  # a compressed stream's .bin is its stored form, read block by block
            f"{n}.bin": binary.render_chunks(asset.packed) if stored is None else stored.to_bytes(),
            f"{n}.h": render_header(asset).encode(),
            f"{n}.c": render_source_chunks(asset),
            f"{n}.py": render_micropython(asset, embed=embed and stored is None).encode(),
            f"{n}.pio": render_pio(asset).encode(),
            **templates.player("ladderpack_i2s"),
        }

    def preview_model(self, layout: Mapping[str, Any], sidecar: Mapping[str, Any]) -> PreviewModel:
        """Two's complement samples about mid-scale, on an ideal DAC."""
        bits = layout["bits"]
        if bits not in (16, 24, 32):
            raise ValueError(f"layout.bits: expected 16, 24 or 32 for I2S, got {bits!r}")
        stereo = layout.get("channels") == "stereo"
        lay = I2sLayout(bits, stereo=stereo)

        def decode(words: np.ndarray, count: int, channel: int) -> np.ndarray:
            return np.asarray(lay.unpack_words(words[: lay.words_for(count)])[:count, channel])

        def stored(data: bytes, comp: Mapping[str, Any]) -> np.ndarray:
            from ladderpack.compress import decode_stored

            got = decode_stored(data, comp, bits=bits)  # ADPCM: signed samples
            return lay.pack_codes(got + (lay.mid_code if comp.get("kind") == "adpcm" else 0))

        return PreviewModel(
            lay, bits, 2 if stereo else 1, 1 << bits, (1 << bits) / 2, False, decode, stored
        )

    def wave_table(self, spec: WaveTableSpec) -> WaveTable:
        """Signed samples (the offset code less mid-scale) at the I2S frame clock."""
        cycles = CYCLES_PER_BIT * 2 * STREAM_SLOT_BITS  # an I2S frame: 128 machine cycles
        plan = plan_clock(
            spec.rate_hz,
            sys_clock_hz=int(spec.sys_clock_hz or 0),
            tolerance_ppm=spec.rate_tolerance_ppm,
            min_cycles=cycles,
            max_cycles=cycles,
        )
        tab = wavetable(spec.kind, spec.table_bits, bits=spec.bits, level_dbfs=spec.level_dbfs)
        tab = tab.astype(np.int64) - (1 << (spec.bits - 1))
        coding = f"i2s samples, signed {spec.bits}-bit"
        return WaveTable(float(plan.achieved_rate_hz), tab, spec.bits, coding, signed=True)

    def clock_report(
        self, rate_hz: float, opts: StreamOptions, settings: Mapping[str, Any]
    ) -> ClockReport:
        """The frame clock: divider, slots, cycles per bit, bit clock."""
        slot_bits = int(settings.get("slot_bits") or 32)
        plan = plan_i2s(
            rate_hz,
            sys_clock_hz=int(opts.sys_clock_hz or 0),
            slot_bits=slot_bits,
            tolerance_ppm=opts.rate_tolerance_ppm,
        )
        c = plan.clock
        kind = "fractional (1 system clock of bit-clock jitter)" if c.fractional else "integer"
        return ClockReport(
            plan.to_dict(),
            [
                f"requested  {rate_hz:g} frames/s at {c.sys_clock_hz} Hz system clock",
                f"achieved   {float(plan.frame_rate_hz):.6f} frames/s ({c.error_ppm:+.3f} ppm)",
                f"divider    {c.div_int} + {c.div_frac}/256, {kind}",
                f"frame      2 x {slot_bits}-bit slots, {CYCLES_PER_BIT} state-machine cycles "
                f"per bit ({c.cycles_per_sample} per frame)",
                f"bit clock  {float(plan.bit_clock_hz):.3f} Hz",
                f"CLKDIV     0x{c.clkdiv_register:08X}",
            ],
        )

    def clock_planner(self, rate_hz: float, settings: Mapping[str, Any]) -> Callable[[int], Any]:
        """The frame's divider x 128 cycles (two 32-bit slots, 2 cycles a bit)."""
        if settings.get("slot_bits") not in (None, 32, "32"):
            raise OptionError("streams use 32-bit slots; drop it", field="slot_bits")
        cycles = CYCLES_PER_BIT * 2 * STREAM_SLOT_BITS
        return lambda f: plan_clock(
            rate_hz, sys_clock_hz=f, tolerance_ppm=1e9, min_cycles=cycles, max_cycles=cycles
        )

    def clock_row(self, plan: Any) -> tuple[dict[str, Any], str]:
        """Divider and cycles per frame."""
        row = {"div_int": plan.div_int, "div_frac": plan.div_frac, "cycles": plan.cycles_per_sample}
        return row, f"divider {plan.div_int}, {plan.cycles_per_sample} cycle(s) per frame"


#: The registered object.
OUTPUT = I2sOutput()
