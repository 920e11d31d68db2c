"""Byte-identical outputs on every machine, proven by forcing other kernels on this one.

numpy chooses its SIMD kernels by CPU (``numpy._core._multiarray_umath.__cpu_dispatch__``)
and honours ``NPY_DISABLE_CPU_FEATURES`` to restrict them (numpy documentation, "CPU
build options", runtime dispatch); OpenBLAS chooses its kernels by CPU and honours
``OPENBLAS_CORETYPE`` and ``OPENBLAS_NUM_THREADS`` (OpenBLAS README, "Runtime CPU
detection" and "Setting the number of threads"). The golden scenarios are rendered in
fresh processes under each kernel set this CPU can run, and must give the golden bytes.

The portable functions are also held to numpy's own within a few units in the last place.
"""

from __future__ import annotations

import hashlib
import json
import os
import platform
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from golden import GOLDEN

from ladderpack import portable

HERE = Path(__file__).resolve().parent

#: Golden scenarios whose numbers go through designed shapers, LevelSets, tones, fades
#: and resampling: every path the portable functions serve.
SCENARIOS = ["tone_shaped_levels", "clip_8bit", "tone_12bit_loop"]

_RENDER = """
import hashlib, json, sys, tempfile
from pathlib import Path
sys.path.insert(0, sys.argv[1])
from golden import render_scenario
out = {}
for name in sys.argv[2:]:
    with tempfile.TemporaryDirectory() as t:
        for rel, data in render_scenario(name, Path(t)).items():
            out[name + "/" + rel] = hashlib.sha256(data).hexdigest()
print(json.dumps(out))
"""


def _flags() -> set[str]:
    try:
        text = Path("/proc/cpuinfo").read_text()
    except OSError:
        return set()
    return {f for line in text.splitlines() if line.startswith("flags") for f in line.split()}


def _core_types() -> list[str]:
    """OpenBLAS core types this CPU can run (x86-64), oldest first."""
    if platform.machine() not in ("x86_64", "AMD64"):
        return ["ARMV8"] if platform.machine() in ("aarch64", "arm64") else []
    need = {
        "Prescott": "sse3",
        "Nehalem": "sse4_2",
        "Sandybridge": "avx",
        "Haswell": "avx2",
        "SkylakeX": "avx512f",
    }
    flags = _flags()
    return [core for core, flag in need.items() if flag in flags or flag == "sse3"]


def _numpy_dispatch() -> list[str]:
    return list(np._core._multiarray_umath.__cpu_dispatch__)


def _variants() -> list[tuple[str, dict[str, str]]]:
    out = [(f"openblas-{c}", {"OPENBLAS_CORETYPE": c}) for c in _core_types()]
    dispatch = _numpy_dispatch()
    if dispatch:
        out.append(("numpy-baseline", {"NPY_DISABLE_CPU_FEATURES": " ".join(dispatch)}))
        if len(dispatch) > 1:
            keep = " ".join(dispatch[1:])  # the oldest extension only
            out.append(("numpy-oldest-extension", {"NPY_DISABLE_CPU_FEATURES": keep}))
    out.append(("threads-1", {"OPENBLAS_NUM_THREADS": "1"}))
    out.append(("threads-2", {"OPENBLAS_NUM_THREADS": "2"}))
    return out


def _golden_digests() -> dict[str, str]:
    return {
        p.relative_to(GOLDEN).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
        for name in SCENARIOS
        for p in sorted((GOLDEN / name).rglob("*"))
        if p.is_file()
    }


@pytest.mark.slow
@pytest.mark.parametrize(("variant", "env"), _variants(), ids=[v for v, _ in _variants()])
def test_golden_bytes_under_every_kernel_set(variant: str, env: dict[str, str]) -> None:
    full = {**os.environ, **env}
    done = subprocess.run(
        [sys.executable, "-c", _RENDER, str(HERE), *SCENARIOS],
        capture_output=True, text=True, env=full,
    )  # fmt: skip
    assert done.returncode == 0, done.stderr[-3000:]
    got = json.loads(done.stdout.strip().splitlines()[-1])
    want = _golden_digests()
    differ = sorted(k for k in want if got.get(k) != want[k])
    assert not differ, f"{variant}: {differ}"


# -- accuracy against numpy's own functions ------------------------------------------------


def _ulps(got: np.ndarray, want: np.ndarray) -> float:
    scale = np.spacing(np.maximum(np.abs(want), np.finfo(float).tiny))
    return float(np.max(np.abs(got - want) / scale))


def test_sin_and_cos_within_two_ulps(rng: np.random.Generator) -> None:
    x = np.concatenate([rng.uniform(-1e4, 1e4, 50000), rng.uniform(-4, 4, 50000)])
    # away from zeros of the function, where ulps of the result mean nothing
    s, c = np.sin(x), np.cos(x)
    ok_s, ok_c = np.abs(s) > 1e-3, np.abs(c) > 1e-3
    assert _ulps(portable.sin(x)[ok_s], s[ok_s]) <= 2.5
    assert _ulps(portable.cos(x)[ok_c], c[ok_c]) <= 2.5
    assert np.max(np.abs(portable.sin(x) - s)) < 1e-15 * 1e4


def test_exp_log_power_within_two_ulps(rng: np.random.Generator) -> None:
    y = rng.uniform(-700, 700, 50000)
    assert _ulps(portable.exp(y), np.exp(y)) <= 2
    z = np.exp(rng.uniform(-700, 700, 50000))
    assert (
        _ulps(portable.log(z)[np.abs(np.log(z)) > 1e-3], np.log(z)[np.abs(np.log(z)) > 1e-3]) <= 2
    )
    assert _ulps(portable.log10(z)[z > 2], np.log10(z)[z > 2]) <= 2.5
    w = rng.uniform(0.01, 100, 50000)
    assert _ulps(portable.power(w, -0.8), w**-0.8) <= 8  # exp(y log x) carries y log x's error


def test_edges() -> None:
    assert portable.log(np.array([0.0]))[0] == -np.inf
    assert np.isnan(portable.log(np.array([-1.0]))[0])
    assert portable.exp(np.array([-800.0, 800.0])).tolist() == [0.0, np.inf]
    assert portable.power(np.array([0.0]), 2.0)[0] == 0.0
    assert portable.db_to_amplitude(0.0) == 1.0
    # fsum: correctly rounded, so the order of the terms cannot matter
    a = np.array([1e16, 1.0, -1e16, 1.0])
    assert portable.dot(a, np.ones(4)) == 2.0 == portable.dot(a[::-1], np.ones(4))
