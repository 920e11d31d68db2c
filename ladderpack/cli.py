"""Command-line interface: click commands only, no DSP here."""

from __future__ import annotations

import contextlib
import os
import sys
from collections.abc import Callable, Iterator, Mapping
from typing import Any

import click

from ladderpack import outputs
from ladderpack._version import __version__
from ladderpack.defaults import (
    SHAPER_NAMES,
    TONE_KINDS,
    WEIGHTING_NAMES,
)
from ladderpack.errors import LadderpackError
from ladderpack.reading import json_text


def _print_summary(summary: Mapping[str, Any], files: list[str] | None = None) -> None:
    rate_line = (
        f"{summary['requested_rate_hz']:g} Hz requested, "
        f"{summary['achieved_rate_hz']:.6f} Hz achieved "
        f"({summary['rate_error_ppm']:+.3f} ppm)"
    )
    from ladderpack.outputs import get_output

    # a summary without an output is a ladder's (records made before other outputs)
    own = get_output(str(summary.get("output", "ladder"))).summary_lines(summary)
    unit = own.unit
    click.echo(f"{summary['asset']}: {summary['duration_s']:.3f} s, {own.kind}")
    click.echo(f"  rate     {rate_line}")
    click.echo(f"  divider  {own.divider}")
    for label, text in own.lines:
        click.echo(f"  {label:<8} {text}")
    click.echo(
        f"  stream   {summary['samples']} {unit}s, {summary['words']} words, "
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
    ps = summary.get("predicted_full_scale_sine")
    if ps:
        band = summary.get("band_hz") or ps.get("band_hz")
        where = f"in the 0..{band:g} Hz band" if band else "in band"
        click.echo(
            f"  predict  a full-scale sine would reach SINAD {ps['sinad_db']:.1f} dB, "
            f"ENOB {ps['enob_bits']:.2f} bits ({where})"
        )
    for warning in summary.get("warnings") or []:
        click.echo(f"  warning  {warning}")
    ld = summary.get("loudness")
    if ld:
        click.echo(
            f"  loudness {ld['lufs_in']:.1f} -> {ld['lufs_out']:.1f} LUFS, true peak "
            f"{ld['true_peak_out_dbtp']:.1f} dBTP"
            + (" (held back by the true-peak ceiling)" if ld["limited_by_true_peak"] else "")
        )
    lv = summary.get("levels")
    if lv:
        shrink = (
            f", {lv['span_vs_ideal_db']:+.2f} dB against the ideal span"
            if "span_vs_ideal_db" in lv
            else ""
        )
        click.echo(
            f"  levels   {lv['origin']}: output reaches {lv['lowest_volts']:.4f} to "
            f"{lv['highest_volts']:.4f} V{shrink}; the stream's full scale is scaled to "
            "that reach"
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
def _stage_progress(label: str) -> Iterator[Callable[[str, float], None] | None]:
    """A progress bar over a stream's job on a terminal (stage and share); none when piped."""
    if not sys.stderr.isatty():
        yield None
        return
    with click.progressbar(
        length=1000, label=label, file=sys.stderr, item_show_func=lambda s: s
    ) as bar:

        def update(stage: str, share: float) -> None:
            target = min(1000, max(0, round(share * 1000)))
            bar.update(max(0, target - bar.pos), stage)

        yield update


@contextlib.contextmanager
def _count_progress(label: str) -> Iterator[Callable[[int, int], None] | None]:
    """A progress bar counting finished items (done, total) on a terminal; none when piped.

    The bar appears at the first report, once the total is known.
    """
    if not sys.stderr.isatty():
        yield None
        return
    bars: list[Any] = []

    def update(done: int, total: int) -> None:
        if not bars:
            bars.append(click.progressbar(length=total, label=label, file=sys.stderr))
            bars[0].__enter__()
        bars[0].update(max(0, done - bars[0].pos))

    try:
        yield update
    finally:
        if bars:
            bars[0].__exit__(None, None, None)


def _split_list(text: str, param: str, conv: Callable[[str], Any]) -> tuple[Any, ...]:
    try:
        return tuple(conv(item) for item in text.split(",") if item.strip())
    except ValueError:
        raise click.BadParameter(
            f"expected comma-separated numbers, got {text!r}", param_hint=param
        ) from None


def _pairs(text: str | None) -> tuple[tuple[float, float], ...] | None:
    if not text:
        return None
    out = []
    for item in text.split(","):
        try:
            f, _, db = item.partition(":")
            out.append((float(f), float(db or 0.0)))
        except ValueError:
            raise click.BadParameter(
                f"expected FREQ_HZ:LEVEL_DB pairs, got {item!r}", param_hint="--tones"
            ) from None
    return tuple(out)


def _code_list(text: str | None) -> tuple[int, ...] | None:
    if not text:
        return None
    from ladderpack.errors import OptionError

    top = (1 << 16) - 1  # the widest code, 16 bits; the stream's own width is checked later
    out: list[int] = []
    for item in text.split(","):
        try:
            lo, sep, hi = item.partition("-")
            first, last = int(lo), int(hi) if sep else int(lo)
        except ValueError:
            raise OptionError(
                f"expected codes like 0-15,32,64, got {item!r}", field="codes"
            ) from None
        # bounds first: a range is expanded only once it is known to be small
        if not (0 <= first <= top and 0 <= last <= top):
            raise OptionError(
                f"codes are 0..{top} at most (16 bits), got {item.strip()!r}", field="codes"
            )
        out.extend(range(first, last + 1))
        if len(out) > 1 << 20:
            raise OptionError("at most 1048576 codes in a staircase", field="codes")
    return tuple(out)


#: Options written as text on the command line and parsed into the model's tuples.
_TEXT_PARSERS: dict[str, Callable[[str | None], Any]] = {
    "tones": _pairs,
    "codes": _code_list,
    "freqs_hz": lambda t: None if t is None else _split_list(t, "--freqs-hz", float),
    "volts": lambda t: None if t is None else _split_list(t, "--volts", float),
    "dac_address": lambda t: None if t is None else _address(t),
}


def _address(text: str) -> int:
    """An I2C address in decimal or with a 0x prefix."""
    from ladderpack.errors import OptionError

    try:
        return int(text, 0)
    except ValueError:
        raise OptionError(
            f"expected an address such as 0x60, got {text!r}", field="dac_address"
        ) from None


def model_options(
    cls: type, *, exclude: tuple[str, ...] = (), only: tuple[str, ...] | None = None
) -> Callable[[Any], Any]:
    """Click options for every command-line field of an option class.

    Flag, type, default, choices and help all come from the :mod:`ladderpack.options`
    model.
    """
    from ladderpack.options import option_fields

    decorators = []
    for f, info, hint in option_fields(cls):
        if not info.cli or f.name in exclude or (only is not None and f.name not in only):
            continue
        flag = info.flag or "--" + f.name.replace("_", "-")
        text = info.help
        if info.unit and info.unit not in ("file",):
            text = f"{text.rstrip('.')} ({info.unit})."
        if info.lo is not None and info.hi is not None and not info.lo_open:
            text = f"{text[:-1]}; {info.lo:g}..{info.hi:g}."
        kw: dict[str, Any] = {"help": text, "show_default": True}
        if f.default is None or f.name in _TEXT_PARSERS:
            kw["show_default"] = False
            kw["help"] = f"{text}  [default: {info.default_text or 'none'}]"
            kw["default"] = None
        else:
            kw["default"] = f.default
        base = hint if isinstance(hint, type) else None
        args = typing_args(hint)
        if info.choices is not None:
            kw["type"] = click.Choice(info.choices)
        elif f.name in _TEXT_PARSERS:
            kw["type"] = str
        elif base is bool:
            kw.pop("type", None)
        elif int in args or base is int:
            kw["type"] = int
        elif float in args or base is float:
            kw["type"] = float
        elif info.metavar == "FILE":
            kw["type"] = click.Path(dir_okay=False)
        if info.metavar:
            kw["metavar"] = info.metavar
        decorators.append(click.option(flag, f.name, **kw))

    def apply(func: Callable[..., Any]) -> Callable[..., Any]:
        for deco in reversed(decorators):
            func = deco(func)
        return func

    return apply


def typing_args(hint: Any) -> tuple[Any, ...]:
    """The members of a union type hint (or the hint itself)."""
    import typing

    args = typing.get_args(hint)
    return args if args else (hint,)


def model_values(cls: type, values: dict[str, Any]) -> dict[str, Any]:
    """Take the fields of `cls` out of a command's keyword arguments (parsing text lists)."""
    from ladderpack.options import option_fields

    out = {}
    for f, info, _hint in option_fields(cls):
        if info.cli and f.name in values:
            v = values.pop(f.name)
            out[f.name] = _TEXT_PARSERS[f.name](v) if f.name in _TEXT_PARSERS else v
            if out[f.name] is None and f.default is not None:
                del out[f.name]
    return out


def _model_options_lazy(cls_name: str, **kw: Any) -> Callable[[Any], Any]:
    """:func:`model_options` for the option class of that name in ladderpack.options."""
    from ladderpack import options

    return model_options(getattr(options, cls_name), **kw)


def _warn_out_dir_named_as_output(out_dir: str, output: str) -> None:
    """Warn (stderr) when ``-o i2s`` looks meant as ``--output i2s``: -o is the folder."""
    folder = os.path.basename(os.path.normpath(out_dir))
    if folder in outputs.REGISTRY_BY_NAME and folder != output:
        click.echo(
            f"ladderpack: warning: the output folder is named {folder!r} but the stream is "
            f"for output {output}: -o names the folder; --output {folder} chooses the output",
            err=True,
        )


def _stream_options(*, clip: bool) -> Callable[[Any], Any]:
    """Options of every command that makes a stream bundle (from StreamOptions).

    Without `clip`, none of the options only a clip takes (a tone is made at its own
    level).
    """
    from ladderpack.options import StreamOptions

    def apply(func: Callable[..., Any]) -> Callable[..., Any]:
        func = click.option(
            "--json", "as_json", is_flag=True, help="Print the summary as JSON instead of text."
        )(func)
        exclude = () if clip else StreamOptions.CLIP_ONLY
        return model_options(StreamOptions, exclude=exclude)(func)

    return apply


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="ladderpack")
@click.option(
    "--debug", is_flag=True, help="Show the full traceback of an internal error (exit status 1)."
)
def cli(debug: bool) -> None:
    """Turn sound clips into code streams for GPIO resistor-ladder DACs.

    The ladder is driven by a PIO state machine; the outputs are firmware-ready C,
    MicroPython and binary files.

    Safety: never drive a speaker or headphones from the ladder directly, keep
    listening levels low, and leave mains-powered gear to qualified people.
    """
    _warnings_as_lines()
    ctx = click.get_current_context()
    sub = ctx.invoked_subcommand
    command = cli.commands.get(sub) if sub else None
    if isinstance(command, click.Group):  # plot, table: the subcommand's own options
        rest = _argv
        after = rest[rest.index(sub) + 1 :] if sub in rest else []
        command = command.commands.get(after[0]) if after else None
    global _invoked
    _invoked = command


#: The command being run, so that an error names its options as the user typed them.
_invoked: click.Command | None = None
#: The arguments main() was given.
_argv: list[str] = []


def _as_typed(exc: LadderpackError) -> str:
    """The error's text with option names as the command line spells them.

    The library names fields as a manifest does (``loudness_lufs``); on the command
    line the user typed ``--loudness-lufs``. A manifest's own errors keep its spelling.
    """
    import re

    command = _invoked
    if command is None or command.name == "build":
        return str(exc)
    flags = {
        p.name: max(p.opts, key=len)
        for p in command.params
        if isinstance(p, click.Option) and p.name and max(p.opts, key=len).startswith("--")
    }
    if not flags:
        return str(exc)
    # in the message only the snake_case names (one-word names are also plain words)
    named = sorted((n for n in flags if "_" in n), key=len)[::-1]
    if not named:
        return str(
            LadderpackError(exc.message, file=exc.file, field=flags.get(exc.field or "", exc.field))
        )
    pattern = re.compile(r"\b(" + "|".join(map(re.escape, named)) + r")\b")
    field = flags.get(exc.field or "", exc.field)
    message = pattern.sub(lambda m: flags[m.group(1)], exc.message)
    return str(LadderpackError(message, file=exc.file, field=field))


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


@cli.command()
@click.argument("rate_hz", type=float)
@_model_options_lazy("StreamOptions", only=("target", "sys_clock_hz", "rate_tolerance_ppm"))
@click.option(
    "--output",
    type=click.Choice(outputs.names()),
    default="ladder",
    show_default=True,
    help="Output system to plan for: "
    + "; ".join(f"{e.name}, {e.summary}" for e in outputs.REGISTRY)
    + ".",
)
@click.option(
    "--bus-hz",
    type=click.Choice(["100000", "400000", "1000000"]),
    default=None,
    help="I2C DAC: bus clock, Hz  [default: 400000]",
)
@click.option(
    "--dac-command",
    type=click.Choice(["fast", "register"]),
    default=None,
    help="I2C DAC: fast write (2 data bytes) or write DAC register (3)  [default: fast]",
)
@click.option(
    "--slot-bits",
    type=click.Choice(["16", "32"]),
    default=None,
    help="I2S: bits per channel slot  [default: 32]",
)
@click.option(
    "--min-carrier-hz",
    type=float,
    default=None,
    help="PWM: lowest carrier frequency, Hz  [default: 4 x the rate]",
)
@click.option(
    "--find-sys-clock",
    is_flag=True,
    help="Search the system clocks the PLL can make for those that give RATE_HZ exactly "
    "with an integer divider for --output, nearest the current clock first.",
)
@click.option(
    "--min-sys-clock-hz",
    type=int,
    default=48_000_000,
    show_default=True,
    help="--find-sys-clock: lowest system clock to consider (Hz).",
)
@click.option(
    "--max-sys-clock-hz",
    type=int,
    default=None,
    help="--find-sys-clock: highest system clock to consider (Hz)  [default: the chip's "
    "rated clock, 133000000 on rp2040, 150000000 on rp2350]",
)
@click.option(
    "--count",
    type=click.IntRange(1, 100),
    default=8,
    show_default=True,
    help="--find-sys-clock: clocks to list.",
)
@click.option("--json", "as_json", is_flag=True, help="Print the plan as JSON.")
def clock(
    rate_hz: float,
    output: str,
    bus_hz: str | None,
    dac_command: str | None,
    min_carrier_hz: float | None,
    slot_bits: str | None,
    find_sys_clock: bool,
    min_sys_clock_hz: int,
    max_sys_clock_hz: int | None,
    count: int,
    as_json: bool,
    **values: Any,
) -> None:
    """Show the clock plan (divider, cycles per sample, achieved rate) for RATE_HZ."""
    from ladderpack.errors import OptionError
    from ladderpack.options import StreamOptions
    from ladderpack.outputs import entry, get_output, takers

    opts = StreamOptions(rate_hz=rate_hz, **model_values(StreamOptions, values))
    settings = {
        "min_carrier_hz": min_carrier_hz,
        "slot_bits": int(slot_bits) if slot_bits is not None else None,
        "bus_hz": int(bus_hz) if bus_hz is not None else None,
        "dac_command": dac_command,
    }
    takes = entry(output).takes
    for name, value in settings.items():
        group = _CLOCK_SETTING_GROUPS[name]
        if value is not None and group not in takes:
            raise OptionError(
                f"applies only with --output {' or '.join(takers(group))}",
                field=name.replace("_", "-"),
            )
    out = get_output(output)
    if find_sys_clock:
        _print_sys_clocks(
            rate_hz, opts, output, settings, min_sys_clock_hz, max_sys_clock_hz, count, as_json
        )
        return
    report = out.clock_report(rate_hz, opts, settings)
    if as_json:
        click.echo(json_text(report.data))
        return
    for line in report.lines:
        click.echo(line)


#: The option group of each of the clock command's output settings.
_CLOCK_SETTING_GROUPS = {
    "min_carrier_hz": "pwm",
    "slot_bits": "i2s",
    "bus_hz": "i2c",
    "dac_command": "i2c",
}


def _print_sys_clocks(
    rate_hz: float,
    opts: Any,
    output: str,
    settings: Mapping[str, Any],
    min_hz: int,
    max_hz: int | None,
    count: int,
    as_json: bool,
) -> None:
    from ladderpack.clock import RATED_SYS_CLOCK_HZ, find_sys_clocks
    from ladderpack.errors import OptionError
    from ladderpack.outputs import get_output

    chip = "rp2040" if opts.target == "rp2040" else "rp2350"
    rated = RATED_SYS_CLOCK_HZ[chip]
    top = rated if max_hz is None else max_hz
    if not 0 < min_hz <= top:
        raise OptionError(
            f"must be <= --max-sys-clock-hz ({top}) and > 0, got {min_hz}",
            field="min-sys-clock-hz",
        )
    now = int(opts.sys_clock_hz or 0)
    out = get_output(output)
    found = find_sys_clocks(
        rate_hz,
        min_hz=min_hz,
        max_hz=top,
        near_hz=now,
        planner=out.clock_planner(rate_hz, settings),
        limit=count,
    )
    rows, texts = [], []
    for c in found:
        p = c.plan
        row: dict[str, Any] = {
            "sys_clock_hz": c.sys_clock_hz,
            "pll": c.pll.to_dict(),
            "error_ppm": round(p.error_ppm, 6),
            "exact": p.achieved_rate_hz == p.requested_rate_hz,
            "above_rated": c.sys_clock_hz > rated,
        }
        own, text = out.clock_row(p)
        row.update(own)
        rows.append(row)
        texts.append(text)
    if as_json:
        click.echo(json_text({"rate_hz": rate_hz, "output": output, "clocks": rows}))
        return
    exact = bool(rows) and rows[0]["exact"]
    click.echo(
        f"{output} at {rate_hz:g} Hz: system clocks {min_hz}..{top} Hz the PLL makes "
        f"(12 MHz crystal, REFDIV 1) with an integer divider, "
        + (
            "exact, nearest the current clock first"
            if exact
            else "none exact: smallest error first"
        )
    )
    for r, what in zip(rows, texts, strict=True):
        pll = r["pll"]
        flag = "  ABOVE THE RATED CLOCK" if r["above_rated"] else ""
        vco = f"VCO {pll['vco_hz'] / 1e6:g} MHz (FBDIV {pll['fbdiv']})"
        click.echo(
            f"  {r['sys_clock_hz']:>11d} Hz  {vco} / {pll['postdiv1']} / {pll['postdiv2']}  "
            f"{what}  {r['error_ppm']:+.3f} ppm{flag}"
        )
    if not rows:
        click.echo("  none in this range")
    click.echo(
        "  set it with set_sys_clock_pll(VCO, POSTDIV1, POSTDIV2) (C SDK) or "
        "machine.freq(HZ) (MicroPython), then make the bundle with --sys-clock-hz HZ; the "
        "peripheral clock, UART and SPI rates follow clk_sys unless re-derived. Running "
        "above the rated clock is at your own risk."
    )


@cli.command()
@click.option("--volts", type=float, required=True, help="Wanted output voltage (V).")
@click.option(
    "--levels",
    "levels_file",
    default=None,
    help="LevelSet JSON of the real ladder (from 'levels' or 'ladder --levels-out')  "
    "[default: an ideal ladder]",
)
@click.option(
    "--bits", type=int, default=8, show_default=True, help="Ideal ladder: width N (bits)."
)
@click.option(
    "--full-scale-volts",
    type=float,
    default=3.3,
    show_default=True,
    help="Ideal ladder: the reference (V); code k gives k / 2^N of it.",
)
@click.option("--json", "as_json", is_flag=True, help="Print the answer as JSON.")
def code(
    volts: float, levels_file: str | None, bits: int, full_scale_volts: float, as_json: bool
) -> None:
    """Which code puts VOLTS on the ladder's output, and what it really gives."""
    import math

    from ladderpack.errors import OptionError
    from ladderpack.levels import code_for_volts, ideal_levels, load_levels

    if levels_file is not None:
        levels = load_levels(levels_file)
    else:
        if not (full_scale_volts > 0 and math.isfinite(full_scale_volts)):
            raise OptionError(
                f"must be a positive voltage, got {full_scale_volts!r}", field="full-scale-volts"
            )
        levels = ideal_levels(bits, full_scale_volts=full_scale_volts)
    r = code_for_volts(levels, volts)
    if as_json:
        click.echo(json_text(r))
        return
    click.echo(f"code     {r['code']} of {(1 << r['bits']) - 1} ({r['origin']} levels)")
    click.echo(f"gives    {r['volts']:.6f} V for {r['wanted_volts']:.6f} V wanted")
    click.echo(f"error    {r['error_volts'] * 1e3:+.3f} mV ({r['error_lsb']:+.3f} LSB)")
    if not r["in_range"]:
        click.echo("note     outside the ladder's reach: the nearest end was taken")


def _write_one(path: str, text: str) -> str:
    """Write one file atomically (temporary name in the same folder, then rename)."""
    from ladderpack.emit import write_files

    folder = os.path.dirname(path) or "."
    return write_files({os.path.basename(path): text.encode()}, folder)[0]


def _lsb(v: float) -> str:
    return f"{v:.3f} LSB"


@cli.command()
@click.option("--bits", type=int, default=8, show_default=True, help="Ladder width N, 1..16.")
@click.option(
    "--r-ohms",
    type=float,
    default=10_000.0,
    show_default=True,
    help="Unit resistance R, ohms (legs and termination 2R).",
)
@click.option(
    "--tolerance-pct",
    type=float,
    default=1.0,
    show_default=True,
    help="Resistor tolerance, percent.",
)
@click.option(
    "--distribution",
    type=click.Choice(["uniform", "normal"]),
    default="uniform",
    show_default=True,
    help="Monte Carlo spread (normal: tolerance = 3 sigma).",
)
@click.option(
    "--drive-ma",
    type=click.Choice(["2", "4", "8", "12"]),
    default="4",
    show_default=True,
    help="GPIO drive strength, mA: default source resistances and current limit.",
)
@click.option(
    "--source-high-ohms",
    type=float,
    default=None,
    help="Pin source resistance driving high, ohms  [default: datasheet bound for "
    "the drive strength]",
)
@click.option(
    "--source-low-ohms",
    type=float,
    default=None,
    help="Pin source resistance driving low, ohms  [default: datasheet bound for "
    "the drive strength]",
)
@click.option("--supply-volts", type=float, default=3.3, show_default=True, help="IOVDD, volts.")
@click.option(
    "--load-ohms",
    type=float,
    default=None,
    help="Resistive load on the output, ohms  [default: none]",
)
@click.option(
    "--load-pf",
    type=float,
    default=20.0,
    show_default=True,
    help="Capacitance on the output, pF, for the settling check.",
)
@click.option(
    "--rate-hz",
    type=float,
    default=22050.0,
    show_default=True,
    help="Sample rate, Hz: a step must settle within one period.",
)
@click.option(
    "--band-hz",
    type=float,
    default=20000.0,
    show_default=True,
    help="Audio band for the thermal-noise figure, Hz.",
)
@click.option(
    "--temperature-k",
    type=float,
    default=300.0,
    show_default=True,
    help="Temperature for the thermal noise, kelvin.",
)
@click.option("--trials", type=int, default=200, show_default=True, help="Monte Carlo trials.")
@click.option("--seed", type=int, default=0, show_default=True, help="Monte Carlo seed.")
@click.option(
    "--split-legs/--no-split-legs",
    default=False,
    show_default=True,
    help="Build each 2R from two R in series.",
)
@click.option(
    "--series",
    type=click.Choice(["E24", "E96", "E192"]),
    default="E96",
    show_default=True,
    help="Preferred-value series for the recommended R range.",
)
@click.option(
    "--inl-share-lsb",
    type=float,
    default=0.5,
    show_default=True,
    help="Largest INL, LSB, that source resistance may cause in a recommended R.",
)
@click.option(
    "--spice",
    "spice_path",
    type=click.Path(dir_okay=False),
    default=None,
    help="Write a SPICE netlist of the nominal ladder to this file.",
)
@click.option(
    "--spice-code", type=int, default=None, help="Code the netlist drives  [default: mid-scale]"
)
@click.option(
    "--levels-out",
    type=click.Path(dir_okay=False),
    default=None,
    help="Write the nominal ladder's modelled levels as a LevelSet JSON file.",
)
@click.option(
    "--mc-levels-out",
    type=click.Path(dir_okay=False),
    default=None,
    help="Write the levels of the Monte Carlo trial with the largest INL (or --mc-trial) "
    "as a LevelSet JSON file, for stream --levels and preview --levels.",
)
@click.option(
    "--mc-trial",
    type=int,
    default=None,
    help="Monte Carlo trial (0-based) for --mc-levels-out  [default: the worst]",
)
@click.option("--json", "as_json", is_flag=True, help="Print the report as JSON.")
def ladder(
    bits: int,
    r_ohms: float,
    tolerance_pct: float,
    distribution: str,
    drive_ma: str,
    source_high_ohms: float | None,
    source_low_ohms: float | None,
    supply_volts: float,
    load_ohms: float | None,
    load_pf: float,
    rate_hz: float,
    band_hz: float,
    temperature_k: float,
    trials: int,
    seed: int,
    split_legs: bool,
    series: str,
    inl_share_lsb: float,
    spice_path: str | None,
    spice_code: int | None,
    levels_out: str | None,
    mc_levels_out: str | None,
    mc_trial: int | None,
    as_json: bool,
) -> None:
    """Model an R-2R ladder and check the design.

    Reports INL/DNL, tolerance spread, pin current, thermal noise, settling and a
    recommended R range.
    """
    from ladderpack.ladder import (
        DRIVE_SOURCE_OHMS,
        design_check,
        design_steps,
        ideal_ladder,
        spice_netlist,
    )
    from ladderpack.levels import LevelSet

    bar_cm: contextlib.AbstractContextManager[Any] = (
        click.progressbar(length=design_steps(trials, series), label="ladder", file=sys.stderr)
        if sys.stderr.isatty()
        else contextlib.nullcontext()
    )
    with bar_cm as bar:
        report = design_check(
            bits,
            r_ohms,
            tolerance=tolerance_pct / 100,
            distribution=distribution,
            source_high_ohms=source_high_ohms,
            source_low_ohms=source_low_ohms,
            drive_ma=int(drive_ma),
            supply_volts=supply_volts,
            load_ohms=load_ohms,
            load_farads=load_pf * 1e-12,
            rate_hz=rate_hz,
            band_hz=band_hz,
            temperature_k=temperature_k,
            trials=trials,
            seed=seed,
            split_legs=split_legs,
            series=series,
            inl_share_lsb=inl_share_lsb,
            progress=None if bar is None else bar.update,
        )
    bound = DRIVE_SOURCE_OHMS[int(drive_ma)]
    model = ideal_ladder(
        bits,
        r_ohms,
        supply_volts=supply_volts,
        source_high_ohms=report["source_high_ohms"],  # type: ignore[arg-type]
        source_low_ohms=report["source_low_ohms"],  # type: ignore[arg-type]
        load_ohms=load_ohms,
        split_legs=split_legs,
    )
    written = []
    if spice_path:
        code = (1 << (bits - 1)) if spice_code is None else spice_code
        written.append(_write_one(spice_path, spice_netlist(model, code)))
    if levels_out:
        ideal_span = supply_volts * ((1 << bits) - 1) / (1 << bits)
        lev = LevelSet(
            bits,
            model.levels(),
            "model",
            {
                "r_ohms": r_ohms,
                "supply_volts": supply_volts,
                "source_high_ohms": report["source_high_ohms"],
                "source_low_ohms": report["source_low_ohms"],
                "load_ohms": load_ohms,
                "ideal_span_volts": ideal_span,
            },
        )
        written.append(_write_one(levels_out, lev.to_json()))
    if mc_levels_out:
        from ladderpack.errors import OptionError
        from ladderpack.ladder import monte_carlo_trial

        k = report["monte_carlo"]["worst_trial"] if mc_trial is None else mc_trial
        if not 0 <= k < trials:
            raise OptionError(f"must be 0..{trials - 1}, got {k}", field="mc-trial")
        lad = monte_carlo_trial(
            model, seed=seed, tolerance=tolerance_pct / 100, distribution=distribution, trial=k
        )
        lev = LevelSet(
            bits,
            lad.levels(),
            "model",
            {
                "r_ohms": r_ohms,
                "tolerance": tolerance_pct / 100,
                "distribution": distribution,
                "seed": seed,
                "monte_carlo_trial": k,
                "supply_volts": supply_volts,
                "ideal_span_volts": supply_volts * ((1 << bits) - 1) / (1 << bits),
            },
        )
        written.append(_write_one(mc_levels_out, lev.to_json()))
    if as_json:
        click.echo(json_text({**report, "files": written}))
        return
    nom, wc, mc = report["nominal"], report["worst_case"], report["monte_carlo"]
    click.echo(
        f"{bits}-bit R-2R, R = {r_ohms:g} ohm, 2R legs{' of two R' if split_legs else ''}"
        f", {supply_volts:g} V, LSB {1e3 * report['lsb_volts']:.4f} mV"
    )
    click.echo(
        f"  sources  high {report['source_high_ohms']:.1f} ohm, low "
        f"{report['source_low_ohms']:.1f} ohm (datasheet bounds at {drive_ma} mA: "
        f"{bound[0]:.1f} / {bound[1]:.1f})"
    )
    click.echo(
        f"  nominal  INL {_lsb(nom['max_abs_inl_endpoint_lsb'])} endpoint, "
        f"{_lsb(nom['max_abs_inl_best_fit_lsb'])} best fit; DNL {nom['min_dnl_lsb']:+.3f}"
        f"; {'monotonic' if nom['monotonic'] else 'NOT monotonic: the output falls at some steps'}"
    )
    click.echo(
        f"  worst    over +/-{tolerance_pct:g} %: INL {_lsb(wc['max_abs_inl_endpoint_lsb'])}"
        f", DNL down to {wc['min_dnl_lsb']:+.3f}; "
        f"{'monotonic' if wc['monotonic'] else 'may be non-monotonic'}"
    )
    mono_tol = wc["monotonic_tolerance"]
    click.echo(
        "  needs    "
        + (
            f"resistors within +/-{100 * mono_tol:.3g} % to stay monotonic in the worst case"
            if mono_tol > 0
            else "lower source resistance (stronger drive or a buffer): the nominal ladder "
            "is not monotonic, whatever the tolerance"
        )
    )
    sine = report["sine_through_levels"]
    click.echo(
        f"  sine     {sine['level_dbfs']:g} dBFS through the nominal levels: SINAD "
        f"{sine['sinad_db']:.1f} dB, THD {sine['thd_db']:.1f} dB (an ideal {bits}-bit "
        f"ladder: {sine['ideal_sinad_db']:.1f} dB, {sine['ideal_thd_db']:.1f} dB)"
    )
    inl, dnl = mc["max_abs_inl_best_fit_lsb"], mc["max_abs_dnl_lsb"]
    click.echo(
        f"  spread   {mc['trials']} trials ({distribution}): INL p50/p90/p99 "
        f"{inl['p50']:.2f}/{inl['p90']:.2f}/{inl['p99']:.2f}, DNL "
        f"{dnl['p50']:.2f}/{dnl['p90']:.2f}/{dnl['p99']:.2f} LSB; "
        f"{100 * mc['monotonic_share']:.0f} % monotonic"
    )
    click.echo(
        f"  current  {1e3 * report['pin_current_max_a']:.3f} mA per pin at most "
        f"({'within' if report['pin_current_ok'] else 'OVER'} the {drive_ma} mA setting),"
        f" {1e3 * report['supply_current_max_a']:.3f} mA from IOVDD"
    )
    click.echo(
        f"  noise    {1e6 * report['johnson_noise_volts']:.3f} uV rms over {band_hz:g} Hz"
        f" = {report['johnson_noise_lsb']:.2e} LSB"
    )
    click.echo(
        f"  settling tau {1e9 * report['settling_tau_s']:.1f} ns, to 1/2 LSB "
        f"{1e6 * report['settling_half_lsb_s']:.3f} us of a "
        f"{1e6 * report['sample_period_s']:.2f} us period"
        f"{'' if report['settles_in_one_sample'] else ' (TOO SLOW)'}"
    )
    rec = report["recommended_r_ohms"]
    click.echo(
        f"  R range  {series}: {rec[0]:g} to {rec[1]:g} ohm"
        + ("" if report["r_in_recommended_range"] else f"; the chosen {r_ohms:g} ohm is outside it")
        if rec
        else f"  R range  no {series} value meets every check"
    )
    for path in written:
        click.echo(f"  wrote    {path}")


@cli.command()
@click.argument("csv_path", metavar="CSV", type=click.Path(dir_okay=False))
@click.option("--bits", type=int, required=True, help="Ladder width N, 1..16.")
@click.option(
    "-o",
    "--out",
    "out_path",
    default="levels.json",
    show_default=True,
    help="LevelSet JSON file to write.",
)
@click.option(
    "--fill",
    type=click.Choice(["refuse", "model"]),
    default="refuse",
    show_default=True,
    help="Codes without a reading: refuse the file, or fill them from a fitted model.",
)
@click.option(
    "--superposition/--no-superposition",
    default=False,
    show_default=True,
    help="The CSV holds N+1 readings (all low, then each bit alone).",
)
@click.option("--json", "as_json", is_flag=True, help="Print the report as JSON.")
def levels(
    csv_path: str, bits: int, out_path: str, fill: str, superposition: bool, as_json: bool
) -> None:
    """Import a measured sweep (CSV: code and volts) into a LevelSet, with an INL/DNL report."""
    from ladderpack.levels import linearity, read_sweep_csv

    lev = read_sweep_csv(csv_path, bits, fill=fill, superposition=superposition)
    lin = linearity(lev.volts)
    written = _write_one(out_path, lev.to_json())
    import numpy as np

    report = {k: v for k, v in lin.items() if not isinstance(v, np.ndarray)}
    report.update(notes=lev.notes, origin=lev.origin, file=written)
    if as_json:
        click.echo(json_text(report))
        return
    click.echo(
        f"{lev.origin} levels, {bits} bits, from {lev.notes.get('readings')} readings of "
        f"{lev.notes.get('codes_measured')} codes"
    )
    click.echo(f"  LSB      {1e3 * lin['lsb_volts']:.4f} mV (endpoint)")
    click.echo(
        f"  INL      {_lsb(lin['max_abs_inl_endpoint'])} endpoint, "
        f"{_lsb(lin['max_abs_inl_best_fit'])} best fit"
    )
    click.echo(
        f"  DNL      {lin['min_dnl']:+.3f} to {lin['max_dnl']:+.3f} LSB "
        f"(largest |DNL| {_lsb(lin['max_abs_dnl'])}); "
        f"{'monotonic' if lin['monotonic'] else 'NOT monotonic'}"
    )
    if "superposition_residual_lsb" in lev.notes:
        click.echo(
            f"  superposition from the N+1 readings predicts every code within "
            f"{_lsb(lev.notes['superposition_residual_lsb'])}"
        )
    if "codes_filled" in lev.notes:
        click.echo(f"  filled   {lev.notes['codes_filled']} code(s) from the fitted model")
    click.echo(f"  wrote    {written}")


@cli.group()
def table() -> None:
    """Lookup tables for firmware."""


@table.command("correction")
@click.argument("levels_path", metavar="LEVELS", type=click.Path(dir_okay=False))
@_model_options_lazy("CorrectionTableSpec")
@click.option(
    "-o",
    "--out-dir",
    default="ladderpack_out",
    show_default=True,
    help="Folder the table files go to.",
)
@click.option(
    "--name", default="correction", show_default=True, help="Table name for files and symbols."
)
@click.option("--json", "as_json", is_flag=True, help="Print a summary as JSON.")
def table_correction(
    levels_path: str, out_dir: str, name: str, as_json: bool, **values: Any
) -> None:
    """Map each ideal level to the code whose measured level (LEVELS) is nearest.

    Written as C and MicroPython arrays, for samples the firmware computes at run time.
    """
    from ladderpack.emit import write_files
    from ladderpack.options import CorrectionTableSpec
    from ladderpack.tables import correction_table_files

    spec = CorrectionTableSpec(levels=levels_path, **model_values(CorrectionTableSpec, values))
    res = correction_table_files(name, spec)
    written = write_files(res.files, out_dir)
    summary = {
        "name": res.name,
        "in_bits": res.in_bits,
        "out_bits": res.bits,
        "entries": res.entries,
        "distinct_codes": res.distinct_codes,
        "files": written,
    }
    if as_json:
        click.echo(json_text(summary))
        return
    click.echo(
        f"{res.name}: {res.in_bits}-bit ideal level -> {res.bits}-bit code, {res.entries} "
        f"entries, {res.distinct_codes} distinct codes used"
    )
    for path in written:
        click.echo(f"  wrote    {path}")


@table.command("i2c-dac")
@_model_options_lazy("I2cDacTableSpec")
@click.option(
    "-o",
    "--out-dir",
    default="ladderpack_out",
    show_default=True,
    help="Folder the table files go to.",
)
@click.option(
    "--name", default="dac_levels", show_default=True, help="Table name for files and symbols."
)
@click.option("--json", "as_json", is_flag=True, help="Print a summary as JSON.")
def table_i2c_dac(out_dir: str, name: str, as_json: bool, **values: Any) -> None:
    """The bytes of a 12-bit I2C DAC's updates for a list of voltages or a waveform.

    Written as C and MicroPython arrays for firmware that writes them itself.
    """
    import numpy as np

    from ladderpack.emit import write_files
    from ladderpack.options import I2cDacTableSpec
    from ladderpack.outputs.i2c_dac import (
        BUS_SPEEDS_HZ,
        I2cDacFormat,
        codes_for_volts,
        max_update_rate_hz,
    )
    from ladderpack.tables import i2c_dac_table_files

    spec = I2cDacTableSpec(**model_values(I2cDacTableSpec, values))
    res = i2c_dac_table_files(name, spec)
    written = write_files(res.files, out_dir)
    fmt = I2cDacFormat(spec.dac_address, spec.dac_command)
    rates = {b: float(max_update_rate_hz(b, fmt)) for b in BUS_SPEEDS_HZ}
    summary = {
        "name": res.name,
        "updates": res.entries,
        "distinct_codes": res.distinct_codes,
        "address": spec.dac_address,
        "command": spec.dac_command,
        "bytes_per_update": fmt.bytes_per_update,
        "max_update_rate_hz": rates,
        "files": written,
    }
    entries: list[dict[str, Any]] = []
    if spec.volts is not None:
        codes = codes_for_volts(np.array(spec.volts), spec.vref_volts)
        entries = [
            {
                "volts": v,
                "code": int(c),
                "actual_volts": spec.vref_volts * int(c) / 4096,
                "error_volts": spec.vref_volts * int(c) / 4096 - v,
            }
            for v, c in zip(spec.volts, codes, strict=True)
        ]
        summary["entries"] = entries
    if as_json:
        click.echo(json_text(summary))
        return
    click.echo(
        f"{res.name}: {res.entries} updates of a 12-bit I2C DAC at 0x{spec.dac_address:02X} "
        f"({spec.dac_command} write, {fmt.bytes_per_update} bytes on the bus each)"
    )
    for e in entries:
        click.echo(
            f"  {e['volts']:.4f} V -> code {e['code']:4d} = {e['actual_volts']:.4f} V "
            f"({1000 * e['error_volts']:+.2f} mV)"
        )
    click.echo(
        "  at most " + ", ".join(f"{r:.0f} updates/s at {b // 1000} kHz" for b, r in rates.items())
    )
    click.echo("  bus: pull-ups on SDA and SCL to the DAC's supply; 3.3 V logic on this board")
    for path in written:
        click.echo(f"  wrote    {path}")


@table.command("wave")
@_model_options_lazy("WaveTableSpec")
@click.option(
    "-o",
    "--out-dir",
    default="ladderpack_out",
    show_default=True,
    help="Folder the table files go to.",
)
@click.option(
    "--name", default="wavetable", show_default=True, help="Table name for files and symbols."
)
@click.option("--json", "as_json", is_flag=True, help="Print a summary as JSON.")
def table_wave(out_dir: str, name: str, as_json: bool, **values: Any) -> None:
    """Make a 2^k-entry wavetable in ladder codes plus phase increments.

    The 32-bit phase-accumulator increments and the table are written as C and
    MicroPython arrays, for firmware that synthesises at run time.
    """
    from ladderpack.emit import write_files
    from ladderpack.options import WaveTableSpec
    from ladderpack.tables import wave_table_files

    spec = WaveTableSpec(**model_values(WaveTableSpec, values))
    res = wave_table_files(name, spec)
    written = write_files(res.files, out_dir)
    summary = {
        "name": res.name,
        "entries": res.entries,
        "bits": res.bits,
        "rate_hz": res.rate_hz,
        "resolution_hz": res.resolution_hz,
        "worst_truncation_spur_dbc": res.spur_dbc,
        "increments": [
            {"requested_hz": f, "increment": i, "actual_hz": a} for f, i, a in res.increments
        ],
        "files": written,
    }
    if as_json:
        click.echo(json_text(summary))
        return
    click.echo(
        f"{res.name}: {spec.kind}, {res.entries} entries of {res.bits}-bit codes at "
        f"{res.rate_hz:.6f} Hz; resolution {res.resolution_hz:.3e} Hz, worst phase-truncation "
        f"spur {res.spur_dbc:.1f} dBc"
    )
    for f, i, a in res.increments:
        click.echo(f"  {f:g} Hz -> increment {i} ({a:.6f} Hz)")
    for path in written:
        click.echo(f"  wrote    {path}")


@cli.command()
@click.option("--bits", type=int, default=8, show_default=True, help="Ladder width N, 1..16.")
@click.option(
    "--out-base", type=int, default=0, show_default=True, help="First GPIO of the ladder."
)
@click.option(
    "--pin-order",
    type=click.Choice(["msb-high", "msb-low"]),
    default="msb-high",
    show_default=True,
    help="Which GPIO carries the ladder's most significant bit.",
)
@click.option(
    "--invert/--no-invert",
    default=False,
    show_default=True,
    help="An inverting buffer sits between pins and ladder.",
)
@click.option(
    "--mode",
    type=click.Choice(["full", "n1"]),
    default="full",
    show_default=True,
    help="full: every code; n1: code 0 and each bit alone (N+1 readings).",
)
@click.option(
    "--read",
    type=click.Choice(["adc", "meter"]),
    default="adc",
    show_default=True,
    help="adc: on-chip ADC; meter: type each multimeter reading.",
)
@click.option(
    "--adc-gpio",
    type=click.Choice(["26", "27", "28"]),
    default="26",
    show_default=True,
    help="ADC input pin for --read adc.",
)
@click.option(
    "--samples", type=int, default=16, show_default=True, help="ADC readings averaged per code."
)
@click.option(
    "--settle-ms", type=int, default=5, show_default=True, help="Wait after setting each code, ms."
)
@click.option(
    "--adc-vref-volts",
    type=float,
    default=3.3,
    show_default=True,
    help="ADC reference voltage, volts (measure it).",
)
@click.option(
    "--csv-name",
    default="sweep.csv",
    show_default=True,
    help="CSV file the script writes on the board.",
)
@click.option(
    "-o",
    "--out",
    "out_path",
    default="ladder_sweep.py",
    show_default=True,
    help="Script file to write.",
)
def sweep(
    bits: int,
    out_base: int,
    pin_order: str,
    invert: bool,
    mode: str,
    read: str,
    adc_gpio: str,
    samples: int,
    settle_ms: int,
    adc_vref_volts: float,
    csv_name: str,
    out_path: str,
) -> None:
    """Write a MicroPython calibration script for the ladder.

    It steps the codes and records each level as CSV for 'ladderpack levels'.
    """
    from ladderpack.emit import sweep as emit_sweep
    from ladderpack.errors import OptionError
    from ladderpack.pio import check_pins
    from ladderpack.quantize import check_bits

    check_bits(bits)
    check_pins(out_base, bits)
    if samples < 1:
        raise OptionError(f"must be at least 1, got {samples}", field="samples")
    if settle_ms < 0:
        raise OptionError(f"must be >= 0 ms, got {settle_ms}", field="settle_ms")
    text = emit_sweep.render(
        bits=bits,
        out_base=out_base,
        msb_high=(pin_order == "msb-high"),
        invert=invert,
        mode=mode,
        read=read,
        adc_gpio=int(adc_gpio),
        samples=samples,
        settle_ms=settle_ms,
        adc_vref=adc_vref_volts,
        csv_name=csv_name,
    )
    click.echo(
        f"wrote {_write_one(out_path, text)}; run it on the board, then "
        f"'ladderpack levels {csv_name} --bits {bits}"
        f"{' --superposition' if mode == 'n1' else ''}'"
    )


@cli.command()
@click.argument("manifest", default="ladderpack.toml", type=click.Path(dir_okay=False))
@click.option(
    "--jobs", type=int, default=1, show_default=True, help="Assets built in parallel (processes)."
)
@click.option(
    "--check",
    is_flag=True,
    help="Build nothing; exit 1 naming every asset whose outputs are missing, "
    "stale or edited by hand (for CI).",
)
@click.option(
    "--depfile",
    type=click.Path(dir_okay=False),
    default=None,
    help="Write a Make-format dependency file naming every input of every output.",
)
@click.option(
    "--only",
    multiple=True,
    help="Build just this asset (repeatable); the index and depfile cover all.",
)
@click.option(
    "--out-dir",
    type=click.Path(file_okay=False),
    default=None,
    help="Output folder, anywhere  [default: the manifest's project.out_dir, which must "
    "lie inside the manifest's folder]",
)
def build(
    manifest: str,
    jobs: int,
    check: bool,
    depfile: str | None,
    only: tuple[str, ...],
    out_dir: str | None,
) -> None:
    """Build every asset of MANIFEST (default ladderpack.toml).

    Assets that are up to date are skipped; an index of all of them is written for
    the firmware.
    """
    from ladderpack.build import build as run_build
    from ladderpack.build import load_manifest
    from ladderpack.errors import OptionError

    if jobs < 1:
        raise OptionError(f"must be at least 1, got {jobs}", field="jobs")
    with _count_progress("building") as progress:
        result = run_build(
            load_manifest(manifest, out_dir=out_dir),
            jobs=jobs,
            only=list(only) or None,
            check=check,
            depfile=depfile,
            echo=click.echo,
            progress=progress,
        )
    if check and result.problems:
        click.echo(
            f"ladderpack: {len(result.problems)} asset(s) out of date: "
            + ", ".join(n for n, _ in result.problems),
            err=True,
        )
        sys.exit(1)
    if check:
        click.echo(f"{len(result.up_to_date)} asset(s) up to date, and their index")


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


def _write_bytes(path: str, data: bytes) -> str:
    from ladderpack.emit import write_files

    folder = os.path.dirname(path) or "."
    return write_files({os.path.basename(path): data}, folder)[0]


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


@cli.group()
def plot() -> None:
    """PNG plots (needs the 'plot' extra: pip install 'ladderpack[plot]')."""


@plot.command("levels")
@click.argument("levels_path", metavar="LEVELS", type=click.Path(dir_okay=False))
@click.option(
    "-o", "--out", "out_path", default="levels.png", show_default=True, help="PNG file to write."
)
def plot_levels(levels_path: str, out_path: str) -> None:
    """Transfer curve, INL and DNL of a LevelSet."""
    from ladderpack.levels import load_levels
    from ladderpack.plots import levels_png

    lev = load_levels(levels_path)
    title = f"{os.path.basename(levels_path)}: {lev.bits}-bit, {lev.origin}"
    click.echo(f"wrote {_write_bytes(out_path, levels_png(lev.volts, title))}")


@plot.command("ntf")
@click.option(
    "--shaping",
    type=click.Choice(SHAPER_NAMES),
    default="designed",
    show_default=True,
    help="Shaping filter.",
)
@click.option("--rate-hz", type=float, default=44100.0, show_default=True, help="Sample rate, Hz.")
@click.option(
    "--bits",
    type=int,
    default=8,
    show_default=True,
    help="Ladder width (sets a designed filter's default peak bound).",
)
@click.option(
    "--band-hz", type=float, default=None, help="Audio band, Hz  [default: 20000 or Nyquist]"
)
@click.option(
    "--weighting",
    type=click.Choice(WEIGHTING_NAMES),
    default="threshold",
    show_default=True,
    help="Weighting of a designed filter.",
)
@click.option(
    "--ntf-order", type=int, default=8, show_default=True, help="Order of a designed filter."
)
@click.option(
    "--force/--no-force",
    default=False,
    show_default=True,
    help="Allow a published filter away from its design rate.",
)
@click.option(
    "-o", "--out", "out_path", default="ntf.png", show_default=True, help="PNG file to write."
)
def plot_ntf(
    shaping: str,
    rate_hz: float,
    bits: int,
    band_hz: float | None,
    weighting: str,
    ntf_order: int,
    force: bool,
    out_path: str,
) -> None:
    """Noise transfer of a shaping filter at a sample rate."""
    from ladderpack.defaults import default_band_hz, default_ntf_max_db
    from ladderpack.plots import ntf_png
    from ladderpack.shaping import design_shaper, get_shaper

    band = band_hz or default_band_hz(rate_hz)
    shaper = (
        design_shaper(
            rate_hz,
            band_hz=band,
            weighting_kind=weighting,
            order=ntf_order,
            max_gain_db=default_ntf_max_db(bits),
        )
        if shaping == "designed"
        else get_shaper(shaping, rate_hz, force=force)
    )
    click.echo(f"wrote {_write_bytes(out_path, ntf_png(shaper, rate_hz, band_hz=band))}")


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
        click.echo(json_text([{**s, "files": f} for s, f in results]))
        return
    for summary, files in results:
        _print_summary(summary, files)
    click.echo(f"demo bundles are in {os.path.abspath(out_dir)}")


#: The signal that ended the run, when one did (0: none, or Ctrl-C).
_signalled = 0


def signals_as_interrupt() -> None:
    """End the run on SIGTERM or SIGHUP as on Ctrl-C.

    ``timeout``, CI cancellation and ``kill`` send SIGTERM, a closed terminal SIGHUP: the
    handler raises :class:`KeyboardInterrupt` where the program is, so a write in
    progress completes or rolls back as it does for Ctrl-C (never ``.part`` files or a
    pending journal left behind), and the exit status is 128 + the signal's number.
    """
    import signal

    def handler(signum: int, frame: object) -> None:
        global _signalled
        _signalled = signum
        raise KeyboardInterrupt

    for name in ("SIGTERM", "SIGHUP"):
        sig = getattr(signal, name, None)
        if sig is not None:
            # only the main thread may set handlers: elsewhere (main() called from a
            # worker thread by a host program) the host's own handling stays
            with contextlib.suppress(ValueError):
                signal.signal(sig, handler)


def _warnings_as_lines() -> None:
    """Print an old option spelling's warning as one ``ladderpack: warning:`` line (once)."""
    import warnings

    from ladderpack.errors import DeprecatedOptionWarning

    if getattr(warnings.showwarning, "_ladderpack", False):
        return
    shown: set[str] = set()
    default = warnings.showwarning

    def show(message: Any, category: Any, filename: str, lineno: int, *a: Any, **k: Any) -> None:
        if not issubclass(category, DeprecatedOptionWarning):
            default(message, category, filename, lineno, *a, **k)
        elif str(message) not in shown:
            shown.add(str(message))
            click.echo(f"ladderpack: warning: {message}", err=True)

    show._ladderpack = True  # type: ignore[attr-defined]
    warnings.showwarning = show
    warnings.simplefilter("always", DeprecatedOptionWarning)


def main(argv: list[str] | None = None) -> None:
    """Entry point.

    User mistakes (:class:`LadderpackError`, bad options) print one line naming the
    file and field and exit with status 2; Ctrl-C exits 130, SIGTERM 143 and SIGHUP 129
    (each handled as Ctrl-C: see :func:`signals_as_interrupt`); anything else is an
    internal fault: a one-line message and status 1, or the traceback with --debug.
    """
    signals_as_interrupt()
    args = list(sys.argv[1:] if argv is None else argv)
    global _argv
    _argv = args
    debug = "--debug" in args[: args.index("--")] if "--" in args else "--debug" in args
    try:
        rc = cli.main(args=args, prog_name="ladderpack", standalone_mode=False)
    except LadderpackError as exc:
        click.echo(f"ladderpack: error: {_as_typed(exc)}", err=True)
        sys.exit(exc.exit_code)
    except click.ClickException as exc:
        exc.show()
        sys.exit(exc.exit_code)
    except (click.exceptions.Abort, KeyboardInterrupt):
        click.echo("ladderpack: interrupted; each output set is whole, old or new", err=True)
        sys.exit(128 + (_signalled or 2))
    except Exception as exc:  # an internal fault, not the user's mistake
        if debug:
            raise
        click.echo(
            f"ladderpack: internal error: {type(exc).__name__}: {exc} "
            "(run with --debug for the traceback, and please report it)",
            err=True,
        )
        sys.exit(1)
    sys.exit(rc if isinstance(rc, int) else 0)
