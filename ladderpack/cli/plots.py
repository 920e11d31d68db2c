"""``plot``: a LevelSet's levels and INL, a designed shaper's noise transfer."""

from __future__ import annotations

import os
from typing import Any

import click

from ladderpack.cli.common import (
    _model_options_lazy,
    _write_bytes,
    cli,
    model_values,
)


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
@_model_options_lazy("NtfPlotSpec")
@click.option(
    "-o", "--out", "out_path", default="ntf.png", show_default=True, help="PNG file to write."
)
def plot_ntf(out_path: str, **values: Any) -> None:
    """Noise transfer of a shaping filter at a sample rate."""
    from ladderpack.options import NtfPlotSpec
    from ladderpack.plots import ntf_png
    from ladderpack.shaping import plotted_shaper

    spec = NtfPlotSpec(**model_values(NtfPlotSpec, values))
    shaper, band = plotted_shaper(spec)
    click.echo(f"wrote {_write_bytes(out_path, ntf_png(shaper, spec.rate_hz, band_hz=band))}")
