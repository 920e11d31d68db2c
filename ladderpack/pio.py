"""PIO state-machine programs: description, encoding and configuration.

One description gives both the assembly text and the machine words, so the
two cannot disagree.  Field layouts follow the RP2040 datasheet, section
"PIO Instruction Set" ("PIO instruction encoding" table): every instruction
is 16 bits, bits 15:13 the opcode, 12:8 the delay/side-set field, 7:0 the
arguments.  Register layouts follow the datasheet's PIO register list
(``SMx_CLKDIV``, ``SMx_EXECCTRL``, ``SMx_SHIFTCTRL``, ``SMx_PINCTRL``).
"""

from __future__ import annotations

import functools
from collections.abc import Callable
from dataclasses import dataclass, field

from ladderpack.clock import ClockPlan
from ladderpack.errors import OptionError
from ladderpack.pack import WordLayout

__all__ = [
    "INSTRUCTION_SET",
    "PROGRAM_VARIANTS",
    "Instruction",
    "Program",
    "SideSet",
    "StateMachineConfig",
    "check_pins",
    "ladder_program",
    "max_cycles",
    "min_cycles",
    "program_length",
    "state_machine_config",
    "wrap_execctrl",
]

_JMP_COND = {"": 0, "!x": 1, "x--": 2, "!y": 3, "y--": 4, "x!=y": 5, "pin": 6, "!osre": 7}
_OUT_DEST = {"pins": 0, "x": 1, "y": 2, "null": 3, "pindirs": 4, "pc": 5, "isr": 6, "exec": 7}
_IN_SRC = {"pins": 0, "x": 1, "y": 2, "null": 3, "isr": 6, "osr": 7}
_MOV_DEST = {"pins": 0, "x": 1, "y": 2, "exec": 4, "pc": 5, "isr": 6, "osr": 7}
_MOV_SRC = {"pins": 0, "x": 1, "y": 2, "null": 3, "status": 5, "isr": 6, "osr": 7}
_MOV_OP = {"": 0, "!": 1, "::": 2}
_SET_DEST = {"pins": 0, "x": 1, "y": 2, "pindirs": 4}
_WAIT_SRC = {"gpio": 0, "pin": 1, "irq": 2}
_IRQ_MODE = {"set": 0, "wait": 1, "clear": 2}  # bit 6 Clr, bit 5 Wait


def _field(table: dict[str, int], key: object, what: str) -> int:
    try:
        return table[str(key)]
    except KeyError:
        raise OptionError(
            f"unknown {what} {key!r}; expected one of {sorted(table)}", field="pio"
        ) from None


def _number(value: object, lo: int, hi: int, what: str) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or not lo <= value <= hi:
        raise OptionError(f"{what} must be a whole number {lo}..{hi}, got {value!r}", field="pio")
    return value


def _jmp(a: tuple[object, ...]) -> tuple[int, str]:
    cond, addr = a
    target = _number(addr, 0, 31, "jmp target")
    return (_field(_JMP_COND, cond, "jmp condition") << 5) | target, (
        f"{cond} {target}" if cond else f"{target}"
    )


def _wait(a: tuple[object, ...]) -> tuple[int, str]:
    pol, src, index = a
    p, i = _number(pol, 0, 1, "wait polarity"), _number(index, 0, 31, "wait index")
    return (p << 7) | (_field(_WAIT_SRC, src, "wait source") << 5) | i, f"{p} {src} {i}"


def _shift(table: dict[str, int], what: str) -> Callable[[tuple[object, ...]], tuple[int, str]]:
    def enc(a: tuple[object, ...]) -> tuple[int, str]:
        target, count = a
        n = _number(count, 1, 32, "bit count")
        return (_field(table, target, what) << 5) | (n & 0x1F), f"{target}, {n}"  # 32 -> 0

    return enc


def _fifo(is_pull: bool) -> Callable[[tuple[object, ...]], tuple[int, str]]:
    def enc(a: tuple[object, ...]) -> tuple[int, str]:
        cond, block = (bool(a[0]), bool(a[1])) if a else (False, True)
        words = (["ifempty" if is_pull else "iffull"] if cond else []) + [
            "block" if block else "noblock"
        ]
        return (int(is_pull) << 7) | (int(cond) << 6) | (int(block) << 5), " ".join(words)

    return enc


def _mov(a: tuple[object, ...]) -> tuple[int, str]:
    dest, src, *rest = a
    mop = str(rest[0]) if rest else ""
    return (
        (_field(_MOV_DEST, dest, "mov destination") << 5)
        | (_field(_MOV_OP, mop, "mov operation") << 3)
        | _field(_MOV_SRC, src, "mov source")
    ), f"{dest}, {mop}{src}"


def _nop(a: tuple[object, ...]) -> tuple[int, str]:
    return (_MOV_DEST["y"] << 5) | _MOV_SRC["y"], ""  # SDK: nop is mov y, y


def _irq(a: tuple[object, ...]) -> tuple[int, str]:
    mode, index, *more = a
    i = _number(index, 0, 7, "irq index")
    rel = bool(more) and more[0] == "rel"  # index + state machine number, modulo 4
    text = f"{i}" if mode == "set" else f"{mode} {i}"  # plain "irq n" sets the flag
    text += " rel" if rel else ""
    return (_field(_IRQ_MODE, mode, "irq mode") << 5) | (0x10 if rel else 0) | i, text


def _set(a: tuple[object, ...]) -> tuple[int, str]:
    dest, data = a
    d = _number(data, 0, 31, "set data")
    return (_field(_SET_DEST, dest, "set destination") << 5) | d, f"{dest}, {d}"


#: Instruction table (RP2040 datasheet, "PIO instruction encoding"): mnemonic ->
#: (opcode in bits 15:13, encoder of bits 7:0 and operand text).
INSTRUCTION_SET: dict[str, tuple[int, Callable[[tuple[object, ...]], tuple[int, str]]]] = {
    "jmp": (0b000, _jmp),
    "wait": (0b001, _wait),
    "in": (0b010, _shift(_IN_SRC, "in source")),
    "out": (0b011, _shift(_OUT_DEST, "out destination")),
    "push": (0b100, _fifo(False)),
    "pull": (0b100, _fifo(True)),
    "mov": (0b101, _mov),
    "nop": (0b101, _nop),
    "irq": (0b110, _irq),
    "set": (0b111, _set),
}


@dataclass(frozen=True)
class SideSet:
    """Side-set configuration of a program (``.side_set count [opt] [pindirs]``).

    Attributes
    ----------
    count : int
        Side-set pins, 0..5 (0: no side-set).
    optional : bool
        Side-set is optional per instruction; costs one more bit (the enable
        bit, the field's most significant bit).
    pindirs : bool
        Side-set drives the pins' directions, not their values (EXECCTRL SIDE_PINDIR).
    """

    count: int = 0
    optional: bool = False
    pindirs: bool = False

    @property
    def field_bits(self) -> int:
        """Bits of the delay/side-set field taken by side-set (PINCTRL_SIDESET_COUNT)."""
        return self.count + int(self.optional) if self.count else 0

    @property
    def delay_max(self) -> int:
        """Largest delay left for each instruction."""
        return (1 << (5 - self.field_bits)) - 1


@dataclass(frozen=True)
class Instruction:
    """One PIO instruction.

    Attributes
    ----------
    op : str
        Mnemonic, a key of :data:`INSTRUCTION_SET`.
    args : tuple
        Operands as in the assembly text: ``("pins", 8)`` for ``out pins, 8``,
        ``(ifempty, block)`` for ``pull``, ``(cond, address)`` for ``jmp``,
        ``(dest, src[, op])`` for ``mov``, ``(polarity, source, index)`` for
        ``wait``, ``(mode, index)`` for ``irq``.
    delay : int
        Extra idle cycles after the instruction.
    side : int, optional
        Side-set value (needs a program with side-set).
    """

    op: str
    args: tuple[object, ...] = ()
    delay: int = 0
    side: int | None = None

    def _spec(self) -> tuple[int, Callable[[tuple[object, ...]], tuple[int, str]]]:
        try:
            return INSTRUCTION_SET[self.op]
        except KeyError:
            raise OptionError(
                f"unknown instruction {self.op!r}; expected one of {sorted(INSTRUCTION_SET)}",
                field="pio",
            ) from None

    def encode(self, sideset: SideSet = SideSet()) -> int:
        """Return the 16-bit machine word.

        Bits 15:13 opcode, 12:8 side-set (most significant) and delay, 7:0
        arguments (RP2040 datasheet, "PIO instruction encoding").
        """
        opcode, args = self._spec()
        arg, _ = args(self.args)
        delay = _number(self.delay, 0, sideset.delay_max, "delay")
        field = delay
        if self.side is not None:
            if not sideset.count:
                raise OptionError(
                    "side-set value given but the program has no side-set", field="pio"
                )
            value = _number(self.side, 0, (1 << sideset.count) - 1, "side-set value")
            if sideset.optional:
                value |= 1 << sideset.count  # enable bit
            field |= value << (5 - sideset.field_bits)
        elif sideset.count and not sideset.optional:
            raise OptionError(
                f"{self.text()!r} needs a side-set value (side-set is not optional)", field="pio"
            )
        return (opcode << 13) | (field << 8) | arg

    def text(self) -> str:
        """Assembly text, e.g. ``out pins, 8 side 1 [2]``."""
        _, args = self._spec()
        _, operands = args(self.args)
        s = f"{self.op} {operands}".rstrip()
        if self.side is not None:
            s += f" side {self.side}"
        return f"{s} [{self.delay}]" if self.delay else s


@dataclass(frozen=True)
class Program:
    """A PIO program: instructions plus its wrap points and how it is fed.

    Attributes
    ----------
    name : str
        Program name (an identifier).
    instructions : tuple of Instruction
        Up to 32 instructions; ``jmp`` targets are relative to the program's
        first instruction (loaders relocate them).
    wrap_target : int
        Address execution wraps to.
    wrap : int
        Address after which execution wraps (default: the last instruction).
    sideset : SideSet
        Side-set configuration (default none).
    autopull : bool
        Whether the program relies on autopull (no explicit ``pull``).
    variant : str
        Which ladder program this is (see :data:`PROGRAM_VARIANTS`).
    """

    name: str
    instructions: tuple[Instruction, ...]
    wrap_target: int = 0
    wrap: int = field(default=-1)
    sideset: SideSet = SideSet()
    autopull: bool = True
    variant: str = "custom"

    def __post_init__(self) -> None:
        if not 1 <= len(self.instructions) <= 32:
            raise OptionError(
                f"a program holds 1..32 instructions (one PIO block's memory), got "
                f"{len(self.instructions)}",
                field="pio",
            )
        if self.wrap < 0:
            object.__setattr__(self, "wrap", len(self.instructions) - 1)
        if not 0 <= self.wrap_target <= self.wrap < len(self.instructions):
            raise OptionError(
                f"wrap points {self.wrap_target}..{self.wrap} outside the program", field="pio"
            )

    @property
    def words(self) -> tuple[int, ...]:
        """Assembled 16-bit words, in address order."""
        return tuple(i.encode(self.sideset) for i in self.instructions)

    @property
    def cycles(self) -> int:
        """Cycles for one pass from wrap target to wrap, when nothing stalls or jumps."""
        body = self.instructions[self.wrap_target : self.wrap + 1]
        return sum(1 + i.delay for i in body)

    def source(self) -> str:
        """Assembly source in the SDK's PIO assembler syntax."""
        lines = [f".program {self.name}"]
        if self.sideset.count:
            lines.append(
                f".side_set {self.sideset.count}"
                + (" opt" if self.sideset.optional else "")
                + (" pindirs" if self.sideset.pindirs else "")
            )
        for addr, ins in enumerate(self.instructions):
            if addr == self.wrap_target:
                lines.append(".wrap_target")
            lines.append(f"    {ins.text()}")
            if addr == self.wrap:
                lines.append(".wrap")
        return "\n".join(lines) + "\n"


#: Ladder program variants:
#:
#: ``autopull``
#:     ``out pins, N`` with delay (and ``nop`` padding beyond 32 cycles), the
#:     OSR refilled by autopull.  Stalls, holding the pins, when the FIFO runs dry.
#: ``pull``
#:     an explicit ``pull block`` before each ``out``; for one sample per word.
#: ``loop``
#:     for repeating streams: ``pull noblock`` then ``mov x, osr`` each word, so
#:     if the FIFO is ever empty the state machine replays the last word with
#:     the same timing instead of stalling; one ``out`` per sample slot.
PROGRAM_VARIANTS = ("autopull", "pull", "loop")

_PREAMBLE_CYCLES = {"autopull": 0, "pull": 1, "loop": 2}


def _padded(ins: Instruction, cycles: int, delay_max: int = 31) -> list[Instruction]:
    """`ins` followed by nops so the group takes exactly `cycles` cycles."""
    first = min(cycles - 1, delay_max)
    out = [Instruction(ins.op, ins.args, first)]
    rest = cycles - 1 - first
    while rest > 0:
        d = min(rest - 1, delay_max)
        out.append(Instruction("nop", (), d))
        rest -= 1 + d
    return out


def min_cycles(variant: str) -> int:
    """Fewest cycles per sample a variant can run at."""
    return 1 + _field(_PREAMBLE_CYCLES, variant, "program variant")


def ladder_program(
    bits: int,
    cycles_per_sample: int,
    *,
    variant: str = "autopull",
    samples_per_word: int | None = None,
    name: str = "ladder_out",
) -> Program:
    """Build the ladder output program for a cycle budget.

    Parameters
    ----------
    bits : int
        Ladder width N (pins written per sample).
    cycles_per_sample : int
        State-machine cycles per sample; any whole number the program fits
        in 32 instructions (extra ``nop`` instructions carry delay beyond 31).
    variant : {'autopull', 'pull', 'loop'}
        See :data:`PROGRAM_VARIANTS`.
    samples_per_word : int, optional
        Samples per FIFO word (default ``32 // bits``); 'pull' needs 1.
    name : str
        Program name.

    Raises
    ------
    OptionError
        If the variant cannot run at that many cycles or does not fit.
    """
    spw = samples_per_word if samples_per_word is not None else 32 // bits
    lowest = min_cycles(variant)
    if cycles_per_sample < lowest:
        raise OptionError(
            f"the {variant} program needs at least {lowest} cycles per sample, got "
            f"{cycles_per_sample}",
            field="cycles_per_sample",
        )
    out = Instruction("out", ("pins", bits))
    if variant == "autopull":
        body = _padded(out, cycles_per_sample)
    elif variant == "pull":
        if spw != 1:
            raise OptionError(
                f"the pull program sends one sample per word; got {spw} samples per word",
                field="program",
            )
        body = [Instruction("pull", (False, True)), *_padded(out, cycles_per_sample - 1)]
    else:  # loop
        body = [Instruction("pull", (False, False)), Instruction("mov", ("x", "osr"))]
        for k in range(spw):
            last = k == spw - 1
            body += _padded(out, cycles_per_sample - (2 if last else 0))
    assert len(body) == program_length(variant, cycles_per_sample, spw)
    if len(body) > 32:
        raise OptionError(
            f"the {variant} program for {spw} sample(s) per word at {cycles_per_sample} cycles "
            f"per sample needs {len(body)} instructions; a PIO block holds 32 (use fewer "
            "samples per word or a faster sample rate)",
            field="program",
        )
    return Program(name, tuple(body), autopull=(variant == "autopull"), variant=variant)


def _groups(cycles: int) -> int:
    """Instructions :func:`_padded` uses for `cycles` cycles (32 cycles each at most)."""
    return -(-cycles // 32)


def program_length(variant: str, cycles_per_sample: int, samples_per_word: int) -> int:
    """Instructions the ladder program needs (may exceed 32: then it cannot be built)."""
    c = cycles_per_sample
    if variant == "autopull":
        return _groups(c)
    if variant == "pull":
        return 1 + _groups(c - 1)
    if variant == "loop":
        return 2 + (samples_per_word - 1) * _groups(c) + _groups(c - 2)
    raise OptionError(
        f"unknown program variant {variant!r}; expected one of {', '.join(PROGRAM_VARIANTS)}",
        field="program",
    )


@functools.lru_cache(maxsize=256)
def max_cycles(variant: str, samples_per_word: int, bits: int = 8) -> int:
    """Most cycles per sample for which the variant still fits in 32 instructions.

    Returns 0 when the variant cannot be built at all for this word layout.
    """
    best = 0
    for c in range(min_cycles(variant), 32 * 32 + 1):
        if program_length(variant, c, samples_per_word) <= 32:
            best = c
    return best


@dataclass(frozen=True)
class StateMachineConfig:
    """Register values that set a state machine up for the ladder program.

    Attributes
    ----------
    clkdiv, execctrl, shiftctrl, pinctrl : int
        Values for ``SMx_CLKDIV``, ``SMx_EXECCTRL``, ``SMx_SHIFTCTRL`` and
        ``SMx_PINCTRL`` with the program loaded at address 0.
    out_base : int
        First GPIO of the ladder (bit 0 of each sample).
    out_count : int
        Number of pins written.
    autopull : bool
        Whether autopull is on.
    gpio_base : int
        The PIO block's GPIO base (0, or 16 for GPIO 32 and above on the
        RP2350B); PINCTRL's OUT_BASE is relative to it.
    sideset_base : int, optional
        First GPIO driven by side-set (None: the program has no side-set).
    sideset_count : int
        GPIOs driven by side-set.
    """

    clkdiv: int
    execctrl: int
    shiftctrl: int
    pinctrl: int
    out_base: int
    out_count: int
    autopull: bool = True
    gpio_base: int = 0
    sideset_base: int | None = None
    sideset_count: int = 0

    def to_dict(self) -> dict[str, int | bool]:
        """Plain-data description."""
        return {
            "clkdiv": self.clkdiv,
            "execctrl": self.execctrl,
            "shiftctrl": self.shiftctrl,
            "pinctrl": self.pinctrl,
            "out_base": self.out_base,
            "out_count": self.out_count,
            "autopull": self.autopull,
            **({"gpio_base": self.gpio_base} if self.gpio_base else {}),
            **(
                {"sideset_base": self.sideset_base, "sideset_count": self.sideset_count}
                if self.sideset_base is not None
                else {}
            ),
        }


#: SMx_EXECCTRL reset value: WRAP_TOP = 31, everything else 0.
EXECCTRL_RESET = 0x0001F000


def wrap_execctrl(program: Program) -> int:
    """SMx_EXECCTRL at reset with the program's wrap points, loaded at address 0.

    WRAP_TOP is bits 16:12 and WRAP_BOTTOM bits 11:7 (RP2040 datasheet, SMx_EXECCTRL).
    """
    return (EXECCTRL_RESET & ~0x1FF80) | (program.wrap << 12) | (program.wrap_target << 7)


def state_machine_config(
    program: Program,
    layout: WordLayout,
    plan: ClockPlan,
    *,
    out_base: int,
    gpio_count: int = 30,
    gpio_base: int = 0,
) -> StateMachineConfig:
    """Compute the state-machine registers for a ladder stream.

    Parameters
    ----------
    program : Program
        The program (assumed loaded at address 0).
    layout : WordLayout
        Sets the shift direction and autopull threshold.
    plan : ClockPlan
        Sets the clock divider.
    out_base : int
        First GPIO of the ladder.
    gpio_count : int
        User GPIOs on the target (30 on RP2040).
    gpio_base : int
        The PIO block's GPIO base (RP2350: 0 or 16); PINCTRL holds pin numbers
        relative to it (RP2350 datasheet, PIO chapter, GPIOBASE register).
    """
    check_pins(out_base, layout.bits, gpio_count)
    if not 0 <= out_base - gpio_base <= 31 or out_base + layout.bits > gpio_base + 32:
        raise OptionError(
            f"GPIO {out_base}..{out_base + layout.bits - 1} are outside the PIO window "
            f"{gpio_base}..{gpio_base + 31}",
            field="out_base",
        )
    execctrl = wrap_execctrl(program)
    if program.sideset.optional:
        execctrl |= 1 << 30  # SIDE_EN
    shiftctrl = (
        (1 << 30)  # FJOIN_TX: 8-deep TX FIFO
        | ((layout.pull_threshold & 0x1F) << 25)  # PULL_THRESH, 0 means 32
        | (int(layout.shift_right) << 19)  # OUT_SHIFTDIR
        | (1 << 18)  # IN_SHIFTDIR (reset value, unused)
        | (int(program.autopull) << 17)  # AUTOPULL
    )
    # PINCTRL: SIDESET_COUNT 31:29 (enable bit included), OUT_COUNT 25:20, OUT_BASE 4:0.
    pinctrl = (program.sideset.field_bits << 29) | (layout.bits << 20) | (out_base - gpio_base)
    return StateMachineConfig(
        plan.clkdiv_register,
        execctrl,
        shiftctrl,
        pinctrl,
        out_base,
        layout.bits,
        program.autopull,
        gpio_base,
    )


def check_pins(out_base: int, bits: int, gpio_count: int = 30) -> None:
    """Check that GPIO out_base .. out_base + bits - 1 exist on the target.

    Raises
    ------
    OptionError
        Naming the pins needed and the pins the target has.
    """
    if isinstance(out_base, bool) or not isinstance(out_base, int) or out_base < 0:
        raise OptionError(f"must be a GPIO number >= 0, got {out_base!r}", field="out_base")
    if isinstance(gpio_count, bool) or not isinstance(gpio_count, int) or not gpio_count >= 1:
        raise OptionError(f"must be a whole number >= 1, got {gpio_count!r}", field="gpio_count")
    if out_base + bits > gpio_count:
        raise OptionError(
            f"a {bits}-bit ladder from GPIO {out_base} needs GPIO {out_base}.."
            f"{out_base + bits - 1}, but the target has GPIO 0..{gpio_count - 1}",
            field="out_base",
        )
