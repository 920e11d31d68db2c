"""Predicted output: what the ladder (or I2S DAC, or PWM pin) will put out, as audio.

The bundle's words are unpacked to codes, each code is given its level (ideal, or a
measured or modelled LevelSet), held for one sample period (the ladder's zero-order
hold), optionally smoothed by a first-order RC output filter, and resampled to a
playback rate.  The result is scaled so the ideal full scale is +/-1.0.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from typing import Any

import numpy as np

from ladderpack.errors import LadderpackError, OptionError
from ladderpack.outputs.base import PreviewModel

__all__ = ["Preview", "analog_output", "render_preview"]


@dataclass(frozen=True)
class Preview:
    """Rendered output.

    Attributes
    ----------
    samples : numpy.ndarray
        float64 audio at `rate_hz`, ideal full scale +/-1.0.
    rate_hz : float
        Playback rate.
    audio_slice : slice
        The part that holds the audio (ramps and fades excluded), for measuring.
    sidecar : dict
        The bundle's sidecar.
    """

    samples: np.ndarray
    rate_hz: float
    audio_slice: slice
    sidecar: dict[str, Any]


@dataclass(frozen=True)
class _Bundle:
    """What a bundle's words are, decoded: one channel's codes and their scale."""

    side: dict[str, Any]
    codes: np.ndarray  # one channel's codes, one per sample period
    output: str  # the output system's name
    model: PreviewModel  # how the output's codes become a level

    @property
    def bits(self) -> int:
        """Width of one channel's codes."""
        return self.model.code_bits


def _read_bundle(sidecar_path: str, channel: int = 0) -> _Bundle:
    from ladderpack.emit.names import asset_identifier
    from ladderpack.outputs import REGISTRY_BY_NAME, get_output, names
    from ladderpack.reading import read_json

    side = read_json(sidecar_path, what="bundle sidecar")
    if not isinstance(side, dict) or side.get("format") != "ladderpack-stream":
        raise LadderpackError(
            "expected a ladderpack stream sidecar (.json)", file=sidecar_path, field="format"
        )
    for key in ("options", "stats", "clock", "stream", "layout"):
        _section(side, sidecar_path, key)  # each an object, before anything reads it
    try:
        name = side["asset"]
        if not isinstance(name, str) or asset_identifier(name) != name:
            raise ValueError("asset: expected the bundle's identifier (letters, digits, _)")
        lay = side["layout"]
        # a layout without an output is a ladder's, or a PWM stream's of the first version
        output = str(lay.get("output", "pwm" if side.get("pwm") else "ladder"))
        if output not in REGISTRY_BY_NAME:
            raise ValueError(f"layout.output: expected {', '.join(names())}, got {output!r}")
        model = get_output(output).preview_model(lay, side)
        channels = model.channels
        count = side["stream"]["sample_count"]
        if not isinstance(count, int) or isinstance(count, bool) or not 0 <= count <= 2**40:
            raise ValueError(f"stream.sample_count: expected a whole number, got {count!r}")
    except (KeyError, TypeError) as exc:
        raise LadderpackError(
            f"not a complete bundle sidecar (missing or wrong {exc})", file=sidecar_path
        ) from None
    except (ValueError, LadderpackError) as exc:
        raise LadderpackError(str(exc), file=sidecar_path) from None
    if channel not in range(channels):
        raise OptionError(
            f"must be 0..{channels - 1} for this {'stereo' if channels == 2 else 'mono'} "
            f"bundle, got {channel}",
            field="channel",
        )
    bin_path = os.path.join(os.path.dirname(sidecar_path), f"{name}.bin")
    from ladderpack.reading import check_regular_file

    check_regular_file(bin_path, what="bundle .bin file")
    try:
        with open(bin_path, "rb") as f:
            data = f.read()
    except OSError:
        raise LadderpackError("the bundle's .bin file is unreadable", file=bin_path) from None
    comp = (side.get("stats") or {}).get("compression")
    if comp:
        if model.stored is None:
            raise LadderpackError(
                f"the sidecar says the stream is compressed, which a {output} bundle is not",
                file=sidecar_path,
                field="stats.compression",
            )
        try:
            words = model.stored(data, comp)
        except (KeyError, TypeError, ValueError, OptionError) as exc:
            raise LadderpackError(
                f"not a compressed stream the sidecar describes ({exc})", file=bin_path
            ) from None
    else:
        words = np.frombuffer(data[: len(data) // 4 * 4], dtype="<u4")
    if words.size < model.layout.words_for(count):
        raise LadderpackError(
            f"holds {words.size} words but the sidecar says {model.layout.words_for(count)}",
            file=bin_path,
        )
    codes = model.decode(words, count, channel)
    return _Bundle(side, np.asarray(codes, dtype=np.int64), output, model)


def analog_output(
    levels: np.ndarray, rate_hz: float, oversample: int, corner_hz: float | None = None
) -> np.ndarray:
    """The ladder's analog output, sampled `oversample` times per sample period.

    Each level is held for one whole period (the zero-order hold, transfer
    ``T sinc(f T) exp(-j pi f T)``), optionally through a first-order RC filter
    (``1 / (1 + j f / corner)``), computed exactly in the frequency domain: the levels
    as an impulse train at ``oversample x rate_hz`` times those transfers, so the
    result is the analog waveform band-limited to half that rate, at the right times
    (no half-step offset) and with the hold's images at their true level. The record is
    padded for the filter's tail and treated as periodic past it.

    Parameters
    ----------
    levels : numpy.ndarray
        One value per sample period.
    rate_hz : float
        Sample rate of the levels, Hz.
    oversample : int
        Output samples per sample period.
    corner_hz : float, optional
        Corner of the RC filter, Hz.
    """
    from scipy import fft as sfft

    x = np.asarray(levels, dtype=np.float64)
    edge = float(x[-1]) if x.size else 0.0
    tail = 1 if corner_hz is None else math.ceil(14 * rate_hz / (2 * math.pi * corner_hz)) + 1
    n = x.size + tail
    m = sfft.next_fast_len(n * oversample, real=True)
    train = np.zeros(m)
    train[: x.size * oversample : oversample] = x - edge
    f = np.fft.rfftfreq(m, 1.0 / (oversample * rate_hz))
    h = oversample * np.sinc(f / rate_hz) * np.exp(-1j * np.pi * f / rate_hz)
    if corner_hz is not None:
        h = h / (1 + 1j * f / corner_hz)
    y = sfft.irfft(sfft.rfft(train) * h, m)
    return y[: x.size * oversample] + edge


def _own_levels(side: dict[str, Any], sidecar_path: str) -> Any:
    """The LevelSet the stream was made with (``stream --levels``), or None.

    Looked for by name beside the bundle and in the current folder, and accepted only
    if its digest is the one the sidecar records.
    """
    import hashlib

    from ladderpack.levels import load_levels

    name = (side.get("options") or {}).get("levels")
    want = ((side.get("stats") or {}).get("levels") or {}).get("sha256")
    if not isinstance(name, str) or not name:
        return None
    for path in (os.path.join(os.path.dirname(sidecar_path), name), name):
        if os.path.isfile(path):
            levels = load_levels(path)
            if want is None or hashlib.sha256(levels.to_json().encode()).hexdigest() == want:
                return levels
    raise LadderpackError(
        f"the stream was made with the LevelSet {name!r}, which is not beside the bundle or "
        "in the current folder (or has changed since): pass --levels FILE, or --levels ideal",
        file=sidecar_path,
        field="levels",
    )


def _section(side: dict[str, Any], path: str, key: str) -> dict[str, Any]:
    """A sidecar section preview reads: a JSON object (absent reads as empty)."""
    sec = side.get(key, {})
    if sec is None:
        return {}
    if not isinstance(sec, dict):
        raise LadderpackError(f"expected an object, got {type(sec).__name__}", file=path, field=key)
    return sec


def _number(
    side: dict[str, Any],
    path: str,
    section: str,
    key: str,
    default: float | None = None,
    *,
    lo: float = 0.0,
    hi: float,
) -> float:
    """A finite number within lo..hi from a sidecar section, or the error naming it."""
    v = _section(side, path, section).get(key, default)
    if (
        isinstance(v, (int, float))
        and not isinstance(v, bool)
        and math.isfinite(v)
        and lo <= v <= hi
    ):
        return float(v)
    raise LadderpackError(
        f"expected a number {lo:g}..{hi:g}, got {v!r}", file=path, field=f"{section}.{key}"
    )


def render_preview(
    sidecar_path: str,
    *,
    levels_path: str | None = None,
    playback_rate_hz: float | None = None,
    filter_corner_hz: float | None = None,
    channel: int = 0,
) -> Preview:
    """Render a bundle's predicted output (one channel of a stereo bundle).

    A ladder's codes take their levels; an I2S stream is rendered as an ideal DAC; a PWM
    stream as the pin's mean over each period (duty ``compare / (TOP + 1)``), that is
    what a reconstruction filter passes of it (the carrier is not modelled).

    Parameters
    ----------
    sidecar_path : str
        The bundle's ``.json`` sidecar (the ``.bin`` beside it is read).
    levels_path : str, optional
        LevelSet file of the real ladder, or ``"ideal"``; default the LevelSet the
        stream was made with (``stream --levels``, found beside the bundle or in the
        current folder and checked against the sidecar's digest), else ideal levels.
    playback_rate_hz : float, optional
        Output rate, Hz (default the stream rate: no hold or resampling).
    filter_corner_hz : float, optional
        Corner of a first-order RC output filter, Hz (default none).
    channel : int
        Channel of a stereo bundle: 0 left (PWM channel A), 1 right.
    """
    from ladderpack.audio import Signal
    from ladderpack.conform import resample
    from ladderpack.levels import ideal_levels, load_levels

    b = _read_bundle(sidecar_path, channel)
    side, codes, bits = b.side, b.codes, b.bits
    if not b.model.ladder:
        if levels_path not in (None, "ideal"):
            raise OptionError(
                f"a LevelSet describes a ladder; this bundle is for output {b.output}",
                field="levels",
            )
        # an ideal DAC (I2S: two's complement about mid-scale) or a PWM pin's mean over a
        # period, duty = compare value / (TOP + 1), about half the swing
        half = b.model.half
        x = (codes - half) / half
    else:
        if levels_path == "ideal":
            levels = ideal_levels(bits)
        elif levels_path is not None:
            levels = load_levels(levels_path)
        else:
            levels = _own_levels(side, sidecar_path) or ideal_levels(bits)
        if levels.bits != bits:
            raise OptionError(
                f"the levels are for {levels.bits} bits, the bundle is {bits}-bit",
                field="levels",
            )
        v = levels.volts
        ideal_half = (v[-1] - v[0]) * (1 << (bits - 1)) / ((1 << bits) - 1)
        centre = v[0] + ideal_half
        x = (v[codes] - centre) / ideal_half
    rate = _number(side, sidecar_path, "clock", "achieved_rate_hz", lo=1.0, hi=1.5e6)
    out_rate = rate if playback_rate_hz is None else float(playback_rate_hz)
    if not (math.isfinite(out_rate) and out_rate > 0):
        raise OptionError(f"must be > 0 Hz, got {playback_rate_hz!r}", field="playback_rate_hz")
    hold = 1
    if filter_corner_hz is not None and not (
        math.isfinite(filter_corner_hz) and filter_corner_hz > 0
    ):
        raise OptionError(f"must be > 0 Hz, got {filter_corner_hz!r}", field="filter_corner_hz")
    if out_rate != rate or filter_corner_hz is not None:
        hold = max(1, math.ceil(4 * max(out_rate, rate) / rate))
        x = analog_output(x, rate, hold, filter_corner_hz)
    if hold > 1 or out_rate != rate:
        x = resample(Signal(x, hold * rate), out_rate, bits=16).samples
    ramp = int(_number(side, sidecar_path, "stats", "ramp_samples", 0, hi=codes.size))
    audio = int(_number(side, sidecar_path, "stats", "audio_samples", codes.size, hi=codes.size))
    fade = round(_number(side, sidecar_path, "options", "fade_ms", 0.0, hi=1e7) * 1e-3 * rate)
    if _section(side, sidecar_path, "options").get("loop"):
        ramp = fade = 0
    if _section(side, sidecar_path, "stats").get("tone"):
        fade = 0  # a synthesised tone has no fades (its sidecar records the default)
    lo = (ramp + fade) * out_rate / rate
    hi = (ramp + audio - fade) * out_rate / rate
    return Preview(x, out_rate, slice(math.ceil(lo), max(int(hi), math.ceil(lo) + 1)), side)
