"""A bundle: the files of a stream asset, rendered by the emitters and written as a set."""

from __future__ import annotations

import os
from typing import Any

from ladderpack.asset import StreamAsset, StreamSummary
from ladderpack.defaults import EMBED_WORDS_MAX

__all__ = [
    "EMBED_WORDS_MAX",
    "StreamAsset",
    "StreamSummary",
    "bundle_files",
    "bundle_parts",
    "write_bundle",
]


def bundle_files(asset: StreamAsset, *, embed_words_max: int | None = None) -> dict[str, bytes]:
    """Render every output file of a bundle, sidecar last.

    Parameters
    ----------
    asset : StreamAsset
        The stream.
    embed_words_max : int, optional
        Streams of at most this many words are also embedded in the
        MicroPython module as a literal; longer ones are read from the
        ``.bin`` file on the board's filesystem.  Default: the asset's own
        ``embed_words_max`` option.

    Returns
    -------
    dict of str to bytes
        File name to content, in writing order (the sidecar is last).
    """
    from ladderpack.emit import sidecar

    made = {k: _bytes(v) for k, v in _output_files(asset, embed_words_max).items()}
    made[f"{asset.name}.json"] = sidecar.render(asset, made).encode()
    return made


def bundle_parts(asset: StreamAsset, *, embed_words_max: int | None = None) -> dict[str, Any]:
    """Like :func:`bundle_files`, but with the large files left lazy.

    The large files are byte chunks and the sidecar is made from the digests of the
    files written before it.

    For :func:`ladderpack.emit.write_files`; the bytes written are identical to
    :func:`bundle_files`.
    """
    from ladderpack.emit import sidecar

    return {
        **_output_files(asset, embed_words_max),
        f"{asset.name}.json": lambda digests: sidecar.render(asset, digests=digests).encode(),
    }


def _output_files(asset: StreamAsset, embed_words_max: int | None) -> dict[str, Any]:
    """Every file but the sidecar, from the asset's output (large ones as chunks)."""
    from ladderpack.outputs import get_output

    if embed_words_max is None:
        embed_words_max = int(asset.options.get("embed_words_max", EMBED_WORDS_MAX))
    return get_output(asset.output).files(asset, embed=asset.word_count <= embed_words_max)


def _bytes(content: Any) -> bytes:
    return content if isinstance(content, bytes) else b"".join(content)


def write_bundle(
    asset: StreamAsset, out_dir: str | os.PathLike[str], *, embed_words_max: int | None = None
) -> list[str]:
    """Render a bundle and write it atomically into `out_dir`.

    Returns the paths written.  See :func:`ladderpack.emit.write_files`.
    """
    import json

    from ladderpack.emit import write_files
    from ladderpack.errors import OutputError

    side = os.path.join(os.fspath(out_dir), f"{asset.name}.json")
    try:
        with open(side, encoding="utf-8") as fh:
            before = json.load(fh).get("options", {}).get("name")
    except (OSError, ValueError, AttributeError):
        before = None
    now = asset.options.get("name")
    if before is not None and now is not None and before != now:
        raise OutputError(
            f"the folder already holds the bundle of asset {before!r}, and {now!r} becomes the "
            f"same identifier {asset.name!r}; pick another name or folder",
            file=side,
            field="name",
        )
    return write_files(bundle_parts(asset, embed_words_max=embed_words_max), out_dir)
