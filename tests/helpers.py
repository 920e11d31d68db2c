"""Small builders shared by the emitter and CLI tests."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from ladderpack.audio import Signal
from ladderpack.bundle import StreamAsset
from ladderpack.stream import stream_signal


def small_asset(
    bits: int = 8,
    *,
    shift: str = "right",
    name: str = "test tone",
    seconds: float = 0.02,
    **options: object,
) -> StreamAsset:
    """A short 1 kHz stream, quick to build and compile."""
    t = np.arange(int(48000 * seconds)) / 48000
    sig = Signal(np.sin(2 * np.pi * 1000 * t), 48000.0)
    return stream_signal(
        sig,
        name=name,
        bits=bits,
        shift=shift,
        ramp_ms=2.0,
        source={"file": "unit-test sine"},
        **options,
    )  # type: ignore[arg-type]


def require_tool(name: str) -> str:
    """Path of an external program the test needs; fail (not skip) when it is missing.

    .ci/run installs every tool, so a missing one is a broken environment.
    """
    path = shutil.which(name)
    if path is None:
        pytest.fail(f"{name} is not installed; .ci/run installs it")
    return path


def _stub_dir(tmp_path: Path) -> Path:
    """Copy the MicroPython rp2 port stubs (PyPI micropython-rp2-stubs) into a folder of
    their own, so mypy sees them without the rest of site-packages."""
    import importlib.metadata as md

    out = tmp_path / "typings"
    wanted = {"rp2", "machine.pyi", "micropython.pyi", "vfs.pyi", "_mpy_shed", "time.pyi"}
    for d in (
        md.distribution("micropython-rp2-stubs"),
        md.distribution("micropython-stdlib-stubs"),
    ):
        for f in d.files or []:
            parts = Path(str(f)).parts
            if parts and parts[0] in wanted:
                dst = out.joinpath(*parts)
                dst.parent.mkdir(parents=True, exist_ok=True)
                shutil.copyfile(Path(str(d.locate_file(f))), dst)
    return out


def mypy_micropython(module: Path, tmp_path: Path) -> subprocess.CompletedProcess[str]:
    """mypy --strict on a generated MicroPython file against the rp2 port's stubs."""
    cfg = tmp_path / "mypy.ini"
    cfg.write_text(
        f"[mypy]\nmypy_path = {_stub_dir(tmp_path)}\n"
        "[mypy-rp2,rp2.*,machine,micropython,vfs,time,_mpy_shed,_mpy_shed.*]\n"
        "ignore_errors = True\n"
    )
    return subprocess.run(
        [
            sys.executable,
            "-m",
            "mypy",
            "--config-file",
            str(cfg),
            "--no-site-packages",
            "--strict",
            "--no-incremental",
            "--cache-dir",
            str(tmp_path / "mypy-cache"),
            str(module),
        ],
        capture_output=True,
        text=True,
    )


#: Flags every generated C file must compile with (DESIGN.md output contract).
CFLAGS = ["-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic"]
REPO = Path(__file__).resolve().parent.parent


def cc_strict(
    out: Path,
    *sources: Path,
    compile_only: bool = False,
    compiler: str = "gcc",
    extra: tuple[str, ...] = (),
) -> None:
    """Compile C sources with :data:`CFLAGS` (real compiler), failing the test on error."""
    cc = require_tool(compiler)
    cmd = [
        cc,
        *extra,
        *CFLAGS,
        *(["-c"] if compile_only else []),
        "-o",
        str(out),
        *map(str, sources),
    ]
    res = subprocess.run(cmd, capture_output=True, text=True)
    assert res.returncode == 0, res.stderr


def ladderpack_cli(
    *args: str, cwd: Path | None = None, **kw: object
) -> subprocess.CompletedProcess[str]:
    """Run ``python -m ladderpack ARGS`` and capture its output."""
    return subprocess.run(
        [sys.executable, "-m", "ladderpack", *args],
        capture_output=True,
        text=True,
        cwd=cwd or REPO,
        **kw,
    )  # type: ignore[call-overload]
