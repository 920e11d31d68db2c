"""``build``: a manifest's assets, rebuilt when their inputs change."""

from __future__ import annotations

import sys

import click

from ladderpack.cli.common import (
    _count_progress,
    cli,
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
