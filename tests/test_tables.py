"""Correction tables and the calibration sweep script."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from helpers import cc_strict, mypy_micropython

from ladderpack.emit import sweep as emit_sweep
from ladderpack.emit import table as emit_table
from ladderpack.ladder import Ladder, ideal_ladder, perturbed
from ladderpack.levels import LevelSet, code_scale, correction_table, ideal_levels

REPO = Path(__file__).resolve().parent.parent


@pytest.mark.parametrize("bits", [4, 8, 10])
def test_ideal_ladder_table_is_identity(bits: int) -> None:
    np.testing.assert_array_equal(correction_table(ideal_levels(bits), bits), np.arange(1 << bits))


def test_wider_input_rounds_to_nearest_code() -> None:
    tab = correction_table(ideal_levels(8), 10)
    i = np.arange(1 << 10)
    np.testing.assert_array_equal(tab, np.clip(np.floor(i / 4 + 0.5), 0, 255))


def test_table_picks_nearest_true_level_even_when_non_monotonic() -> None:
    lad = ideal_ladder(8, 10_000.0)
    legs = list(lad.legs)
    legs[7] = (legs[7][0] * 1.03,)  # MSB leg 3 % high: the mid-scale step goes backwards
    v = Ladder(
        tuple(legs), lad.rungs, lad.termination_ohms, lad.source_high_ohms, lad.source_low_ohms, 3.3
    ).levels()
    lev = LevelSet(8, v)
    tab = correction_table(lev, 10)
    lv, centre, half = code_scale(lev)
    target = centre + (np.arange(1024) / 512 - 1) * half
    brute = np.argmin(np.abs(lv[None, :] - target[:, None]), axis=1)
    np.testing.assert_allclose(np.abs(lv[tab] - target), np.abs(lv[brute] - target))


@pytest.mark.parametrize("bits", [8, 12])
def test_table_c_compiles_and_python_parses(tmp_path: Path, bits: int) -> None:
    lev = LevelSet(
        bits, perturbed(ideal_ladder(bits), np.random.default_rng(1), tolerance=0.01).levels()
    )
    tab = correction_table(lev, bits + 2)
    (tmp_path / "fix.h").write_text(
        emit_table.render_c_header("fix", tab, in_bits=bits + 2, bits=bits, source="t.json")
    )
    (tmp_path / "fix.c").write_text(
        emit_table.render_c_source("fix", tab, bits=bits, source="t.json")
    )
    (tmp_path / "main.c").write_text(
        '#include "fix.h"\n#include <stdio.h>\nint main(void) {\n'
        "unsigned i; for (i = 0; i < FIX_LENGTH; ++i) "
        'printf("%u\\n", (unsigned)fix_table[i]);\nreturn 0; }\n'
    )
    exe = tmp_path / "t"
    cc_strict(exe, tmp_path / "main.c", tmp_path / "fix.c")
    out = subprocess.run([str(exe)], capture_output=True, text=True, check=True).stdout.split()
    assert [int(x) for x in out] == tab.tolist()
    py = emit_table.render_micropython("fix", tab, in_bits=bits + 2, bits=bits, source="t.json")
    tree = ast.parse(py, feature_version=(3, 4))
    ns: dict[str, object] = {}
    exec(compile(tree, "fix.py", "exec"), ns)  # plain CPython can run it too
    assert list(ns["TABLE"]) == tab.tolist()  # type: ignore[call-overload]


@pytest.mark.parametrize(("mode", "read"), [("full", "adc"), ("n1", "meter")])
def test_sweep_script_type_checks_and_parses(tmp_path: Path, mode: str, read: str) -> None:
    text = emit_sweep.render(bits=8, out_base=16, msb_high=False, invert=True, mode=mode, read=read)
    ast.parse(text, feature_version=(3, 4))
    script = tmp_path / "ladder_sweep.py"
    script.write_text(text)
    res = mypy_micropython(script, tmp_path)
    assert res.returncode == 0, res.stdout + res.stderr


def test_sweep_script_drives_pins_like_the_packer() -> None:
    # Run the script's set_code against fake Pin objects and compare with the pin
    # patterns the packer produces for the same wiring.
    from ladderpack.pack import WordLayout

    text = emit_sweep.render(bits=6, out_base=3, msb_high=False, invert=True)
    body = text.split("_pins = ")[0]
    driven: dict[int, int] = {}

    class FakePin:
        OUT = 1

        def __init__(self, n: int, mode: int | None = None) -> None:
            self.n = n

        def value(self, v: int) -> None:
            driven[self.n] = v

    ns: dict[str, object] = {}
    exec(body.replace("from machine import ADC, Pin", ""), ns)
    ns["Pin"] = FakePin
    exec(
        "_pins = [Pin(OUT_BASE + k, Pin.OUT) for k in range(BITS)]\n"
        + text.split("_pins = [Pin(OUT_BASE + k, Pin.OUT) for k in range(BITS)]\n")[1].split(
            "def codes"
        )[0],
        ns,
    )
    layout = WordLayout(6, msb_high=False, invert=True)
    for code in (0, 1, 5, 33, 63):
        ns["set_code"](code)  # type: ignore[operator]
        pattern = sum(driven[3 + k] << k for k in range(6))
        assert pattern == int(layout.to_pins(np.array([code]))[0])


def test_sweep_and_table_commands(tmp_path: Path) -> None:
    res = subprocess.run(
        [
            sys.executable,
            "-m",
            "ladderpack",
            "sweep",
            "--bits",
            "12",
            "--out-base",
            "20",
            "-o",
            str(tmp_path / "s.py"),
        ],
        capture_output=True,
        text=True,
        cwd=REPO,
    )
    assert res.returncode == 2 and "GPIO 20..31" in res.stderr
    lev = tmp_path / "lv.json"
    lev.write_text(LevelSet(6, ideal_levels(6).volts).to_json())
    res = subprocess.run(
        [
            sys.executable,
            "-m",
            "ladderpack",
            "table",
            "correction",
            str(lev),
            "--in-bits",
            "8",
            "-o",
            str(tmp_path / "t"),
            "--name",
            "fix 1",
        ],
        capture_output=True,
        text=True,
        cwd=REPO,
    )
    assert res.returncode == 0, res.stderr
    names = sorted(p.name for p in (tmp_path / "t").iterdir() if not p.name.startswith("."))
    assert names == ["fix_1.c", "fix_1.h", "fix_1.py"]


def test_wave_table_files_compile_and_agree(tmp_path: Path) -> None:
    res = subprocess.run(
        [
            sys.executable,
            "-m",
            "ladderpack",
            "table",
            "wave",
            "--table-bits",
            "9",
            "--bits",
            "12",
            "--freqs-hz",
            "440,1000.5",
            "-o",
            str(tmp_path),
            "--json",
        ],
        capture_output=True,
        text=True,
        cwd=REPO,
    )
    assert res.returncode == 0, res.stderr
    import json

    summary = json.loads(res.stdout)
    (tmp_path / "main.c").write_text(
        '#include "wavetable.h"\n#include <stdio.h>\nint main(void) {\n'
        "unsigned i; for (i = 0; i < WAVETABLE_LENGTH; ++i) "
        'printf("%u\\n", (unsigned)wavetable_table[i]);\n'
        "for (i = 0; i < WAVETABLE_INCREMENT_COUNT; ++i) "
        'printf("%lu\\n", (unsigned long)wavetable_increments[i]);\nreturn 0; }\n'
    )
    exe = tmp_path / "w"
    cc_strict(exe, tmp_path / "main.c", tmp_path / "wavetable.c")
    out = [
        int(v)
        for v in subprocess.run(
            [str(exe)], capture_output=True, text=True, check=True
        ).stdout.split()
    ]
    from ladderpack.waves import wavetable

    assert out[:512] == wavetable("sine", 9, bits=12).tolist()
    assert out[512:] == [i["increment"] for i in summary["increments"]]
    rate = summary["rate_hz"]
    for inc in summary["increments"]:
        assert inc["increment"] == round(inc["requested_hz"] * 2**32 / rate)
    py = (tmp_path / "wavetable.py").read_text()
    ns: dict[str, object] = {}
    exec(compile(ast.parse(py, feature_version=(3, 4)), "w.py", "exec"), ns)
    assert list(ns["TABLE"]) == out[:512]  # type: ignore[call-overload]


def test_wave_tables_for_i2s_and_pwm() -> None:
    import numpy as np

    from ladderpack.errors import OptionError
    from ladderpack.options import WaveTableSpec
    from ladderpack.outputs.pwm import plan_pwm
    from ladderpack.tables import wave_table_files

    i2s = wave_table_files("t", WaveTableSpec(output="i2s", table_bits=4, level_dbfs=0.0))
    src = i2s.files["t.c"].decode()
    assert "const int16_t t_table" in src
    vals = [int(v) for v in src.split("{")[1].split("}")[0].replace("\n", " ").split(",")]
    # sin(2 pi k / 16) x 2^15, rounded half up (the ladder codes less mid-scale)
    want = np.floor(np.sin(2 * np.pi * np.arange(16) / 16) * 32768 + 0.5).clip(-32768, 32767)
    assert vals == [int(v) for v in want]
    # the I2S frame clock: 128 state-machine cycles per frame at 125 MHz
    assert i2s.rate_hz == pytest.approx(125e6 / (128 * (44 + 74 / 256)))
    pwm = wave_table_files("p", WaveTableSpec(output="pwm", table_bits=4, level_dbfs=0.0))
    plan = plan_pwm(22050)
    assert pwm.rate_hz == pytest.approx(float(plan.achieved_rate_hz))
    src = pwm.files["p.c"].decode()
    vals = [int(v.strip().rstrip("u"), 16) for v in src.split("{")[1].split("}")[0].split(",")]
    half = (plan.levels - 1) / 2  # compare values 0..TOP+1, silence half way
    want = np.floor(np.sin(2 * np.pi * np.arange(16) / 16) * half + half + 0.5)
    assert vals == [int(v) for v in want] and max(vals) == plan.top + 1
    with pytest.raises(OptionError):
        WaveTableSpec(output="pwm", bits=8)
    with pytest.raises(OptionError):
        WaveTableSpec(output="i2s", bits=12)


def test_signed_32_bit_wave_table_compiles_and_holds_its_values(tmp_path: Path) -> None:
    from ladderpack.options import WaveTableSpec
    from ladderpack.tables import wave_table_files

    res = wave_table_files(
        "w32", WaveTableSpec(output="i2s", bits=32, table_bits=3, kind="square", level_dbfs=0.0)
    )
    for fname, data in res.files.items():
        (tmp_path / fname).write_bytes(data)
    main = tmp_path / "main.c"
    main.write_text(
        '#include <stdio.h>\n#include "w32.h"\nint main(void) {\n    unsigned i;\n'
        "    for (i = 0; i < W32_LENGTH; ++i) {\n"
        '        printf("%ld\\n", (long)w32_table[i]);\n    }\n    return 0;\n}\n'
    )
    exe = tmp_path / "dump"
    cc_strict(exe, main, tmp_path / "w32.c")  # gcc -std=c99 -pedantic -Wall -Wextra -Werror
    out = subprocess.run([str(exe)], check=True, capture_output=True, text=True).stdout.split()
    # a full-scale square: +2^31 clips to the largest code, -1.0 is the most negative
    assert {int(v) for v in out} == {2**31 - 1, -(2**31)}


def test_i2c_dac_wave_is_symmetric_and_lists_what_the_dac_gives() -> None:
    # a full-level sine about mid-scale 2048: 2048 +/- 2047 reaches 1..4095 (4096 is no
    # code), and VOLTS are Vref x code / 4096 (MCP4725 datasheet), 3.2992 V at the top
    from ladderpack.options import I2cDacTableSpec
    from ladderpack.tables import i2c_dac_table_files

    res = i2c_dac_table_files("w", I2cDacTableSpec(wave="sine", level=1.0, points=4))
    py = res.files["w.py"].decode()
    assert "VOLTS = [1.65, 3.29919, 1.65, 0.000805664]" in py
    assert "b'\\x0f\\xff'" in py and "b'\\x00\\x01'" in py  # codes 4095 and 1
