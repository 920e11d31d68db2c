"""ladderpack: sound clips to code streams for GPIO resistor-ladder DACs.

The public API is a handful of functions and the data types they pass along
the data flow (clip -> Signal -> Codes -> Packed -> bundle files)::

    >>> import ladderpack as lp                                   # doctest: +SKIP
    >>> asset = lp.stream_clip("demo_audio/door_chime.flac", bits=8, out_base=16)
    >>> lp.write_bundle(asset, "out")
"""

from ladderpack._version import __version__
from ladderpack.audio import Signal, load_clip
from ladderpack.bundle import StreamAsset, bundle_files, write_bundle
from ladderpack.clock import ClockPlan, plan_clock
from ladderpack.errors import LadderpackError
from ladderpack.pack import Packed, WordLayout, pack, unpack
from ladderpack.pipeline import stream_clip, stream_signal
from ladderpack.quantize import Codes, quantize

__all__ = [
    "ClockPlan",
    "Codes",
    "LadderpackError",
    "Packed",
    "Signal",
    "StreamAsset",
    "WordLayout",
    "__version__",
    "bundle_files",
    "load_clip",
    "pack",
    "plan_clock",
    "quantize",
    "stream_clip",
    "stream_signal",
    "unpack",
    "write_bundle",
]
