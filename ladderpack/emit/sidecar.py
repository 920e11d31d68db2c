"""The JSON sidecar: every parameter needed to reproduce or play a stream."""

from __future__ import annotations

import hashlib
from collections.abc import Mapping

from ladderpack._version import __version__
from ladderpack.asset import StreamAsset
from ladderpack.outputs import get_output
from ladderpack.reading import json_text

__all__ = ["FORMAT", "FORMAT_VERSION", "render"]

FORMAT = "ladderpack-stream"
FORMAT_VERSION = 1


def render(
    asset: StreamAsset,
    files: Mapping[str, bytes] | None = None,
    *,
    digests: Mapping[str, str] | None = None,
) -> str:
    """Return the sidecar JSON text.

    Parameters
    ----------
    asset : StreamAsset
        The stream.
    files : mapping of str to bytes, optional
        The bundle's other files; their SHA-256 digests are recorded so a
        build can tell a hand-edited or incomplete bundle.
    digests : mapping of str to str, optional
        The digests themselves, when the files were streamed to disk.
    """
    if digests is None:
        digests = {name: hashlib.sha256(data).hexdigest() for name, data in (files or {}).items()}
    doc = {
        "format": FORMAT,
        "format_version": FORMAT_VERSION,
        "tool": {"name": "ladderpack", "version": __version__},
        "asset": asset.name,
        "source": asset.source,
        "options": asset.options,
        "clock": asset.plan.to_dict(),
        "layout": asset.packed.layout.to_dict(),
        **get_output(asset.output).sidecar_blocks(asset),
        "stream": {
            "bits": asset.packed.layout.bits,
            "idle_code": asset.idle_code,
            "pad_code": asset.packed.pad_code,
            "sample_count": asset.sample_count,
            "word_count": asset.word_count,
            "bytes": asset.byte_count,
            "duration_s": round(asset.duration_s, 9),
        },
        "stats": asset.stats,
        "files": dict(sorted(digests.items())),
    }
    return json_text(doc, indent=2) + "\n"
