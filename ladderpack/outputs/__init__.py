"""The output systems: how samples leave the chip, one module and one object each.

Every output system (an R-2R ladder, an I2S DAC, a PWM slice, an I2C DAC) is one
module in this package defining one object, ``OUTPUT``, that implements
:class:`ladderpack.outputs.base.Output`: its plan (clock, layout, program or peripheral
set-up), its packing, its files, its sidecar block, its summary and its preview model.
The pipeline (:mod:`ladderpack.stream`, :mod:`ladderpack.bundle`,
:mod:`ladderpack.preview`, the command line) asks the registry for the object by the
stream's ``output`` option and never branches on the output's kind itself.

:data:`REGISTRY` is the list of output systems.  It names each module without importing
it, so the command line can list the outputs (``--output``'s choices) before numpy is
loaded; :func:`get_output` imports a module the first time its object is asked for.

Adding an output: write ``ladderpack/outputs/<name>.py`` with its ``OUTPUT`` object
(docs/architecture.md, "How to add an output"), and add one line here.

Examples
--------
>>> names()
('ladder', 'i2s', 'pwm', 'i2c-dac', 'spi-dac')
>>> get_output("i2s").name
'i2s'
"""

from __future__ import annotations

import importlib
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from ladderpack.errors import OptionError

if TYPE_CHECKING:  # pragma: no cover - types only
    from ladderpack.outputs.base import Output

__all__ = [
    "REGISTRY",
    "REGISTRY_BY_NAME",
    "Entry",
    "entry",
    "get_output",
    "names",
    "takers",
    "wave_table_outputs",
]


@dataclass(frozen=True)
class OwnOption:
    """An option only one output takes, declared in its registry line.

    :class:`ladderpack.options.StreamOptions` gains one field per own option of every
    registered output (group: the output's name), so the command line, the manifest keys,
    ``--help``, the records and the README rows follow from it like every other option.

    Attributes
    ----------
    name : str
        The field's name (``--name-with-dashes`` on the command line).
    kind : type
        The value's type: ``int``, ``float``, ``str`` or ``bool``.
    default : object
        The default (None: not given; `default_text` says what that means).
    help : str
        One line for ``--help`` and the README.
    unit, choices, lo, hi, default_text, flag :
        As :class:`ladderpack.options.OptionInfo`'s.
    """

    name: str
    kind: type
    default: Any
    help: str
    unit: str = ""
    choices: tuple[str, ...] | None = None
    lo: float | None = None
    hi: float | None = None
    default_text: str | None = None
    flag: str | None = None


@dataclass(frozen=True)
class Entry:
    """One line of the registry: what is known of an output before its module loads.

    Attributes
    ----------
    name : str
        The output's name on the command line, in manifests and sidecars.
    module : str
        The module defining its ``OUTPUT`` object.
    summary : str
        One phrase for ``--output``'s help: what the output drives, on which pins.
    takes : frozenset of str
        The option groups it takes besides the options every output takes (each
        stream option names its group in its metadata: ``OptionInfo.group``).
    wave_tables : bool
        Whether ``table wave`` makes tables in its codes.
    named_in_records : bool
        Whether sidecars and fingerprints record the ``output`` key (a ladder's do not:
        its records are those of the versions before other outputs existed).
    renamed : mapping of str to str
        Old option names this output still accepts, for one release, and the names that
        replaced them (a deprecation warning says so).
    options : tuple of OwnOption
        Options only this output takes (their group is the output's name).
    players : mapping of str to str
        The stems of the C player files its bundles share (``<stem>.h``, ``<stem>.c``),
        and what each is: every stem is a reserved asset name
        (:data:`ladderpack.emit.names.PLAYER_FILES`).

    Notes
    -----
    The naming scheme: an output's name on the command line, in manifests and sidecars'
    ``output`` is :attr:`name` (``i2c-dac``); its sidecar block and summary key are the
    name with underscores (``i2c_dac``); its C player files and C prefix take its short
    name, the name less ``-dac`` (``ladderpack_i2c.c``, ``lp_i2c_*``, ``<NAME>_I2C_INIT``),
    and the two-ladder player is ``stereo`` (``lp_stereo_*``).  ``tests/test_registry.py``
    holds every output to it.
    """

    name: str
    module: str
    summary: str
    takes: frozenset[str]
    wave_tables: bool = True
    named_in_records: bool = True
    renamed: Mapping[str, str] = field(default_factory=dict)
    options: tuple[OwnOption, ...] = ()
    players: Mapping[str, str] = field(default_factory=dict)


#: The output systems, in the order ``--help`` lists them.
REGISTRY: tuple[Entry, ...] = (
    Entry(
        "ladder",
        "ladderpack.outputs.ladder",
        "an R-2R ladder on N GPIOs (two ladders for stereo)",
        frozenset({"width", "ladder", "level", "stereo", "compress"}),
        named_in_records=False,
        players={
            "ladderpack_player": "the ladder's C player",
            "ladderpack_stereo": "the two-ladder C player",
        },
    ),
    Entry(
        "i2s",
        "ladderpack.outputs.i2s",
        "an I2S DAC or amplifier on three GPIOs",
        frozenset({"width", "stereo", "serial", "i2s", "compress"}),
        renamed={"out_base": "data_pin", "clock_pin": "bit_clock_pin"},
        players={"ladderpack_i2s": "the I2S C player"},
    ),
    Entry(
        "pwm",
        "ladderpack.outputs.pwm",
        "a PWM slice on one GPIO, through an RC filter",
        frozenset({"level", "stereo", "pwm", "compress"}),
        renamed={"out_base": "pwm_pin"},
        players={"ladderpack_pwm": "the PWM C player"},
    ),
    Entry(
        "i2c-dac",
        "ladderpack.outputs.i2c_dac",
        "a 12-bit I2C DAC, one bus write per sample, on two GPIOs",
        frozenset({"width", "level", "i2c", "compress"}),
        wave_tables=False,
        renamed={"out_base": "sda_pin", "clock_pin": "scl_pin"},
        players={"ladderpack_i2c": "the I2C DAC C player"},
    ),
    Entry(
        "spi-dac",
        "ladderpack.outputs.spi_dac",
        "a 12-bit SPI DAC (channel A, or A and B for stereo) written each sample, on three "
        "GPIOs (four with a latch)",
        frozenset({"width", "level", "stereo", "serial", "compress"}),
        wave_tables=False,
        players={"ladderpack_spi": "the SPI DAC C player"},
        options=(
            OwnOption(
                "sck_hz", int, 10_000_000, "SPI DAC only: highest SCK frequency.", unit="Hz", lo=1
            ),
            OwnOption(
                "dac_gain",
                int,
                1,
                "SPI DAC only: output gain, 1 or 2 (the frame's GA bit).",
                unit="x",
                lo=1,
                hi=2,
            ),
            OwnOption(
                "vref_buffer",
                bool,
                False,
                "SPI DAC only: set the frame's BUF bit (VREF input buffered).",
                flag="--vref-buffer/--no-vref-buffer",
            ),
            OwnOption(
                "latch",
                bool,
                False,
                "SPI DAC only: drive LDAC (on the GPIO after chip select) once a sample, "
                "after the frames, so both channels change together; without it, tie LDAC "
                "low.",
                flag="--latch/--no-latch",
            ),
        ),
    ),
)

#: The registry by name.
REGISTRY_BY_NAME = {e.name: e for e in REGISTRY}


def short_name(name: str) -> str:
    """An output's short name (its files' and C prefix's): the name less ``-dac``.

    Examples
    --------
    >>> short_name("i2c-dac"), short_name("ladder")
    ('i2c', 'ladder')
    """
    return name.removesuffix("-dac")


def names() -> tuple[str, ...]:
    """The registered outputs' names, in registry order."""
    return tuple(e.name for e in REGISTRY)


def wave_table_outputs() -> tuple[str, ...]:
    """The outputs ``table wave`` makes tables for."""
    return tuple(e.name for e in REGISTRY if e.wave_tables)


def takers(group: str) -> tuple[str, ...]:
    """The outputs that take the options of `group`, in registry order.

    An output takes the groups its entry lists and its own (its name).
    """
    return tuple(e.name for e in REGISTRY if group in e.takes or group == e.name)


def entry(name: str) -> Entry:
    """The registry entry of output `name`.

    Raises
    ------
    OptionError
        For a name no output has (``field="output"``).
    """
    found = REGISTRY_BY_NAME.get(name)
    if found is None:
        raise OptionError(f"must be one of {', '.join(names())}, got {name!r}", field="output")
    return found


def get_output(name: str) -> Output:
    """The object of output `name` (its module is imported the first time).

    Raises
    ------
    OptionError
        For a name no output has.
    """
    out: Output = importlib.import_module(entry(name).module).OUTPUT
    return out
