"""``plot``: a LevelSet's levels and INL, a designed shaper's noise transfer."""

from __future__ import annotations

import os

import click

from ladderpack.cli.common import (
    _write_bytes,
    cli,
)
from ladderpack.defaults import (
    SHAPER_NAMES,
    WEIGHTING_NAMES,
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
