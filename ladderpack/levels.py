"""LevelSet: the analog level of every code, ideal or measured, and its linearity.

Definitions follow IEEE Std 1658 (DAC terminology) as used in vendor DAC data sheets:
the endpoint LSB is ``(V(2^N - 1) - V(0)) / (2^N - 1)``; ``DNL_k = (V(k+1) - V(k)) / LSB
- 1``; ``INL_k = (V(k) - line(k)) / LSB`` against the endpoint line or the least-squares
line; a DAC is monotonic when every step is >= 0 (DNL >= -1 LSB).  A DAC has no
missing codes (that is an ADC notion): every code produces a level.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field
from typing import Any, TypedDict

import numpy as np

from ladderpack.errors import LadderpackError, OptionError
from ladderpack.options import check_bits

__all__ = [
    "FORMAT",
    "LevelSet",
    "code_for_volts",
    "code_scale",
    "correction_table",
    "ideal_levels",
    "linearity",
    "load_levels",
    "read_sweep_csv",
    "superpose",
]

FORMAT = "ladderpack-levels"
FORMAT_VERSION = 1


@dataclass(frozen=True)
class LevelSet:
    """The output level of each code.

    Attributes
    ----------
    bits : int
        Code width N.
    volts : numpy.ndarray
        float64 level of codes ``0 .. 2**N - 1`` in volts (or as a fraction of
        the reference for an ideal set).
    origin : str
        ``"ideal"``, ``"measured"``, ``"superposition"`` or ``"model"``.
    notes : dict
        Provenance (file, readings averaged, codes filled, residuals).
    """

    bits: int
    volts: np.ndarray
    origin: str = "ideal"
    notes: dict[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        check_bits(self.bits)
        v = np.asarray(self.volts, dtype=np.float64)
        n = 1 << self.bits
        if v.ndim != 1:
            raise OptionError(
                f"expected a list of {n} numbers (one level per code) for {self.bits} bits, "
                f"got nested lists of shape {v.shape}",
                field="volts",
            )
        if v.shape != (n,):
            raise OptionError(
                f"expected {n} levels for {self.bits} bits, got {v.shape[0]}", field="volts"
            )
        if not np.all(np.isfinite(v)):
            raise OptionError("levels must be finite", field="volts")
        if v.max() == v.min():
            raise OptionError(
                f"all {n} levels are {float(v[0])!r} V: a ladder's levels must span a range",
                field="volts",
            )
        object.__setattr__(self, "volts", v)

    def to_json(self) -> str:
        """Our own JSON layout (sorted keys, one level per code)."""
        doc = {
            "format": FORMAT,
            "format_version": FORMAT_VERSION,
            "bits": self.bits,
            "origin": self.origin,
            "notes": self.notes,
            "volts": [float(x) for x in self.volts],
        }
        from ladderpack.reading import json_text

        return json_text(doc, indent=1) + "\n"


def ideal_levels(bits: int, *, full_scale_volts: float = 1.0) -> LevelSet:
    """Ideal ladder: code k gives ``k / 2**N`` of the reference (textbook R-2R result)."""
    bits = check_bits(bits)
    return LevelSet(bits, np.arange(1 << bits) * (full_scale_volts / (1 << bits)), "ideal")


def load_levels(path: str | os.PathLike[str]) -> LevelSet:
    """Read a LevelSet JSON file written by :meth:`LevelSet.to_json`.

    Raises
    ------
    LadderpackError
        Naming the file and the field that is wrong.
    """
    name = os.fspath(path)
    from ladderpack.reading import read_json

    doc = read_json(name, what="levels file")
    if not isinstance(doc, dict) or doc.get("format") != FORMAT:
        raise LadderpackError(
            f"expected a JSON object with format {FORMAT!r}", file=name, field="format"
        )
    try:
        return LevelSet(
            int(doc["bits"]),
            np.asarray(doc["volts"], dtype=np.float64),
            str(doc.get("origin", "measured")),
            dict(doc.get("notes", {})),
        )
    except KeyError as exc:
        raise LadderpackError("missing key", file=name, field=str(exc.args[0])) from None
    except OptionError as exc:  # its own field, named once
        raise LadderpackError(exc.message, file=name, field=exc.field or "volts") from None
    except (TypeError, ValueError) as exc:
        raise LadderpackError(f"expected numbers ({exc})", file=name, field="volts") from None


class Linearity(TypedDict):
    """Static linearity of a level table (IEEE Std 1241 definitions), in LSB."""

    lsb_volts: float
    dnl: np.ndarray
    inl_endpoint: np.ndarray
    inl_best_fit: np.ndarray
    max_abs_dnl: float
    max_dnl: float
    min_dnl: float
    max_abs_inl_endpoint: float
    max_abs_inl_best_fit: float
    monotonic: bool
    non_monotonic_steps: list[int]
    missing_codes: int


def linearity(volts: np.ndarray) -> Linearity:
    """INL, DNL and monotonicity of a level table, in LSB.

    Returns
    -------
    Linearity
        ``lsb_volts`` (endpoint), ``dnl`` and ``inl_endpoint``/``inl_best_fit``
        arrays, their maxima ``max_abs_dnl``, ``max_abs_inl_endpoint``,
        ``max_abs_inl_best_fit``, ``max_dnl``, ``min_dnl`` (signed), ``monotonic``
        and the codes whose step is negative.
    """
    v = np.asarray(volts, dtype=np.float64)
    n = v.size
    k = np.arange(n)
    lsb = (v[-1] - v[0]) / (n - 1)
    if lsb == 0:
        raise OptionError("first and last levels are equal; no LSB can be defined", field="volts")
    dnl = np.diff(v) / lsb - 1.0
    inl_end = (v - (v[0] + k * lsb)) / lsb
    slope, offset = np.polyfit(k, v, 1)
    inl_fit = (v - (offset + slope * k)) / slope
    steps = np.diff(v) * math.copysign(1.0, lsb)
    return {
        "lsb_volts": float(lsb),
        "dnl": dnl,
        "inl_endpoint": inl_end,
        "inl_best_fit": inl_fit,
        "max_abs_dnl": float(np.max(np.abs(dnl))) if dnl.size else 0.0,
        "max_dnl": float(np.max(dnl)) if dnl.size else 0.0,
        "min_dnl": float(np.min(dnl)) if dnl.size else 0.0,
        "max_abs_inl_endpoint": float(np.max(np.abs(inl_end))),
        "max_abs_inl_best_fit": float(np.max(np.abs(inl_fit))),
        "monotonic": bool(np.all(steps >= 0)),
        "non_monotonic_steps": [int(c) for c in np.flatnonzero(steps < 0)],
        "missing_codes": 0,  # a DAC has none: every code produces a level
    }


def code_scale(levels: LevelSet) -> tuple[np.ndarray, float, float]:
    """Levels in LSB of their own endpoint line, and the signal mapping onto them.

    Returns ``(lsb_levels, centre, half_span)``: a float sample ``x`` (full scale
    +/-1) targets ``centre + x * half_span`` in those units.  For an ideal ladder
    this is exactly the plain quantiser's mapping (``2**(N-1) + x 2**(N-1)``); a real
    ladder's reach (lowest to highest level) sets the span, so its range shrinks
    when it cannot reach as far.
    """
    v = levels.volts
    lsb = (v[-1] - v[0]) / (v.size - 1)
    lv = (v - v[0]) / lsb
    lo, hi = float(lv.min()), float(lv.max())
    return lv, (lo + hi + 1) / 2, (hi - lo + 1) / 2


def _least_squares(design: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Least-squares coefficients, the same bits on every machine.

    The normal equations are summed with :func:`math.fsum` and solved by Gaussian
    elimination with partial pivoting in plain floats (no BLAS or LAPACK kernel chosen
    by CPU or thread count).
    """
    cols = design.T.tolist()
    yl = y.tolist()
    n = len(cols)
    m = [
        [math.fsum(a * b for a, b in zip(cols[i], cols[j], strict=True)) for j in range(n)]
        + [math.fsum(a * b for a, b in zip(cols[i], yl, strict=True))]
        for i in range(n)
    ]
    for c in range(n):
        p = max(range(c, n), key=lambda r: abs(m[r][c]))
        if m[p][c] == 0.0:
            raise LadderpackError("the readings cannot determine every bit's weight", field="code")
        m[c], m[p] = m[p], m[c]
        for r in range(c + 1, n):
            f = m[r][c] / m[c][c]
            m[r] = [a - f * b for a, b in zip(m[r], m[c], strict=True)]
    x = [0.0] * n
    for r in reversed(range(n)):
        x[r] = (m[r][n] - math.fsum(m[r][k] * x[k] for k in range(r + 1, n))) / m[r][r]
    return np.array(x)


def superpose(bits: int, zero_volts: float, bit_volts: np.ndarray) -> np.ndarray:
    """Every code's level from N + 1 readings, assuming superposition.

    Parameters
    ----------
    bits : int
        Code width N.
    zero_volts : float
        Level with all pins low.
    bit_volts : numpy.ndarray
        Level with only bit k high, for k = 0 .. N-1.

    Notes
    -----
    A linear network with ideal sources obeys superposition exactly; pins whose
    source resistance differs between high and low break it slightly (each leg's
    resistance then depends on its own bit).
    """
    weights = np.asarray(bit_volts, dtype=np.float64) - zero_volts
    codes = np.arange(1 << bits)
    # bit by bit in a fixed order (no BLAS: the same bits on every machine)
    acc = np.zeros(codes.size)
    for k in range(bits):
        acc = acc + ((codes >> k) & 1) * weights[k]
    return zero_volts + acc


_UNITS = {
    "v": 1.0,
    "volts": 1.0,
    "volt": 1.0,
    "mv": 1e-3,
    "millivolts": 1e-3,
    "uv": 1e-6,
    "microvolts": 1e-6,
}


def read_sweep_csv(
    path: str | os.PathLike[str],
    bits: int,
    *,
    fill: str = "refuse",
    superposition: bool = False,
    conflict_lsb: float = 8.0,
) -> LevelSet:
    """Import measured levels from a CSV file.

    The file has a header row naming a ``code`` column and a value column
    whose name gives the unit (``volts``/``V``, ``mV``, ``uV``), or a ``value``
    column plus a ``unit`` column giving each row's unit.  Lines starting with
    ``#`` and blank lines are skipped.  Repeated readings of a code are averaged.

    Parameters
    ----------
    path : str or path-like
        The CSV file.
    bits : int
        Ladder width N; codes must be 0 .. 2**N - 1.
    fill : {'refuse', 'model'}
        What to do with codes that have no reading: refuse the file, or fill
        them from a least-squares superposition model (offset plus one weight
        per bit) fitted to the codes that were measured.
    superposition : bool
        The file holds the N + 1 readings (code 0 and each single bit); every
        other code follows by superposition.
    conflict_lsb : float
        Repeated readings of one code that differ by more than this many
        nominal LSB are refused as conflicting (often a unit mix-up).

    Raises
    ------
    LadderpackError
        With the file, the line number and the field at fault.
    """
    import csv

    bits = check_bits(bits)
    name = os.fspath(path)
    n_codes = 1 << bits
    from ladderpack.reading import check_regular_file

    check_regular_file(name, what="sweep CSV")
    try:
        with open(name, encoding="utf-8-sig", newline="") as fh:  # a byte-order mark is fine
            rows = [(i + 1, r) for i, r in enumerate(csv.reader(fh))]
    except FileNotFoundError:
        raise LadderpackError("no such file", file=name) from None
    except (OSError, UnicodeDecodeError, csv.Error) as exc:
        raise LadderpackError(f"cannot read CSV ({exc})", file=name) from None
    rows = [
        (i, [c.strip() for c in r])
        for i, r in rows
        if r and any(c.strip() for c in r) and not r[0].lstrip().startswith("#")
    ]
    if not rows:
        raise LadderpackError("no header row", file=name)
    hline, header = rows[0]
    if len(header) == 1:
        for sep in (";", "\t", "|"):
            if sep in header[0]:
                raise LadderpackError(
                    f"columns are separated by {sep!r}; expected commas (save the sweep as "
                    "comma-separated CSV)",
                    file=f"{name}:{hline}",
                )
    cols = [h.lower() for h in header]
    if "code" not in cols:
        raise LadderpackError(
            "header must name a 'code' column", file=f"{name}:{hline}", field="code"
        )
    ci = cols.index("code")
    ui = cols.index("unit") if "unit" in cols else None
    vi = next((j for j, h in enumerate(cols) if h in _UNITS or h == "value"), None)
    if vi is None:
        raise LadderpackError(
            "header must have a value column named volts, V, mV, uV (or value with a unit column)",
            file=f"{name}:{hline}",
            field="volts",
        )
    if cols[vi] == "value" and ui is None:
        raise LadderpackError(
            "a 'value' column needs a 'unit' column", file=f"{name}:{hline}", field="unit"
        )
    readings: dict[int, list[tuple[int, float]]] = {}
    for line, row in rows[1:]:
        where = f"{name}:{line}"
        if len(row) <= max(ci, vi, ui or 0):
            raise LadderpackError(f"expected {len(header)} columns, got {len(row)}", file=where)
        try:
            code = int(row[ci])
        except ValueError:
            raise LadderpackError(
                f"expected a whole number, got {row[ci]!r}", file=where, field="code"
            ) from None
        if not 0 <= code < n_codes:
            raise LadderpackError(
                f"code {code} is outside 0..{n_codes - 1} for {bits} bits", file=where, field="code"
            )
        try:
            value = float(row[vi])
        except ValueError:
            raise LadderpackError(
                f"expected a number, got {row[vi]!r}", file=where, field=header[vi]
            ) from None
        if not math.isfinite(value):
            raise LadderpackError(
                f"expected a finite number, got {row[vi]!r}", file=where, field=header[vi]
            )
        unit = cols[vi] if ui is None else row[ui].lower()
        if unit not in _UNITS:
            raise LadderpackError(
                f"unknown unit {row[ui] if ui is not None else unit!r}; expected V, mV or uV",
                file=where,
                field="unit",
            )
        readings.setdefault(code, []).append((line, value * _UNITS[unit]))
    if not readings:
        raise LadderpackError("no readings", file=name)
    means = {c: float(np.mean([v for _, v in rs])) for c, rs in readings.items()}
    span = max(means.values()) - min(means.values())
    nominal_lsb = span / (n_codes - 1) if span > 0 else 0.0
    for c, rs in sorted(readings.items()):
        vals = [v for _, v in rs]
        if len(vals) > 1 and nominal_lsb > 0 and max(vals) - min(vals) > conflict_lsb * nominal_lsb:
            lines = ", ".join(str(ln) for ln, _ in rs)
            raise LadderpackError(
                f"readings of code {c} on lines {lines} disagree by "
                f"{(max(vals) - min(vals)) / nominal_lsb:.1f} LSB; are the units mixed?",
                file=name,
                field="volts",
            )
    notes: dict[str, Any] = {
        "file": os.path.basename(name),
        "readings": sum(len(r) for r in readings.values()),
        "codes_measured": len(means),
    }
    singles = [1 << k for k in range(bits)]
    if superposition:
        need = [0, *singles]
        missing = [c for c in need if c not in means]
        if missing:
            raise LadderpackError(
                f"superposition needs codes 0 and each single bit; missing {missing[:8]}",
                file=name,
                field="code",
            )
        volts = superpose(bits, means[0], np.array([means[c] for c in singles]))
        return LevelSet(bits, volts, "superposition", notes)
    missing = [c for c in range(n_codes) if c not in means]
    volts = np.full(n_codes, np.nan)
    for c, v in means.items():
        volts[c] = v
    if all(c in means for c in (0, *singles)) and len(means) == n_codes:
        pred = superpose(bits, means[0], np.array([means[c] for c in singles]))
        notes["superposition_residual_lsb"] = (
            float(np.max(np.abs(pred - volts)) / nominal_lsb) if nominal_lsb else 0.0
        )
    if missing:
        if fill != "model":
            raise LadderpackError(
                f"{len(missing)} code(s) have no reading (first: {missing[:8]}); measure them "
                "or fill them from a model",
                file=name,
                field="code",
            )
        codes = np.array(sorted(means))
        design = np.column_stack(
            [np.ones(codes.size), (codes[:, None] >> np.arange(bits)[None, :]) & 1]
        )
        coef = _least_squares(design, np.array([means[c] for c in codes]))
        miss = np.array(missing)
        volts[miss] = superpose(bits, coef[0], coef[0] + coef[1:])[miss]
        notes["codes_filled"] = len(missing)
    return LevelSet(bits, volts, "measured", notes)


def correction_table(levels: LevelSet, in_bits: int) -> np.ndarray:
    """Lookup from an ``in_bits``-bit ideal level to the code whose true level is nearest.

    Input ``i`` stands for the ideal level ``i / 2**in_bits`` of full scale (an
    ideal ``in_bits``-bit DAC code), placed on the ladder's reach the same way
    :func:`code_scale` places a stream, so firmware that computes samples at
    run time gets the same correction as ``stream --levels``.  For an ideal
    ladder and ``in_bits == bits`` the table is the identity.

    Returns
    -------
    numpy.ndarray
        uint16 codes, ``2**in_bits`` entries.
    """
    if isinstance(in_bits, bool) or not isinstance(in_bits, int) or not 1 <= in_bits <= 16:
        raise OptionError(f"must be a whole number 1..16, got {in_bits!r}", field="in_bits")
    lv, centre, half = code_scale(levels)
    x = np.arange(1 << in_bits) / (1 << (in_bits - 1)) - 1.0
    target = centre + x * half
    order = np.argsort(lv, kind="stable")
    s = lv[order]
    hi = np.clip(np.searchsorted(s, target, side="left"), 1, s.size - 1)
    lo = hi - 1
    pick = np.where(target - s[lo] < s[hi] - target, lo, hi)  # ties go up
    return order[pick].astype(np.uint16)


def code_for_volts(levels: LevelSet, volts: float) -> dict[str, Any]:
    """The code whose level is nearest to `volts` (the ladder as a DC source).

    Parameters
    ----------
    levels : LevelSet
        Ideal, modelled or measured level of every code, in volts.
    volts : float
        Wanted output voltage.

    Returns
    -------
    dict
        ``code``, ``volts`` (what that code really gives), ``error_volts``
        (given minus wanted), ``error_lsb`` (in units of the mean step, full
        range / (2**N - 1)), ``in_range`` (False when `volts` lies outside the
        ladder's reach and the nearest end was taken) and ``origin``.

    Examples
    --------
    >>> r = code_for_volts(ideal_levels(8, full_scale_volts=3.3), 1.0)
    >>> r["code"], round(r["volts"], 5)
    (78, 1.00547)
    """
    v = float(volts)
    if not np.isfinite(v):
        raise OptionError(f"must be a finite voltage, got {volts!r}", field="volts")
    lo, hi = float(levels.volts.min()), float(levels.volts.max())
    # search with the wish clamped to the ladder's reach: far outside it, every level's
    # distance rounds to the same float and the search would pick code 0 (1e17 V)
    near = min(max(v, lo), hi)
    code = int(np.argmin(np.abs(levels.volts - near)))
    err = levels.volts - v
    lsb = (hi - lo) / ((1 << levels.bits) - 1) if hi > lo else 1.0
    return {
        "code": code,
        "volts": float(levels.volts[code]),
        "wanted_volts": v,
        "error_volts": float(err[code]),
        "error_lsb": float(err[code]) / lsb,
        "in_range": lo <= v <= hi,
        "origin": levels.origin,
        "bits": levels.bits,
    }
