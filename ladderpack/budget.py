"""Flash and RAM budgets: whether a stream fits the target, and how long it could be."""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction

from ladderpack.errors import OptionError

__all__ = ["Budget", "TargetProfile", "check_budget", "stream_budget"]


@dataclass(frozen=True)
class TargetProfile:
    """Memory of the target board.

    Attributes
    ----------
    flash_bytes : int
        Flash size (default 2 MiB, the RP2040 target's; see :mod:`ladderpack.targets`).
    flash_reserve_bytes : int
        Flash kept for firmware code and anything else (default 256 KiB); the
        rest is available for streams.
    ram_bytes : int
        SRAM size (default 264 KiB, RP2040).
    """

    flash_bytes: int = 2 * 1024 * 1024
    flash_reserve_bytes: int = 256 * 1024
    ram_bytes: int = 264 * 1024

    def __post_init__(self) -> None:
        for field in ("flash_bytes", "flash_reserve_bytes", "ram_bytes"):
            v = getattr(self, field)
            if isinstance(v, bool) or not isinstance(v, int) or v < 0:
                raise OptionError(f"must be a whole number of bytes >= 0, got {v!r}", field=field)
        if self.flash_reserve_bytes > self.flash_bytes:
            raise OptionError(
                f"reserve of {self.flash_reserve_bytes} bytes exceeds the flash size "
                f"{self.flash_bytes}",
                field="flash_reserve_bytes",
            )

    @property
    def flash_available_bytes(self) -> int:
        """Flash left for streams."""
        return self.flash_bytes - self.flash_reserve_bytes


@dataclass(frozen=True)
class Budget:
    """What one stream costs on a target.

    Attributes
    ----------
    stream_bytes : int
        Bytes of packed words stored in flash (intro and outro included).
    ram_bytes : int
        RAM the MicroPython player needs (its two DMA buffers, plus the
        words themselves when embedded in the module).
    target : TargetProfile
        The target's memory.
    samples_per_word : int or Fraction
        Samples (frames, for I2S) per 32-bit word: 1/2 for 24- and 32-bit I2S samples.
    rate_hz : fractions.Fraction
        Stream rate.
    """

    stream_bytes: int
    ram_bytes: int
    target: TargetProfile
    samples_per_word: int | Fraction
    rate_hz: Fraction

    @property
    def flash_share(self) -> float:
        """Fraction of the whole flash the stream takes."""
        return self.stream_bytes / self.target.flash_bytes if self.target.flash_bytes else 0.0

    @property
    def max_samples(self) -> int:
        """Most samples that fit in the available flash."""
        return int((self.target.flash_available_bytes // 4) * self.samples_per_word)

    @property
    def max_duration_s(self) -> float:
        """Longest stream, in seconds at this rate and width, that fits."""
        return float(self.max_samples / self.rate_hz)

    @property
    def fits(self) -> bool:
        """True when both flash and RAM suffice."""
        return (
            self.stream_bytes <= self.target.flash_available_bytes
            and self.ram_bytes <= self.target.ram_bytes
        )

    def to_dict(self) -> dict[str, object]:
        """Plain-data description."""
        return {
            "stream_bytes": self.stream_bytes,
            "flash_bytes": self.target.flash_bytes,
            "flash_reserve_bytes": self.target.flash_reserve_bytes,
            "flash_available_bytes": self.target.flash_available_bytes,
            "flash_share": round(self.flash_share, 6),
            "max_samples": self.max_samples,
            "max_duration_s": round(self.max_duration_s, 6),
            "player_ram_bytes": self.ram_bytes,
            "ram_bytes": self.target.ram_bytes,
        }


def stream_budget(
    stream_words: int,
    *,
    samples_per_word: int | Fraction,
    rate_hz: Fraction,
    target: TargetProfile,
    player_chunk_words: int,
    embedded: bool,
) -> Budget:
    """Compute the budget of a stream of `stream_words` words."""
    ram = 2 * 4 * player_chunk_words + (4 * stream_words if embedded else 0)
    return Budget(4 * stream_words, ram, target, samples_per_word, Fraction(rate_hz))


def check_budget(b: Budget) -> None:
    """Refuse, with the numbers, a stream that does not fit.

    Raises
    ------
    OptionError
        When flash or RAM is short.
    """
    t = b.target
    if b.stream_bytes > t.flash_available_bytes:
        raise OptionError(
            f"the stream needs {b.stream_bytes} bytes of flash but {t.flash_available_bytes} "
            f"are available ({t.flash_bytes} bytes less {t.flash_reserve_bytes} reserved); at "
            f"{float(b.rate_hz):.6g} Hz with {b.samples_per_word} samples per word at most "
            f"{b.max_duration_s:.3f} s fit",
            field="flash_bytes",
        )
    if b.ram_bytes > t.ram_bytes:
        raise OptionError(
            f"the MicroPython player needs {b.ram_bytes} bytes of RAM but the target has "
            f"{t.ram_bytes}; embed fewer words or use smaller chunks",
            field="ram_bytes",
        )
