"""Streams: plan, then process, then finish.  The only composition of the stages.

1. :func:`plan_stream` makes every decision before a sample is touched: clock
   plan, word layout, program, state-machine registers, shaping filter and its
   predicted noise, the output's sample and word counts, the flash budget and the
   working memory.  An unreachable rate, a stream that will not fit the flash, or
   a job whose memory would exceed ``max_memory_mib`` is refused here, at once.
2. :func:`process` runs the samples through the stages.  A clip is always read in
   blocks; processing it whole is the case of one block, so there is one path,
   and the output is byte-identical for any block size.
3. :func:`finish` checks the exact budget and assembles the :class:`StreamAsset`.

:func:`stream_clip`, :func:`stream_signal` and :func:`stream_tone` are the library
faces of ``ladderpack stream`` and ``ladderpack tone``; they write nothing (pass the
result to :func:`ladderpack.bundle.write_bundle`).
"""

from __future__ import annotations

import contextlib
import math
import os
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from fractions import Fraction
from typing import Any

import numpy as np

from ladderpack import conform, portable
from ladderpack.asset import StreamAsset
from ladderpack.audio import Signal, check_signal, sha256_file
from ladderpack.budget import Budget, TargetProfile, check_budget, stream_budget
from ladderpack.clock import RATED_SYS_CLOCK_HZ, pll_settings
from ladderpack.compress import AdpcmStream, LosslessStream
from ladderpack.defaults import STAGES, default_band_hz, default_ntf_max_db
from ladderpack.emit.names import asset_identifier
from ladderpack.errors import OptionError
from ladderpack.levels import LevelSet, linearity, load_levels
from ladderpack.loudness import LoudnessMeter, loudness_gain
from ladderpack.options import ClipOptions, StreamOptions, ToneSpec
from ladderpack.outputs import get_output
from ladderpack.outputs.base import Output, OutputPlan
from ladderpack.pack import Packed, WordLayout, pack, pack_blocks
from ladderpack.pio import (
    Program,
    StateMachineConfig,
)
from ladderpack.quantize import (
    BlockQuantizer,
    Codes,
    CodeScale,
    idle_ramp,
    predicted_full_scale_sine,
)
from ladderpack.shaping import (
    NOISE_GRID_POINTS,
    Shaper,
    design_shaper,
    get_shaper,
    predict_noise,
)
from ladderpack.sources import (
    BLOCK_FRAMES,
    BLOCK_THRESHOLD,
    ArraySource,
    FileSource,
    MonoSource,
)
from ladderpack.targets import get_target

__all__ = [
    "BLOCK_THRESHOLD",
    "EXACT_KINDS",
    "STAGES",
    "StreamPlan",
    "finish",
    "plan_stream",
    "process",
    "stream_clip",
    "stream_signal",
    "stream_tone",
]

#: Tone kinds whose codes must come out exact: quantised without dither or shaping.
EXACT_KINDS = ("staircase", "dc")

#: Progress callback: the stage under way (one of :data:`STAGES`) and the share of the
#: whole job done, 0..1 (long clips report after every block).
Progress = Callable[[str, float], None]

#: Share of a clip's job done after the first pass (reading, resampling, measuring) and
#: after the second (scaling, quantising, packing); writing the files is the rest.
_FIRST_PASS_SHARE = 0.55
_PACKED_SHARE = 0.97


@dataclass(frozen=True)
class StreamPlan:
    """Every decision about a stream, made before any sample is processed.

    Attributes
    ----------
    name : str
        Safe identifier of the asset.
    options : StreamOptions
        The options, validated.
    levels : LevelSet, optional
        The ladder's true levels, when quantising against them.
    clock : ClockPlan
        Divider and cycles per sample (per frame, for I2S); ``clock.achieved_rate_hz``
        is the stream rate.
    layout : WordLayout or I2sLayout
        How codes pack into FIFO words.
    program : Program or None
        The state-machine program (its ``variant`` says which); None for PWM.
    sm : StateMachineConfig or None
        State-machine register values; None for PWM.
    shaper : Shaper
        The error-feedback filter (``none`` included).
    band_hz : float
        Audio band of the noise figures, Hz.
    predicted_noise_db : dict
        Predicted noise against plain quantising (``weighted_db``, ``in_band_db``,
        ``total_db``).
    ramp_samples : int
        Length of each idle ramp.
    audio_samples : int
        Audio samples the stream will hold (an upper bound for loops, whose
        length is rounded to whole words).
    words : int
        FIFO words the stream will take, intro and outro included (upper bound).
    budget : Budget
        Flash and RAM for `words`.
    memory_bytes : int
        Estimated peak working memory of :func:`process`.
    block_frames : int
        Input frames per block (the whole input when it is one block).
    scale : CodeScale, optional
        The code scale when it is not the N-bit one (a PWM slice's TOP + 2 levels).
    part : OutputPlan
        The output's whole plan (:meth:`ladderpack.outputs.base.Output.plan`).
    """

    name: str
    options: StreamOptions
    levels: LevelSet | None
    clock: Any  # a ClockPlan, or the output's own rate plan (a PWM slice's)
    layout: Any  # the output's word layout
    program: Program | None
    sm: StateMachineConfig | None
    shaper: Shaper
    band_hz: float
    predicted_noise_db: dict[str, float]
    ramp_samples: int
    audio_samples: int
    words: int
    budget: Budget
    memory_bytes: int
    block_frames: int
    scale: CodeScale | None = None
    part: OutputPlan | None = None

    @property
    def output(self) -> Output:
        """The output system's object (the registry's, by ``options.output``)."""
        return get_output(self.options.output)

    @property
    def code_scale(self) -> CodeScale:
        """Where full scale and silence fall on the codes (a PWM slice's levels, or 2^N)."""
        return self.scale if self.scale is not None else CodeScale.for_bits(self.options.bits)

    @property
    def rate_hz(self) -> float:
        """The stream's achieved rate, Hz."""
        return float(self.clock.achieved_rate_hz)

    @property
    def idle_code(self) -> int:
        """The code held before and after the stream (silence, for I2S)."""
        assert self.part is not None
        return self.part.idle_code

    @property
    def samples_per_word(self) -> int:
        """Frames per word for whole-word lengths.

        1 for I2S and stereo PWM, where every frame is whole words.
        """
        assert self.part is not None
        return self.part.samples_per_word

    @property
    def channels(self) -> int:
        """Channels of the stream: 2 for stereo I2S and PWM, else 1."""
        return 2 if self.options.stereo else 1


@dataclass
class Processed:
    """What :func:`process` produced: the packed words and what was measured on the way."""

    packed: Packed
    codes: Codes | None
    intro: Packed | None
    outro: Packed | None
    audio_samples: int
    gain_db: float = 0.0
    overloads: int = 0
    resets: int = 0
    loop_rate_ppm: float = 0.0
    loudness: dict[str, Any] | None = None
    rate_in_hz: float | None = None
    tone: dict[str, Any] = field(default_factory=dict)
    max_step: int | None = None


# -- plan ----------------------------------------------------------------------------


def _shaper_for(opts: StreamOptions, rate: float, band: float) -> Shaper:
    if opts.shaping == "designed":
        return design_shaper(
            rate,
            band_hz=band,
            weighting_kind=opts.weighting,
            order=opts.ntf_order,
            max_gain_db=(
                default_ntf_max_db(opts.bits) if opts.ntf_max_db is None else opts.ntf_max_db
            ),
            form=opts.ntf_form,
        )
    return get_shaper(opts.shaping, rate, force=opts.force)


def _memory_bytes(
    opts: StreamOptions,
    rate_in: float | None,
    rate_out: float,
    in_frames: int,
    channels: int,
    block_frames: int,
    out_samples: int,
) -> int:
    """Peak working memory of :func:`process`, bytes (an estimate on the safe side)."""
    total = 4 * out_samples // max(1, 32 // opts.bits) * 2  # the words and one copy
    if rate_in is None:  # synthesised: the samples, the codes, the int64 quantiser output
        return total + 26 * out_samples
    if rate_in != rate_out:
        total += conform.RESAMPLER_BYTES
    block_out = math.ceil(block_frames * rate_out / rate_in) + 1
    one_block = block_frames >= in_frames
    # read buffer (all channels) and the mono mix; resampled, scaled and faded output;
    # int64 quantiser output and the codes.  One block is also kept between passes.
    total += 8 * block_frames * (channels + 2) + block_out * (8 * 3 + 10)
    if one_block:
        total += 8 * block_out
    return total


def _plan_levels(opts: StreamOptions) -> LevelSet | None:
    """The LevelSet the stream quantises against, checked against its width."""
    if opts.levels is None:
        return None
    levels = opts.levels if isinstance(opts.levels, LevelSet) else load_levels(opts.levels)
    if levels.bits != opts.bits:
        raise OptionError(
            f"the levels file is for {levels.bits} bits but the stream is {opts.bits}-bit",
            field="levels",
        )
    return levels


def _check_memory(
    opts: StreamOptions,
    memory: int,
    rate_in: float | None,
    rate: float,
    frames: int,
    audio: int,
) -> None:
    """Refuse a job whose working memory would exceed ``opts.max_memory_mib``."""
    if memory <= opts.max_memory_mib * 2**20:
        return
    hint = f" (did you mean {opts.rate_hz * 1000:g} Hz?)" if opts.rate_hz < 1000 and rate_in else ""
    raise OptionError(
        f"the job would need about {memory / 2**20:,.0f} MiB of working memory, over the "
        f"{opts.max_memory_mib:g} MiB limit: {frames} input frames at "
        f"{rate_in or rate:g} Hz to {audio} samples at {rate:.6g} Hz"
        f"{hint}; raise --max-memory-mib if that is really meant",
        field="max_memory_mib" if not hint else "rate_hz",
    )


def plan_stream(
    options: StreamOptions,
    *,
    name: str,
    rate_in_hz: float | None,
    frames: int | Callable[[float, int], int],
    channels: int = 1,
    block_frames: int | None = None,
) -> StreamPlan:
    """Plan a stream and check that it can be made, before any sample is processed.

    Parameters
    ----------
    options : StreamOptions
        The stream's options.
    name : str
        Asset name (sanitised into the identifier).
    rate_in_hz : float or None
        Rate of the input; None for a waveform synthesised at the stream rate,
        when `frames` is the number of samples it will have.
    frames : int or callable
        Input frames; for a synthesised waveform, a function
        ``(rate_hz, samples_per_word) -> samples`` of the stream rate.
    channels : int
        Channels of the input file (for the memory estimate).
    block_frames : int, optional
        Frames per block (default: the whole input in one block).

    Raises
    ------
    OptionError, ClockError
        For a rate the clock cannot make, a stream that will not fit the flash or
        RAM, or a job whose working memory would exceed ``options.max_memory_mib``.
    """
    opts = options
    ident = asset_identifier(name)
    levels = _plan_levels(opts)
    part = get_output(opts.output).plan(opts, ident)
    layout, clock, spw, per_word = part.layout, part.clock, part.samples_per_word, part.per_word
    rate = float(clock.achieved_rate_hz)
    # An output that idles at silence (I2S) has no ramp from idle: its fades are the whole
    # way in and out.
    ramp = round(opts.ramp_ms * 1e-3 * rate) if part.ramps else 0
    if callable(frames):
        frames = frames(rate, spw)
    if rate_in_hz is None:
        audio = frames
    else:
        audio = math.ceil(Fraction(frames) * clock.achieved_rate_hz / Fraction(rate_in_hz))
        audio += spw if opts.loop else 0
    words = layout.words_for(audio + 2 * max(ramp, 1)) + (3 if opts.loop else 0)
    budget = stream_budget(
        words,
        samples_per_word=per_word,
        rate_hz=clock.achieved_rate_hz,
        target=TargetProfile(
            int(opts.flash_bytes or 0), opts.flash_reserve_bytes, int(opts.ram_bytes or 0)
        ),
        player_chunk_words=opts.chunk_words,
        embedded=words <= opts.embed_words_max,
    )
    if opts.compress == "none":
        # a compressed stream's size is known once it is made: finish() checks it
        check_budget(budget)
    blk = frames if block_frames is None else min(block_frames, frames)
    memory = _memory_bytes(opts, rate_in_hz, rate, frames, channels, max(1, blk), audio)
    _check_memory(opts, memory, rate_in_hz, rate, frames, audio)
    band = default_band_hz(rate) if opts.band_hz is None else opts.band_hz
    if not band <= rate / 2:
        raise OptionError(
            f"must be at most the stream's Nyquist {rate / 2:.6g} Hz, got {opts.band_hz!r}",
            field="band_hz",
        )
    least = max(20.0, rate / 2 / NOISE_GRID_POINTS)  # the noise figures' resolution
    if opts.band_hz is not None and band < least:
        raise OptionError(
            f"must be at least {least:.6g} Hz (the lowest audio band the noise figures "
            f"resolve at {rate:.6g} Hz), got {opts.band_hz!r}",
            field="band_hz",
        )
    shaper = _shaper_for(opts, rate, band)
    predicted = predict_noise(shaper, rate, band_hz=band, weighting_kind=opts.weighting)
    return StreamPlan(
        ident,
        opts,
        levels,
        clock,
        layout,
        part.program,
        part.sm,
        shaper,
        band,
        predicted,
        ramp,
        audio,
        words,
        budget,
        memory,
        max(1, blk),
        part.scale,
        part,
    )


# -- process -------------------------------------------------------------------------


def _conformed(
    plan: StreamPlan, srcs: list[MonoSource], out: Processed, done: Progress
) -> Iterator[list[np.ndarray]]:
    """DC removal, resampling, level and fades, block by block (float samples).

    Yields a list of one block per channel; the channels share the gain (their joint peak,
    or their joint loudness: ITU-R BS.1770 sums the channels' mean squares).
    """
    opts, rate_out = plan.options, plan.clock.achieved_rate_hz
    means = [src.mean(plan.block_frames) for src in srcs]
    if opts.loop:  # a loop is one block: the crossfade and the wrap need all of it
        xs = [
            conform.loop_crossfade(
                Signal(src.whole() - mean, src.rate_hz), crossfade_ms=opts.crossfade_ms
            )
            for src, mean in zip(srcs, means, strict=True)
        ]
        rate = conform.loop_rate(xs[0].frames, xs[0].rate_hz, rate_out, plan.samples_per_word)
        out.loop_rate_ppm = float((rate / rate_out - 1) * 1_000_000)
        sigs = [conform.resample(x, rate, bits=opts.bits, periodic=True) for x in xs]
        if len(sigs) == 1:
            one, out.gain_db = conform.normalise_peak(sigs[0], headroom_db=opts.headroom_db)
            yield [one.samples]
            return
        # the same gain for every channel (normalise_peak's rule on the joint peak)
        top = max(float(np.max(np.abs(x.samples))) if x.frames else 0.0 for x in sigs)
        if top == 0.0:
            yield [x.samples for x in sigs]
            return
        g = conform.dbfs_to_amplitude(-opts.headroom_db) / top
        out.gain_db = 20.0 * math.log10(g)
        yield [x.samples * g for x in sigs]
        return
    first = srcs[0]
    one_block = plan.block_frames >= first.frames
    out_hz = float(Fraction(rate_out))
    rss = [
        conform.StreamResampler(src.rate_hz, rate_out, src.frames, bits=opts.bits) for src in srcs
    ]
    meter = (
        None
        if opts.loudness_lufs is None
        else LoudnessMeter(out_hz, rss[0].n_out, channels=len(srcs))
    )
    peak, n_out, seen = 0.0, 0, 0
    with contextlib.ExitStack() as stack:
        spills = [stack.enter_context(_Spill(in_memory=one_block)) for _ in srcs]
        # One pass reads and resamples the clip, measures it and keeps the result (in a
        # temporary file for long clips, so memory stays flat); the second scales it.
        for blocks in zip(*(src.blocks(plan.block_frames) for src in srcs), strict=True):
            seen += blocks[0].size
            last = seen >= first.frames
            ys = [rs.feed(b - m, last=last) for rs, b, m in zip(rss, blocks, means, strict=True)]
            if ys[0].size:
                for y, spill in zip(ys, spills, strict=True):
                    peak = max(peak, float(np.max(np.abs(y))))
                    spill.write(y)
                n_out += ys[0].size
                if meter is not None:
                    meter.feed(ys[0] if len(ys) == 1 else np.stack(ys, axis=1))
            done("resample", _FIRST_PASS_SHARE * seen / first.frames)
        if meter is not None:
            try:
                gain_db, out.loudness = loudness_gain(
                    meter,
                    target_lufs=float(opts.loudness_lufs or 0.0),
                    true_peak_dbtp=opts.true_peak_dbtp,
                )
            except OptionError as exc:  # name the clip the loudness is of
                raise OptionError(
                    exc.message, file=_source_name(srcs[0]), field=exc.field
                ) from None
            gain: float | None = portable.db_to_amplitude(gain_db)
            out.gain_db = gain_db
        else:
            gain = conform.dbfs_to_amplitude(-opts.headroom_db) / peak if peak > 0 else None
            out.gain_db = 20 * math.log10(gain) if gain is not None else 0.0
        n_fade = min(round(opts.fade_ms * 1e-3 * out_hz), n_out // 2)
        w = conform.raised_cosine(n_fade)
        pos = 0
        for kept in zip(*(spill.read() for spill in spills), strict=True):
            size = kept[0].size
            lo, hi = pos, pos + size
            scaled = []
            for y in kept:
                y = y * gain if gain is not None else np.array(y)
                if lo < n_fade:
                    y[: min(hi, n_fade) - lo] *= w[lo : min(hi, n_fade)]
                if n_fade and hi > n_out - n_fade:
                    start = max(lo, n_out - n_fade)
                    y[start - lo :] *= w[::-1][start - (n_out - n_fade) : hi - (n_out - n_fade)]
                scaled.append(y)
            pos = hi
            yield scaled
            done("quantise", _FIRST_PASS_SHARE + (_PACKED_SHARE - _FIRST_PASS_SHARE) * pos / n_out)


class _Spill:
    """Float64 blocks kept between two passes: in memory, or in a temporary file."""

    def __init__(self, *, in_memory: bool) -> None:
        self.in_memory = in_memory
        self.blocks: list[np.ndarray] = []
        self.sizes: list[int] = []
        self.file: Any = None

    def __enter__(self) -> _Spill:
        if not self.in_memory:
            import tempfile

            self.file = tempfile.TemporaryFile(prefix="ladderpack-")
        return self

    def __exit__(self, *exc: object) -> None:
        if self.file is not None:
            self.file.close()

    def write(self, y: np.ndarray) -> None:
        if self.file is None:
            self.blocks.append(y)
        else:
            np.ascontiguousarray(y, dtype=np.float64).tofile(self.file)
            self.sizes.append(y.size)

    def read(self) -> Iterator[np.ndarray]:
        if self.file is None:
            yield from self.blocks
            return
        self.file.seek(0)
        for size in self.sizes:
            yield np.fromfile(self.file, dtype=np.float64, count=size)


def process(
    plan: StreamPlan,
    source: MonoSource | list[MonoSource] | Callable[[float, int], Signal],
    *,
    progress: Progress | None = None,
) -> Processed:
    """Run the samples of `source` through the stages of `plan`.

    Parameters
    ----------
    plan : StreamPlan
        From :func:`plan_stream`.
    source : MonoSource, list of MonoSource, or callable
        Mono samples in blocks (a clip or an in-memory signal), one source per channel
        for a stereo stream, or a function ``synth(rate_hz, samples_per_word) -> Signal``
        whose samples, made at the stream rate, are quantised as they are (in both
        channels of a stereo stream).
    progress : callable, optional
        Called with the stage under way (see :data:`STAGES`) and the share of the
        job done (0..1), after every block of a long clip.

    Returns
    -------
    Processed
        The packed words (and the codes, interleaved for stereo, when the input was
        one block).
    """
    done: Progress = progress or (lambda stage, share: None)
    opts, lay, idle, nch = plan.options, plan.layout, plan.idle_code, plan.channels
    out = Processed(Packed(np.zeros(0, np.uint32), lay, 0, idle), None, None, None, 0)  # type: ignore[arg-type]
    audio_blocks: Iterator[list[np.ndarray]]
    if isinstance(source, MonoSource | list):
        srcs = source if isinstance(source, list) else [source]
        if len(srcs) != nch:
            raise OptionError(
                f"expected {nch} channel(s) of input, got {len(srcs)}", field="stereo"
            )
        out.rate_in_hz = srcs[0].rate_hz
        keep = plan.block_frames >= srcs[0].frames
        audio_blocks = _conformed(plan, srcs, out, done)
    else:
        sig = check_signal(source(plan.rate_hz, plan.samples_per_word))
        keep = True
        audio_blocks = iter([[np.asarray(sig.samples, dtype=np.float64)] * nch])
    # one quantiser a channel; the first has the stream's seed (a mono stream's codes)
    qs = [
        BlockQuantizer(
            bits=opts.bits,
            dither=opts.dither,
            shaper=plan.shaper,
            seed=opts.seed + k,
            levels=plan.levels,
            scale=plan.scale,
        )
        for k in range(nch)
    ]
    scale = qs[0].scale
    part = plan.part
    assert part is not None
    idle1 = part.channel_idle

    def merge(parts: list[np.ndarray]) -> np.ndarray:
        """One channel's codes, or the channels' interleaved (the output's frames)."""
        if nch == 1:
            return parts[0]
        if part.interleave is not None:
            return part.interleave(parts)
        return np.stack(parts, axis=1).reshape(-1)

    ramp1 = idle_ramp(idle1, opts.bits, plan.ramp_samples, mid=scale.half).astype(scale.dtype)
    ramp = merge([ramp1] * nch)
    code_bits = part.code_bits
    kept: list[np.ndarray] = []

    def quantised() -> Iterator[np.ndarray]:
        for i, blocks in enumerate(audio_blocks):
            if i == 0:
                done("quantise", _FIRST_PASS_SHARE)
            cs = [q.feed(b) for q, b in zip(qs, blocks, strict=True)]
            c = merge(cs)
            out.audio_samples += cs[0].size
            if keep:
                kept.append(c)
            yield c
        done("pack", _PACKED_SHARE)

    if opts.loop:
        out.codes = Codes(np.concatenate(list(quantised())), code_bits)
        if not part.ramps:
            # An output idling at silence (I2S) needs no ramps around a loop: no intro,
            # and an outro of one silent frame for the state machine to end on.
            frames = len(out.codes) // nch
            out.packed = Packed(lay.pack_codes(out.codes.codes), lay, frames, idle)  # type: ignore[arg-type]
            silent = lay.pack_codes(np.full(nch, idle, scale.dtype))
            out.intro = Packed(np.zeros(0, np.uint32), lay, 0, idle)  # type: ignore[arg-type]
            out.outro = Packed(silent, lay, 1, idle)  # type: ignore[arg-type]
        elif part.whole_frames:
            frames = len(out.codes) // nch
            out.packed = Packed(lay.pack_codes(out.codes.codes), lay, frames, idle)  # type: ignore[arg-type]
            up = ramp.reshape(-1, nch)[:, 0]
            down = np.concatenate([up[::-1], [idle]]).astype(scale.dtype)
            out.intro = Packed(lay.pack_codes(np.repeat(up, nch)), lay, up.size, idle)  # type: ignore[arg-type]
            out.outro = Packed(lay.pack_codes(np.repeat(down, nch)), lay, down.size, idle)  # type: ignore[arg-type]
        else:
            out.packed = pack(out.codes, lay, pad_code=idle)
            out.intro, out.outro = _loop_ramps(ramp1, lay, idle1, scale, lambda c: merge([c] * nch))
    else:
        # A stream always ends on the idle code: without a ramp (--ramp-ms 0) one idle
        # sample closes it, a step no larger than the one from idle into its start.
        tail1 = ramp1[::-1] if ramp1.size else np.full(1, idle1, scale.dtype)
        tail = merge([tail1] * nch)
        steps = _StepTracker(idle1, nch, part.split)
        blocks = steps.watch(_chain(ramp, quantised(), tail))
        if part.whole_frames:
            words = [lay.pack_codes(b) for b in blocks]
        else:  # samples several to a word, packed across the blocks
            words = list(pack_blocks(blocks, lay, pad_code=idle))
        out.max_step = steps.largest()
        n = ramp1.size + tail1.size + out.audio_samples
        flat = np.concatenate(words) if words else np.zeros(0, np.uint32)
        out.packed = Packed(flat, lay, n, idle)  # type: ignore[arg-type]
        if keep:
            out.codes = Codes(np.concatenate([ramp, *kept, tail]), code_bits)
    out.overloads = sum(q.overloads for q in qs)
    out.resets = sum(q.resets for q in qs)
    done("pack", 1.0)
    return out


class _StepTracker:
    """The largest step between consecutive codes of blocks passing through, from idle.

    Equals :func:`ladderpack.asset.largest_step` of the packed stream (the padding
    slots of the last word hold the idle code, and the pins return to it), without
    unpacking the words again (tested).  Interleaved channels are followed each on its
    own.
    """

    def __init__(
        self,
        idle_code: int,
        channels: int = 1,
        split: Callable[[np.ndarray], np.ndarray] | None = None,
    ) -> None:
        self.idle = int(idle_code)
        self.prev = np.full(channels, int(idle_code), np.int64)
        self.best = 0
        self.split = split  # frames -> (frames, channels), for two ladders' frame codes

    def watch(self, blocks: Iterator[np.ndarray]) -> Iterator[np.ndarray]:
        for block in blocks:
            if block.size:
                c = (
                    self.split(block)
                    if self.split is not None
                    else block.astype(np.int64).reshape(-1, self.prev.size)
                )
                self.best = max(self.best, int(np.abs(c[0] - self.prev).max()))
                if c.shape[0] > 1:
                    self.best = max(self.best, int(np.abs(np.diff(c, axis=0)).max()))
                self.prev = c[-1].copy()
            yield block

    def largest(self) -> int:
        return max(self.best, int(np.abs(self.prev - self.idle).max()))


def _chain(
    head: np.ndarray, middle: Iterator[np.ndarray], tail: np.ndarray
) -> Iterator[np.ndarray]:
    yield head
    yield from middle
    yield tail


def _loop_ramps(
    ramp1: np.ndarray,
    lay: WordLayout,
    idle1: int,
    scale: CodeScale,
    frame: Callable[[np.ndarray], np.ndarray],
) -> tuple[Packed, Packed]:
    """The intro (idle up to mid-scale) and outro (down to idle) played around a loop.

    `ramp1` and `idle1` are one channel's; `frame` makes the stream's codes of them (the
    identity for one channel).
    """
    spw, bits = lay.samples_per_word, lay.bits
    ramp = frame(ramp1)
    idle_code = int(frame(np.array([idle1]))[0])
    mid = int(frame(np.array([int(np.floor(scale.half + 0.5))]))[0])
    intro = pack(Codes(ramp, bits), lay, pad_code=mid if ramp.size else idle_code)
    # The outro ends with a whole word of idle codes: the loop program repeats the last
    # word once the FIFO is empty, so that word must be silent.
    tail = np.full(2 * spw - (ramp.size % spw or spw), idle_code, ramp.dtype)
    outro = pack(Codes(np.concatenate([ramp[::-1], tail]), bits), lay, pad_code=idle_code)
    return intro, outro


# -- finish --------------------------------------------------------------------------


def finish(
    plan: StreamPlan, done: Processed, *, name: str, source: dict[str, Any] | None = None
) -> StreamAsset:
    """Check the exact budget and assemble the :class:`StreamAsset`.

    Parameters
    ----------
    plan : StreamPlan
        The plan the samples were processed with.
    done : Processed
        The result of :func:`process`.
    name : str
        The asset name as given (recorded in the sidecar).
    source : dict, optional
        Provenance of the samples (file name, SHA-256, rate, channels, frames).
    """
    opts, part = plan.options, plan.part
    assert part is not None
    form = plan.output.compress(done.packed, opts)  # the output's own: ``--compress``
    lossless, adpcm, packed, sinad = form.lossless, form.adpcm, form.packed, form.sinad_db
    comp = form.stored
    stored = packed.words.size if comp is None else -(-comp.nbytes // 4)
    total = stored + sum(p.words.size for p in (done.intro, done.outro) if p is not None)
    budget = stream_budget(
        total,
        samples_per_word=plan.budget.samples_per_word,
        rate_hz=plan.clock.achieved_rate_hz,
        target=plan.budget.target,
        player_chunk_words=opts.chunk_words,
        embedded=stored <= opts.embed_words_max,
    )
    check_budget(budget)
    rate_in = done.rate_in_hz if done.rate_in_hz is not None else plan.rate_hz
    spec = conform.resampler_spec(rate_in, plan.rate_hz, opts.bits)
    stats: dict[str, Any] = {
        "gain_db": round(done.gain_db, 6),
        "overloads": done.overloads,
        "shaper_resets": done.resets,
        "shaper": plan.shaper.to_dict(),
        "band_hz": plan.band_hz,
        "predicted_noise_db": {k: round(v, 3) for k, v in plan.predicted_noise_db.items()},
        "audio_samples": done.audio_samples,
        "ramp_samples": plan.ramp_samples,
        "loop_rate_adjust_ppm": round(done.loop_rate_ppm, 6),
        "program_variant": plan.output.variant(part),
        "resampler": {
            "passband_hz": spec.passband_hz,
            "stopband_hz": spec.stopband_hz,
            "ripple_db": spec.ripple_db,
            "attenuation_db": spec.attenuation_db,
        },
        "budget": budget.to_dict(),
        "levels": None if plan.levels is None else _levels_stats(plan.levels),
        "loudness": None
        if done.loudness is None
        else {k: (round(v, 4) if isinstance(v, float) else v) for k, v in done.loudness.items()},
        "predicted_full_scale_sine": predicted_full_scale_sine(
            plan.code_scale.half,
            opts.dither,
            plan.predicted_noise_db["in_band_db"],
            plan.band_hz,
            plan.rate_hz,
        ),
    }
    sys_hz = int(opts.sys_clock_hz or 0)
    if sys_hz != get_target(opts.target).sys_clock_hz:
        # a clock of the user's choosing: how the PLL makes it, for the players
        pll = pll_settings(sys_hz, sys_hz).get(sys_hz)
        if pll is not None:
            stats["pll"] = pll.to_dict()
        else:
            warnings_pll = (
                f"the PLL cannot make {sys_hz} Hz from the 12 MHz crystal (REFDIV 1, VCO "
                "750..1600 MHz): set the clock yourself, or pick one 'clock --find-sys-clock' "
                "lists"
            )
            stats.setdefault("warnings", []).append(warnings_pll)
        rated = RATED_SYS_CLOCK_HZ["rp2040" if opts.target == "rp2040" else "rp2350"]
        if sys_hz > rated:
            stats.setdefault("warnings", []).append(
                f"{sys_hz} Hz is above the chip's rated {rated} Hz: at your own risk"
            )
    own = plan.output.stats(part, opts)
    stats.setdefault("warnings", []).extend(own.pop("warnings", []))
    stats.update(own)
    warnings = _shaper_warnings(
        opts,
        str(plan.shaper.to_dict().get("name", "none")),
        plan.predicted_noise_db,
        plan.code_scale.half,
    ) + _rate_warnings(opts.rate_hz, done.rate_in_hz)
    warnings += stats.pop("warnings", [])
    if warnings:
        stats["warnings"] = warnings
    if done.tone:
        stats["tone"] = done.tone
    if comp is not None:
        stats["compression"] = _compression_stats(comp, packed, budget, sinad)
    asset = StreamAsset(
        plan.name,
        done.codes if adpcm is None else None,
        packed,
        plan.clock,
        plan.program,
        plan.sm,
        plan.idle_code,
        source=dict(source or {}),
        options={"name": str(name), **opts.to_dict()},
        stats=stats,
        intro=done.intro,
        outro=done.outro,
        budget=budget,
        levels_volts=None if plan.levels is None else plan.levels.volts,
        setup=part.setup,
        lossless=lossless,
        adpcm=adpcm,
    )
    if done.max_step is not None:  # known from processing: fill the asset's cache
        asset.__dict__["max_step"] = done.max_step
    return asset


def _compression_stats(
    comp: LosslessStream | AdpcmStream, packed: Packed, budget: Budget, sinad: float
) -> dict[str, Any]:
    """Sizes, the ratio and the longest stream that fits, compressed at this ratio.

    For ADPCM also the SINAD of the decoded samples against the uncompressed ones.
    """
    raw = 4 * int(packed.words.size)
    ratio = raw / comp.nbytes if comp.nbytes else 1.0
    seconds = packed.sample_count / float(budget.rate_hz)
    avail = budget.target.flash_available_bytes
    fit = avail / comp.nbytes * seconds if comp.nbytes else 0.0
    out: dict[str, Any] = {
        "kind": "lossless" if isinstance(comp, LosslessStream) else "adpcm",
        "bytes": comp.nbytes,
        "raw_bytes": raw,
        "ratio": round(ratio, 4),
        "blocks": comp.blocks,
        "block_samples": comp.block_samples,
        "samples": comp.samples,
        "max_duration_s": round(fit, 3),
    }
    out["channels"] = comp.channels
    if isinstance(comp, LosslessStream):
        out["bits"] = comp.bits
    else:
        out["sinad_db"] = round(sinad, 3) if math.isfinite(sinad) else None
        out["pcm16_ratio"] = round(2 * comp.samples / comp.nbytes, 4) if comp.nbytes else 1.0
    return out


#: Share of half-scale the shaped noise's peak (4 sigma) may take before the summary warns
#: (our own rule of thumb: common practice, no published source).
SHAPED_NOISE_WARN_SHARE = 0.10


#: Below this stream rate a clip keeps too little of its band to be meant (common
#: practice: telephone speech needs 300 to 3400 Hz, so rates under 1 kHz are a typo).
LOW_RATE_WARN_HZ = 1000.0


def _rate_warnings(rate_hz: float, rate_in_hz: float | None) -> list[str]:
    """A warning when a clip is streamed at a rate too low to be meant (22.05 for 22050)."""
    if rate_in_hz is None or rate_hz >= LOW_RATE_WARN_HZ:
        return []
    return [
        f"a {rate_hz:g} Hz stream keeps only 0 to {rate_hz / 2:g} Hz of the clip "
        f"(did you mean {rate_hz * 1000:g} Hz?)"
    ]


def _shaper_warnings(
    opts: StreamOptions, shaper: str, predicted: dict[str, float], half: float
) -> list[str]:
    """A warning when the shaper's total noise eats the headroom of a narrow ladder.

    sigma^2 = (1/12 + dither variance) x the shaper's total (full-band) noise gain, in
    LSB^2; the published sets were designed for 16-bit audio, where that is negligible.
    """
    if shaper == "none":
        return []
    dither_var = {"tpdf": 1 / 6, "rpdf": 1 / 12}.get(opts.dither, 0.0)
    sigma = math.sqrt((1 / 12 + dither_var) * 10 ** (predicted["total_db"] / 10))
    share = 4 * sigma / half
    if share <= SHAPED_NOISE_WARN_SHARE:
        return []
    snr = 10 * math.log10(half * half / 2 / (sigma * sigma))
    return [
        f"shaping {shaper} raises the total noise {predicted['total_db']:+.1f} dB: its "
        f"peaks (4 sigma, {4 * sigma:.1f} LSB) take {100 * share:.0f} % of half-scale at "
        f"{math.log2(2 * half):.3g} bits, and a full-scale sine keeps only {snr:.1f} dB SNR "
        f"over the whole band (ENOB {(snr - 1.76) / 6.02:.1f}); use a gentler shaper "
        "(first-order, second-order) or 'designed' with a lower --ntf-max-db"
    ]


def _levels_stats(levelset: LevelSet) -> dict[str, Any]:
    lin = linearity(levelset.volts)
    v = levelset.volts
    import hashlib

    out: dict[str, Any] = {
        "origin": levelset.origin,
        # digest of the LevelSet's own JSON, so preview can find and verify it
        "sha256": hashlib.sha256(levelset.to_json().encode()).hexdigest(),
        "lowest_volts": float(v.min()),
        "highest_volts": float(v.max()),
        "span_volts": float(v.max() - v.min()),
        "max_abs_inl_best_fit_lsb": round(lin["max_abs_inl_best_fit"], 4),
        "max_abs_dnl_lsb": round(lin["max_abs_dnl"], 4),
        "monotonic": lin["monotonic"],
    }
    ideal = levelset.notes.get("ideal_span_volts")
    if ideal:
        out["span_vs_ideal_db"] = round(20 * math.log10(out["span_volts"] / ideal), 4)
    return out


# -- library faces -------------------------------------------------------------------


def _options(options: StreamOptions | None, overrides: dict[str, Any]) -> StreamOptions:
    if options is None:
        return StreamOptions(**overrides)
    if overrides:
        return options.replaced(**overrides)
    return options


def stream_signal(
    sig: Signal,
    *,
    name: str,
    options: StreamOptions | None = None,
    source: dict[str, Any] | None = None,
    progress: Progress | None = None,
    **overrides: Any,
) -> StreamAsset:
    """Turn a mono signal into a ladder stream.

    Parameters
    ----------
    sig : Signal
        Mono input, nominal full scale +/-1.0, at any rate.
    name : str
        Asset name; sanitised into the identifier used for files and symbols.
    options : StreamOptions, optional
        Every stream option (default: the defaults).
    source : dict, optional
        Provenance recorded in the sidecar.
    progress : callable, optional
        Called with the stage under way (see ``STAGES``) and the share done, 0..1.
    **overrides
        Any field of :class:`~ladderpack.options.StreamOptions` (``bits=12``, ...),
        replacing the one in `options`.

    Returns
    -------
    StreamAsset

    Examples
    --------
    >>> import numpy as np
    >>> sig = Signal(np.sin(np.arange(4800) * 0.1), 48000.0)
    >>> stream_signal(sig, name="beep", bits=8, rate_hz=16000).sample_count  # 50 ms ramps
    3200
    """
    opts = _options(options, overrides)
    if not isinstance(sig, Signal):
        raise OptionError("expected a Signal", field="samples")
    check_signal(sig, source=(source or {}).get("file"))
    x = np.asarray(sig.samples)
    if opts.stereo:
        if x.ndim != 2 or x.shape[1] < 2:
            raise OptionError(
                "a stereo stream needs a signal of frames x 2 channels", field="samples"
            )
        srcs: list[MonoSource] = [ArraySource(Signal(x[:, k], sig.rate_hz)) for k in (0, 1)]
    elif x.ndim != 1:
        raise OptionError(
            "expected a mono signal; downmix or pick a channel first", field="samples"
        )
    else:
        srcs = [ArraySource(sig)]
    plan = plan_stream(opts, name=name, rate_in_hz=srcs[0].rate_hz, frames=srcs[0].frames)
    return finish(plan, process(plan, srcs, progress=progress), name=name, source=source)


def _source_name(src: object) -> str | None:
    """The file a source reads, when it reads one."""
    path = getattr(src, "path", None)
    return os.fspath(path) if path is not None else None


def stream_clip(
    path: str | os.PathLike[str],
    *,
    name: str | None = None,
    options: StreamOptions | None = None,
    clip: ClipOptions | None = None,
    progress: Progress | None = None,
    channel: int | None = None,
    block_frames: int | None = None,
    **overrides: Any,
) -> StreamAsset:
    """Read a sound file and turn it into a ladder stream.

    Parameters
    ----------
    path : str or path-like
        WAV, FLAC, OGG or AIFF file.
    name : str, optional
        Asset name; default the file name without its extension.
    options : StreamOptions, optional
        Every stream option (default: the defaults).
    clip : ClipOptions, optional
        Channel and block size (or give `channel` and `block_frames`).
    progress : callable, optional
        Called with the stage under way (see ``STAGES``) and the share done, 0..1.
    channel : int, optional
        Channel to use (0-based); default: mix all channels to mono.
    block_frames : int, optional
        Process the clip in blocks of this many frames, in bounded memory
        (byte-identical output).  Default: blocks of 65536 frames for clips of
        more than :data:`BLOCK_THRESHOLD` samples that are neither loops nor
        loudness-normalised, one block otherwise.
    **overrides
        Any field of :class:`~ladderpack.options.StreamOptions`.

    Examples
    --------
    >>> asset = stream_clip("demo_audio/door_chime.flac", bits=8)  # doctest: +SKIP
    >>> write_bundle(asset, "out")  # doctest: +SKIP
    """
    opts = _options(options, overrides)
    copts = clip or ClipOptions(channel=channel, block_frames=block_frames)
    if opts.stereo and copts.channel is not None:
        raise OptionError(
            "a stereo stream takes the clip's first two channels; drop channel",
            field="channel",
        )
    src = FileSource(path, channel=0 if opts.stereo else copts.channel)
    srcs: list[MonoSource] = [src]
    if opts.stereo:
        if src.channels < 2:
            raise OptionError(
                f"a stereo stream needs a clip of 2 or more channels; this one has "
                f"{src.channels} (use --mono)",
                file=src.path,
                field="stereo",
            )
        srcs.append(FileSource(path, channel=1))
    blk = copts.block_frames
    if blk is not None and opts.loop and blk < src.frames:
        raise OptionError(
            "a loop needs the whole clip at once (crossfade and wrap); drop block_frames",
            field="block_frames",
        )
    if blk is None:
        big = src.frames * src.channels > BLOCK_THRESHOLD
        blk = BLOCK_FRAMES if big and not opts.loop else src.frames
    if progress:
        progress("read", 0.0)
    stem = name if name is not None else os.path.splitext(os.path.basename(src.path))[0]
    plan = plan_stream(
        opts,
        name=stem,
        rate_in_hz=src.rate_hz,
        frames=src.frames,
        channels=src.channels,
        block_frames=blk,
    )
    from concurrent.futures import ThreadPoolExecutor

    # The clip's digest is taken on a second core while it is processed (hashlib lets go
    # of the interpreter lock on large reads).
    with ThreadPoolExecutor(max_workers=1) as pool:
        digest = pool.submit(sha256_file, src.path)
        try:
            done = process(plan, srcs, progress=progress)
        finally:
            for one in srcs:
                if isinstance(one, FileSource):
                    one.close()
        provenance = {
            "file": os.path.basename(src.path),
            "sha256": digest.result(),
            "rate_hz": src.rate_hz,
            "channels": src.channels,
            "frames": src.frames,
            "channel": "0 and 1"
            if opts.stereo
            else ("mix" if copts.channel is None else copts.channel),
        }
    return finish(plan, done, name=stem, source=provenance)


def stream_tone(
    kind: str,
    *,
    name: str | None = None,
    tone: ToneSpec | None = None,
    options: StreamOptions | None = None,
    progress: Progress | None = None,
    **overrides: Any,
) -> StreamAsset:
    """Synthesise a test waveform at the stream's achieved rate and make a bundle of it.

    Parameters
    ----------
    kind : str
        One of :data:`ladderpack.defaults.TONE_KINDS`.
    name : str, optional
        Asset name (default: the kind).
    tone : ToneSpec, optional
        The waveform's own settings (frequency, level, length, ...).
    options : StreamOptions, optional
        Stream options; the clip-only ones (headroom, fades, loudness,
        crossfade) are refused.  Staircase and DC tones are quantised without
        dither or shaping so their codes come out exact.
    progress : callable, optional
        Called with the stage under way (see ``STAGES``) and the share done, 0..1.
    **overrides
        Fields of :class:`~ladderpack.options.ToneSpec` or
        :class:`~ladderpack.options.StreamOptions`.
    """
    from ladderpack.options import option_fields
    from ladderpack.waves import ToneSynth

    tone_keys = {f.name for f, _i, _h in option_fields(ToneSpec)}
    tone_kw = {k: v for k, v in overrides.items() if k in tone_keys}
    if "tones" in tone_kw and tone_kw["tones"] is not None:
        tone_kw["tones"] = tuple(tuple(t) for t in tone_kw["tones"])
    if "codes" in tone_kw and tone_kw["codes"] is not None:
        tone_kw["codes"] = tuple(tone_kw["codes"])
    spec = ToneSpec(kind=kind, **tone_kw) if tone is None else tone
    opts = _options(options, {k: v for k, v in overrides.items() if k not in tone_keys})
    opts.check_for_tone()
    if spec.kind in EXACT_KINDS:
        opts = opts.replaced(dither="none", shaping="none")
    synth = ToneSynth(spec, bits=opts.bits, loop=opts.loop, seed=opts.seed)
    plan = plan_stream(opts, name=name or spec.kind, rate_in_hz=None, frames=synth.samples_for)
    done = process(plan, synth, progress=progress)
    done.tone = synth.info
    return finish(plan, done, name=name or spec.kind, source={"file": f"synthesised {spec.kind}"})
