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

from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from ladderpack.clock import ClockPlan
from ladderpack.errors import OptionError
from ladderpack.pio import Instruction, Program, SideSet, StateMachineConfig, wrap_execctrl

__all__ = [
    "BUS_SPEEDS_HZ",
    "BUS_TIMING_NS",
    "COMMANDS",
    "I2cDacFormat",
    "I2cDacLayout",
    "I2cDacPlan",
    "bus_bits_per_update",
    "codes_for_volts",
    "i2c_state_machine",
    "max_update_rate_hz",
    "min_divider",
    "plan_writer",
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
