"""SPI DAC output: a 12-bit DAC of the common kind, written by a state machine each sample.

The frame is the write command of the common dual 12-bit SPI DACs (Microchip MCP4822 and
MCP4922 data sheets, "Write Command Register"; from memory, not yet checked against the
documents): 16 bits, most significant first, clocked in on SCK's rising edge while chip
select (CS, active low) is low::

    bit 15    A/B    0: DAC A, 1: DAC B
    bit 14    BUF    VREF input buffered (the parts with a VREF pin; ignored otherwise)
    bit 13    GA     1: output gain 1x, 0: 2x
    bit 12    SHDN   1: output on, 0: that channel shut down
    bits 11:0 the code, D11 first

The DAC takes the frame into its input register when CS rises.  With LDAC tied low its
output follows at once; with LDAC driven (``--latch``), both outputs take their input
registers when LDAC goes low, so the two channels of a stereo stream change together.

The state machine drives SCK and CS (and LDAC) by side-set, the header bits by SET and
the code by OUT, two cycles a bit (SCK low, then high), and counts out the rest of the
sample period after each frame (Y), so the DAC updates exactly once a sample period. The
codes are 12-bit, two to a FIFO word in bits 31:20 and 19:8 (a stereo word: A then B).

Timing the program keeps, in state-machine cycles, against the data sheets' minimums
(from memory; the MCP4822 family at 2.7..5.5 V, check your part's table): SCK high and
low 25 ns (20 MHz), CS fall to the first SCK rise 40 ns, data set-up 15 ns and hold 10 ns,
the last SCK rise to CS rise 15 ns, CS high 15 ns, CS rise to LDAC fall 40 ns, LDAC low
100 ns.  The planner picks the whole clock divider that meets every one of them and
``--sck-hz``.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass
from fractions import Fraction
from typing import Any

import numpy as np

from ladderpack._version import __version__
from ladderpack.asset import StreamAsset
from ladderpack.clock import ClockPlan
from ladderpack.emit import Content, binary, templates
from ladderpack.emit.c import (
    _count,
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
    play_method,
    queue_methods,
    set_clock_text,
    with_stored,
)
from ladderpack.emit.names import comment_safe, player_files
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
from ladderpack.pack import Packed, WordLayout, unpack
from ladderpack.pio import Instruction, Program, SideSet, StateMachineConfig, wrap_execctrl
from ladderpack.targets import get_target, target_of

__all__ = [
    "OUTPUT",
    "TIMING_NS",
    "SpiDacFormat",
    "SpiDacLayout",
    "SpiDacOutput",
    "SpiDacPlan",
    "SpiDacStereoLayout",
    "plan_spi",
    "spi_program",
    "spi_state_machine",
]

#: The data sheets' minimum times, ns (from memory: see the module's text).
TIMING_NS = {
    "sck_high": 25.0,
    "sck_low": 25.0,
    "cs_setup": 40.0,  # CS fall to the first SCK rise
    "data_setup": 15.0,
    "data_hold": 10.0,
    "cs_hold": 15.0,  # the last SCK rise to CS rise
    "cs_high": 15.0,
    "latch_setup": 40.0,  # CS rise to LDAC fall
    "latch_low": 100.0,
}

#: State-machine cycles the program gives each time (the pad, LDAC low, is planned).
TIMING_CYCLES = {
    "sck_high": 1,
    "sck_low": 1,
    "cs_setup": 1,
    "data_setup": 1,
    "data_hold": 1,
    "cs_hold": 2,
    "cs_high": 2,
    "latch_setup": 2,
}

#: Code width, and the FIFO word's two 12-bit slots.
BITS = 12
CODES_PER_WORD = 2

#: The C player's files.
HEADER_NAME, SOURCE_NAME = player_files("ladderpack_spi")


@dataclass(frozen=True)
class SpiDacFormat:
    """What goes on the wires: channels, the frame's constant bits, LDAC.

    Attributes
    ----------
    stereo : bool
        Two channels: A then B each sample (else A alone).
    gain : int
        Output gain, 1 or 2 (the frame's GA bit is 1 for 1x).
    buffered : bool
        The frame's BUF bit (VREF input buffered).
    latch : bool
        The state machine drives LDAC (on the GPIO after CS) once a sample, after the
        frames; else LDAC is tied low and each channel follows its CS rise.
    """

    stereo: bool = False
    gain: int = 1
    buffered: bool = False
    latch: bool = False

    def header(self, channel: int) -> int:
        """The frame's top four bits for `channel` (0: A, 1: B): A/B, BUF, GA, SHDN."""
        return (channel << 3) | (int(self.buffered) << 2) | (int(self.gain == 1) << 1) | 1

    def frame(self, channel: int, code: int) -> int:
        """The 16-bit frame that writes `code` to `channel`."""
        return (self.header(channel) << 12) | (int(code) & 0xFFF)

    @property
    def channels(self) -> int:
        """1 or 2."""
        return 2 if self.stereo else 1

    def to_dict(self) -> dict[str, object]:
        """Plain data (the sidecar's ``spi_dac`` entry, with the plan's)."""
        return {
            "channels": self.channels,
            "gain": self.gain,
            "buffered": self.buffered,
            "latch": self.latch,
            "headers": [self.header(c) for c in range(self.channels)],
        }


def _side(fmt: SpiDacFormat, *, cs: int, sck: int, ldac: int = 1) -> int:
    """A side-set value: SCK in bit 0, CS in bit 1, LDAC in bit 2 (with ``latch``)."""
    return sck | (cs << 1) | ((ldac << 2) if fmt.latch else 0)


def _frame(fmt: SpiDacFormat, channel: int, start: int) -> list[Instruction]:
    """One frame from CS low to the last data bit's SCK high (32 cycles), at `start`."""
    low, high = _side(fmt, cs=0, sck=0), _side(fmt, cs=0, sck=1)
    h = fmt.header(channel)
    bits = [(h >> k) & 1 for k in (3, 2, 1, 0)]
    ins = []
    for k, b in enumerate(bits):
        ins.append(Instruction("set", ("pins", b), side=low))  # the bit on SDI, SCK low
        if k < 3:
            ins.append(Instruction("nop", (), side=high))  # SCK high: the DAC takes it
    ins.append(Instruction("set", ("x", BITS - 1), side=high))  # SHDN's SCK high
    loop = start + len(ins)
    ins.append(Instruction("out", ("pins", 1), side=low))  # a code bit, SCK low
    ins.append(Instruction("jmp", ("x--", loop), side=high))  # SCK high
    return ins


def spi_program(fmt: SpiDacFormat, name: str = "spi_dac_out") -> Program:
    """The state-machine program: one frame a channel a sample period, then the pad.

    Side-set (not optional): SCK, CS on the next GPIO, and with ``fmt.latch`` LDAC on the
    one after.  ``set pins`` puts the header bits on SDI, ``out pins, 1`` the code's;
    out shift left, no autopull.  A ``pull`` takes a word of two codes: a stereo word is
    one sample (A, then B), a mono word two samples, so the mono program is two sample
    periods long, the second starting with a ``nop`` where the first pulls (equal
    periods; a conditional ``pull ifempty`` would do without it on the chip, but the
    emulator the tests run on honours it only with autopull on).  Y holds the pad (set by
    the player before the machine runs): after a sample's frames the machine counts
    Y + 1 cycles with CS high (and LDAC low, with ``latch``).
    """
    idle = _side(fmt, cs=1, sck=0)
    hold = _side(fmt, cs=0, sck=0)
    ins: list[Instruction] = []

    def tail() -> None:
        ins.append(Instruction("mov", ("x", "y"), side=hold))  # SCK low, CS held; x = pad
        if fmt.latch:
            ins.append(Instruction("nop", (), delay=1, side=idle))  # CS high, LDAC high
            ldac_low = _side(fmt, cs=1, sck=0, ldac=0)
            ins.append(Instruction("jmp", ("x--", len(ins)), side=ldac_low))  # both update
        else:
            ins.append(Instruction("jmp", ("x--", len(ins)), side=idle))  # CS high: written

    ins.append(Instruction("pull", (False, True), side=idle))
    if fmt.stereo:  # a word a sample: A in bits 31:20, B in 19:8
        ins += _frame(fmt, 0, len(ins))
        ins.append(Instruction("nop", (), side=hold))  # SCK low, CS held
        ins.append(Instruction("nop", (), delay=1, side=idle))  # CS high: A's input register
        ins += _frame(fmt, 1, len(ins))
        tail()
    else:  # a word two samples: the first frame, its pad, the second
        ins += _frame(fmt, 0, len(ins))
        tail()
        ins.append(Instruction("nop", (), side=idle))  # in the pull's place
        ins += _frame(fmt, 0, len(ins))
        tail()
    return Program(
        name,
        tuple(ins),
        wrap_target=0,
        wrap=len(ins) - 1,
        sideset=SideSet(3 if fmt.latch else 2),
        autopull=False,
        variant="spi-dac-latch" if fmt.latch else "spi-dac",
    )


def base_cycles(fmt: SpiDacFormat) -> int:
    """Cycles of a sample period besides the pad loop's Y + 1."""
    frames = 32 * fmt.channels + 3 * (fmt.channels - 1)  # and the CS-high gap between
    return 1 + frames + 1 + (2 if fmt.latch else 0)


@dataclass(frozen=True)
class SpiDacPlan:
    """The writer's clock: whole divider, cycles a sample and the pad.

    Attributes
    ----------
    sys_clock_hz : int
        System clock, Hz.
    requested_rate_hz : Fraction
        Sample rate asked for, Hz.
    divider : int
        State-machine clock divider (whole: no jitter).
    cycles_per_sample : int
        State-machine cycles a sample period.
    fmt : SpiDacFormat
        The wires the plan is for.
    fastest_divider : int
        The smallest divider the timing allows (for :attr:`max_rate_hz`).
    """

    sys_clock_hz: int
    requested_rate_hz: Fraction
    divider: int
    cycles_per_sample: int
    fmt: SpiDacFormat
    fastest_divider: int

    @property
    def fractional(self) -> bool:
        """Always False: the divider is a whole number."""
        return False

    @property
    def sck_hz(self) -> Fraction:
        """The SCK frequency, Hz (two cycles a bit)."""
        return Fraction(self.sys_clock_hz, 2 * self.divider)

    @property
    def achieved_rate_hz(self) -> Fraction:
        """Samples a second, exact."""
        return Fraction(self.sys_clock_hz, self.divider * self.cycles_per_sample)

    @property
    def error_ppm(self) -> float:
        """Achieved minus requested rate, ppm."""
        return float((self.achieved_rate_hz / self.requested_rate_hz - 1) * 1_000_000)

    @property
    def pad(self) -> int:
        """The Y register: the pad loop counts Y + 1 cycles."""
        return self.cycles_per_sample - base_cycles(self.fmt) - 1

    @property
    def cycle_ns(self) -> float:
        """One state-machine cycle, ns."""
        return 1e9 * self.divider / self.sys_clock_hz

    @property
    def max_rate_hz(self) -> Fraction:
        """The highest sample rate this timing allows: the fastest divider, no pad."""
        least = _least_cycles(self.fmt, self.fastest_divider, self.sys_clock_hz)
        return Fraction(self.sys_clock_hz, self.fastest_divider * least)

    @property
    def clock(self) -> ClockPlan:
        """The same setting as a state-machine :class:`~ladderpack.clock.ClockPlan`."""
        return ClockPlan(
            self.sys_clock_hz, self.requested_rate_hz, self.divider, 0, self.cycles_per_sample
        )

    def times_ns(self) -> dict[str, float]:
        """Each timed interval the program makes, ns (LDAC low: the pad's Y + 1 cycles)."""
        out = {k: c * self.cycle_ns for k, c in TIMING_CYCLES.items()}
        if self.fmt.latch:
            out["latch_low"] = (self.pad + 1) * self.cycle_ns
        else:
            del out["latch_setup"]
        return out

    def to_dict(self) -> dict[str, object]:
        """Plain data (the sidecar's ``spi_dac`` entry, with the format's)."""
        return {
            "sck_hz": round(float(self.sck_hz), 3),
            "cycles_per_bit": 2,
            "cycles_per_sample": self.cycles_per_sample,
            "pad": self.pad,
            "max_rate_hz": round(float(self.max_rate_hz), 3),
            "times_ns": {k: round(v, 3) for k, v in self.times_ns().items()},
        }


def _min_divider(sck_hz: int, sys_clock_hz: int) -> int:
    """The smallest whole divider with SCK at most `sck_hz` and every fixed time met."""
    d = max(1, math.ceil(Fraction(sys_clock_hz, 2 * sck_hz)))
    for key, cycles in TIMING_CYCLES.items():
        need = Fraction(TIMING_NS[key]) * sys_clock_hz / (Fraction(10**9) * cycles)
        d = max(d, math.ceil(need))
    return d


def _least_cycles(fmt: SpiDacFormat, divider: int, sys_clock_hz: int) -> int:
    """The fewest cycles a sample: the frames, and with LDAC its low time."""
    least = base_cycles(fmt) + 1
    if fmt.latch:  # LDAC low for the pad's Y + 1 cycles
        low = math.ceil(Fraction(TIMING_NS["latch_low"]) * sys_clock_hz / (10**9 * divider))
        least = base_cycles(fmt) + max(1, low)
    return least


def plan_spi(
    rate_hz: float | int | Fraction,
    fmt: SpiDacFormat,
    *,
    sck_hz: int = 10_000_000,
    sys_clock_hz: int = 125_000_000,
    rate_tolerance_ppm: float = 100.0,
) -> SpiDacPlan:
    """Clock the writer: SCK no faster than `sck_hz`, every time met, frames at `rate_hz`.

    Of the whole dividers from the smallest allowed up to four times it, the one whose
    whole number of cycles a sample (at least what the frames take) comes nearest the
    rate, then the fastest.

    Raises
    ------
    OptionError
        For a rate above what the wires carry.

    Examples
    --------
    >>> p = plan_spi(25000, SpiDacFormat(), sck_hz=10_000_000)
    >>> p.divider, p.cycles_per_sample, p.error_ppm
    (8, 625, 0.0)
    """
    if not isinstance(sck_hz, int) or isinstance(sck_hz, bool) or sck_hz <= 0:
        raise OptionError(f"must be a whole number of Hz > 0, got {sck_hz!r}", field="sck_hz")
    rate = Fraction(rate_hz)
    divider = _min_divider(sck_hz, sys_clock_hz)
    least = _least_cycles(fmt, divider, sys_clock_hz)
    fastest = Fraction(sys_clock_hz, divider * least)
    if rate > fastest * (1 + Fraction(rate_tolerance_ppm) / 1_000_000):
        raise OptionError(
            f"{float(rate):.6g} samples a second is more than the wires carry: at most "
            f"{float(fastest):.3f} with {fmt.channels} frame(s) a sample at SCK "
            f"{float(Fraction(sys_clock_hz, 2 * divider)):.0f} Hz",
            field="rate_hz",
        )
    best: tuple[Fraction, int, int] | None = None
    for d in range(divider, 4 * divider + 1):
        c = max(_least_cycles(fmt, d, sys_clock_hz), round(Fraction(sys_clock_hz, d) / rate))
        err = abs(Fraction(sys_clock_hz, d * c) - rate)
        if best is None or err < best[0]:
            best = (err, d, c)
        if err == 0:
            break
    assert best is not None
    return SpiDacPlan(sys_clock_hz, rate, best[1], best[2], fmt, divider)


def spi_state_machine(
    program: Program,
    plan: SpiDacPlan,
    *,
    data_pin: int,
    clock_pin: int,
    gpio_base: int = 0,
) -> StateMachineConfig:
    """The state machine's registers (program loaded at address 0).

    SHIFTCTRL: TX FIFO joined (bit 30), PULL_THRESH 24 (bits 29:25; the program pulls
    after its two codes either way), out shift left, no autopull.  PINCTRL:
    SIDESET_COUNT 2 or 3 from SCK, SET_COUNT and OUT_COUNT 1 on SDI (RP2040 datasheet,
    PIO registers).
    """
    sdi, sck = data_pin - gpio_base, clock_pin - gpio_base
    shiftctrl = (1 << 30) | ((BITS * CODES_PER_WORD) << 25)
    pinctrl = (
        (program.sideset.field_bits << 29) | (1 << 26) | (1 << 20) | (sck << 10) | (sdi << 5) | sdi
    )
    return StateMachineConfig(
        plan.clock.clkdiv_register,
        wrap_execctrl(program),
        shiftctrl,
        pinctrl,
        data_pin,
        1,
        False,
        gpio_base,
        sideset_base=clock_pin,
        sideset_count=program.sideset.count,
    )


@dataclass(frozen=True)
class SpiDacLayout(WordLayout):
    """A mono stream's words: two 12-bit codes a word, the first in bits 31:20.

    Packed as a ladder's words are (out shift left); the record names the output.
    """

    def to_dict(self) -> dict[str, object]:
        """The word layout's record, with the output's name."""
        return {**super().to_dict(), "output": "spi-dac", "channels": "mono"}


@dataclass(frozen=True)
class SpiDacStereoLayout:
    """A stereo stream's words: one a sample, channel A in bits 31:20, B in 19:8."""

    bits: int = BITS

    @property
    def channels(self) -> int:
        """Two."""
        return 2

    @property
    def words_per_frame(self) -> int:
        """One word a sample."""
        return 1

    def words_for(self, frames: int) -> int:
        """Words of `frames` samples."""
        return int(frames)

    def pack_codes(self, codes: np.ndarray) -> np.ndarray:
        """Words of interleaved codes (A, B, A, B, ...)."""
        c = np.asarray(codes, dtype=np.uint32).reshape(-1, 2)
        return ((c[:, 0] << np.uint32(20)) | (c[:, 1] << np.uint32(8))).astype(np.uint32)

    def unpack_words(self, words: np.ndarray) -> np.ndarray:
        """(samples, 2) codes of the words."""
        w = np.asarray(words, dtype=np.uint32)
        return np.stack([(w >> np.uint32(20)) & 0xFFF, (w >> np.uint32(8)) & 0xFFF], axis=1)

    def to_dict(self) -> dict[str, object]:
        """Plain-data description (the sidecar's ``layout``)."""
        return {
            "output": "spi-dac",
            "bits": self.bits,
            "channels": "stereo",
            "words_per_frame": 1,
            "sample_order": "channel A in bits 31:20, B in bits 19:8",
        }


def _mono_layout() -> SpiDacLayout:
    return SpiDacLayout(BITS, shift_right=False, per_word=CODES_PER_WORD)


# -- files --------------------------------------------------------------------------------


def _spi(asset: StreamAsset) -> dict[str, Any]:
    return dict(asset.stats["spi_dac"])


def _fmt(asset: StreamAsset) -> SpiDacFormat:
    s = _spi(asset)
    return SpiDacFormat(s["channels"] == 2, int(s["gain"]), bool(s["buffered"]), bool(s["latch"]))


def _defines(asset: StreamAsset) -> list[tuple[str, str, str]]:
    p, sm, s, fmt = asset.clock, asset.state_machine, _spi(asset), _fmt(asset)
    rate = p.achieved_rate_hz
    sck = int(sm.sideset_base or 0)
    return [
        ("BITS", "12u", "DAC code width"),
        ("CHANNELS", f"{fmt.channels}u", "1: DAC A; 2: A then B each sample"),
        ("SAMPLE_COUNT", f"{asset.sample_count // fmt.channels}u", "samples (frames a channel)"),
        ("WORD_COUNT", f"{asset.word_count}u", "32-bit FIFO words: two codes each"),
        ("HEADER_A", f"0x{fmt.header(0):X}u", "A/B BUF GA SHDN of channel A's frames"),
        ("HEADER_B", f"0x{fmt.header(1):X}u", "the same for channel B"),
        ("LATCH", "1" if fmt.latch else "0", "1: LDAC driven after each sample's frames"),
        ("IDLE_CODE", f"{asset.idle_code}u", "code held when nothing plays"),
        ("LOOP", "1" if asset.loop else "0", "1: a loop, with an intro and an outro"),
        ("INTRO_WORD_COUNT", f"{_count(asset.intro)}u", ""),
        ("OUTRO_WORD_COUNT", f"{_count(asset.outro)}u", ""),
        ("REQUESTED_RATE_HZ", f"{float(p.requested_rate_hz)!r}", "sample rate asked for"),
        ("RATE_HZ", f"{float(rate)!r}", "achieved sample rate"),
        ("RATE_NUM", f"{rate.numerator}ull", "achieved rate = RATE_NUM / RATE_DEN Hz"),
        ("RATE_DEN", f"{rate.denominator}ull", ""),
        ("SCK_HZ", f"{s['sck_hz']!r}", "SCK frequency: two state-machine cycles a bit"),
        ("SYS_CLOCK_HZ", f"{p.sys_clock_hz}u", "system clock the plan assumes"),
        ("CLKDIV_INT", f"{p.div_int}u", "whole clock divider: no jitter"),
        ("CYCLES_PER_SAMPLE", f"{p.cycles_per_sample}u", "state-machine cycles a sample"),
        ("PAD", f"{s['pad']}u", "Y: the pad loop counts Y + 1 cycles"),
        ("DATA_PIN", f"{sm.out_base}u", "SDI GPIO"),
        ("CLOCK_PIN", f"{sck}u", "SCK GPIO; CS on the next, LDAC (latch) on the one after"),
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
        f"{n}_words" if asset.compressed is None else "NULL",
        f"{P}_WORD_COUNT",
        intro,
        f"{P}_INTRO_WORD_COUNT",
        outro,
        f"{P}_OUTRO_WORD_COUNT",
        f"{n}_program",
        f"{P}_PROGRAM_LENGTH",
        f"{P}_PROGRAM_WRAP_TARGET",
        f"{P}_PROGRAM_WRAP",
        f"{P}_DATA_PIN",
        f"{P}_CLOCK_PIN",
        f"({P}_CLKDIV_INT & 0xFFFFu)",
        f"{P}_PAD",
        f"{P}_CHANNELS",
        f"{P}_LATCH",
        f"{P}_IDLE_CODE",
        f"{P}_LOOP",
        f"{P}_SYS_CLOCK_HZ",
        f"{P}_GPIO_BASE",
        f"&{n}_lossless" if asset.lossless is not None else "NULL",
    ]
    return init_macro("lp_spi_stream_t", HEADER_NAME, f"{P}_SPI_INIT", fields)


def render_header(asset: StreamAsset) -> str:
    """Return the C header of an SPI DAC stream."""
    return fifo_stream_header(asset, _defines(asset), _init_macro(asset))


def source_lines(asset: StreamAsset) -> Iterator[str]:
    """The C source of an SPI DAC stream, line by line."""
    return fifo_stream_source_lines(
        asset,
        (
            "/* Codes in play order, two a word (bits 31:20, then 19:8; stereo: A then B); const,",
            " * so they stay in flash, and word-aligned for DMA. */",
        ),
        "/* State-machine program (side-set: SCK, CS, and LDAC with a latch):",
    )


def render_source(asset: StreamAsset) -> str:
    """Return the C source of an SPI DAC stream."""
    return b"".join(chunked(source_lines(asset))).decode()


def render_pio(asset: StreamAsset) -> str:
    """Return the ``.pio`` text: the program plus its configuration as comments."""
    p, sm, s, fmt = asset.clock, asset.state_machine, _spi(asset), _fmt(asset)
    sck = int(sm.sideset_base or 0)
    pins = f"SCK GPIO {sck}, CS GPIO {sck + 1}" + (f", LDAC GPIO {sck + 2}" if fmt.latch else "")
    notes = [
        f"; Generated by ladderpack {__version__} from "
        f"{comment_safe(asset.source.get('file', 'generated signal'))}. Do not edit.",
        f"; SPI DAC writer: SDI on GPIO {sm.out_base} (out and set), side-set {pins}",
        "; two 12-bit codes a FIFO word (bits 31:20 then 19:8); out shift left, no autopull, "
        "PULL_THRESH 24, TX FIFO joined",
        f"; before it runs: Y = {s['pad']} (pull, then mov y, osr)",
        f"; clock divider {p.div_int} at {p.sys_clock_hz} Hz: SCK {s['sck_hz']:g} Hz, "
        f"{p.cycles_per_sample} cycles a sample -> {float(p.achieved_rate_hz):.6f} Hz",
    ]
    return "\n".join(notes) + "\n\n" + asset.pio_program.source()


_MP_TEMPLATE = """\
# Generated by ladderpack {version} from {source}.
# Do not edit: regenerate it instead.
#
# Wiring: SDI on GPIO {sdi}, SCK on GPIO {sck}, CS on GPIO {cs}{ldac_wiring}, the DAC's
# ground to the board's. Power the DAC from 3.3 V (or shift the levels: the GPIOs are 3.3 V
# parts). The DAC's output drives only a light load: buffer it.
#
# Use:  import {name}; {name}.play()            (blocks until the stream ends)
#       (Ctrl-C or stop() ramps a stream down to IDLE_CODE)
#       p = {name}.Player(); p.hold_code(2048)  (a DC level: the DAC holds it)
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
CHANNELS = {channels}  # 1: DAC A; 2: A then B each sample
WORD_COUNT = {words}  # two codes a word: bits 31:20, then 19:8
IDLE_CODE = {idle}
RATE_HZ = {rate!r}
SCK_HZ = {sck_hz!r}
SYS_CLOCK_HZ = {sys_clock}
CLKDIV_REG = 0x{clkdiv:08X}
CYCLES_PER_SAMPLE = {cycles}
PAD = {pad}  # Y: the pad loop counts Y + 1 cycles
DATA_PIN = {sdi}
CLOCK_PIN = {sck}  # CS on CLOCK_PIN + 1, LDAC (LATCH) on CLOCK_PIN + 2
LATCH = {latch}
GPIO_BASE = {gpio_base}
LOOP = {loop}
BIN_FILE = {bin_file!r}
CHUNK_WORDS = {chunk_words}
{words_literal}
INTRO = {intro}
OUTRO = {outro}
RAMP_SAMPLES = 64  # a stream stopped early ramps to IDLE_CODE over this many samples

{registers}


@rp2.asm_pio(
    out_init=rp2.PIO.OUT_LOW,
    set_init=rp2.PIO.OUT_LOW,
    sideset_init={sideset_init},
    out_shiftdir=rp2.PIO.SHIFT_LEFT,
    autopull=False,
    pull_thresh=24,
    fifo_join=rp2.PIO.JOIN_TX,
)
def spi_program() -> None:
{body}


def _word(a: int, b: int) -> int:
    return (a << 20) | (b << 8)


def _codes_of(w: int) -> "list[int]":
    return [(w >> 20) & 0xFFF, (w >> 8) & 0xFFF]


class Player:
    \"\"\"Writes the stream's frames on state machine sm_id, fed by DMA from two buffers.

    A stream ends on its own ramp to the idle code; stop() or Ctrl-C on a stream ramps
    down at once from the codes last sent; stop() on a loop finishes the current pass and
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
        self.sm = rp2.StateMachine(sm_id, spi_program, freq=SYS_CLOCK_HZ // 256,
                                   out_base=Pin(DATA_PIN), set_base=Pin(DATA_PIN),
                                   sideset_base=Pin(CLOCK_PIN))
        self.pio = _PIO_BASE[sm_id // 4]
        self.idx = sm_id % 4
        self.reg = self.pio + _SM_STRIDE * self.idx  # add an SM0 offset
        mem32[self.reg + _SM0_CLKDIV] = CLKDIV_REG  # the exact whole divider
        self.origin = mem32[self.reg + _SM0_ADDR]  # the program's load address
        self.txf = self.pio + _TXF0 + _TXF_STRIDE * self.idx
        self.dma = rp2.DMA()
        self.ctrl = self.dma.pack_ctrl(size=2, inc_read=True, inc_write=False,
                                       treq_sel=_DREQ_PIO_TX0[sm_id // 4] + self.idx)
        self.bufs = [array.array("I", bytes(4 * chunk_words)) for _ in range(2)]
        self.running = False
        self.sent, self.cur_n = 0, 0
        self._start()
        self._go()  # waits at its first pull, CS high

{queue}    def _go(self) -> None:
        mem32[self.pio + _FDEBUG] = 1 << (_TXSTALL_LSB + self.idx)  # clear TXSTALL
        self.sm.active(1)

    def hold_code(self, code: int) -> None:
        \"\"\"Write one code (0..4095, every channel) while nothing plays; returns after it.\"\"\"
        if not 0 <= code <= 4095:
            raise ValueError("a 12-bit DAC takes codes 0..4095")
        mem32[self.pio + _FDEBUG] = 1 << (_TXSTALL_LSB + self.idx)
        self.sm.put(_word(code, code))
        while not self._drained():
            pass

    def stop(self) -> None:
        \"\"\"Ask a running play() to finish (safe to call from an interrupt handler).\"\"\"
        self.running = False

    def _ramp_down(self) -> None:
        # where the stream is: the last word the DMA handed to the FIFO
        done = self.cur_n
        if self.dma.active():
            self.dma.active(0)
            done = self.cur_n - self.dma.count  # type: ignore[attr-defined]
        sent = self.sent + done
        if 0 < sent < WORD_COUNT:
            import math

            last = _codes_of(self._word_at(sent - 1))
            start = last if CHANNELS == 2 else [last[1]]
            ramp = []
            for k in range(1, RAMP_SAMPLES + 1):
                g = (1 + math.cos(math.pi * k / RAMP_SAMPLES)) / 2
                ramp.extend(IDLE_CODE + int((c - IDLE_CODE) * g) for c in start)
            words = array.array("I", [_word(ramp[k], ramp[k + 1]) for k in range(0, len(ramp), 2)])
            self._send(words, len(words))  # after the words already in the FIFO
        while not self._drained():
            pass

    def _word_at(self, k: int) -> int:
        if WORDS is not None:
            return WORDS[k]
        if self.cur_n and 0 <= k - self.sent < self.cur_n:
            return self.cur[k - self.sent]
        with open(self.path, "rb") as f:
            f.seek(4 * k)
            b = f.read(4)
        return b[0] | b[1] << 8 | b[2] << 16 | b[3] << 24

{play}{feed}
    def close(self) -> None:
        \"\"\"Release the DMA channel and the state machine (CS stays high).\"\"\"
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
    """Return the MicroPython module of an SPI DAC stream.

    Parameters
    ----------
    asset : StreamAsset
        The stream.
    embed : bool
        Embed the words as an ``array('I', ...)`` literal (short streams only).
    """
    p, sm, s, fmt = asset.clock, asset.state_machine, _spi(asset), _fmt(asset)
    sck = int(sm.sideset_base or 0)
    words_literal = (
        ("WORDS = " + _literal(asset.packed)) if embed else "WORDS = None  # read from BIN_FILE"
    )
    side = ["rp2.PIO.OUT_LOW", "rp2.PIO.OUT_HIGH"] + (["rp2.PIO.OUT_HIGH"] if fmt.latch else [])
    text = _MP_TEMPLATE.format(
        registers=pio_registers_text(target_of(asset.options)),
        version=__version__,
        source=comment_safe(asset.source.get("file", "generated signal")),
        name=asset.name,
        sdi=sm.out_base,
        sck=sck,
        cs=sck + 1,
        ldac_wiring=f", LDAC on GPIO {sck + 2}" if fmt.latch else " (LDAC tied low)",
        channels=fmt.channels,
        words=asset.word_count,
        idle=asset.idle_code,
        rate=float(p.achieved_rate_hz),
        sck_hz=float(s["sck_hz"]),
        sys_clock=p.sys_clock_hz,
        clkdiv=sm.clkdiv,
        cycles=p.cycles_per_sample,
        pad=s["pad"],
        latch=fmt.latch,
        gpio_base=sm.gpio_base,
        loop=asset.loop,
        bin_file=f"{asset.name}.bin",
        chunk_words=int(asset.options.get("chunk_words", 1024)),
        words_literal=words_literal,
        intro=_literal(asset.intro),
        outro=_literal(asset.outro),
        sideset_init="(" + ", ".join(side) + ")",
        body="\n".join(mp_program_body(asset.pio_program)),
        feed=feed_methods("self._ramp_down()  # a stream stops at once, ramping down"),
        queue=queue_methods("sample"),
        play=play_method("sample"),
    )
    if asset.compressed is not None:
        text = with_stored(
            text,
            asset,
            stop_line="self._ramp_down()  # a stream stops at once, ramping down",
            lossless_cfg="[0, 12, 2, 0, 0, 0, channels, 2, 12]",  # a code a slot, shift left
            word_method="_word_at",
        )
    return text + set_clock_text(asset)


# -- the registered object -------------------------------------------------------------


def _format(opts: StreamOptions) -> SpiDacFormat:
    o: Any = opts
    return SpiDacFormat(bool(opts.stereo), int(o.dac_gain), bool(o.vref_buffer), bool(o.latch))


def _pins(opts: StreamOptions) -> tuple[int, ...]:
    """SDI, SCK, CS (and LDAC with a latch)."""
    sck = int(opts.bit_clock_pin if opts.bit_clock_pin is not None else opts.data_pin + 1)
    latch = bool(getattr(opts, "latch", False))
    return (opts.data_pin, sck, sck + 1, *((sck + 2,) if latch else ()))


def _lines(pins: tuple[int, ...]) -> str:
    names = ("SDI", "SCK", "CS", "LDAC")
    each = [f"{n} GPIO {p}" for n, p in zip(names, pins, strict=False)]
    return "the SPI lines (" + ", ".join(each) + ")"


class SpiDacOutput:
    """A 12-bit SPI DAC (one or two channels) written by a state machine each sample."""

    name = "spi-dac"

    def default_bits(self) -> int:
        """12 bits: the DAC's."""
        return BITS

    def check_bits(self, bits: int) -> None:
        """12 bits."""
        if bits != BITS:
            raise OptionError(f"the SPI DAC frame carries 12-bit codes, got {bits}", field="bits")

    def check_options(self, opts: StreamOptions) -> None:
        """12 bits, an idle code the DAC has, SCK and gain it takes, its pins on the chip."""
        self.check_bits(opts.bits)
        if opts.idle_code > 4095:
            raise OptionError(
                f"must be 0..4095 for 12 bits, got {opts.idle_code}", field="idle_code"
            )
        if opts.compress == "adpcm":
            raise OptionError(
                "IMA ADPCM codes 16-bit samples: a 12-bit SPI DAC stream takes --compress "
                "lossless (every code kept) or none",
                field="compress",
            )
        o: Any = opts
        if o.dac_gain not in (1, 2):
            raise OptionError(f"must be 1 or 2, got {o.dac_gain!r}", field="dac_gain")
        if opts.bit_clock_pin is None:
            object.__setattr__(opts, "bit_clock_pin", opts.data_pin + 1)
        pins = _pins(opts)
        if opts.data_pin in pins[1:]:
            raise OptionError(
                f"the data pin GPIO {opts.data_pin} is also SCK, CS or LDAC (GPIO "
                f"{', '.join(str(p) for p in pins[1:])})",
                field="bit_clock_pin",
            )
        count = int(opts.gpio_count or 0)
        if max(pins) >= count:
            raise OptionError(
                f"{_lines(pins)} need GPIO {max(pins)}, but the target has GPIO 0..{count - 1}"
                + get_target(opts.target).more_pins_hint(max(pins)),
                field="bit_clock_pin" if max(pins[1:]) >= count else "data_pin",
            )
        self.gpio_base(opts)
        plan_spi(  # a rate the wires cannot carry is refused here, before any work
            opts.rate_hz,
            _format(opts),
            sck_hz=int(o.sck_hz),
            sys_clock_hz=int(opts.sys_clock_hz or 0),
            rate_tolerance_ppm=opts.rate_tolerance_ppm,
        )

    def gpio_base(self, opts: StreamOptions) -> int:
        """The PIO GPIO base reaching every line."""
        pins = _pins(opts)
        lo, hi = min(pins), max(pins)
        return get_target(opts.target).gpio_window(
            lo, hi - lo + 1, int(opts.gpio_count or 0), what=_lines(pins), field="data_pin"
        )

    def recorded_options(self, opts: StreamOptions, recorded: dict[str, Any]) -> dict[str, Any]:
        """The generic record."""
        return recorded

    def plan(self, opts: StreamOptions, ident: str) -> OutputPlan:
        """The writer's divider and pad, two codes a word, its program and state machine."""
        fmt = _format(opts)
        o: Any = opts
        plan = plan_spi(
            opts.rate_hz,
            fmt,
            sck_hz=int(o.sck_hz),
            sys_clock_hz=int(opts.sys_clock_hz or 0),
            rate_tolerance_ppm=opts.rate_tolerance_ppm,
        )
        program = spi_program(fmt, name=f"{ident}_spi")
        sm = spi_state_machine(
            program,
            plan,
            data_pin=opts.data_pin,
            clock_pin=int(opts.bit_clock_pin or 0),
            gpio_base=self.gpio_base(opts),
        )
        spw = CODES_PER_WORD // fmt.channels  # samples (frames of every channel) a word
        return OutputPlan(
            layout=SpiDacStereoLayout() if fmt.stereo else _mono_layout(),
            clock=plan.clock,
            samples_per_word=spw,
            per_word=spw,
            whole_frames=fmt.stereo,
            idle_code=opts.idle_code,
            channel_idle=opts.idle_code,
            code_bits=BITS,
            program=program,
            sm=sm,
            setup=plan,
        )

    def stats(self, plan: OutputPlan, opts: StreamOptions) -> dict[str, Any]:
        """The writer's plan, the frame's bits and the pins."""
        spi: SpiDacPlan = plan.setup
        pins = _pins(opts)
        out: dict[str, Any] = {
            "spi_dac": {
                **spi.to_dict(),
                **spi.fmt.to_dict(),
                "data_pin": pins[0],
                "clock_pin": pins[1],
                "chip_select_pin": pins[2],
                "latch_pin": pins[3] if spi.fmt.latch else None,
            }
        }
        if abs(spi.error_ppm) > opts.rate_tolerance_ppm:  # the divider is always whole
            out["warnings"] = [
                f"the SPI DAC's sample rate is {spi.error_ppm:+.1f} ppm off the request (the "
                "writer's divider is a whole number); 'clock --find-sys-clock --output "
                "spi-dac' finds system clocks where it is exact"
            ]
        return out

    def variant(self, plan: OutputPlan) -> str:
        """The writer program's variant (``spi-dac`` or ``spi-dac-latch``)."""
        assert plan.program is not None
        return plan.program.variant

    def compress(self, packed: Packed, opts: StreamOptions) -> Compressed:
        """``--compress lossless``: the codes of every slot (A and B alternate in stereo).

        Each channel's codes are predicted from its own; the padding slot of a mono
        stream's last word too, so the players' packing gives the words exactly. Blocks
        of whole words, no longer than a MicroPython player's buffer.
        """
        if opts.compress != "lossless":
            return uncompressed(packed)
        from ladderpack.compress import encode_lossless

        lay = packed.layout
        stereo = isinstance(lay, SpiDacStereoLayout)
        if isinstance(lay, SpiDacStereoLayout):
            codes = lay.unpack_words(packed.words).ravel()
        else:
            codes = unpack(packed.words, lay).codes
        block = CODES_PER_WORD * max(1, min(512, int(opts.chunk_words)))
        coded = encode_lossless(
            np.asarray(codes, dtype=np.int64),
            BITS,
            block_samples=block,
            channels=2 if stereo else 1,
        )
        return Compressed(coded, None, packed)

    def summary(self, asset: StreamAsset) -> dict[str, Any]:
        """Stereo or mono, SCK, the frame's bits and the pins."""
        s = asset.stats["spi_dac"]
        pins = [s["data_pin"], s["clock_pin"], s["chip_select_pin"]]
        return {
            "stereo": s["channels"] == 2,
            "spi_dac": {
                "sck_hz": s["sck_hz"],
                "gain": s["gain"],
                "buffered": s["buffered"],
                "latch": s["latch"],
                "max_rate_hz": s["max_rate_hz"],
                "pins": pins + ([s["latch_pin"]] if s["latch"] else []),
            },
        }

    def summary_lines(self, summary: Mapping[str, Any]) -> SummaryLines:
        """The width and channels, the wires; counted in samples."""
        s = summary["spi_dac"]
        stereo = bool(summary.get("stereo"))
        pins = s["pins"]
        names = ("SDI", "SCK", "CS", "LDAC")
        wires = ", ".join(f"{n} GPIO {p}" for n, p in zip(names, pins, strict=False))
        line = (
            f"SCK {s['sck_hz']:.0f} Hz, gain {s['gain']}x"
            + (", VREF buffered" if s["buffered"] else "")
            + f" (at most {s['max_rate_hz']:.0f} samples/s); {wires}"
            + ("" if s["latch"] else ", LDAC tied low")
        )
        kind = f"{summary['bits']}-bit SPI DAC, " + (
            "channels A and B" + (" latched together" if s["latch"] else "")
            if stereo
            else "channel A"
        )
        return SummaryLines(kind, "sample", cycles_divider(summary, "sample"), [("spi", line)])

    def sidecar_blocks(self, asset: StreamAsset) -> dict[str, Any]:
        """The writer program and the state machine's registers."""
        return state_machine_blocks(asset)

    def files(self, asset: StreamAsset, *, embed: bool) -> dict[str, Content]:
        """Words, C header and source, MicroPython module, PIO source, the SPI player."""
        n, stored = asset.name, asset.compressed
        return {  # a compressed stream's .bin is its stored form, read block by block
            f"{n}.bin": binary.render_chunks(asset.packed) if stored is None else stored.to_bytes(),
            f"{n}.h": render_header(asset).encode(),
            f"{n}.c": chunked(source_lines(asset)),
            f"{n}.py": render_micropython(asset, embed=embed and stored is None).encode(),
            f"{n}.pio": render_pio(asset).encode(),
            **templates.player("ladderpack_spi"),
        }

    def preview_model(self, layout: Mapping[str, Any], sidecar: Mapping[str, Any]) -> PreviewModel:
        """The DAC's codes: an ideal 12-bit DAC, 0..Vref x gain."""
        if layout.get("channels") == "stereo":
            frames = SpiDacStereoLayout()

            def decode2(words: np.ndarray, count: int, channel: int) -> np.ndarray:
                return np.asarray(frames.unpack_words(words[:count])[:, channel])

            def stored2(data: bytes, comp: Mapping[str, Any]) -> np.ndarray:
                from ladderpack.compress import decode_stored

                return frames.pack_codes(decode_stored(data, comp, bits=BITS))

            return PreviewModel(frames, BITS, 2, 4096, 4095 / 2, False, decode2, stored2)
        lay = _mono_layout()

        def decode(words: np.ndarray, count: int, channel: int) -> np.ndarray:
            return np.asarray(unpack(words, lay, count).codes)

        def stored(data: bytes, comp: Mapping[str, Any]) -> np.ndarray:
            from ladderpack.compress import decode_stored
            from ladderpack.pack import pack
            from ladderpack.quantize import Codes

            codes = decode_stored(data, comp, bits=BITS).astype(np.uint16)
            return pack(Codes(codes, BITS), lay).words

        return PreviewModel(lay, BITS, 1, 4096, 4095 / 2, False, decode, stored)

    def wave_table(self, spec: WaveTableSpec) -> WaveTable:
        """Not offered: stream a tone (``tone --output spi-dac --loop``) instead."""
        raise OptionError(
            "an SPI DAC plays streams; make a looped tone with 'tone --output spi-dac --loop'",
            field="output",
        )

    def clock_report(
        self, rate_hz: float, opts: StreamOptions, settings: Mapping[str, Any]
    ) -> ClockReport:
        """The writer's divider, SCK and the cycles a sample takes."""
        o: Any = opts
        fmt = _format(opts)
        plan = plan_spi(
            rate_hz,
            fmt,
            sck_hz=int(o.sck_hz),
            sys_clock_hz=int(opts.sys_clock_hz or 0),
            rate_tolerance_ppm=opts.rate_tolerance_ppm,
        )
        d = {
            "requested_rate_hz": rate_hz,
            "achieved_rate_hz": float(plan.achieved_rate_hz),
            "error_ppm": round(plan.error_ppm, 6),
            "sys_clock_hz": plan.sys_clock_hz,
            "divider": plan.divider,
            **plan.to_dict(),
        }
        return ClockReport(
            d,
            [
                f"requested  {rate_hz:g} samples/s at {plan.sys_clock_hz} Hz system clock",
                f"achieved   {d['achieved_rate_hz']:.6f} Hz ({plan.error_ppm:+.3f} ppm)",
                f"wires      SCK {float(plan.sck_hz):.0f} Hz, divider {plan.divider} (integer: "
                "no jitter), 2 cycles a bit",
                f"sample     {fmt.channels} frame(s) of 16 bits: {base_cycles(fmt) + 1} cycles "
                f"at least, {plan.cycles_per_sample} planned (pad Y = {plan.pad}); at most "
                f"{float(plan.max_rate_hz):.0f} samples/s",
            ],
        )

    def clock_planner(self, rate_hz: float, settings: Mapping[str, Any]) -> Callable[[int], Any]:
        """The writer's whole divider and pad at each clock (mono, no latch)."""
        return lambda f: plan_spi(rate_hz, SpiDacFormat(), sys_clock_hz=f, rate_tolerance_ppm=1e9)

    def clock_row(self, plan: Any) -> tuple[dict[str, Any], str]:
        """Divider, cycles a sample and SCK."""
        row = {
            "div_int": plan.divider,
            "div_frac": 0,
            "cycles": plan.cycles_per_sample,
            "sck_hz": float(plan.sck_hz),
        }
        return row, f"divider {plan.divider}, {plan.cycles_per_sample} cycle(s) per sample"


#: The registered object.
OUTPUT = SpiDacOutput()
