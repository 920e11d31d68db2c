"""Every example in the package's docstrings runs and gives what it shows (the
numpydoc ``Examples`` sections are documentation a user copies: they must stay true)."""

from __future__ import annotations

import doctest
import importlib
import pkgutil

import pytest

import ladderpack

MODULES = sorted(
    m.name
    for m in pkgutil.walk_packages(ladderpack.__path__, "ladderpack.")
    if not m.name.startswith("ladderpack.__main__")
)


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name: str) -> None:
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS, verbose=False)
    assert result.failed == 0, f"{result.failed} of {result.attempted} examples failed in {name}"
