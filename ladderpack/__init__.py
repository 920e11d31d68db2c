"""ladderpack: sound clips to code streams for GPIO resistor-ladder DACs.

The public API is a handful of functions and the data types they pass along
the data flow (clip -> Signal -> Codes -> Packed -> bundle files)::

    >>> import ladderpack as lp                                   # doctest: +SKIP
    >>> asset = lp.stream_clip("demo_audio/door_chime.flac", bits=8)  # doctest: +SKIP
    >>> lp.write_bundle(asset, "out")                              # doctest: +SKIP

Names are imported on first use, so ``import ladderpack`` (and the command
line) stays fast.
"""

from __future__ import annotations

import importlib
from typing import Any

from ladderpack._version import __version__

_EXPORTS = {
    "ClockPlan": "clock",
    "Codes": "quantize",
    "LadderpackError": "errors",
    "Packed": "pack",
    "Signal": "audio",
    "StreamAsset": "bundle",
    "WordLayout": "pack",
    "bundle_files": "bundle",
    "load_clip": "audio",
    "pack": "pack",
    "plan_clock": "clock",
    "quantize": "quantize",
    "stream_clip": "stream",
    "stream_signal": "stream",
    "unpack": "pack",
    "write_bundle": "bundle",
}

__all__ = ["__version__", *sorted(_EXPORTS)]


def __getattr__(name: str) -> Any:
    if name in _EXPORTS:
        value = getattr(importlib.import_module(f"ladderpack.{_EXPORTS[name]}"), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'ladderpack' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(__all__)
