"""Command-line interface: one module per command group.

Each command is a library call and the formatting of its report;
:mod:`ladderpack.cli.common` holds what they share (the group, options from the model,
the summary's lines, progress, errors, signals, ``main``).

The modules below register their commands on the one group, :data:`cli`.
"""

from __future__ import annotations

from ladderpack.cli import analysis, builds, clocks, demos, ladders, plots, streams, tables
from ladderpack.cli.common import cli, main, signals_as_interrupt

__all__ = ["cli", "main", "signals_as_interrupt"]

#: The modules imported for the commands they register on :data:`cli`.
COMMAND_MODULES = (streams, clocks, ladders, tables, builds, analysis, plots, demos)
