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
a START and a STOP condition (NXP UM10204, "I2C-bus specification and user manual"); we
count one bit time each for START, STOP and the bus-free time before the next START, so
an update of B bytes (the address included) takes ``9 B + 3`` bit times.  That bounds the
update rate: ``rate <= bus_hz / (9 B + 3)``: 13.3 kHz for a fast write at 400 kHz,
33.3 kHz at 1 MHz (Fast-mode Plus, if the DAC supports it; the MCP4725 also has a 3.4 MHz
high-speed mode not used here).
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from ladderpack.errors import OptionError

__all__ = [
    "BUS_SPEEDS_HZ",
    "COMMANDS",
    "I2cDacFormat",
    "bus_bits_per_update",
    "codes_for_volts",
    "max_update_rate_hz",
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


def max_update_rate_hz(bus_hz: int, fmt: I2cDacFormat) -> Fraction:
    """Highest update (sample) rate at a bus clock, Hz.

    Examples
    --------
    >>> float(max_update_rate_hz(400_000, I2cDacFormat(command="fast")))
    13333.333333333334
    """
    if bus_hz not in BUS_SPEEDS_HZ:
        raise OptionError(
            f"must be one of {', '.join(str(b) for b in BUS_SPEEDS_HZ)} Hz, got {bus_hz!r}",
            field="bus_hz",
        )
    return Fraction(bus_hz, bus_bits_per_update(fmt))


def codes_for_volts(volts: np.ndarray, vref_volts: float, bits: int = 12) -> np.ndarray:
    """The nearest code for each voltage: ``round(v / vref x 2^bits)``, clipped to the codes.

    The DAC's output is ``Vref x code / 2^bits`` (MCP4725 datasheet, "Output voltage").
    """
    if not vref_volts > 0:
        raise OptionError(f"must be > 0 V, got {vref_volts!r}", field="vref_volts")
    v = np.asarray(volts, dtype=np.float64)
    top = (1 << bits) - 1
    return np.clip(np.floor(v / vref_volts * (1 << bits) + 0.5), 0, top).astype(np.int64)
