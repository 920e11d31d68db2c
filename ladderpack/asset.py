"""A finished stream: every stage's product, ready for the emitters.

A data type only: it knows no DSP and no files.  :mod:`ladderpack.stream` makes it,
the emitters in :mod:`ladderpack.emit` render it, :mod:`ladderpack.bundle` writes them.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass, field
from typing import Any, NotRequired, TypedDict

import numpy as np

from ladderpack.budget import Budget
from ladderpack.clock import ClockPlan
from ladderpack.compress import AdpcmStream, LosslessStream
from ladderpack.pack import Packed, pack, unpack
from ladderpack.pio import Program, StateMachineConfig
from ladderpack.quantize import Codes

__all__ = ["StreamAsset", "StreamSummary", "largest_step"]


class StreamSummary(TypedDict):
    """The short summary of a stream (also the ``--json`` output); units in the names."""

    asset: str
    output: str
    duration_s: float
    bits: int
    requested_rate_hz: float
    achieved_rate_hz: float
    rate_error_ppm: float
    divider: str
    fractional_divider: bool
    cycles_per_sample: int  # state-machine cycles per sample (frame); 0 for PWM: no machine
    samples: int
    words: int
    bytes: int
    overloads: int
    shaping: str
    predicted_noise_db: dict[str, float] | None
    levels: dict[str, Any] | None
    loudness: dict[str, Any] | None
    predicted_full_scale_sine: dict[str, float] | None
    band_hz: float | None
    warnings: list[str]
    program: str
    loop: bool
    flash_share: float | None
    max_duration_s: float | None
    compression: NotRequired[dict[str, Any]]
    pwm: NotRequired[dict[str, Any]]
    i2s: NotRequired[dict[str, Any]]
    i2c_dac: NotRequired[dict[str, Any]]
    stereo: NotRequired[bool]


@dataclass(frozen=True)
class StreamAsset:
    """A finished stream and everything needed to play or reproduce it.

    Attributes
    ----------
    name : str
        Safe identifier (from :func:`ladderpack.emit.names.asset_identifier`);
        the stem of every output file and the prefix of every C symbol.
    codes : Codes or None
        The stream's codes, ramps included, when the input was processed in
        one block; None when it went in several (only the packed words are
        kept, so memory stays bounded: :func:`ladderpack.pack.unpack` recovers
        the codes).
    packed : Packed
        FIFO words.
    plan : ClockPlan or PwmPlan
        Clock divider and cycles per sample (a PWM slice's divider, TOP and periods).
    program : Program or None
        State-machine program (None for PWM).
    sm : StateMachineConfig or None
        State-machine register values (None for PWM).
    idle_code : int
        Code the pins hold before and after the stream.
    source : dict
        Where the samples came from (file name without folders, SHA-256,
        original rate, channels, frames).
    options : dict
        Every option that shaped the result.
    stats : dict
        Measured facts (gain applied, overloads, ramp and audio samples).
    intro, outro : Packed, optional
        For loops: the ramp from the idle code up to mid-scale, played once
        before the loop, and back down, played once after it.
    budget : Budget, optional
        Flash and RAM use on the target.
    levels_volts : numpy.ndarray, optional
        The level of every code (volts) of the LevelSet the stream was made with
        (``--levels``), embedded for the players' code-for-a-voltage calls.
    setup : object, optional
        The output's own plan besides the clock (a PWM stream's slice, pin and DMA
        pacing; an I2C bus writer's timing).
    lossless : LosslessStream, optional
        The codes of every slot of `packed`, compressed (``--compress lossless``): what
        the bundle stores and the players decode back into the same words.
    adpcm : AdpcmStream, optional
        The samples coded as IMA ADPCM (``--compress adpcm``): what the bundle stores;
        `packed` then holds the words it decodes to, which the players send.
    """

    name: str
    codes: Codes | None
    packed: Packed
    plan: Any  # a ClockPlan, or the output's own rate plan (a PWM slice's)
    program: Program | None
    sm: StateMachineConfig | None
    idle_code: int
    source: dict[str, Any] = field(default_factory=dict)
    options: dict[str, Any] = field(default_factory=dict)
    stats: dict[str, Any] = field(default_factory=dict)
    intro: Packed | None = None
    outro: Packed | None = None
    budget: Budget | None = None
    levels_volts: np.ndarray | None = None
    setup: Any = None
    lossless: LosslessStream | None = None
    adpcm: AdpcmStream | None = None

    @property
    def compressed(self) -> LosslessStream | AdpcmStream | None:
        """The form the bundle stores when the stream is compressed (else None)."""
        return self.lossless if self.lossless is not None else self.adpcm

    @functools.cached_property
    def max_step(self) -> int:
        """Largest step between consecutive codes the pins see (:func:`largest_step`).

        Computed once, for every emitter that needs it.
        """
        return largest_step(self)

    @property
    def idle_pins(self) -> int:
        """Pin pattern of the idle code (pin order and inversion applied)."""
        return int(self.packed.layout.to_pins(np.array([self.idle_code]))[0])

    @property
    def idle_word(self) -> int:
        """A FIFO word whose every sample slot holds the idle code."""
        spw = self.packed.layout.samples_per_word
        return int(
            pack(
                Codes(np.full(spw, self.idle_code, np.uint16), self.packed.layout.bits),
                self.packed.layout,
            ).words[0]
        )

    @property
    def loop(self) -> bool:
        """True for a repeating stream (its ramps are the separate intro and outro)."""
        return self.intro is not None

    @property
    def sample_count(self) -> int:
        """Samples in the stream, ramps included."""
        return self.packed.sample_count

    @property
    def word_count(self) -> int:
        """32-bit words in the stream."""
        return int(self.packed.words.shape[0])

    @property
    def byte_count(self) -> int:
        """Bytes of packed stream data."""
        return 4 * self.word_count

    @property
    def duration_s(self) -> float:
        """Playing time at the achieved rate, in seconds."""
        return self.sample_count / float(self.plan.achieved_rate_hz)

    @property
    def pio_program(self) -> Program:
        """The state-machine program (ladder and I2S streams; a PWM stream has none)."""
        if self.program is None:
            raise TypeError(f"asset {self.name!r} has no state-machine program (PWM)")
        return self.program

    @property
    def state_machine(self) -> StateMachineConfig:
        """The state machine's registers (ladder and I2S streams)."""
        if self.sm is None:
            raise TypeError(f"asset {self.name!r} has no state machine (PWM)")
        return self.sm

    @property
    def clock(self) -> ClockPlan:
        """The state machine's clock plan (ladder and I2S streams)."""
        if not isinstance(self.plan, ClockPlan):
            raise TypeError(f"asset {self.name!r} is paced by a PWM slice, not a state machine")
        return self.plan

    @property
    def output(self) -> str:
        """The output system's name (a record without one is a ladder's)."""
        return str(self.options.get("output", "ladder"))

    def summary(self) -> StreamSummary:
        """The short human summary as plain data (also the ``--json`` output)."""
        out: StreamSummary = {
            "asset": self.name,
            "output": self.output,
            "duration_s": round(self.duration_s, 6),
            "bits": int(self.options.get("bits", self.packed.layout.bits)),
            "requested_rate_hz": float(self.plan.requested_rate_hz),
            "achieved_rate_hz": round(float(self.plan.achieved_rate_hz), 6),
            "rate_error_ppm": round(self.plan.error_ppm, 3),
            "divider": self.plan.divider_text,
            "fractional_divider": self.plan.fractional,
            "cycles_per_sample": int(getattr(self.plan, "cycles_per_sample", 0)),
            "samples": self.sample_count,
            "words": self.word_count,
            "bytes": self.byte_count,
            "overloads": int(self.stats.get("overloads", 0)),
            "shaping": self.stats.get("shaper", {}).get("name", "none"),
            "predicted_noise_db": self.stats.get("predicted_noise_db"),
            "levels": self.stats.get("levels"),
            "loudness": self.stats.get("loudness"),
            "predicted_full_scale_sine": self.stats.get("predicted_full_scale_sine"),
            "band_hz": self.stats.get("band_hz"),
            "warnings": list(self.stats.get("warnings", [])),
            "program": (
                self.program.variant
                if self.program is not None
                else str(self.stats.get("program_variant", ""))
            ),
            "loop": self.loop,
            "flash_share": self.budget.flash_share if self.budget else None,
            "max_duration_s": round(self.budget.max_duration_s, 3) if self.budget else None,
        }
        comp = self.stats.get("compression")
        if comp:  # stored compressed: the flash it takes and what fits at its ratio
            out["compression"] = dict(comp)
            if self.budget:
                out["max_duration_s"] = comp["max_duration_s"]
        from ladderpack.outputs import get_output

        out.update(get_output(self.output).summary(self))  # type: ignore[typeddict-item]
        return out


def largest_step(asset: StreamAsset, *, chunk_words: int = 1 << 16) -> int:
    """Largest step between consecutive codes anywhere the pins can go, in codes.

    Counts every sample slot the state machine plays (padding included): the
    stream's ramps and audio, the step from the idle code into the first
    sample and from the last back to the idle code, and for loops the intro, the seam
    from the last sample to the first and the outro. The players use it to bound the
    ramps they make at run time (a stop, a held code). Unpacks the words in chunks, so
    memory stays bounded for long streams.

    Parameters
    ----------
    asset : StreamAsset
        The stream.
    chunk_words : int
        Words unpacked at a time.
    """
    lay = asset.packed.layout
    parts = [p for p in (asset.intro, asset.packed, asset.outro) if p is not None]
    if hasattr(lay, "channels_of"):  # two ladders: each on its own
        idle = int(lay.channels_of(np.array([asset.idle_code]))[0, 0])
        pieces = [lay.channels_of(unpack(p.words, lay).codes) for p in parts]
        seq = np.concatenate([[[idle, idle]], *pieces, [[idle, idle]]])
        best = int(np.abs(np.diff(seq, axis=0)).max())
        if asset.loop and asset.packed.words.size:
            body = lay.channels_of(unpack(asset.packed.words, lay).codes)
            best = max(best, int(np.abs(body[-1] - body[0]).max()))
        return best
    if hasattr(lay, "unpack_words"):  # I2S, stereo PWM, an I2C DAC: whole frames
        seqs = [np.asarray(lay.unpack_words(p.words), dtype=np.int64) for p in parts]
        frames = np.concatenate(seqs, axis=0) if seqs else np.zeros((0, 2), np.int64)
        k = frames.shape[1] if seqs else 2  # channels (an I2C DAC's 1)
        seq = np.concatenate([[[asset.idle_code] * k], frames, [[asset.idle_code] * k]])
        steps = np.abs(np.diff(seq, axis=0)).max() if seq.shape[0] > 1 else 0
        if asset.loop and asset.packed.words.size:
            body = np.asarray(lay.unpack_words(asset.packed.words), dtype=np.int64)
            steps = max(int(steps), int(np.abs(body[-1] - body[0]).max()))
        return int(steps)
    best = 0
    prev = asset.idle_code
    first_of_loop: int | None = None
    for part in parts:
        for start in range(0, part.words.size, chunk_words):
            # Every slot of a word is played, padding included.
            codes = unpack(part.words[start : start + chunk_words], lay).codes.astype(np.int64)
            if codes.size == 0:
                continue
            if part is asset.packed and start == 0:
                first_of_loop = int(codes[0])
            best = max(best, abs(int(codes[0]) - prev))
            if codes.size > 1:
                best = max(best, int(np.abs(np.diff(codes)).max()))
            prev = int(codes[-1])
        if part is asset.packed and asset.loop and first_of_loop is not None:
            best = max(best, abs(prev - first_of_loop))
    return max(best, abs(prev - asset.idle_code))
