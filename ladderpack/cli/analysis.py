"""``measure`` and ``preview``: a capture's or a bundle's output, analysed."""

from __future__ import annotations

import os
from collections.abc import Callable, Mapping
from typing import Any

import click

from ladderpack.cli.common import (
    _write_bytes,
    cli,
)
from ladderpack.reading import json_text


def _print_analysis(r: Mapping[str, Any], label: str) -> None:
    click.echo(
        f"{label}: {r['freq_hz']:.4f} Hz at {r['amplitude_dbfs']:.2f} dBFS"
        + (
            (", A-weighted (tone too)" if r.get("tone_weighted") else ", A-weighted noise")
            if r["a_weighted"]
            else ""
        )
        + f", band {r['band_hz'][0]:g}..{r['band_hz'][1]:g} Hz"
    )
    click.echo(
        f"  SINAD {r['sinad_db']:.2f} dB, SNR {r['snr_db']:.2f} dB, THD {r['thd_db']:.2f} "
        f"dB, THD+N {r['thd_n_db']:.2f} dB, SFDR {r['sfdr_db']:.2f} dB"
    )
    click.echo(
        f"  ENOB {r['enob_bits']:.3f} bits (IEEE), {r['enob_sine_bits']:.3f} bits "
        f"((SINAD - 1.76) / 6.02); noise {r['noise_dbfs']:.2f} dBFS"
    )
    for warning in r.get("warnings") or []:
        click.echo(f"  warning  {warning}")


def _analyse_opts(func: Callable[..., Any]) -> Callable[..., Any]:
    opts = [
        click.option(
            "--freq-hz",
            type=float,
            default=None,
            help="Test-tone frequency, Hz  [default: found by a four-parameter fit]",
        ),
        click.option(
            "--harmonics",
            type=int,
            default=10,
            show_default=True,
            help="Highest harmonic counted in THD.",
        ),
        click.option(
            "--band-low-hz",
            type=float,
            default=None,
            help="Lower band edge for noise and distortion, Hz  [default: DC excluded]",
        ),
        click.option(
            "--band-high-hz",
            type=float,
            default=None,
            help="Upper band edge, Hz  [default: Nyquist]",
        ),
        click.option(
            "--a-weighting/--no-a-weighting",
            default=False,
            show_default=True,
            help=(
                "Weight noise and distortion by IEC 61672-1 A-weighting; the tone stays "
                "unweighted (usual practice, as in AES17)."
            ),
        ),
        click.option(
            "--weight-tone/--no-weight-tone",
            default=False,
            show_default=True,
            help="With --a-weighting, weight the tone too (a ratio of weighted powers).",
        ),
        click.option(
            "--plot",
            "plot_path",
            type=click.Path(dir_okay=False),
            default=None,
            help="Write a spectrum plot (PNG; needs the 'plot' extra).",
        ),
        click.option("--json", "as_json", is_flag=True, help="Print the result as JSON."),
    ]
    for opt in reversed(opts):
        func = opt(func)
    return func


def _stream_band(side: Mapping[str, Any], rate: float) -> tuple[float, float] | None:
    """The audio band the stream's own prediction used (its sidecar), for preview."""
    band = (side.get("stats") or {}).get("band_hz")
    if isinstance(band, (int, float)) and not isinstance(band, bool) and 0 < band < rate / 2:
        return (0.0, float(band))
    return None


def _band(rate: float, lo: float | None, hi: float | None) -> tuple[float, float] | None:
    if lo is None and hi is None:
        return None
    return (lo or 0.0, hi if hi is not None else rate / 2)


@cli.command()
@click.argument("capture", type=click.Path(dir_okay=False))
@click.option(
    "--rate-hz",
    type=float,
    default=None,
    help=(
        "Sample rate of the capture, Hz: a CSV's when its header gives none; for a sound "
        "file it overrides the header (whose rate is whole hertz)  [default: from the file]"
    ),
)
@click.option(
    "--channel",
    type=int,
    default=0,
    show_default=True,
    help="Channel of a multichannel sound file.",
)
@click.option(
    "--full-scale",
    type=float,
    default=1.0,
    show_default=True,
    help="Peak of a full-scale sine in the capture's units (1.0 for sound files; "
    "volts for a scope CSV).",
)
@click.option(
    "--trim-start-s",
    type=float,
    default=None,
    help="Seconds to drop at the start  [default: the steady part is found]",
)
@click.option(
    "--trim-end-s",
    type=float,
    default=None,
    help="Seconds to drop at the end  [default: the steady part is found]",
)
@_analyse_opts
def measure(
    capture: str,
    rate_hz: float | None,
    channel: int,
    full_scale: float,
    trim_start_s: float | None,
    trim_end_s: float | None,
    freq_hz: float | None,
    harmonics: int,
    band_low_hz: float | None,
    band_high_hz: float | None,
    a_weighting: bool,
    weight_tone: bool,
    plot_path: str | None,
    as_json: bool,
) -> None:
    """Analyse a recorded test tone (WAV, FLAC or CSV of samples).

    IEEE 1241 sine fit, SINAD, THD, THD+N, SFDR, ENOB and noise.
    """
    from ladderpack.audio import load_clip, read_capture_csv
    from ladderpack.errors import OptionError
    from ladderpack.measure import analyse, sine_share, steady_part

    rate_note = "from the file"
    if capture.lower().endswith((".csv", ".txt")):
        y, stated, how = read_capture_csv(capture)
        if rate_hz is not None:
            rate, rate_note = rate_hz, "from --rate-hz"
        elif stated is not None:
            rate, rate_note = stated, f"from {how}"
        else:
            raise OptionError(
                "a CSV capture without a sample interval in its header or a time column "
                "needs --rate-hz",
                field="rate_hz",
            )
    else:
        sig = load_clip(capture, channel=channel)
        y, rate = sig.samples, sig.rate_hz
        if rate_hz is not None:  # the user knows better than the header (a rounded rate)
            rate_note = f"from --rate-hz, over the file's header ({rate:g} Hz)"
            rate = float(rate_hz)
    total = y.size
    if trim_start_s is not None or trim_end_s is not None:
        lo = round((trim_start_s or 0.0) * rate)
        hi = total - round((trim_end_s or 0.0) * rate)
        if not 0 <= lo < hi - 8:
            raise OptionError(
                f"the trims leave nothing of the {total / rate:.3f} s capture", field="trim"
            )
        part, part_note = slice(lo, hi), "as trimmed"
    else:
        part = steady_part(y, rate)
        part_note = "the steady part, found" if part != slice(0, total) else "all of it"
    y = y[part]
    share = sine_share(y, rate)
    r: dict[str, Any] = dict(
        analyse(
            y,
            rate,
            freq_hz=freq_hz,
            full_scale=full_scale,
            harmonics=harmonics,
            band_hz=_band(rate, band_low_hz, band_high_hz),
            a_weighted=a_weighting,
            weight_tone=weight_tone,
        )
    )
    r["rate_hz"] = rate
    r["rate_source"] = rate_note
    r["analysed_samples"] = [part.start or 0, part.stop if part.stop is not None else total]
    r["analysed_part"] = part_note
    r["sine_share"] = share
    cycles = r["freq_hz"] * y.size / rate
    if cycles < 2:
        r["warnings"] = [
            *(r.get("warnings") or []),
            f"the record holds {cycles:.3g} cycles of a {r['freq_hz']:.4g} Hz tone at "
            f"{rate:g} Hz ({rate_note}): an implausible rate; give the capture's rate with "
            "--rate-hz",
        ]
    r["warnings"] = list(r.get("warnings") or []) + (
        [
            f"the capture does not look like a sine: a fitted sine holds only "
            f"{100 * share:.1f} % of its power, so these figures mean little"
        ]
        if share < 0.5
        else []
    )
    if plot_path:
        from ladderpack.plots import spectrum_png

        r["plot"] = _write_bytes(plot_path, spectrum_png(y, rate, r, full_scale=full_scale))
    if as_json:
        click.echo(json_text(r))
    else:
        _print_analysis(r, os.path.basename(capture))
        lo, hi = r["analysed_samples"]
        click.echo(
            f"  analysed samples {lo}..{hi} of {total} ({part_note}); rate {rate:g} Hz "
            f"({rate_note})"
        )


@cli.command()
@click.argument("sidecar", type=click.Path(dir_okay=False))
@click.option(
    "-o",
    "--out",
    "out_path",
    default=None,
    help="WAV file to write  [default: <asset>_preview.wav beside the bundle]",
)
@click.option(
    "--levels",
    "levels_path",
    type=click.Path(dir_okay=False),
    default=None,
    help="LevelSet of the real ladder, or 'ideal'  [default: the one the stream was made "
    "with (stream --levels), else ideal levels]",
)
@click.option(
    "--playback-rate-hz",
    type=float,
    default=None,
    help="Rate of the WAV, Hz  [default: the stream rate]",
)
@click.option(
    "--filter-corner-hz",
    type=float,
    default=None,
    help="Corner of a first-order RC output filter, Hz  [default: none]",
)
@click.option(
    "--measure/--no-measure",
    "do_measure",
    default=None,
    help="Measure the result like a capture  [default: for sine tones]",
)
@click.option(
    "--channel",
    type=int,
    default=0,
    show_default=True,
    help="Channel of a stereo bundle: 0 left (PWM channel A), 1 right (index).",
)
@_analyse_opts
def preview(
    sidecar: str,
    out_path: str | None,
    levels_path: str | None,
    playback_rate_hz: float | None,
    filter_corner_hz: float | None,
    do_measure: bool | None,
    channel: int,
    freq_hz: float | None,
    harmonics: int,
    band_low_hz: float | None,
    band_high_hz: float | None,
    a_weighting: bool,
    weight_tone: bool,
    plot_path: str | None,
    as_json: bool,
) -> None:
    """Render what the ladder, I2S DAC or PWM pin will put out for a bundle (its SIDECAR).

    The result is a WAV file for listening, and is measured.
    """
    import io

    import numpy as np
    import soundfile

    from ladderpack.measure import analyse
    from ladderpack.preview import render_preview

    pv = render_preview(
        sidecar,
        levels_path=levels_path,
        playback_rate_hz=playback_rate_hz,
        filter_corner_hz=filter_corner_hz,
        channel=channel,
    )
    name = pv.sidecar["asset"]
    target = out_path or os.path.join(os.path.dirname(sidecar), f"{name}_preview.wav")
    buf = io.BytesIO()
    soundfile.write(
        buf,
        np.clip(pv.samples, -1, 1).astype(np.float32),
        round(pv.rate_hz),
        format="WAV",
        subtype="FLOAT",
    )
    written = _write_bytes(target, buf.getvalue())
    tone = pv.sidecar["stats"].get("tone") if isinstance(pv.sidecar.get("stats"), dict) else None
    tone_kind = tone.get("kind") if isinstance(tone, dict) else None
    result: dict[str, Any] = {
        "file": written,
        "rate_hz": pv.rate_hz,
        "wav_header_rate_hz": round(pv.rate_hz),
    }
    if do_measure or (do_measure is None and tone_kind == "sine"):
        y = pv.samples[pv.audio_slice]
        told = tone.get("freq_hz") if isinstance(tone, dict) else None
        if not (isinstance(told, (int, float)) and 0 < told < pv.rate_hz / 2):
            told = None  # a damaged sidecar's frequency: let the fit find the tone
        known = freq_hz or told
        r = analyse(
            y,
            pv.rate_hz,
            freq_hz=known,
            harmonics=harmonics,
            band_hz=_band(pv.rate_hz, band_low_hz, band_high_hz)
            or _stream_band(pv.sidecar, pv.rate_hz),
            a_weighted=a_weighting,
            weight_tone=weight_tone,
        )
        result["analysis"] = r
        if plot_path:
            from ladderpack.plots import spectrum_png

            result["plot"] = _write_bytes(plot_path, spectrum_png(y, pv.rate_hz, r))
    if as_json:
        click.echo(json_text(result))
        return
    click.echo(
        f"wrote {written} ({pv.samples.size / pv.rate_hz:.3f} s); listen at a low volume first"
    )
    click.echo(
        f"rate  rendered at {pv.rate_hz:.6f} Hz (the stream's achieved rate, or the playback "
        f"rate asked for); the WAV header says {round(pv.rate_hz)} Hz (WAV stores whole hertz)"
    )
    if "analysis" in result:
        _print_analysis(result["analysis"], f"{name} (predicted)")
