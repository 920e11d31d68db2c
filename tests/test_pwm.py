"""PWM output plan against the slice's behaviour as the vendor SDK describes it."""

from __future__ import annotations

import json
import math
import re
import subprocess
import sys
from fractions import Fraction

import pytest
from chip.harness import sdk_path

from ladderpack.errors import ClockError, DeprecatedOptionWarning, OptionError
from ladderpack.outputs.pwm import (
    DREQ_DMA_TIMER0,
    DREQ_PWM_WRAP0,
    PERIODS_MAX,
    PwmPlan,
    plan_pwm,
)

RATES = [8000, 11025, 16000, 22050, 32000, 44100, 48000, 96000]


def _period_rate(plan: PwmPlan) -> Fraction:
    # vendor SDK hardware/pwm.h: "the PWM counter runs at clk_sys / div" with div in 8.4
    # fixed point (DIV_INT 1..255, DIV_FRAC 4 bits), counting "upward until the wrap
    # value is reached, and then immediately wrap to 0": TOP + 1 counts a period.
    div = Fraction(plan.div_int) + Fraction(plan.div_frac, 16)
    return Fraction(plan.sys_clock_hz) / (div * (plan.top + 1))


@pytest.mark.parametrize("sys_hz", [125_000_000, 150_000_000])
@pytest.mark.parametrize("rate", RATES)
def test_plan_obeys_the_slice_arithmetic(rate: int, sys_hz: int) -> None:
    p = plan_pwm(rate, sys_clock_hz=sys_hz)
    assert 1 <= p.div_int <= 255 and 0 <= p.div_frac <= 15 and 1 <= p.top <= 0xFFFF
    carrier = _period_rate(p)
    assert p.carrier_hz == carrier
    assert p.achieved_rate_hz == carrier / p.periods_per_sample
    assert carrier >= 4 * rate  # the default lowest carrier
    # Compare values 0 (never high) .. TOP + 1 (always high): TOP + 2 levels.
    assert p.levels == p.top + 2
    assert p.effective_bits == pytest.approx(math.log2(p.top + 2))
    assert p.error_ppm == pytest.approx(float((p.achieved_rate_hz / rate - 1) * 10**6))
    if p.pacing == "timer":
        # hardware/regs/dma.h TIMER0: TREQ at (X / Y) * sys_clk, X and Y 16 bits each.
        x, y = p.timer_xy or (0, 0)
        assert 1 <= x <= 0xFFFF and 1 <= y <= 0xFFFF
        assert Fraction(sys_hz) * x / y == p.achieved_rate_hz
        # a whole number of PWM periods between requests: every new value is latched
        # at the same point of its period
        assert Fraction(y, x) / (Fraction(sys_hz) / carrier) == p.periods_per_sample
    else:
        assert p.periods_per_sample == 1


def _brute_force(rate: int, sys_hz: int) -> list[tuple[int, int, int]]:
    """Every integer-divider (div, TOP + 1, K) meeting the default limits, exactly."""
    found = []
    for k in range(1, PERIODS_MAX + 1):
        for div in range(1, 256):
            exact = Fraction(sys_hz, div * k * rate)
            for top1 in {math.floor(exact), math.ceil(exact)}:
                if not 2 <= top1 <= 0x10000 or Fraction(sys_hz, div * top1) < 4 * rate:
                    continue
                if k > 1 and div * top1 * k > 0xFFFF:
                    continue
                found.append((div, top1, k))
    return found


@pytest.mark.parametrize("rate", [8000, 22050, 44100])
def test_plan_keeps_the_best_resolution(rate: int) -> None:
    # An independent exhaustive search with exact arithmetic: no integer setting meeting
    # the carrier and pacing limits has more than 1/0.95 of the chosen levels, and when
    # some setting near the best resolution is within the tolerance the choice is too.
    sys_hz = 125_000_000
    p = plan_pwm(rate, sys_clock_hz=sys_hz)
    every = _brute_force(rate, sys_hz)
    best_levels = max(top1 + 1 for _, top1, _ in every)
    assert p.levels >= 0.95 * best_levels
    near = [
        (d, t, k)
        for d, t, k in every
        if t >= 0.95 * (best_levels - 1)
        and abs(Fraction(sys_hz, d * t * k) / rate - 1) <= Fraction(100, 10**6)
    ]
    if near:
        assert abs(p.error_ppm) <= 100
        assert p.levels == max(t + 1 for _, t, _ in near)


def test_dreq_numbers_match_the_sdk_headers() -> None:
    # hardware/regs/dreq.h of each chip in the vendored SDK (REFERENCES.md section 13).
    for chip in ("rp2040", "rp2350"):
        text = (
            sdk_path() / "src" / chip / "hardware_regs/include/hardware/regs/dreq.h"
        ).read_text()
        wrap = int(re.search(r"#define DREQ_PWM_WRAP0 (\d+)", text).group(1))  # type: ignore[union-attr]
        timer = int(re.search(r"#define DREQ_DMA_TIMER0 (\d+)", text).group(1))  # type: ignore[union-attr]
        assert (DREQ_PWM_WRAP0[chip], DREQ_DMA_TIMER0[chip]) == (wrap, timer)


def test_divider_field_widths_match_the_sdk_headers() -> None:
    # hardware/regs/pwm.h: DIV_INT bits 11:4 (8 bits), DIV_FRAC bits 3:0, TOP 16 bits.
    text = (sdk_path() / "src/rp2040/hardware_regs/include/hardware/regs/pwm.h").read_text()
    assert "#define PWM_CH0_DIV_INT_BITS   _u(0x00000ff0)" in text
    assert "#define PWM_CH0_DIV_FRAC_BITS   _u(0x0000000f)" in text
    assert "#define PWM_CH0_TOP_BITS   _u(0x0000ffff)" in text


def test_one_period_per_sample_is_paced_by_the_wrap() -> None:
    p = plan_pwm(1000, min_carrier_hz=1000)
    assert p.pacing == "wrap" and p.timer_xy is None
    assert p.achieved_rate_hz == p.carrier_hz == 1000
    assert not p.fractional


def test_low_rates_need_one_period_per_sample() -> None:
    # Below f_sys / 65535 the pacing timer cannot span a sample: the error says what to do.
    with pytest.raises(ClockError, match="carrier equal to the rate"):
        plan_pwm(1000)


@pytest.mark.parametrize(
    ("kw", "field"),
    [
        ({"rate_hz": 0}, "rate_hz"),
        ({"rate_hz": 22050, "sys_clock_hz": 0}, "sys_clock_hz"),
        ({"rate_hz": 22050, "min_carrier_hz": -1.0}, "min_carrier_hz"),
        ({"rate_hz": 22050, "tolerance_ppm": float("nan")}, "rate_tolerance_ppm"),
    ],
)
def test_bad_arguments_name_their_field(kw: dict[str, object], field: str) -> None:
    with pytest.raises(OptionError) as info:
        plan_pwm(**kw)  # type: ignore[arg-type]
    assert info.value.field == field


def test_clock_command_shows_the_pwm_plan() -> None:
    run = subprocess.run(
        [sys.executable, "-m", "ladderpack", "clock", "22050", "--output", "pwm", "--json"],
        capture_output=True,
        text=True,
        check=True,
    )
    d = json.loads(run.stdout)
    p = plan_pwm(22050)
    assert (d["top"], d["periods_per_sample"], d["levels"]) == (p.top, p.periods_per_sample, 1418)
    assert d["dreq"] == 59 and d["timer_xy"] == [1, 5668]
    # A full-scale sine on 1418 levels (half-scale 708.5 LSB) over TPDF error power
    # 1/12 + 1/6 LSB^2 (Lipshitz et al. 1992), the whole Nyquist band being the band.
    want = 10 * math.log10(708.5**2 / 2 / 0.25)
    assert d["predicted_full_scale_sine"]["sinad_db"] == pytest.approx(want, abs=0.001)
    rc = d["reconstruction_filter"]
    assert rc["c_farads"] == 5.6e-10 and rc["gain_at_band_db"] >= -1.0
    # a 50 % square wave's fundamental is 2 V / pi (its Fourier series), then filtered
    ripple = 2 * 3.3 / math.pi * 10 ** (rc["gain_at_carrier_db"] / 20)
    assert rc["carrier_ripple_volts_peak_at_3v3"] == pytest.approx(ripple)
    text = subprocess.run(
        [sys.executable, "-m", "ladderpack", "clock", "22050", "--output", "pwm"],
        capture_output=True,
        text=True,
        check=True,
    ).stdout
    assert "carrier    88214.538 Hz, TOP 1416" in text
    bad = subprocess.run(
        [sys.executable, "-m", "ladderpack", "clock", "22050", "--min-carrier-hz", "1e5"],
        capture_output=True,
        text=True,
    )
    assert bad.returncode == 2 and "--min-carrier-hz: applies to output pwm" in bad.stderr
    assert "Traceback" not in bad.stderr


@pytest.mark.parametrize("poles", [1, 2, 3])
@pytest.mark.parametrize("band", [4000.0, 9924.0, 20000.0])
def test_reconstruction_filter_meets_its_droop_with_standard_parts(poles: int, band: float) -> None:
    # Reference: scipy.signal.freqs (PyPI) on the analog transfer 1 / (1 + s / wc)^poles
    # of buffered first-order sections; capacitors from the E12 series (IEC 60063).
    import numpy as np
    from scipy import signal as sps

    from ladderpack.outputs.pwm import reconstruction_filter

    plan = plan_pwm(44100, min_carrier_hz=176_400)
    f = reconstruction_filter(plan, band, poles=poles)
    wc = 2 * np.pi * f.corner_hz
    den = np.poly1d([1 / wc, 1.0]) ** poles
    for freq in (band, float(plan.carrier_hz)):
        _, h = sps.freqs([1.0], den.coeffs, worN=[2 * np.pi * freq])
        assert f.gain_db(freq) == pytest.approx(20 * np.log10(abs(h[0])), abs=1e-9)
    assert -1.0 - 1e-9 <= f.gain_db(band) < 0
    e12 = [1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2]
    mant = f.c_farads / 10 ** math.floor(math.log10(f.c_farads))
    assert any(abs(mant - m) < 1e-9 for m in e12)
    # the next larger E12 capacitor would droop more than 1 dB
    i = next(k for k, m in enumerate(e12) if abs(mant - m) < 1e-9)
    bigger = (e12[i + 1] if i + 1 < 12 else 10.0) / mant * f.c_farads
    wider = type(f)(poles, f.r_ohms, bigger)
    assert wider.gain_db(band) < -1.0


def test_reconstruction_filter_refuses_a_band_above_the_carrier() -> None:
    from ladderpack.outputs.pwm import reconstruction_filter

    with pytest.raises(OptionError) as info:
        reconstruction_filter(plan_pwm(22050), 1e6)
    assert info.value.field == "band_hz"


# --- PWM streams ---------------------------------------------------------------------------


def test_stream_quantises_to_the_slice_levels() -> None:
    import numpy as np

    from ladderpack.outputs.pwm import plan_pwm
    from ladderpack.stream import stream_tone

    asset = stream_tone("sine", name="p", output="pwm", seconds=0.02, level_dbfs=0.0)
    plan = plan_pwm(22050)
    assert asset.plan == plan and asset.setup is not None and asset.setup.slice == 0
    codes = asset.codes.codes.astype(int) if asset.codes is not None else None
    assert codes is not None
    # compare values 0..TOP+1 (duty 0 to 100 %, datasheet 4.5.2.2), two 16-bit values a
    # word, the first in bits 15:0
    assert codes.min() >= 0 and codes.max() <= plan.top + 1
    words = asset.packed.words.astype(np.int64)
    halves = np.stack([words & 0xFFFF, words >> 16], axis=1).reshape(-1)
    assert np.array_equal(halves[: codes.size], codes)
    # a full-scale sine reaches both ends of the scale (dither aside)
    assert codes.max() >= plan.top and codes.min() <= 1
    s = asset.summary()
    assert s["pwm"]["levels"] == 1418 and s["divider"] == "1+0/16"


def test_pwm_options_refuse_what_does_not_apply() -> None:
    from ladderpack.options import StreamOptions
    from ladderpack.stream import stream_tone

    refused = [
        ({"bits": 8}, "bits"),
        ({"invert": True}, "invert"),
        ({"clock_pin": 3}, "clock_pin"),
        ({"pwm_pin": 30}, "pwm_pin"),
    ]
    for bad, field in refused:
        with pytest.raises(OptionError) as info:
            StreamOptions(output="pwm", **bad)
        assert info.value.field == field
    # the old spelling is moved to its new name, with a warning, and checked there
    old = "out_base is the old spelling of pwm_pin"
    with pytest.warns(DeprecatedOptionWarning, match=old), pytest.raises(OptionError) as info:
        StreamOptions(output="pwm", out_base=30)
    assert info.value.field == "pwm_pin"
    with pytest.raises(OptionError) as info:
        StreamOptions(min_carrier_hz=100000.0)
    assert info.value.field == "min_carrier_hz"
    with pytest.raises(OptionError) as info:
        stream_tone("sine", output="pwm", idle_code=5000, seconds=0.01)
    assert info.value.field == "idle_code"


@pytest.mark.slow
def test_generated_c_compiles_pedantic_and_holds_the_bin(tmp_path) -> None:
    import shutil

    import numpy as np

    from ladderpack.bundle import write_bundle
    from ladderpack.stream import stream_tone

    gcc = shutil.which("gcc")
    assert gcc, ".ci/run installs gcc"
    write_bundle(stream_tone("sine", name="pw", output="pwm", seconds=0.003), tmp_path)
    main = tmp_path / "main.c"
    main.write_text(
        '#include <stdio.h>\n#include "pw.h"\n'
        "int main(void) {\n    unsigned i;\n    for (i = 0; i < PW_WORD_COUNT; ++i) {\n"
        '        printf("%08lx\\n", (unsigned long)pw_words[i]);\n    }\n'
        '    printf("%u %u\\n", (unsigned)PW_TOP, (unsigned)PW_TRANSFER_COUNT);\n'
        "    return 0;\n}\n"
    )
    exe = tmp_path / "dump"
    subprocess.run(
        [gcc, "-std=c99", "-pedantic", "-Wall", "-Wextra", "-Werror", "-o", str(exe),
         str(main), str(tmp_path / "pw.c")],
        check=True,
    )  # fmt: skip
    out = subprocess.run([str(exe)], check=True, capture_output=True, text=True).stdout.split()
    words = np.frombuffer((tmp_path / "pw.bin").read_bytes(), "<u4")
    assert [int(w, 16) for w in out[:-2]] == [int(w) for w in words]
    side = json.loads((tmp_path / "pw.json").read_text())
    assert int(out[-2]) == side["clock"]["top"] == 1416
    assert int(out[-1]) == side["stream"]["sample_count"]
    assert side["pwm"]["dreq"] == 59 and "program" not in side  # DREQ_DMA_TIMER0


def test_a_manifest_builds_a_pwm_asset(tmp_path) -> None:
    from click.testing import CliRunner

    from ladderpack.cli import cli

    (tmp_path / "ladderpack.toml").write_text(
        '[project]\nout_dir = "gen"\n\n[[asset]]\nname = "beep"\ntone = "sine"\n'
        'output = "pwm"\nseconds = 0.002\nout_base = 15\nmin_carrier_hz = 44100\n'
    )
    res = CliRunner().invoke(cli, ["build", str(tmp_path / "ladderpack.toml")])
    assert res.exit_code == 0, res.output
    # a manifest in the wild keeps working for a release with the old spelling, and says so
    assert "warning: out_base is the old spelling of pwm_pin for output pwm" in res.output
    side = json.loads((tmp_path / "gen" / "beep.json").read_text())
    assert side["pwm"]["slice"] == 7 and side["pwm"]["channel"] == "B"
    assert side["options"]["pwm_pin"] == 15 and "out_base" not in side["options"]
    assert (tmp_path / "gen" / "ladderpack_pwm.c").is_file()


@pytest.mark.parametrize(
    "opts",
    [{"output": "pwm"}, {"output": "i2s"}, {"output": "i2s", "bits": 24}, {"stereo": True}],
    ids=["pwm", "i2s16", "i2s24", "two-ladders"],
)
def test_preview_of_every_output_meets_its_prediction(tmp_path, opts) -> None:
    from ladderpack.bundle import write_bundle
    from ladderpack.measure import analyse
    from ladderpack.preview import render_preview
    from ladderpack.stream import stream_tone

    asset = stream_tone("sine", name="t", seconds=0.2, freq_hz=997.0, **opts)
    write_bundle(asset, tmp_path)
    predicted = asset.summary()["predicted_full_scale_sine"]["sinad_db"]
    for ch in range(2 if opts.get("stereo") else 1):
        pv = render_preview(str(tmp_path / "t.json"), channel=ch)
        r = analyse(pv.samples[pv.audio_slice], pv.rate_hz, freq_hz=997.0)
        # a -1 dBFS tone: SINAD about 1 dB under the full-scale prediction (quantiser
        # noise 1/12 + TPDF 1/6 LSB^2: Lipshitz, Wannamaker & Vanderkooy 1992), measured
        # by the IEEE 1241 sine fit; 24-bit is limited by the float rendering instead
        if asset.summary()["bits"] <= 16:
            assert abs(r["sinad_db"] - (predicted - 1.0)) < 1.5, (r["sinad_db"], predicted)
        else:
            assert r["sinad_db"] > 120


def test_exact_tones_and_options_with_overrides_work_for_pwm() -> None:
    # a DC or staircase tone turns dither and shaping off by changing the options again,
    # and options given with overrides are changed the same way: the model fills in a
    # PWM stream's bits, which must not then read as given (they did: "--bits: applies
    # to outputs ..."). The values: each code of a staircase, as asked (exact kinds).
    from ladderpack.options import StreamOptions
    from ladderpack.stream import stream_tone

    a = stream_tone("dc", name="z", output="pwm", seconds=0.01, rate_hz=22050.0, ramp_ms=0.0)
    assert a.options["dither"] == "none" and a.options["shaping"] == "none"
    opts = StreamOptions(output="pwm", rate_hz=22050.0)
    b = stream_tone("sine", name="z", options=opts, seconds=0.01, freq_hz=1000.0)
    assert b.options["output"] == "pwm" and b.sample_count > 0
