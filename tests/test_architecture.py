"""The import graph: no cycles, and every arrow points down the layers of
docs/architecture.md (cli -> build -> stream/tables/bundle -> output systems -> emitters
-> stages -> model and kernels; the output registry loads an output's module by name).
Static checks (mypy, ruff with its docstring rules) run here too, so CI fails on them
like on any other test."""

from __future__ import annotations

import ast
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parent.parent
PKG = REPO / "ladderpack"

#: Layer of each module; imports may only go to the same or a lower layer.
LAYERS: dict[int, set[str]] = {
    0: {
        "errors", "_version", "defaults", "targets", "_kernels", "emit.names", "reading",
        "portable", "outputs",
    },
    1: {"options"},
    2: {
        "audio", "conform", "loudness", "clock", "quantize", "pack", "pio", "shaping",
        "levels", "ladder", "waves", "measure", "budget", "sources", "plots", "compress",
    },
    3: {"asset"},
    4: {
        "emit", "emit.binary", "emit.c", "emit.micropython", "emit.pioasm",
        "emit.sidecar", "emit.sweep", "emit.table", "emit.player_stereo",
        "emit.templates",
    },
    # every output system's module (the registry's), whatever outputs there are
    5: {f"outputs.{p.stem}" for p in (PKG / "outputs").glob("*.py") if p.stem != "__init__"},
    6: {"bundle", "stream", "tables", "demo", "preview"},
    7: {"build"},
    # the command line: the package and every command module
    8: {"cli", "__main__"}
    | {f"cli.{p.stem}" for p in (PKG / "cli").glob("*.py") if p.stem != "__init__"},
}  # fmt: skip

#: Signal processing, which emitters must not know.
DSP = {"conform", "loudness", "quantize", "shaping", "measure", "audio", "sources", "waves"}


def _modules() -> dict[str, Path]:
    out = {}
    for p in PKG.rglob("*.py"):
        rel = p.relative_to(PKG).with_suffix("").as_posix().replace("/", ".")
        out[rel.removesuffix(".__init__") if rel != "__init__" else ""] = p
    return out


def _edges() -> dict[str, set[str]]:
    mods = _modules()
    edges: dict[str, set[str]] = {m: set() for m in mods if m}
    for m in edges:
        tree = ast.parse(mods[m].read_text())
        # imports under ``if TYPE_CHECKING:`` name types for the checker and never run
        typing_only = {
            id(n)
            for node in ast.walk(tree)
            if isinstance(node, ast.If) and ast.unparse(node.test) == "TYPE_CHECKING"
            for n in ast.walk(node)
        }
        for node in ast.walk(tree):
            if id(node) in typing_only:
                continue
            names: list[str] = []
            if isinstance(node, ast.ImportFrom) and node.module:
                base = node.module.removeprefix("ladderpack").lstrip(".")
                if node.module.startswith("ladderpack"):
                    names = [base] + [f"{base}.{a.name}".lstrip(".") for a in node.names]
            elif isinstance(node, ast.Import):
                names = [a.name.removeprefix("ladderpack.") for a in node.names]
            edges[m] |= {n for n in names if n in mods and n and n != m}
    return edges


def test_every_module_has_a_layer() -> None:
    placed = set().union(*LAYERS.values())
    assert set(_edges()) == placed


def test_imports_point_down_the_layers() -> None:
    rank = {m: k for k, ms in LAYERS.items() for m in ms}
    upward = [(a, b) for a, bs in _edges().items() for b in bs if rank[b] > rank[a]]
    assert not upward


def test_no_import_cycles() -> None:
    edges = _edges()
    state: dict[str, int] = {}
    cycle: list[str] = []

    def visit(m: str, path: list[str]) -> bool:
        state[m] = 1
        for n in sorted(edges[m]):
            if state.get(n) == 1:
                cycle.extend([*path, m, n])
                return True
            if n not in state and visit(n, [*path, m]):
                return True
        state[m] = 2
        return False

    for m in sorted(edges):
        if m not in state and visit(m, []):
            break
    assert not cycle, " -> ".join(cycle)


def test_emitters_know_no_dsp() -> None:
    for m, deps in _edges().items():
        if m == "emit" or m.startswith("emit."):
            assert not deps & DSP, (m, deps & DSP)


@pytest.mark.parametrize(
    "argv",
    [
        [sys.executable, "-m", "mypy"],
        ["ruff", "check", "."],
        ["ruff", "format", "--check", "."],
    ],
    ids=["mypy", "ruff-check", "ruff-format"],
)
def test_static_checks_pass(argv: list[str]) -> None:
    # mypy settings and ruff's rules (docstrings with the numpy convention included)
    # live in pyproject.toml.
    if argv[0] == "ruff" and shutil.which("ruff") is None:
        argv = [sys.executable, "-m", "ruff", *argv[1:]]
    res = subprocess.run(argv, cwd=REPO, capture_output=True, text=True)
    assert res.returncode == 0, res.stdout + res.stderr
