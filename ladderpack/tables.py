"""Lookup tables for firmware: wavetables with phase increments, correction tables.

One function per table kind, used by ``ladderpack table`` and by manifest builds
alike.  They return the files as bytes and a typed summary; nothing is written.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field

import numpy as np

from ladderpack import portable
from ladderpack.emit import table as emit_table
from ladderpack.emit.names import asset_identifier
from ladderpack.options import CorrectionTableSpec, I2cDacTableSpec, WaveTableSpec

__all__ = ["TableResult", "correction_table_files", "i2c_dac_table_files", "wave_table_files"]


@dataclass(frozen=True)
class TableResult:
    """A rendered table.

    Attributes
    ----------
    name : str
        Safe identifier (file stem and symbol prefix).
    files : dict of str to bytes
        File name to content.
    bits : int
        Width of the ladder codes in the table.
    entries : int
        Table entries.
    rate_hz : float
        Achieved stream rate the increments are for (0 for correction tables).
    in_bits : int
        Correction tables: bits of the ideal input level (0 for wavetables).
    distinct_codes : int
        Different codes the table uses.
    resolution_hz : float
        Wavetables: frequency step of the 32-bit phase accumulator.
    spur_dbc : float
        Wavetables: worst phase-truncation spur, dBc.
    increments : list of (float, int, float)
        Wavetables: (requested Hz, increment, actual Hz).
    """

    name: str
    files: dict[str, bytes]
    bits: int
    entries: int
    rate_hz: float = 0.0
    in_bits: int = 0
    distinct_codes: int = 0
    resolution_hz: float = 0.0
    spur_dbc: float = 0.0
    increments: list[tuple[float, int, float]] = field(default_factory=list)

    @property
    def byte_count(self) -> int:
        """Flash the table takes (one byte per entry up to 8 bits, two up to 16, else four)."""
        return self.entries * (1 if self.bits <= 8 else 2 if self.bits <= 16 else 4)


def wave_table_files(name: str, spec: WaveTableSpec) -> TableResult:
    """A 2^k-entry wavetable in ladder codes plus 32-bit phase increments.

    Parameters
    ----------
    name : str
        Table name (sanitised into the identifier).
    spec : WaveTableSpec
        Kind, size, width, level, frequencies and the clock they are planned for.
    """
    from ladderpack.outputs import get_output
    from ladderpack.waves import phase_increments, truncation_spur_dbc

    wave = get_output(spec.output).wave_table(spec)
    rate, tab, width = wave.rate_hz, wave.table, wave.bits
    incs = phase_increments(list(spec.freqs_hz), rate)
    spur = truncation_spur_dbc(spec.table_bits)
    ident = asset_identifier(name)
    files = emit_table.render_wave_files(
        ident,
        tab,
        incs,
        table_bits=spec.table_bits,
        bits=width,
        rate_hz=rate,
        spur_dbc=spur,
        kind=spec.kind,
        coding=wave.coding,
        signed=wave.signed,
    )
    return TableResult(
        ident,
        files,
        width,
        int(tab.size),
        rate_hz=rate,
        distinct_codes=int(np.unique(tab).size),
        resolution_hz=rate / 2**32,
        spur_dbc=spur,
        increments=[(float(f), int(i), float(a)) for f, i, a in incs],
    )


def correction_table_files(name: str, spec: CorrectionTableSpec) -> TableResult:
    """Map each ideal level to the code whose measured level is nearest.

    Parameters
    ----------
    name : str
        Table name (sanitised into the identifier).
    spec : CorrectionTableSpec
        The LevelSet file and the bits of the ideal input level.
    """
    from ladderpack.levels import correction_table, load_levels

    lev = load_levels(spec.levels)
    m = lev.bits if spec.in_bits is None else spec.in_bits
    tab = correction_table(lev, m)
    ident = asset_identifier(name)
    src = os.path.basename(os.fspath(spec.levels))
    files = {
        f"{ident}.h": emit_table.render_c_header(
            ident, tab, in_bits=m, bits=lev.bits, source=src
        ).encode(),
        f"{ident}.c": emit_table.render_c_source(ident, tab, bits=lev.bits, source=src).encode(),
        f"{ident}.py": emit_table.render_micropython(
            ident, tab, in_bits=m, bits=lev.bits, source=src
        ).encode(),
    }
    return TableResult(
        ident, files, lev.bits, int(tab.size), in_bits=m, distinct_codes=int(np.unique(tab).size)
    )


def i2c_dac_table_files(name: str, spec: I2cDacTableSpec) -> TableResult:
    """The bytes of one I2C-DAC update per voltage (or per point of a waveform's cycle).

    For firmware that writes them itself (``i2c_write_blocking`` in C, ``I2C.writeto`` in
    MicroPython): the data bytes after the address byte, one row per update, with the
    address and the highest update rate at each bus speed.

    Parameters
    ----------
    name : str
        Table name (sanitised into the identifier).
    spec : I2cDacTableSpec
        The voltages or waveform, the reference, the address and the command.
    """
    from ladderpack.outputs.i2c_dac import I2cDacFormat, codes_for_volts, table_files

    fmt = I2cDacFormat(spec.dac_address, spec.dac_command)
    if spec.volts is not None:
        volts = np.asarray(spec.volts, dtype=np.float64)
        what = f"{volts.size} voltages"
    else:
        # one cycle spanning the level's share of the range, about mid-scale
        phase = np.arange(spec.points) / spec.points
        shape = {
            "sine": portable.sin(2 * np.pi * phase),
            "square": np.where(phase < 0.5, 1.0, -1.0),
            "sawtooth": 2 * phase - 1,
            "triangle": 1 - 4 * np.abs(phase - 0.5),
        }[str(spec.wave)]
        # symmetric about mid-scale 2048: 2048 +/- 2047 x level reaches codes 1..4095 at
        # full level, never a clipped peak (4096 is no code)
        codes = np.floor(2048 + 2047 * spec.level * shape + 0.5).astype(np.int64)
        volts = spec.vref_volts * codes / 4096
        what = f"one {spec.wave} cycle of {spec.points} points"
    if spec.volts is not None:
        codes = codes_for_volts(volts, spec.vref_volts)
    # what the DAC really outputs for each code (Vref x code / 4096), not what was asked
    volts = spec.vref_volts * codes / 4096
    ident = asset_identifier(name)
    files = table_files(ident, fmt, codes, volts, spec.vref_volts, what)
    return TableResult(ident, files, 12, int(codes.size), distinct_codes=int(np.unique(codes).size))
