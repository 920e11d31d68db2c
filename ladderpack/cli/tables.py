"""``table``: correction tables, I2C DAC update tables, wavetables."""

from __future__ import annotations

from typing import Any

import click

from ladderpack.cli.common import (
    _model_options_lazy,
    cli,
    model_values,
)
from ladderpack.reading import json_text


@cli.group()
def table() -> None:
    """Lookup tables for firmware."""


@table.command("correction")
@click.argument("levels_path", metavar="LEVELS", type=click.Path(dir_okay=False))
@_model_options_lazy("CorrectionTableSpec")
@click.option(
    "-o",
    "--out-dir",
    default="ladderpack_out",
    show_default=True,
    help="Folder the table files go to.",
)
@click.option(
    "--name", default="correction", show_default=True, help="Table name for files and symbols."
)
@click.option("--json", "as_json", is_flag=True, help="Print a summary as JSON.")
def table_correction(
    levels_path: str, out_dir: str, name: str, as_json: bool, **values: Any
) -> None:
    """Map each ideal level to the code whose measured level (LEVELS) is nearest.

    Written as C and MicroPython arrays, for samples the firmware computes at run time.
    """
    from ladderpack.emit import write_files
    from ladderpack.options import CorrectionTableSpec
    from ladderpack.tables import correction_table_files

    spec = CorrectionTableSpec(levels=levels_path, **model_values(CorrectionTableSpec, values))
    res = correction_table_files(name, spec)
    written = write_files(res.files, out_dir)
    summary = {
        "name": res.name,
        "in_bits": res.in_bits,
        "out_bits": res.bits,
        "entries": res.entries,
        "distinct_codes": res.distinct_codes,
        "files": written,
    }
    if as_json:
        click.echo(json_text(summary))
        return
    click.echo(
        f"{res.name}: {res.in_bits}-bit ideal level -> {res.bits}-bit code, {res.entries} "
        f"entries, {res.distinct_codes} distinct codes used"
    )
    for path in written:
        click.echo(f"  wrote    {path}")


@table.command("i2c-dac")
@_model_options_lazy("I2cDacTableSpec")
@click.option(
    "-o",
    "--out-dir",
    default="ladderpack_out",
    show_default=True,
    help="Folder the table files go to.",
)
@click.option(
    "--name", default="dac_levels", show_default=True, help="Table name for files and symbols."
)
@click.option("--json", "as_json", is_flag=True, help="Print a summary as JSON.")
def table_i2c_dac(out_dir: str, name: str, as_json: bool, **values: Any) -> None:
    """The bytes of a 12-bit I2C DAC's updates for a list of voltages or a waveform.

    Written as C and MicroPython arrays for firmware that writes them itself.
    """
    import numpy as np

    from ladderpack.emit import write_files
    from ladderpack.options import I2cDacTableSpec
    from ladderpack.outputs.i2c_dac import (
        BUS_SPEEDS_HZ,
        I2cDacFormat,
        codes_for_volts,
        max_update_rate_hz,
    )
    from ladderpack.tables import i2c_dac_table_files

    spec = I2cDacTableSpec(**model_values(I2cDacTableSpec, values))
    res = i2c_dac_table_files(name, spec)
    written = write_files(res.files, out_dir)
    fmt = I2cDacFormat(spec.dac_address, spec.dac_command)
    rates = {b: float(max_update_rate_hz(b, fmt)) for b in BUS_SPEEDS_HZ}
    summary = {
        "name": res.name,
        "updates": res.entries,
        "distinct_codes": res.distinct_codes,
        "address": spec.dac_address,
        "command": spec.dac_command,
        "bytes_per_update": fmt.bytes_per_update,
        "max_update_rate_hz": rates,
        "files": written,
    }
    entries: list[dict[str, Any]] = []
    if spec.volts is not None:
        codes = codes_for_volts(np.array(spec.volts), spec.vref_volts)
        entries = [
            {
                "volts": v,
                "code": int(c),
                "actual_volts": spec.vref_volts * int(c) / 4096,
                "error_volts": spec.vref_volts * int(c) / 4096 - v,
            }
            for v, c in zip(spec.volts, codes, strict=True)
        ]
        summary["entries"] = entries
    if as_json:
        click.echo(json_text(summary))
        return
    click.echo(
        f"{res.name}: {res.entries} updates of a 12-bit I2C DAC at 0x{spec.dac_address:02X} "
        f"({spec.dac_command} write, {fmt.bytes_per_update} bytes on the bus each)"
    )
    for e in entries:
        click.echo(
            f"  {e['volts']:.4f} V -> code {e['code']:4d} = {e['actual_volts']:.4f} V "
            f"({1000 * e['error_volts']:+.2f} mV)"
        )
    click.echo(
        "  at most " + ", ".join(f"{r:.0f} updates/s at {b // 1000} kHz" for b, r in rates.items())
    )
    click.echo("  bus: pull-ups on SDA and SCL to the DAC's supply; 3.3 V logic on this board")
    for path in written:
        click.echo(f"  wrote    {path}")


@table.command("wave")
@_model_options_lazy("WaveTableSpec")
@click.option(
    "-o",
    "--out-dir",
    default="ladderpack_out",
    show_default=True,
    help="Folder the table files go to.",
)
@click.option(
    "--name", default="wavetable", show_default=True, help="Table name for files and symbols."
)
@click.option("--json", "as_json", is_flag=True, help="Print a summary as JSON.")
def table_wave(out_dir: str, name: str, as_json: bool, **values: Any) -> None:
    """Make a 2^k-entry wavetable in ladder codes plus phase increments.

    The 32-bit phase-accumulator increments and the table are written as C and
    MicroPython arrays, for firmware that synthesises at run time.
    """
    from ladderpack.emit import write_files
    from ladderpack.options import WaveTableSpec
    from ladderpack.tables import wave_table_files

    spec = WaveTableSpec(**model_values(WaveTableSpec, values))
    res = wave_table_files(name, spec)
    written = write_files(res.files, out_dir)
    summary = {
        "name": res.name,
        "entries": res.entries,
        "bits": res.bits,
        "rate_hz": res.rate_hz,
        "resolution_hz": res.resolution_hz,
        "worst_truncation_spur_dbc": res.spur_dbc,
        "increments": [
            {"requested_hz": f, "increment": i, "actual_hz": a} for f, i, a in res.increments
        ],
        "files": written,
    }
    if as_json:
        click.echo(json_text(summary))
        return
    click.echo(
        f"{res.name}: {spec.kind}, {res.entries} entries of {res.bits}-bit codes at "
        f"{res.rate_hz:.6f} Hz; resolution {res.resolution_hz:.3e} Hz, worst phase-truncation "
        f"spur {res.spur_dbc:.1f} dBc"
    )
    for f, i, a in res.increments:
        click.echo(f"  {f:g} Hz -> increment {i} ({a:.6f} Hz)")
    for path in written:
        click.echo(f"  wrote    {path}")
