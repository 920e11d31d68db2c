"""Reading what users and earlier runs hand us, as untrusted input.

Every file ladderpack reads (clips, manifests, sweeps, LevelSets, sidecars, its own
state file) goes through these checks first: it must be a regular file (a named
pipe or a device would block or never end), JSON must be strict (no ``NaN`` or
``Infinity``, which are not JSON) and not nested deeper than :data:`MAX_DEPTH`.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import stat
from typing import Any

from ladderpack.errors import AudioFileError, LadderpackError

__all__ = [
    "MAX_DEPTH",
    "check_regular_file",
    "json_text",
    "nesting_depth",
    "read_json",
    "sha256_file",
]

#: Deepest nesting accepted in any structured input (manifest, JSON).
MAX_DEPTH = 16


def check_regular_file(path: str | os.PathLike[str], *, what: str = "file") -> None:
    """Refuse anything but an existing regular file, before it is opened.

    Raises
    ------
    LadderpackError
        ``no such file`` or ``is not a regular file``, naming `path`.

    Examples
    --------
    >>> check_regular_file("/dev/null")
    Traceback (most recent call last):
    ...
    ladderpack.errors.LadderpackError: /dev/null: is not a regular file (a device); give a file
    """
    p = os.fspath(path)
    try:
        st = os.stat(p)
    except FileNotFoundError:
        raise LadderpackError(f"no such {what}", file=p) from None
    except OSError as exc:
        raise LadderpackError(f"cannot read {what} ({exc.strerror})", file=p) from None
    if not stat.S_ISREG(st.st_mode):
        kind = (
            "a folder"
            if stat.S_ISDIR(st.st_mode)
            else "a named pipe"
            if stat.S_ISFIFO(st.st_mode)
            else "a socket"
            if stat.S_ISSOCK(st.st_mode)
            else "a device"
        )
        raise LadderpackError(f"is not a regular file ({kind}); give a {what}", file=p)


def nesting_depth(obj: Any) -> int:
    """Depth of nested lists and dicts (a scalar is 0), without recursion."""
    deepest = 0
    stack: list[tuple[Any, int]] = [(obj, 0)]
    while stack:
        item, depth = stack.pop()
        if isinstance(item, dict):
            stack.extend((v, depth + 1) for v in item.values())
            deepest = max(deepest, depth + 1)
        elif isinstance(item, list | tuple):
            stack.extend((v, depth + 1) for v in item)
            deepest = max(deepest, depth + 1)
    return deepest


def _no_constant(name: str) -> float:
    raise ValueError(f"{name} is not JSON")


def read_json(path: str | os.PathLike[str], *, what: str = "JSON file") -> Any:
    """Read strict JSON: a regular file, no NaN or Infinity, limited nesting.

    Raises
    ------
    LadderpackError
        Naming the file and what is wrong with it.
    """
    p = os.fspath(path)
    check_regular_file(p, what=what)
    try:
        with open(p, encoding="utf-8-sig") as fh:
            doc = json.load(fh, parse_constant=_no_constant)
    except RecursionError:
        raise LadderpackError("not valid JSON (nested too deeply)", file=p) from None
    except (ValueError, UnicodeDecodeError) as exc:
        raise LadderpackError(f"not valid JSON ({exc})", file=p) from None
    except OSError as exc:
        raise LadderpackError(f"cannot read {what} ({exc.strerror})", file=p) from None
    if nesting_depth(doc) > MAX_DEPTH:
        raise LadderpackError(f"nested more than {MAX_DEPTH} levels deep", file=p)
    return doc


def _finite(obj: Any) -> Any:
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {k: _finite(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_finite(v) for v in obj]
    return obj


def json_text(obj: Any, *, indent: int | None = 2) -> str:
    """Strict JSON text: NaN and infinities become ``null`` (JSON has no such numbers).

    Examples
    --------
    >>> json_text({"snr_db": float("inf"), "bits": 8}, indent=None)
    '{"bits": 8, "snr_db": null}'
    """
    return json.dumps(_finite(obj), indent=indent, sort_keys=True, allow_nan=False)


def sha256_file(path: str | os.PathLike[str]) -> str:
    """Return the hex SHA-256 digest of a file's bytes.

    Raises
    ------
    AudioFileError
        Naming the file, when it cannot be read.
    """
    try:
        with open(path, "rb") as fh:
            return hashlib.file_digest(fh, "sha256").hexdigest()
    except OSError as exc:
        raise AudioFileError(
            f"cannot read it ({exc.strerror or exc})", file=os.fspath(path)
        ) from None
