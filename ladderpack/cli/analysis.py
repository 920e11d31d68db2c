"""``measure`` and ``preview``: a capture's or a bundle's output, analysed."""

from __future__ import annotations

import os
from collections.abc import Callable, Mapping
from typing import Any

import click

from ladderpack.cli.common import (
    _model_options_lazy,
    _write_bytes,
    cli,
    model_values,
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


def _plot_and_json(func: Callable[..., Any]) -> Callable[..., Any]:
    """The two output options of the analysing commands."""
    func = click.option("--json", "as_json", is_flag=True, help="Print the result as JSON.")(func)
    return click.option(
        "--plot",
        "plot_path",
        type=click.Path(dir_okay=False),
        default=None,
        help="Write a spectrum plot (PNG; needs the 'plot' extra).",
    )(func)


def _stream_band(side: Mapping[str, Any], rate: float) -> tuple[float, float] | None:
    """The audio band the stream's own prediction used (its sidecar), for preview."""
    band = (side.get("stats") or {}).get("band_hz")
    if isinstance(band, (int, float)) and not isinstance(band, bool) and 0 < band < rate / 2:
        return (0.0, float(band))
    return None


@cli.command()
@click.argument("capture", type=click.Path(dir_okay=False))
@_model_options_lazy("MeasureOptions")
@_model_options_lazy("AnalysisOptions")
@_plot_and_json
def measure(capture: str, plot_path: str | None, as_json: bool, **values: Any) -> None:
    """Analyse a recorded test tone (WAV, FLAC or CSV of samples).

    IEEE 1241 sine fit, SINAD, THD, THD+N, SFDR, ENOB and noise.
    """
    from ladderpack.measure import measure_capture
    from ladderpack.options import AnalysisOptions, MeasureOptions

    spec = MeasureOptions(**model_values(MeasureOptions, values))
    analysis = AnalysisOptions(**model_values(AnalysisOptions, values))
    r, y = measure_capture(capture, spec, analysis)
    total = r.pop("total_samples")
    if plot_path:
        from ladderpack.plots import spectrum_png

        r["plot"] = _write_bytes(
            plot_path, spectrum_png(y, r["rate_hz"], r, full_scale=spec.full_scale)
        )
    if as_json:
        click.echo(json_text(r))
        return
    _print_analysis(r, os.path.basename(capture))
    lo, hi = r["analysed_samples"]
    click.echo(
        f"  analysed samples {lo}..{hi} of {total} ({r['analysed_part']}); rate "
        f"{r['rate_hz']:g} Hz ({r['rate_source']})"
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
@_model_options_lazy("AnalysisOptions")
@_plot_and_json
def preview(
    sidecar: str,
    out_path: str | None,
    levels_path: str | None,
    playback_rate_hz: float | None,
    filter_corner_hz: float | None,
    do_measure: bool | None,
    channel: int,
    plot_path: str | None,
    as_json: bool,
    **values: Any,
) -> None:
    """Render what the ladder, I2S DAC or PWM pin will put out for a bundle (its SIDECAR).

    The result is a WAV file for listening, and is measured.
    """
    import io

    import numpy as np
    import soundfile

    from ladderpack.measure import analyse, analysis_band
    from ladderpack.options import AnalysisOptions
    from ladderpack.preview import render_preview

    spec = AnalysisOptions(**model_values(AnalysisOptions, values))

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
        known = spec.freq_hz or told
        r = analyse(
            y,
            pv.rate_hz,
            freq_hz=known,
            harmonics=spec.harmonics,
            band_hz=analysis_band(pv.rate_hz, spec.band_low_hz, spec.band_high_hz)
            or _stream_band(pv.sidecar, pv.rate_hz),
            a_weighted=spec.a_weighting,
            weight_tone=spec.weight_tone,
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
