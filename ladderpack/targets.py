"""Chips as data: clocks, GPIOs, PIO blocks and memory of each supported target.

Every figure comes from the vendor's C SDK headers in ``../shared/vendor/pico-sdk``
(which transcribe the datasheets) or from the datasheets themselves, named beside
each value.  Flash is external to both chips: the sizes given are those of the
common boards, and ``--flash-bytes`` overrides them.

Examples
--------
>>> get_target("rp2350b").gpio_count
48
>>> get_target("rp2350b").gpio_window(40, 8)
16
"""

from __future__ import annotations

from dataclasses import dataclass

from ladderpack.errors import OptionError

__all__ = [
    "MAX_SYS_CLOCK_HZ",
    "REGISTERS",
    "TARGETS",
    "TARGET_NAMES",
    "Target",
    "get_target",
    "target_of",
]

#: Every chip fact a generated file uses (peripheral base addresses, register offsets,
#: bit positions, DMA request numbers), by SDK platform, under the exact names the vendor
#: SDK's headers give them (``src/<platform>/hardware_regs/include/hardware/regs/``:
#: ``addressmap.h``, ``pio.h``, ``pwm.h``, ``dma.h``, ``dreq.h``; ``platform_defs.h``),
#: so ``tests/test_targets.py`` checks each one against its header.  Emitters read
#: them through :meth:`Target.reg`, never as literals.
#: The facts both chips share (same SDK names, same values).
_COMMON_REGISTERS: dict[str, int] = {
    # addressmap.h
    "PIO0_BASE": 0x50200000,
    "PIO1_BASE": 0x50300000,
    "DMA_BASE": 0x50000000,
    # pio.h
    "PIO_FDEBUG_OFFSET": 0x008,
    "PIO_FDEBUG_TXSTALL_LSB": 24,
    "PIO_TXF0_OFFSET": 0x010,
    "PIO_TXF1_OFFSET": 0x014,
    "PIO_IRQ_OFFSET": 0x030,
    "PIO_DBG_PADOUT_OFFSET": 0x03C,
    "PIO_SM0_CLKDIV_OFFSET": 0x0C8,
    "PIO_SM0_EXECCTRL_OFFSET": 0x0CC,
    "PIO_SM0_EXECCTRL_SIDE_PINDIR_LSB": 29,
    "PIO_SM0_ADDR_OFFSET": 0x0D4,
    "PIO_SM0_INSTR_OFFSET": 0x0D8,
    "PIO_SM1_CLKDIV_OFFSET": 0x0E0,
    # pwm.h
    "PWM_CH0_CSR_OFFSET": 0x00,
    "PWM_CH0_CSR_EN_LSB": 0,
    "PWM_CH0_DIV_OFFSET": 0x04,
    "PWM_CH0_CTR_OFFSET": 0x08,
    "PWM_CH0_CC_OFFSET": 0x0C,
    "PWM_CH0_CC_B_LSB": 16,
    "PWM_CH0_TOP_OFFSET": 0x10,
    "PWM_CH1_CSR_OFFSET": 0x14,
    # dma.h
    "DMA_TIMER0_X_LSB": 16,
    # dreq.h
    "DREQ_PIO0_TX0": 0,
    "DREQ_PIO1_TX0": 8,
    "DREQ_DMA_TIMER0": 59,
}

REGISTERS: dict[str, dict[str, int]] = {
    "rp2040": {
        **_COMMON_REGISTERS,
        "PWM_BASE": 0x40050000,  # addressmap.h
        "DMA_TIMER0_OFFSET": 0x420,  # dma.h
        "DREQ_PWM_WRAP0": 24,  # dreq.h
        "NUM_PIOS": 2,  # platform_defs.h
        "NUM_PWM_SLICES": 8,
    },
    "rp2350": {
        **_COMMON_REGISTERS,
        # addressmap.h: PLL_SYS sits at 0x40050000, where the RP2040's PWM was
        "PIO2_BASE": 0x50400000,
        "PWM_BASE": 0x400A8000,
        "DMA_TIMER0_OFFSET": 0x440,  # dma.h: the pacing timers moved
        "DREQ_PIO2_TX0": 16,  # dreq.h
        "DREQ_PWM_WRAP0": 32,
        "NUM_PIOS": 3,  # platform_defs.h
        "NUM_PWM_SLICES": 12,
    },
}


@dataclass(frozen=True)
class Target:
    """One chip (and package) a bundle can be made for.

    Attributes
    ----------
    name : str
        Our name for it (``--target``).
    sys_clock_hz : int
        System clock after the SDK's start-up code (the clock streams are planned
        for unless ``--sys-clock-hz`` says otherwise).
    gpio_count : int
        User GPIOs in bank 0.
    pio_blocks : int
        PIO blocks (four state machines each).
    ram_bytes : int
        Main SRAM.
    flash_bytes : int
        Flash on the common boards (external QSPI, so board-dependent).
    gpio_bases : tuple of int
        GPIO numbers a PIO block's 32-pin window can start at (``GPIOBASE``).
    platform : str
        The vendor SDK's platform name (``PICO_PLATFORM``), which selects the register
        facts in :data:`REGISTERS`.
    """

    name: str
    sys_clock_hz: int
    gpio_count: int
    pio_blocks: int
    ram_bytes: int
    flash_bytes: int
    gpio_bases: tuple[int, ...] = (0,)
    platform: str = "rp2040"

    def reg(self, name: str) -> int:
        """A chip fact by its SDK name (an address, offset, bit position or DREQ).

        Examples
        --------
        >>> hex(get_target("rp2350").reg("PWM_BASE"))
        '0x400a8000'
        >>> get_target("rp2040").reg("DREQ_PWM_WRAP0")
        24
        """
        try:
            return REGISTERS[self.platform][name]
        except KeyError:
            raise KeyError(f"{self.platform} has no register fact {name!r}") from None

    def more_pins_hint(self, last_gpio: int) -> str:
        """A hint when a larger package of the same chip has GPIO `last_gpio` (else "").

        Examples
        --------
        >>> get_target("rp2350").more_pins_hint(40)
        '; the RP2350B (QFN-80 package) has GPIO 0..47: --target rp2350b'
        """
        for t in TARGETS.values():
            if (
                t.platform == self.platform
                and t.gpio_count > self.gpio_count
                and last_gpio < t.gpio_count
            ):
                return (
                    f"; the {t.name.upper()} (QFN-80 package) has GPIO 0..{t.gpio_count - 1}: "
                    f"--target {t.name}"
                )
        return ""

    def pio_bases(self) -> tuple[int, ...]:
        """Base address of each PIO block (``PIO0_BASE``, ``PIO1_BASE``, ...)."""
        return tuple(self.reg(f"PIO{k}_BASE") for k in range(self.pio_blocks))

    def gpio_window(
        self,
        first_gpio: int,
        pins: int,
        gpio_count: int | None = None,
        *,
        what: str = "",
        field: str = "out_base",
    ) -> int:
        """The PIO GPIO base whose 32-pin window holds GPIO ``first_gpio`` .. ``+ pins - 1``.

        Parameters
        ----------
        first_gpio : int
            Lowest GPIO used.
        pins : int
            Consecutive pins used.
        gpio_count : int, optional
            GPIOs on the part, when not the target's own count.
        what : str, optional
            What the pins carry, for the messages (default ``"a N-bit ladder"``), e.g.
            ``"the I2S lines (data, bit clock, word select)"``.
        field : str, optional
            The option an error names (default the ladder's ``out_base``).

        Returns
        -------
        int
            0 when the pins lie in GPIO 0..31 (always so on a chip without a
            GPIO base register), else 16.

        Raises
        ------
        OptionError
            When the pins do not exist or no window holds them all.
        """
        last = first_gpio + pins - 1
        count = self.gpio_count if gpio_count is None else gpio_count
        what = what or f"{'an' if pins in (8, 11, 18) else 'a'} {pins}-bit ladder"
        if first_gpio < 0 or last >= count:
            raise OptionError(
                f"{what} from GPIO {first_gpio} needs GPIO {first_gpio}..{last}, "
                f"but the target has GPIO 0..{count - 1}" + self.more_pins_hint(last),
                field=field,
            )
        for base in self.gpio_bases:
            if base <= first_gpio and last <= base + 31:
                return base
        windows = " or ".join(f"{b}..{b + 31}" for b in self.gpio_bases)
        raise OptionError(
            f"{what} on GPIO {first_gpio}..{last} straddle the PIO block's 32-pin window (a "
            f"state machine reaches GPIO {windows}); move them inside one window",
            field=field,
        )


#: RP2040: SYS_CLK_HZ 125 MHz (pico-sdk src/rp2040/hardware_regs/.../platform_defs.h;
#: RP2040 datasheet, clocks chapter), NUM_BANK0_GPIOS 30 and NUM_PIOS 2 (same header),
#: SRAM 0x20000000..0x20042000 = 264 KiB (.../regs/addressmap.h), 2 MiB flash on the
#: common boards (W25Q16JV, from memory of the board datasheets).
RP2040 = Target("rp2040", 125_000_000, 30, 2, 0x42000, 2 * 1024 * 1024)

#: RP2350, QFN-60 "A" package: SYS_CLK_HZ 150 MHz, NUM_BANK0_GPIOS 30, NUM_PIOS 3
#: (pico-sdk src/rp2350/hardware_regs/.../platform_defs.h), SRAM 0x20000000..0x20082000
#: = 520 KiB (.../regs/addressmap.h), 4 MiB flash on the common boards (from memory).
#: PIO GPIOBASE (offset 0x168) takes 0 or 16 ("Only the values 0 and 16 are supported",
#: .../regs/pio.h; RP2350 datasheet, PIO chapter, GPIOBASE).
RP2350A = Target("rp2350", 150_000_000, 30, 3, 0x82000, 4 * 1024 * 1024, (0, 16), "rp2350")

#: RP2350, QFN-80 "B" package: as the A package with NUM_BANK0_GPIOS 48 (same header).
RP2350B = Target("rp2350b", 150_000_000, 48, 3, 0x82000, 4 * 1024 * 1024, (0, 16), "rp2350")

#: The highest system clock either chip can have: the PLL's VCO maximum with both post
#: dividers at 1 (SDK 2.2.0 ``hardware/pll.h``: PICO_PLL_VCO_MAX_FREQ_HZ 1600 MHz; RP2040
#: datasheet 2.18, RP2350 datasheet 8.6). Far beyond what either is rated for; a clock
#: above it cannot exist (and would overflow the players' 32-bit clock constants).
MAX_SYS_CLOCK_HZ = 1_600_000_000

#: Every target by name.
TARGETS: dict[str, Target] = {t.name: t for t in (RP2040, RP2350A, RP2350B)}

#: Names accepted by ``--target``.
TARGET_NAMES = tuple(TARGETS)


def target_of(options: object) -> Target:
    """The :class:`Target` an asset was made for, from its options mapping (``target``).

    Assets from before targets existed, or without the field, are for the RP2040.
    """
    name = options.get("target", "rp2040") if isinstance(options, dict) else "rp2040"
    return get_target(str(name or "rp2040"))


def get_target(name: str) -> Target:
    """The :class:`Target` called `name`.

    Raises
    ------
    OptionError
        For an unknown name, listing the known ones.
    """
    try:
        return TARGETS[name]
    except (KeyError, TypeError):
        raise OptionError(
            f"must be one of {', '.join(TARGET_NAMES)}; got {name!r}", field="target"
        ) from None
