"""The ladder's bench commands: ``code``, ``ladder``, ``levels``, ``sweep``."""

from __future__ import annotations

import contextlib
import sys
from typing import Any

import click

from ladderpack.cli.common import (
    _model_options_lazy,
    _write_one,
    cli,
    model_values,
)
from ladderpack.reading import json_text


@cli.command()
@click.option("--volts", type=float, required=True, help="Wanted output voltage (V).")
@click.option(
    "--levels",
    "levels_file",
    default=None,
    help="LevelSet JSON of the real ladder (from 'levels' or 'ladder --levels-out')  "
    "[default: an ideal ladder]",
)
@click.option(
    "--bits", type=int, default=8, show_default=True, help="Ideal ladder: width N (bits)."
)
@click.option(
    "--full-scale-volts",
    type=float,
    default=3.3,
    show_default=True,
    help="Ideal ladder: the reference (V); code k gives k / 2^N of it.",
)
@click.option("--json", "as_json", is_flag=True, help="Print the answer as JSON.")
def code(
    volts: float, levels_file: str | None, bits: int, full_scale_volts: float, as_json: bool
) -> None:
    """Which code puts VOLTS on the ladder's output, and what it really gives."""
    import math

    from ladderpack.errors import OptionError
    from ladderpack.levels import code_for_volts, ideal_levels, load_levels

    if levels_file is not None:
        levels = load_levels(levels_file)
    else:
        if not (full_scale_volts > 0 and math.isfinite(full_scale_volts)):
            raise OptionError(
                f"must be a positive voltage, got {full_scale_volts!r}", field="full-scale-volts"
            )
        levels = ideal_levels(bits, full_scale_volts=full_scale_volts)
    r = code_for_volts(levels, volts)
    if as_json:
        click.echo(json_text(r))
        return
    click.echo(f"code     {r['code']} of {(1 << r['bits']) - 1} ({r['origin']} levels)")
    click.echo(f"gives    {r['volts']:.6f} V for {r['wanted_volts']:.6f} V wanted")
    click.echo(f"error    {r['error_volts'] * 1e3:+.3f} mV ({r['error_lsb']:+.3f} LSB)")
    if not r["in_range"]:
        click.echo("note     outside the ladder's reach: the nearest end was taken")


def _lsb(v: float) -> str:
    return f"{v:.3f} LSB"


@cli.command()
@_model_options_lazy("LadderDesignSpec")
@click.option("--json", "as_json", is_flag=True, help="Print the report as JSON.")
def ladder(as_json: bool, **values: Any) -> None:
    """Model an R-2R ladder and check the design.

    Reports INL/DNL, tolerance spread, pin current, thermal noise, settling and a
    recommended R range.
    """
    from ladderpack.ladder import DRIVE_SOURCE_OHMS, design_ladder, design_steps
    from ladderpack.options import LadderDesignSpec

    spec = LadderDesignSpec(**model_values(LadderDesignSpec, values))
    bar_cm: contextlib.AbstractContextManager[Any] = (
        click.progressbar(
            length=design_steps(spec.trials, spec.series), label="ladder", file=sys.stderr
        )
        if sys.stderr.isatty()
        else contextlib.nullcontext()
    )
    with bar_cm as bar:
        design = design_ladder(spec, progress=None if bar is None else bar.update)
    report = design.report
    written = []
    for path, text in (
        (spec.spice, design.netlist),
        (spec.levels_out, None if design.levels is None else design.levels.to_json()),
        (
            spec.mc_levels_out,
            None if design.trial_levels is None else design.trial_levels.to_json(),
        ),
    ):
        if path and text is not None:
            written.append(_write_one(path, text))
    if as_json:
        click.echo(json_text({**report, "files": written}))
        return
    bits, r_ohms, supply_volts, drive_ma = spec.bits, spec.r_ohms, spec.supply_volts, spec.drive_ma
    tolerance_pct, distribution, band_hz, series = (
        spec.tolerance_pct, spec.distribution, spec.band_hz, spec.series
    )  # fmt: skip
    split_legs = spec.split_legs
    bound = DRIVE_SOURCE_OHMS[drive_ma]
    nom, wc, mc = report["nominal"], report["worst_case"], report["monte_carlo"]
    click.echo(
        f"{bits}-bit R-2R, R = {r_ohms:g} ohm, 2R legs{' of two R' if split_legs else ''}"
        f", {supply_volts:g} V, LSB {1e3 * report['lsb_volts']:.4f} mV"
    )
    click.echo(
        f"  sources  high {report['source_high_ohms']:.1f} ohm, low "
        f"{report['source_low_ohms']:.1f} ohm (datasheet bounds at {drive_ma} mA: "
        f"{bound[0]:.1f} / {bound[1]:.1f})"
    )
    click.echo(
        f"  nominal  INL {_lsb(nom['max_abs_inl_endpoint_lsb'])} endpoint, "
        f"{_lsb(nom['max_abs_inl_best_fit_lsb'])} best fit; DNL {nom['min_dnl_lsb']:+.3f}"
        f"; {'monotonic' if nom['monotonic'] else 'NOT monotonic: the output falls at some steps'}"
    )
    click.echo(
        f"  worst    over +/-{tolerance_pct:g} %: INL {_lsb(wc['max_abs_inl_endpoint_lsb'])}"
        f", DNL down to {wc['min_dnl_lsb']:+.3f}; "
        f"{'monotonic' if wc['monotonic'] else 'may be non-monotonic'}"
    )
    mono_tol = wc["monotonic_tolerance"]
    click.echo(
        "  needs    "
        + (
            f"resistors within +/-{100 * mono_tol:.3g} % to stay monotonic in the worst case"
            if mono_tol > 0
            else "lower source resistance (stronger drive or a buffer): the nominal ladder "
            "is not monotonic, whatever the tolerance"
        )
    )
    sine = report["sine_through_levels"]
    click.echo(
        f"  sine     {sine['level_dbfs']:g} dBFS through the nominal levels: SINAD "
        f"{sine['sinad_db']:.1f} dB, THD {sine['thd_db']:.1f} dB (an ideal {bits}-bit "
        f"ladder: {sine['ideal_sinad_db']:.1f} dB, {sine['ideal_thd_db']:.1f} dB)"
    )
    inl, dnl = mc["max_abs_inl_best_fit_lsb"], mc["max_abs_dnl_lsb"]
    click.echo(
        f"  spread   {mc['trials']} trials ({distribution}): INL p50/p90/p99 "
        f"{inl['p50']:.2f}/{inl['p90']:.2f}/{inl['p99']:.2f}, DNL "
        f"{dnl['p50']:.2f}/{dnl['p90']:.2f}/{dnl['p99']:.2f} LSB; "
        f"{100 * mc['monotonic_share']:.0f} % monotonic"
    )
    click.echo(
        f"  current  {1e3 * report['pin_current_max_a']:.3f} mA per pin at most "
        f"({'within' if report['pin_current_ok'] else 'OVER'} the {drive_ma} mA setting),"
        f" {1e3 * report['supply_current_max_a']:.3f} mA from IOVDD"
    )
    click.echo(
        f"  noise    {1e6 * report['johnson_noise_volts']:.3f} uV rms over {band_hz:g} Hz"
        f" = {report['johnson_noise_lsb']:.2e} LSB"
    )
    click.echo(
        f"  settling tau {1e9 * report['settling_tau_s']:.1f} ns, to 1/2 LSB "
        f"{1e6 * report['settling_half_lsb_s']:.3f} us of a "
        f"{1e6 * report['sample_period_s']:.2f} us period"
        f"{'' if report['settles_in_one_sample'] else ' (TOO SLOW)'}"
    )
    rec = report["recommended_r_ohms"]
    click.echo(
        f"  R range  {series}: {rec[0]:g} to {rec[1]:g} ohm"
        + ("" if report["r_in_recommended_range"] else f"; the chosen {r_ohms:g} ohm is outside it")
        if rec
        else f"  R range  no {series} value meets every check"
    )
    for path in written:
        click.echo(f"  wrote    {path}")


@cli.command()
@click.argument("csv_path", metavar="CSV", type=click.Path(dir_okay=False))
@click.option("--bits", type=int, required=True, help="Ladder width N, 1..16.")
@click.option(
    "-o",
    "--out",
    "out_path",
    default="levels.json",
    show_default=True,
    help="LevelSet JSON file to write.",
)
@click.option(
    "--fill",
    type=click.Choice(["refuse", "model"]),
    default="refuse",
    show_default=True,
    help="Codes without a reading: refuse the file, or fill them from a fitted model.",
)
@click.option(
    "--superposition/--no-superposition",
    default=False,
    show_default=True,
    help="The CSV holds N+1 readings (all low, then each bit alone).",
)
@click.option("--json", "as_json", is_flag=True, help="Print the report as JSON.")
def levels(
    csv_path: str, bits: int, out_path: str, fill: str, superposition: bool, as_json: bool
) -> None:
    """Import a measured sweep (CSV: code and volts) into a LevelSet, with an INL/DNL report."""
    from ladderpack.levels import linearity, read_sweep_csv

    lev = read_sweep_csv(csv_path, bits, fill=fill, superposition=superposition)
    lin = linearity(lev.volts)
    written = _write_one(out_path, lev.to_json())
    import numpy as np

    report = {k: v for k, v in lin.items() if not isinstance(v, np.ndarray)}
    report.update(notes=lev.notes, origin=lev.origin, file=written)
    if as_json:
        click.echo(json_text(report))
        return
    click.echo(
        f"{lev.origin} levels, {bits} bits, from {lev.notes.get('readings')} readings of "
        f"{lev.notes.get('codes_measured')} codes"
    )
    click.echo(f"  LSB      {1e3 * lin['lsb_volts']:.4f} mV (endpoint)")
    click.echo(
        f"  INL      {_lsb(lin['max_abs_inl_endpoint'])} endpoint, "
        f"{_lsb(lin['max_abs_inl_best_fit'])} best fit"
    )
    click.echo(
        f"  DNL      {lin['min_dnl']:+.3f} to {lin['max_dnl']:+.3f} LSB "
        f"(largest |DNL| {_lsb(lin['max_abs_dnl'])}); "
        f"{'monotonic' if lin['monotonic'] else 'NOT monotonic'}"
    )
    if "superposition_residual_lsb" in lev.notes:
        click.echo(
            f"  superposition from the N+1 readings predicts every code within "
            f"{_lsb(lev.notes['superposition_residual_lsb'])}"
        )
    if "codes_filled" in lev.notes:
        click.echo(f"  filled   {lev.notes['codes_filled']} code(s) from the fitted model")
    click.echo(f"  wrote    {written}")


@cli.command()
@click.option("--bits", type=int, default=8, show_default=True, help="Ladder width N, 1..16.")
@click.option(
    "--out-base", type=int, default=0, show_default=True, help="First GPIO of the ladder."
)
@click.option(
    "--pin-order",
    type=click.Choice(["msb-high", "msb-low"]),
    default="msb-high",
    show_default=True,
    help="Which GPIO carries the ladder's most significant bit.",
)
@click.option(
    "--invert/--no-invert",
    default=False,
    show_default=True,
    help="An inverting buffer sits between pins and ladder.",
)
@click.option(
    "--mode",
    type=click.Choice(["full", "n1"]),
    default="full",
    show_default=True,
    help="full: every code; n1: code 0 and each bit alone (N+1 readings).",
)
@click.option(
    "--read",
    type=click.Choice(["adc", "meter"]),
    default="adc",
    show_default=True,
    help="adc: on-chip ADC; meter: type each multimeter reading.",
)
@click.option(
    "--adc-gpio",
    type=click.Choice(["26", "27", "28"]),
    default="26",
    show_default=True,
    help="ADC input pin for --read adc.",
)
@click.option(
    "--samples", type=int, default=16, show_default=True, help="ADC readings averaged per code."
)
@click.option(
    "--settle-ms", type=int, default=5, show_default=True, help="Wait after setting each code, ms."
)
@click.option(
    "--adc-vref-volts",
    type=float,
    default=3.3,
    show_default=True,
    help="ADC reference voltage, volts (measure it).",
)
@click.option(
    "--csv-name",
    default="sweep.csv",
    show_default=True,
    help="CSV file the script writes on the board.",
)
@click.option(
    "-o",
    "--out",
    "out_path",
    default="ladder_sweep.py",
    show_default=True,
    help="Script file to write.",
)
def sweep(
    bits: int,
    out_base: int,
    pin_order: str,
    invert: bool,
    mode: str,
    read: str,
    adc_gpio: str,
    samples: int,
    settle_ms: int,
    adc_vref_volts: float,
    csv_name: str,
    out_path: str,
) -> None:
    """Write a MicroPython calibration script for the ladder.

    It steps the codes and records each level as CSV for 'ladderpack levels'.
    """
    from ladderpack.emit import sweep as emit_sweep
    from ladderpack.errors import OptionError
    from ladderpack.pio import check_pins
    from ladderpack.quantize import check_bits

    check_bits(bits)
    check_pins(out_base, bits)
    if samples < 1:
        raise OptionError(f"must be at least 1, got {samples}", field="samples")
    if settle_ms < 0:
        raise OptionError(f"must be >= 0 ms, got {settle_ms}", field="settle_ms")
    text = emit_sweep.render(
        bits=bits,
        out_base=out_base,
        msb_high=(pin_order == "msb-high"),
        invert=invert,
        mode=mode,
        read=read,
        adc_gpio=int(adc_gpio),
        samples=samples,
        settle_ms=settle_ms,
        adc_vref=adc_vref_volts,
        csv_name=csv_name,
    )
    click.echo(
        f"wrote {_write_one(out_path, text)}; run it on the board, then "
        f"'ladderpack levels {csv_name} --bits {bits}"
        f"{' --superposition' if mode == 'n1' else ''}'"
    )
