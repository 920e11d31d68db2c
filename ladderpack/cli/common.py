"""The command group and what every command shares.

Options from the model, the summary's lines, progress bars, the error line, signals,
``main``.
"""

from __future__ import annotations

import contextlib
import os
import sys
from collections.abc import Callable, Iterator, Mapping
from typing import Any

import click

from ladderpack import outputs
from ladderpack._version import __version__
from ladderpack.errors import LadderpackError


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
        click.echo(f"  overload {summary['overloads']} sample(s) clipped to the code range")
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
    comp = summary.get("compression")
    if comp:
        extra = ""
        if comp["kind"] == "adpcm":
            sinad = comp.get("sinad_db")
            extra = f"; {comp['pcm16_ratio']:.2f}x against 16-bit PCM" + (
                f"; SINAD {sinad:.1f} dB against the uncompressed samples"
                if sinad is not None
                else ""
            )
        click.echo(
            f"  compress {comp['kind']}: {comp['bytes']} bytes for {comp['raw_bytes']} of "
            f"words ({comp['ratio']:.2f}x{extra}), decoded on the chip"
        )
    if summary.get("flash_share") is not None:
        click.echo(
            f"  flash    {100 * summary['flash_share']:.2f} % of the target; at most "
            f"{summary['max_duration_s']:.1f} s fit at this rate and width"
            + (" so compressed" if comp else "")
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


def _write_one(path: str, text: str) -> str:
    """Write one file atomically (temporary name in the same folder, then rename)."""
    from ladderpack.emit import write_files

    folder = os.path.dirname(path) or "."
    return write_files({os.path.basename(path): text.encode()}, folder)[0]


def _write_bytes(path: str, data: bytes) -> str:
    from ladderpack.emit import write_files

    folder = os.path.dirname(path) or "."
    return write_files({os.path.basename(path): data}, folder)[0]


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
