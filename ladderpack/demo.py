"""The bundled demo: a garden weather station's alert sounds and bench tone.

* An 8-bit ladder on GPIO 16..23 plays ``door_chime.flac`` (an alert) and
  ``frost_warning.flac`` (a spoken warning) at 22.05 kHz.
* The bench variant, a 12-bit ladder on GPIO 0..11, loops a 1 kHz test sine
  at 48 kHz with TPDF dither (100 whole cycles, so the loop is seamless).
* The I2S amplifier variant (folder ``i2s_amp``) sends both alerts as 16-bit I2S to a
  class-D amplifier board: data on GPIO 26, bit clock on 27, word select on 28.
* The PWM variant (folder ``pwm``) plays both alerts on GPIO 15 (PWM slice 7, channel
  B) through an RC filter: the cheapest station, one pin and two resistors.
* The I2C bench variant (folder ``i2c_bench``) checks the station's sensor input: a
  12-bit I2C DAC (an MCP4725 at 0x60, SDA on GPIO 4, SCL on GPIO 5) steps through six
  test voltages, 0.5 V to 3.0 V, 100 ms each, one update per tick of a 1 kHz sample
  clock, in a loop.
"""

from __future__ import annotations

import os
from typing import Any

import numpy as np

from ladderpack.asset import StreamSummary
from ladderpack.audio import Signal
from ladderpack.bundle import write_bundle
from ladderpack.errors import AudioFileError
from ladderpack.stream import stream_clip, stream_signal, stream_tone

__all__ = ["run_demo"]


def bench_sine(rate_hz: float = 48000.0, freq_hz: float = 1000.0, seconds: float = 0.1) -> Signal:
    """One loop of a sine for the bench ladder (normalised later by the pipeline)."""
    t = np.arange(int(rate_hz * seconds)) / rate_hz
    return Signal(np.sin(2 * np.pi * freq_hz * t), rate_hz)


def run_demo(
    out_dir: str, *, clips_dir: str = "demo_audio"
) -> list[tuple[StreamSummary, list[str]]]:
    """Build every demo bundle into `out_dir`; return (summary, files) pairs."""
    results = []
    for clip in ("door_chime.flac", "frost_warning.flac"):
        path = os.path.join(clips_dir, clip)
        if not os.path.exists(path):
            raise AudioFileError(
                "demo clip not found; run from the repository root or pass --clips-dir", file=path
            )
        asset = stream_clip(path, bits=8, rate_hz=22050, out_base=16)
        results.append((asset.summary(), write_bundle(asset, out_dir)))
    bench = stream_signal(
        bench_sine(),
        name="bench_sine_1khz_loop",
        bits=12,
        rate_hz=48000,
        out_base=0,
        loop=True,
        source={"file": "synthesised 1 kHz sine, 100 cycles"},
    )
    results.append((bench.summary(), write_bundle(bench, out_dir)))
    variants: tuple[tuple[str, dict[str, Any]], ...] = (
        ("i2s_amp", {"output": "i2s", "bits": 16, "data_pin": 26, "bit_clock_pin": 27}),
        ("pwm", {"output": "pwm", "pwm_pin": 15}),
    )
    for folder, opts in variants:
        for clip in ("door_chime.flac", "frost_warning.flac"):
            asset = stream_clip(os.path.join(clips_dir, clip), rate_hz=22050, **opts)
            results.append((asset.summary(), write_bundle(asset, os.path.join(out_dir, folder))))
    steps = bench_volts()
    volts = stream_tone(
        "staircase",
        name="bench_volts",
        output="i2c-dac",
        codes=[int(c) for c in steps],
        dwell_ms=100.0,
        rate_hz=1000.0,
        ramp_ms=0.0,
        sda_pin=4,
        scl_pin=5,
        loop=True,
    )
    results.append((volts.summary(), write_bundle(volts, os.path.join(out_dir, "i2c_bench"))))
    return results


#: Test voltages of the I2C bench variant, V (the DAC's reference: its 3.3 V supply).
BENCH_VOLTS = (0.5, 1.0, 1.5, 2.0, 2.5, 3.0)


def bench_volts(vref_volts: float = 3.3) -> np.ndarray:
    """The 12-bit codes of :data:`BENCH_VOLTS` (nearest: Vref x code / 4096)."""
    from ladderpack.outputs.i2c_dac import codes_for_volts

    return codes_for_volts(np.array(BENCH_VOLTS), vref_volts)
