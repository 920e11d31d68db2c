"""Build firmware from bundles with the vendor SDK and run it on the emulated chip.

The firmware (``tests/chip/fw``) is the generated C player and assets, compiled by CMake
and arm-none-eabi-gcc against the vendored SDK (``../shared/vendor/pico-sdk``, 2.2.0),
driven by a scenario of player calls. ``run.mjs`` runs the flat image on the rp2040js
emulator (npm, pinned in ``tests/chip/package.json``) with the state machines clocked on
a cycle-accurate schedule of its own, and records every sample that reaches the pins.

Expected codes are decoded here from the ``.bin`` (or the C arrays of the intro and
outro) and the sidecar's layout, with code of the tests' own, not with ladderpack's
unpacker.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
from dataclasses import dataclass, field
from pathlib import Path
from typing import NoReturn

import numpy as np
import pytest

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
#: Where a development checkout keeps the vendored parts (beside the clone); a user's
#: clone has none, and names them by environment variable instead.
VENDOR = ROOT.parent / "shared" / "vendor"

#: The firmware tests' external parts: environment variable, fallback beside the clone,
#: and what it is. ``PICO_SDK_PATH`` is the SDK's own convention (pico-sdk README).
VENDOR_PARTS = {
    "sdk": ("PICO_SDK_PATH", VENDOR / "pico-sdk", "an unpacked pico-sdk 2.x folder"),
    "micropython": (
        "LADDERPACK_MICROPYTHON_IMAGE",
        VENDOR / "micropython-rp2" / "RPI_PICO-v1.27.0.bin",
        "a MicroPython RPI_PICO flat flash image (.bin, v1.27)",
    ),
    "bootrom": (
        "LADDERPACK_RP2040_BOOTROM",
        VENDOR / "rp2040-bootrom" / "bootrom.mjs",
        "the RP2040 B1 boot ROM as the rp2040js Uint32Array module (bootrom.mjs)",
    ),
}

#: Set by CI (``.ci/run``): a firmware test that would skip for want of a part fails.
REQUIRE_CHIP = os.environ.get("LADDERPACK_REQUIRE_CHIP", "") not in ("", "0")


def chip_unavailable(reason: str) -> NoReturn:
    """Skip a firmware test, with one line saying what it needs (fail in CI)."""
    line = (
        f"firmware tests need {reason}; set PICO_SDK_PATH (pico-sdk 2.x), "
        "LADDERPACK_MICROPYTHON_IMAGE and LADDERPACK_RP2040_BOOTROM, and install "
        "arm-none-eabi-gcc, cmake and Node.js (see README, Tests)"
    )
    if REQUIRE_CHIP:
        pytest.fail(f"{line} (LADDERPACK_REQUIRE_CHIP is set: a skip is a failure)")
    pytest.skip(line)


def _part_path(part: str) -> Path:
    var, fallback, _what = VENDOR_PARTS[part]
    value = os.environ.get(var)
    return Path(value) if value else fallback


def vendor_path(part: str) -> Path:
    """The path of a vendored part: its environment variable, else beside the clone.

    When it is missing the test skips (fails in CI) with a line naming every missing
    part, the same line for every firmware test, so pytest reports it once.
    """
    path = _part_path(part)
    if not path.exists():
        missing = [
            f"{what} (${var})"
            for key, (var, _f, what) in VENDOR_PARTS.items()
            if not _part_path(key).exists()
        ]
        chip_unavailable(", ".join(missing))
    return path


def sdk_path() -> Path:
    """The pico-sdk folder (``PICO_SDK_PATH``, then ``../shared/vendor/pico-sdk``)."""
    return vendor_path("sdk")


# MicroPython's rp2 port keeps its filesystem at the end of flash: on the RPI_PICO board
# 1408 KiB (MICROPY_HW_FLASH_STORAGE_BYTES) of the 2 MiB, from offset 0xA0000, in 4 KiB
# blocks, mounted by its _boot.py as VfsLfs2 with progsize=256 (MicroPython sources).
FS_OFFSET = 0xA0000
FS_BLOCKS = 1408 * 1024 // 4096

OPS = {
    "init": 1,
    "start": 2,
    "wait": 3,
    "delay": 4,
    "stop": 5,
    "deinit": 6,
    "request_stop": 7,
    "hold": 8,
    "mark": 9,
    "hold_volts": 10,
    # 11 and 12 are the I2C and SPI tests' own reports
    "sleep_wait": 13,
    "sleep": 14,
}
OP_END = 0x7F


def require(tool: str) -> str:
    path = shutil.which(tool)
    if path is None:
        chip_unavailable(f"the program {tool}")
    return path


def node_modules_ready() -> None:
    if not (HERE / "node_modules" / "rp2040js").is_dir():
        require("npm")
        subprocess.run(["npm", "ci", "--no-audit", "--no-fund", "--silent"], cwd=HERE, check=True)


# --- expected codes, decoded independently ---------------------------------------------


@dataclass(frozen=True)
class Layout:
    """What the sidecar says about the word layout and the pins."""

    bits: int
    spw: int
    shift_right: bool
    msb_high: bool
    invert: bool
    out_base: int
    idle_code: int
    sys_clock_hz: int
    div_int: int
    div_frac: int
    cycles: int

    @classmethod
    def from_sidecar(cls, path: Path) -> Layout:
        d = json.loads(path.read_text())
        lay, clk, sm = d["layout"], d["clock"], d["state_machine"]
        return cls(
            bits=lay["bits"],
            spw=lay["samples_per_word"],
            shift_right=lay["shift"] == "right",
            msb_high=lay["pin_order"] == "msb-high",
            invert=lay["invert"],
            out_base=sm["out_base"],
            idle_code=d["stream"]["idle_code"],
            sys_clock_hz=clk["sys_clock_hz"],
            div_int=clk["div_int"],
            div_frac=clk["div_frac"],
            cycles=clk["cycles_per_sample"],
        )

    @property
    def sample_period_clocks(self) -> float:
        """System clocks per sample: cycles x (INT + FRAC / 256) (datasheet 3.5.5)."""
        whole = self.div_int or 65536
        return self.cycles * (whole + self.div_frac / 256)

    def pins_to_code(self, pins: np.ndarray) -> np.ndarray:
        """GPIO output words -> ladder codes (pin order and inversion undone)."""
        n = self.bits
        field_ = (np.asarray(pins, dtype=np.uint64) >> np.uint64(self.out_base)) & np.uint64(
            (1 << n) - 1
        )
        if self.invert:
            field_ = field_ ^ np.uint64((1 << n) - 1)
        if self.msb_high:
            return field_.astype(np.int64)
        out = np.zeros(field_.shape, dtype=np.int64)
        for k in range(n):
            out |= ((field_ >> np.uint64(k)) & np.uint64(1)).astype(np.int64) << (n - 1 - k)
        return out

    def words_to_codes(self, words: np.ndarray) -> np.ndarray:
        """Every sample slot of every word, in the order OUT sends them."""
        n, out = self.bits, []
        w = np.asarray(words, dtype=np.uint64)
        for k in range(self.spw):
            # OUT shifting right takes the least significant bits first; shifting left
            # the most significant (RP2040 datasheet, 3.4.5 OUT).
            shift = k * n if self.shift_right else 32 - (k + 1) * n
            out.append((w >> np.uint64(shift)) & np.uint64((1 << n) - 1))
        slots = np.stack(out, axis=1).reshape(-1)
        # slot bits are pin bits: undo inversion and pin order
        return self.pins_to_code(slots << np.uint64(self.out_base))


def bin_words(path: Path) -> np.ndarray:
    return np.frombuffer(path.read_bytes(), dtype="<u4")


def c_array(source: Path, symbol: str) -> np.ndarray:
    """The values of `const uint32_t symbol[...] = {...};` in a generated C source."""
    m = re.search(rf"{re.escape(symbol)}\[[^\]]*\]\s*=\s*\{{([^}}]*)\}}", source.read_text())
    if m is None:
        return np.zeros(0, dtype=np.uint32)
    return np.array([int(v, 16) for v in re.findall(r"0x[0-9A-Fa-f]+", m.group(1))], np.uint32)


@dataclass
class Stream:
    """A bundle's asset as the tests see it: layout and the three parts' codes."""

    name: str
    layout: Layout
    codes: np.ndarray
    intro: np.ndarray
    outro: np.ndarray

    @classmethod
    def load(cls, folder: Path, name: str) -> Stream:
        lay = Layout.from_sidecar(folder / f"{name}.json")
        src = folder / f"{name}.c"
        return cls(
            name,
            lay,
            lay.words_to_codes(bin_words(folder / f"{name}.bin")),
            lay.words_to_codes(c_array(src, f"{name}_intro_words")),
            lay.words_to_codes(c_array(src, f"{name}_outro_words")),
        )

    def assert_cut_short(self, codes: np.ndarray) -> None:
        """`codes` are a prefix of the stream, in order and cut short, then a ramp to the
        idle code with no step larger than the stream's own largest."""
        n = 0
        while n < codes.size and n < self.codes.size and codes[n] == self.codes[n]:
            n += 1
        assert 0 < n < self.codes.size, (n, self.codes.size)
        assert np.abs(np.diff(codes)).max() <= self.max_step
        assert codes[-1] == self.layout.idle_code

    @property
    def max_step(self) -> int:
        seq = np.concatenate([[self.layout.idle_code], self.intro, self.codes, self.outro])
        steps = np.abs(np.diff(seq))
        if self.intro.size:  # the loop seam
            steps = np.append(steps, abs(int(self.codes[-1]) - int(self.codes[0])))
        return int(max(steps.max(), abs(int(seq[-1]) - self.layout.idle_code)))


# --- firmware -----------------------------------------------------------------------------


@dataclass
class Step:
    op: str
    slot: int = 0
    arg: int = 0
    arg2: int = 0


def scenario_header(streams: list[str], steps: list[Step], levels: str | None = None) -> str:
    lines = [f'#include "{s}.h"' for s in streams]
    if levels is not None:  # an asset with an embedded level table
        lines += [
            f"#define LP_TEST_LEVELS {levels}_levels_v",
            f"#define LP_TEST_LEVEL_COUNT {levels.upper()}_LEVEL_COUNT",
        ]
    lines.append("static const lp_ladder_stream_t lp_streams[] = {")
    lines += [f"    {s.upper()}_LADDER_INIT," for s in streams]
    lines.append("};")
    lines.append("static const lp_step_t lp_steps[] = {")
    lines += [f"    {{{OPS[s.op]}u, {s.slot}u, {s.arg}u, {s.arg2}u}}," for s in steps]
    lines.append("};")
    return "\n".join(lines) + "\n"


@dataclass
class Firmware:
    """One CMake build tree per platform, reused by every test (only our files change)."""

    root: Path
    platform: str = "rp2040"
    configured: bool = field(default=False)

    @property
    def build(self) -> Path:
        return self.root / "build"

    @property
    def bundle(self) -> Path:
        return self.root / "bundle"

    @property
    def scenario(self) -> Path:
        return self.root / "scenario"

    def make(
        self,
        bundle_dir: Path,
        streams: list[str],
        steps: list[Step],
        app: str | None = None,
        levels: str | None = None,
    ) -> Path:
        """Build the firmware for these streams and steps (or the main program `app`);
        return the flat image."""
        require("cmake")
        require("arm-none-eabi-gcc")
        if self.bundle.exists():
            shutil.rmtree(self.bundle)
        shutil.copytree(bundle_dir, self.bundle)
        self.scenario.mkdir(parents=True, exist_ok=True)
        (self.scenario / "scenario.h").write_text(scenario_header(streams, steps, levels))
        app_file = self.scenario / "app.c"
        if app is not None:
            app_file.write_text(app)
            self.configured = False  # the main source changes: configure again
        elif app_file.exists():
            app_file.unlink()
            self.configured = False
        if not self.configured:
            board = {"rp2040": "pico", "rp2350": "pico2"}[self.platform]
            subprocess.run(
                [
                    "cmake",
                    "-S",
                    str(HERE / "fw"),
                    "-B",
                    str(self.build),
                    "-G",
                    "Ninja" if shutil.which("ninja") else "Unix Makefiles",
                    f"-DPICO_SDK_PATH={sdk_path()}",
                    "-DPICO_NO_PICOTOOL=1",
                    f"-DPICO_PLATFORM={self.platform}",
                    f"-DPICO_BOARD={board}",
                    f"-DLP_BUNDLE_DIR={self.bundle}",
                    f"-DLP_SCENARIO_DIR={self.scenario}",
                ],
                check=True,
                capture_output=True,
            )
            self.configured = True
        done = subprocess.run(
            ["cmake", "--build", str(self.build), "-j2"], capture_output=True, text=True
        )
        if done.returncode != 0:
            pytest.fail(f"firmware build failed:\n{done.stdout[-4000:]}\n{done.stderr[-2000:]}")
        return self.build / "lp_fw.bin"

    def mailbox(self) -> int:
        nm = subprocess.run(
            ["arm-none-eabi-nm", str(self.build / "lp_fw.elf")],
            check=True,
            capture_output=True,
            text=True,
        ).stdout
        m = re.search(r"^([0-9a-f]+) \w lp_test_mailbox$", nm, re.M)
        assert m is not None
        return int(m.group(1), 16)


@dataclass
class Run:
    """What the emulator recorded."""

    events: list[tuple[int, int, int]]
    samples: dict[str, np.ndarray]  # "pio.sm" -> (n, 2) array of (cycle, pins)
    final_pins: int
    cycles: int
    ended: bool
    serial: list[tuple[int, str]] = field(default_factory=list)
    changes: np.ndarray = field(default_factory=lambda: np.zeros((0, 2), np.int64))
    periods: np.ndarray = field(default_factory=lambda: np.zeros((0, 3), np.int64))
    wire: np.ndarray = field(default_factory=lambda: np.zeros((0, 2), np.int64))
    #: Clocks the core executed (not asleep in WFI/WFE): in all, and at each report.
    busy_cycles: int = 0
    event_busy: list[int] = field(default_factory=list)

    def output(self) -> str:
        """Everything MicroPython printed."""
        return "".join(t for _c, t in self.serial if not t.startswith("<<"))

    def mark(self, text: str) -> int:
        """System clock at which `text` first appeared on the serial line."""
        seen = ""
        for c, t in self.serial:
            if t.startswith("<<"):
                continue
            seen += t
            if text in seen:
                return c
        raise KeyError(text)

    def results(self) -> list[int]:
        """Result code of each step, signed."""
        out = []
        for _c, v, _p in self.events:
            if v >> 24 in OPS.values():
                rc = v & 0xFF
                out.append(rc - 256 if rc > 127 else rc)
        return out

    def event_cycle(self, index: int) -> int:
        """System clock at which step `index` finished."""
        for c, v, _p in self.events:
            if v >> 24 != OP_END and (v >> 8) & 0xFFFF == index:
                return c
        raise KeyError(index)


def fs_image(files: dict[str, bytes], path: Path) -> Path:
    """A LittleFS image (littlefs-python, PyPI) holding `files`, as MicroPython mounts it."""
    from littlefs import LittleFS

    fs = LittleFS(block_size=4096, block_count=FS_BLOCKS, prog_size=256, read_size=32)
    for name, data in sorted(files.items()):
        with fs.open(name, "wb") as fh:
            fh.write(data)
    path.write_bytes(bytes(fs.context.buffer))
    return path


def run_micropython(
    files: dict[str, bytes],
    steps: list[dict[str, object]],
    folder: Path,
    *,
    max_cycles: int = 400_000_000,
    watch_pins: list[int] | None = None,
    pwm_slices: list[int] | None = None,
    i2c: dict[str, int] | None = None,
) -> Run:
    """Boot the vendored MicroPython image with `files` on its filesystem and run each
    step's code through the raw REPL over USB CDC (``interrupt_after``: Ctrl-C that many
    system clocks after the code was sent); `i2c` puts an acknowledging device on a bus
    (see ``run.mjs``)."""
    return run(
        vendor_path("micropython"),
        0,
        max_cycles=max_cycles,
        tail=0,
        extra={
            "fs_image": str(fs_image(files, folder / "fs.img")),
            "fs_offset": FS_OFFSET,
            "repl": steps,
            **({"watch_pins": watch_pins} if watch_pins else {}),
            **({"pwm_slices": pwm_slices} if pwm_slices is not None else {}),
            **({"i2c": i2c} if i2c is not None else {}),
        },
        config_dir=folder,
    )


def run(
    image: Path,
    mailbox: int,
    *,
    max_cycles: int = 50_000_000,
    tail: int = 20000,
    extra: dict[str, object] | None = None,
    config_dir: Path | None = None,
) -> Run:
    """Run a flat image on the emulated RP2040 until the scenario ends (plus `tail` clocks)."""
    require("node")
    node_modules_ready()
    cfg = (config_dir or image.parent) / "run.json"
    cfg.write_text(
        json.dumps(
            {
                "image": str(image),
                "bootrom": str(vendor_path("bootrom")),
                "mailbox": mailbox,
                "max_cycles": max_cycles,
                "end_value_op": OP_END,
                "tail_cycles": tail,
                **(extra or {}),
            }
        )
    )
    done = subprocess.run(
        ["node", str(HERE / "run.mjs"), str(cfg)], capture_output=True, text=True, cwd=HERE
    )
    if done.returncode != 0:
        pytest.fail(f"emulator failed: {done.stderr[-3000:]}")
    d = json.loads(done.stdout)
    return Run(
        # the C runtime zeroes the mailbox before main(): not a report
        events=[tuple(e) for e in d["events"] if e[1] >> 24],
        event_busy=[b for e, b in zip(d["events"], d["event_busy"], strict=True) if e[1] >> 24],
        busy_cycles=d["busy_cycles"],
        samples={k: np.array(v, dtype=np.int64).reshape(-1, 2) for k, v in d["samples"].items()},
        final_pins=d["final_pins"],
        cycles=d["cycles"],
        ended=d["ended"],
        serial=[tuple(s) for s in d.get("serial", [])],
        changes=np.array(d.get("changes", []), dtype=np.int64).reshape(-1, 2),
        periods=np.array(d.get("periods", []), dtype=np.int64).reshape(-1, 3),
        wire=np.array(d.get("wire", []), dtype=np.int64).reshape(-1, 2),
    )


def player_app(
    name: str,
    ops: list[tuple[str, int]],
    *,
    header: str,
    fn: str,
    player_type: str,
    stream_type: str,
    init_macro: str,
    init_args: str = "&player, &stream, pio0",
    tail: str = "",
) -> str:
    """A main program driving one asset through a player's C API, op by op.

    `fn` is the API's prefix (``lp_i2s`` gives ``lp_i2s_init``, ``lp_i2s_start``, ...);
    each op's result goes to the mailbox the harness watches, as ``op << 24 | index << 8 |
    result`` with the codes of :data:`OPS` (an op: init, start, wait, delay, stop,
    request_stop, deinit, hold; the int is its argument).
    """
    calls = {
        "init": f"rc = {fn}_init({init_args});",
        "start": f"rc = {fn}_start(&player, {{b}});",
        "wait": f"while ({fn}_busy(&player)) {{{{ tight_loop_contents(); }}}}",
        # the same, asleep between polls (WFE until a timer alarm): the core's busy
        # clocks are then what the player and the polls take
        "sleep_wait": f"while ({fn}_busy(&player)) {{{{ sleep_us({{a}}u); }}}}",
        "sleep": "sleep_us({a}u);",
        "delay": "busy_wait_at_least_cycles({a}u);",
        "stop": f"rc = {fn}_stop(&player);",
        "request_stop": f"rc = {fn}_request_stop(&player);",
        "deinit": f"{fn}_deinit(&player);",
        "hold": f"rc = {fn}_hold_code(&player, {{a}}u);",
    }
    body = [
        f"    rc = 0; {calls[op].format(a=arg, b='true' if arg else 'false')} "
        f"report({OPS[op]}u, {i}u, rc);"
        for i, (op, arg) in enumerate(ops)
    ]
    return f"""\
#include <stdbool.h>
#include <stdint.h>
#include "pico/stdlib.h"
#include "{header}"
#include "{name}.h"

volatile uint32_t lp_test_mailbox;
static {player_type} player;
static const {stream_type} stream = {name.upper()}_{init_macro};

static void report(uint32_t op, uint32_t index, int rc) {{
    lp_test_mailbox = (op << 24) | ((index & 0xFFFFu) << 8) | ((uint32_t)rc & 0xFFu);
}}

int main(void) {{
    int rc;
{chr(10).join(body)}
{tail}    report(0x7Fu, 0u, 0);
    for (;;) {{
        tight_loop_contents();
    }}
}}
"""
