"""Safe identifiers and file names derived from user-supplied asset names."""

from __future__ import annotations

import keyword
import re
import unicodedata

from ladderpack import outputs
from ladderpack.errors import OptionError

__all__ = [
    "C_KEYWORDS",
    "DECODER_FILES",
    "PLAYER_FILES",
    "RESERVED_NAMES",
    "asset_identifier",
    "c_symbols",
    "comment_safe",
    "player_files",
]

#: C99 keywords plus names the generated code must not shadow.
C_KEYWORDS = frozenset(
    [
        "auto",
        "break",
        "case",
        "char",
        "const",
        "continue",
        "default",
        "do",
        "double",
        "else",
        "enum",
        "extern",
        "float",
        "for",
        "goto",
        "if",
        "inline",
        "int",
        "long",
        "register",
        "restrict",
        "return",
        "short",
        "signed",
        "sizeof",
        "static",
        "struct",
        "switch",
        "typedef",
        "union",
        "unsigned",
        "void",
        "volatile",
        "while",
        "_Bool",
        "_Complex",
        "_Imaginary",
        "bool",
        "true",
        "false",
        "NULL",
        "main",
        "uint8_t",
        "uint16_t",
        "uint32_t",
        "int8_t",
        "int16_t",
        "int32_t",
        "size_t",
    ]
)


#: Identifiers an asset may not have, and why: fixed output names of the tool, and
#: modules a bundle's MicroPython file would shadow on the board (the modules the
#: generated code imports, and the two files MicroPython runs at start-up).
#: The files a bundle shares among its assets (the C players), by stem, as each output's
#: registry line lists them. A player takes its file names from :func:`player_files`, which
#: accepts only stems registered so, and every shared file's stem is a reserved asset name.
PLAYER_FILES: dict[str, str] = {
    "ladderpack_common": "the header every C player includes",
    **{stem: what for e in outputs.REGISTRY for stem, what in e.players.items()},
}


#: Header-only decoders of compressed streams (``ladderpack.compress``), by stem: C a
#: player or an application includes to turn a compressed stream back into codes.
DECODER_FILES: dict[str, str] = {
    "ladderpack_lossless": "the lossless code-stream decoder",
    "ladderpack_adpcm": "the IMA ADPCM decoder",
}


def player_files(stem: str) -> tuple[str, str]:
    """The header and source file names of a registered player.

    Examples
    --------
    >>> player_files("ladderpack_pwm")
    ('ladderpack_pwm.h', 'ladderpack_pwm.c')
    """
    if stem not in PLAYER_FILES:
        raise KeyError(f"{stem!r} is not in PLAYER_FILES: register the player's files there")
    return f"{stem}.h", f"{stem}.c"


RESERVED_NAMES: dict[str, str] = {
    "assets": "the build's index files (assets.h, assets.c, assets.py)",
    **{stem: f"{what} ({stem}.h, {stem}.c)" for stem, what in PLAYER_FILES.items()},
    **{stem: f"{what} ({stem}.h)" for stem, what in DECODER_FILES.items()},
    **{
        m: f"MicroPython's {m} module, which {m}.py would shadow on the board"
        for m in ("rp2", "machine", "array", "time", "micropython", "gc", "os", "sys")
    },
    "boot": "MicroPython's start-up file boot.py, which the board runs at every reset",
}


#: Longest asset identifier: the stem of every output file name, which gets suffixes
#: (``_preview.wav``, ``.json``) and, while written, ``.NAME.<random>.part``: 255 bytes is
#: the usual file-name limit (NAME_MAX of ext4, XFS, APFS, NTFS), leaving room for those.
MAX_IDENTIFIER_LENGTH = 200


def asset_identifier(name: str) -> str:
    """Turn an asset name into an identifier valid in C and Python.

    Letters are folded to ASCII lower case, every other run of characters
    becomes one underscore, a leading digit gets an ``a_`` prefix, and C or
    Python keywords get a trailing underscore.  The result is also used as
    the stem of every output file name, so it never holds a path separator.
    Names in :data:`RESERVED_NAMES` are refused (`OptionError`).

    Examples
    --------
    >>> asset_identifier("Frost warning (v2).wav")
    'frost_warning_v2_wav'
    >>> asset_identifier("2nd chime")
    'a_2nd_chime'
    >>> asset_identifier("int")
    'int_'
    """
    folded = unicodedata.normalize("NFKD", str(name)).encode("ascii", "ignore").decode()
    ident = re.sub(r"[^A-Za-z0-9]+", "_", folded).strip("_").lower()
    if not ident:
        raise OptionError(
            f"{name!r} has no letters or digits to make an identifier from", field="name"
        )
    if ident[0].isdigit():
        ident = "a_" + ident
    if ident in C_KEYWORDS or keyword.iskeyword(ident) or keyword.issoftkeyword(ident):
        ident += "_"
    if len(ident) > MAX_IDENTIFIER_LENGTH:
        raise OptionError(
            f"{name[:40]!r}... becomes an identifier of {len(ident)} characters; file names "
            f"derived from it (with suffixes and temporary-file decorations) must stay within "
            f"the file system's 255-byte limit: at most {MAX_IDENTIFIER_LENGTH} characters",
            field="name",
        )
    if ident in RESERVED_NAMES:
        raise OptionError(
            f"{name!r} becomes {ident!r}, which is reserved for {RESERVED_NAMES[ident]}; "
            "pick another name",
            field="name",
        )
    return ident


def comment_safe(text: str) -> str:
    """Make text safe inside a C block comment or a Python comment line.

    Non-printable characters (newlines included) become ``?``, and ``*/`` is
    broken up so it cannot end the comment.
    """
    clean = "".join(ch if ch.isprintable() and ch.isascii() else "?" for ch in str(text))
    return clean.replace("*/", "* /").replace("/*", "/ *")


_C_DEFINE = re.compile(r"^[ \t]*#[ \t]*define[ \t]+([A-Za-z_]\w*)", re.MULTILINE)
_C_ARRAY = re.compile(
    r"^[ \t]*(?:extern[ \t]+)?(?:const[ \t]+)?\w+[ \t]+([A-Za-z_]\w*)[ \t]*\[", re.MULTILINE
)


def c_symbols(text: str) -> set[str]:
    r"""The macros and arrays a generated C header or source defines.

    Examples
    --------
    >>> sorted(c_symbols("#define A_BITS 8u\nextern const uint32_t a_words[4];"))
    ['A_BITS', 'a_words']
    """
    return set(_C_DEFINE.findall(text)) | set(_C_ARRAY.findall(text))
