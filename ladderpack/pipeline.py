"""The stream pipeline: clip or signal in, :class:`StreamAsset` out.

This is the library face of ``ladderpack stream``: it runs the stages of the
data flow in order (conform, quantise, ramp, pack, program) and records every
option and measurement for the sidecar.  It writes nothing; pass the result
to :func:`ladderpack.bundle.write_bundle`.
"""

from __future__ import annotations

import math
import os
from collections.abc import Callable, Iterator
from fractions import Fraction
from typing import Any

import numpy as np

from ladderpack import conform
from ladderpack.audio import Signal, check_signal, load_clip, sha256_file
from ladderpack.budget import TargetProfile, check_budget, stream_budget
from ladderpack.bundle import StreamAsset
from ladderpack.clock import plan_clock
from ladderpack.defaults import (
    EMBED_WORDS_MAX,
    NTF_FORMS,
    PIN_ORDERS,
    PROGRAM_CHOICES,
    SHAPER_NAMES,
    SHIFTS,
    STAGES,
    STREAM_DEFAULTS,
    WEIGHTING_NAMES,
    default_band_hz,
    default_ntf_max_db,
)
from ladderpack.emit.names import asset_identifier
from ladderpack.errors import OptionError
from ladderpack.levels import LevelSet, linearity, load_levels
from ladderpack.pack import WordLayout, pack
from ladderpack.pio import (
    check_pins,
    ladder_program,
    max_cycles,
    min_cycles,
    state_machine_config,
)
from ladderpack.quantize import (
    DITHERS,
    Codes,
    QuantizeReport,
    check_bits,
    idle_ramp,
    quantize,
    with_idle_ramps,
)
from ladderpack.shaping import design_shaper, get_shaper, predict_noise

__all__ = [
    "EXACT_KINDS",
    "STAGES",
    "STREAM_DEFAULTS",
    "stream_clip",
    "stream_signal",
    "stream_tone",
]


def _check_choice(value: str, choices: tuple[str, ...] | list[str], field: str) -> str:
    if value not in choices:
        raise OptionError(f"must be one of {', '.join(choices)}; got {value!r}", field=field)
    return value


def _check_nonneg(value: float, field: str, unit: str) -> float:
    if not (isinstance(value, int | float) and math.isfinite(value) and value >= 0):
        raise OptionError(f"must be a number >= 0 {unit}, got {value!r}", field=field)
    return float(value)


def _check_int(value: object, field: str, lo: int, hi: int | None = None) -> int:
    if (
        isinstance(value, bool)
        or not isinstance(value, int)
        or value < lo
        or (hi is not None and value > hi)
    ):
        rng = f"{lo}..{hi}" if hi is not None else f">= {lo}"
        raise OptionError(f"must be a whole number {rng}, got {value!r}", field=field)
    return value


def stream_signal(
    sig: Signal | Callable[[float, int], Signal],
    *,
    name: str,
    bits: int = STREAM_DEFAULTS["bits"],
    rate_hz: float = STREAM_DEFAULTS["rate_hz"],
    sys_clock_hz: int = STREAM_DEFAULTS["sys_clock_hz"],
    rate_tolerance_ppm: float = STREAM_DEFAULTS["rate_tolerance_ppm"],
    headroom_db: float = STREAM_DEFAULTS["headroom_db"],
    fade_ms: float = STREAM_DEFAULTS["fade_ms"],
    ramp_ms: float = STREAM_DEFAULTS["ramp_ms"],
    idle_code: int = STREAM_DEFAULTS["idle_code"],
    dither: str = STREAM_DEFAULTS["dither"],
    shaping: str = STREAM_DEFAULTS["shaping"],
    seed: int = STREAM_DEFAULTS["seed"],
    shift: str = STREAM_DEFAULTS["shift"],
    out_base: int = STREAM_DEFAULTS["out_base"],
    gpio_count: int = STREAM_DEFAULTS["gpio_count"],
    pin_order: str = STREAM_DEFAULTS["pin_order"],
    invert: bool = STREAM_DEFAULTS["invert"],
    program: str = STREAM_DEFAULTS["program"],
    samples_per_word: int | None = STREAM_DEFAULTS["samples_per_word"],
    loop: bool = STREAM_DEFAULTS["loop"],
    crossfade_ms: float = STREAM_DEFAULTS["crossfade_ms"],
    flash_bytes: int = STREAM_DEFAULTS["flash_bytes"],
    flash_reserve_bytes: int = STREAM_DEFAULTS["flash_reserve_bytes"],
    ram_bytes: int = STREAM_DEFAULTS["ram_bytes"],
    chunk_words: int = STREAM_DEFAULTS["chunk_words"],
    embed_words_max: int = EMBED_WORDS_MAX,
    band_hz: float | None = STREAM_DEFAULTS["band_hz"],
    weighting: str = STREAM_DEFAULTS["weighting"],
    ntf_order: int = STREAM_DEFAULTS["ntf_order"],
    ntf_max_db: float | None = STREAM_DEFAULTS["ntf_max_db"],
    ntf_form: str = STREAM_DEFAULTS["ntf_form"],
    force: bool = STREAM_DEFAULTS["force"],
    levels: LevelSet | str | os.PathLike[str] | None = STREAM_DEFAULTS["levels"],
    loudness_lufs: float | None = STREAM_DEFAULTS["loudness_lufs"],
    true_peak_dbtp: float = STREAM_DEFAULTS["true_peak_dbtp"],
    source: dict[str, Any] | None = None,
    progress: Callable[[str], None] | None = None,
    blocks: Callable[..., Iterator[np.ndarray]] | None = None,
) -> StreamAsset:
    """Turn a mono signal into a ladder stream.

    Parameters
    ----------
    sig : Signal or callable
        Mono input, nominal full scale +/-1.0, at any rate.  Or a function
        ``synth(rate_hz, samples_per_word) -> Signal`` that synthesises the
        stream directly at the achieved rate: its samples are used as they are
        (no DC removal, resampling, normalisation or fades).
    name : str
        Asset name; sanitised into the identifier used for files and symbols.
    bits : int
        Ladder width N, 1..16 (default 8).
    rate_hz : float
        Requested stream rate in hertz (default 22050).
    sys_clock_hz : int
        System clock in hertz (default 125 MHz).
    rate_tolerance_ppm : float
        Rate error accepted for a jitter-free integer divider, in ppm
        (default 100).
    headroom_db : float
        Peak level below full scale after normalisation, in dB (default 1).
    fade_ms : float
        Raised-cosine fade at each end of the audio, in ms (default 5; not
        used for loops).
    ramp_ms : float
        Ramp between the idle code and mid-scale before and after the audio,
        in ms (default 50).  For loops the ramps are separate intro and
        outro arrays played once, never at the seam.
    idle_code : int
        Ladder code the pins hold when nothing plays (default 0).
    dither : {'tpdf', 'rpdf', 'none'}
        Dither before quantisation (default 'tpdf').
    shaping : str
        Error-feedback noise shaping (default 'none'): a filter of the
        catalogue in :mod:`ladderpack.shaping` ('first-order',
        'second-order', the published 44.1 kHz sets 'modified-e-9',
        'improved-e-5', 'improved-e-9', 'f-weighted-3', 'f-weighted-9'), or
        'designed' for a filter designed for this rate, band and weighting.
    seed : int
        Dither seed (default 0); same seed, same output.
    shift : {'right', 'left'}
        OUT shift direction (default 'right': first sample in the LSBs).
    out_base : int
        GPIO of the ladder's first pin (default 0).
    gpio_count : int
        User GPIOs on the target (default 30).
    pin_order : {'msb-high', 'msb-low'}
        Ladder MSB on the highest pin (default) or on the lowest (bits are
        reversed at pack time).
    invert : bool
        Invert every bit, for an inverting buffer stage (default False).
    program : {'auto', 'autopull', 'pull', 'loop'}
        State-machine program (default 'auto': 'loop' for loops when it fits
        in 32 instructions, else 'autopull').
    samples_per_word : int, optional
        Samples per FIFO word (default as many as fit; 'pull' needs 1).
    loop : bool
        The stream repeats (default False): no fades or ramps inside it, the
        resampler wraps around, and the length is rounded to whole words.
    crossfade_ms : float
        For loops, crossfade of the end onto the start, in ms (default 0).
    flash_bytes, flash_reserve_bytes, ram_bytes : int
        Target memory (defaults 2 MiB, 256 KiB reserved, 264 KiB).
    chunk_words : int
        Words per DMA buffer of the MicroPython player (default 1024).
    embed_words_max : int
        Streams up to this many words are embedded in the MicroPython module.
    band_hz : float, optional
        Audio band in Hz for the shaping designer and the noise report
        (default 20 kHz or the stream's Nyquist, whichever is lower).  When the
        stream rate is well above twice the band the designed filter pushes
        the noise above it.
    weighting : {'threshold', 'a-weighting', 'flat'}
        Noise weighting for the designer and the weighted noise figure
        (default 'threshold').
    ntf_order : int
        Order of a designed filter, 1..16 (default 8).
    ntf_max_db : float, optional
        Bound on a designed filter's peak gain in dB (default by bit depth:
        3.5 dB up to 3 bits, 10 dB up to 7, 20 dB from 8).
    ntf_form : {'auto', 'fir', 'iir'}
        Form of a designed filter (default 'auto': the better of the two).
    force : bool
        Use a published filter even far from its design rate.
    levels : LevelSet or path, optional
        The ladder's true level per code (a LevelSet or its JSON file, from
        ``ladderpack levels`` or ``ladderpack ladder``): quantise against them,
        feeding the true error back.
    loudness_lufs : float, optional
        Normalise to this integrated loudness (ITU-R BS.1770-4) instead of to a
        peak level; the gain is capped so the true peak stays at or below
        `true_peak_dbtp`.
    true_peak_dbtp : float
        True-peak ceiling for loudness normalisation, dBTP (default -1).
    source : dict, optional
        Provenance recorded in the sidecar.
    progress : callable, optional
        Called with the name of each stage as it finishes (see ``STAGES``).
    blocks : callable, optional
        Block-wise audio instead of `sig`'s samples: called as
        ``blocks(rate_out_hz=, bits=, shaper=, levels=, report=)`` it yields code
        blocks and fills `report` (``n_out`` before its first block, then
        ``gain_db``, ``overloads``, ``resets``); see :func:`clip_codes_in_blocks`.
        The packed words are then built without holding all codes.

    Returns
    -------
    StreamAsset

    Raises
    ------
    OptionError, ClockError
        On any option out of range, or a stream that does not fit the target.
    """
    ident = asset_identifier(name)
    bits = check_bits(bits)
    _check_choice(dither, DITHERS, "dither")
    _check_choice(shaping, SHAPER_NAMES, "shaping")
    _check_choice(weighting, WEIGHTING_NAMES, "weighting")
    _check_choice(ntf_form, NTF_FORMS, "ntf_form")
    _check_choice(shift, SHIFTS, "shift")
    _check_choice(pin_order, PIN_ORDERS, "pin_order")
    _check_choice(program, PROGRAM_CHOICES, "program")
    headroom_db = _check_nonneg(headroom_db, "headroom_db", "dB")
    fade_ms = _check_nonneg(fade_ms, "fade_ms", "ms")
    ramp_ms = _check_nonneg(ramp_ms, "ramp_ms", "ms")
    crossfade_ms = _check_nonneg(crossfade_ms, "crossfade_ms", "ms")
    _check_int(idle_code, "idle_code", 0, (1 << bits) - 1)
    _check_int(chunk_words, "chunk_words", 1)
    _check_int(embed_words_max, "embed_words_max", 0)
    check_pins(out_base, bits, gpio_count)
    target = TargetProfile(flash_bytes, flash_reserve_bytes, ram_bytes)
    levelset = None
    if levels is not None:
        levelset = levels if isinstance(levels, LevelSet) else load_levels(levels)
        if levelset.bits != bits:
            raise OptionError(
                f"the levels file is for {levelset.bits} bits but the stream is {bits}-bit",
                field="levels",
            )
    synth = sig if callable(sig) else None
    if not isinstance(sig, Signal) and synth is None:
        raise OptionError("expected a Signal or a synthesis function", field="samples")
    if isinstance(sig, Signal):
        check_signal(sig, source=(source or {}).get("file"))
        if sig.samples.ndim != 1:
            raise OptionError(
                "expected a mono signal; downmix or pick a channel first", field="samples"
            )

    layout = WordLayout(
        bits,
        shift_right=(shift == "right"),
        per_word=samples_per_word,
        msb_high=(pin_order == "msb-high"),
        invert=bool(invert),
    )
    spw = layout.samples_per_word
    variant = program
    if program == "auto":
        variant = (
            "loop" if loop and max_cycles("loop", spw, bits) >= min_cycles("loop") else ("autopull")
        )
        if variant == "autopull" and spw == 1 and samples_per_word == 1:
            variant = "pull"
    plan = plan_clock(
        rate_hz,
        sys_clock_hz=sys_clock_hz,
        tolerance_ppm=rate_tolerance_ppm,
        min_cycles=min_cycles(variant),
        max_cycles=max_cycles(variant, spw, bits),
    )
    prog = ladder_program(
        bits, plan.cycles_per_sample, variant=variant, samples_per_word=spw, name=f"{ident}_out"
    )
    sm = state_machine_config(prog, layout, plan, out_base=out_base, gpio_count=gpio_count)

    rate = float(plan.achieved_rate_hz)
    band = default_band_hz(rate) if band_hz is None else band_hz
    if not (isinstance(band, int | float) and math.isfinite(band) and 0 < band <= rate / 2):
        raise OptionError(
            f"must be > 0 Hz and at most the stream's Nyquist {rate / 2:.6g} Hz, got {band_hz!r}",
            field="band_hz",
        )
    if shaping == "designed":
        shaper = design_shaper(
            rate,
            band_hz=band,
            weighting_kind=weighting,
            order=ntf_order,
            max_gain_db=(default_ntf_max_db(bits) if ntf_max_db is None else ntf_max_db),
            form=ntf_form,
        )
    else:
        shaper = get_shaper(shaping, rate, force=bool(force))
    predicted = predict_noise(shaper, rate, band_hz=band, weighting_kind=weighting)

    done = progress or (lambda stage: None)
    loop_rate_ppm = 0.0
    gain_db = 0.0
    if blocks is not None:
        if loop or loudness_lufs is not None:
            raise OptionError(
                "a clip processed in blocks supports neither loops nor loudness "
                "normalisation; use a shorter clip",
                field="block_frames",
            )
        from itertools import chain

        from ladderpack.pack import Packed, pack_blocks

        breport: dict[str, Any] = {}
        audio_iter = blocks(
            rate_out_hz=plan.achieved_rate_hz,
            bits=bits,
            shaper=shaper,
            levels=levelset,
            report=breport,
        )
        first = next(audio_iter, np.zeros(0, np.uint16))  # first passes: n_out now known
        done("resample")
        ramp_samples = round(ramp_ms * 1e-3 * float(plan.achieved_rate_hz))
        ramp = idle_ramp(idle_code, bits, ramp_samples)
        audio_len = int(breport["n_out"])
        total = 2 * ramp.size + audio_len
        words = np.empty(layout.words_for(total), dtype=np.uint32)
        pos = 0
        for w in pack_blocks(
            chain([ramp, first], audio_iter, [ramp[::-1]]), layout, pad_code=idle_code
        ):
            words[pos : pos + w.size] = w
            pos += w.size
        done("quantise")
        packed = Packed(words, layout, total, idle_code)
        codes = None
        intro = outro = None
        loudness = None
        gain_db = float(breport["gain_db"])
        report = QuantizeReport(
            dither, shaper.name, int(seed), int(breport["overloads"]), int(breport["resets"])
        )
        sig = Signal(np.zeros(1), float(breport["rate_in"]))
        done("pack")
    else:
        if synth is not None:
            x = check_signal(synth(rate, spw))
            x = Signal(x.samples, rate)
            sig = x
        elif loop:
            x = conform.remove_dc(sig)
            x = conform.loop_crossfade(x, crossfade_ms=crossfade_ms)
            rate = conform.loop_rate(x.frames, x.rate_hz, plan.achieved_rate_hz, spw)
            loop_rate_ppm = float((rate / plan.achieved_rate_hz - 1) * 1_000_000)
            x = conform.resample(x, rate, bits=bits, periodic=True)
            x = Signal(x.samples, float(plan.achieved_rate_hz))
        else:
            x = conform.resample(conform.remove_dc(sig), plan.achieved_rate_hz, bits=bits)
        done("resample")
        loudness: dict[str, Any] | None = None
        if synth is None and loudness_lufs is not None:
            x, gain_db, loudness = conform.normalise_loudness(
                x, target_lufs=loudness_lufs, true_peak_dbtp=true_peak_dbtp
            )
            if not loop:
                x = conform.apply_fades(x, fade_ms=fade_ms)
        elif synth is None:
            x, gain_db = conform.normalise_peak(x, headroom_db=headroom_db)
            if not loop:
                x = conform.apply_fades(x, fade_ms=fade_ms)
        audio, report = quantize(
            x, bits=bits, dither=dither, shaper=shaper, seed=seed, levels=levelset
        )
        done("quantise")
        ramp_samples = round(ramp_ms * 1e-3 * float(plan.achieved_rate_hz))
        intro = outro = None
        if loop:
            codes = audio
            ramp = idle_ramp(idle_code, bits, ramp_samples)
            mid = 1 << (bits - 1)
            intro = pack(Codes(ramp, bits), layout, pad_code=mid if ramp.size else idle_code)
            # The outro ends with a whole word of idle codes: the loop program repeats the
            # last word once the FIFO is empty, so that word must be silent.
            tail = np.full(2 * spw - (ramp.size % spw or spw), idle_code, np.uint16)
            outro = pack(
                Codes(np.concatenate([ramp[::-1], tail]), bits), layout, pad_code=idle_code
            )
        else:
            codes = with_idle_ramps(audio, idle_code=idle_code, ramp_samples=ramp_samples)
        packed = pack(codes, layout, pad_code=idle_code)
        audio_len = len(audio)
        done("pack")

    total_words = packed.words.size + sum(p.words.size for p in (intro, outro) if p is not None)
    budget = stream_budget(
        total_words,
        samples_per_word=spw,
        rate_hz=plan.achieved_rate_hz,
        target=target,
        player_chunk_words=chunk_words,
        embedded=packed.words.size <= embed_words_max,
    )
    check_budget(budget)

    spec = conform.resampler_spec(sig.rate_hz, float(plan.achieved_rate_hz), bits)
    options = {
        "name": str(name),
        "bits": bits,
        "rate_hz": float(rate_hz),
        "sys_clock_hz": int(sys_clock_hz),
        "rate_tolerance_ppm": float(rate_tolerance_ppm),
        "headroom_db": headroom_db,
        "fade_ms": fade_ms,
        "ramp_ms": ramp_ms,
        "idle_code": idle_code,
        "dither": dither,
        "shaping": shaping,
        "seed": int(seed),
        "shift": shift,
        "out_base": out_base,
        "gpio_count": gpio_count,
        "pin_order": pin_order,
        "invert": bool(invert),
        "program": program,
        "samples_per_word": samples_per_word,
        "loop": bool(loop),
        "crossfade_ms": crossfade_ms,
        "flash_bytes": flash_bytes,
        "flash_reserve_bytes": flash_reserve_bytes,
        "ram_bytes": ram_bytes,
        "chunk_words": chunk_words,
        "embed_words_max": embed_words_max,
        "band_hz": band_hz,
        "weighting": weighting,
        "ntf_order": ntf_order,
        "ntf_max_db": ntf_max_db,
        "ntf_form": ntf_form,
        "force": bool(force),
        "loudness_lufs": loudness_lufs,
        "true_peak_dbtp": true_peak_dbtp,
        "levels": None
        if levels is None
        else (
            levelset.notes.get("file", "LevelSet")
            if isinstance(levels, LevelSet)
            else os.path.basename(os.fspath(levels))
        ),
    }
    stats = {
        "gain_db": round(gain_db, 6),
        "overloads": report.overloads,
        "shaper_resets": report.resets,
        "shaper": shaper.to_dict(),
        "band_hz": band,
        "predicted_noise_db": {k: round(v, 3) for k, v in predicted.items()},
        "audio_samples": audio_len,
        "ramp_samples": ramp_samples,
        "loop_rate_adjust_ppm": round(loop_rate_ppm, 6),
        "program_variant": variant,
        "resampler": {
            "passband_hz": spec.passband_hz,
            "stopband_hz": spec.stopband_hz,
            "ripple_db": spec.ripple_db,
            "attenuation_db": spec.attenuation_db,
        },
        "budget": budget.to_dict(),
        "levels": None if levelset is None else _levels_stats(levelset),
        "loudness": None
        if loudness is None
        else {k: (round(v, 4) if isinstance(v, float) else v) for k, v in loudness.items()},
        "predicted_full_scale_sine": _predicted_sine(bits, dither, predicted),
    }
    return StreamAsset(
        ident,
        codes,
        packed,
        plan,
        prog,
        sm,
        idle_code,
        source=dict(source or {}),
        options=options,
        stats=stats,
        intro=intro,
        outro=outro,
        budget=budget,
    )


def _predicted_sine(bits: int, dither: str, predicted: dict[str, float]) -> dict[str, float]:
    """SINAD and ENOB a full-scale sine would get from this quantiser (in band).

    Signal power (2^(N-1))^2 / 2 LSB^2 over error power sigma^2 x NTF in-band gain,
    sigma^2 = 1/12 + dither variance (RPDF 1/12, TPDF 1/6: Lipshitz et al. 1992).
    """
    sigma2 = 1 / 12 + {"none": 0.0, "rpdf": 1 / 12, "tpdf": 1 / 6}[dither]
    noise = sigma2 * 10 ** (predicted["in_band_db"] / 10)
    sinad = 10 * math.log10((1 << (bits - 1)) ** 2 / 2 / noise)
    return {"sinad_db": round(sinad, 3), "enob_bits": round((sinad - 1.76) / 6.02, 3)}


def _levels_stats(levelset: LevelSet) -> dict[str, Any]:
    lin = linearity(levelset.volts)
    v = levelset.volts
    out: dict[str, Any] = {
        "origin": levelset.origin,
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


#: Clips with more samples (frames x channels) than this are processed in blocks.
BLOCK_THRESHOLD = 1 << 23


def stream_clip(
    path: str | os.PathLike[str],
    *,
    channel: int | None = None,
    name: str | None = None,
    block_frames: int | None = None,
    **options: Any,
) -> StreamAsset:
    """Read a sound file and turn it into a ladder stream.

    Parameters
    ----------
    path : str or path-like
        WAV, FLAC, OGG or AIFF file.
    channel : int, optional
        Channel to use (0-based); default: mix all channels to mono.
    name : str, optional
        Asset name; default the file name without its extension.
    block_frames : int, optional
        Process the clip in blocks of this many frames, in bounded memory
        (bit-identical to processing it whole).  Default: blocks of 65536
        frames for clips of more than :data:`BLOCK_THRESHOLD` samples that are
        neither loops nor loudness-normalised, whole otherwise.
    **options
        Any keyword of :func:`stream_signal`.

    Examples
    --------
    >>> asset = stream_clip("demo_audio/door_chime.flac", bits=8)  # doctest: +SKIP
    >>> write_bundle(asset, "out")  # doctest: +SKIP
    """
    import soundfile

    fname = os.fspath(path)
    head = load_clip(fname, channel=channel, frames=1)  # checks the file and channel early
    info = soundfile.info(fname)
    big = (
        info.frames * info.channels > BLOCK_THRESHOLD
        and not options.get("loop")
        and (options.get("loudness_lufs") is None)
    )
    if block_frames is not None:
        if (
            isinstance(block_frames, bool)
            or not isinstance(block_frames, int)
            or (block_frames < 1)
        ):
            raise OptionError(
                f"must be a whole number >= 1, got {block_frames!r}", field="block_frames"
            )
    elif big:
        block_frames = 1 << 16
    source = {
        "file": os.path.basename(fname),
        "sha256": sha256_file(fname),
        "rate_hz": head.rate_hz,
        "channels": int(info.channels),
        "frames": int(info.frames),
        "channel": "mix" if channel is None else int(channel),
    }
    if options.get("progress"):
        options["progress"]("read")
    stem = name if name is not None else os.path.splitext(os.path.basename(fname))[0]
    if block_frames is None:
        sig = load_clip(fname, channel=channel)
        return stream_signal(sig, name=stem, source=source, **options)

    def blocks(**kw: Any) -> Iterator[np.ndarray]:
        return clip_codes_in_blocks(
            fname,
            block_frames=block_frames,
            channel=channel,
            headroom_db=options.get("headroom_db", STREAM_DEFAULTS["headroom_db"]),
            fade_ms=options.get("fade_ms", STREAM_DEFAULTS["fade_ms"]),
            dither=options.get("dither", STREAM_DEFAULTS["dither"]),
            seed=options.get("seed", STREAM_DEFAULTS["seed"]),
            **kw,
        )

    stand_in = Signal(np.zeros(1), head.rate_hz)  # validated; the samples come from blocks
    return stream_signal(stand_in, name=stem, source=source, blocks=blocks, **options)


#: Tone kinds whose codes must come out exact: quantised without dither or shaping.
EXACT_KINDS = ("staircase", "dc")


def stream_tone(
    kind: str,
    *,
    name: str | None = None,
    seconds: float = 1.0,
    cycles: int | None = None,
    freq_hz: float = 1000.0,
    level_dbfs: float = -1.0,
    band_limited: bool = True,
    tones: list[tuple[float, float]] | None = None,
    f_start_hz: float = 20.0,
    f_end_hz: float | None = None,
    dc_value: float = 0.0,
    codes: list[int] | None = None,
    dwell_ms: float = 10.0,
    coherent_record: int | None = None,
    **options: Any,
) -> StreamAsset:
    """Synthesise a test waveform at the stream's achieved rate and make a bundle of it.

    Parameters
    ----------
    kind : str
        One of :data:`ladderpack.waves.TONE_KINDS`.
    name : str, optional
        Asset name (default: the kind).
    seconds : float
        Length, s (ignored when `cycles` is given, and for the staircase).
    cycles : int, optional
        Length as a number of cycles of `freq_hz`.
    freq_hz : float
        Frequency of periodic kinds, Hz.
    level_dbfs : float
        Peak level, dBFS.
    band_limited : bool
        Square, sawtooth and triangle without components above Nyquist.
    tones : list of (freq_hz, level_db)
        Multitone components.
    f_start_hz, f_end_hz : float
        Exponential sweep range, Hz (default end: 20 kHz or just under Nyquist).
    dc_value : float
        DC level as a fraction of full scale.
    codes : list of int, optional
        Codes the staircase visits (default every code).
    dwell_ms : float
        Time on each staircase step, ms.
    coherent_record : int, optional
        Record length, samples, of a coherent capture: the frequency is moved
        to a cycle count co-prime with it (IEEE Std 1241 practice).
    **options
        Any keyword of :func:`stream_signal` (``loop=True`` adjusts the
        frequency so whole cycles fill the loop).
    """
    from ladderpack.waves import TONE_KINDS, coherent_cycles, loop_cycles, synthesise

    _check_choice(kind, TONE_KINDS, "kind")
    bits = check_bits(options.get("bits", STREAM_DEFAULTS["bits"]))
    loop = bool(options.get("loop", False))
    if kind in EXACT_KINDS:
        options["dither"] = "none"
        options["shaping"] = "none"
    periodic = kind in ("sine", "square", "sawtooth", "triangle")
    info: dict[str, Any] = {"kind": kind, "level_dbfs": level_dbfs}
    for value, field in ((seconds, "seconds"), (freq_hz, "freq_hz"), (dwell_ms, "dwell_ms")):
        if not (math.isfinite(value) and value > 0):
            raise OptionError(f"must be > 0, got {value!r}", field=field)

    def synth(rate: float, spw: int) -> Signal:
        f = freq_hz
        if kind == "staircase":
            dwell = max(1, round(dwell_ms * 1e-3 * rate))
            x = synthesise(
                kind, rate_hz=rate, samples=0, staircase_codes=codes, dwell_samples=dwell, bits=bits
            )
            if loop and x.size % spw:
                x = np.tile(x, spw // math.gcd(x.size, spw))
            info.update(dwell_samples=dwell, steps=x.size // dwell)
            return Signal(x, rate)
        if coherent_record is not None:
            if (
                isinstance(coherent_record, bool)
                or not isinstance(coherent_record, int)
                or (coherent_record < 4)
            ):
                raise OptionError(
                    f"must be a whole number >= 4, got {coherent_record!r}", field="coherent_record"
                )
            m = coherent_cycles(freq_hz, coherent_record, rate)
            f = m * rate / coherent_record
            span = (
                coherent_record * spw // math.gcd(coherent_record, spw)
                if loop
                else (coherent_record * max(1, math.ceil(seconds * rate / coherent_record)))
            )
            info.update(record=coherent_record, cycles_per_record=m)
            n = span
        elif cycles is not None:
            n = max(1, round(cycles * rate / freq_hz))
        else:
            n = max(1, round(seconds * rate))
        if loop and coherent_record is None:
            n = max(spw, n - n % spw)
            if periodic or kind in ("multitone",):
                c = loop_cycles(freq_hz, n, rate)
                f = c * rate / n
                info["cycles"] = c
        info.update(freq_hz=f, requested_freq_hz=freq_hz, freq_error_hz=f - freq_hz, samples=n)
        x = synthesise(
            kind,
            rate_hz=rate,
            samples=n,
            level_dbfs=level_dbfs,
            freq_hz=f,
            band_limited=band_limited,
            tones=tones,
            f_start_hz=f_start_hz,
            f_end_hz=f_end_hz if f_end_hz is not None else min(20000.0, 0.45 * rate),
            dc_value=dc_value,
            bits=bits,
            seed=int(options.get("seed", 0)),
        )
        return Signal(x, rate)

    asset = stream_signal(
        synth, name=name or kind, source={"file": f"synthesised {kind}"}, **options
    )
    asset.stats["tone"] = info
    return asset


def clip_codes_in_blocks(
    path: str | os.PathLike[str],
    *,
    rate_out_hz: Any,
    bits: int,
    block_frames: int = 1 << 16,
    channel: int | None = None,
    headroom_db: float = STREAM_DEFAULTS["headroom_db"],
    fade_ms: float = STREAM_DEFAULTS["fade_ms"],
    dither: str = STREAM_DEFAULTS["dither"],
    shaper: Any = "none",
    seed: int = STREAM_DEFAULTS["seed"],
    levels: LevelSet | None = None,
    report: dict[str, Any] | None = None,
) -> Iterator[np.ndarray]:
    """The audio codes of a clip, produced block by block in bounded memory.

    The same stages as :func:`stream_signal` (mono mix, DC removal, resampling,
    peak normalisation, fades, quantisation), in three passes over the file: the
    mean, the resampled peak, then the codes.  The resampler's window and the
    quantiser's dither and filter state carry across blocks, so the codes are
    bit-identical to whole-clip processing for any `block_frames`.

    `report`, if given, receives ``rate_in`` and ``n_out`` (the number of codes)
    before the first block is yielded, and ``gain_db``, ``overloads`` and
    ``resets`` as soon as they are known.

    Yields
    ------
    numpy.ndarray
        uint16 codes (ramps not included).
    """
    report = {} if report is None else report
    import soundfile

    from ladderpack.conform import MEAN_CHUNK, StreamResampler, dbfs_to_amplitude, raised_cosine
    from ladderpack.quantize import BlockQuantizer

    name = os.fspath(path)
    load_clip(name, channel=channel, frames=1)  # validates the file and the channel
    info = soundfile.info(name)
    frames, rate_in = int(info.frames), float(info.samplerate)
    if frames < 1:
        raise OptionError("expected at least 1 sample frame(s), got 0", file=name, field="samples")

    def mono_blocks() -> Iterator[np.ndarray]:
        for block in soundfile.blocks(
            name, blocksize=block_frames, dtype="float64", always_2d=True
        ):
            if not np.all(np.isfinite(block)):
                raise OptionError("samples must be finite", file=name, field="samples")
            if channel is None:
                mono = block[:, 0].copy()
                for ch in range(1, block.shape[1]):
                    mono += block[:, ch]
                mono /= block.shape[1]
            else:
                mono = block[:, channel].copy()
            yield mono

    # Pass 1: the mean, from partial sums over the same fixed chunks as chunked_mean.
    parts: list[float] = []
    carry = np.zeros(0)
    for mono in mono_blocks():
        carry = np.concatenate([carry, mono])
        whole = carry.size - carry.size % MEAN_CHUNK
        for i in range(0, whole, MEAN_CHUNK):
            parts.append(float(np.sum(carry[i : i + MEAN_CHUNK])))
        carry = carry[whole:]
    if carry.size:
        parts.append(float(np.sum(carry)))
    mean = math.fsum(parts) / frames

    def resampled() -> Iterator[np.ndarray]:
        rs = StreamResampler(rate_in, rate_out_hz, frames, bits=bits)
        seen = 0
        for mono in mono_blocks():
            seen += mono.size
            y = rs.feed(mono - mean, last=seen >= frames)
            if y.size:
                yield y

    # Pass 2: the peak of the resampled clip, for the gain.
    peak = 0.0
    n_out = 0
    for y in resampled():
        peak = max(peak, float(np.max(np.abs(y))))
        n_out += y.size
    gain = dbfs_to_amplitude(-headroom_db) / peak if peak > 0 else None
    report.update(
        rate_in=rate_in, n_out=n_out, gain_db=20 * math.log10(gain) if gain is not None else 0.0
    )
    rate = float(Fraction(rate_out_hz))
    n_fade = min(round(fade_ms * 1e-3 * rate), n_out // 2)
    w = raised_cosine(n_fade)

    # Pass 3: scale, fade, quantise.
    q = BlockQuantizer(bits=bits, dither=dither, shaper=shaper, seed=seed, levels=levels)
    pos = 0
    for y in resampled():
        if gain is not None:
            y = y * gain
        idx = np.arange(pos, pos + y.size)
        head = idx < n_fade
        if np.any(head):
            y[head] *= w[idx[head]]
        tail = idx >= n_out - n_fade
        if n_fade and np.any(tail):
            y[tail] *= w[::-1][idx[tail] - (n_out - n_fade)]
        pos += y.size
        codes = q.feed(y)
        report.update(overloads=q.overloads, resets=q.resets)
        yield codes
    report.setdefault("overloads", q.overloads)
    report.setdefault("resets", q.resets)
