"""``stream`` and ``tone``: a bundle from a clip or a synthesised signal."""

from __future__ import annotations

import os
from typing import Any

import click

from ladderpack.cli.common import (
    _model_options_lazy,
    _print_summary,
    _stage_progress,
    _stream_options,
    _warn_out_dir_named_as_output,
    cli,
    model_values,
)
from ladderpack.defaults import (
    TONE_KINDS,
)
from ladderpack.reading import json_text


@cli.command()
@click.argument("clip", type=click.Path(dir_okay=False, path_type=str))
@click.option(
    "-o",
    "--out-dir",
    default="ladderpack_out",
    show_default=True,
    help="Folder the bundle is written to (created if missing).",
)
@click.option(
    "--name", default=None, help="Asset name for files and symbols  [default: the clip's file name]"
)
@_model_options_lazy("ClipOptions")
@_stream_options(clip=True)
def stream(clip: str, out_dir: str, name: str | None, as_json: bool, **values: Any) -> None:
    """Convert the sound file CLIP (WAV, FLAC, OGG, AIFF) into a stream bundle."""
    from ladderpack.bundle import write_bundle
    from ladderpack.options import ClipOptions, StreamOptions
    from ladderpack.stream import stream_clip

    copts = ClipOptions(**model_values(ClipOptions, values))
    opts = StreamOptions(**model_values(StreamOptions, values))
    _warn_out_dir_named_as_output(out_dir, opts.output)
    with _stage_progress(f"streaming {os.path.basename(clip)}") as progress:
        asset = stream_clip(clip, name=name, options=opts, clip=copts, progress=progress)
    written = write_bundle(asset, out_dir)
    summary: dict[str, Any] = dict(asset.summary())
    if as_json:
        summary["files"] = written
        click.echo(json_text(summary))
    else:
        _print_summary(summary, written)


@cli.command()
@click.argument("kind", type=click.Choice(TONE_KINDS))
@click.option(
    "-o",
    "--out-dir",
    default="ladderpack_out",
    show_default=True,
    help="Folder the bundle is written to.",
)
@click.option("--name", default=None, help="Asset name  [default: the kind]")
@_model_options_lazy("ToneSpec")
@_stream_options(clip=False)
def tone(kind: str, out_dir: str, name: str | None, as_json: bool, **values: Any) -> None:
    """Synthesise a test waveform KIND at the stream rate into a bundle.

    The bundle is the same as 'stream' writes.
    """
    from ladderpack.bundle import write_bundle
    from ladderpack.options import StreamOptions, ToneSpec
    from ladderpack.stream import stream_tone

    spec = ToneSpec(kind=kind, **model_values(ToneSpec, values))
    opts = StreamOptions(**model_values(StreamOptions, values))
    _warn_out_dir_named_as_output(out_dir, opts.output)
    asset = stream_tone(kind, name=name, tone=spec, options=opts)
    written = write_bundle(asset, out_dir)
    summary: dict[str, Any] = dict(asset.summary())
    summary["tone"] = asset.stats["tone"]
    if as_json:
        summary["files"] = written
        click.echo(json_text(summary))
        return
    info = asset.stats["tone"]
    if info.get("freq_hz") is not None and kind not in ("dc", "staircase", "white", "pink"):
        extra = (
            f", {info['cycles_per_record']} cycles per {info['record']}-sample record"
            if "record" in info
            else (f", {info['cycles']} cycles per loop" if "cycles" in info else "")
        )
        click.echo(
            f"tone     {kind} {info['requested_freq_hz']:g} Hz requested, "
            f"{info['freq_hz']:.6f} Hz used ({info['freq_error_hz']:+.6f} Hz){extra}"
        )
    elif "tones_hz" in info:
        click.echo("tone     multitone of " + ", ".join(f"{f:g}" for f in info["tones_hz"]) + " Hz")
    elif "f_start_hz" in info:
        click.echo(f"tone     exponential sweep {info['f_start_hz']:g} to {info['f_end_hz']:g} Hz")
    elif "at_sample" in info:
        click.echo(f"tone     {kind} at sample {info['at_sample']} of {info['samples']}")
    elif kind == "staircase":
        click.echo(
            f"tone     staircase of {info['steps']} steps, {info['dwell_samples']} samples each"
        )
    _print_summary(summary, written)
