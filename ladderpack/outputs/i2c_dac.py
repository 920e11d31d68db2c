"""I2C DACs: the bytes of one update, and the bus time that bounds the update rate.

The command set is that of common 12-bit I2C DACs (Microchip MCP4725 datasheet, DS22039,
"Write commands"; from memory, and the same bytes independent drivers send): after the
address byte (7-bit address, R/W = 0 for a write),

* ``fast``: two bytes, ``0 0 PD1 PD0 D11 D10 D9 D8`` then ``D7 .. D0``;
* ``register`` (write DAC register): three bytes, ``0 1 0 x x PD1 PD0 x`` then
  ``D11 .. D4`` then ``D3 D2 D1 D0 0 0 0 0``.

PD1 PD0 = 00 is normal operation (the others power the output down into a load).  The
output is ``Vref x code / 4096`` (the MCP4725's reference is its supply).

Each byte on the bus is eight data bits and an acknowledge bit, and a write is framed by
a START and a STOP condition (NXP UM10204, "I2C-bus specification and user manual"); an
update of B bytes (the address included) takes at least ``9 B + 3`` bit times, so
``rate <= bus_hz / (9 B + 3)``.  The state-machine writer takes four cycles a bit and
must meet every minimum time of UM10204 Table 10 (SCL low and high, START hold, STOP
set-up, data set-up, bus free), not only the SCL frequency (:func:`min_divider`): at
125 MHz its fast writes reach 3096 updates a second at 100 kHz, 11817 at 400 kHz and
30281 at 1 MHz (Fast-mode Plus, if the DAC supports it; the MCP4725 also has a 3.4 MHz
high-speed mode not used here).
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass
from fractions import Fraction
from typing import Any

import numpy as np

from ladderpack._version import __version__
from ladderpack.asset import StreamAsset
from ladderpack.clock import ClockPlan
from ladderpack.defaults import I2C_BUS_SPEEDS_HZ, I2C_DAC_COMMANDS
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

__all__ = [
    "BUS_SPEEDS_HZ",
    "BUS_TIMING_NS",
    "COMMANDS",
    "OUTPUT",
    "I2cDacFormat",
    "I2cDacLayout",
    "I2cDacOutput",
    "I2cDacPlan",
    "bus_bits_per_update",
    "codes_for_volts",
    "i2c_state_machine",
    "max_update_rate_hz",
    "min_divider",
    "plan_writer",
    "render_header",
    "render_micropython",
    "render_pio",
    "render_source",
    "render_source_chunks",
    "table_files",
    "writer_cycles",
    "writer_program",
    "writer_words",
]


#: Standard-mode, Fast-mode and Fast-mode Plus bus clocks (UM10204), Hz.
BUS_SPEEDS_HZ = (100_000, 400_000, 1_000_000)

#: Command kinds and their data bytes after the address byte.
COMMANDS = {"fast": 2, "register": 3}

#: Bit times besides the bytes: START, STOP and the bus-free time before the next START.
FRAME_BITS = 3


@dataclass(frozen=True)
class I2cDacFormat:
    """How a code becomes the bytes of one DAC update.

    Attributes
    ----------
    address : int
        7-bit device address (an MCP4725 answers at 0x60..0x67 by its A0 pin and part
        code).
    command : {'fast', 'register'}
        Fast write (2 data bytes) or write DAC register (3).
    bits : int
        DAC width (12).
    power_down : int
        PD1 PD0 bits, 0 (normal operation) .. 3.

    Examples
    --------
    >>> f = I2cDacFormat(0x60, "register")
    >>> [hex(b) for b in f.update_bytes(0xABC)]
    ['0xc0', '0x40', '0xab', '0xc0']
    >>> [hex(b) for b in I2cDacFormat(0x60, "fast").update_bytes(0xABC)]
    ['0xc0', '0xa', '0xbc']
    """

    address: int = 0x60
    command: str = "fast"
    bits: int = 12
    power_down: int = 0

    def __post_init__(self) -> None:
        if isinstance(self.address, bool) or not isinstance(self.address, int):
            raise OptionError(f"must be a 7-bit address, got {self.address!r}", field="dac_address")
        if not 0x08 <= self.address <= 0x77:
            # 0x00..0x07 and 0x78..0x7F are reserved (UM10204, table 4)
            raise OptionError(
                f"must be a 7-bit address 0x08..0x77 (the others are reserved), got "
                f"0x{self.address:02X}",
                field="dac_address",
            )
        if self.command not in COMMANDS:
            raise OptionError(
                f"must be one of {', '.join(COMMANDS)}, got {self.command!r}", field="dac_command"
            )
        if self.bits != 12:
            raise OptionError(f"the command set is for 12-bit DACs, got {self.bits}", field="bits")
        if not 0 <= self.power_down <= 3:
            raise OptionError(f"must be 0..3, got {self.power_down!r}", field="power_down")

    @property
    def address_byte(self) -> int:
        """The first byte on the bus: address and R/W = 0 (write)."""
        return self.address << 1

    @property
    def data_bytes(self) -> int:
        """Bytes after the address byte."""
        return COMMANDS[self.command]

    @property
    def bytes_per_update(self) -> int:
        """Bytes on the bus per update, the address byte included."""
        return 1 + self.data_bytes

    def data(self, codes: np.ndarray) -> np.ndarray:
        """The data bytes (after the address) of each code, shape (n, data_bytes), uint8."""
        c = np.asarray(codes, dtype=np.int64)
        if c.size and (c.min() < 0 or c.max() > 4095):
            raise OptionError("codes must be 0..4095 for a 12-bit DAC", field="codes")
        pd = self.power_down
        if self.command == "fast":
            out = np.stack([(pd << 4) | (c >> 8), c & 0xFF], axis=-1)
        else:
            out = np.stack([np.full_like(c, 0x40 | (pd << 1)), c >> 4, (c & 0xF) << 4], axis=-1)
        return out.astype(np.uint8)

    def update_bytes(self, code: int) -> bytes:
        """Every byte of one update on the bus, the address byte first."""
        return bytes([self.address_byte, *self.data(np.array([code]))[0].tolist()])

    def decode(self, data: bytes) -> int:
        """The code in one update's data bytes (the inverse of :meth:`data`)."""
        if len(data) != self.data_bytes:
            raise OptionError(f"expected {self.data_bytes} bytes, got {len(data)}", field="data")
        if self.command == "fast":
            return ((data[0] & 0x0F) << 8) | data[1]
        return (data[1] << 4) | (data[2] >> 4)

    def to_dict(self) -> dict[str, object]:
        """Plain-data description."""
        return {
            "address": self.address,
            "address_byte": self.address_byte,
            "command": self.command,
            "data_bytes": self.data_bytes,
            "bits": self.bits,
            "power_down": self.power_down,
            "bus_bits_per_update": bus_bits_per_update(self),
        }


def bus_bits_per_update(fmt: I2cDacFormat) -> int:
    """Bit times of one update: ``9 x bytes + 3`` (START, STOP, bus free)."""
    return 9 * fmt.bytes_per_update + FRAME_BITS


def max_update_rate_hz(bus_hz: int, fmt: I2cDacFormat, sys_clock_hz: int = 125_000_000) -> Fraction:
    """Highest update (sample) rate the writer reaches at a bus speed, Hz.

    That is one update every :func:`writer_cycles` (no pad) at the smallest divider
    :func:`min_divider` allows: below the ``bus_hz / (9 B + 3)`` bit-time budget, because
    the writer's bits take four cycles and its timing must meet every minimum of UM10204
    Table 10, not only the SCL frequency.

    Examples
    --------
    >>> float(max_update_rate_hz(400_000, I2cDacFormat(command="fast")))
    11816.978634902629
    """
    _check_bus(bus_hz)
    return Fraction(
        sys_clock_hz, min_divider(bus_hz, sys_clock_hz) * writer_cycles(fmt.bytes_per_update, 0)
    )


def _check_bus(bus_hz: int) -> None:
    if bus_hz not in BUS_SPEEDS_HZ:
        raise OptionError(
            f"must be one of {', '.join(str(b) for b in BUS_SPEEDS_HZ)} Hz, got {bus_hz!r}",
            field="bus_hz",
        )


#: UM10204 (NXP, "I2C-bus specification and user manual", Table 10: characteristics of
#: the SDA and SCL bus lines) minimum times in ns for Standard-mode, Fast-mode and
#: Fast-mode Plus; REFERENCES.md section 14 (from memory, to confirm against the table).
BUS_TIMING_NS: dict[int, dict[str, int]] = {
    100_000: {"t_low": 4700, "t_high": 4000, "t_hd_sta": 4000, "t_su_sto": 4000,
              "t_su_dat": 250, "t_buf": 4700},
    400_000: {"t_low": 1300, "t_high": 600, "t_hd_sta": 600, "t_su_sto": 600,
              "t_su_dat": 100, "t_buf": 1300},
    1_000_000: {"t_low": 500, "t_high": 260, "t_hd_sta": 260, "t_su_sto": 260,
                "t_su_dat": 50, "t_buf": 500},
}  # fmt: skip

#: The writer's shortest stretch of each of those times, in state-machine cycles (see
#: :func:`writer_program`): SCL low and high two cycles each, START hold and STOP set-up
#: two, data set-up one (SDA changes one cycle before SCL rises), bus free at least five
#: (STOP, the copy of Y, one pad cycle and the pull before the next START).
WRITER_TIMING_CYCLES = {
    "t_low": 2, "t_high": 2, "t_hd_sta": 2, "t_su_sto": 2, "t_su_dat": 1, "t_buf": 5,
}  # fmt: skip


def min_divider(bus_hz: int, sys_clock_hz: int) -> int:
    """The smallest whole clock divider at which the writer meets the bus speed's limits.

    SCL at most `bus_hz` (four cycles a bit) and every minimum time of UM10204 Table 10
    (:data:`BUS_TIMING_NS`) met by the writer's shortest stretch of it
    (:data:`WRITER_TIMING_CYCLES`).

    Examples
    --------
    >>> min_divider(400_000, 125_000_000)  # t_LOW: 2 cycles >= 1300 ns, not 79 (SCL 396 kHz)
    82
    >>> min_divider(100_000, 125_000_000), min_divider(1_000_000, 125_000_000)
    (313, 32)
    """
    _check_bus(bus_hz)
    least = -(-sys_clock_hz // (CYCLES_PER_BIT * bus_hz))
    for key, ns in BUS_TIMING_NS[bus_hz].items():
        need = Fraction(ns * sys_clock_hz, 10**9 * WRITER_TIMING_CYCLES[key])
        least = max(least, -(-need.numerator // need.denominator))
    return least


def codes_for_volts(volts: np.ndarray, vref_volts: float, bits: int = 12) -> np.ndarray:
    """The nearest code for each voltage: ``round(v / vref x 2^bits)``, clipped to the codes.

    The DAC's output is ``Vref x code / 2^bits`` (MCP4725 datasheet, "Output voltage").
    """
    if not vref_volts > 0:
        raise OptionError(f"must be > 0 V, got {vref_volts!r}", field="vref_volts")
    v = np.asarray(volts, dtype=np.float64)
    top = (1 << bits) - 1
    return np.clip(np.floor(v / vref_volts * (1 << bits) + 0.5), 0, top).astype(np.int64)


# -- the state-machine writer -----------------------------------------------------------

#: State-machine cycles per bus bit: SCL low for two, high for two.
CYCLES_PER_BIT = 4


def writer_program(name: str = "i2c_dac_out") -> Program:
    """A state-machine program that writes one DAC update (START, bytes, STOP) per tick.

    The lines are open-drain: both pins' output values stay 0 and the program drives a
    line low by making its pin an output and releases it (the pull-up takes it high) by
    making it an input: side-set on pin directions drives SCL, ``out pindirs, 1`` and
    ``set pindirs`` drive SDA.  Each FIFO word carries one byte, inverted (a 1 drives
    SDA low) in bits 31:24, and in bit 23 a flag marking the update's last byte, after
    which the STOP follows.  Each byte's acknowledge is sampled while SCL is high (``jmp
    pin``, JMP_PIN = SDA).  After the STOP the machine counts Y + 1 cycles, so that every
    update starts one sample period after the one before (:func:`writer_cycles`).  Four
    cycles a bit: SDA changes one cycle after SCL falls, SCL is low for two cycles and
    high for two; :func:`min_divider` makes those cycles long enough for every time of
    UM10204's Table 10 at the chosen bus speed.

    A missing acknowledge sets an IRQ flag for the player (``irq 0 rel``: flag N for
    state machine N of the block) and ends the transfer with a STOP at once, as UM10204
    asks of a master that sees no acknowledge; the update's remaining bytes are taken
    from the FIFO with the bus idle, each in the time it would have taken on the bus, so
    the next update still starts on its tick (both branches take the same cycles).
    """
    ins = [
        Instruction("pull", (False, True), side=0),  # 0 start: wait for an update, bus idle
        Instruction("set", ("pindirs", 1), delay=1, side=0),  # 1 START: SDA low, SCL high
        Instruction("set", ("x", 7), side=1),  # 2 byte: SCL low
        Instruction("out", ("pindirs", 1), side=1),  # 3 bit: SDA = the bit, SCL low
        Instruction("nop", (), delay=1, side=0),  # 4 SCL high, two cycles
        Instruction("jmp", ("x--", 3), side=1),  # 5 SCL low
        Instruction("set", ("pindirs", 0), side=1),  # 6 release SDA for the acknowledge
        Instruction("nop", (), side=0),  # 7 SCL high
        Instruction("jmp", ("pin", 18), side=0),  # 8 SDA high: no acknowledge
        Instruction("out", ("x", 1), side=1),  # 9 ack: SCL low; x = last-byte flag
        Instruction("jmp", ("!x", 16), side=1),  # 10 more bytes
        Instruction("set", ("pindirs", 1), delay=1, side=1),  # 11 STOP: SDA low, SCL low
        Instruction("nop", (), delay=1, side=0),  # 12 SCL high
        Instruction("set", ("pindirs", 0), delay=1, side=0),  # 13 SDA high: STOP
        Instruction("mov", ("x", "y"), side=0),  # 14 tail: the rest of the sample period
        Instruction("jmp", ("x--", 15), side=0),  # 15 pad
        Instruction("pull", (False, True), side=1),  # 16 next: the next byte
        Instruction("jmp", ("", 2), side=1),  # 17
        Instruction("irq", ("set", 0, "rel"), side=1),  # 18 nack: SCL low; flag (0 + SM) mod 4
        Instruction("set", ("pindirs", 1), side=1),  # 19 SDA low while SCL is low
        Instruction("nop", (), delay=1, side=0),  # 20 SCL high: STOP set-up
        Instruction("set", ("pindirs", 0), side=0),  # 21 SDA high: STOP; the bus is idle
        Instruction("out", ("x", 1), side=0),  # 22 flag: was this the update's last byte?
        Instruction("jmp", ("!x", 25), side=0),  # 23 no: skip the next byte
        Instruction("jmp", ("", 14), side=0),  # 24 yes: the tail, as after a STOP
        Instruction("pull", (False, True), side=0),  # 25 skip: a byte not sent
        Instruction("out", ("null", 8), side=0),  # 26
        Instruction("set", ("x", SKIP_WAIT), side=0),  # 27 the byte's time on the bus
        Instruction("jmp", ("x--", 28), delay=1, side=0),  # 28
        Instruction("jmp", ("", 22), side=0),  # 29
    ]
    return Program(
        name,
        tuple(ins),
        wrap_target=0,
        wrap=15,
        sideset=SideSet(1, optional=True, pindirs=True),
        autopull=False,
        variant="i2c-dac",
    )


#: The skip loop's count: a skipped byte takes 4 + 2 (SKIP_WAIT + 1) cycles from the
#: flag test to the next, the 40 a sent byte takes (38 on the bus and the pull between).
SKIP_WAIT = 16


def writer_cycles(bytes_per_update: int, pad: int) -> int:
    """State-machine cycles from one update's start to the next's: ``40 B + 9 + Y``.

    Per update: the pull and START (3), each byte (38: the counter, eight 4-cycle bits,
    the acknowledge and the flag), the pull between bytes (2 each), the STOP and the copy
    of Y (7), and the pad loop (Y + 1).
    """
    return 40 * bytes_per_update + 9 + pad


def writer_words(fmt: I2cDacFormat, codes: np.ndarray) -> np.ndarray:
    """FIFO words of the updates: one a byte, inverted in bits 31:24, the last flagged."""
    data = fmt.data(codes).astype(np.uint32)
    n = data.shape[0]
    rows = np.concatenate([np.full((n, 1), fmt.address_byte, np.uint32), data], axis=1)
    words = ((~rows) & np.uint32(0xFF)) << np.uint32(24)
    words[:, -1] |= np.uint32(1 << 23)
    return words.reshape(-1)


@dataclass(frozen=True)
class I2cDacPlan:
    """The writer's clock: divider, bus clock, cycles per update and the pad count.

    Attributes
    ----------
    sys_clock_hz : int
        System clock, Hz.
    requested_rate_hz : Fraction
        Update rate asked for, Hz.
    divider : int
        State-machine clock divider (integer: no jitter).
    cycles_per_update : int
        State-machine cycles per update (sample).
    bytes_per_update : int
        Bytes on the bus per update.
    fastest_divider : int
        The smallest divider the bus speed allows (0: `divider`); it sets
        :attr:`max_rate_hz`.
    """

    sys_clock_hz: int
    requested_rate_hz: Fraction
    divider: int
    cycles_per_update: int
    bytes_per_update: int
    fastest_divider: int = 0

    @property
    def fractional(self) -> bool:
        """Always False: the writer's divider is a whole number (no jitter)."""
        return False

    @property
    def bus_hz(self) -> Fraction:
        """The SCL frequency, Hz."""
        return Fraction(self.sys_clock_hz, self.divider * CYCLES_PER_BIT)

    @property
    def achieved_rate_hz(self) -> Fraction:
        """Updates per second, exact."""
        return Fraction(self.sys_clock_hz, self.divider * self.cycles_per_update)

    @property
    def error_ppm(self) -> float:
        """Achieved minus requested rate, ppm."""
        return float((self.achieved_rate_hz / self.requested_rate_hz - 1) * 1_000_000)

    @property
    def pad(self) -> int:
        """The Y register's value: the pad loop's count."""
        return self.cycles_per_update - writer_cycles(self.bytes_per_update, 0)

    @property
    def clock(self) -> ClockPlan:
        """The same setting as a state-machine :class:`~ladderpack.clock.ClockPlan`."""
        return ClockPlan(
            self.sys_clock_hz, self.requested_rate_hz, self.divider, 0, self.cycles_per_update
        )

    def to_dict(self) -> dict[str, object]:
        """Plain-data description (the sidecar's ``i2c_dac`` entry, with the format's)."""
        return {
            "bus_hz": round(float(self.bus_hz), 3),
            "cycles_per_bit": CYCLES_PER_BIT,
            "cycles_per_update": self.cycles_per_update,
            "pad": self.pad,
            "bytes_per_update": self.bytes_per_update,
            "max_rate_hz": round(float(self.max_rate_hz), 3),
        }

    @property
    def max_rate_hz(self) -> Fraction:
        """The highest update rate at this bus speed: the fastest divider, no pad."""
        d = self.fastest_divider or self.divider
        return Fraction(self.sys_clock_hz, d * writer_cycles(self.bytes_per_update, 0))


def plan_writer(
    rate_hz: float | int | Fraction,
    fmt: I2cDacFormat,
    *,
    bus_hz: int = 400_000,
    sys_clock_hz: int = 125_000_000,
    rate_tolerance_ppm: float = 100.0,
) -> I2cDacPlan:
    """Clock the writer: the bus no faster than `bus_hz`, updates at `rate_hz`.

    The divider is a whole number at least :func:`min_divider` (SCL at or below `bus_hz`,
    four cycles a bit, and every UM10204 Table 10 minimum met): of those up to four times
    the smallest, the one whose whole number of cycles per update (at least what one
    update takes) comes nearest the rate, then the fastest.

    A rate up to `rate_tolerance_ppm` above the highest the bus allows is planned at
    that highest rate (its error then within the tolerance).

    Raises
    ------
    OptionError
        For a bus clock not in :data:`BUS_SPEEDS_HZ`, or a rate above what the bus allows.

    Examples
    --------
    >>> p = plan_writer(6250, I2cDacFormat(command="fast"), bus_hz=400_000)
    >>> p.divider, p.cycles_per_update, round(float(p.bus_hz)), p.error_ppm
    (100, 200, 312500, 0.0)
    """
    _check_bus(bus_hz)
    rate = Fraction(rate_hz)
    divider = min_divider(bus_hz, sys_clock_hz)
    least = writer_cycles(fmt.bytes_per_update, 0)
    fastest = Fraction(sys_clock_hz, divider * least)
    if rate > fastest * (1 + Fraction(rate_tolerance_ppm) / 1_000_000):
        raise OptionError(
            f"{float(rate):.6g} updates a second is more than the bus carries: at most "
            f"{float(fastest):.3f} with {fmt.bytes_per_update} bytes an update at "
            f"{float(Fraction(sys_clock_hz, divider * CYCLES_PER_BIT)):.0f} Hz SCL (the "
            f"fastest clock meeting every UM10204 bus time at {bus_hz // 1000} kHz)",
            field="rate_hz",
        )
    # a slower bus (a larger divider, up to 4x) may divide the clock exactly: the best
    # error wins, then the fastest bus
    best: tuple[Fraction, int, int] | None = None
    for d in range(divider, 4 * divider + 1):
        c = max(least, round(Fraction(sys_clock_hz, d) / rate))
        err = abs(Fraction(sys_clock_hz, d * c) - rate)
        if best is None or err < best[0]:
            best = (err, d, c)
        if err == 0:
            break
    assert best is not None
    return I2cDacPlan(sys_clock_hz, rate, best[1], best[2], fmt.bytes_per_update, divider)


@dataclass(frozen=True)
class I2cDacLayout:
    """How the updates of a 12-bit I2C DAC stream sit in FIFO words.

    One word a bus byte (:func:`writer_words`): the byte inverted in bits 31:24 (a 1
    drives SDA low), bit 23 set on an update's last byte; an update is the address byte
    and the command's data bytes, so a sample takes :attr:`words_per_update` words.

    Attributes
    ----------
    fmt : I2cDacFormat
        Address and command format.

    Examples
    --------
    >>> lay = I2cDacLayout(I2cDacFormat(0x60, "fast"))
    >>> [hex(w) for w in lay.pack_codes(np.array([0xABC]))]
    ['0x3f000000', '0xf5000000', '0x43800000']
    >>> lay.unpack_words(lay.pack_codes(np.array([1, 4095]))).tolist()
    [[1], [4095]]
    """

    fmt: I2cDacFormat

    @property
    def bits(self) -> int:
        """Code width (12)."""
        return self.fmt.bits

    @property
    def channels(self) -> int:
        """Codes per sample (1)."""
        return 1

    @property
    def words_per_update(self) -> int:
        """FIFO words (bus bytes) per sample."""
        return self.fmt.bytes_per_update

    def words_for(self, samples: int) -> int:
        """Words needed for `samples` samples."""
        return samples * self.words_per_update

    def pack_codes(self, codes: np.ndarray) -> np.ndarray:
        """Codes -> uint32 FIFO words."""
        return writer_words(self.fmt, codes)

    def unpack_words(self, words: np.ndarray) -> np.ndarray:
        """FIFO words -> codes, shape (samples, 1).

        Raises
        ------
        OptionError
            For words that are not whole updates of this format (another address, a
            misplaced last-byte flag).
        """
        w = np.asarray(words, dtype=np.uint32)
        b = self.words_per_update
        if w.size % b:
            raise OptionError(f"expected whole updates of {b} words, got {w.size}", field="words")
        rows = w.reshape(-1, b)
        data = ((~rows >> np.uint32(24)) & np.uint32(0xFF)).astype(np.int64)
        flags = (rows >> np.uint32(23)) & np.uint32(1)
        want = np.zeros(b, np.uint32)
        want[-1] = 1
        if rows.size and (np.any(data[:, 0] != self.fmt.address_byte) or np.any(flags != want)):
            raise OptionError(
                f"the words are not updates for address 0x{self.fmt.address:02X}", field="words"
            )
        if self.fmt.command == "fast":
            codes = ((data[:, 1] & 0x0F) << 8) | data[:, 2]
        else:
            codes = (data[:, 2] << 4) | (data[:, 3] >> 4)
        return codes.reshape(-1, 1)

    def to_dict(self) -> dict[str, object]:
        """Plain-data description (the sidecar's ``layout``)."""
        return {
            "output": "i2c-dac",
            "bits": self.bits,
            "words_per_update": self.words_per_update,
            "word": "one bus byte, inverted, in bits 31:24; bit 23 set on an update's last byte",
            "shift": "left",
            "dac": self.fmt.to_dict(),
        }


def i2c_state_machine(
    program: Program,
    clock: ClockPlan,
    *,
    sda_pin: int,
    scl_pin: int,
    gpio_base: int = 0,
) -> StateMachineConfig:
    """The state machine's registers for the writer (program loaded at address 0).

    EXECCTRL: the wrap, side-set optional (SIDE_EN, bit 30) and on pin directions
    (SIDE_PINDIR, bit 29), JMP_PIN = SDA (bits 28:24).  SHIFTCTRL: TX FIFO joined, out
    shift left, no autopull (the program pulls).  PINCTRL: SIDESET_COUNT 2 (SCL and the
    enable bit), SET_COUNT 1 and OUT_COUNT 1 on SDA, SIDESET_BASE SCL (RP2040 datasheet,
    PIO registers).  The pins' pin checks are the options' (``StreamOptions``).
    """
    sda, scl = sda_pin - gpio_base, scl_pin - gpio_base
    execctrl = wrap_execctrl(program) | (1 << 30) | (1 << 29) | (sda << 24)
    shiftctrl = (1 << 30) | (1 << 18)  # FJOIN_TX; PULL_THRESH 0 = 32; OUT_SHIFTDIR left
    pinctrl = (
        (program.sideset.field_bits << 29)
        | (1 << 26)  # SET_COUNT
        | (1 << 20)  # OUT_COUNT
        | (scl << 10)  # SIDESET_BASE
        | (sda << 5)  # SET_BASE
        | sda  # OUT_BASE
    )
    return StateMachineConfig(
        clock.clkdiv_register,
        execctrl,
        shiftctrl,
        pinctrl,
        sda_pin,
        1,
        False,
        gpio_base,
        sideset_base=scl_pin,
        sideset_count=1,
    )


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
        ("SAMPLE_COUNT", f"{asset.sample_count}u", "samples (DAC updates) in the stream"),
        ("UPDATE_COUNT", f"{asset.name.upper()}_SAMPLE_COUNT", "old name, kept until 0.3"),
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
        f"&{n}_lossless" if asset.lossless is not None else "NULL",
    ]
    return init_macro("lp_i2c_stream_t", "ladderpack_i2c.h", f"{P}_I2C_INIT", fields)


def render_header(asset: StreamAsset) -> str:
    """Return the C header of an I2C DAC stream."""
    return fifo_stream_header(asset, _defines(asset), _init_macro(asset))


def source_lines(asset: StreamAsset) -> Iterator[str]:
    """The C source of an I2C DAC stream, line by line."""
    return fifo_stream_source_lines(
        asset,
        (
            "/* Updates in bus order, one byte a word: the byte inverted in bits 31:24, bit 23 on",
            " * an update's last byte; const, so they stay in flash, and word-aligned for DMA. */",
        ),
        "/* State-machine program (side-set: SCL pin direction, optional):",
    )


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
SAMPLE_COUNT = {updates}  # DAC updates
UPDATE_COUNT = SAMPLE_COUNT  # the old name, kept until version 0.3
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

{queue}    def _go(self) -> None:
        mem32[self.pio + _FDEBUG] = 1 << (_TXSTALL_LSB + self.idx)  # clear TXSTALL
        mem32[self.pio + _IRQ] = 1 << self.idx  # clear the acknowledge flag
        self.sm.active(1)

    def nack_seen(self) -> bool:
        \"\"\"True when a byte went unacknowledged since the last play() or hold_code().\"\"\"
        return bool(mem32[self.pio + _IRQ] & (1 << self.idx))

    def hold_code(self, code: int) -> None:
        \"\"\"Write one code (0..4095) while nothing plays; returns after its update.\"\"\"
        if not 0 <= code <= 4095:
            raise ValueError("a 12-bit DAC takes codes 0..4095")
        mem32[self.pio + _FDEBUG] = 1 << (_TXSTALL_LSB + self.idx)
        mem32[self.pio + _IRQ] = 1 << self.idx
        for w in _update(code):
            self.sm.put(w)
        while not self._drained():
            pass

    def write_code(self, code: int) -> None:
        \"\"\"The old name of hold_code() (kept until version 0.3).\"\"\"
        self.hold_code(code)

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

{play}{feed}
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
        queue=queue_methods("update"),
        play=play_method("update"),
    )
    if asset.compressed is not None:
        fmt = _layout(asset).fmt
        text = with_stored(
            text,
            asset,
            stop_line="self._ramp_down()  # a stream stops at once, ramping down",
            lossless_cfg="[0, 12, 1, 0, 0, 0, 1, 3, 12]",  # a code a word, then packed
            pack=(
                I2C_PACK,
                f'codes = array.array("I", bytes(4 * per_block))\n'
                f'        pcfg = array.array("i", {pack_cfg(fmt)})',
                "pcfg[0] = _lossless_block(src, codes, cfg)\n"
                "            return _i2c_pack(codes, buf, pcfg)",
            ),
        )
    return text + set_clock_text(asset)


#: The MicroPython player's packer of a compressed stream (viper): decoded codes into the
#: words of their updates, as :func:`writer_words` makes them (``cfg`` from
#: :func:`pack_cfg`). Plain Python too, with the pointer casts as views (the tests run it
#: on the host against :func:`writer_words`).
I2C_PACK = """\

@micropython.viper
def _i2c_pack(src, dst, cfg) -> int:
    # cfg: codes, bytes an update, then per byte its constant bits and a shift (the byte
    # is constant | (code << 4) >> shift, 8 bits); a word a byte, inverted in bits 31:24,
    # bit 23 on an update's last byte. Returns the words.
    s = ptr32(src)
    d = ptr32(dst)
    c = ptr32(cfg)
    n = c[0]
    per = c[1]
    i = 0
    w = 0
    while i < n:
        code = s[i] << 4
        k = 0
        while k < per:
            b = (c[2 + 2 * k] | (code >> c[3 + 2 * k])) & 0xFF
            word = (b ^ 0xFF) << 24
            if k == per - 1:
                word |= 0x800000
            d[w] = word
            w += 1
            k += 1
        i += 1
    return w
"""


def pack_cfg(fmt: I2cDacFormat) -> list[int]:
    """The configuration of :data:`I2C_PACK` for updates in format `fmt`.

    Per byte its constant bits and the shift of ``code << 4`` that gives its code bits
    (31: none), from the command's bytes (see the module's text).

    Examples
    --------
    >>> pack_cfg(I2cDacFormat(0x60, "fast"))
    [0, 3, 192, 31, 0, 12, 0, 4]
    """
    pd = fmt.power_down
    rows = [(fmt.address_byte, 31)]
    if fmt.command == "fast":
        rows += [(pd << 4, 12), (0, 4)]
    else:
        rows += [(0x40 | pd << 1, 31), (0, 8), (0, 0)]
    return [0, len(rows), *(v for row in rows for v in row)]


# -- update tables -------------------------------------------------------------


def table_files(
    name: str,
    fmt: I2cDacFormat,
    codes: np.ndarray,
    volts: np.ndarray,
    vref_volts: float,
    what: str,
) -> dict[str, bytes]:
    """Header, source and MicroPython module of an I2C-DAC update table (``table i2c-dac``)."""
    p = name.upper()
    data = fmt.data(codes)
    nb = fmt.data_bytes
    rates = ", ".join(
        f"{float(max_update_rate_hz(b, fmt)):.0f} Hz at {b // 1000} kHz" for b in BUS_SPEEDS_HZ
    )
    notes = [
        f"{what} as {fmt.command} writes to a 12-bit I2C DAC at 0x{fmt.address:02X}: the "
        f"data bytes after the address, {nb} a row;",
        f"output = {vref_volts!r} V x code / 4096; at most {rates} (the state-machine "
        "writer at 125 MHz, every UM10204 Table 10 time met).",
        "Mind the bus: pull-ups on SDA and SCL to the DAC's supply, logic levels the board "
        "tolerates (3.3 V here).",
    ]
    guard = f"LADDERPACK_{p}_H"
    header = "\n".join(
        [
            f"/* Generated by ladderpack {__version__}. Do not edit. */",
            *[f"/* {n} */" for n in notes],
            f"#ifndef {guard}",
            f"#define {guard}",
            "",
            "#include <stdint.h>",
            "",
            f"#define {p}_ADDRESS 0x{fmt.address:02X}u /* 7-bit address */",
            f"#define {p}_COUNT {codes.size}u /* updates */",
            f"#define {p}_BYTES {nb}u /* data bytes an update */",
            "",
            "/* Row k: the bytes to write after the address byte for update k, e.g.",
            f" * i2c_write_blocking(i2c0, {p}_ADDRESS, {name}_updates[k], {p}_BYTES, false). */",
            f"extern const uint8_t {name}_updates[{p}_COUNT][{p}_BYTES];",
            "/* The code of each update (0..4095). */",
            f"extern const uint16_t {name}_codes[{p}_COUNT];",
            "",
            f"#endif /* {guard} */",
            "",
        ]
    )
    rows = ["    {" + ", ".join(f"0x{int(b):02X}u" for b in row) + "}" for row in data]
    src = [
        f"/* Generated by ladderpack {__version__}. Do not edit. */",
        f'#include "{name}.h"',
        "",
        f"const uint8_t {name}_updates[{p}_COUNT][{p}_BYTES] = {{",
        ",\n".join(rows),
        "};",
        "",
        f"const uint16_t {name}_codes[{p}_COUNT] = {{",
    ]
    vals = [f"{int(c)}u" for c in codes]
    for i in range(0, len(vals), 12):
        src.append("    " + ", ".join(vals[i : i + 12]) + ("," if i + 12 < len(vals) else ""))
    src += ["};", ""]
    py = "\n".join(
        [
            f"# Generated by ladderpack {__version__}. Do not edit.",
            *[f"# {n}" for n in notes],
            "",
            f"ADDRESS = 0x{fmt.address:02X}",
            "# the bytes after the address byte, one entry per update: i2c.writeto(ADDRESS, b)",
            "UPDATES = [" + ", ".join(repr(bytes(int(b) for b in row)) for row in data) + "]",
            "CODES = [" + ", ".join(str(int(c)) for c in codes) + "]",
            "VOLTS = [" + ", ".join(f"{float(v):.6g}" for v in volts) + "]",
            "",
            "",
            "def write(i2c, k: int) -> None:",
            '    """Write update k (software-timed: for levels, not for a sample clock)."""',
            "    i2c.writeto(ADDRESS, UPDATES[k])",
            "",
        ]
    )
    return {
        f"{name}.h": header.encode(),
        f"{name}.c": "\n".join(src).encode(),
        f"{name}.py": py.encode(),
    }


# -- the registered object -------------------------------------------------------------


class I2cDacOutput:
    """A 12-bit I2C DAC written by a state-machine bus writer, one update a sample."""

    name = "i2c-dac"

    def default_bits(self) -> int:
        """12 bits: the DAC's."""
        return 12

    def check_bits(self, bits: int) -> None:
        """12 bits."""
        if bits != 12:
            raise OptionError(
                f"the I2C DAC command set is for 12-bit DACs, got {bits}", field="bits"
            )

    def check_options(self, opts: StreamOptions) -> None:
        """12 bits, a bus speed and command of the DAC, a 7-bit address, two pins."""
        self.check_bits(opts.bits)
        if opts.bus_hz not in I2C_BUS_SPEEDS_HZ:
            raise OptionError(
                f"must be one of {', '.join(str(b) for b in I2C_BUS_SPEEDS_HZ)} Hz, got "
                f"{opts.bus_hz!r}",
                field="bus_hz",
            )
        if opts.dac_command not in I2C_DAC_COMMANDS:
            raise OptionError(
                f"must be one of {', '.join(I2C_DAC_COMMANDS)}, got {opts.dac_command!r}",
                field="dac_command",
            )
        if opts.compress == "adpcm":
            raise OptionError(
                "IMA ADPCM codes 16-bit samples: a 12-bit I2C DAC stream takes --compress "
                "lossless (every code kept) or none",
                field="compress",
            )
        a = opts.dac_address
        if isinstance(a, bool) or not isinstance(a, int) or not 0x08 <= a <= 0x77:
            raise OptionError(
                f"must be a 7-bit address 0x08..0x77 (the others are reserved), got {a!r}",
                field="dac_address",
            )
        if opts.idle_code > 4095:
            raise OptionError(
                f"must be 0..4095 for 12 bits, got {opts.idle_code}", field="idle_code"
            )
        if opts.scl_pin is None:
            object.__setattr__(opts, "scl_pin", opts.sda_pin + 1)
        sda, scl = opts.sda_pin, int(opts.scl_pin or 0)
        if sda == scl:
            raise OptionError(f"SDA and SCL are both GPIO {sda}", field="scl_pin")
        count = int(opts.gpio_count or 0)
        if max(sda, scl) >= count:
            raise OptionError(
                f"the I2C lines need GPIO {sda} (SDA) and {scl} (SCL), but the target has "
                f"GPIO 0..{count - 1}" + get_target(opts.target).more_pins_hint(max(sda, scl)),
                field="scl_pin" if scl >= count else "sda_pin",
            )
        self.gpio_base(opts)

    def gpio_base(self, opts: StreamOptions) -> int:
        """The PIO GPIO base reaching SDA and SCL."""
        sda = opts.sda_pin
        scl = int(opts.scl_pin if opts.scl_pin is not None else sda + 1)
        lo, hi = min(sda, scl), max(sda, scl)
        return get_target(opts.target).gpio_window(
            lo,
            hi - lo + 1,
            int(opts.gpio_count or 0),
            what=f"the I2C lines (SDA GPIO {sda}, SCL GPIO {scl})",
            field="sda_pin",
        )

    def recorded_options(self, opts: StreamOptions, recorded: dict[str, Any]) -> dict[str, Any]:
        """The generic record."""
        return recorded

    def plan(self, opts: StreamOptions, ident: str) -> OutputPlan:
        """The bus writer's divider and padding, its byte words and its state machine."""
        fmt = I2cDacFormat(opts.dac_address, opts.dac_command)
        writer = plan_writer(
            opts.rate_hz,
            fmt,
            bus_hz=opts.bus_hz,
            sys_clock_hz=int(opts.sys_clock_hz or 0),
            rate_tolerance_ppm=opts.rate_tolerance_ppm,
        )
        layout = I2cDacLayout(fmt)
        program = writer_program(name=f"{ident}_i2c")
        sm = i2c_state_machine(
            program,
            writer.clock,
            sda_pin=opts.sda_pin,
            scl_pin=int(opts.scl_pin or 0),
            gpio_base=self.gpio_base(opts),
        )
        return OutputPlan(
            layout=layout,
            clock=writer.clock,
            samples_per_word=1,
            per_word=Fraction(1, layout.words_per_update),
            idle_code=opts.idle_code,
            channel_idle=opts.idle_code,
            code_bits=12,
            program=program,
            sm=sm,
            setup=writer,
            whole_frames=True,
        )

    def stats(self, plan: OutputPlan, opts: StreamOptions) -> dict[str, Any]:
        """The writer's plan, the DAC's format and the two pins."""
        writer: I2cDacPlan = plan.setup
        out: dict[str, Any] = {
            "i2c_dac": {
                **writer.to_dict(),
                **plan.layout.fmt.to_dict(),
                "sda_pin": opts.sda_pin,
                "scl_pin": opts.scl_pin,
            }
        }
        if abs(writer.error_ppm) > opts.rate_tolerance_ppm:  # the divider is always whole
            out["warnings"] = [
                f"the I2C update rate is {writer.error_ppm:+.1f} ppm off the request (the "
                "writer's divider is a whole number); 'clock --find-sys-clock --output "
                "i2c-dac' finds system clocks where it is exact"
            ]
        return out

    def variant(self, plan: OutputPlan) -> str:
        """The writer program's variant."""
        assert plan.program is not None
        return plan.program.variant

    def compress(self, packed: Packed, opts: StreamOptions) -> Compressed:
        """``--compress lossless``: the code of every update.

        The players rebuild each update's bus bytes. Blocks of whole updates, no longer
        than a MicroPython player's buffer.
        """
        if opts.compress != "lossless":
            return uncompressed(packed)
        from ladderpack.compress import encode_lossless

        lay = packed.layout
        assert isinstance(lay, I2cDacLayout)
        codes = lay.unpack_words(packed.words)[:, 0]
        block = max(1, min(1024, int(opts.chunk_words) // lay.words_per_update))
        return Compressed(encode_lossless(codes, lay.bits, block_samples=block), None, packed)

    def summary(self, asset: StreamAsset) -> dict[str, Any]:
        """The DAC's address and command, the bus and the pins."""
        i2c = asset.stats["i2c_dac"]
        return {
            "i2c_dac": {
                "address": i2c["address"],
                "command": i2c["command"],
                "bytes_per_update": i2c["bytes_per_update"],
                "bus_hz": i2c["bus_hz"],
                "max_rate_hz": i2c["max_rate_hz"],
                "pins": [i2c["sda_pin"], i2c["scl_pin"]],
            }
        }

    def summary_lines(self, summary: Mapping[str, Any]) -> SummaryLines:
        """The width, the DAC on its bus; counted in samples."""
        i2c = summary["i2c_dac"]
        sda, scl = i2c["pins"]
        line = (
            f"DAC at 0x{i2c['address']:02X}, {i2c['command']} writes of "
            f"{i2c['bytes_per_update']} bytes, SCL {i2c['bus_hz']:.0f} Hz (at most "
            f"{i2c['max_rate_hz']:.0f} updates/s); SDA GPIO {sda}, SCL GPIO {scl}, "
            "pull-ups to 3.3 V needed"
        )
        return SummaryLines(
            f"{summary['bits']}-bit", "sample", cycles_divider(summary, "sample"), [("i2c", line)]
        )

    def sidecar_blocks(self, asset: StreamAsset) -> dict[str, Any]:
        """The writer program and the state machine's registers."""
        return state_machine_blocks(asset)

    def files(self, asset: StreamAsset, *, embed: bool) -> dict[str, Content]:
        """Words, C header and source, MicroPython module, PIO source, the I2C player."""
        n, stored = asset.name, asset.compressed
        return {  # a compressed stream's .bin is its stored form, read block by block
            f"{n}.bin": binary.render_chunks(asset.packed) if stored is None else stored.to_bytes(),
            f"{n}.h": render_header(asset).encode(),
            f"{n}.c": render_source_chunks(asset),
            f"{n}.py": render_micropython(asset, embed=embed and stored is None).encode(),
            f"{n}.pio": render_pio(asset).encode(),
            **templates.player("ladderpack_i2c"),
        }

    def preview_model(self, layout: Mapping[str, Any], sidecar: Mapping[str, Any]) -> PreviewModel:
        """The DAC's codes: an ideal 12-bit DAC, 0..Vref."""
        dac = layout["dac"]
        lay = I2cDacLayout(I2cDacFormat(int(dac["address"]), str(dac["command"])))

        def decode(words: np.ndarray, count: int, channel: int) -> np.ndarray:
            return np.asarray(lay.unpack_words(words[: lay.words_for(count)])[:count, channel])

        def stored(data: bytes, comp: Mapping[str, Any]) -> np.ndarray:
            from ladderpack.compress import decode_stored

            return lay.pack_codes(decode_stored(data, comp, bits=12))

        return PreviewModel(lay, 12, 1, 4096, 4095 / 2, False, decode, stored)

    def clock_report(
        self, rate_hz: float, opts: StreamOptions, settings: Mapping[str, Any]
    ) -> ClockReport:
        """The writer's divider, the bus clock and the cycles an update takes."""
        bus_hz = int(settings.get("bus_hz") or 400_000)
        command = str(settings.get("dac_command") or "fast")
        fmt = I2cDacFormat(command=command)
        plan = plan_writer(
            rate_hz,
            fmt,
            bus_hz=bus_hz,
            sys_clock_hz=int(opts.sys_clock_hz or 0),
            rate_tolerance_ppm=opts.rate_tolerance_ppm,
        )
        least = writer_cycles(fmt.bytes_per_update, 0)
        d = {
            "requested_rate_hz": rate_hz,
            "achieved_rate_hz": float(plan.achieved_rate_hz),
            "error_ppm": round(plan.error_ppm, 6),
            "sys_clock_hz": plan.sys_clock_hz,
            "divider": plan.divider,
            "bus_hz": float(plan.bus_hz),
            "cycles_per_update": plan.cycles_per_update,
            "pad": plan.pad,
            "bytes_per_update": fmt.bytes_per_update,
            "max_rate_hz": float(plan.max_rate_hz),
        }
        return ClockReport(
            d,
            [
                f"requested  {rate_hz:g} updates/s at {plan.sys_clock_hz} Hz system clock",
                f"achieved   {d['achieved_rate_hz']:.6f} Hz ({plan.error_ppm:+.3f} ppm)",
                f"bus        SCL {d['bus_hz']:.0f} Hz (asked at most {bus_hz}), divider "
                f"{plan.divider} (integer: no jitter), 4 cycles a bit",
                f"update     {fmt.bytes_per_update} bytes ({command} write): {least} cycles of "
                f"{plan.cycles_per_update} a sample (pad Y = {plan.pad}); at most "
                f"{d['max_rate_hz']:.0f} updates/s at this bus speed",
            ],
        )

    def clock_planner(self, rate_hz: float, settings: Mapping[str, Any]) -> Callable[[int], Any]:
        """The bus writer's whole divider and padding at each clock."""
        fmt = I2cDacFormat(command=str(settings.get("dac_command") or "fast"))
        bus_hz = int(settings.get("bus_hz") or 400_000)
        return lambda f: plan_writer(rate_hz, fmt, bus_hz=bus_hz, sys_clock_hz=f)

    def clock_row(self, plan: Any) -> tuple[dict[str, Any], str]:
        """Divider, cycles per update and the bus clock."""
        row = {
            "div_int": plan.divider,
            "div_frac": 0,
            "cycles": plan.cycles_per_update,
            "bus_hz": float(plan.bus_hz),
        }
        return row, f"divider {plan.divider}, {plan.cycles_per_update} cycle(s) per update"

    def wave_table(self, spec: WaveTableSpec) -> WaveTable:
        """Not offered: an I2C DAC's tables are update bytes (``table i2c-dac``)."""
        raise OptionError(
            "an I2C DAC's tables are its update bytes: use 'table i2c-dac'", field="output"
        )


#: The registered object.
OUTPUT = I2cDacOutput()
