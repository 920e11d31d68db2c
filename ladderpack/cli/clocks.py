"""``clock``: an output's clock plan, or the system clocks that make a rate exact."""

from __future__ import annotations

from typing import Any

import click

from ladderpack.cli.common import (
    _model_options_lazy,
    cli,
    model_values,
)
from ladderpack.reading import json_text


@cli.command()
@click.argument("rate_hz", type=float)
@_model_options_lazy("StreamOptions", only=("target", "sys_clock_hz", "rate_tolerance_ppm"))
@_model_options_lazy("ClockOptions")
@click.option("--json", "as_json", is_flag=True, help="Print the plan as JSON.")
def clock(rate_hz: float, as_json: bool, **values: Any) -> None:
    """Show the clock plan (divider, cycles per sample, achieved rate) for RATE_HZ."""
    from ladderpack.options import ClockOptions, StreamOptions
    from ladderpack.outputs import get_output

    spec = ClockOptions(**model_values(ClockOptions, values))
    opts = StreamOptions(rate_hz=rate_hz, **model_values(StreamOptions, values))
    if spec.find_sys_clock:
        _print_sys_clocks(rate_hz, opts, spec, as_json)
        return
    report = get_output(spec.output).clock_report(rate_hz, opts, spec.settings())
    if as_json:
        click.echo(json_text(report.data))
        return
    for line in report.lines:
        click.echo(line)


def _print_sys_clocks(rate_hz: float, opts: Any, spec: Any, as_json: bool = False) -> None:
    from ladderpack.clock import RATED_SYS_CLOCK_HZ, find_sys_clocks
    from ladderpack.errors import OptionError
    from ladderpack.outputs import get_output

    output, min_hz, count = spec.output, spec.min_sys_clock_hz, spec.count
    chip = "rp2040" if opts.target == "rp2040" else "rp2350"
    rated = RATED_SYS_CLOCK_HZ[chip]
    top = rated if spec.max_sys_clock_hz is None else spec.max_sys_clock_hz
    if not 0 < min_hz <= top:
        raise OptionError(
            f"must be <= --max-sys-clock-hz ({top}) and > 0, got {min_hz}",
            field="min_sys_clock_hz",
        )
    now = int(opts.sys_clock_hz or 0)
    out = get_output(output)
    found = find_sys_clocks(
        rate_hz,
        min_hz=min_hz,
        max_hz=top,
        near_hz=now,
        planner=out.clock_planner(rate_hz, spec.settings()),
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
