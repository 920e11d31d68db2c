"""Output systems other than the resistor ladder: how samples become hardware settings.

One module per output system.  Each plans the clocks that make the sample rate exact
and states the resolution that follows; the ladder's own plan lives in
:mod:`ladderpack.clock` and :mod:`ladderpack.pio`.
"""

from __future__ import annotations

__all__ = ["i2s", "pwm"]
