"""PIO instruction encoding, program variants and what leaves on the pins."""

from __future__ import annotations

import adafruit_pioasm
import numpy as np
import pytest
from pio_model import PioModel

from ladderpack.clock import plan_clock
from ladderpack.errors import OptionError
from ladderpack.pack import WordLayout, pack
from ladderpack.pio import (
    Instruction,
    Program,
    SideSet,
    ladder_program,
    max_cycles,
    state_machine_config,
)
from ladderpack.quantize import Codes

# RP2040 datasheet, "PIO instruction encoding" table, worked in REFERENCES.md 7.1.
DATASHEET_WORDS = [
    (Instruction("out", ("pins", 8)), 0x6008),
    (Instruction("out", ("pins", 16)), 0x6010),
    (Instruction("out", ("pins", 32)), 0x6000),  # bit count 32 is encoded as 0
    (Instruction("out", ("pins", 8), 1), 0x6108),
    (Instruction("out", ("x", 1)), 0x6021),
    (Instruction("pull", (False, True)), 0x80A0),
    (Instruction("pull", (False, False)), 0x8080),
    (Instruction("pull", (True, True)), 0x80E0),
    (Instruction("jmp", ("", 0)), 0x0000),
    (Instruction("jmp", ("x--", 3)), 0x0043),
    (Instruction("set", ("pins", 1)), 0xE001),
    (Instruction("set", ("pindirs", 31)), 0xE09F),
    (Instruction("mov", ("pins", "x")), 0xA001),
    (Instruction("mov", ("x", "osr")), 0xA027),
    (Instruction("nop"), 0xA042),  # SDK: pio_encode_nop is mov y, y
]

# Further instructions, checked against the independent assembler only.
MORE = [
    Instruction("wait", (1, "gpio", 5)),
    Instruction("wait", (0, "pin", 2), 3),
    Instruction("wait", (1, "irq", 4)),
    Instruction("irq", ("set", 3)),
    Instruction("irq", ("wait", 1)),
    Instruction("irq", ("clear", 7)),
    Instruction("in", ("pins", 4)),
    Instruction("in", ("osr", 32)),
    Instruction("push", (False, True)),
    Instruction("push", (True, False)),
    Instruction("mov", ("y", "x", "!")),
    Instruction("mov", ("osr", "x", "::")),
    Instruction("jmp", ("!osre", 7), 31),
    Instruction("jmp", ("pin", 30)),
    Instruction("jmp", ("x!=y", 1)),
    Instruction("set", ("y", 17), 9),
    Instruction("out", ("pindirs", 3)),
    Instruction("out", ("exec", 16)),
]


@pytest.mark.parametrize(("ins", "word"), DATASHEET_WORDS, ids=lambda v: str(v))
def test_encoding_matches_datasheet(ins: Instruction, word: int) -> None:
    assert ins.encode() == word


@pytest.mark.parametrize("ins", [i for i, _ in DATASHEET_WORDS] + MORE, ids=lambda v: v.text())
def test_text_and_word_agree_with_independent_assembler(ins: Instruction) -> None:
    # Independent assembler: adafruit-circuitpython-pioasm (PyPI).
    assert list(adafruit_pioasm.assemble(ins.text())) == [ins.encode()]


@pytest.mark.parametrize(("count", "optional"), [(1, False), (1, True), (2, True), (3, False)])
def test_side_set_agrees_with_independent_assembler(count: int, optional: bool) -> None:
    ss = SideSet(count, optional)
    top = (1 << count) - 1
    ins = (
        Instruction("out", ("pins", 8), 1, side=top),
        Instruction("nop", (), ss.delay_max, side=0),
    )
    if optional:
        ins = (*ins, Instruction("pull", (False, True), 2))
    prog = Program("ss", ins, sideset=ss)
    independent = adafruit_pioasm.Program(prog.source())
    assert list(independent.assembled) == list(prog.words)


def test_side_set_bounds() -> None:
    with pytest.raises(OptionError, match="needs a side-set value"):
        Instruction("nop").encode(SideSet(1, False))
    with pytest.raises(OptionError, match="delay"):
        Instruction("nop", (), 16, side=1).encode(SideSet(1, False))


VARIANT_CASES = [
    (variant, bits, cycles)
    for bits in (1, 2, 5, 8, 10, 12, 16)
    for variant, cycles in (
        ("autopull", 1),
        ("autopull", 32),
        ("autopull", 33),
        ("autopull", 700),
        ("pull", 2),
        ("pull", 45),
        ("loop", 3),
        ("loop", 31),
    )
]


def _build(variant: str, bits: int, cycles: int) -> Program | None:
    spw = 1 if variant == "pull" else min(32 // bits, 8)
    if max_cycles(variant, spw, bits) < cycles:
        return None
    return ladder_program(bits, cycles, variant=variant, samples_per_word=spw)


@pytest.mark.parametrize(("variant", "bits", "cycles"), VARIANT_CASES)
def test_program_variants_assemble_identically(variant: str, bits: int, cycles: int) -> None:
    # Word-for-word agreement with adafruit-circuitpython-pioasm over generated programs.
    prog = _build(variant, bits, cycles)
    if prog is None:
        pytest.skip("does not fit in 32 instructions (refusal tested separately)")
    independent = adafruit_pioasm.Program(prog.source())
    assert list(independent.assembled) == list(prog.words)
    assert independent.pio_kwargs["wrap"] == prog.wrap
    assert independent.pio_kwargs["wrap_target"] == prog.wrap_target


def test_too_many_instructions_refused() -> None:
    with pytest.raises(OptionError, match="needs 33 instructions"):
        ladder_program(8, 1025)
    with pytest.raises(OptionError, match="32"):
        ladder_program(1, 3, variant="loop")  # 32 out slots + pull + mov
    with pytest.raises(OptionError, match="one sample per word"):
        ladder_program(8, 4, variant="pull")
    with pytest.raises(OptionError, match="at least 3 cycles"):
        ladder_program(8, 2, variant="loop")


def _wiring_to_code(value: int, bits: int, msb_high: bool, invert: bool) -> int:
    """What the ladder sees: pin k drives ladder bit k (msb-high) or N-1-k (msb-low),
    through an inverting buffer when asked.  Written from the wiring, not from pack.py."""
    code = 0
    for pin in range(bits):
        bit = (value >> pin) & 1
        if invert:
            bit ^= 1
        ladder_bit = pin if msb_high else bits - 1 - pin
        code |= bit << ladder_bit
    return code


MODEL_CASES = [
    (bits, shift_right, msb_high, invert, variant, cycles)
    for bits in range(1, 17)
    for shift_right in (True, False)
    for msb_high in (True, False)
    for invert, variant, cycles in (
        (False, "autopull", 1),
        (True, "autopull", 37),
        (False, "pull", 2),
        (False, "loop", 5),
    )
]


@pytest.mark.parametrize(
    ("bits", "shift_right", "msb_high", "invert", "variant", "cycles"), MODEL_CASES
)
def test_codes_leave_on_the_pins_in_order(
    bits: int, shift_right: bool, msb_high: bool, invert: bool, variant: str, cycles: int
) -> None:
    # Behavioural model of the OSR, autopull and the instructions (tests/pio_model.py,
    # RP2040 datasheet semantics) runs the assembled program on the packed words.
    spw = 1 if variant == "pull" else min(32 // bits, 6 if variant == "loop" else 32)
    layout = WordLayout(
        bits, shift_right=shift_right, per_word=spw, msb_high=msb_high, invert=invert
    )
    rng = np.random.default_rng(bits)
    n = 3 * spw + 1  # a partial last word
    codes = rng.integers(0, 1 << bits, n).astype(np.uint16)
    packed = pack(Codes(codes, bits), layout, pad_code=0)
    prog = ladder_program(bits, cycles, variant=variant, samples_per_word=spw)
    model = PioModel(
        list(prog.words),
        prog.wrap_target,
        prog.wrap,
        shift_right,
        prog.autopull,
        layout.pull_threshold,
        bits,
    )
    model.run(
        [int(w) for w in packed.words],
        max_cycles=cycles * (n + 3 * spw) + 10,
        stop_when_starved=(variant != "loop"),
    )
    seen = [_wiring_to_code(e.value, bits, msb_high, invert) for e in model.events]
    assert seen[:n] == codes.tolist()
    gaps = np.diff([e.cycle for e in model.events])
    assert set(gaps.tolist()) == {cycles}  # every sample lasts exactly the planned cycles
    if variant == "loop":  # FIFO empty: the last word repeats with the same timing
        last_word = [int(c) for c in np.append(codes[3 * spw :], [0] * (spw - 1))]
        assert seen[4 * spw : 5 * spw] == last_word
    else:
        assert len(seen) == len(packed.words) * spw  # stalls after the last word


def test_state_machine_registers() -> None:
    # SHIFTCTRL: FJOIN_TX bit 30, PULL_THRESH 29:25 (0 = 32), OUT_SHIFTDIR 19,
    # IN_SHIFTDIR 18, AUTOPULL 17; PINCTRL: SIDESET_COUNT 31:29, OUT_COUNT 25:20,
    # OUT_BASE 4:0; EXECCTRL: WRAP_TOP 16:12, WRAP_BOTTOM 11:7 (RP2040 datasheet PIO
    # register list; field positions as in the vendor SDK register header).
    prog = ladder_program(12, 1)
    cfg = state_machine_config(prog, WordLayout(12), plan_clock(44100), out_base=0)
    assert cfg.shiftctrl == (1 << 30) | (24 << 25) | (1 << 19) | (1 << 18) | (1 << 17)
    assert cfg.pinctrl == (12 << 20) | 0
    assert cfg.execctrl == 0  # wrap top = wrap bottom = 0 for a one-instruction loop
    assert cfg.clkdiv == (2834 << 16) | (120 << 8)
    left = state_machine_config(
        ladder_program(8, 1), WordLayout(8, shift_right=False), plan_clock(8000), out_base=16
    )
    assert left.shiftctrl == (1 << 30) | (0 << 25) | (1 << 18) | (1 << 17)
    assert left.pinctrl == (8 << 20) | 16
    loop = ladder_program(8, 4, variant="loop", samples_per_word=4)
    cfg = state_machine_config(loop, WordLayout(8), plan_clock(8000), out_base=3)
    assert cfg.shiftctrl & (1 << 17) == 0 and not cfg.autopull  # explicit pull, no autopull
    assert cfg.execctrl == ((len(loop.instructions) - 1) << 12)


def test_pins_beyond_target_rejected() -> None:
    with pytest.raises(OptionError, match=r"GPIO 24\.\.35"):
        state_machine_config(ladder_program(12, 1), WordLayout(12), plan_clock(8000), out_base=24)
