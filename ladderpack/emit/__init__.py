"""Output generators and the atomic bundle writer.

Every generator is pure: it takes data and returns ``bytes`` or ``str``.
Only :func:`write_files` touches the file system, and it does so atomically:
each file goes to a temporary name in the target folder and is renamed into
place once all of them are written, so an interrupted run leaves the earlier
outputs intact and no partial files behind.
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import tempfile
from collections.abc import Callable, Iterable, Mapping

from ladderpack.errors import OutputError

__all__ = ["Content", "write_files"]


#: What a file's content may be: bytes, an iterable of byte chunks (written as they come,
#: for large files), or a function called with the SHA-256 digests of the files written
#: before it (for a sidecar that records them).
Content = bytes | Iterable[bytes] | Callable[[dict[str, str]], bytes]


def write_files(files: Mapping[str, Content], out_dir: str | os.PathLike[str]) -> list[str]:
    """Write a set of files into `out_dir`, all or nothing.

    Parameters
    ----------
    files : mapping of str to content
        File name (no folders) to content (see :data:`Content`).  Written in
        the mapping's order, so put the file that marks the set complete (the
        sidecar) last.
    out_dir : str or path-like
        Target folder; created if missing.

    Returns
    -------
    list of str
        Paths written.

    Raises
    ------
    OutputError
        If the folder cannot be created or written.  Nothing is left behind.
    """
    folder = os.fspath(out_dir)
    for name in files:
        if not name or os.sep in name or (os.altsep and os.altsep in name) or name in (".", ".."):
            raise OutputError(f"unsafe output file name {name!r}", file=folder)
    try:
        os.makedirs(folder, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"cannot create output folder ({exc.strerror})", file=folder) from None
    umask = os.umask(0)
    os.umask(umask)
    _remove_stale_parts(folder, files)
    temps: list[tuple[str, str]] = []
    try:
        digests: dict[str, str] = {}
        for name, data in files.items():
            fd, tmp = tempfile.mkstemp(prefix=f".{name}.", suffix=".part", dir=folder)
            temps.append((tmp, os.path.join(folder, name)))
            os.chmod(tmp, 0o666 & ~umask)  # mkstemp makes 0600; give the usual mode
            h = hashlib.sha256()
            with os.fdopen(fd, "wb") as fh:
                if callable(data):
                    data = data(dict(digests))
                chunks = [data] if isinstance(data, bytes | bytearray | memoryview) else data
                for chunk in chunks:
                    fh.write(chunk)
                    h.update(chunk)
                fh.flush()
                os.fsync(fh.fileno())
            digests[name] = h.hexdigest()
        for tmp, final in temps:
            os.replace(tmp, final)
    except OSError as exc:
        _cleanup(temps)
        raise OutputError(f"cannot write output ({exc.strerror or exc})", file=folder) from None
    except BaseException:  # Ctrl-C or a signal mid-write: leave nothing half-written
        _cleanup(temps)
        raise
    return [final for _, final in temps]


def _cleanup(temps: list[tuple[str, str]]) -> None:
    for tmp, _ in temps:
        if os.path.exists(tmp):
            os.unlink(tmp)


def _remove_stale_parts(folder: str, files: Mapping[str, object]) -> None:
    """Delete temporary files a killed earlier run left for these outputs."""
    try:
        entries = os.listdir(folder)
    except OSError:
        return
    for entry in entries:
        if entry.endswith(".part") and any(entry.startswith(f".{name}.") for name in files):
            with contextlib.suppress(OSError):
                os.unlink(os.path.join(folder, entry))
