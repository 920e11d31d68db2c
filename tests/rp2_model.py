"""A register model of an RP2040 or RP2350 for running generated MicroPython on the host.

The emulator runs only the RP2040, so the RP2350's MicroPython modules are executed here,
under CPython, against stand-ins for MicroPython's ``machine`` and ``rp2`` modules whose
``mem32`` and DMA know every register of the chip by name. The register map is built
from the vendor SDK's headers of that chip (``addressmap.h`` for the blocks, one header
per peripheral for the offsets), with code of the tests' own, so a write lands on the
register the headers say is at that address, and a write to an address that is no
register of a known block fails at once. The state machines and DMA are modelled only
as far as the players need to run to the end: a DMA transfer completes when it is
triggered (each value written to its destination register), TX FIFOs are always empty
and every state machine reports TXSTALL.
"""

from __future__ import annotations

import functools
import re
import sys
import types
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from chip.harness import sdk_path

_DEFINE = re.compile(r"^#define\s+([A-Z0-9_]+)\s+(?:_u\()?(0x[0-9a-fA-F]+|\d+)\)?\s*$", re.M)

#: Blocks the players may touch, with the prefix of their offsets' names in their header,
#: plus the PLL and clocks, so that a stray write there is named for what it would break.
_BLOCKS = {
    "PIO0": ("pio.h", "PIO_"),
    "PIO1": ("pio.h", "PIO_"),
    "PIO2": ("pio.h", "PIO_"),
    "PWM": ("pwm.h", "PWM_"),
    "DMA": ("dma.h", "DMA_"),
    "PLL_SYS": ("pll.h", "PLL_"),
    "CLOCKS": ("clocks.h", "CLOCKS_"),
    "IO_BANK0": ("io_bank0.h", "IO_BANK0_"),
    "PADS_BANK0": ("pads_bank0.h", "PADS_BANK0_"),
}


def _defines(path: Path) -> dict[str, int]:
    return {n: int(v, 0) for n, v in _DEFINE.findall(path.read_text())}


@functools.cache
def register_map(platform: str) -> dict[int, str]:
    """Address -> ``BLOCK.REGISTER`` for the blocks above, from the platform's headers."""
    regs = sdk_path() / "src" / platform / "hardware_regs" / "include" / "hardware" / "regs"
    bases = _defines(regs / "addressmap.h")
    out: dict[int, str] = {}
    for block, (header, prefix) in _BLOCKS.items():
        if f"{block}_BASE" not in bases:
            continue
        for name, off in _defines(regs / header).items():
            if name.startswith(prefix) and name.endswith("_OFFSET"):
                reg = name[len(prefix) : -len("_OFFSET")]
                out[bases[f"{block}_BASE"] + off] = f"{block}.{reg}"
    return out


@functools.cache
def dreq_names(platform: str) -> dict[int, str]:
    """DREQ number -> name (``dreq.h``)."""
    regs = sdk_path() / "src" / platform / "hardware_regs" / "include" / "hardware" / "regs"
    return {v: n for n, v in _defines(regs / "dreq.h").items() if n.startswith("DREQ_")}


@dataclass
class Chip:
    """What the generated code did to the chip: every register write, by name."""

    platform: str
    sys_clock_hz: int
    writes: list[tuple[str, int]] = field(default_factory=list)
    dma_configs: list[dict[str, Any]] = field(default_factory=list)
    values: dict[str, int] = field(default_factory=dict)
    budget: int = 2_000_000

    def name(self, addr: int) -> str:
        # MicroPython's mem32 is word access: the low two address bits must be zero
        assert addr % 4 == 0, f"unaligned register access at {addr:#x}"
        try:
            return register_map(self.platform)[addr]
        except KeyError:
            raise AssertionError(f"{addr:#010x} is no register of the {self.platform}") from None

    def write(self, addr: int, value: int) -> None:
        self._spend()
        reg = self.name(addr)
        self.writes.append((reg, value & 0xFFFFFFFF))
        self.values[reg] = value & 0xFFFFFFFF

    def read(self, addr: int) -> int:
        self._spend()
        reg = self.name(addr)
        if reg.endswith(".FDEBUG"):
            return 0xFF000000  # every TXSTALL: each FIFO drains at once
        return self.values.get(reg, 0)

    def _spend(self) -> None:
        self.budget -= 1
        if self.budget < 0:
            raise AssertionError("the module spun on a register without end")


class _Mem32:
    def __init__(self, chip: Chip) -> None:
        self.chip = chip

    def __getitem__(self, addr: int) -> int:
        return self.chip.read(addr)

    def __setitem__(self, addr: int, value: int) -> None:
        self.chip.write(addr, value)


def install(chip: Chip) -> None:
    """Put stand-ins for MicroPython's ``machine`` and ``rp2`` modules in sys.modules."""
    machine = types.ModuleType("machine")
    rp2 = types.ModuleType("rp2")

    class Pin:
        IN, OUT, ALT, PULL_UP, PULL_DOWN, ALT_PWM, OPEN_DRAIN = 0, 1, 3, 1, 2, 4, 2

        def __init__(self, n: int, *args: object, **kwargs: object) -> None:
            self.n = n

    def freq(hz: int | None = None) -> int:
        if hz is not None:
            chip.sys_clock_hz = hz
        return chip.sys_clock_hz

    machine.Pin = Pin  # type: ignore[attr-defined]
    machine.freq = freq  # type: ignore[attr-defined]
    machine.mem32 = _Mem32(chip)  # type: ignore[attr-defined]

    blocks = sum(1 for n in register_map(chip.platform).values() if re.match(r"PIO\d\.CTRL$", n))
    txf0 = {n: a for a, n in register_map(chip.platform).items() if n.endswith(".TXF0")}

    class PIO:
        OUT_LOW, OUT_HIGH, SHIFT_LEFT, SHIFT_RIGHT, JOIN_TX, JOIN_NONE = 0, 1, 0, 1, 1, 0
        IN_LOW, IN_HIGH, JOIN_RX = 0, 1, 2

        def __init__(self, n: int) -> None:
            assert n < blocks, f"PIO{n} does not exist on the {chip.platform}"
            self.n = n

        def gpio_base(self, pin: object) -> None:
            assert chip.platform != "rp2040", "the RP2040 has no GPIOBASE"

    class StateMachine:
        def __init__(self, sm_id: int, program: object, **kwargs: object) -> None:
            self.block, self.idx = divmod(sm_id, 4)
            assert self.block < blocks, f"state machine {sm_id} does not exist"
            self.txf = txf0[f"PIO{self.block}.TXF0"] + 4 * self.idx

        def put(self, value: int, shift: int = 0) -> None:
            chip.write(self.txf, value)

        def active(self, v: int | None = None) -> bool:
            return False

        def restart(self) -> None:
            pass

        def exec(self, instr: str) -> None:
            pass

        def tx_fifo(self) -> int:
            return 0

    class DMA:
        _next = 0

        def __init__(self) -> None:
            self.channel = DMA._next
            DMA._next += 1
            self.count = 0

        def pack_ctrl(self, **kwargs: Any) -> int:
            self.last_ctrl = kwargs
            return len(chip.dma_configs) + 1

        def config(
            self, *, read: Any, write: int, count: int, ctrl: int, trigger: bool = False
        ) -> None:
            chip.dma_configs.append({"write": chip.name(write), "count": count, **self.last_ctrl})
            if trigger:
                # transfers of DATA_SIZE (0: bytes, 1: halfwords, 2: words) read from the
                # buffer's memory; a narrow write is repeated across the 32-bit bus
                # (RP2040 datasheet 2.1.4; RP2350 datasheet, bus fabric: narrow writes)
                size = 1 << int(self.last_ctrl.get("size", 2))
                raw = bytes(read)
                assert count * size <= len(raw), "the DMA would read past its buffer"
                for k in range(count):
                    v = int.from_bytes(raw[k * size : (k + 1) * size], "little")
                    chip.write(write, v * {1: 0x01010101, 2: 0x00010001, 4: 1}[size])

        def active(self, v: int | None = None) -> bool:
            return False

        def close(self) -> None:
            pass

    def asm_pio(**kwargs: object) -> Any:
        return lambda fn: fn

    rp2.PIO = PIO  # type: ignore[attr-defined]
    rp2.StateMachine = StateMachine  # type: ignore[attr-defined]
    rp2.DMA = DMA  # type: ignore[attr-defined]
    rp2.asm_pio = asm_pio  # type: ignore[attr-defined]
    sys.modules["machine"] = machine
    sys.modules["rp2"] = rp2


def run_module(path: Path, chip: Chip) -> types.ModuleType:
    """Execute a generated MicroPython module against `chip`'s register model."""
    install(chip)
    mod = types.ModuleType(path.stem)
    mod.__file__ = str(path)
    exec(compile(path.read_text(), str(path), "exec"), mod.__dict__)
    return mod
