"""The files of a PWM stream: C header and source, MicroPython module.

The compare values are ``const uint32_t`` arrays as for a ladder stream (two 16-bit
values a word for mono, the first in bits 15:0; one word a sample for stereo, channel A
in bits 15:0); the defines and the initialiser are the PWM player's
(:mod:`ladderpack.emit.player_pwm`).
"""

from __future__ import annotations

from collections.abc import Iterator

from ladderpack._version import __version__
from ladderpack.asset import StreamAsset
from ladderpack.emit.c import _array_lines, _banner, chunked, header_frame, init_macro, pll_lines
from ladderpack.emit.micropython import _literal, sdk_constants, set_clock_text
from ladderpack.emit.names import comment_safe
from ladderpack.outputs.pwm import PwmPlan, PwmSetup
from ladderpack.pack import Packed
from ladderpack.targets import target_of

__all__ = ["render_header", "render_micropython", "render_source", "render_source_chunks"]


def _setup(asset: StreamAsset) -> tuple[PwmSetup, PwmPlan]:
    setup = asset.pwm
    assert setup is not None
    return setup, setup.plan


def _transfers(asset: StreamAsset, packed: Packed | None) -> int:
    """DMA transfers of a part: one per sample (16-bit mono, 32-bit stereo)."""
    return 0 if packed is None else int(packed.sample_count)


def _defines(asset: StreamAsset) -> list[tuple[str, str, str]]:
    s, p = _setup(asset)
    rate = p.achieved_rate_hz
    x, y = p.timer_xy or (0, 0)
    return [
        ("LEVELS", f"{p.levels}u", "compare values 0..TOP+1: duty 0 to 100 %"),
        ("SAMPLE_COUNT", f"{asset.sample_count}u", "samples in the stream, ramps included"),
        ("TRANSFER_COUNT", f"{_transfers(asset, asset.packed)}u", "DMA transfers"),
        ("WORD_COUNT", f"{asset.word_count}u", "32-bit words"),
        ("STEREO", "1" if s.stereo else "0", "1: channel A in bits 15:0, B in 31:16"),
        ("IDLE_CODE", f"{asset.idle_code}u", "compare value before and after"),
        ("MAX_STEP", f"{asset.max_step}u", "largest step between consecutive values"),
        ("LOOP", "1" if asset.loop else "0", "1: a loop, with separate intro and outro"),
        ("INTRO_TRANSFER_COUNT", f"{_transfers(asset, asset.intro)}u", "loops: ramp up"),
        ("OUTRO_TRANSFER_COUNT", f"{_transfers(asset, asset.outro)}u", "loops: ramp down"),
        ("INTRO_WORD_COUNT", f"{_words(asset.intro)}u", ""),
        ("OUTRO_WORD_COUNT", f"{_words(asset.outro)}u", ""),
        ("REQUESTED_RATE_HZ", f"{float(p.requested_rate_hz)!r}", "sample rate asked for"),
        ("RATE_HZ", f"{float(rate)!r}", "achieved sample rate"),
        ("RATE_NUM", f"{rate.numerator}ull", "achieved rate = RATE_NUM / RATE_DEN Hz"),
        ("RATE_DEN", f"{rate.denominator}ull", ""),
        ("CARRIER_HZ", f"{float(p.carrier_hz)!r}", "PWM frequency"),
        ("SYS_CLOCK_HZ", f"{p.sys_clock_hz}u", "system clock the plan assumes"),
        ("DIV_INT", f"{p.div_int}u", "PWM clock divider, integer part"),
        ("DIV_FRAC", f"{p.div_frac}u", "PWM clock divider, fraction in 1/16 (not 0: jitter)"),
        ("TOP", f"{p.top}u", "counter wrap value"),
        ("PERIODS_PER_SAMPLE", f"{p.periods_per_sample}u", "PWM periods each sample lasts"),
        ("TIMER_X", f"{x}u", "DMA pacing timer X (0: paced by the slice's wrap)"),
        ("TIMER_Y", f"{y}u", "DMA pacing timer Y"),
        ("PIN", f"{s.pin}u", f"the PWM pin: slice {s.slice}, channel {s.channel}"),
        ("SLICE", f"{s.slice}u", "PWM slice"),
    ]


def _words(packed: Packed | None) -> int:
    return 0 if packed is None else int(packed.words.size)


def _init_macro(asset: StreamAsset) -> list[str]:
    n, P = asset.name, asset.name.upper()
    intro = f"{n}_intro_words" if _words(asset.intro) else "NULL"
    outro = f"{n}_outro_words" if _words(asset.outro) else "NULL"
    fields = [
        f"{n}_words",
        f"{P}_TRANSFER_COUNT",
        intro,
        f"{P}_INTRO_TRANSFER_COUNT",
        outro,
        f"{P}_OUTRO_TRANSFER_COUNT",
        f"{P}_PIN",
        f"{P}_STEREO",
        f"{P}_DIV_INT",
        f"{P}_DIV_FRAC",
        f"{P}_TOP",
        f"{P}_PERIODS_PER_SAMPLE",
        f"{P}_TIMER_X",
        f"{P}_TIMER_Y",
        f"{P}_SYS_CLOCK_HZ",
        f"{P}_LOOP",
        f"{P}_IDLE_CODE",
        f"{P}_MAX_STEP",
    ]
    return init_macro("lp_pwm_stream_t", "ladderpack_pwm.h", f"{P}_PWM_INIT", fields)


def render_header(asset: StreamAsset) -> str:
    """Return the C header of a PWM stream."""
    prefix = asset.name.upper()
    guard = f"LADDERPACK_{prefix}_H"
    lines = header_frame(asset, _defines(asset))
    lines += pll_lines(asset)
    lines += ["", f"extern const uint32_t {asset.name}_words[{prefix}_WORD_COUNT];"]
    for part in ("intro", "outro"):
        if _words(getattr(asset, part)):
            lines.append(
                f"extern const uint32_t {asset.name}_{part}_words"
                f"[{prefix}_{part.upper()}_WORD_COUNT];"
            )
    lines += ["", *_init_macro(asset), "", f"#endif /* {guard} */", ""]
    return "\n".join(lines)


def source_lines(asset: StreamAsset) -> Iterator[str]:
    """The C source of a PWM stream, line by line."""
    prefix = asset.name.upper()
    s, _p = _setup(asset)
    order = (
        "one word a sample, channel A in bits 15:0, B in 31:16"
        if s.stereo
        else "two 16-bit values a word, the first in bits 15:0"
    )
    yield from _banner(asset).split("\n")
    yield f'#include "{asset.name}.h"'
    yield ""
    yield f"/* Compare values in playing order, {order};"
    yield " * const, so they stay in flash, and uint32_t, so they are word-aligned for DMA. */"
    yield f"const uint32_t {asset.name}_words[{prefix}_WORD_COUNT] = {{"
    yield from _array_lines(asset.packed.words, 8)
    yield "};"
    for part in ("intro", "outro"):
        packed = getattr(asset, part)
        if _words(packed):
            yield ""
            count = f"{prefix}_{part.upper()}_WORD_COUNT"
            yield f"const uint32_t {asset.name}_{part}_words[{count}] = {{"
            yield from _array_lines(packed.words, 8)
            yield "};"


def render_source_chunks(asset: StreamAsset, chunk_chars: int = 1 << 20) -> Iterator[bytes]:
    """The C source as byte chunks of about `chunk_chars`."""
    return chunked(source_lines(asset), chunk_chars)


def render_source(asset: StreamAsset) -> str:
    """Return the C source of a PWM stream."""
    return b"".join(render_source_chunks(asset)).decode()


_MP_TEMPLATE = """\
# Generated by ladderpack {version} from {source}.
# Do not edit: regenerate it instead.
#
# Wiring: PWM on GPIO {pin} (slice {slice}, channel {channel}{stereo_note}). Never connect a
# speaker or headphones to the pin: filter the carrier ({carrier:.0f} Hz) with an RC
# low-pass (see the README), buffer it and feed a suitable amplifier; the carrier's power
# otherwise ends in the amplifier and the tweeter. Start at a low volume and leave
# mains-powered gear to qualified people.
#
# Use:  import {name}; {name}.play()            (blocks until the stream ends)
#       p = {name}.Player(); p.play(loop=True)  (a loop runs until p.stop() or Ctrl-C)
import array

import rp2
from machine import Pin, freq, mem32

try:
    from typing import TYPE_CHECKING
except ImportError:
    TYPE_CHECKING = False  # type: ignore[misc]  # MicroPython has no typing module
if TYPE_CHECKING:
    from typing import Iterator

NAME = {name!r}
LEVELS = {levels}  # compare values 0..TOP+1
SAMPLE_COUNT = {samples}
TRANSFERS = {transfers}
STEREO = {stereo}
IDLE_CODE = {idle}
MAX_STEP = {max_step}
RATE_HZ = {rate!r}
SYS_CLOCK_HZ = {sys_clock}
PIN = {pin}
SLICE = {slice}
DIV_REG = 0x{div_reg:03X}  # 8.4: DIV_INT {div_int}, DIV_FRAC {div_frac}
TOP = {top}
TIMER_X = {timer_x}  # DMA pacing timer X/Y (0: paced by the slice's wrap)
TIMER_Y = {timer_y}
DREQ = {dreq}  # DREQ_PWM_WRAP0 + slice, or DREQ_DMA_TIMER0
LOOP = {loop}
BIN_FILE = {bin_file!r}
CHUNK_WORDS = {chunk_words}
{words_literal}
INTRO = {intro}
INTRO_TRANSFERS = {intro_transfers}
OUTRO = {outro}
OUTRO_TRANSFERS = {outro_transfers}

{registers}
# Slice n's registers lie _SLICE_STRIDE * n above slice 0's. A mono value is a 16-bit
# write: the bus repeats it in both halves of CC (RP2040 datasheet 2.1.4).
_SLICE = _PWM_BASE + _SLICE_STRIDE * SLICE
_SIZE = 2 if STEREO else 1


def _value(a: int, b: int) -> int:
    return a | (b << 16) if STEREO else a


def _ramp(a: int, b: int) -> "array.array[int]":
    \"\"\"Raised-cosine ramps of both channels from (a, b) to IDLE_CODE, no step above
    MAX_STEP; the last value is IDLE_CODE.\"\"\"
    import math

    step = MAX_STEP or 1
    n = int(math.ceil(math.pi / 2 * max(abs(a - IDLE_CODE), abs(b - IDLE_CODE)) / step)) + 1
    out = array.array("I" if STEREO else "H")
    pa, pb = a, b
    for k in range(1, n + 1):
        w = (1 + math.cos(math.pi * k / n)) / 2
        ca = IDLE_CODE if k == n else int(math.floor(IDLE_CODE + (a - IDLE_CODE) * w + 0.5))
        cb = IDLE_CODE if k == n else int(math.floor(IDLE_CODE + (b - IDLE_CODE) * w + 0.5))
        pa = max(pa - step, min(pa + step, ca))
        pb = max(pb - step, min(pb + step, cb))
        out.append(_value(pa, pb))
    out.append(_value(IDLE_CODE, IDLE_CODE))
    return out


class Player:
    \"\"\"Plays the stream on the slice of PIN, fed by two DMA channels chained to each
    other: one plays a buffer while the other's is refilled, with no gap between them
    (a PWM slice has no FIFO to cover one).

    A natural end plays the stream's closing ramp; stop() on a loop finishes the current
    pass and plays the outro; Ctrl-C or stop() on a stream ramps down at once.
    \"\"\"

    def __init__(self, path: str = BIN_FILE, chunk_words: int = CHUNK_WORDS):
        if freq() != SYS_CLOCK_HZ:
            raise ValueError(
                "system clock is %d Hz, the stream was planned for %d Hz: remake it with "
                "--sys-clock-hz %d (or call machine.freq(%d) first)"
                % (freq(), SYS_CLOCK_HZ, freq(), SYS_CLOCK_HZ)
            )
        self.path = path
        mem32[_SLICE + _CSR] = 0  # stop the slice while it is set up
        mem32[_SLICE + _DIV] = DIV_REG
        mem32[_SLICE + _TOP] = TOP
        mem32[_SLICE + _CC] = IDLE_CODE | (IDLE_CODE << _CC_B_LSB)
        mem32[_SLICE + _CTR] = 0
        Pin(PIN, Pin.ALT, alt=Pin.ALT_PWM)
        if STEREO:
            Pin(PIN + 1, Pin.ALT, alt=Pin.ALT_PWM)
        mem32[_SLICE + _CSR] = 1 << _CSR_EN_LSB
        if TIMER_X:
            mem32[_TIMER0] = (TIMER_X << _TIMER_X_LSB) | TIMER_Y
        self.dma = (rp2.DMA(), rp2.DMA())
        self.bufs = [array.array("I", bytes(4 * chunk_words)) for _ in range(2)]
        self.holds = [None, None]  # type: list[array.array[int] | None]
        self.running = False

    def _ctrl(self, k: int, chain: bool) -> int:
        # DMA.channel: MicroPython's attribute, missing from the stubs
        other = (self.dma[1 - k] if chain else self.dma[k]).channel  # type: ignore[attr-defined]
        return self.dma[k].pack_ctrl(size=_SIZE, inc_read=True, inc_write=False,
                                     treq_sel=DREQ, chain_to=other)

    def _arm(self, k: int, buf: "array.array[int]", count: int, chain: bool, now: bool) -> None:
        self.dma[k].config(read=buf, write=_SLICE + _CC, count=count,
                           ctrl=self._ctrl(k, chain), trigger=now)

    def _busy(self) -> bool:
        return bool(self.dma[0].active() or self.dma[1].active())

    def _wait(self) -> None:
        while self._busy():
            pass

    def stop(self) -> None:
        \"\"\"Ask a running play() to finish (safe to call from an interrupt handler).\"\"\"
        self.running = False

    def _ramp_down(self) -> None:
        for d in self.dma:
            d.active(0)
        cc = mem32[_SLICE + _CC]
        r = _ramp(cc & 0xFFFF, (cc >> 16) if STEREO else cc & 0xFFFF)
        self._arm(0, r, len(r), False, True)
        self._wait()

    def _free(self, buf: "array.array[int]") -> None:
        # wait until no running channel reads `buf`
        while any(self.dma[j].active() and self.holds[j] is buf for j in (0, 1)):
            pass

    def _parts(self, loop: bool) -> "Iterator[tuple[array.array[int], int, bool]]":
        \"\"\"(buffer, transfers, last) in playing order: intro, the stream (once, or until
        stop() for a loop), outro, a closing idle value; file chunks are read as they are
        needed, into a buffer no channel is reading.\"\"\"
        if INTRO is not None:
            yield INTRO, INTRO_TRANSFERS, False
        first = True
        while first or (loop and self.running):
            first = False
            if WORDS is not None:
                yield WORDS, TRANSFERS, False
                continue
            per_word = 1 if STEREO else 2
            left = TRANSFERS
            with open(self.path, "rb") as f:
                which = 0
                while left > 0:
                    buf = self.bufs[which]
                    self._free(buf)
                    n = f.readinto(buf) // 4
                    if n == 0:
                        break
                    count = min(n * per_word, left)
                    left -= count
                    yield buf, count, False
                    which ^= 1
        if OUTRO is not None:
            yield OUTRO, OUTRO_TRANSFERS, False
        # written once the last value has been latched, so the end is on the idle code
        yield array.array("I", [_value(IDLE_CODE, IDLE_CODE)]), 1, True

    def play(self, loop: bool = LOOP) -> None:
        \"\"\"Play once, or repeat (loop=True) until stop() is called; blocks until the
        last value has been handed to the slice.\"\"\"
        self.running = True
        self.holds = [None, None]
        k = 0
        started = False
        try:
            for buf, count, last in self._parts(loop):
                # wait until channel k is free, then arm it; the other channel starts it
                # by its chain when its own part ends (CHUNK_WORDS sets how long that is)
                while self.dma[k].active():
                    if not self.running and not LOOP:
                        self._ramp_down()
                        return
                self.holds[k] = buf
                self._arm(k, buf, count, not last, not started)
                started = True
                k ^= 1
            while self._busy():
                if not self.running and not LOOP:
                    self._ramp_down()
                    return
        except KeyboardInterrupt:
            self._ramp_down()
            raise
        finally:
            self.running = False

    def close(self) -> None:
        \"\"\"Release the DMA channels (the slice keeps the idle code).\"\"\"
        for d in self.dma:
            d.close()


def play(loop: bool = LOOP) -> None:
    \"\"\"Play the stream once (or loop until Ctrl-C), then release the DMA channel.\"\"\"
    p = Player()
    try:
        p.play(loop)
    finally:
        p.close()
"""


def render_micropython(asset: StreamAsset, *, embed: bool = False) -> str:
    """Return the MicroPython module of a PWM stream.

    Parameters
    ----------
    asset : StreamAsset
        The stream.
    embed : bool
        Embed the values as an ``array('I', ...)`` literal (short streams only).
    """
    s, p = _setup(asset)
    x, y = p.timer_xy or (0, 0)
    words_literal = (
        ("WORDS = " + _literal(asset.packed)) if embed else "WORDS = None  # read from BIN_FILE"
    )
    target = target_of(asset.options)
    registers = (
        f"# {target.name.upper()} registers (vendor SDK hardware/regs: addressmap.h, pwm.h, "
        "dma.h)\n"
    )
    registers += sdk_constants(
        target,
        [
            ("_PWM_BASE", "PWM_BASE"),
            ("_SLICE_STRIDE", "PWM_CH1_CSR_OFFSET - PWM_CH0_CSR_OFFSET"),
            ("_CSR", "PWM_CH0_CSR_OFFSET"),
            ("_CSR_EN_LSB", "PWM_CH0_CSR_EN_LSB"),
            ("_DIV", "PWM_CH0_DIV_OFFSET"),
            ("_CTR", "PWM_CH0_CTR_OFFSET"),
            ("_CC", "PWM_CH0_CC_OFFSET"),
            ("_CC_B_LSB", "PWM_CH0_CC_B_LSB"),
            ("_TOP", "PWM_CH0_TOP_OFFSET"),
            ("_TIMER0", "DMA_BASE + DMA_TIMER0_OFFSET"),
            ("_TIMER_X_LSB", "DMA_TIMER0_X_LSB"),
        ],
    )
    text = _MP_TEMPLATE.format(
        registers=registers,
        version=__version__,
        source=comment_safe(asset.source.get("file", "generated signal")),
        name=asset.name,
        pin=s.pin,
        slice=s.slice,
        channel=s.channel,
        stereo_note=f", and B on GPIO {s.pin + 1}" if s.stereo else "",
        carrier=float(p.carrier_hz),
        levels=p.levels,
        samples=asset.sample_count,
        transfers=_transfers(asset, asset.packed),
        stereo=s.stereo,
        idle=asset.idle_code,
        max_step=asset.max_step,
        rate=float(p.achieved_rate_hz),
        sys_clock=p.sys_clock_hz,
        div_reg=(p.div_int << 4) | p.div_frac,
        div_int=p.div_int,
        div_frac=p.div_frac,
        top=p.top,
        timer_x=x,
        timer_y=y,
        dreq=s.dreq,
        loop=asset.loop,
        bin_file=f"{asset.name}.bin",
        chunk_words=int(asset.options.get("chunk_words", 1024)),
        words_literal=words_literal,
        intro=_literal(asset.intro),
        intro_transfers=_transfers(asset, asset.intro),
        outro=_literal(asset.outro),
        outro_transfers=_transfers(asset, asset.outro),
    )
    return text + set_clock_text(asset)
