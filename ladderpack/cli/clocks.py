"""``clock``: an output's clock plan, or the system clocks that make a rate exact."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import click

from ladderpack import outputs
from ladderpack.cli.common import (
    _model_options_lazy,
    cli,
    model_values,
)
from ladderpack.reading import json_text


@cli.command()
@click.argument("rate_hz", type=float)
@_model_options_lazy("StreamOptions", only=("target", "sys_clock_hz", "rate_tolerance_ppm"))
@click.option(
    "--output",
    type=click.Choice(outputs.names()),
    default="ladder",
    show_default=True,
    help="Output system to plan for: "
    + "; ".join(f"{e.name}, {e.summary}" for e in outputs.REGISTRY)
    + ".",
)
@click.option(
    "--bus-hz",
    type=click.Choice(["100000", "400000", "1000000"]),
    default=None,
    help="I2C DAC: bus clock, Hz  [default: 400000]",
)
@click.option(
    "--dac-command",
    type=click.Choice(["fast", "register"]),
    default=None,
    help="I2C DAC: fast write (2 data bytes) or write DAC register (3)  [default: fast]",
)
@click.option(
    "--slot-bits",
    type=click.Choice(["16", "32"]),
    default=None,
    help="I2S: bits per channel slot  [default: 32]",
)
@click.option(
    "--min-carrier-hz",
    type=float,
    default=None,
    help="PWM: lowest carrier frequency, Hz  [default: 4 x the rate]",
)
@click.option(
    "--find-sys-clock",
    is_flag=True,
    help="Search the system clocks the PLL can make for those that give RATE_HZ exactly "
    "with an integer divider for --output, nearest the current clock first.",
)
@click.option(
    "--min-sys-clock-hz",
    type=int,
    default=48_000_000,
    show_default=True,
    help="--find-sys-clock: lowest system clock to consider (Hz).",
)
@click.option(
    "--max-sys-clock-hz",
    type=int,
    default=None,
    help="--find-sys-clock: highest system clock to consider (Hz)  [default: the chip's "
    "rated clock, 133000000 on rp2040, 150000000 on rp2350]",
)
@click.option(
    "--count",
    type=click.IntRange(1, 100),
    default=8,
    show_default=True,
    help="--find-sys-clock: clocks to list.",
)
@click.option("--json", "as_json", is_flag=True, help="Print the plan as JSON.")
def clock(
    rate_hz: float,
    output: str,
    bus_hz: str | None,
    dac_command: str | None,
    min_carrier_hz: float | None,
    slot_bits: str | None,
    find_sys_clock: bool,
    min_sys_clock_hz: int,
    max_sys_clock_hz: int | None,
    count: int,
    as_json: bool,
    **values: Any,
) -> None:
    """Show the clock plan (divider, cycles per sample, achieved rate) for RATE_HZ."""
    from ladderpack.errors import OptionError
    from ladderpack.options import StreamOptions
    from ladderpack.outputs import entry, get_output, takers

    opts = StreamOptions(rate_hz=rate_hz, **model_values(StreamOptions, values))
    settings = {
        "min_carrier_hz": min_carrier_hz,
        "slot_bits": int(slot_bits) if slot_bits is not None else None,
        "bus_hz": int(bus_hz) if bus_hz is not None else None,
        "dac_command": dac_command,
    }
    takes = entry(output).takes
    for name, value in settings.items():
        group = _CLOCK_SETTING_GROUPS[name]
        if value is not None and group not in takes:
            raise OptionError(
                f"applies only with --output {' or '.join(takers(group))}",
                field=name.replace("_", "-"),
            )
    out = get_output(output)
    if find_sys_clock:
        _print_sys_clocks(
            rate_hz, opts, output, settings, min_sys_clock_hz, max_sys_clock_hz, count, as_json
        )
        return
    report = out.clock_report(rate_hz, opts, settings)
    if as_json:
        click.echo(json_text(report.data))
        return
    for line in report.lines:
        click.echo(line)


#: The option group of each of the clock command's output settings.
_CLOCK_SETTING_GROUPS = {
    "min_carrier_hz": "pwm",
    "slot_bits": "i2s",
    "bus_hz": "i2c",
    "dac_command": "i2c",
}


def _print_sys_clocks(
    rate_hz: float,
    opts: Any,
    output: str,
    settings: Mapping[str, Any],
    min_hz: int,
    max_hz: int | None,
    count: int,
    as_json: bool,
) -> None:
    from ladderpack.clock import RATED_SYS_CLOCK_HZ, find_sys_clocks
    from ladderpack.errors import OptionError
    from ladderpack.outputs import get_output

    chip = "rp2040" if opts.target == "rp2040" else "rp2350"
    rated = RATED_SYS_CLOCK_HZ[chip]
    top = rated if max_hz is None else max_hz
    if not 0 < min_hz <= top:
        raise OptionError(
            f"must be <= --max-sys-clock-hz ({top}) and > 0, got {min_hz}",
            field="min-sys-clock-hz",
        )
    now = int(opts.sys_clock_hz or 0)
    out = get_output(output)
    found = find_sys_clocks(
        rate_hz,
        min_hz=min_hz,
        max_hz=top,
        near_hz=now,
        planner=out.clock_planner(rate_hz, settings),
        limit=count,
    )
    rows, texts = [], []
    for c in found:
        p = c.plan
        row: dict[str, Any] = {
            "sys_clock_hz": c.sys_clock_hz,
            "pll": c.pll.to_dict(),
            "error_ppm": round(p.error_ppm, 6),
            "exact": p.achieved_rate_hz == p.requested_rate_hz,
            "above_rated": c.sys_clock_hz > rated,
        }
        own, text = out.clock_row(p)
        row.update(own)
        rows.append(row)
        texts.append(text)
    if as_json:
        click.echo(json_text({"rate_hz": rate_hz, "output": output, "clocks": rows}))
        return
    exact = bool(rows) and rows[0]["exact"]
    click.echo(
        f"{output} at {rate_hz:g} Hz: system clocks {min_hz}..{top} Hz the PLL makes "
        f"(12 MHz crystal, REFDIV 1) with an integer divider, "
        + (
            "exact, nearest the current clock first"
            if exact
            else "none exact: smallest error first"
        )
    )
    for r, what in zip(rows, texts, strict=True):
        pll = r["pll"]
        flag = "  ABOVE THE RATED CLOCK" if r["above_rated"] else ""
        vco = f"VCO {pll['vco_hz'] / 1e6:g} MHz (FBDIV {pll['fbdiv']})"
        click.echo(
            f"  {r['sys_clock_hz']:>11d} Hz  {vco} / {pll['postdiv1']} / {pll['postdiv2']}  "
            f"{what}  {r['error_ppm']:+.3f} ppm{flag}"
        )
    if not rows:
        click.echo("  none in this range")
    click.echo(
        "  set it with set_sys_clock_pll(VCO, POSTDIV1, POSTDIV2) (C SDK) or "
        "machine.freq(HZ) (MicroPython), then make the bundle with --sys-clock-hz HZ; the "
        "peripheral clock, UART and SPI rates follow clk_sys unless re-derived. Running "
        "above the rated clock is at your own risk."
    )
