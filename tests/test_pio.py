"""PIO instruction encoding and state-machine registers."""

from __future__ import annotations

import adafruit_pioasm
import pytest

from ladderpack.clock import plan_clock
from ladderpack.errors import OptionError
from ladderpack.pack import WordLayout
from ladderpack.pio import Instruction, ladder_program, state_machine_config

# RP2040 datasheet, "PIO instruction encoding" table, as worked in REFERENCES.md 7.1.
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


@pytest.mark.parametrize(("ins", "word"), DATASHEET_WORDS, ids=lambda v: str(v))
def test_encoding_matches_datasheet(ins: Instruction, word: int) -> None:
    assert ins.encode() == word


@pytest.mark.parametrize(("ins", "word"), DATASHEET_WORDS, ids=lambda v: str(v))
def test_text_assembles_to_same_word_with_independent_assembler(
    ins: Instruction, word: int
) -> None:
    # Independent assembler: adafruit-circuitpython-pioasm (PyPI).
    assert list(adafruit_pioasm.assemble(ins.text())) == [word]


@pytest.mark.parametrize("bits", range(1, 17))
@pytest.mark.parametrize("cycles", [1, 2, 7, 32])
def test_ladder_program_out_word(bits: int, cycles: int) -> None:
    # OUT: opcode 011, dest PINS 000, count in bits 4:0, delay in 12:8 (datasheet table).
    prog = ladder_program(bits, cycles)
    assert prog.words == (0x6000 | (cycles - 1) << 8 | bits,)
    assert prog.cycles == cycles
    independent = adafruit_pioasm.Program(prog.source())
    assert list(independent.assembled) == list(prog.words)
    assert independent.pio_kwargs["wrap"] == prog.wrap
    assert independent.pio_kwargs["wrap_target"] == prog.wrap_target


def test_delay_out_of_range() -> None:
    with pytest.raises(OptionError):
        ladder_program(8, 33)


def test_state_machine_registers() -> None:
    # SHIFTCTRL: FJOIN_TX bit 30, PULL_THRESH 29:25 (0 = 32), OUT_SHIFTDIR 19,
    # IN_SHIFTDIR 18, AUTOPULL 17; PINCTRL: OUT_COUNT 25:20, OUT_BASE 4:0 (RP2040 datasheet
    # PIO register list; field positions as in the vendor SDK register header).
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


def test_pins_beyond_target_rejected() -> None:
    with pytest.raises(OptionError, match=r"GPIO 24\.\.35"):
        state_machine_config(ladder_program(12, 1), WordLayout(12), plan_clock(8000), out_base=24)
