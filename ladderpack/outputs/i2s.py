"""I2S output: the clock plan of a state machine that drives bit clock, word select and data.

The frame is the I2S bus's (Philips Semiconductors, "I2S bus specification", 1986, revised
1996; from memory, not yet checked against the document): two channel slots per word-select
period, left while word select is low, data MSB first and one bit clock after the
word-select edge.  The state machine spends `cycles_per_bit` of its clocks on each bit
(the bit clock low for half of them, high for the other half, by side-set), so one frame
takes ``cycles_per_bit x 2 x slot_bits`` state-machine clocks and the frame rate is

    rate = f_sys / (D x cycles_per_bit x 2 x slot_bits)

with D the 16.8 fixed-point divider of :mod:`ladderpack.clock`.  An integer divider gives
a bit clock with no jitter; a fractional one stretches some state-machine periods by one
system clock, which an I2S receiver sees as bit-clock jitter (many DACs rebuild their
master clock from the bit clock, so it reaches the analog output).  The planner prefers
an integer divider within the tolerance, as for the ladder.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from ladderpack.clock import ClockPlan, plan_clock
from ladderpack.defaults import DEFAULT_SYS_CLOCK_HZ, I2S_SAMPLE_BITS
from ladderpack.defaults import FRAME_FORMATS as _FRAME_FORMATS
from ladderpack.errors import OptionError
from ladderpack.pio import Instruction, Program, SideSet, StateMachineConfig, wrap_execctrl

__all__ = [
    "FRAME_FORMATS",
    "SAMPLE_BITS",
    "SLOT_BITS",
    "I2sLayout",
    "I2sPlan",
    "i2s_entry",
    "i2s_program",
    "i2s_state_machine",
    "plan_i2s",
]

#: Channel slot widths: 16-bit slots carry 16-bit samples, 32-bit slots 16, 24 or 32.
SLOT_BITS = (16, 32)

#: State-machine clocks per bit: one with the bit clock low, one with it high.
CYCLES_PER_BIT = 2


@dataclass(frozen=True)
class I2sPlan:
    """An I2S frame clock: the divider, the frame (sample) rate and the bit clock.

    Attributes
    ----------
    clock : ClockPlan
        The state machine's divider; its ``cycles_per_sample`` is the cycles per frame.
    slot_bits : int
        Bits per channel slot (16 or 32); a frame holds two slots.
    """

    clock: ClockPlan
    slot_bits: int

    @property
    def bits_per_frame(self) -> int:
        """Bit clocks per frame (two slots)."""
        return 2 * self.slot_bits

    @property
    def frame_rate_hz(self) -> Fraction:
        """Frames (stereo samples) per second, exact."""
        return self.clock.achieved_rate_hz

    @property
    def bit_clock_hz(self) -> Fraction:
        """Bit-clock frequency, Hz, exact."""
        return self.frame_rate_hz * self.bits_per_frame

    def to_dict(self) -> dict[str, object]:
        """Plain-data description."""
        return {
            **self.clock.to_dict(),
            "slot_bits": self.slot_bits,
            "bits_per_frame": self.bits_per_frame,
            "cycles_per_bit": CYCLES_PER_BIT,
            "bit_clock_hz": float(self.bit_clock_hz),
            "sample_bits": [b for b in (16, 24, 32) if b <= self.slot_bits],
        }


def plan_i2s(
    rate_hz: float | int | Fraction,
    *,
    sys_clock_hz: int = DEFAULT_SYS_CLOCK_HZ,
    slot_bits: int = 32,
    tolerance_ppm: float = 100.0,
) -> I2sPlan:
    """Plan the state machine's divider for an I2S frame rate.

    Parameters
    ----------
    rate_hz : float, int or Fraction
        Requested frame (sample) rate, Hz.
    sys_clock_hz : int
        System clock, Hz (default 125 MHz).
    slot_bits : {16, 32}
        Bits per channel slot (default 32: room for 16-, 24- and 32-bit samples).
    tolerance_ppm : float
        Rate error accepted for an integer (jitter-free) divider, ppm (default 100).

    Raises
    ------
    OptionError
        For a slot width other than 16 or 32, or a bad rate or clock.
    ClockError
        When the divider's range cannot reach the rate.

    Examples
    --------
    >>> p = plan_i2s(48000)  # at 125 MHz: a fractional divider, 64 ppm fast
    >>> p.clock.div_int, p.clock.div_frac, round(float(p.bit_clock_hz)), p.clock.fractional
    (20, 88, 3072197, True)
    """
    if slot_bits not in SLOT_BITS:
        raise OptionError(f"must be 16 or 32, got {slot_bits!r}", field="slot_bits")
    cycles = CYCLES_PER_BIT * 2 * slot_bits
    clock = plan_clock(
        rate_hz,
        sys_clock_hz=sys_clock_hz,
        tolerance_ppm=tolerance_ppm,
        min_cycles=cycles,
        max_cycles=cycles,
    )
    return I2sPlan(clock, slot_bits)


# -- the stream: layout, program and state machine -------------------------------------

#: Sample widths an I2S stream carries, each in a 32-bit channel slot.
SAMPLE_BITS = I2S_SAMPLE_BITS

#: Frame formats: ``standard`` (the I2S bus: the MSB one bit clock after the word-select
#: edge) and ``left-justified`` (the MSB on the word-select edge).
FRAME_FORMATS = _FRAME_FORMATS

#: Bits per channel slot of a stream (the planner also knows 16-bit slots).
STREAM_SLOT_BITS = 32


@dataclass(frozen=True)
class I2sLayout:
    """How I2S samples sit in 32-bit FIFO words, in the order the state machine sends them.

    Codes are offset binary (``0 .. 2**bits - 1``, silence at ``2**(bits-1)``), the
    quantiser's scale; the words hold two's complement, which is offset binary with
    its most significant bit inverted.  Every frame carries a left and a right sample:
    a mono stream sends its sample in both.

    * 16-bit samples: one word per frame, the left sample in bits 31:16 and the right
      in bits 15:0 (the program sends each slot's 16 data bits, then 16 zero bits).
    * 24- and 32-bit samples: one word per slot, the sample in the word's most
      significant bits and zeros below (two words per frame).

    The state machine shifts left (most significant bit first, as I2S sends).

    Attributes
    ----------
    bits : int
        Sample width: 16, 24 or 32.
    stereo : bool
        Codes hold interleaved left/right pairs (else one code per frame, sent in both
        slots).

    Examples
    --------
    >>> lay = I2sLayout(16)
    >>> [hex(w) for w in lay.pack_codes(np.array([0x8000, 0x8001, 0x7FFF]))]
    ['0x0', '0x10001', '0xffffffff']
    """

    bits: int
    stereo: bool = False

    def __post_init__(self) -> None:
        if self.bits not in SAMPLE_BITS:
            raise OptionError(
                f"an I2S sample is 16, 24 or 32 bits, got {self.bits!r}", field="bits"
            )

    @property
    def channels(self) -> int:
        """Codes per frame: 2 for a stereo stream, 1 for mono."""
        return 2 if self.stereo else 1

    @property
    def words_per_frame(self) -> int:
        """FIFO words per frame (1 for 16-bit samples, else 2)."""
        return 1 if self.bits == 16 else 2

    @property
    def pull_threshold(self) -> int:
        """Autopull threshold, bits (always a whole word)."""
        return 32

    @property
    def mid_code(self) -> int:
        """The code of silence (two's complement zero)."""
        return 1 << (self.bits - 1)

    def words_for(self, frames: int) -> int:
        """Words needed for `frames` frames."""
        return frames * self.words_per_frame

    def _slots(self, codes: np.ndarray) -> np.ndarray:
        """Two's complement slot values (uint64), left and right for every frame."""
        c = np.asarray(codes, dtype=np.uint64)
        c = c ^ np.uint64(self.mid_code)  # offset binary -> two's complement
        if not self.stereo:
            c = np.repeat(c, 2)
        elif c.size % 2:
            raise OptionError("a stereo stream needs whole left/right pairs", field="codes")
        return c

    def pack_codes(self, codes: np.ndarray) -> np.ndarray:
        """Codes (whole frames) -> uint32 FIFO words."""
        s = self._slots(codes)
        if self.bits == 16:
            return ((s[0::2] << np.uint64(16)) | s[1::2]).astype(np.uint32)
        return (s << np.uint64(32 - self.bits)).astype(np.uint32)

    def unpack_words(self, words: np.ndarray) -> np.ndarray:
        """FIFO words -> codes, shape (frames, 2): left and right of every frame."""
        w = np.asarray(words, dtype=np.uint64)
        if self.bits == 16:
            s = np.stack([w >> np.uint64(16), w & np.uint64(0xFFFF)], axis=1)
        else:
            s = (w >> np.uint64(32 - self.bits)).reshape(-1, 2)
        return (s ^ np.uint64(self.mid_code)).astype(np.int64)

    def to_dict(self) -> dict[str, object]:
        """Plain-data description (the sidecar's ``layout``)."""
        return {
            "output": "i2s",
            "bits": self.bits,
            "slot_bits": STREAM_SLOT_BITS,
            "channels": "stereo" if self.stereo else "mono",
            "words_per_frame": self.words_per_frame,
            "sample_order": (
                "left in bits 31:16, right in bits 15:0"
                if self.bits == 16
                else "one slot per word, left first, sample in the top bits"
            ),
            "coding": "two's complement",
            "shift": "left",
            "pull_threshold": self.pull_threshold,
        }


def _side(ws: int, bclk: int) -> int:
    """Side-set value: bit 0 drives the bit clock, bit 1 the word select."""
    return (ws << 1) | bclk


def i2s_program(bits: int, frame_format: str = "standard", *, name: str = "i2s_out") -> Program:
    """The state-machine program that sends I2S frames, two cycles per bit.

    Side-set drives the bit clock (side-set pin 0) and the word select (pin 1); ``out
    pins, 1`` puts each data bit on the data pin while the bit clock is low, and the
    receiver samples it on the rising edge.  Each slot is 32 bits; a ``jmp x--`` loop
    sends all but its last bit, whose second cycle reloads the counter for the next
    slot.  In the standard format the word select changes with that last bit, one bit
    clock before the next slot's MSB; left-justified changes it with the MSB.

    The word select's level per channel follows each format's own convention: the I2S
    frame sends the left channel while WS is low (Philips I2S bus specification, 1986,
    rev. 1996), while left-justified DACs and codecs take the left channel while LRCK is
    high (REFERENCES.md section 14, from memory of common codec datasheets: check the
    part in hand, some offer both polarities).

    For 16-bit samples the program sends a slot's 16 data bits from the word, then 16
    zero bits (``mov pins, null``), so one word carries a frame.

    Execution must start at :func:`i2s_entry` (the last instruction: it loads the
    counter, then wraps to the left slot).

    Parameters
    ----------
    bits : {16, 24, 32}
        Sample width.
    frame_format : {'standard', 'left-justified'}
        Where the word-select edge falls.
    name : str
        Program name.
    """
    if bits not in SAMPLE_BITS:
        raise OptionError(f"an I2S sample is 16, 24 or 32 bits, got {bits!r}", field="bits")
    if frame_format not in FRAME_FORMATS:
        raise OptionError(
            f"must be one of {', '.join(FRAME_FORMATS)}, got {frame_format!r}",
            field="frame_format",
        )
    lead = frame_format == "standard"
    ins: list[Instruction] = []
    for ws in (0, 1) if lead else (1, 0):  # WS of the left slot, then of the right
        nxt = 1 - ws if lead else ws  # word select during the slot's last bit
        top = len(ins)
        if bits == 16:
            ins += [
                Instruction("out", ("pins", 1), side=_side(ws, 0)),
                Instruction("jmp", ("x--", top), side=_side(ws, 1)),  # 16 data bits
                Instruction("mov", ("pins", "null"), side=_side(ws, 0)),
                Instruction("set", ("y", 13), side=_side(ws, 1)),
                Instruction("mov", ("pins", "null"), side=_side(ws, 0)),
                Instruction("jmp", ("y--", top + 4), side=_side(ws, 1)),  # 14 zero bits
                Instruction("mov", ("pins", "null"), side=_side(nxt, 0)),  # the last bit
                Instruction("set", ("x", 15), side=_side(nxt, 1)),
            ]
        else:
            ins += [
                Instruction("out", ("pins", 1), side=_side(ws, 0)),
                Instruction("jmp", ("x--", top), side=_side(ws, 1)),  # 31 bits
                Instruction("out", ("pins", 1), side=_side(nxt, 0)),  # the last bit
                Instruction("set", ("x", 30), side=_side(nxt, 1)),
            ]
    return Program(
        name,
        tuple(ins),
        wrap_target=0,
        wrap=len(ins) - 1,
        sideset=SideSet(2),
        autopull=True,
        variant=f"i2s-{frame_format}",
    )


def i2s_entry(program: Program) -> int:
    """Address execution starts at: the last instruction (it loads the bit counter)."""
    return len(program.instructions) - 1


def i2s_state_machine(
    program: Program,
    layout: I2sLayout,
    clock: ClockPlan,
    *,
    data_pin: int,
    clock_pin: int,
    gpio_count: int = 30,
    gpio_base: int = 0,
) -> StateMachineConfig:
    """The state machine's registers for an I2S stream (program loaded at address 0).

    Parameters
    ----------
    program : Program
        From :func:`i2s_program`.
    layout : I2sLayout
        The stream's layout (autopull threshold 32, shift left).
    clock : ClockPlan
        The frame clock; its ``cycles_per_sample`` is the cycles per frame.
    data_pin : int
        GPIO of the serial data.
    clock_pin : int
        GPIO of the bit clock; the word select is on the next GPIO.
    gpio_count, gpio_base : int
        The target's GPIO count and the PIO block's GPIO base.

    Raises
    ------
    OptionError
        For pins the target lacks, overlapping pins, or pins outside the PIO block's
        32-GPIO window.
    """
    for name, pin, n in (("data_pin", data_pin, 1), ("clock_pin", clock_pin, 2)):
        if isinstance(pin, bool) or not isinstance(pin, int) or pin < 0:
            raise OptionError(f"must be a GPIO number >= 0, got {pin!r}", field=name)
        if pin + n > gpio_count:
            raise OptionError(
                f"GPIO {pin}..{pin + n - 1} needed, but the target has GPIO 0..{gpio_count - 1}",
                field=name,
            )
        if not (gpio_base <= pin and pin + n <= gpio_base + 32):
            raise OptionError(
                f"GPIO {pin}..{pin + n - 1} are outside the PIO window "
                f"{gpio_base}..{gpio_base + 31}",
                field=name,
            )
    if data_pin in (clock_pin, clock_pin + 1):
        raise OptionError(
            f"the data pin GPIO {data_pin} is also the bit clock (GPIO {clock_pin}) or word "
            f"select (GPIO {clock_pin + 1})",
            field="data_pin",
        )
    execctrl = wrap_execctrl(program)
    shiftctrl = (
        (1 << 30)  # FJOIN_TX: 8-deep TX FIFO
        | (0 << 25)  # PULL_THRESH 0 means 32
        | (0 << 19)  # OUT_SHIFTDIR left: MSB first
        | (1 << 18)  # IN_SHIFTDIR (reset value, unused)
        | (1 << 17)  # AUTOPULL
    )
    # PINCTRL: SIDESET_COUNT 31:29, OUT_COUNT 25:20, SIDESET_BASE 14:10, OUT_BASE 4:0.
    pinctrl = (
        (program.sideset.field_bits << 29)
        | (1 << 20)
        | ((clock_pin - gpio_base) << 10)
        | (data_pin - gpio_base)
    )
    return StateMachineConfig(
        clock.clkdiv_register,
        execctrl,
        shiftctrl,
        pinctrl,
        data_pin,
        1,
        True,
        gpio_base,
        sideset_base=clock_pin,
        sideset_count=2,
    )
