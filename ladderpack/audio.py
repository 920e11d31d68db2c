"""Reading sound files into :class:`Signal` objects.

Sound files are read through python-soundfile (libsndfile), which covers WAV,
FLAC, OGG/Vorbis and AIFF, in any sample format and channel count.  Samples
come back as float64 with nominal full scale +/-1.0.
"""

from __future__ import annotations

import math
import os
import struct
from dataclasses import dataclass

import numpy as np
import soundfile

from ladderpack.errors import AudioFileError, OptionError, SignalError
from ladderpack.reading import sha256_file

__all__ = [
    "Signal",
    "check_signal",
    "load_clip",
    "read_capture_csv",
    "read_samples_csv",
    "sha256_file",
]


@dataclass(frozen=True)
class Signal:
    """Floating-point samples at a known rate.

    Attributes
    ----------
    samples : numpy.ndarray
        float64 samples, nominal full scale +/-1.0.  Shape ``(n,)`` for mono
        or ``(n, channels)`` for several channels.
    rate_hz : float
        Sample rate in hertz.
    """

    samples: np.ndarray
    rate_hz: float

    @property
    def channels(self) -> int:
        """Number of channels (1 for a 1-D array)."""
        return 1 if self.samples.ndim == 1 else int(self.samples.shape[1])

    @property
    def frames(self) -> int:
        """Number of sample frames."""
        return int(self.samples.shape[0])

    @property
    def duration_s(self) -> float:
        """Length in seconds."""
        return self.frames / float(self.rate_hz)


def check_signal(signal: Signal, *, source: str | None = None, min_frames: int = 1) -> Signal:
    """Validate a signal and return it unchanged.

    This is the one place where sample data is checked: every entry point
    calls it before doing any DSP.

    Parameters
    ----------
    signal : Signal
        The signal to check.
    source : str, optional
        File name used in error messages.
    min_frames : int
        Fewest frames accepted.

    Raises
    ------
    SignalError
        If the samples are not a 1-D or 2-D real float array, are fewer than
        `min_frames`, contain NaN or infinity, or the rate is not positive.
    """
    x = signal.samples
    if not isinstance(x, np.ndarray) or x.dtype.kind not in "fiu" or x.ndim not in (1, 2):
        raise SignalError("expected a 1-D or 2-D real numeric array", file=source, field="samples")
    if x.shape[0] < min_frames:
        raise SignalError(
            f"expected at least {min_frames} sample frame(s), got {x.shape[0]}",
            file=source,
            field="samples",
        )
    if x.ndim == 2 and x.shape[1] < 1:
        raise SignalError("expected at least one channel", file=source, field="samples")
    if not np.all(np.isfinite(x)):
        bad = int(np.flatnonzero(~np.isfinite(x.reshape(x.shape[0], -1)).any(axis=1))[0])
        raise SignalError(
            f"samples must be finite; frame {bad} holds NaN or infinity",
            file=source,
            field="samples",
        )
    if not (np.isfinite(signal.rate_hz) and signal.rate_hz > 0):
        raise SignalError(
            f"must be a positive rate, got {signal.rate_hz!r}", file=source, field="rate_hz"
        )
    return signal


def load_clip(
    path: str | os.PathLike[str], *, channel: int | None = None, frames: int = -1
) -> Signal:
    """Read a sound file and reduce it to one channel.

    Parameters
    ----------
    path : str or path-like
        WAV, FLAC, OGG or AIFF file (anything libsndfile reads).
    channel : int, optional
        0-based channel to keep.  ``None`` (default) averages all channels
        into a mono mix.
    frames : int
        Read only this many frames (default all: -1).

    Returns
    -------
    Signal
        Mono float64 signal at the file's own sample rate.

    Raises
    ------
    AudioFileError
        If the file is missing or not a readable sound file.
    OptionError
        If `channel` does not exist in the file.
    SignalError
        If the file holds no samples or non-finite samples.

    Examples
    --------
    >>> sig = load_clip("demo_audio/door_chime.flac")  # doctest: +SKIP
    >>> sig.rate_hz, sig.channels  # doctest: +SKIP
    (44100, 1)
    """
    from ladderpack.reading import check_regular_file

    name = os.fspath(path)
    if not os.path.exists(name):
        raise AudioFileError("no such file", file=name)
    if os.path.isdir(name):
        raise AudioFileError("is a folder, expected a sound file", file=name)
    check_regular_file(name, what="sound file")
    try:
        cut = truncation(name)
        if cut:
            raise AudioFileError(cut, file=name)
        data, rate = soundfile.read(name, dtype="float64", always_2d=True, frames=frames)
    except OSError as exc:  # a device, a failing disk, a file that vanished
        raise AudioFileError(f"cannot read it ({exc.strerror or exc})", file=name) from None
    except (soundfile.LibsndfileError, RuntimeError, TypeError, ValueError) as exc:
        detail = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise AudioFileError(f"not a readable sound file ({detail})", file=name) from None
    check_rate(rate, name)
    n_ch = data.shape[1]
    if channel is None:
        mono = data[:, 0].copy()  # column sums: much faster than mean(axis=1) on 2-D data
        for ch in range(1, n_ch):
            mono += data[:, ch]
        mono /= n_ch
    else:
        if not 0 <= channel < n_ch:
            raise OptionError(
                f"file has {n_ch} channel(s), numbered 0..{n_ch - 1}; got {channel}",
                file=name,
                field="channel",
            )
        mono = data[:, channel].copy()
    return check_signal(Signal(np.ascontiguousarray(mono), float(rate)), source=name)


def truncation(path: str | os.PathLike[str]) -> str | None:
    """Why a WAV or AIFF file is cut short, or None if it is whole (or another format).

    The header's sample-data chunk (``data`` in RIFF/WAVE, Microsoft's RIFF
    specification; ``SSND`` in AIFF/AIFC, Apple's AIFF 1.3) declares its length
    in bytes; a file holding fewer bytes than that was cut short.  A length of
    0 or 0xFFFFFFFF is what a recorder writes while still recording, not a promise.
    """
    name = os.fspath(path)
    size = os.path.getsize(name)
    with open(name, "rb") as fh:
        head = fh.read(12)
        if head[:4] == b"RIFF" and head[8:12] == b"WAVE":
            order, want = "<", b"data"
        elif head[:4] == b"FORM" and head[8:12] in (b"AIFF", b"AIFC"):
            order, want = ">", b"SSND"
        else:
            return None
        pos = 12
        while pos + 8 <= size:
            fh.seek(pos)
            cid, clen = struct.unpack(order + "4sI", fh.read(8))
            if cid == want:
                avail = size - pos - 8
                if clen in (0, 0xFFFFFFFF) or clen <= avail:
                    return None
                return (
                    f"cut short: the header promises {clen} bytes of samples but the file "
                    f"holds {avail} ({100 * avail / clen:.0f} %); use the complete file"
                )
            pos += 8 + clen + (clen & 1)
    return None


#: Sample rates a clip may declare, Hz: below 1 Hz or above 1.5 MHz a header is broken or
#: hostile, not audio (common practice: audio interfaces stop at 768 kHz, measurement
#: recorders near 1 MHz).
CLIP_RATE_RANGE_HZ = (1.0, 1_500_000.0)


def check_rate(rate_hz: float, name: str) -> None:
    """Refuse a clip whose header declares a rate outside :data:`CLIP_RATE_RANGE_HZ`.

    Raises
    ------
    AudioFileError
        Naming the file and the rate.
    """
    lo, hi = CLIP_RATE_RANGE_HZ
    if not (math.isfinite(rate_hz) and lo <= rate_hz <= hi):
        raise AudioFileError(
            f"its header declares a sample rate of {rate_hz!r} Hz; a sound clip's rate lies "
            f"within {lo:g}..{hi:g} Hz (a broken or hostile header)",
            file=name,
        )


def read_samples_csv(path: str | os.PathLike[str]) -> np.ndarray:
    """Read captured samples from a CSV file: the last numeric column of each row.

    Header lines (any line with a cell that is not a number, before the first data
    row) and ``#`` comment lines are skipped; a scope export with ``time,value``
    columns works as it is. :func:`read_capture_csv` also reads the sample interval.

    Raises
    ------
    AudioFileError
        Naming the file and line of a value that is not a number.
    """
    return read_capture_csv(path)[0]


def _seconds(text: str) -> float | None:
    """'1e-06', '1 us', '2.5E-7 s', '10ns' -> seconds; None if it is not a time."""
    import re

    m = re.fullmatch(r"\s*([-+0-9.eE]+)\s*(s|ms|us|µs|ns|ps)?\s*", text)
    if m is None:
        return None
    try:
        v = float(m.group(1))
    except ValueError:
        return None
    scale = {"s": 1.0, None: 1.0, "ms": 1e-3, "us": 1e-6, "µs": 1e-6, "ns": 1e-9, "ps": 1e-12}
    return v * scale[m.group(2)]


def read_capture_csv(path: str | os.PathLike[str]) -> tuple[np.ndarray, float | None, str]:
    """Read a capture CSV: samples, the sample rate it states (or None), and how it knew.

    The rate comes from a header line naming the sample interval or rate (a first cell
    such as ``Sample Interval``, ``X increment``, ``dt``, ``Sample rate``; a value with
    an optional unit s, ms, us, ns), or else from a first column of evenly rising times
    when the rows hold two or more numbers. Header lines are never taken as samples.

    Raises
    ------
    AudioFileError
        Naming the file and line of a value that is not a number.
    """
    import csv
    import re

    name = os.fspath(path)
    from ladderpack.reading import check_regular_file

    check_regular_file(name, what="capture CSV")
    values: list[float] = []
    times: list[float] = []
    interval: float | None = None
    how = ""
    started = False
    increment_col: int | None = None  # a header row naming an "Increment" column
    try:
        with open(name, encoding="utf-8-sig", newline="") as fh:
            for line, row in enumerate(csv.reader(fh), start=1):
                cells = [c.strip() for c in row if c.strip()]
                if not cells or cells[0].startswith("#"):
                    continue
                try:
                    nums = [float(c) for c in cells]
                except ValueError:
                    if started:
                        bad = next(c for c in cells if not _is_number(c))
                        raise AudioFileError(
                            f"expected a number, got {bad!r}", file=f"{name}:{line}"
                        ) from None
                    raw = [c.strip() for c in row]
                    # a scope's column layout: "X,CH1,Start,Increment," names the columns,
                    # and the next header row holds their values ("Sequence,Volt,-6e-3,2e-6")
                    if increment_col is not None and increment_col < len(raw):
                        s = _seconds(raw[increment_col])
                        if s is not None and s > 0:
                            interval = s
                            how = f"header line {line} (the Increment column)"
                        increment_col = None
                    lowered = [c.lower() for c in raw]
                    if "increment" in lowered and interval is None:
                        increment_col = lowered.index("increment")
                        continue
                    key = cells[0].lower()
                    if len(cells) >= 2 and re.search(
                        r"sample ?interval|x ?increment|sample ?period|time ?per ?sample|^dt$",
                        key,
                    ):
                        s = _seconds(cells[1])
                        if s is not None and s > 0:
                            interval, how = s, f"header line {line} ({cells[0]})"
                    elif len(cells) >= 2 and re.search(r"sampl(e|ing) ?rate", key):
                        try:
                            r = float(re.sub(r"[^0-9.eE+-]", "", cells[1]))
                        except ValueError:
                            r = 0.0
                        if r > 0:
                            interval, how = 1.0 / r, f"header line {line} ({cells[0]})"
                    continue  # a header line, never a sample
                started = True
                values.append(nums[-1])
                if len(nums) >= 2:
                    times.append(nums[0])
    except FileNotFoundError:
        raise AudioFileError("no such file", file=name) from None
    except (OSError, UnicodeDecodeError, csv.Error) as exc:
        raise AudioFileError(f"cannot read CSV ({exc})", file=name) from None
    if interval is None and len(times) == len(values) and len(times) > 2:
        tt = np.asarray(times)
        d = np.diff(tt)
        step = float(tt[-1] - tt[0]) / (tt.size - 1)  # over the whole record: precise
        # a column counting 0, 1, 2, ... (or from 1) numbers the samples: it is no time
        counting = bool(np.all(d == 1.0)) and tt[0] in (0.0, 1.0)
        # evenly spaced, allowing for the rounding of printed times
        if not counting and step > 0 and np.all(np.abs(d - step) <= 1e-3 * step):
            interval, how = step, "the time column"
    x = np.asarray(values, dtype=np.float64)
    check_signal(Signal(x, 1.0), source=name, min_frames=8)
    return x, (None if interval is None else 1.0 / interval), how


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True
