"""Generated C: compiles warning-free and unpacks to exactly the library's codes.

External checks: GCC (host, C99, -Wall -Wextra -Werror -pedantic) and the GNU Arm
Embedded toolchain (Debian package gcc-arm-none-eabi) for Cortex-M0+.
"""

from __future__ import annotations

import subprocess
from pathlib import Path

import numpy as np
import pytest
from helpers import CFLAGS, require_tool, small_asset

from ladderpack.bundle import bundle_files
from ladderpack.emit.c import render_header

UNPACK_MAIN = """\
#include "{name}.h"
#include <stdio.h>

int main(void) {{
    unsigned long i;
    const uint32_t mask = (uint32_t)((1ul << {P}_BITS) - 1u);
    for (i = 0; i < {P}_SAMPLE_COUNT; ++i) {{
        uint32_t w = {name}_words[i / {P}_SAMPLES_PER_WORD];
        unsigned slot = (unsigned)(i % {P}_SAMPLES_PER_WORD);
        unsigned shift = {P}_OUT_SHIFT_RIGHT ? slot * {P}_BITS
                                             : 32u - (slot + 1u) * {P}_BITS;
        printf("%lu\\n", (unsigned long)((w >> shift) & mask));
    }}
    printf("program %04x\\n", (unsigned){name}_program[0]);
    return 0;
}}
"""


def _write(asset, folder: Path) -> None:  # type: ignore[no-untyped-def]
    for fname, data in bundle_files(asset).items():
        (folder / fname).write_bytes(data)


@pytest.mark.parametrize("bits", [1, 4, 8, 10, 12, 16])
@pytest.mark.parametrize("shift", ["right", "left"])
def test_host_program_unpacks_exact_codes(tmp_path: Path, bits: int, shift: str) -> None:
    gcc = require_tool("gcc")
    asset = small_asset(bits, shift=shift)
    _write(asset, tmp_path)
    main_c = tmp_path / "main.c"
    main_c.write_text(UNPACK_MAIN.format(name=asset.name, P=asset.name.upper()))
    exe = tmp_path / "unpack"
    subprocess.run(
        [gcc, *CFLAGS, "-o", str(exe), str(main_c), str(tmp_path / f"{asset.name}.c")],
        check=True,
        capture_output=True,
        text=True,
    )
    out = subprocess.run([str(exe)], check=True, capture_output=True, text=True).stdout.split()
    assert out[-2:] == ["program", f"{asset.program.words[0]:04x}"]
    np.testing.assert_array_equal(np.array(out[:-2], dtype=np.int64), asset.codes.codes)


def test_header_is_self_contained(tmp_path: Path) -> None:
    # Include the header first in a translation unit of its own (cantools habit).
    gcc = require_tool("gcc")
    asset = small_asset(12)
    (tmp_path / f"{asset.name}.h").write_text(render_header(asset))
    unit = tmp_path / "only_header.c"
    unit.write_text(
        f'#include "{asset.name}.h"\nint lp_dummy(void) {{ return '
        f"(int){asset.name.upper()}_BITS; }}\n"
    )
    subprocess.run(
        [gcc, *CFLAGS, "-c", "-o", str(tmp_path / "h.o"), str(unit)],
        check=True,
        capture_output=True,
        text=True,
    )


def test_compiles_for_cortex_m0plus_and_stays_in_rodata(tmp_path: Path) -> None:
    arm_gcc = require_tool("arm-none-eabi-gcc")
    asset = small_asset(8, seconds=0.2)
    _write(asset, tmp_path)
    obj = tmp_path / "stream.o"
    subprocess.run(
        [
            arm_gcc,
            "-mcpu=cortex-m0plus",
            "-mthumb",
            "-Os",
            *CFLAGS,
            "-c",
            "-o",
            str(obj),
            str(tmp_path / f"{asset.name}.c"),
        ],
        check=True,
        capture_output=True,
        text=True,
    )
    size = require_tool("arm-none-eabi-size")
    report = subprocess.run(
        [size, "-A", str(obj)], check=True, capture_output=True, text=True
    ).stdout
    sections = {
        line.split()[0]: int(line.split()[1])
        for line in report.splitlines()
        if line.startswith(".")
    }
    rodata = sections.get(".rodata", 0)
    print(f".rodata of a {asset.word_count}-word stream: {rodata} bytes")
    # const arrays go to flash: words plus the 2-byte program, word-aligned.
    assert rodata >= 4 * asset.word_count + 2
    assert sections.get(".data", 0) == 0 and sections.get(".bss", 0) == 0


def test_demo_bundles_compile_for_host_and_cortex_m0plus(tmp_path: Path) -> None:
    from ladderpack.demo import run_demo

    repo = Path(__file__).resolve().parent.parent
    run_demo(str(tmp_path), clips_dir=str(repo / "demo_audio"))
    # The asset sources need no SDK; the player is built with the real SDK in
    # tests/test_chip_c.py.
    sources = sorted(p for p in tmp_path.glob("*.c") if p.name != "ladderpack_player.c")
    assert len(sources) == 3  # three streams
    for compiler, extra in (
        (require_tool("gcc"), []),
        (require_tool("arm-none-eabi-gcc"), ["-mcpu=cortex-m0plus", "-mthumb"]),
    ):
        for src in sources:
            subprocess.run(
                [
                    compiler,
                    *extra,
                    *CFLAGS,
                    "-c",
                    "-o",
                    str(src.with_suffix(".o")),
                    str(src),
                ],
                check=True,
                capture_output=True,
                text=True,
            )


@pytest.mark.parametrize("pin_order", ["msb-high", "msb-low"])
def test_out_base_wording_matches_the_pins(pin_order: str) -> None:
    # Which ladder bit sits on OUT_BASE, read from the packed words themselves: a stream of
    # one code with only the MSB set (2^(N-1)) drives the highest pin for msb-high and the
    # lowest (OUT_BASE) for msb-low (RP2040 datasheet: OUT pins are OUT_BASE + bit index).
    from ladderpack.emit import c, pioasm

    asset = small_asset(8, pin_order=pin_order, out_base=4)
    msb_on_base = asset.packed.layout.to_pins(np.array([128]))[0] == 1
    expect = "most" if msb_on_base else "least"
    assert msb_on_base == (pin_order == "msb-low")
    header = c.render_header(asset)
    line = next(t for t in header.splitlines() if "_OUT_BASE " in t)
    assert f"the ladder's {expect} significant bit" in line
    assert f"{expect} significant bit on GPIO 4" in pioasm.render(asset)
