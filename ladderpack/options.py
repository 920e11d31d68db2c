"""The option model: every option's name, type, unit, default, range and help, once.

Each group of options is a frozen dataclass whose fields carry an :class:`OptionInfo`
in their metadata.  The command line (:func:`ladderpack.cli`), the manifest's key
types (:mod:`ladderpack.build`), ``--help``, the sidecar's ``options`` and the build
fingerprint are all derived from these classes, and values are checked here, in
``__post_init__``, whatever their source: a wrong value raises
:class:`~ladderpack.errors.OptionError` naming the field.

Kept free of heavy imports so the command line starts fast.

Examples
--------
>>> StreamOptions(bits=12).samples_per_word_max
2
>>> StreamOptions(bits=20)
Traceback (most recent call last):
...
ladderpack.errors.OptionError: bits: must be a whole number 1..16 for a ladder, got 20
"""

from __future__ import annotations

import dataclasses
import functools
import math
import typing
import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, ClassVar

from ladderpack import outputs
from ladderpack.defaults import (
    COMPRESS_CHOICES,
    DITHERS,
    EMBED_WORDS_MAX,
    FRAME_FORMATS,
    I2C_BUS_SPEEDS_HZ,
    I2C_DAC_COMMANDS,
    NTF_FORMS,
    PIN_ORDERS,
    PROGRAM_CHOICES,
    SHAPER_NAMES,
    SHIFTS,
    TONE_KINDS,
    WEIGHTING_NAMES,
)
from ladderpack.errors import DeprecatedOptionWarning, LadderpackError, OptionError
from ladderpack.targets import MAX_SYS_CLOCK_HZ, TARGET_NAMES, get_target

__all__ = [
    "AnalysisOptions",
    "ClipOptions",
    "ClockOptions",
    "CorrectionTableSpec",
    "I2cDacTableSpec",
    "LadderDesignSpec",
    "MeasureOptions",
    "NtfPlotSpec",
    "OptionInfo",
    "StreamOptions",
    "ToneSpec",
    "WaveTableSpec",
    "check_bits",
    "from_mapping",
    "manifest_types",
    "option_fields",
]

#: Published shaping sets designed for 44.1 kHz (``force`` applies to these).
PUBLISHED_SHAPERS = ("modified-e-9", "improved-e-5", "improved-e-9", "f-weighted-3", "f-weighted-9")


@dataclass(frozen=True)
class OptionInfo:
    """What the model knows of one option besides its type and default.

    Attributes
    ----------
    help : str
        One line for ``--help`` and the README.
    unit : str
        Unit of the value ("Hz", "ms", "dB", "bytes", ...), or "" for none.
    choices : tuple of str, optional
        The allowed values of a text option.
    lo, hi : float, optional
        Inclusive bounds of a number (`lo_open`: the lower bound is excluded).
    default_text : str, optional
        How to describe a default that is not a plain value (``None`` defaults).
    flag : str, optional
        Command-line flag when not ``--`` plus the name with dashes; for a
        yes/no option, the ``--on/--off`` pair.
    metavar : str, optional
        How the value is shown in ``--help``.
    cli : bool
        Whether the option appears on the command line.
    recorded : bool
        Whether the option goes into the sidecar and the build fingerprint
        (False for options that cannot change an output).
    group : str, optional
        For a stream option that only some outputs take, the group it belongs to; the
        registry lists the groups each output takes (:data:`ladderpack.outputs.REGISTRY`).
        None: every output takes it.
    """

    help: str
    unit: str = ""
    choices: tuple[str, ...] | None = None
    lo: float | None = None
    hi: float | None = None
    lo_open: bool = False
    default_text: str | None = None
    flag: str | None = None
    metavar: str | None = None
    cli: bool = True
    recorded: bool = True
    group: str | None = None


def _opt(default: Any, help: str, **info: Any) -> Any:
    return field(default=default, metadata={"option": OptionInfo(help, **info)})


_FIELDS: dict[type, tuple[tuple[dataclasses.Field[Any], OptionInfo, Any], ...]] = {}


def option_fields(cls: type) -> tuple[tuple[dataclasses.Field[Any], OptionInfo, Any], ...]:
    """The fields of an option class with their :class:`OptionInfo` and resolved type.

    Resolved once per class: ``typing.get_type_hints`` evaluates every annotation, and
    an option object is made for each asset of a build (a 50-asset no-op build spent
    most of its time there).
    """
    found = _FIELDS.get(cls)
    if found is None:
        hints = typing.get_type_hints(cls)
        found = tuple(
            (f, f.metadata["option"], hints[f.name])
            for f in dataclasses.fields(cls)
            if "option" in f.metadata
        )
        _FIELDS[cls] = found
    return found


@functools.cache
def _base_types(hint: Any) -> tuple[tuple[type, ...], bool]:
    """(python types allowed, None allowed) for a field's type hint.

    Cached: every option object of a build checks the same few dozen hints.
    """
    args = typing.get_args(hint)
    origin = typing.get_origin(hint)
    nullable = False
    if origin in (typing.Union, getattr(__import__("types"), "UnionType", None)):
        inner = [a for a in args if a is not type(None)]
        nullable = len(inner) < len(args)
        hint = inner[0] if len(inner) == 1 else hint
        origin = typing.get_origin(hint)
    if origin is tuple:
        return (tuple, list), nullable
    if hint is float:
        return (int, float), nullable
    if isinstance(hint, type):
        return (hint,), nullable
    return (object,), nullable


def _tuple_hint(hint: Any) -> Any:
    """The ``tuple[...]`` inside an optional hint."""
    for h in (hint, *typing.get_args(hint)):
        if typing.get_origin(h) is tuple:
            return h
    return None


def _check_items(name: str, value: Any, hint: Any, depth: int = 0) -> None:
    """Check the items of a list value against ``tuple[T, ...]`` or ``tuple[T, U]``."""
    args = typing.get_args(hint) if hint is not None else ()
    if not args:
        return
    if len(args) == 2 and args[1] is Ellipsis:
        item_hints = [args[0]] * len(value)
    else:
        if len(value) != len(args):
            raise OptionError(f"each item must hold {len(args)} values, got {value!r}", field=name)
        item_hints = list(args)
    for item, h in zip(value, item_hints, strict=True):
        if typing.get_origin(h) is tuple:
            if not isinstance(item, list | tuple) or depth > 2:
                n = len(typing.get_args(h))
                raise OptionError(
                    f"each item must be a list of {n} numbers (e.g. [1000, -6] for a "
                    f"frequency in Hz and a level in dB), got {item!r}"
                    if n == 2
                    else f"each item must be a list of {n} values, got {item!r}",
                    field=name,
                )
            _check_items(name, item, h, depth + 1)
            continue
        number = isinstance(item, int | float) and not isinstance(item, bool)
        if h is float and not (number and math.isfinite(item)):
            raise OptionError(f"every item must be a finite number, got {item!r}", field=name)
        if h is int and not (isinstance(item, int) and not isinstance(item, bool)):
            raise OptionError(f"every item must be a whole number, got {item!r}", field=name)
        if h is str and not isinstance(item, str):
            raise OptionError(f"every item must be text, got {item!r}", field=name)


def _type_words(types: tuple[type, ...]) -> str:
    names = {int: "a whole number", float: "a number", bool: "true or false", str: "text"}
    if types == (int, float):
        return "a number"
    if types == (tuple, list):
        return "a list"
    return " or ".join(names.get(t, t.__name__) for t in types)


def _check_value(name: str, value: Any, hint: Any, info: OptionInfo) -> Any:
    """Check one value against its type and range; return it normalised."""
    if hint is Any:
        return value
    types, nullable = _base_types(hint)
    if value is None:
        if nullable:
            return None
        raise OptionError(f"must be {_type_words(types)}, got nothing", field=name)
    ok = isinstance(value, types) and not (isinstance(value, bool) and bool not in types)
    if not ok:
        raise OptionError(
            f"must be {_type_words(types)}, got {type(value).__name__} {value!r}", field=name
        )
    if types == (int, float):
        value = float(value)
    if isinstance(value, float) and not math.isfinite(value):
        raise OptionError(f"must be a finite number, got {value!r}", field=name)
    if types == (tuple, list):
        _check_items(name, value, _tuple_hint(hint))
    if info.choices is not None and value not in info.choices:
        raise OptionError(f"must be one of {', '.join(info.choices)}; got {value!r}", field=name)
    if isinstance(value, int | float) and not isinstance(value, bool):
        lo, hi = info.lo, info.hi
        bad = (lo is not None and (value <= lo if info.lo_open else value < lo)) or (
            hi is not None and value > hi
        )
        if bad:
            kind = "a whole number" if isinstance(value, int) else "a number"
            unit = f" {info.unit}" if info.unit else ""
            fmt = (lambda v: f"{int(v)}") if isinstance(value, int) else (lambda v: f"{v:g}")
            if lo is not None and hi is not None and info.lo_open:
                rng = f"> {fmt(lo)} and <= {fmt(hi)}{unit}"
            elif lo is not None and hi is not None:
                rng = f"{fmt(lo)}..{fmt(hi)}{unit}"
            elif lo is not None:
                rng = f"{'>' if info.lo_open else '>='} {fmt(lo)}{unit}"
            else:
                rng = f"<= {fmt(hi)}{unit}"
            raise OptionError(f"must be {kind} {rng}, got {value!r}", field=name)
    if types == (tuple, list):
        value = tuple(tuple(v) if isinstance(v, list) else v for v in value)
    return value


class _Model:
    """Shared behaviour of the option classes (validation, conversion to data)."""

    def _check_fields(self) -> None:
        for f, info, hint in option_fields(type(self)):
            value = _check_value(f.name, getattr(self, f.name), hint, info)
            object.__setattr__(self, f.name, value)

    def to_dict(self) -> dict[str, Any]:
        """The recorded options as plain JSON-ready data (sidecar, fingerprint)."""
        out: dict[str, Any] = {}
        for f, info, _hint in option_fields(type(self)):
            if info.recorded:
                v = getattr(self, f.name)
                out[f.name] = (
                    [list(x) if isinstance(x, tuple) else x for x in v]
                    if isinstance(v, tuple)
                    else v
                )
        return out

    def changed(self) -> dict[str, Any]:
        """The options that differ from their defaults."""
        return {
            f.name: getattr(self, f.name)
            for f, _info, _hint in option_fields(type(self))
            if getattr(self, f.name) != f.default
        }


#: The version until which the old spellings of renamed options keep working.
RENAMES_UNTIL = "0.3"


_M = typing.TypeVar("_M")


def _and(names: tuple[str, ...]) -> str:
    """``a``, ``a and b``, ``a, b and c``."""
    return names[0] if len(names) == 1 else ", ".join(names[:-1]) + " and " + names[-1]


def _check_groups(obj: Any) -> outputs.Entry | None:
    """Refuse an option given for an output that does not take its group.

    Returns the output's registry entry (None for an unknown output, which the field
    checks then refuse).
    """
    out = outputs.REGISTRY_BY_NAME.get(obj.output) if isinstance(obj.output, str) else None
    if out is None:
        return None
    for old, new in out.renamed.items():
        if hasattr(obj, old) and _flag_given(obj, old):
            if _flag_given(obj, new):
                raise OptionError(f"give {new} (or its old spelling {old}), not both", field=old)
            value = getattr(obj, old)
            object.__setattr__(obj, new, value)
            object.__setattr__(obj, old, {f.name: f for f in dataclasses.fields(obj)}[old].default)
            warnings.warn(
                DeprecatedOptionWarning(
                    f"{old} is the old spelling of {new} for output {obj.output}; it keeps "
                    f"working until version {RENAMES_UNTIL}: use {new}"
                ),
                stacklevel=4,
            )
    if getattr(obj, "clock_pin", None) is not None:
        olds = tuple(e.name for e in outputs.REGISTRY if "clock_pin" in e.renamed)
        raise OptionError(
            f"applies to output{'s' if len(olds) > 1 else ''} {_and(olds)} (an old "
            f"spelling), not to output {obj.output}",
            field="clock_pin",
        )
    for f, info, _hint in option_fields(type(obj)):
        if info.group and not _takes(out, info.group) and _flag_given(obj, f.name):
            who = outputs.takers(info.group)
            raise OptionError(
                f"applies to output{'s' if len(who) > 1 else ''} {_and(who)}, not to "
                f"output {obj.output}",
                field=f.name,
            )
    return out


def _takes(out: outputs.Entry, group: str) -> bool:
    """Whether an output takes the options of `group` (its listed groups and its own)."""
    return group in out.takes or group == out.name


def _recorded(obj: Any, record: dict[str, Any]) -> dict[str, Any]:
    """A record without the options of groups the output does not take.

    Nor, for an output not named in records (the ladder), the ``output`` key.
    """
    out = outputs.entry(obj.output)
    for f, info, _hint in option_fields(type(obj)):
        if info.group and not _takes(out, info.group):
            record.pop(f.name, None)
    if not out.named_in_records:
        record.pop("output", None)
    return record


def _flag_given(obj: Any, name: str) -> bool:
    f = {x.name: x for x in dataclasses.fields(obj)}[name]
    return bool(getattr(obj, name) != f.default)


@dataclass(frozen=True)
class StreamOptions(_Model):
    """Every option of a stream (``ladderpack stream`` and ``tone``, manifest assets).

    Attributes are the options of the same names; see each field's ``help`` in
    :func:`option_fields` or ``ladderpack stream --help``.  Options left as None that
    a target supplies (``sys_clock_hz``, ``gpio_count``, ``flash_bytes``,
    ``ram_bytes``) are filled in from `target`.

    Raises
    ------
    OptionError
        For a value of the wrong type or out of range, or an option that does
        not apply with the others given (``crossfade_ms`` without ``loop``, a
        designer setting without ``shaping='designed'``, ...).
    """

    target: str = _opt(
        "rp2040",
        "Chip the bundle is for; sets the defaults of the system clock, GPIO count, flash and RAM.",
        choices=TARGET_NAMES,
    )
    output: str = _opt(
        "ladder",
        "How samples leave the chip: "
        + "; ".join(f"{e.name}, {e.summary}" for e in outputs.REGISTRY)
        + ".",
        choices=outputs.names(),
    )
    bits: int = _opt(
        None,  # type: ignore[arg-type]  # resolved by the output in __post_init__
        "Sample width: the ladder's N (1..16), the I2S sample (16, 24 or 32), the I2C "
        "DAC's 12; PWM's resolution follows from its plan.",
        unit="bits",
        default_text="8 for a ladder, 16 for I2S, 12 for an I2C DAC",
        group="width",
    )
    rate_hz: float = _opt(22050.0, "Requested stream sample rate.", unit="Hz", lo=0, lo_open=True)
    sys_clock_hz: int | None = _opt(
        None,
        "System clock feeding the PIO block (at most what the PLL can make, 1.6 GHz).",
        unit="Hz",
        lo=1,
        hi=MAX_SYS_CLOCK_HZ,
        default_text="the target's: 125000000 on rp2040, 150000000 on rp2350",
    )
    rate_tolerance_ppm: float = _opt(
        100.0, "Rate error accepted to keep a jitter-free integer divider.", unit="ppm", lo=0
    )
    headroom_db: float = _opt(
        1.0, "Peak level below full scale after normalising.", unit="dB", lo=0, hi=120
    )
    fade_ms: float = _opt(5.0, "Raised-cosine fade at each end of the audio.", unit="ms", lo=0)
    ramp_ms: float = _opt(
        50.0,
        "Ramp between the idle code and mid-scale at start and end.",
        unit="ms",
        lo=0,
        group="level",
    )
    idle_code: int = _opt(
        0, "Code the pins hold when nothing plays.", unit="code", lo=0, group="level"
    )
    dither: str = _opt("tpdf", "Dither before rounding.", choices=DITHERS)
    shaping: str = _opt(
        "none",
        "Error-feedback noise shaping: a fixed or published filter, or designed for the "
        "stream's rate.",
        choices=SHAPER_NAMES,
    )
    band_hz: float | None = _opt(
        None,
        "Audio band for shaping and noise figures.",
        unit="Hz",
        lo=0,
        lo_open=True,
        default_text="20000 or the stream's Nyquist, whichever is lower",
    )
    weighting: str = _opt(
        "threshold", "Noise weighting for the designer and the report.", choices=WEIGHTING_NAMES
    )
    ntf_order: int = _opt(8, "Order of a designed shaping filter.", unit="order", lo=1, hi=16)
    ntf_max_db: float | None = _opt(
        None,
        "Peak gain bound of a designed filter.",
        unit="dB",
        lo=0,
        lo_open=True,
        default_text="3.5 up to 3 bits, 10 up to 7, 20 from 8",
    )
    ntf_form: str = _opt("auto", "Designed filter form (auto: the better one).", choices=NTF_FORMS)
    loudness_lufs: float | None = _opt(
        None,
        "Normalise to this integrated loudness (ITU-R BS.1770) instead of --headroom-db.",
        unit="LUFS",
        lo=-70,
        hi=0,
        default_text="off",
    )
    true_peak_dbtp: float = _opt(
        -1.0, "True-peak ceiling for --loudness-lufs.", unit="dBTP", lo=-60, hi=0
    )
    levels: Any = _opt(  # noqa: RUF009 (an option field, like the others)
        None,
        "LevelSet JSON (from 'ladderpack levels' or 'ladderpack ladder'): quantise against "
        "the ladder's true levels.",
        unit="file",
        default_text="ideal levels",
        metavar="FILE",
        group="ladder",
    )
    force: bool = _opt(
        False,
        "Use a published filter even far from its 44.1 kHz design rate.",
        flag="--force/--no-force",
    )
    seed: int = _opt(0, "Dither seed; the same seed gives identical output.", lo=0, hi=2**63 - 1)
    shift: str = _opt(
        "right",
        "OUT shift direction: right puts the first sample in the LSBs.",
        choices=SHIFTS,
        group="ladder",
    )
    out_base: int = _opt(
        0,
        "Lowest GPIO of the ladder's N consecutive pins (the state machine's OUT base): the "
        "ladder's least significant bit with --pin-order msb-high, its most significant bit "
        "with msb-low; two ladders take 2N pins from here, the left ladder first.",
        unit="GPIO",
        lo=0,
        group="ladder",
    )
    data_pin: int = _opt(
        0,
        "GPIO of the serial data line into the DAC (I2S: SD).",
        unit="GPIO",
        lo=0,
        group="serial",
    )
    bit_clock_pin: int | None = _opt(
        None,
        "GPIO of the serial bit clock; the frame's next line (I2S: the word select) is on "
        "the GPIO after it.",
        unit="GPIO",
        lo=0,
        default_text="data pin + 1",
        group="serial",
    )
    pwm_pin: int = _opt(
        0,
        "GPIO of the PWM output (a stereo stream: channel A's, an even GPIO; B on the next).",
        unit="GPIO",
        lo=0,
        group="pwm",
    )
    sda_pin: int = _opt(0, "GPIO of the I2C data line, SDA.", unit="GPIO", lo=0, group="i2c")
    scl_pin: int | None = _opt(
        None,
        "GPIO of the I2C clock line, SCL.",
        unit="GPIO",
        lo=0,
        default_text="SDA pin + 1",
        group="i2c",
    )
    clock_pin: int | None = _opt(
        None,
        "Deprecated spelling of --bit-clock-pin (I2S) and --scl-pin (I2C DAC); it keeps "
        "working until version 0.3.",
        unit="GPIO",
        lo=0,
        default_text="none",
        recorded=False,
    )
    bus_hz: int = _opt(
        400_000,
        "I2C DAC only: highest bus clock (SCL): 100000, 400000 or 1000000 (Fast-mode "
        "Plus, if the DAC has it), with every UM10204 bus time of that mode met; at "
        "125 MHz fast writes reach 3096, 11817 or 30281 updates/s.",
        unit="Hz",
        group="i2c",
    )
    dac_address: int = _opt(
        0x60,
        "I2C DAC only: the DAC's 7-bit address, decimal or 0x.. (0x60: an MCP4725 with A0 low).",
        unit="address",
        default_text="0x60",
        group="i2c",
    )
    dac_command: str = _opt(
        "fast",
        "I2C DAC only: fast (2 data bytes an update) or register (write DAC register, 3).",
        choices=I2C_DAC_COMMANDS,
        group="i2c",
    )
    stereo: bool = _opt(
        False,
        "Two channels (a clip's first two; a tone in both): two ladders on 2N pins, the "
        "left and right slots of I2S, channels A and B of the PWM slice. Mono sends one "
        "channel (I2S: in both slots).",
        flag="--stereo/--mono",
        group="stereo",
    )
    min_carrier_hz: float | None = _opt(
        None,
        "PWM only: lowest acceptable PWM frequency (the carrier).",
        unit="Hz",
        lo=0,
        lo_open=True,
        default_text="4 x the rate",
        group="pwm",
    )
    frame_format: str = _opt(
        "standard",
        "I2S only: standard (MSB one bit clock after the word-select edge, left while WS "
        "is low: Philips I2S) or left-justified (MSB on the edge, left while LRCK is high).",
        choices=FRAME_FORMATS,
        group="i2s",
    )
    gpio_count: int | None = _opt(
        None,
        "User GPIOs on the target.",
        unit="pins",
        lo=1,
        default_text="the target's: 30, or 48 on rp2350b",
    )
    pin_order: str = _opt(
        "msb-high",
        "msb-high: ladder MSB on the highest GPIO; msb-low: on the lowest (bits reversed).",
        choices=PIN_ORDERS,
        group="ladder",
    )
    invert: bool = _opt(
        False,
        "Invert every bit, for an inverting buffer between pins and ladder.",
        flag="--invert/--no-invert",
        group="ladder",
    )
    program: str = _opt(
        "auto",
        "State-machine program; auto picks loop for loops when it fits, else autopull.",
        choices=PROGRAM_CHOICES,
        group="ladder",
    )
    samples_per_word: int | None = _opt(
        None,
        "Samples per 32-bit FIFO word.",
        unit="samples",
        lo=1,
        hi=32,
        default_text="as many as fit",
        group="ladder",
    )
    loop: bool = _opt(
        False,
        "The stream repeats: no fades or ramps at the seam, length rounded to whole words, "
        "players loop.",
        flag="--loop/--no-loop",
    )
    crossfade_ms: float = _opt(0.0, "Loops: crossfade of the end onto the start.", unit="ms", lo=0)
    compress: str = _opt(
        "none",
        "Store the stream compressed and decode it on the chip (the C players into two RAM "
        "buffers from a DMA interrupt): lossless keeps every code (prediction and Rice "
        "codes; every output, I2S at 16 bits), adpcm keeps 4 bits a sample (IMA ADPCM; "
        "16-bit I2S, mono or stereo; lossy, its SINAD is reported).",
        choices=COMPRESS_CHOICES,
        group="compress",
    )
    flash_bytes: int | None = _opt(
        None,
        "Target flash size.",
        unit="bytes",
        lo=0,
        default_text="the target's: 2097152 on rp2040, 4194304 on rp2350",
    )
    flash_reserve_bytes: int = _opt(256 * 1024, "Flash kept for firmware code.", unit="bytes", lo=0)
    ram_bytes: int | None = _opt(
        None,
        "Target RAM size.",
        unit="bytes",
        lo=0,
        default_text="the target's: 270336 on rp2040, 532480 on rp2350",
    )
    chunk_words: int = _opt(
        1024, "Words per DMA buffer of the MicroPython player (two are used).", unit="words", lo=1
    )
    embed_words_max: int = _opt(
        EMBED_WORDS_MAX,
        "Streams up to this many words are also embedded in the MicroPython module.",
        unit="words",
        lo=0,
    )
    max_memory_mib: float = _opt(
        1024.0,
        "Refuse a job whose working memory would exceed this.",
        unit="MiB",
        lo=0,
        lo_open=True,
        recorded=False,
    )

    #: Options that only apply to clips (a synthesised tone is made at its level).
    CLIP_ONLY: ClassVar[tuple[str, ...]] = (
        "headroom_db",
        "fade_ms",
        "loudness_lufs",
        "true_peak_dbtp",
        "crossfade_ms",
    )

    def __post_init__(self) -> None:
        out = _check_groups(self)
        output = outputs.get_output(self.output) if out is not None else None
        if self.bits is None and output is not None:
            object.__setattr__(self, "bits", output.default_bits())
        self._check_fields()
        assert output is not None  # _check_fields refuses an unknown output
        tgt = get_target(self.target)
        for name, value in (
            ("sys_clock_hz", tgt.sys_clock_hz),
            ("gpio_count", tgt.gpio_count),
            ("flash_bytes", tgt.flash_bytes),
            ("ram_bytes", tgt.ram_bytes),
        ):
            if getattr(self, name) is None:
                object.__setattr__(self, name, value)
        if int(self.gpio_count or 0) > tgt.gpio_count:
            raise OptionError(
                f"the {tgt.name} has {tgt.gpio_count} user GPIOs; a board may expose fewer, "
                f"never more: got {self.gpio_count}",
                field="gpio_count",
            )
        output.check_options(self)
        self._check_common()

    @property
    def pins(self) -> int:
        """GPIOs the ladder output takes: N, or 2N for two ladders (stereo)."""
        return self.bits * (2 if self.stereo else 1)

    def _check_common(self) -> None:
        """Checks shared by every output."""
        if self.flash_reserve_bytes > int(self.flash_bytes or 0):
            raise OptionError(
                f"reserve of {self.flash_reserve_bytes} bytes exceeds the flash size "
                f"{self.flash_bytes}",
                field="flash_reserve_bytes",
            )
        if self.crossfade_ms > 0 and not self.loop:
            raise OptionError(
                "applies only to loops; make the stream a loop or drop this option",
                field="crossfade_ms",
            )
        if self.loop and _flag_given(self, "fade_ms"):
            raise OptionError(
                "does not apply to loops (a loop has no ends to fade); use crossfade_ms",
                field="fade_ms",
            )
        if self.loudness_lufs is None and _flag_given(self, "true_peak_dbtp"):
            raise OptionError("applies only with loudness_lufs", field="true_peak_dbtp")
        if self.loudness_lufs is not None and _flag_given(self, "headroom_db"):
            raise OptionError(
                "give headroom_db (peak normalising) or loudness_lufs, not both",
                field="headroom_db",
            )
        if self.shaping != "designed":
            for name in ("ntf_order", "ntf_max_db", "ntf_form"):
                if _flag_given(self, name):
                    raise OptionError(
                        "applies only to a designed filter (shaping designed)", field=name
                    )
        if self.force and self.shaping not in PUBLISHED_SHAPERS:
            raise OptionError(
                f"applies only to the published sets {', '.join(PUBLISHED_SHAPERS)}",
                field="force",
            )

    @property
    def samples_per_word_max(self) -> int:
        """Most samples (stereo: frames of two) of this width in a 32-bit word."""
        return 32 // self.pins

    @property
    def gpio_base(self) -> int:
        """The PIO block's GPIO base that reaches the output's pins (0 or 16)."""
        return outputs.get_output(self.output).gpio_base(self)

    def to_dict(self) -> dict[str, Any]:
        """Recorded options: those every output takes and the output's own groups.

        The output may adjust the record (a ladder stream records no ``output`` key: its
        records are those of the versions before other outputs existed).
        """
        out = _recorded(self, super().to_dict())
        return outputs.get_output(self.output).recorded_options(self, out)

    def replaced(self, **changes: Any) -> StreamOptions:
        """These options with `changes`, checked again.

        The options of groups the output does not take, which the model fills in for it
        (a PWM stream's ``bits``), start again from their defaults, so they do not read
        as given (``dataclasses.replace`` would refuse them).

        Examples
        --------
        >>> o = StreamOptions(output="pwm").replaced(dither="none")
        >>> o.dither, o.bits
        ('none', 16)
        """
        out = outputs.REGISTRY_BY_NAME.get(changes.get("output", self.output))
        reset = {
            f.name: f.default
            for f, info, _hint in option_fields(type(self))
            if out is not None and info.group and not _takes(out, info.group)
            and f.name not in changes
        }  # fmt: skip
        return dataclasses.replace(self, **{**reset, **changes})

    def check_for_tone(self) -> None:
        """Refuse the clip-only options (a tone is synthesised at its own level)."""
        why = {
            "fade_ms": "a tone starts and ends on whole samples of its own; --ramp-ms sets "
            "the ramps from and to the idle code",
            "crossfade_ms": "a looped tone is made of whole cycles, so its seam needs no crossfade",
        }
        for name in self.CLIP_ONLY:
            if _flag_given(self, name):
                raise OptionError(
                    "does not apply to a synthesised tone ("
                    + why.get(name, "set its level with level_dbfs")
                    + ")",
                    field=name,
                )


def _with_own_options(cls: type[_M]) -> type[_M]:
    """`cls` with one field per own option of every registered output (group: its name).

    The options an output alone takes are declared in its registry line
    (:class:`ladderpack.outputs.OwnOption`), so an output is added without touching this
    module; the class keeps its name, module and docstring.
    """
    extra: list[tuple[str, Any, Any]] = []
    for e in outputs.REGISTRY:
        for o in e.options:
            info = OptionInfo(
                o.help,
                unit=o.unit,
                choices=o.choices,
                lo=o.lo,
                hi=o.hi,
                default_text=o.default_text,
                flag=o.flag,
                group=e.name,
            )
            hint: Any = o.kind if o.default is not None else (o.kind | None)
            extra.append((o.name, hint, field(default=o.default, metadata={"option": info})))
    if not extra:
        return cls
    made = dataclasses.make_dataclass(
        cls.__name__,
        extra,
        bases=(cls,),
        frozen=True,
        namespace={"__doc__": cls.__doc__, "__module__": cls.__module__},
    )
    made.__qualname__ = cls.__qualname__
    return typing.cast(type[_M], made)


StreamOptions = _with_own_options(StreamOptions)  # type: ignore[misc]  # same class, more fields


@dataclass(frozen=True)
class ClockOptions(_Model):
    """Options of ``ladderpack clock`` besides the chip's.

    The chip's (target, system clock, rate tolerance) are ``StreamOptions``'. An output's
    setting (the PWM carrier, the I2S slot, the I2C bus) is refused for an output that
    does not take its group, as a stream's is.
    """

    output: str = _opt(
        "ladder",
        "Output system to plan for: "
        + "; ".join(f"{e.name}, {e.summary}" for e in outputs.REGISTRY)
        + ".",
        choices=outputs.names(),
    )
    min_carrier_hz: float | None = _opt(
        None,
        "PWM: lowest carrier frequency.",
        unit="Hz",
        lo=0,
        lo_open=True,
        default_text="4 x the rate",
        group="pwm",
    )
    slot_bits: int | None = _opt(
        None, "I2S: bits per channel slot, 16 or 32.", unit="bits", default_text="32", group="i2s"
    )
    bus_hz: int | None = _opt(
        None,
        "I2C DAC: bus clock, 100000, 400000 or 1000000.",
        unit="Hz",
        default_text="400000",
        group="i2c",
    )
    dac_command: str | None = _opt(
        None,
        "I2C DAC: fast write (2 data bytes) or write DAC register (3).",
        choices=I2C_DAC_COMMANDS,
        default_text="fast",
        group="i2c",
    )
    find_sys_clock: bool = _opt(
        False,
        "Search the system clocks the PLL can make for those that give RATE_HZ exactly with "
        "an integer divider for --output, nearest the current clock first.",
        flag="--find-sys-clock/--no-find-sys-clock",
    )
    min_sys_clock_hz: int = _opt(
        48_000_000, "--find-sys-clock: lowest system clock to consider.", unit="Hz", lo=1
    )
    max_sys_clock_hz: int | None = _opt(
        None,
        "--find-sys-clock: highest system clock to consider.",
        unit="Hz",
        lo=1,
        default_text="the chip's rated clock, 133000000 on rp2040, 150000000 on rp2350",
    )
    count: int = _opt(8, "--find-sys-clock: clocks to list.", unit="clocks", lo=1, hi=100)

    def __post_init__(self) -> None:
        _check_groups(self)
        self._check_fields()
        if self.slot_bits not in (None, 16, 32):
            raise OptionError(f"must be 16 or 32, got {self.slot_bits!r}", field="slot_bits")
        if self.bus_hz is not None and self.bus_hz not in I2C_BUS_SPEEDS_HZ:
            raise OptionError(
                f"must be one of {', '.join(str(b) for b in I2C_BUS_SPEEDS_HZ)} Hz, got "
                f"{self.bus_hz!r}",
                field="bus_hz",
            )
        if self.find_sys_clock and self.slot_bits not in (None, 32):
            raise OptionError("streams use 32-bit slots; drop it", field="slot_bits")

    def settings(self) -> dict[str, Any]:
        """The output's settings, for ``Output.clock_report`` and ``clock_planner``."""
        return {
            "min_carrier_hz": self.min_carrier_hz,
            "slot_bits": self.slot_bits,
            "bus_hz": self.bus_hz,
            "dac_command": self.dac_command,
        }


@dataclass(frozen=True)
class LadderDesignSpec(_Model):
    """A ladder to model and check (``ladderpack ladder``): the parts, the drive, the load."""

    bits: int = _opt(8, "Ladder width N.", unit="bits", lo=1, hi=16)
    r_ohms: float = _opt(
        10_000.0, "Unit resistance R (legs and termination 2R).", unit="ohms", lo=0, lo_open=True
    )
    tolerance_pct: float = _opt(1.0, "Resistor tolerance.", unit="%", lo=0, hi=100)
    distribution: str = _opt(
        "uniform",
        "Monte Carlo spread (normal: tolerance = 3 sigma).",
        choices=("uniform", "normal"),
    )
    drive_ma: int = _opt(
        4,
        "GPIO drive strength (2, 4, 8 or 12): the default source resistances and the "
        "current limit.",
        unit="mA",
    )
    source_high_ohms: float | None = _opt(
        None,
        "Pin source resistance driving high.",
        unit="ohms",
        lo=0,
        default_text="the datasheet bound for the drive strength",
    )
    source_low_ohms: float | None = _opt(
        None,
        "Pin source resistance driving low.",
        unit="ohms",
        lo=0,
        default_text="the datasheet bound for the drive strength",
    )
    supply_volts: float = _opt(3.3, "IOVDD.", unit="V", lo=0, lo_open=True)
    load_ohms: float | None = _opt(
        None, "Resistive load on the output.", unit="ohms", lo=0, lo_open=True, default_text="none"
    )
    load_pf: float = _opt(
        20.0, "Capacitance on the output, for the settling check.", unit="pF", lo=0
    )
    rate_hz: float = _opt(
        22050.0, "Sample rate: a step must settle within one period.", unit="Hz", lo=0, lo_open=True
    )
    band_hz: float = _opt(
        20000.0, "Audio band for the thermal-noise figure.", unit="Hz", lo=0, lo_open=True
    )
    temperature_k: float = _opt(300.0, "Temperature for the thermal noise.", unit="K", lo=0)
    trials: int = _opt(200, "Monte Carlo trials.", unit="count", lo=1)
    seed: int = _opt(0, "Monte Carlo seed.", lo=0, hi=2**63 - 1)
    split_legs: bool = _opt(
        False, "Build each 2R from two R in series.", flag="--split-legs/--no-split-legs"
    )
    series: str = _opt(
        "E96",
        "Preferred-value series for the recommended R range.",
        choices=("E24", "E96", "E192"),
    )
    inl_share_lsb: float = _opt(
        0.5, "Largest INL that source resistance may cause in a recommended R.", unit="LSB", lo=0
    )
    spice: str | None = _opt(
        None,
        "Write a SPICE netlist of the nominal ladder to this file.",
        unit="file",
        default_text="none",
        metavar="FILE",
        recorded=False,
    )
    spice_code: int | None = _opt(
        None, "Code the netlist drives.", unit="code", lo=0, default_text="mid-scale"
    )
    levels_out: str | None = _opt(
        None,
        "Write the nominal ladder's modelled levels as a LevelSet JSON file.",
        unit="file",
        default_text="none",
        metavar="FILE",
        recorded=False,
    )
    mc_levels_out: str | None = _opt(
        None,
        "Write the levels of the Monte Carlo trial with the largest INL (or --mc-trial) as a "
        "LevelSet JSON file, for stream --levels and preview --levels.",
        unit="file",
        default_text="none",
        metavar="FILE",
        recorded=False,
    )
    mc_trial: int | None = _opt(
        None,
        "Monte Carlo trial (0-based) for --mc-levels-out.",
        unit="trial",
        lo=0,
        default_text="the worst",
    )

    def __post_init__(self) -> None:
        self._check_fields()
        if self.drive_ma not in (2, 4, 8, 12):
            raise OptionError(f"must be 2, 4, 8 or 12 mA, got {self.drive_ma!r}", field="drive_ma")
        if self.mc_trial is not None and self.mc_trial >= self.trials:
            raise OptionError(
                f"must be 0..{self.trials - 1}, got {self.mc_trial}", field="mc_trial"
            )
        if self.spice_code is not None and self.spice_code >= 1 << self.bits:
            raise OptionError(
                f"must be 0..{(1 << self.bits) - 1} for {self.bits} bits, got {self.spice_code}",
                field="spice_code",
            )


@dataclass(frozen=True)
class AnalysisOptions(_Model):
    """How a test tone is analysed (``measure`` and ``preview``)."""

    freq_hz: float | None = _opt(
        None,
        "Test-tone frequency.",
        unit="Hz",
        lo=0,
        lo_open=True,
        default_text="found by a four-parameter fit",
    )
    harmonics: int = _opt(10, "Highest harmonic counted in THD.", unit="count", lo=2, hi=1000)
    band_low_hz: float | None = _opt(
        None,
        "Lower band edge for noise and distortion.",
        unit="Hz",
        lo=0,
        default_text="DC excluded",
    )
    band_high_hz: float | None = _opt(
        None, "Upper band edge.", unit="Hz", lo=0, lo_open=True, default_text="Nyquist"
    )
    a_weighting: bool = _opt(
        False,
        "Weight noise and distortion by IEC 61672-1 A-weighting; the tone stays unweighted "
        "(usual practice, as in AES17).",
        flag="--a-weighting/--no-a-weighting",
    )
    weight_tone: bool = _opt(
        False,
        "With --a-weighting, weight the tone too (a ratio of weighted powers).",
        flag="--weight-tone/--no-weight-tone",
    )

    def __post_init__(self) -> None:
        self._check_fields()
        lo, hi = self.band_low_hz, self.band_high_hz
        if lo is not None and hi is not None and not lo < hi:
            raise OptionError(
                f"must be below --band-high-hz ({hi!r}), got {lo!r}", field="band_low_hz"
            )


@dataclass(frozen=True)
class MeasureOptions(_Model):
    """How a capture is read (``ladderpack measure``); the analysis is :class:`AnalysisOptions`."""

    rate_hz: float | None = _opt(
        None,
        "Sample rate of the capture: a CSV's when its header gives none; for a sound file it "
        "overrides the header (whose rate is whole hertz).",
        unit="Hz",
        lo=0,
        lo_open=True,
        default_text="from the file",
    )
    channel: int = _opt(0, "Channel of a multichannel sound file.", unit="index", lo=0)
    full_scale: float = _opt(
        1.0,
        "Peak of a full-scale sine in the capture's units (1.0 for sound files; volts for a "
        "scope CSV).",
        unit="capture units",
        lo=0,
        lo_open=True,
    )
    trim_start_s: float | None = _opt(
        None, "Seconds to drop at the start.", unit="s", lo=0, default_text="the steady part"
    )
    trim_end_s: float | None = _opt(
        None, "Seconds to drop at the end.", unit="s", lo=0, default_text="the steady part"
    )


@dataclass(frozen=True)
class NtfPlotSpec(_Model):
    """A noise-shaping filter to plot (``ladderpack plot ntf``)."""

    shaping: str = _opt("designed", "Shaping filter.", choices=SHAPER_NAMES)
    rate_hz: float = _opt(44100.0, "Sample rate.", unit="Hz", lo=0, lo_open=True)
    bits: int = _opt(
        8, "Ladder width (sets a designed filter's default peak bound).", unit="bits", lo=1, hi=32
    )
    band_hz: float | None = _opt(
        None, "Audio band.", unit="Hz", lo=0, lo_open=True, default_text="20000 or Nyquist"
    )
    weighting: str = _opt("threshold", "Weighting of a designed filter.", choices=WEIGHTING_NAMES)
    ntf_order: int = _opt(8, "Order of a designed filter.", unit="order", lo=1, hi=16)
    force: bool = _opt(
        False, "Allow a published filter away from its design rate.", flag="--force/--no-force"
    )


@dataclass(frozen=True)
class ClipOptions(_Model):
    """How a clip is read: which channel, and in what blocks."""

    channel: int | None = _opt(
        None,
        "Use this channel (0-based) instead of a mono mix of all channels.",
        unit="index",
        lo=0,
        default_text="mix",
    )
    block_frames: int | None = _opt(
        None,
        "Process the clip in blocks of this many frames (bounded memory, same output).",
        unit="frames",
        lo=1,
        default_text="65536-frame blocks for clips over 8388608 samples, else whole",
        recorded=False,
    )

    def __post_init__(self) -> None:
        self._check_fields()


@dataclass(frozen=True)
class ToneSpec(_Model):
    """A test waveform (``ladderpack tone``; see :mod:`ladderpack.waves`)."""

    kind: str = _opt("sine", "Waveform kind.", choices=TONE_KINDS, cli=False)
    freq_hz: float = _opt(1000.0, "Frequency of periodic kinds.", unit="Hz", lo=0, lo_open=True)
    level_dbfs: float = _opt(-1.0, "Peak level.", unit="dBFS", hi=0)
    seconds: float = _opt(1.0, "Length.", unit="s", lo=0, lo_open=True, hi=86400)
    cycles: int | None = _opt(
        None,
        "Length as whole cycles of --freq-hz (instead of --seconds).",
        unit="cycles",
        lo=1,
        default_text="none",
    )
    band_limited: bool = _opt(
        True,
        "Square, sawtooth, triangle from harmonics below Nyquist, or naive.",
        flag="--band-limited/--naive",
    )
    tones: tuple[tuple[float, float], ...] | None = _opt(
        None,
        "Multitone components FREQ_HZ:LEVEL_DB,... (levels relative).",
        unit="Hz:dB list",
        default_text="none",
        metavar="LIST",
    )
    f_start_hz: float = _opt(20.0, "Exponential sweep start.", unit="Hz", lo=0, lo_open=True)
    f_end_hz: float | None = _opt(
        None,
        "Exponential sweep end.",
        unit="Hz",
        lo=0,
        lo_open=True,
        default_text="20000 or 0.45 x the rate",
    )
    dc_value: float = _opt(0.0, "DC level as a fraction of full scale.", unit="FS", lo=-1, hi=1)
    codes: tuple[int, ...] | None = _opt(
        None,
        "Staircase codes, e.g. 0-15,128.",
        unit="code list",
        default_text="every code",
        metavar="LIST",
    )
    dwell_ms: float = _opt(10.0, "Time on each staircase step.", unit="ms", lo=0, lo_open=True)
    coherent_record: int | None = _opt(
        None,
        "Record length of a coherent capture: the frequency moves to a cycle count "
        "co-prime with it.",
        unit="samples",
        lo=4,
        default_text="none",
    )

    def __post_init__(self) -> None:
        self._check_fields()
        if self.cycles is not None and _flag_given(self, "seconds"):
            raise OptionError("give seconds or cycles, not both", field="cycles")
        if self.tones is not None:
            for t in self.tones:
                if len(t) != 2 or not all(
                    isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v)
                    for v in t
                ):
                    raise OptionError(
                        f"expected (freq_hz, level_db) pairs, got {list(t)!r}", field="tones"
                    )
        if self.codes is not None:
            for c in self.codes:
                if isinstance(c, bool) or not isinstance(c, int) or c < 0:
                    raise OptionError(f"expected codes >= 0, got {c!r}", field="codes")


@dataclass(frozen=True)
class WaveTableSpec(_Model):
    """A wavetable with phase increments (``ladderpack table wave``)."""

    kind: str = _opt(
        "sine",
        "Waveform of the table (naive shapes).",
        choices=("sine", "square", "sawtooth", "triangle"),
    )
    table_bits: int = _opt(8, "Table of 2^k entries: k.", unit="bits", lo=2, hi=16)
    output: str = _opt(
        "ladder",
        "What the entries drive: ladder codes, i2s samples (signed) or pwm compare values "
        "(0..TOP+1 of the slice planned for the rate).",
        choices=outputs.wave_table_outputs(),
    )
    bits: int = _opt(
        None,  # type: ignore[arg-type]  # resolved by the output in __post_init__
        "Width of the entries: ladder codes 1..16, I2S samples 16, 24 or 32 (not for PWM).",
        unit="bits",
        default_text="8 for a ladder, 16 for I2S",
        group="width",
    )
    level_dbfs: float = _opt(-1.0, "Peak level.", unit="dBFS", hi=0)
    freqs_hz: tuple[float, ...] = _opt(
        (440.0,),
        "Frequencies to give phase increments for, comma-separated.",
        unit="Hz",
        metavar="LIST",
        default_text="440",
    )
    rate_hz: float = _opt(
        22050.0,
        "Requested stream rate (the clock plan's achieved rate is used).",
        unit="Hz",
        lo=0,
        lo_open=True,
    )
    target: str = _opt("rp2040", "Chip the table is for.", choices=TARGET_NAMES)
    sys_clock_hz: int | None = _opt(
        None,
        "System clock (at most what the PLL can make, 1.6 GHz).",
        unit="Hz",
        lo=1,
        hi=MAX_SYS_CLOCK_HZ,
        default_text="the target's: 125000000 on rp2040, 150000000 on rp2350",
    )
    rate_tolerance_ppm: float = _opt(
        100.0, "Rate error accepted for an integer divider.", unit="ppm", lo=0
    )

    def __post_init__(self) -> None:
        out = _check_groups(self)
        if out is not None and self.bits is None:
            object.__setattr__(self, "bits", outputs.get_output(self.output).default_bits())
        self._check_fields()
        if out is not None and _takes(out, "width"):
            outputs.get_output(self.output).check_bits(self.bits)
        if self.sys_clock_hz is None:
            object.__setattr__(self, "sys_clock_hz", get_target(self.target).sys_clock_hz)
        for f in self.freqs_hz:
            if isinstance(f, bool) or not isinstance(f, int | float) or not f > 0:
                raise OptionError(f"expected frequencies > 0 Hz, got {f!r}", field="freqs_hz")
        object.__setattr__(self, "freqs_hz", tuple(float(f) for f in self.freqs_hz))

    def to_dict(self) -> dict[str, Any]:
        """Recorded options; a ladder table records no output key (as before outputs)."""
        return _recorded(self, super().to_dict())


@dataclass(frozen=True)
class I2cDacTableSpec(_Model):
    """Update bytes of an I2C DAC for a list of voltages or one cycle of a waveform."""

    volts: tuple[float, ...] | None = _opt(
        None,
        "Output voltages, comma-separated (instead of --wave).",
        unit="V",
        metavar="LIST",
        default_text="none",
    )
    wave: str | None = _opt(
        None,
        "One cycle of a waveform, from 0 V to --vref-volts x --level (instead of --volts).",
        choices=("sine", "square", "sawtooth", "triangle"),
        default_text="none",
    )
    points: int = _opt(64, "--wave: points per cycle.", unit="points", lo=2, hi=65536)
    level: float = _opt(
        1.0, "--wave: peak-to-peak swing as a share of the DAC's range.", unit="FS", lo=0, hi=1
    )
    vref_volts: float = _opt(
        3.3, "The DAC's reference (an MCP4725's: its supply).", unit="V", lo=0.1, hi=60
    )
    dac_address: int = _opt(
        0x60,
        "7-bit I2C address of the DAC, decimal or 0x.. (0x60: an MCP4725 with A0 low).",
        unit="address",
        default_text="0x60",
    )
    dac_command: str = _opt(
        "fast",
        "fast (2 data bytes) or register (write DAC register, 3 bytes).",
        choices=("fast", "register"),
    )

    def __post_init__(self) -> None:
        self._check_fields()
        if (self.volts is None) == (self.wave is None):
            raise OptionError("give --volts or --wave (one of them)", field="volts")
        if self.volts is not None:
            if not self.volts:
                raise OptionError("expected at least one voltage", field="volts")
            # the DAC reaches 0 .. Vref x 4095/4096; a value within half a step of the top
            # still has a nearest code
            top = self.vref_volts * 4095.5 / 4096
            for v in self.volts:
                if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
                    raise OptionError(f"expected numbers of volts, got {v!r}", field="volts")
                if not 0 <= v <= top:
                    raise OptionError(
                        f"{v!r} V is outside what the DAC reaches with a {self.vref_volts:g} V "
                        f"reference: 0..{self.vref_volts * 4095 / 4096:.4f} V",
                        field="volts",
                    )
            object.__setattr__(self, "volts", tuple(float(v) for v in self.volts))


@dataclass(frozen=True)
class CorrectionTableSpec(_Model):
    """A correction table from a LevelSet (``ladderpack table correction``)."""

    levels: str = _opt("", "LevelSet JSON of the measured ladder.", unit="file", cli=False)
    in_bits: int | None = _opt(
        None,
        "Bits of the ideal input level.",
        unit="bits",
        lo=1,
        hi=16,
        default_text="the ladder's bits",
    )

    def __post_init__(self) -> None:
        self._check_fields()
        if not self.levels:
            raise OptionError("a correction table needs a levels file", field="levels")


def check_bits(bits: int) -> int:
    """Validate a code width; return it as int.

    Raises
    ------
    OptionError
        Unless `bits` is a whole number 1..16.
    """
    if isinstance(bits, bool) or int(bits) != bits or not 1 <= int(bits) <= 16:
        raise OptionError(f"must be a whole number 1..16, got {bits!r}", field="bits")
    return int(bits)


def manifest_types(cls: type) -> dict[str, tuple[type, ...]]:
    """TOML value types each option of `cls` accepts in a manifest."""
    out: dict[str, tuple[type, ...]] = {}
    for f, _info, hint in option_fields(cls):
        types, _nullable = _base_types(hint)
        out[f.name] = (str,) if f.name == "levels" else types
    return out


def from_mapping(
    cls: type[_M], values: Mapping[str, Any], *, file: str | None = None, where: str | None = None
) -> _M:
    """Build an option object from a mapping (a manifest table, a sidecar's options).

    Unknown keys and bad values raise one :class:`~ladderpack.errors.LadderpackError`
    naming `file` and the field (prefixed by `where`, e.g. ``asset 'bell'``).
    """
    known = {f.name for f, _i, _h in option_fields(cls)}
    for key in values:
        if key not in known:
            field_name = f"{where}.{key}" if where else key
            raise LadderpackError(
                f"unknown key; expected one of {', '.join(sorted(known))}",
                file=file,
                field=field_name,
            )
    try:
        return cls(**values)
    except LadderpackError as exc:
        named = ".".join(p for p in (where, exc.field) if p) or None
        raise type(exc)(exc.message, file=file or exc.file, field=named) from None
