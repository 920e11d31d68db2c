"""Command-line interface: click commands only, no DSP here."""

from __future__ import annotations

import contextlib
import json
import os
import sys
from collections.abc import Callable, Iterator
from typing import Any

import click

from ladderpack._version import __version__
from ladderpack.defaults import (
    DITHERS,
    EMBED_WORDS_MAX,
    NTF_FORMS,
    PIN_ORDERS,
    PROGRAM_CHOICES,
    SHAPER_NAMES,
    SHIFTS,
    STREAM_DEFAULTS,
    WEIGHTING_NAMES,
)
from ladderpack.errors import LadderpackError

D = STREAM_DEFAULTS


def _print_summary(summary: dict[str, Any], files: list[str] | None = None) -> None:
    rate_line = (
        f"{summary['requested_rate_hz']:g} Hz requested, "
        f"{summary['achieved_rate_hz']:.6f} Hz achieved "
        f"({summary['rate_error_ppm']:+.3f} ppm)"
    )
    jitter = (
        "fractional, 1 system clock of jitter"
        if summary["fractional_divider"]
        else "integer, no jitter"
    )
    click.echo(f"{summary['asset']}: {summary['duration_s']:.3f} s, {summary['bits']}-bit")
    click.echo(f"  rate     {rate_line}")
    click.echo(
        f"  divider  {summary['divider']} ({jitter}), "
        f"{summary['cycles_per_sample']} cycle(s) per sample"
    )
    click.echo(
        f"  stream   {summary['samples']} samples, {summary['words']} words, "
        f"{summary['bytes']} bytes"
    )
    if "overloads" in summary:
        click.echo(f"  clipped  {summary['overloads']} sample(s)")
    pred = summary.get("predicted_noise_db")
    if pred:
        click.echo(
            f"  shaping  {summary.get('shaping', 'none')}: noise vs plain quantising "
            f"{pred['weighted_db']:+.1f} dB weighted, {pred['in_band_db']:+.1f} dB in band, "
            f"{pred['total_db']:+.1f} dB total"
        )
    if summary.get("flash_share") is not None:
        click.echo(
            f"  flash    {100 * summary['flash_share']:.2f} % of the target; at most "
            f"{summary['max_duration_s']:.1f} s fit at this rate and width"
        )
    if "program" in summary:
        click.echo(f"  program  {summary['program']}" + (" (loops)" if summary.get("loop") else ""))
    for path in files or []:
        click.echo(f"  wrote    {path}")


@contextlib.contextmanager
def _stage_progress(label: str) -> Iterator[Callable[[str], None] | None]:
    """A progress bar over the pipeline stages on a terminal; nothing when piped."""
    from ladderpack.defaults import STAGES

    if not sys.stderr.isatty():
        yield None
        return
    with click.progressbar(
        length=len(STAGES), label=label, file=sys.stderr, item_show_func=lambda s: s
    ) as bar:
        yield lambda stage: bar.update(1, stage)


def _opt(flag: str, key: str, help_text: str, **kw: Any) -> Callable[[Any], Any]:
    """An option whose default comes from the library's STREAM_DEFAULTS."""
    kw.setdefault("show_default", True)
    return click.option(flag, key, default=D[key], help=help_text, **kw)


def _stream_options(func: Callable[..., Any]) -> Callable[..., Any]:
    """Options shared by every command that makes a stream bundle."""
    opts = [
        _opt("--bits", "bits", "Ladder width N in bits, 1..16.", type=int),
        _opt("--rate-hz", "rate_hz", "Requested stream sample rate, Hz.", type=float),
        _opt("--sys-clock-hz", "sys_clock_hz", "System clock feeding the PIO block, Hz.", type=int),
        _opt(
            "--rate-tolerance-ppm",
            "rate_tolerance_ppm",
            "Rate error accepted to keep a jitter-free integer divider, ppm.",
            type=float,
        ),
        _opt(
            "--headroom-db",
            "headroom_db",
            "Peak level below full scale after normalising, dB.",
            type=float,
        ),
        _opt(
            "--fade-ms", "fade_ms", "Raised-cosine fade at each end of the audio, ms.", type=float
        ),
        _opt(
            "--ramp-ms",
            "ramp_ms",
            "Ramp between the idle code and mid-scale at start and end, ms.",
            type=float,
        ),
        _opt("--idle-code", "idle_code", "Code the pins hold when nothing plays.", type=int),
        _opt("--dither", "dither", "Dither before rounding.", type=click.Choice(DITHERS)),
        _opt(
            "--shaping",
            "shaping",
            "Error-feedback noise shaping: a fixed or published filter, or designed for the "
            "stream's rate.",
            type=click.Choice(SHAPER_NAMES),
        ),
        _opt(
            "--band-hz",
            "band_hz",
            "Audio band for shaping and noise figures, Hz  [default: 20000 or the stream's "
            "Nyquist, whichever is lower]",
            type=float,
            show_default=False,
        ),
        _opt(
            "--weighting",
            "weighting",
            "Noise weighting for the designer and the report.",
            type=click.Choice(WEIGHTING_NAMES),
        ),
        _opt("--ntf-order", "ntf_order", "Order of a designed shaping filter, 1..16.", type=int),
        _opt(
            "--ntf-max-db",
            "ntf_max_db",
            "Peak gain bound of a designed filter, dB  [default: 3.5 up to 3 bits, 10 up to 7, "
            "20 from 8]",
            type=float,
            show_default=False,
        ),
        _opt(
            "--ntf-form",
            "ntf_form",
            "Designed filter form (auto: the better one).",
            type=click.Choice(NTF_FORMS),
        ),
        click.option(
            "--force/--no-force",
            default=D["force"],
            show_default=True,
            help="Use a published filter even far from its 44.1 kHz design rate.",
        ),
        _opt("--seed", "seed", "Dither seed; the same seed gives identical output.", type=int),
        _opt(
            "--shift",
            "shift",
            "OUT shift direction: right puts the first sample in the LSBs.",
            type=click.Choice(SHIFTS),
        ),
        _opt(
            "--out-base", "out_base", "GPIO number of the ladder's least significant bit.", type=int
        ),
        _opt("--gpio-count", "gpio_count", "User GPIOs on the target (30 on RP2040).", type=int),
        _opt(
            "--pin-order",
            "pin_order",
            "msb-high: ladder MSB on the highest GPIO; msb-low: on the lowest (bits reversed).",
            type=click.Choice(PIN_ORDERS),
        ),
        click.option(
            "--invert/--no-invert",
            default=D["invert"],
            show_default=True,
            help="Invert every bit, for an inverting buffer between pins and ladder.",
        ),
        _opt(
            "--program",
            "program",
            "State-machine program; auto picks loop for loops when it fits, else autopull.",
            type=click.Choice(PROGRAM_CHOICES),
        ),
        _opt(
            "--samples-per-word",
            "samples_per_word",
            "Samples per 32-bit FIFO word  [default: as many as fit]",
            type=int,
            show_default=False,
        ),
        click.option(
            "--loop/--no-loop",
            default=D["loop"],
            show_default=True,
            help="The stream repeats: no fades or ramps at the seam, length rounded "
            "to whole words, players loop.",
        ),
        _opt(
            "--crossfade-ms",
            "crossfade_ms",
            "Loops: crossfade of the end onto the start, ms.",
            type=float,
        ),
        _opt("--flash-bytes", "flash_bytes", "Target flash size, bytes.", type=int),
        _opt(
            "--flash-reserve-bytes",
            "flash_reserve_bytes",
            "Flash kept for firmware code, bytes.",
            type=int,
        ),
        _opt("--ram-bytes", "ram_bytes", "Target RAM size, bytes.", type=int),
        _opt(
            "--chunk-words",
            "chunk_words",
            "Words per DMA buffer of the MicroPython player (two are used).",
            type=int,
        ),
        click.option(
            "--embed-words-max",
            "embed_words_max",
            type=int,
            default=EMBED_WORDS_MAX,
            show_default=True,
            help="Streams up to this many words are also embedded in the MicroPython module.",
        ),
        click.option(
            "--json", "as_json", is_flag=True, help="Print the summary as JSON instead of text."
        ),
    ]
    for opt in reversed(opts):
        func = opt(func)
    return func


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="ladderpack")
def cli() -> None:
    """Turn sound clips into code streams for GPIO resistor-ladder DACs driven by a
    PIO state machine, with firmware-ready C, MicroPython and binary outputs.

    Safety: never drive a speaker or headphones from the ladder directly, keep
    listening levels low, and leave mains-powered gear to qualified people.
    """


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
@click.option(
    "--channel",
    type=int,
    default=None,
    help="Use this channel (0-based) instead of a mono mix of all channels.",
)
@_stream_options
def stream(
    clip: str,
    out_dir: str,
    name: str | None,
    channel: int | None,
    as_json: bool,
    **options: Any,
) -> None:
    """Convert the sound file CLIP (WAV, FLAC, OGG, AIFF) into a stream bundle."""
    from ladderpack.bundle import write_bundle
    from ladderpack.pipeline import stream_clip

    with _stage_progress(f"streaming {os.path.basename(clip)}") as progress:
        asset = stream_clip(clip, channel=channel, name=name, progress=progress, **options)
    written = write_bundle(asset, out_dir)
    summary = asset.summary()
    if as_json:
        summary["files"] = written
        click.echo(json.dumps(summary, indent=2, sort_keys=True))
    else:
        _print_summary(summary, written)


@cli.command()
@click.argument("rate_hz", type=float)
@click.option(
    "--sys-clock-hz",
    type=int,
    default=D["sys_clock_hz"],
    show_default=True,
    help="System clock feeding the PIO block, Hz.",
)
@click.option(
    "--rate-tolerance-ppm",
    type=float,
    default=D["rate_tolerance_ppm"],
    show_default=True,
    help="Rate error accepted to keep a jitter-free integer divider, ppm.",
)
@click.option("--json", "as_json", is_flag=True, help="Print the plan as JSON.")
def clock(rate_hz: float, sys_clock_hz: int, rate_tolerance_ppm: float, as_json: bool) -> None:
    """Show the clock plan (divider, cycles per sample, achieved rate) for RATE_HZ."""
    from ladderpack.clock import plan_clock

    plan = plan_clock(rate_hz, sys_clock_hz=sys_clock_hz, tolerance_ppm=rate_tolerance_ppm)
    d = plan.to_dict()
    if as_json:
        click.echo(json.dumps(d, indent=2, sort_keys=True))
        return
    kind = "fractional (1 system clock of jitter)" if plan.fractional else "integer (no jitter)"
    click.echo(f"requested  {d['requested_rate_hz']:g} Hz at {plan.sys_clock_hz} Hz system clock")
    click.echo(f"achieved   {float(plan.achieved_rate_hz):.6f} Hz ({plan.error_ppm:+.3f} ppm)")
    click.echo(f"divider    {plan.div_int} + {plan.div_frac}/256, {kind}")
    click.echo(f"cycles     {plan.cycles_per_sample} per sample")
    click.echo(f"CLKDIV     0x{plan.clkdiv_register:08X}")


@cli.command()
@click.argument("out_dir", type=click.Path(file_okay=False, path_type=str))
@click.option(
    "--clips-dir",
    default="demo_audio",
    show_default=True,
    help="Folder holding the demo clips (door_chime.flac, frost_warning.flac).",
)
@click.option("--json", "as_json", is_flag=True, help="Print the summaries as JSON.")
def demo(out_dir: str, clips_dir: str, as_json: bool) -> None:
    """Build the garden weather-station demo bundles into OUT_DIR."""
    from ladderpack.demo import run_demo

    results = run_demo(out_dir, clips_dir=clips_dir)
    if as_json:
        click.echo(json.dumps([{**s, "files": f} for s, f in results], indent=2, sort_keys=True))
        return
    for summary, files in results:
        _print_summary(summary, files)
    click.echo(f"demo bundles are in {os.path.abspath(out_dir)}")


def main(argv: list[str] | None = None) -> None:
    """Entry point: run the CLI, reporting user mistakes as one line, exit status 2."""
    try:
        rc = cli.main(args=argv, prog_name="ladderpack", standalone_mode=False)
    except LadderpackError as exc:
        click.echo(f"ladderpack: error: {exc}", err=True)
        sys.exit(exc.exit_code)
    except click.ClickException as exc:
        exc.show()
        sys.exit(exc.exit_code)
    except click.exceptions.Abort:
        click.echo("ladderpack: interrupted", err=True)
        sys.exit(130)
    sys.exit(rc if isinstance(rc, int) else 0)
