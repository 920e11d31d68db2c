"""The static generated texts are real files (ladderpack/templates): what the players
put in a bundle is their template with only the tool's version filled in, line for line,
so a compiler's diagnostic in a generated player points at the template's line; the
markers sit in comments, where C ignores them (ISO C 6.4.9, comments). The chip tests
compile every player with the vendor SDK, warnings as errors, and run it."""

from __future__ import annotations

from pathlib import Path

import pytest

from ladderpack._version import __version__
from ladderpack.emit import templates
from ladderpack.emit.names import DECODER_FILES, PLAYER_FILES

TEMPLATES = Path(__file__).resolve().parent.parent / "ladderpack" / "templates"
#: Players made from another's template rather than kept as files of their own.
DERIVED = {"ladderpack_stereo"}


@pytest.mark.parametrize("stem", sorted(set(PLAYER_FILES) - DERIVED - {"ladderpack_common"}))
def test_players_are_their_templates_line_for_line(stem: str) -> None:
    made = templates.player(stem)
    decoders = set(templates.included_decoders(made[f"{stem}.h"]))
    assert set(made) == {f"{stem}.h", f"{stem}.c", templates.COMMON_NAME} | decoders
    for name, data in made.items():
        tpl = (TEMPLATES / name).read_text().splitlines()
        got = data.decode().splitlines()
        assert len(got) == len(tpl)
        diff = [(a, b) for a, b in zip(got, tpl, strict=True) if a != b]
        assert diff == [(tpl[0].replace("@@VERSION@@", __version__), tpl[0])], name


def test_every_template_is_used_and_its_markers_are_in_comments() -> None:
    files = {p.name for p in TEMPLATES.iterdir() if p.is_file()}
    shared = {f"{s}.{e}" for s in PLAYER_FILES if s not in DERIVED for e in ("h", "c")}
    decoders = {f"{s}.h" for s in DECODER_FILES}
    assert files == (shared - {"ladderpack_common.c"}) | decoders
    for name in files:
        for line in (TEMPLATES / name).read_text().splitlines():
            if "@@" in line:
                assert line.lstrip().startswith(("/*", "*")), (name, line)


@pytest.mark.parametrize("stem", sorted(DECODER_FILES))
def test_decoders_are_their_templates(stem: str) -> None:
    ((name, data),) = templates.decoder(stem).items()
    tpl = (TEMPLATES / name).read_text()
    assert data.decode() == tpl.replace("@@VERSION@@", __version__)


def test_fill_refuses_a_missing_or_extra_value_and_a_second_line() -> None:
    with pytest.raises(KeyError):
        templates.fill("/* @@A@@ @@B@@ */", {"A": "x"})
    with pytest.raises(KeyError):
        templates.fill("/* @@A@@ */", {"A": "x", "C": "y"})
    with pytest.raises(ValueError):
        templates.fill("/* @@A@@ */", {"A": "x\ny"})
