"""What every output system provides: the :class:`Output` protocol and its plan.

An output object (``OUTPUT`` in each module of :mod:`ladderpack.outputs`) answers the
pipeline's questions about one output system; the pipeline never asks which output it
is.  The stages call it in this order:

1. :meth:`Output.check_options` from :class:`~ladderpack.options.StreamOptions`, after
   the checks every output shares (which options apply to which output is declared once,
   on each option's metadata, as a group the registry entry lists);
2. :meth:`Output.plan` from :func:`ladderpack.stream.plan_stream`: the clock, the word
   layout, the program and state machine (or peripheral set-up), as an :class:`OutputPlan`;
3. :meth:`Output.stats` from :func:`ladderpack.stream.finish`: the sidecar's block;
4. :meth:`Output.files` from :mod:`ladderpack.bundle`: every file but the sidecar;
5. :meth:`Output.summary` and :meth:`Output.summary_lines` for the summary the command
   line prints (and ``--json``);
6. :meth:`Output.preview_model` from :mod:`ladderpack.preview`: how the bundle's words
   become one channel's output level.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from fractions import Fraction
from typing import TYPE_CHECKING, Any, Protocol

if TYPE_CHECKING:  # pragma: no cover - types only (the module stays light to import)
    import numpy as np

    from ladderpack.asset import StreamAsset
    from ladderpack.compress import AdpcmStream, LosslessStream
    from ladderpack.emit import Content
    from ladderpack.options import StreamOptions, WaveTableSpec
    from ladderpack.pack import Packed
    from ladderpack.pio import Program, StateMachineConfig
    from ladderpack.quantize import CodeScale

__all__ = [
    "ClockReport",
    "Compressed",
    "Output",
    "OutputPlan",
    "PreviewModel",
    "SummaryLines",
    "WaveTable",
    "uncompressed",
]


@dataclass(frozen=True)
class OutputPlan:
    """An output's part of a stream plan: how the stream's codes reach the pins.

    Attributes
    ----------
    layout : object
        The word layout: ``words_for(samples)``, ``to_dict()``, and either packing into
        words by :func:`ladderpack.pack.pack` (`whole_frames` False) or
        ``pack_codes(codes)`` / ``unpack_words(words)`` of whole frames.
    clock : object
        The rate plan (a :class:`~ladderpack.clock.ClockPlan`, or a PWM slice's plan):
        ``achieved_rate_hz``, ``requested_rate_hz``, ``error_ppm``, ``to_dict()``.
    samples_per_word : int
        Frames per word for whole-word lengths (loops round to it).
    per_word : int or Fraction
        Samples a FIFO word carries, for the flash and RAM budget.
    idle_code : int
        The code held before and after the stream (for two ladders, the frame of both).
    channel_idle : int
        One channel's idle code (the ramps are made per channel).
    code_bits : int
        Width of the codes the stream is quantised to and recorded with.
    program, sm : Program and StateMachineConfig, optional
        The state machine's program and registers (None for a PWM slice).
    scale : CodeScale, optional
        The code scale when it is not the N-bit one (a PWM slice's TOP + 2 levels).
    setup : object, optional
        The output's own plan besides the clock (a PWM slice's pin and pacing, an I2C
        bus writer's timing), for its stats, files and summary.
    ramps : bool
        Whether the stream ramps between the idle code and mid-scale at its ends (an
        I2S line idles at silence: its fades are the whole way in and out).
    whole_frames : bool
        Whether every frame is whole words (``layout.pack_codes``), rather than
        samples packed several to a word.
    interleave : callable, optional
        Makes the stream's codes of its channels' codes (default: frame by frame).
    split : callable, optional
        The inverse for the step tracker: stream codes -> (frames, channels).
    """

    layout: Any
    clock: Any
    samples_per_word: int
    per_word: int | Fraction
    idle_code: int
    channel_idle: int
    code_bits: int
    program: Program | None = None
    sm: StateMachineConfig | None = None
    scale: CodeScale | None = None
    setup: Any = None
    ramps: bool = True
    whole_frames: bool = False
    interleave: Callable[[list[np.ndarray]], np.ndarray] | None = None
    split: Callable[[np.ndarray], np.ndarray] | None = None


@dataclass(frozen=True)
class SummaryLines:
    """How the command line words an output's summary.

    Attributes
    ----------
    kind : str
        What plays, after the duration ("8-bit", "16-bit, stereo I2S", ...).
    unit : str
        The stream's count word: "sample", "frame" or "update".
    divider : str
        The text after the divider on the ``divider`` line.
    lines : list of (str, str)
        Extra lines: a short label and its text.
    """

    kind: str
    unit: str
    divider: str
    lines: list[tuple[str, str]] = field(default_factory=list)


@dataclass(frozen=True)
class PreviewModel:
    """How a bundle's words become one channel's level, for ``preview``.

    Attributes
    ----------
    layout : object
        The word layout rebuilt from the sidecar.
    code_bits : int
        Width of one channel's codes.
    channels : int
        Channels in the stream.
    levels : int
        Distinct codes of one channel (2**bits, or a PWM slice's TOP + 2).
    half : float
        The code of zero output, about which codes are scaled to -1..1 on an ideal DAC.
    ladder : bool
        Whether the codes drive a ladder (a LevelSet may give the real levels).
    decode : callable
        ``(words, sample_count, channel) -> codes`` of that channel.
    stored : callable or None
        ``(data, compression) -> words``: the words a compressed ``.bin`` (its bytes)
        decodes to, given the sidecar's ``stats.compression``; None for an output that
        stores only words.
    """

    layout: Any
    code_bits: int
    channels: int
    levels: int
    half: float
    ladder: bool
    decode: Callable[[np.ndarray, int, int], np.ndarray]
    stored: Callable[[bytes, Mapping[str, Any]], np.ndarray] | None = None


@dataclass(frozen=True)
class WaveTable:
    """A wavetable in an output's codes, for ``table wave``.

    Attributes
    ----------
    rate_hz : float
        The achieved sample rate the phase increments are planned for, Hz.
    table : numpy.ndarray
        The entries, in the output's codes.
    bits : int
        Width of an entry.
    coding : str, optional
        What the entries are, for the files' comments (default: N-bit ladder codes).
    signed : bool
        Whether the entries are two's complement (I2S samples).
    """

    rate_hz: float
    table: np.ndarray
    bits: int
    coding: str | None = None
    signed: bool = False


@dataclass(frozen=True)
class ClockReport:
    """An output's clock plan for ``ladderpack clock``: the plan as data, and as lines.

    Attributes
    ----------
    data : dict
        The plan (``--json``).
    lines : list of str
        The plan for a person, one line each.
    """

    data: dict[str, Any]
    lines: list[str]


@dataclass(frozen=True)
class Compressed:
    """A stream as the output stores it (``--compress``).

    Attributes
    ----------
    lossless : LosslessStream or None
        The codes of every slot, compressed without loss.
    adpcm : AdpcmStream or None
        The samples as IMA ADPCM.
    packed : Packed
        The words the players send: the stream's own, or what a lossy form decodes to.
    sinad_db : float
        A lossy form's SINAD against the uncompressed samples, dB (inf when lossless).
    """

    lossless: LosslessStream | None
    adpcm: AdpcmStream | None
    packed: Packed
    sinad_db: float = float("inf")

    @property
    def stored(self) -> LosslessStream | AdpcmStream | None:
        """The form the bundle stores, if compressed."""
        return self.lossless if self.lossless is not None else self.adpcm


def uncompressed(packed: Packed) -> Compressed:
    """The stream stored as its words (an output that takes no ``compress`` option)."""
    return Compressed(None, None, packed)


class Output(Protocol):
    """One output system: the object each module of :mod:`ladderpack.outputs` registers."""

    #: The output's name (the registry's).
    name: str

    def check_options(self, opts: StreamOptions) -> None:
        """Refuse options this output cannot play (raise :class:`OptionError`)."""

    def default_bits(self) -> int:
        """The sample width when none is given."""

    def check_bits(self, bits: int) -> None:
        """Refuse a sample width the output cannot play (outputs taking ``width``)."""

    def recorded_options(self, opts: StreamOptions, recorded: dict[str, Any]) -> dict[str, Any]:
        """The options recorded in the sidecar and fingerprint, from the generic record."""

    def gpio_base(self, opts: StreamOptions) -> int:
        """The PIO block's GPIO base that reaches the output's pins."""

    def plan(self, opts: StreamOptions, ident: str) -> OutputPlan:
        """The output's plan for a stream of `opts` (asset identifier `ident`)."""

    def stats(self, plan: OutputPlan, opts: StreamOptions) -> dict[str, Any]:
        """The sidecar's stats of this output (a ``warnings`` list is merged)."""

    def variant(self, plan: OutputPlan) -> str:
        """The program variant shown in the summary and recorded in the stats."""

    def compress(self, packed: Packed, opts: StreamOptions) -> Compressed:
        """The stream in the form ``--compress`` asks for (:func:`uncompressed` for none)."""

    def summary(self, asset: StreamAsset) -> dict[str, Any]:
        """The output's own keys of :meth:`StreamAsset.summary`."""

    def summary_lines(self, summary: Mapping[str, Any]) -> SummaryLines:
        """How the command line words the summary."""

    def sidecar_blocks(self, asset: StreamAsset) -> dict[str, Any]:
        """The sidecar's program or peripheral blocks."""

    def files(self, asset: StreamAsset, *, embed: bool) -> dict[str, Content]:
        """Every file of the bundle but the sidecar (large ones as chunks)."""

    def preview_model(self, layout: Mapping[str, Any], sidecar: Mapping[str, Any]) -> PreviewModel:
        """How to decode a bundle of this output (`layout` is the sidecar's)."""

    def wave_table(self, spec: WaveTableSpec) -> WaveTable:
        """A wavetable in this output's codes (outputs the registry marks as having them)."""

    def clock_report(
        self, rate_hz: float, opts: StreamOptions, settings: Mapping[str, Any]
    ) -> ClockReport:
        """The clock plan at `rate_hz` (`settings`: the clock command's output options)."""

    def clock_planner(self, rate_hz: float, settings: Mapping[str, Any]) -> Callable[[int], Any]:
        """``planner(sys_clock_hz) -> plan`` for :func:`ladderpack.clock.find_sys_clocks`."""

    def clock_row(self, plan: Any) -> tuple[dict[str, Any], str]:
        """A found clock's divider fields (``--json``) and their text."""


def state_machine_blocks(asset: StreamAsset, **program_extra: Any) -> dict[str, Any]:
    """The sidecar's ``program`` and ``state_machine`` blocks of a state-machine output."""
    program, sm = asset.pio_program, asset.state_machine
    return {
        "program": {
            "name": program.name,
            "source": program.source(),
            "words": list(program.words),
            "wrap_target": program.wrap_target,
            "wrap": program.wrap,
            **program_extra,
        },
        "state_machine": sm.to_dict(),
    }


def jitter_text(summary: Mapping[str, Any]) -> str:
    """How the divider's kind reads on the summary's divider line."""
    return (
        "fractional, 1 system clock of jitter"
        if summary["fractional_divider"]
        else "integer, no jitter"
    )


def cycles_divider(summary: Mapping[str, Any], unit: str) -> str:
    """The divider line of a state-machine output: the divider and cycles per `unit`."""
    return (
        f"{summary['divider']} ({jitter_text(summary)}), "
        f"{summary['cycles_per_sample']} cycle(s) per {unit}"
    )
