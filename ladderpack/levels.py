"""LevelSet: the analog level of every code, ideal or measured, and its linearity.

Definitions follow IEEE Std 1658 (DAC terminology) as used in vendor DAC data sheets:
the endpoint LSB is ``(V(2^N - 1) - V(0)) / (2^N - 1)``; ``DNL_k = (V(k+1) - V(k)) / LSB
- 1``; ``INL_k = (V(k) - line(k)) / LSB`` against the endpoint line or the least-squares
line; a DAC is monotonic when every step is >= 0 (DNL >= -1 LSB).  A DAC has no
missing codes (that is an ADC notion): every code produces a level.
"""

from __future__ import annotations

import json
import math
import os
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ladderpack.errors import LadderpackError, OptionError
from ladderpack.quantize import check_bits

__all__ = ["FORMAT", "LevelSet", "ideal_levels", "linearity", "load_levels", "superpose"]

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
        if v.shape != (1 << self.bits,):
            raise OptionError(
                f"expected {1 << self.bits} levels for {self.bits} bits, got {v.shape[0]}",
                field="volts",
            )
        if not np.all(np.isfinite(v)):
            raise OptionError("levels must be finite", field="volts")
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
        return json.dumps(doc, indent=1, sort_keys=True) + "\n"


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
    try:
        with open(name, encoding="utf-8") as fh:
            doc = json.load(fh)
    except FileNotFoundError:
        raise LadderpackError("no such file", file=name) from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise LadderpackError(f"not a levels file ({exc})", file=name) from None
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
    except (TypeError, ValueError, OptionError) as exc:
        raise LadderpackError(str(exc), file=name, field="volts") from None


def linearity(volts: np.ndarray) -> dict[str, Any]:
    """INL, DNL and monotonicity of a level table, in LSB.

    Returns
    -------
    dict
        ``lsb_volts`` (endpoint), ``dnl`` and ``inl_endpoint``/``inl_best_fit``
        arrays, their maxima ``max_abs_dnl``, ``max_abs_inl_endpoint``,
        ``max_abs_inl_best_fit``, ``min_dnl``, ``monotonic`` and the codes whose
        step is negative.
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
        "min_dnl": float(np.min(dnl)) if dnl.size else 0.0,
        "max_abs_inl_endpoint": float(np.max(np.abs(inl_end))),
        "max_abs_inl_best_fit": float(np.max(np.abs(inl_fit))),
        "monotonic": bool(np.all(steps >= 0)),
        "non_monotonic_steps": [int(c) for c in np.flatnonzero(steps < 0)],
        "missing_codes": 0,  # a DAC has none: every code produces a level
    }


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
    bitmat = (codes[:, None] >> np.arange(bits)[None, :]) & 1
    return zero_volts + bitmat @ weights
