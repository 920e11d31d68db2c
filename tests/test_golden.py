"""Every output format against its golden file (refresh: ``python tests/golden.py --refresh``).

The golden files are the project's own earlier outputs, not an outside reference:
they catch unnoticed changes.  The outside checks of the same outputs (compilers,
the independent assembler, the datasheet encodings) live in the other test files.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from golden import GOLDEN, SCENARIOS, render_scenario


@pytest.mark.parametrize("scenario", sorted(SCENARIOS))
def test_outputs_match_golden_files(scenario: str, tmp_path: Path) -> None:
    fresh = render_scenario(scenario, tmp_path)
    folder = GOLDEN / scenario
    stored = {p.relative_to(folder).as_posix() for p in folder.rglob("*") if p.is_file()}
    assert sorted(fresh) == sorted(stored), "the set of files changed; refresh if deliberate"
    changed = [rel for rel in sorted(fresh) if (folder / rel).read_bytes() != fresh[rel]]
    assert not changed, f"changed outputs: {changed}; run python tests/golden.py --refresh"
