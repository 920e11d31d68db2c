"""The output registry: one object per output system, and no branching on the output's kind
anywhere else.

The rule checked (our own design rule, docs/architecture.md): outside
``ladderpack/outputs/``, no code compares a value with an output's name, asks
``isinstance`` of a class an output module defines, or tests a name's prefix against an
output's name.  Such a branch is how the pipeline grew before the registry: adding an
output meant finding every one of them.
"""

from __future__ import annotations

import ast
import inspect
from pathlib import Path

import pytest

from ladderpack import outputs
from ladderpack.options import StreamOptions, WaveTableSpec, option_fields
from ladderpack.outputs.base import Output

PKG = Path(__file__).resolve().parent.parent / "ladderpack"
OUTPUTS_DIR = PKG / "outputs"


def _output_words() -> set[str]:
    """Every registered name, and the spellings an output goes by in code."""
    words = set(outputs.names())
    words |= {n.replace("-", "_") for n in words} | {n.split("-")[0] for n in words}
    return words


def _output_classes() -> set[str]:
    """Classes the output modules define (layouts, plans, set-ups, formats, objects)."""
    found = set()
    for path in OUTPUTS_DIR.glob("*.py"):
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.ClassDef):
                found.add(node.name)
    # the ladder's layouts live in the packing stage, shared by every output
    return found - {"OutputPlan", "PreviewModel", "SummaryLines", "WaveTable", "ClockReport"}


def _strings(node: ast.AST) -> list[str]:
    if isinstance(node, ast.Constant) and isinstance(node.value, str):
        return [node.value]
    if isinstance(node, ast.Tuple | ast.List | ast.Set):
        return [s for e in node.elts for s in _strings(e)]
    return []


def _branches(path: Path, words: set[str], classes: set[str]) -> list[str]:
    found = []
    for node in ast.walk(ast.parse(path.read_text())):
        where = f"{path.name}:{getattr(node, 'lineno', 0)}"
        if isinstance(node, ast.Compare):
            for side in (node.left, *node.comparators):
                hit = [s for s in _strings(side) if s in words]
                if hit:
                    found.append(f"{where}: compares with {hit}")
        elif isinstance(node, ast.Call) and isinstance(node.func, ast.Name):
            if node.func.id == "isinstance" and len(node.args) == 2:
                names = {n.id for n in ast.walk(node.args[1]) if isinstance(n, ast.Name)}
                if names & classes:
                    found.append(f"{where}: isinstance of {sorted(names & classes)}")
        elif (
            isinstance(node, ast.Call)
            and isinstance(node.func, ast.Attribute)
            and node.func.attr in ("startswith", "endswith")
            and node.args
        ):
            hit = [s for s in _strings(node.args[0]) if s.rstrip("-_") in words]
            if hit:
                found.append(f"{where}: {node.func.attr}({hit})")
    return found


def test_no_output_kind_branching_outside_the_outputs() -> None:
    words, classes = _output_words(), _output_classes()
    found = [
        hit
        for path in sorted(PKG.rglob("*.py"))
        if OUTPUTS_DIR not in path.parents
        for hit in _branches(path, words, classes)
    ]
    assert not found, "\n".join(found)


def test_the_check_finds_a_branch(tmp_path: Path) -> None:
    # the check itself, on code written the old way
    bad = tmp_path / "bad.py"
    bad.write_text(
        "def f(opts, lay, p):\n"
        "    if opts.output == 'i2s':\n"
        "        return 1\n"
        "    if opts.output in ('pwm', 'ladder'):\n"
        "        return 2\n"
        "    if isinstance(lay, I2sLayout):\n"
        "        return 3\n"
        "    return p.variant.startswith('i2s')\n"
    )
    got = _branches(bad, _output_words(), _output_classes() | {"I2sLayout"})
    assert len(got) == 4, got


PROTOCOL = [
    name
    for name, member in inspect.getmembers(Output)
    if not name.startswith("_") and (inspect.isfunction(member) or name == "name")
]


@pytest.mark.parametrize("name", outputs.names())
def test_every_output_implements_the_protocol(name: str) -> None:
    out = outputs.get_output(name)
    assert out.name == name
    missing = [m for m in PROTOCOL if not hasattr(out, m)]
    assert not missing, missing
    for m in PROTOCOL:
        if m == "name":
            continue
        want = inspect.signature(getattr(Output, m))
        got = inspect.signature(getattr(type(out), m))
        assert list(got.parameters) == list(want.parameters), (m, got, want)


def test_every_option_group_is_taken_and_known() -> None:
    groups = {
        info.group
        for cls in (StreamOptions, WaveTableSpec)
        for _f, info, _h in option_fields(cls)
        if info.group
    }
    # the groups the registry lines list, and each output's own (named after it)
    taken = set().union(*(e.takes for e in outputs.REGISTRY))
    own = {e.name for e in outputs.REGISTRY if e.options}
    assert groups == taken | own


def test_an_option_of_another_output_is_refused_naming_who_takes_it() -> None:
    from ladderpack.errors import OptionError

    with pytest.raises(OptionError, match="frame_format: applies to output i2s, not to output pwm"):
        StreamOptions(output="pwm", frame_format="left-justified")
    level = outputs.takers("level")  # the outputs that hold a DC level
    assert {"ladder", "pwm", "i2c-dac"} <= set(level) and "i2s" not in level
    who = "outputs " + ", ".join(level[:-1]) + " and " + level[-1]
    with pytest.raises(OptionError, match=f"idle_code: applies to {who}, not to output i2s"):
        StreamOptions(output="i2s", idle_code=3)


def test_old_pin_spellings_keep_working_for_a_release_and_say_so(tmp_path: Path) -> None:
    import json
    import subprocess
    import sys

    # the command line: one warning line per old spelling, the bundle under the new names
    res = subprocess.run(
        [sys.executable, "-m", "ladderpack", "tone", "sine", "--output", "i2s", "--seconds",
         "0.002", "--out-base", "9", "--clock-pin", "10", "--name", "t", "-o", str(tmp_path)],
        capture_output=True, text=True,
    )  # fmt: skip
    assert res.returncode == 0, res.stderr
    lines = [x for x in res.stderr.splitlines() if "warning:" in x]
    assert len(lines) == 2, res.stderr
    assert "out_base is the old spelling of data_pin" in lines[0]
    assert "clock_pin is the old spelling of bit_clock_pin" in lines[1]
    side = json.loads((tmp_path / "t.json").read_text())
    assert (side["options"]["data_pin"], side["options"]["bit_clock_pin"]) == (9, 10)
    assert not {"out_base", "clock_pin"} & set(side["options"])
    # an old spelling of an option the output never took is still refused
    from ladderpack.errors import OptionError

    with pytest.raises(OptionError, match="clock_pin: applies to outputs i2s and i2c-dac"):
        StreamOptions(clock_pin=3)
    with pytest.raises(OptionError, match=r"give data_pin .* not both"):
        StreamOptions(output="i2s", out_base=3, data_pin=4)


@pytest.mark.parametrize("entry", outputs.REGISTRY, ids=lambda e: e.name)
def test_every_output_follows_the_naming_scheme(entry: outputs.Entry) -> None:
    # the scheme of outputs.Entry's notes: files and C take the short name
    from ladderpack.emit import templates

    short = outputs.short_name(entry.name)
    stem = f"ladderpack_{'player' if short == 'ladder' else short}"
    assert stem in entry.players
    for what in entry.players:
        made = templates.player(what) if what != "ladderpack_stereo" else None
        if made is None:
            continue
        header = made[f"{what}.h"].decode()
        prefix = "lp_ladder_" if short == "ladder" else f"lp_{short}_"
        assert f"int {prefix}init(" in header
        # one verb for a DC level on every output that holds one (takes the "level" group)
        assert (f"int {prefix}hold_code(" in header) == ("level" in entry.takes)
        assert f"{prefix}stream_t" in header and f"{prefix}player_t" in header
