"""A behavioural model of one PIO state machine, written for the tests.

It decodes machine words with the field layout of the RP2040 datasheet ("PIO
instruction encoding" table; OUT, PULL, MOV, SET, JMP sections; "Autopull";
"Output Shift Register") and runs them cycle by cycle.  It shares no code with
ladderpack's encoder, so agreement between the two is evidence, not a tautology.
"""

from __future__ import annotations

from dataclasses import dataclass, field

MASK32 = 0xFFFFFFFF


@dataclass
class OutEvent:
    cycle: int
    value: int  # the bits written to the out pins (bit 0 -> out_base)


@dataclass
class PioModel:
    program: list[int]
    wrap_target: int
    wrap: int
    shift_right: bool
    autopull: bool
    pull_thresh: int  # 1..32
    out_count: int
    sideset_bits: int = 0
    x: int = 0
    y: int = 0
    osr: int = 0
    osr_count: int = 32  # empty after a restart
    pc: int = 0
    events: list[OutEvent] = field(default_factory=list)

    def _shift_out(self, n: int) -> int:
        n = n or 32
        if self.shift_right:
            data = self.osr & ((1 << n) - 1)
            self.osr = self.osr >> n if n < 32 else 0
        else:
            data = self.osr >> (32 - n)
            self.osr = (self.osr << n) & MASK32
        self.osr_count = min(32, self.osr_count + n)
        return data

    def run(self, fifo: list[int], *, max_cycles: int, stop_when_starved: bool = True) -> int:
        """Run until the FIFO is empty and the machine stalls (or max_cycles); return cycles."""
        queue = list(fifo)
        delay = 0
        for cycle in range(max_cycles):
            if delay:
                delay -= 1
                continue
            word = self.program[self.pc]
            op, field5, arg = word >> 13, (word >> 8) & 0x1F, word & 0xFF
            delay_here = field5 & ((1 << (5 - self.sideset_bits)) - 1)
            next_pc = self.wrap_target if self.pc == self.wrap else self.pc + 1
            if op == 0b011:  # OUT
                if self.autopull and self.osr_count >= self.pull_thresh:
                    if not queue:
                        if stop_when_starved:
                            return cycle
                        continue  # stall
                    self.osr, self.osr_count = queue.pop(0), 0
                dest, n = arg >> 5, arg & 0x1F
                data = self._shift_out(n)
                if dest == 0b000:
                    self.events.append(OutEvent(cycle, data & ((1 << self.out_count) - 1)))
                elif dest == 0b001:
                    self.x = data
                elif dest == 0b010:
                    self.y = data
            elif op == 0b100 and arg & 0x80:  # PULL
                if_empty, block = bool(arg & 0x40), bool(arg & 0x20)
                if not (if_empty and self.osr_count < self.pull_thresh):
                    if queue:
                        self.osr, self.osr_count = queue.pop(0), 0
                    elif block:
                        if stop_when_starved:
                            return cycle
                        continue
                    else:  # noblock on an empty FIFO copies X
                        self.osr, self.osr_count = self.x, 0
            elif op == 0b101:  # MOV (bit-reverse and invert not needed here)
                dest, mop, src = arg >> 5, (arg >> 3) & 3, arg & 7
                value = {1: self.x, 2: self.y, 3: 0, 7: self.osr}[src]
                if mop == 1:
                    value = ~value & MASK32
                if dest == 1:
                    self.x = value
                elif dest == 2:
                    self.y = value
                elif dest == 7:
                    self.osr, self.osr_count = value, 0
            elif op == 0b111:  # SET
                dest, data = arg >> 5, arg & 0x1F
                if dest == 1:
                    self.x = data
                elif dest == 2:
                    self.y = data
            elif op == 0b000:  # JMP
                cond, addr = arg >> 5, arg & 0x1F
                take = {
                    0: True,
                    1: self.x == 0,
                    2: self.x != 0,
                    3: self.y == 0,
                    4: self.y != 0,
                    5: self.x != self.y,
                    7: self.osr_count < self.pull_thresh,
                }[cond]
                if cond == 2:
                    self.x = (self.x - 1) & MASK32
                if cond == 4:
                    self.y = (self.y - 1) & MASK32
                if take:
                    next_pc = addr
            else:
                raise NotImplementedError(f"model lacks opcode {op:03b}")
            self.pc = next_pc
            delay = delay_here
        return max_cycles
