"""Quantiser and dither against the published theory."""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np
import pytest

from ladderpack import _kernels
from ladderpack.audio import Signal
from ladderpack.errors import OptionError
from ladderpack.quantize import (
    Codes,
    DitherSource,
    idle_ramp,
    nearest_levels_block,
    quantize,
    round_block,
    signal_to_lsb,
    with_idle_ramps,
)

# Coherent record (REFERENCES.md section 4, coherent sampling: M and N co-prime).
N_REC = 1 << 16
CYCLES = 4099  # prime, so co-prime with 2**16


def _sine(amplitude: float = 1.0) -> Signal:
    n = np.arange(N_REC)
    return Signal(amplitude * np.sin(2 * np.pi * CYCLES * n / N_REC + 0.3), 48000.0)


def _error_power_lsb2(sig: Signal, codes: Codes) -> float:
    return float(np.mean((codes.codes - signal_to_lsb(sig.samples, codes.bits)) ** 2))


@pytest.mark.parametrize("bits", [6, 8, 10, 12])
def test_undithered_sine_snr_matches_602n_176(bits: int) -> None:
    # Ideal quantiser SNR = 6.02 N + 1.76 dB for a full-scale sine: Analog Devices
    # MT-229 / MT-001 (Kester); REFERENCES.md section 1 says +/-0.2 dB holds for N >= 6.
    # Amplitude 1 - 2**-N keeps the top of the sine inside the top code.
    sig = _sine(1.0 - 2.0**-bits)
    codes, report = quantize(sig, bits=bits, dither="none")
    assert report.overloads == 0
    signal_power = (sig.samples.std() * 2 ** (bits - 1)) ** 2
    snr = 10 * math.log10(signal_power / _error_power_lsb2(sig, codes))
    theory = 6.0206 * bits + 1.7609 + 20 * math.log10(1.0 - 2.0**-bits)
    assert snr == pytest.approx(theory, abs=0.3)


@pytest.mark.parametrize("bits", [6, 8, 10, 12])
def test_tpdf_noise_is_three_times_undithered(bits: int) -> None:
    # TPDF (2 LSB p-p) total error power is LSB^2/4 = 3 x LSB^2/12, i.e. 4.77 dB more:
    # Lipshitz, Wannamaker & Vanderkooy, JAES 40(5) 1992; REFERENCES.md section 2.
    sig = _sine(0.9)
    plain, _ = quantize(sig, bits=bits, dither="none")
    dithered, _ = quantize(sig, bits=bits, dither="tpdf", seed=1)
    penalty_db = 10 * math.log10(_error_power_lsb2(sig, dithered) / _error_power_lsb2(sig, plain))
    assert penalty_db == pytest.approx(10 * math.log10(3), abs=0.3)
    assert _error_power_lsb2(sig, dithered) == pytest.approx(0.25, rel=0.03)


def test_rpdf_noise_is_twice_undithered() -> None:
    # RPDF (1 LSB p-p) averages LSB^2/6 over a busy signal (+3.01 dB): same survey,
    # REFERENCES.md section 2 table.
    sig = _sine(0.9)
    codes, _ = quantize(sig, bits=8, dither="rpdf", seed=2)
    assert _error_power_lsb2(sig, codes) == pytest.approx(1 / 6, rel=0.03)


@pytest.mark.parametrize("offset_lsb", [0.0, 0.125, 0.25, 0.375, 0.5])
def test_tpdf_error_power_independent_of_input(offset_lsb: float) -> None:
    # Moment theorem (Wannamaker et al., IEEE Trans. SP 48(2) 2000): with TPDF the
    # conditional error variance is LSB^2/4 for every input; REFERENCES.md section 2
    # check value 0.250 +/- 0.002 at n = 2e6 (we use 4e5 samples: +/- 0.005).
    bits = 8
    x = np.full(400_000, (offset_lsb + 3) / 2 ** (bits - 1))
    codes, _ = quantize(Signal(x, 8000.0), bits=bits, dither="tpdf", seed=3)
    err = codes.codes - signal_to_lsb(x, bits)
    assert float(np.mean(err)) == pytest.approx(0.0, abs=0.005)
    assert float(np.mean(err**2)) == pytest.approx(0.25, abs=0.005)


def test_first_order_shaping_follows_ntf(rng: np.random.Generator) -> None:
    # Error feedback with h1 = 1 gives NTF = 1 - z^-1 (REFERENCES.md section 3.1 sign
    # convention, Lipshitz et al. 1991): total noise = white power x (1 + h1^2) = 2x and
    # the noise spectrum rises as |2 sin(pi f / fs)|^2.
    sig = Signal(0.5 * rng.standard_normal(1 << 16).clip(-1.5, 1.5) / 1.5, 48000.0)
    codes, report = quantize(sig, bits=10, dither="tpdf", shaper="first-order", seed=4)
    assert report.overloads == 0
    err = codes.codes - signal_to_lsb(sig.samples, 10)
    assert float(np.mean(err**2)) == pytest.approx(2 * 0.25, rel=0.05)
    spec = np.abs(np.fft.rfft(err)) ** 2
    f = np.fft.rfftfreq(err.size)
    low = spec[(f > 0.01) & (f < 0.05)].mean() / (4 * np.sin(np.pi * 0.03) ** 2)
    high = spec[(f > 0.4) & (f < 0.5)].mean() / (4 * np.sin(np.pi * 0.45) ** 2)
    assert low / high == pytest.approx(1.0, rel=0.25)


def _run_all_versions(
    name: str, order: int, n: int, call: Callable[..., Any]
) -> tuple[np.ndarray, tuple[int, ...]]:
    """Run the reference, the compiled and the interpreter version of kernel `name`;
    require the same codes, counts and final filter state from all three."""
    results = []
    for fn in (
        getattr(_kernels, name + "_ref"),
        _kernels.compiled(name),
        getattr(_kernels, name + "_py"),
    ):
        eh, fh, out = np.zeros(order), np.zeros(order), np.empty(n, np.int64)
        counts = call(fn, eh, fh, out)
        results.append((out, tuple(int(c) for c in counts), eh.copy(), fh.copy()))
    o1, c1, e1, f1 = results[0]
    assert c1[0] > 0
    for o2, c2, e2, f2 in results[1:]:
        np.testing.assert_array_equal(o1, o2)
        assert c1 == c2
        np.testing.assert_array_equal(e1, e2)
        np.testing.assert_array_equal(f1, f2)
    return o1, c1


@pytest.mark.parametrize("order", range(0, 17))
@pytest.mark.parametrize("dither", ["none", "rpdf", "tpdf"])
@pytest.mark.parametrize("iir", [False, True])
def test_compiled_kernel_matches_reference_bit_for_bit(
    order: int, dither: str, iir: bool, rng: np.random.Generator
) -> None:
    n = 3000
    v = rng.uniform(-20, 275, n)  # some samples clip, exercising overload and reset
    d = DitherSource(dither, 42).draw(n)
    b = rng.normal(0, 0.3, order)
    a = rng.normal(0, 0.05, order) if iir else np.zeros(order)
    o1, c1 = _run_all_versions(
        "shape_quantize", order, n, lambda fn, eh, fh, out: fn(v, d, b, a, 0, 255, eh, fh, out)
    )
    if order == 0:  # the numpy path without feedback gives the kernel's bits
        got, overloads = round_block(v, d, 0, 255)
        np.testing.assert_array_equal(got, o1)
        assert overloads == c1[0]


@pytest.mark.parametrize("order", [0, 1, 5, 16])
@pytest.mark.parametrize("dither", ["none", "tpdf"])
def test_levels_kernel_matches_reference_bit_for_bit(
    order: int, dither: str, rng: np.random.Generator
) -> None:
    # A non-monotonic set of true levels (LSB), sorted as the quantiser keeps them.
    levels = np.arange(64) + rng.normal(0, 0.6, 64)
    sort = np.argsort(levels, kind="stable")
    lv, lc = levels[sort], sort.astype(np.int64)
    n = 3000
    v = rng.uniform(-3, 66, n)
    v[::97] = lv[5]  # exact ties with a level
    d = DitherSource(dither, 7).draw(n)
    b = rng.normal(0, 0.3, order)
    a = np.zeros(order)
    o1, c1 = _run_all_versions(
        "levels_quantize", order, n, lambda fn, eh, fh, out: fn(v, d, lv, lc, b, a, eh, fh, out)
    )
    if order == 0:
        got, overloads = nearest_levels_block(v, d, lv, lc)
        np.testing.assert_array_equal(got, o1)
        assert overloads == c1[0]


def test_block_processing_equals_whole(rng: np.random.Generator) -> None:
    # Kernel state (error and feedback history) carries across blocks; so do the draws.
    v = rng.uniform(10, 240, 4000)
    b, a = np.array([-1.6, 0.9, -0.1]), np.array([-0.3, 0.02, 0.0])
    k = _kernels.compiled("shape_quantize")
    whole = np.empty(4000, np.int64)
    k(v, DitherSource("tpdf", 1).draw(4000), b, a, 0, 255, np.zeros(3), np.zeros(3), whole)
    parts = np.empty(4000, np.int64)
    src, eh, fh = DitherSource("tpdf", 1), np.zeros(3), np.zeros(3)
    for lo, hi in ((0, 1000), (1000, 1001), (1001, 4000)):
        k(v[lo:hi], src.draw(hi - lo), b, a, 0, 255, eh, fh, parts[lo:hi])
    np.testing.assert_array_equal(whole, parts)


def test_short_blocks_use_the_twin_until_numba_is_loaded() -> None:
    # The choice only saves time; both give the same bits (tests above).
    name = "shape_quantize"
    if name not in _kernels._COMPILED:
        small = _kernels.kernel(name, _kernels.PLAIN_MAX_SAMPLES)
        assert small is _kernels.shape_quantize_py
    assert _kernels.kernel(name, _kernels.PLAIN_MAX_SAMPLES + 1) is _kernels.compiled(name)
    assert _kernels.kernel(name, 10) is _kernels.compiled(name)


@pytest.mark.parametrize(("kind", "peak"), [("tpdf", 1.5), ("rpdf", 1.0), ("none", 0.5)])
def test_total_error_bounded_by_dither_peak(
    kind: str, peak: float, rng: np.random.Generator
) -> None:
    # Total error = rounding (+/-0.5 LSB) + dither (TPDF +/-1, RPDF +/-0.5 LSB).
    sig = Signal(rng.uniform(-0.9, 0.9, 100_000), 8000.0)
    codes, _ = quantize(sig, bits=8, dither=kind, seed=11)
    err = codes.codes - signal_to_lsb(sig.samples, 8)
    assert float(np.max(np.abs(err))) <= peak
    assert float(np.max(np.abs(err))) > peak - 0.05


def test_same_seed_same_codes(rng: np.random.Generator) -> None:
    sig = Signal(rng.uniform(-0.9, 0.9, 1000), 8000.0)
    a, _ = quantize(sig, bits=8, seed=7)
    b, _ = quantize(sig, bits=8, seed=7)
    c, _ = quantize(sig, bits=8, seed=8)
    np.testing.assert_array_equal(a.codes, b.codes)
    assert not np.array_equal(a.codes, c.codes)


@pytest.mark.parametrize(
    ("x", "code"),
    [(0.0, 128), (-1.0, 0), (1.0, 255), (0.5 / 128, 129), (0.49 / 128, 128), (-0.51 / 128, 127)],
)
def test_float_to_code_edges(x: float, code: int) -> None:
    codes, _ = quantize(Signal(np.array([x]), 8000.0), bits=8, dither="none")
    assert int(codes.codes[0]) == code


def test_one_bit_codes_are_zero_or_one() -> None:
    codes, _ = quantize(_sine(0.9), bits=1)
    assert set(np.unique(codes.codes).tolist()) <= {0, 1}


@pytest.mark.parametrize("bits", [0, 17, -1, 2.5])
def test_bits_out_of_range(bits: float) -> None:
    with pytest.raises(OptionError, match="bits"):
        quantize(_sine(), bits=bits)  # type: ignore[arg-type]


def test_idle_ramp_starts_at_idle_and_is_monotonic() -> None:
    r = idle_ramp(0, 8, 100)
    assert r[0] == 0
    assert np.all(np.diff(r.astype(int)) >= 0)
    assert r[-1] in (127, 128)


def test_ramps_bracket_audio() -> None:
    audio = Codes(np.full(10, 128, np.uint16), 8)
    out = with_idle_ramps(audio, idle_code=3, ramp_samples=20)
    assert len(out) == 50
    assert out.codes[0] == 3 and out.codes[-1] == 3


def test_code_scale_for_bits_is_the_ladder_path(rng: np.random.Generator) -> None:
    from ladderpack.quantize import BlockQuantizer, CodeScale

    x = rng.uniform(-1.0, 1.0, 5000)
    plain = BlockQuantizer(bits=10, shaper="second-order", seed=2).feed(x)
    scaled = BlockQuantizer(
        bits=10, shaper="second-order", seed=2, scale=CodeScale.for_bits(10)
    ).feed(x)
    np.testing.assert_array_equal(plain, scaled)


@pytest.mark.parametrize("count", [7, 1418, 62501])
def test_any_number_of_levels_keeps_the_dither_theory(count: int) -> None:
    # A PWM slice has TOP + 2 levels, rarely a power of two. TPDF error power stays
    # 1/12 + 1/6 = 0.25 LSB^2 (Lipshitz, Wannamaker & Vanderkooy 1992) at any step, and
    # +/-1.0 land on the outer levels.
    from ladderpack.quantize import BlockQuantizer, CodeScale

    scale = CodeScale.for_levels(count)
    # keep dithered targets inside the code range: peak + 1.5 LSB below full scale
    x = np.sin(2 * np.pi * 0.01234 * np.arange(N_REC)) * (scale.half - 1.5) / scale.half
    codes = BlockQuantizer(bits=16, dither="tpdf", seed=1, scale=scale).feed(x)
    err = codes - (x * scale.half + scale.half)
    assert float(np.mean(err**2)) == pytest.approx(0.25, rel=0.05)
    assert abs(float(np.mean(err))) < 0.01
    ends = BlockQuantizer(bits=16, dither="none", scale=scale).feed(np.array([-1.0, 1.0, 0.0]))
    assert ends[0] == 0 and ends[1] == count - 1
    assert abs(int(ends[2]) - (count - 1) / 2) <= 0.5


def test_predicted_sine_for_any_step() -> None:
    # The ideal N-bit quantiser: 6.02 N + 1.76 dB (Kester, MT-001), here through the
    # half-scale in LSB, which also serves level counts that are not powers of two.
    from ladderpack.quantize import predicted_full_scale_sine

    for n in (8, 10.47):
        got = predicted_full_scale_sine(2 ** (n - 1), "none", 0.0, 1000.0, 2000.0)
        assert got["sinad_db"] == pytest.approx(6.02 * n + 1.76, abs=0.01)
