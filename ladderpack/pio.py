"""PIO state-machine programs: description, encoding and configuration.

One description gives both the assembly text and the machine words, so the
two cannot disagree.  Field layouts follow the RP2040 datasheet, section
"PIO Instruction Set" ("PIO instruction encoding" table): every instruction
is 16 bits, bits 15:13 the opcode, 12:8 the delay/side-set field, 7:0 the
arguments.  Register layouts follow the datasheet's PIO register list
(``SMx_CLKDIV``, ``SMx_EXECCTRL``, ``SMx_SHIFTCTRL``, ``SMx_PINCTRL``).
"""

from __future__ import annotations

from dataclasses import dataclass, field

from ladderpack.clock import ClockPlan
from ladderpack.errors import OptionError
from ladderpack.pack import WordLayout

__all__ = [
    "Instruction",
    "Program",
    "StateMachineConfig",
    "ladder_program",
    "state_machine_config",
]

_OPCODE = {
    "jmp": 0,
    "wait": 1,
    "in": 2,
    "out": 3,
    "push": 4,
    "pull": 4,
    "mov": 5,
    "irq": 6,
    "set": 7,
}
_JMP_COND = {"": 0, "!x": 1, "x--": 2, "!y": 3, "y--": 4, "x!=y": 5, "pin": 6, "!osre": 7}
_OUT_DEST = {"pins": 0, "x": 1, "y": 2, "null": 3, "pindirs": 4, "pc": 5, "isr": 6, "exec": 7}
_IN_SRC = {"pins": 0, "x": 1, "y": 2, "null": 3, "isr": 6, "osr": 7}
_MOV_DEST = {"pins": 0, "x": 1, "y": 2, "exec": 4, "pc": 5, "isr": 6, "osr": 7}
_MOV_SRC = {"pins": 0, "x": 1, "y": 2, "null": 3, "status": 5, "isr": 6, "osr": 7}
_MOV_OP = {"": 0, "!": 1, "::": 2}
_SET_DEST = {"pins": 0, "x": 1, "y": 2, "pindirs": 4}
_WAIT_SRC = {"gpio": 0, "pin": 1, "irq": 2}


def _field(table: dict[str, int], key: str, what: str) -> int:
    try:
        return table[key]
    except KeyError:
        raise OptionError(
            f"unknown {what} {key!r}; expected one of {sorted(table)}", field="pio"
        ) from None


def _count(n: int) -> int:
    if not 1 <= n <= 32:
        raise OptionError(f"bit count must be 1..32, got {n}", field="pio")
    return n & 0x1F  # 32 is encoded as 0


@dataclass(frozen=True)
class Instruction:
    """One PIO instruction.

    Attributes
    ----------
    op : str
        Mnemonic: ``jmp``, ``wait``, ``in``, ``out``, ``push``, ``pull``,
        ``mov``, ``irq``, ``set`` or ``nop``.
    args : tuple
        Operands, as in the assembly text (see :meth:`arguments`).
    delay : int
        Extra idle cycles after the instruction (0..31 less side-set bits).
    """

    op: str
    args: tuple[object, ...] = ()
    delay: int = 0

    def arguments(self) -> tuple[int, str]:
        """Return the 8-bit argument field and the operand text."""
        op, a = self.op, self.args
        if op == "jmp":
            cond, addr = str(a[0]), int(a[1])  # type: ignore[call-overload]
            if not 0 <= addr <= 31:
                raise OptionError(f"jmp target must be 0..31, got {addr}", field="pio")
            text = f"{cond} {addr}" if cond else f"{addr}"
            return (_field(_JMP_COND, cond, "jmp condition") << 5) | addr, text
        if op == "wait":
            pol, src, index = int(a[0]), str(a[1]), int(a[2])  # type: ignore[call-overload]
            return ((pol & 1) << 7) | (_field(_WAIT_SRC, src, "wait source") << 5) | (
                index & 0x1F
            ), f"{pol} {src} {index}"
        if op in ("out", "in"):
            target, n = str(a[0]), int(a[1])  # type: ignore[call-overload]
            table, what = (_OUT_DEST, "out destination") if op == "out" else (_IN_SRC, "in source")
            return (_field(table, target, what) << 5) | _count(n), f"{target}, {n}"
        if op in ("pull", "push"):
            cond, block = bool(a[0]) if a else False, bool(a[1]) if len(a) > 1 else True
            word = (0x80 if op == "pull" else 0) | (int(cond) << 6) | (int(block) << 5)
            words = []
            if cond:
                words.append("ifempty" if op == "pull" else "iffull")
            words.append("block" if block else "noblock")
            return word, " ".join(words)
        if op == "mov":
            dest, src = str(a[0]), str(a[1])
            mop = str(a[2]) if len(a) > 2 else ""
            return (_field(_MOV_DEST, dest, "mov destination") << 5) | (
                _field(_MOV_OP, mop, "mov operation") << 3
            ) | _field(_MOV_SRC, src, "mov source"), (f"{dest}, {mop}{src}")
        if op == "nop":
            return (_MOV_DEST["y"] << 5) | _MOV_SRC["y"], ""
        if op == "irq":
            clear, wait, index = bool(a[0]), bool(a[1]), int(a[2])  # type: ignore[call-overload]
            mode = "clear" if clear else ("wait" if wait else "set")
            return (int(clear) << 6) | (int(wait) << 5) | (index & 0x1F), f"{mode} {index}"
        if op == "set":
            dest, data = str(a[0]), int(a[1])  # type: ignore[call-overload]
            if not 0 <= data <= 31:
                raise OptionError(f"set data must be 0..31, got {data}", field="pio")
            return (_field(_SET_DEST, dest, "set destination") << 5) | data, f"{dest}, {data}"
        raise OptionError(f"unknown instruction {op!r}", field="pio")

    def encode(self, *, sideset_bits: int = 0) -> int:
        """Return the 16-bit machine word."""
        delay_bits = 5 - sideset_bits
        if not 0 <= self.delay < (1 << delay_bits):
            raise OptionError(
                f"delay must be 0..{(1 << delay_bits) - 1}, got {self.delay}", field="pio"
            )
        opcode = _OPCODE["mov" if self.op == "nop" else self.op]
        arg, _ = self.arguments()
        return (opcode << 13) | (self.delay << 8) | arg

    def text(self) -> str:
        """Assembly text, e.g. ``out pins, 8 [1]``."""
        _, operands = self.arguments()
        s = f"{self.op} {operands}".rstrip()
        return f"{s} [{self.delay}]" if self.delay else s


@dataclass(frozen=True)
class Program:
    """A PIO program: instructions plus its wrap points.

    Attributes
    ----------
    name : str
        Program name (an identifier).
    instructions : tuple of Instruction
        Up to 32 instructions.
    wrap_target : int
        Address execution wraps to.
    wrap : int
        Address after which execution wraps.
    """

    name: str
    instructions: tuple[Instruction, ...]
    wrap_target: int = 0
    wrap: int = field(default=-1)

    def __post_init__(self) -> None:
        if not 1 <= len(self.instructions) <= 32:
            raise OptionError(
                f"a program holds 1..32 instructions, got {len(self.instructions)}", field="pio"
            )
        if self.wrap < 0:
            object.__setattr__(self, "wrap", len(self.instructions) - 1)

    @property
    def words(self) -> tuple[int, ...]:
        """Assembled 16-bit words, in address order."""
        return tuple(i.encode() for i in self.instructions)

    @property
    def cycles(self) -> int:
        """Cycles for one pass from wrap target to wrap, when nothing stalls."""
        body = self.instructions[self.wrap_target : self.wrap + 1]
        return sum(1 + i.delay for i in body)

    def source(self) -> str:
        """Assembly source in the SDK's PIO assembler syntax."""
        lines = [f".program {self.name}"]
        for addr, ins in enumerate(self.instructions):
            if addr == self.wrap_target:
                lines.append(".wrap_target")
            lines.append(f"    {ins.text()}")
            if addr == self.wrap:
                lines.append(".wrap")
        return "\n".join(lines) + "\n"


def ladder_program(bits: int, cycles_per_sample: int, *, name: str = "ladder_out") -> Program:
    """The ladder output loop: one ``out pins, N`` per sample, autopull on.

    Parameters
    ----------
    bits : int
        Ladder width N (pins written per sample).
    cycles_per_sample : int
        State-machine cycles per sample, 1..32 (the delay is ``cycles - 1``).
    name : str
        Program name.
    """
    if not 1 <= cycles_per_sample <= 32:
        raise OptionError(
            f"one out instruction covers 1..32 cycles, got {cycles_per_sample}",
            field="cycles_per_sample",
        )
    return Program(name, (Instruction("out", ("pins", bits), cycles_per_sample - 1),))


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
    """

    clkdiv: int
    execctrl: int
    shiftctrl: int
    pinctrl: int
    out_base: int
    out_count: int

    def to_dict(self) -> dict[str, int]:
        """Plain-data description."""
        return {
            "clkdiv": self.clkdiv,
            "execctrl": self.execctrl,
            "shiftctrl": self.shiftctrl,
            "pinctrl": self.pinctrl,
            "out_base": self.out_base,
            "out_count": self.out_count,
        }


#: SMx_EXECCTRL reset value: WRAP_TOP = 31, everything else 0.
EXECCTRL_RESET = 0x0001F000


def state_machine_config(
    program: Program, layout: WordLayout, plan: ClockPlan, *, out_base: int, gpio_count: int = 30
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
    """
    if not out_base >= 0 or out_base + layout.bits > gpio_count:
        raise OptionError(
            f"a {layout.bits}-bit ladder from GPIO {out_base} needs GPIO {out_base}.."
            f"{out_base + layout.bits - 1}, but the target has GPIO 0..{gpio_count - 1}",
            field="out_base",
        )
    execctrl = (EXECCTRL_RESET & ~0x1FF80) | (program.wrap << 12) | (program.wrap_target << 7)
    shiftctrl = (
        (1 << 30)  # FJOIN_TX: 8-deep TX FIFO
        | ((layout.pull_threshold & 0x1F) << 25)  # PULL_THRESH, 0 means 32
        | (int(layout.shift_right) << 19)  # OUT_SHIFTDIR
        | (1 << 18)  # IN_SHIFTDIR (reset value, unused)
        | (1 << 17)  # AUTOPULL
    )
    pinctrl = (layout.bits << 20) | out_base  # OUT_COUNT, OUT_BASE
    return StateMachineConfig(
        plan.clkdiv_register, execctrl, shiftctrl, pinctrl, out_base, layout.bits
    )
