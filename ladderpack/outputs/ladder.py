"""The R-2R ladder output: N GPIOs written by one state machine's OUT, one code a tick.

Mono drives one ladder on N consecutive pins; stereo drives two N-bit ladders on 2N
consecutive pins, both written by the same OUT (:class:`~ladderpack.pack.StereoLadderLayout`),
so the channels change on the same clock.  The program and its cycle budget are
:mod:`ladderpack.pio`'s, the clock plan :mod:`ladderpack.clock`'s; the files are the
ladder emitters of :mod:`ladderpack.emit` and the ladder players.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Mapping
from typing import TYPE_CHECKING, Any

from ladderpack.errors import OptionError
from ladderpack.outputs.base import (
    ClockReport,
    Compressed,
    OutputPlan,
    PreviewModel,
    SummaryLines,
    WaveTable,
    cycles_divider,
    state_machine_blocks,
    uncompressed,
)
from ladderpack.targets import get_target

if TYPE_CHECKING:  # pragma: no cover - types only
    import numpy as np

    from ladderpack.asset import StreamAsset
    from ladderpack.emit import Content
    from ladderpack.options import StreamOptions, WaveTableSpec
    from ladderpack.pack import Packed

# The stages, the emitters and numpy are imported where they are used: the option model
# asks this object its checks for every option object a build makes, and a no-op build
# should not pay for numpy.

__all__ = ["OUTPUT", "LadderOutput"]


def _program_variant(opts: StreamOptions, spw: int) -> str:
    """The program: the user's, or loop for loops when it fits, else pull or autopull."""
    from ladderpack.pio import max_cycles, min_cycles

    if opts.program != "auto":
        return opts.program
    if opts.loop and max_cycles("loop", spw, opts.pins) >= min_cycles("loop"):
        return "loop"
    return "pull" if spw == 1 and opts.samples_per_word == 1 else "autopull"


def _lines(opts: StreamOptions) -> str:
    """The ladder's pins, for messages."""
    n = opts.bits
    if opts.stereo:
        return f"two {n}-bit ladders ({2 * n} pins)"
    return f"{'an' if n in (8, 11, 18) else 'a'} {n}-bit ladder"


class LadderOutput:
    """An R-2R ladder (or two, for stereo) on consecutive GPIOs."""

    name = "ladder"

    def default_bits(self) -> int:
        """8 bits: a byte a sample, four to a FIFO word."""
        return 8

    def check_bits(self, bits: int) -> None:
        """1..16 bits."""
        if not 1 <= bits <= 16:
            raise OptionError(
                f"must be a whole number 1..16 for a ladder, got {bits}", field="bits"
            )

    def check_options(self, opts: StreamOptions) -> None:
        """Width 1..16 (15 for two ladders), idle code, samples per word, pins."""
        self.check_bits(opts.bits)
        lv = opts.levels
        if not (lv is None or isinstance(lv, str | os.PathLike) or hasattr(lv, "volts")):
            raise OptionError(
                f"must be a LevelSet or the path of its JSON file, got {type(lv).__name__}",
                field="levels",
            )
        top = (1 << opts.bits) - 1
        if opts.idle_code > top:
            raise OptionError(
                f"must be 0..{top} for {opts.bits} bits, got {opts.idle_code}", field="idle_code"
            )
        if opts.samples_per_word is not None and opts.samples_per_word > opts.samples_per_word_max:
            raise OptionError(
                f"must be 1..{opts.samples_per_word_max} for {opts.bits}-bit samples in a "
                f"32-bit word, got {opts.samples_per_word}",
                field="samples_per_word",
            )
        if opts.stereo and opts.bits > 15:
            raise OptionError(
                f"two ladders of {opts.bits} bits need {2 * opts.bits} pins; a state machine "
                "writes at most 30 here (two 15-bit ladders)",
                field="bits",
            )
        if opts.compress == "adpcm":
            raise OptionError(
                "a ladder's codes are dithered, shaped and corrected on the host, which "
                "ADPCM's loss would undo: use --compress lossless (every code kept)",
                field="compress",
            )
        self.gpio_base(opts)

    def gpio_base(self, opts: StreamOptions) -> int:
        """The PIO GPIO base reaching the ladder's N (or 2N) pins."""
        return get_target(opts.target).gpio_window(
            opts.out_base, opts.pins, int(opts.gpio_count or 0), what=_lines(opts)
        )

    def recorded_options(self, opts: StreamOptions, recorded: dict[str, Any]) -> dict[str, Any]:
        """``stereo`` only for two ladders; a LevelSet by its file name."""
        recorded.pop("stereo", None)
        if opts.stereo:
            recorded["stereo"] = True
        lv = opts.levels
        if lv is not None:
            if isinstance(lv, str | os.PathLike):
                recorded["levels"] = os.path.basename(os.fspath(lv))
            else:
                recorded["levels"] = lv.notes.get("file", "LevelSet")
        return recorded

    def plan(self, opts: StreamOptions, ident: str) -> OutputPlan:
        """The word layout, the program that fits the rate, and its state machine."""
        import numpy as np

        from ladderpack.clock import plan_clock
        from ladderpack.pack import StereoLadderLayout, WordLayout
        from ladderpack.pio import ladder_program, max_cycles, min_cycles, state_machine_config

        layout = (StereoLadderLayout if opts.stereo else WordLayout)(
            opts.pins,
            shift_right=opts.shift == "right",
            per_word=opts.samples_per_word,
            msb_high=opts.pin_order == "msb-high",
            invert=opts.invert,
        )
        spw = layout.samples_per_word
        variant = _program_variant(opts, spw)
        clock = plan_clock(
            opts.rate_hz,
            sys_clock_hz=int(opts.sys_clock_hz or 0),
            tolerance_ppm=opts.rate_tolerance_ppm,
            min_cycles=min_cycles(variant),
            max_cycles=max_cycles(variant, spw, opts.pins),
        )
        program = ladder_program(
            opts.pins, clock.cycles_per_sample, variant=variant, samples_per_word=spw,
            name=f"{ident}_out",
        )  # fmt: skip
        sm = state_machine_config(
            program,
            layout,
            clock,
            out_base=opts.out_base,
            gpio_count=int(opts.gpio_count or 0),
            gpio_base=self.gpio_base(opts),
        )
        idle = opts.idle_code
        interleave, split = None, None
        if isinstance(layout, StereoLadderLayout):  # the frame of both idle codes
            idle = int(layout.frames(np.array([idle]), np.array([idle]))[0])
            stereo = layout
            interleave = lambda parts: stereo.frames(parts[0], parts[1])  # noqa: E731
            split = stereo.channels_of
        return OutputPlan(
            layout=layout,
            clock=clock,
            samples_per_word=spw,
            per_word=spw,
            idle_code=idle,
            channel_idle=opts.idle_code,
            code_bits=layout.bits,
            program=program,
            sm=sm,
            interleave=interleave,
            split=split,
        )

    def stats(self, plan: OutputPlan, opts: StreamOptions) -> dict[str, Any]:
        """Nothing beyond the stream's own stats."""
        return {}

    def variant(self, plan: OutputPlan) -> str:
        """The program's variant (autopull, pull, loop)."""
        assert plan.program is not None
        return plan.program.variant

    def compress(self, packed: Packed, opts: StreamOptions) -> Compressed:
        """``--compress lossless``: the codes of every slot, compressed.

        The last word's padding too, so the players' packing gives the words exactly; two
        ladders' codes alternate, left and right. Blocks of whole words, no longer than a
        MicroPython player's buffer, so a block decodes on its own into words the state
        machine takes.
        """
        if opts.compress != "lossless":
            return uncompressed(packed)
        import numpy as np

        from ladderpack.compress import encode_lossless
        from ladderpack.pack import StereoLadderLayout, unpack

        lay = packed.layout
        slots = unpack(packed.words, lay).codes.astype(np.int64)
        spw = lay.samples_per_word
        block_words = max(1, min(1024 // spw, int(opts.chunk_words)))
        if isinstance(lay, StereoLadderLayout):  # frames left | right << N
            n = lay.channel_bits
            pairs = np.column_stack([slots & ((1 << n) - 1), slots >> n]).ravel()
            coded = encode_lossless(pairs, n, block_samples=2 * block_words * spw, channels=2)
        else:
            coded = encode_lossless(slots, lay.bits, block_samples=block_words * spw)
        return Compressed(coded, None, packed)

    def summary(self, asset: StreamAsset) -> dict[str, Any]:
        """``stereo`` for two ladders."""
        return {"stereo": True} if asset.options.get("stereo") else {}

    def summary_lines(self, summary: Mapping[str, Any]) -> SummaryLines:
        """N-bit, two ladders for stereo; cycles per sample."""
        kind = f"{summary['bits']}-bit" + (
            ", two ladders (stereo)" if summary.get("stereo") else ""
        )
        return SummaryLines(kind, "sample", cycles_divider(summary, "sample"))

    def sidecar_blocks(self, asset: StreamAsset) -> dict[str, Any]:
        """The program and the state machine's registers."""
        return state_machine_blocks(asset)

    def files(self, asset: StreamAsset, *, embed: bool) -> dict[str, Content]:
        """Words, C header and source, MicroPython module, PIO source, the ladder player."""
        from ladderpack.emit import binary, c, micropython, pioasm, player_stereo, templates
        from ladderpack.pack import StereoLadderLayout

        n = asset.name
        player = (
            player_stereo.files()
            if isinstance(asset.packed.layout, StereoLadderLayout)
            else templates.player("ladderpack_player")
        )
        ll = asset.lossless
        return {  # a compressed stream's .bin is its compressed form, read block by block
            f"{n}.bin": binary.render_chunks(asset.packed) if ll is None else ll.to_bytes(),
            f"{n}.h": c.render_header(asset).encode(),
            f"{n}.c": c.render_source_chunks(asset),
            f"{n}.py": micropython.render(asset, embed=embed and ll is None).encode(),
            f"{n}.pio": pioasm.render(asset).encode(),
            **player,
        }

    def preview_model(self, layout: Mapping[str, Any], sidecar: Mapping[str, Any]) -> PreviewModel:
        """The ladder's word layout from the sidecar; codes drive a ladder's levels."""
        import numpy as np

        from ladderpack.pack import StereoLadderLayout, WordLayout, unpack

        stereo = layout.get("channels") == "stereo"
        bits, spw = layout["bits"], layout["samples_per_word"]
        hi = 30 if stereo else 16
        for key, v, lo, top in (
            ("layout.bits", bits, 1, hi),
            ("layout.samples_per_word", spw, 1, 32),
        ):
            if not isinstance(v, int) or isinstance(v, bool) or not lo <= v <= top:
                raise ValueError(f"{key}: expected a whole number {lo}..{top}, got {v!r}")
        if layout["shift"] not in ("left", "right"):
            raise ValueError(f"layout.shift: expected 'left' or 'right', got {layout['shift']!r}")
        lay = (StereoLadderLayout if stereo else WordLayout)(
            bits,
            shift_right=layout["shift"] == "right",
            per_word=spw,
            msb_high=layout.get("pin_order", "msb-high") == "msb-high",
            invert=bool(layout.get("invert", False)),
        )
        code_bits = bits // 2 if stereo else bits

        def decode(words: np.ndarray, count: int, channel: int) -> np.ndarray:
            codes = unpack(words, lay, count).codes
            if isinstance(lay, StereoLadderLayout):
                return np.asarray(lay.channels_of(codes)[:, channel])
            return np.asarray(codes)

        def stored(data: bytes, comp: Mapping[str, Any]) -> np.ndarray:
            from ladderpack.compress import decode_stored
            from ladderpack.pack import pack
            from ladderpack.quantize import Codes

            codes = decode_stored(data, comp, bits=code_bits)
            if stereo:  # left and right alternate: the frames left | right << N
                codes = codes[0::2] | (codes[1::2] << code_bits)
            codes = codes.astype(np.uint32 if bits > 16 else np.uint16)
            return pack(Codes(codes, bits), lay).words

        return PreviewModel(
            lay,
            code_bits,
            2 if stereo else 1,
            1 << code_bits,
            (1 << code_bits) / 2,
            True,
            decode,
            stored,
        )

    def wave_table(self, spec: WaveTableSpec) -> WaveTable:
        """Unsigned N-bit codes at the ladder's clock."""
        from ladderpack.clock import plan_clock
        from ladderpack.waves import wavetable

        plan = plan_clock(
            spec.rate_hz,
            sys_clock_hz=int(spec.sys_clock_hz or 0),
            tolerance_ppm=spec.rate_tolerance_ppm,
        )
        tab = wavetable(spec.kind, spec.table_bits, bits=spec.bits, level_dbfs=spec.level_dbfs)
        return WaveTable(float(plan.achieved_rate_hz), tab, spec.bits)

    def clock_report(
        self, rate_hz: float, opts: StreamOptions, settings: Mapping[str, Any]
    ) -> ClockReport:
        """The state machine's divider and cycles per sample."""
        from ladderpack.clock import plan_clock

        plan = plan_clock(
            rate_hz, sys_clock_hz=int(opts.sys_clock_hz or 0), tolerance_ppm=opts.rate_tolerance_ppm
        )
        d = plan.to_dict()
        kind = "fractional (1 system clock of jitter)" if plan.fractional else "integer (no jitter)"
        return ClockReport(
            d,
            [
                f"requested  {d['requested_rate_hz']:g} Hz at {plan.sys_clock_hz} Hz system clock",
                f"achieved   {float(plan.achieved_rate_hz):.6f} Hz ({plan.error_ppm:+.3f} ppm)",
                f"divider    {plan.div_int} + {plan.div_frac}/256, {kind}",
                f"cycles     {plan.cycles_per_sample} per sample",
                f"CLKDIV     0x{plan.clkdiv_register:08X}",
            ],
        )

    def clock_planner(self, rate_hz: float, settings: Mapping[str, Any]) -> Callable[[int], Any]:
        """The state machine's divider x 1..32 cycles a sample."""
        from ladderpack.clock import plan_clock

        return lambda f: plan_clock(rate_hz, sys_clock_hz=f, tolerance_ppm=1e9)

    def clock_row(self, plan: Any) -> tuple[dict[str, Any], str]:
        """Divider and cycles per sample."""
        row = {"div_int": plan.div_int, "div_frac": plan.div_frac, "cycles": plan.cycles_per_sample}
        return row, f"divider {plan.div_int}, {plan.cycles_per_sample} cycle(s) per sample"


#: The registered object.
OUTPUT = LadderOutput()
