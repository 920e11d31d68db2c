"""``demo``: the demo scenario's bundles."""

from __future__ import annotations

import os

import click

from ladderpack.cli.common import (
    _print_summary,
    cli,
)
from ladderpack.reading import json_text


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
