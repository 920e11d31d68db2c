"""Defaults and choice lists shared by the library and the command line.

Kept free of heavy imports so the command line starts fast.
"""

from __future__ import annotations

__all__ = [
    "COMPRESS_CHOICES",
    "DEFAULT_SYS_CLOCK_HZ",
    "DITHERS",
    "EMBED_WORDS_MAX",
    "FRAME_FORMATS",
    "I2C_BUS_SPEEDS_HZ",
    "I2C_DAC_COMMANDS",
    "I2S_SAMPLE_BITS",
    "NTF_FORMS",
    "PIN_ORDERS",
    "PROGRAM_CHOICES",
    "SHAPER_NAMES",
    "SHIFTS",
    "STAGES",
    "TONE_KINDS",
    "WEIGHTING_NAMES",
    "default_band_hz",
    "default_ntf_max_db",
]

#: RP2040 default system clock (RP2040 datasheet; MicroPython rp2 docs:
#: "The default at boot time is 125 MHz").
DEFAULT_SYS_CLOCK_HZ = 125_000_000

#: Dither kinds: triangular 2 LSB p-p, rectangular 1 LSB p-p, none.
DITHERS = ("tpdf", "rpdf", "none")

#: Error-feedback shaping choices: the catalogue in ladderpack.shaping, plus "designed".
SHAPER_NAMES = (
    "none",
    "first-order",
    "second-order",
    "modified-e-9",
    "improved-e-5",
    "improved-e-9",
    "f-weighted-3",
    "f-weighted-9",
    "designed",
)

#: Noise weightings for the shaping designer.
WEIGHTING_NAMES = ("threshold", "a-weighting", "flat")

#: Forms of designed filter.
NTF_FORMS = ("auto", "fir", "iir")

#: Test waveforms of `ladderpack tone` (see ladderpack.waves).
TONE_KINDS = (
    "sine",
    "square",
    "sawtooth",
    "triangle",
    "multitone",
    "sweep",
    "white",
    "pink",
    "dc",
    "staircase",
    "impulse",
    "step",
)

#: Which GPIO carries the ladder's most significant bit.
PIN_ORDERS = ("msb-high", "msb-low")

#: Ladder program choices ("auto": loop program for loops when it fits, else autopull).
PROGRAM_CHOICES = ("auto", "autopull", "pull", "loop")
#: How a stream may be stored (ladderpack.compress): as packed words, compressed without
#: loss, or as IMA ADPCM; the players decode a compressed stream on the chip.
COMPRESS_CHOICES = ("none", "lossless", "adpcm")

#: OUT shift directions.
SHIFTS = ("right", "left")

#: I2C bus clocks: Standard-mode, Fast-mode and Fast-mode Plus (NXP UM10204), Hz.
I2C_BUS_SPEEDS_HZ = (100_000, 400_000, 1_000_000)

#: I2C DAC command kinds (see :mod:`ladderpack.outputs.i2c_dac`).
I2C_DAC_COMMANDS = ("fast", "register")

#: I2S frame formats (see :mod:`ladderpack.outputs.i2s`).
FRAME_FORMATS = ("standard", "left-justified")

#: I2S sample widths, each sent in a 32-bit slot.
I2S_SAMPLE_BITS = (16, 24, 32)

#: Pipeline stages reported to a ``progress`` callback, in order.
STAGES = ("read", "resample", "quantise", "pack")

#: Largest stream, in words, also embedded in the MicroPython module.
EMBED_WORDS_MAX = 256


def default_band_hz(rate_hz: float) -> float:
    """Audio band assumed when none is given: 20 kHz or the rate's Nyquist, if lower."""
    return min(20000.0, rate_hz / 2)


def default_ntf_max_db(bits: int) -> float:
    """Default bound on a designed NTF's peak gain, dB.

    Few-level quantisers follow Lee's rule, max |NTF| <= 1.5 (3.52 dB; Schreier &
    Temes 2005, the default of Schreier's synthesizeNTF).  Multi-bit ladders have
    room for more: 10 dB up to 7 bits and 20 dB from 8 bits (common practice: the
    feedback swing must stay inside the headroom).
    """
    if bits <= 3:
        return 20 * 0.17609125905568124  # 20 log10(1.5)
    return 10.0 if bits < 8 else 20.0
