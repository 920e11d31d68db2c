"""Static generated texts kept as real files: the templates in ``ladderpack/templates``.

A template is a file of the language it generates (a C player is a ``.c`` file that
compiles as it stands), with markers ``@@NAME@@`` only inside comments or strings, where
the language ignores them.  :func:`render` is the one substitution step: every marker
must get a value and every value must be one line, so a generated file has the
template's lines one for one and a compiler's diagnostic points at the template's line.

Examples
--------
>>> fill("/* made by @@TOOL@@ */", {"TOOL": "ladderpack"})
'/* made by ladderpack */'
"""

from __future__ import annotations

import functools
import re
from collections.abc import Mapping
from importlib import resources

__all__ = ["COMMON_NAME", "MARKER", "decoder", "fill", "player", "render", "source"]

#: A marker: ``@@`` + capitals, digits and underscores + ``@@``.
MARKER = re.compile(r"@@([A-Z][A-Z0-9_]*)@@")


@functools.cache
def source(name: str) -> str:
    """The text of template `name` (a file name in ``ladderpack/templates``)."""
    return resources.files("ladderpack").joinpath("templates", name).read_text(encoding="utf-8")


def fill(text: str, values: Mapping[str, str]) -> str:
    """Replace every ``@@NAME@@`` of `text` by ``values[NAME]``.

    Raises
    ------
    KeyError
        For a marker without a value, or a value no marker takes.
    ValueError
        For a value of more than one line (the lines would no longer match).
    """
    used = set(MARKER.findall(text))
    missing, extra = used - set(values), set(values) - used
    if missing or extra:
        raise KeyError(f"template markers without values {sorted(missing)}, unused {sorted(extra)}")
    for k, v in values.items():
        if "\n" in v:
            raise ValueError(f"the value of @@{k}@@ must be one line")
    return MARKER.sub(lambda m: values[m.group(1)], text)


def render(name: str, **values: str) -> str:
    """Template `name` with its markers filled (see :func:`fill`)."""
    return fill(source(name), values)


#: The header every C player includes (the ramp shape, DMA abort and feed, GPIO base).
COMMON_NAME = "ladderpack_common.h"


@functools.cache
def player(stem: str) -> dict[str, bytes]:
    """The files of the C player `stem` (registered in ``emit.names.PLAYER_FILES``).

    Its header and source from their templates, the players' shared header, and the
    decoder headers it includes (:func:`included_decoders`).

    Examples
    --------
    >>> sorted(player("ladderpack_i2s"))[2:]
    ['ladderpack_i2s.c', 'ladderpack_i2s.h', 'ladderpack_lossless.h']
    """
    from ladderpack._version import __version__
    from ladderpack.emit.names import player_files

    names = (*player_files(stem), COMMON_NAME)
    made = {n: render(n, VERSION=__version__).encode() for n in names}
    return {**made, **included_decoders(made[names[0]])}


def included_decoders(header: bytes) -> dict[str, bytes]:
    """The decoder headers (``emit.names.DECODER_FILES``) a player's header includes."""
    from ladderpack.emit.names import DECODER_FILES

    out: dict[str, bytes] = {}
    for stem in DECODER_FILES:
        if f'#include "{stem}.h"'.encode() in header:
            out.update(decoder(stem))
    return out


@functools.cache
def decoder(stem: str) -> dict[str, bytes]:
    """The header of the decoder `stem` (registered in ``emit.names.DECODER_FILES``).

    Examples
    --------
    >>> sorted(decoder("ladderpack_lossless"))
    ['ladderpack_lossless.h']
    """
    from ladderpack._version import __version__
    from ladderpack.emit.names import DECODER_FILES

    if stem not in DECODER_FILES:
        raise KeyError(f"{stem!r} is not in DECODER_FILES: register the decoder there")
    return {f"{stem}.h": render(f"{stem}.h", VERSION=__version__).encode()}
