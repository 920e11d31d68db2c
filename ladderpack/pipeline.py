"""The stream pipeline: clip or signal in, :class:`StreamAsset` out.

This is the library face of ``ladderpack stream``: it runs the stages of the
data flow in order (conform, quantise, ramp, pack, program) and records every
option and measurement for the sidecar.  It writes nothing; pass the result
to :func:`ladderpack.bundle.write_bundle`.
"""

from __future__ import annotations

import math
import os
from collections.abc import Callable
from typing import Any

from ladderpack import conform
from ladderpack.audio import Signal, check_signal, load_clip, sha256_file
from ladderpack.bundle import StreamAsset
from ladderpack.clock import plan_clock
from ladderpack.defaults import SHIFTS, STAGES, STREAM_DEFAULTS
from ladderpack.emit.names import asset_identifier
from ladderpack.errors import OptionError
from ladderpack.pack import WordLayout, pack
from ladderpack.pio import ladder_program, state_machine_config
from ladderpack.quantize import DITHERS, SHAPERS, check_bits, quantize, with_idle_ramps

__all__ = ["STAGES", "STREAM_DEFAULTS", "stream_clip", "stream_signal"]


def _check_choice(value: str, choices: tuple[str, ...] | list[str], field: str) -> str:
    if value not in choices:
        raise OptionError(f"must be one of {', '.join(choices)}; got {value!r}", field=field)
    return value


def _check_nonneg(value: float, field: str, unit: str) -> float:
    if not (isinstance(value, int | float) and math.isfinite(value) and value >= 0):
        raise OptionError(f"must be a number >= 0 {unit}, got {value!r}", field=field)
    return float(value)


def stream_signal(
    sig: Signal,
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
    source: dict[str, Any] | None = None,
    progress: Callable[[str], None] | None = None,
) -> StreamAsset:
    """Turn a mono signal into a ladder stream.

    Parameters
    ----------
    sig : Signal
        Mono input, nominal full scale +/-1.0, at any rate.
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
        Raised-cosine fade at each end of the audio, in ms (default 5).
    ramp_ms : float
        Ramp between the idle code and mid-scale before and after the audio,
        in ms (default 50).
    idle_code : int
        Code the pins hold when nothing plays (default 0).
    dither : {'tpdf', 'rpdf', 'none'}
        Dither before quantisation (default 'tpdf').
    shaping : {'none', 'first-order'}
        Error-feedback noise shaping (default 'none').
    seed : int
        Dither seed (default 0); same seed, same output.
    shift : {'right', 'left'}
        OUT shift direction (default 'right': first sample in the LSBs).
    out_base : int
        GPIO of the ladder's bit 0 (default 0).
    gpio_count : int
        User GPIOs on the target (default 30).
    source : dict, optional
        Provenance recorded in the sidecar.
    progress : callable, optional
        Called with the name of each stage as it finishes (one of
        :data:`STAGES`), for progress display.

    Returns
    -------
    StreamAsset
    """
    ident = asset_identifier(name)
    bits = check_bits(bits)
    _check_choice(dither, DITHERS, "dither")
    _check_choice(shaping, tuple(SHAPERS), "shaping")
    _check_choice(shift, SHIFTS, "shift")
    headroom_db = _check_nonneg(headroom_db, "headroom_db", "dB")
    fade_ms = _check_nonneg(fade_ms, "fade_ms", "ms")
    ramp_ms = _check_nonneg(ramp_ms, "ramp_ms", "ms")
    if (
        isinstance(idle_code, bool)
        or int(idle_code) != idle_code
        or not (0 <= idle_code < (1 << bits))
    ):
        raise OptionError(
            f"must be a code 0..{(1 << bits) - 1} for {bits} bits, got {idle_code!r}",
            field="idle_code",
        )
    if isinstance(out_base, bool) or int(out_base) != out_base or out_base < 0:
        raise OptionError(f"must be a GPIO number >= 0, got {out_base!r}", field="out_base")
    check_signal(sig, source=(source or {}).get("file"))
    if sig.samples.ndim != 1:
        raise OptionError(
            "expected a mono signal; downmix or pick a channel first", field="samples"
        )

    plan = plan_clock(rate_hz, sys_clock_hz=sys_clock_hz, tolerance_ppm=rate_tolerance_ppm)
    layout = WordLayout(bits, shift_right=(shift == "right"))
    program = ladder_program(bits, plan.cycles_per_sample, name=f"{ident}_out")
    sm = state_machine_config(program, layout, plan, out_base=int(out_base), gpio_count=gpio_count)

    done = progress or (lambda stage: None)
    x = conform.remove_dc(sig)
    x = conform.resample(x, plan.achieved_rate_hz, bits=bits)
    done("resample")
    x, gain_db = conform.normalise_peak(x, headroom_db=headroom_db)
    x = conform.apply_fades(x, fade_ms=fade_ms)
    audio, report = quantize(x, bits=bits, dither=dither, shaping=shaping, seed=seed)
    done("quantise")
    ramp_samples = round(ramp_ms * 1e-3 * float(plan.achieved_rate_hz))
    codes = with_idle_ramps(audio, idle_code=int(idle_code), ramp_samples=ramp_samples)
    packed = pack(codes, layout, pad_code=int(idle_code))
    done("pack")

    spec = conform.resampler_spec(sig.rate_hz, float(plan.achieved_rate_hz), bits)
    options = {
        "bits": bits,
        "rate_hz": float(rate_hz),
        "sys_clock_hz": int(sys_clock_hz),
        "rate_tolerance_ppm": float(rate_tolerance_ppm),
        "headroom_db": headroom_db,
        "fade_ms": fade_ms,
        "ramp_ms": ramp_ms,
        "idle_code": int(idle_code),
        "dither": dither,
        "shaping": shaping,
        "seed": int(seed),
        "shift": shift,
        "out_base": int(out_base),
        "gpio_count": int(gpio_count),
    }
    stats = {
        "gain_db": round(gain_db, 6),
        "overloads": report.overloads,
        "audio_samples": len(audio),
        "ramp_samples": ramp_samples,
        "resampler": {
            "passband_hz": spec.passband_hz,
            "stopband_hz": spec.stopband_hz,
            "ripple_db": spec.ripple_db,
            "attenuation_db": spec.attenuation_db,
        },
    }
    return StreamAsset(
        ident,
        codes,
        packed,
        plan,
        program,
        sm,
        int(idle_code),
        source=dict(source or {}),
        options=options,
        stats=stats,
    )


def stream_clip(
    path: str | os.PathLike[str],
    *,
    channel: int | None = None,
    name: str | None = None,
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
    **options
        Any keyword of :func:`stream_signal`.

    Examples
    --------
    >>> asset = stream_clip("demo_audio/door_chime.flac", bits=8)  # doctest: +SKIP
    >>> write_bundle(asset, "out")  # doctest: +SKIP
    """
    fname = os.fspath(path)
    sig = load_clip(fname, channel=channel)
    import soundfile

    info = soundfile.info(fname)
    source = {
        "file": os.path.basename(fname),
        "sha256": sha256_file(fname),
        "rate_hz": sig.rate_hz,
        "channels": int(info.channels),
        "frames": sig.frames,
        "channel": "mix" if channel is None else int(channel),
    }
    if options.get("progress"):
        options["progress"]("read")
    stem = name if name is not None else os.path.splitext(os.path.basename(fname))[0]
    return stream_signal(sig, name=stem, source=source, **options)
