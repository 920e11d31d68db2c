"""Measured levels: CSV import, superposition, the LevelSet file."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from helpers import ladderpack_cli

from ladderpack.errors import LadderpackError
from ladderpack.ladder import ideal_ladder, perturbed
from ladderpack.levels import LevelSet, linearity, load_levels, read_sweep_csv

REPO = Path(__file__).resolve().parent.parent


def _model(bits: int = 6, seed: int = 0) -> np.ndarray:
    lad = perturbed(
        ideal_ladder(bits, 10_000.0, source_high_ohms=60, source_low_ohms=30),
        np.random.default_rng(seed),
        tolerance=0.01,
    )
    return lad.levels()


def _write(path: Path, header: str, rows: list[str]) -> Path:
    path.write_text("\n".join([header, *rows]) + "\n")
    return path


def test_full_sweep_with_repeats_is_averaged(tmp_path: Path) -> None:
    v = _model()
    rows = [f"{c},{x - 1e-4:.9f}" for c, x in enumerate(v)] + [
        f"{c},{x + 1e-4:.9f}" for c, x in enumerate(v)
    ]
    lev = read_sweep_csv(_write(tmp_path / "s.csv", "code,volts", rows), 6)
    np.testing.assert_allclose(lev.volts, v, atol=1e-9)
    assert lev.notes["readings"] == 128 and lev.notes["codes_measured"] == 64
    assert lev.notes["superposition_residual_lsb"] > 0  # unequal high/low sources


def test_millivolt_header_and_unit_column(tmp_path: Path) -> None:
    v = _model()
    a = read_sweep_csv(
        _write(tmp_path / "a.csv", "code,mV", [f"{c},{1e3 * x:.6f}" for c, x in enumerate(v)]), 6
    )
    b = read_sweep_csv(
        _write(
            tmp_path / "b.csv",
            "code,value,unit",
            [f"{c},{1e6 * x:.3f},uV" for c, x in enumerate(v)],
        ),
        6,
    )
    np.testing.assert_allclose(a.volts, v, atol=1e-8)
    np.testing.assert_allclose(b.volts, v, atol=1e-8)


def test_n_plus_one_readings_by_superposition(tmp_path: Path) -> None:
    lad = ideal_ladder(6, 10_000.0, source_high_ohms=45, source_low_ohms=45)
    v = lad.levels()
    codes = [0, *[1 << k for k in range(6)]]
    lev = read_sweep_csv(
        _write(tmp_path / "n1.csv", "code,volts", [f"{c},{float(v[c])!r}" for c in codes]),
        6,
        superposition=True,
    )
    assert lev.origin == "superposition"
    np.testing.assert_allclose(lev.volts, v, rtol=1e-9)  # exact for equal high/low sources


def test_missing_codes_refused_or_filled(tmp_path: Path) -> None:
    v = _model()
    rows = [f"{c},{float(x)!r}" for c, x in enumerate(v) if c not in (13, 40)]
    path = _write(tmp_path / "m.csv", "code,volts", rows)
    with pytest.raises(LadderpackError, match=r"2 code\(s\) have no reading \(first: \[13, 40\]"):
        read_sweep_csv(path, 6)
    lev = read_sweep_csv(path, 6, fill="model")
    assert lev.notes["codes_filled"] == 2
    lsb = (v[-1] - v[0]) / 63
    assert abs(lev.volts[13] - v[13]) < 0.5 * lsb  # superposition model, close not exact


@pytest.mark.parametrize(
    ("header", "rows", "message"),
    [
        ("code,volts", ["0,0.0", "1,abc"], r"m\.csv:3: volts: expected a number, got 'abc'"),
        ("code,volts", ["0,0.0", "x,1.0"], r"m\.csv:3: code: expected a whole number"),
        ("code,volts", ["0,0.0", "99,1.0"], r"m\.csv:3: code: code 99 is outside 0\.\.63"),
        ("code,volts", ["0,0.0", "63,3.2", "5,0.25", "5,250"], r"code 5 on lines 4, 5 disagree"),
        ("code,value,unit", ["0,0,V", "63,3.2,kV"], r"m\.csv:3: unit: unknown unit 'kV'"),
        ("volts", ["0.1"], r"m\.csv:1: code: header must name a 'code' column"),
        ("code,reading", ["0,0.1"], r"header must have a value column"),
        ("code,volts", ["0,nan"], r"expected a finite number"),
    ],
)
def test_bad_csv_named_with_line(
    tmp_path: Path, header: str, rows: list[str], message: str
) -> None:
    with pytest.raises(LadderpackError, match=message):
        read_sweep_csv(_write(tmp_path / "m.csv", header, rows), 6, fill="model")


def test_levelset_round_trip(tmp_path: Path) -> None:
    lev = LevelSet(6, _model(), "measured", {"file": "x.csv"})
    path = tmp_path / "l.json"
    path.write_text(lev.to_json())
    back = load_levels(path)
    np.testing.assert_array_equal(back.volts, lev.volts)
    assert back.origin == "measured" and back.bits == 6
    (tmp_path / "bad.json").write_text('{"format": "other"}')
    with pytest.raises(LadderpackError, match="format"):
        load_levels(tmp_path / "bad.json")


def test_linearity_definitions() -> None:
    # IEEE Std 1658 style definitions on a hand-made 2-bit table: levels 0, 1.1, 1.9, 3.
    lin = linearity(np.array([0.0, 1.1, 1.9, 3.0]))
    assert lin["lsb_volts"] == pytest.approx(1.0)
    np.testing.assert_allclose(lin["dnl"], [0.1, -0.2, 0.1])
    np.testing.assert_allclose(lin["inl_endpoint"], [0.0, 0.1, -0.1, 0.0], atol=1e-12)
    assert lin["monotonic"] and lin["missing_codes"] == 0
    assert not linearity(np.array([0.0, 1.2, 1.1, 3.0]))["monotonic"]


_cli = ladderpack_cli


def test_levels_and_ladder_commands(tmp_path: Path) -> None:
    v = _model()
    csv = _write(
        tmp_path / "sweep.csv", "code,volts", [f"{c},{float(x)!r}" for c, x in enumerate(v)]
    )
    out = tmp_path / "lv.json"
    res = _cli("levels", str(csv), "--bits", "6", "-o", str(out), "--json")
    assert res.returncode == 0, res.stderr
    rep = json.loads(res.stdout)
    assert rep["max_abs_dnl"] == pytest.approx(linearity(v)["max_abs_dnl"])
    assert load_levels(out).bits == 6
    bad = _cli("levels", str(csv), "--bits", "5", "-o", str(tmp_path / "x.json"))
    assert bad.returncode == 2 and "outside 0..31" in bad.stderr
    assert not (tmp_path / "x.json").exists()
    res = _cli(
        "ladder",
        "--bits",
        "8",
        "--trials",
        "10",
        "--json",
        "--levels-out",
        str(tmp_path / "m.json"),
        "--spice",
        str(tmp_path / "m.cir"),
    )
    assert res.returncode == 0, res.stderr
    rep = json.loads(res.stdout)
    assert rep["nominal"]["monotonic"] and rep["recommended_r_ohms"]
    assert (tmp_path / "m.cir").read_text().startswith("* ladderpack R-2R ladder")
    assert load_levels(tmp_path / "m.json").origin == "model"


def test_stream_with_levels(tmp_path: Path) -> None:
    import soundfile

    clip = tmp_path / "tone.wav"
    t = np.arange(8000) / 16000
    soundfile.write(clip, 0.5 * np.sin(2 * np.pi * 500 * t), 16000)
    lev = tmp_path / "lv.json"
    assert (
        _cli(
            "ladder",
            "--bits",
            "10",
            "--levels-out",
            str(lev),
            "--trials",
            "2",
            "--load-ohms",
            "47000",
        ).returncode
        == 0
    )
    res = _cli(
        "stream",
        str(clip),
        "--bits",
        "10",
        "--levels",
        str(lev),
        "-o",
        str(tmp_path / "o"),
        "--json",
    )
    assert res.returncode == 0, res.stderr
    summary = json.loads(res.stdout)
    assert summary["levels"]["origin"] == "model"
    assert summary["levels"]["span_vs_ideal_db"] < -0.5  # the 47 kohm load shrinks the reach
    wrong = _cli(
        "stream", str(clip), "--bits", "8", "--levels", str(lev), "-o", str(tmp_path / "o2")
    )
    assert wrong.returncode == 2 and "levels" in wrong.stderr


def test_code_for_volts_ideal_ladder_worked_example() -> None:
    # Ideal R-2R transfer V = D / 2^N x Vref (textbook R-2R result, as ideal_levels):
    # 1.000 V from an 8-bit ladder on 3.3 V: D = round(1.0 / 3.3 x 256) = 78, which gives
    # 78 x 3.3 / 256 = 1.005469 V, +0.424 LSB (worked by hand).
    from ladderpack.levels import code_for_volts, ideal_levels

    r = code_for_volts(ideal_levels(8, full_scale_volts=3.3), 1.0)
    assert r["code"] == 78
    assert r["volts"] == pytest.approx(78 * 3.3 / 256)
    assert r["error_lsb"] == pytest.approx((78 * 3.3 / 256 - 1.0) / (3.3 / 256))
    assert r["in_range"]


def test_code_for_volts_uses_the_real_levels() -> None:
    # A non-monotonic ladder: the nearest level wins, whichever code it is.
    from ladderpack.levels import LevelSet, code_for_volts

    levels = LevelSet(2, np.array([0.0, 1.2, 1.0, 3.0]), "measured")
    assert code_for_volts(levels, 1.05)["code"] == 2
    assert code_for_volts(levels, 1.15)["code"] == 1
    outside = code_for_volts(levels, 4.0)
    assert outside["code"] == 3 and not outside["in_range"]


def test_levels_report_gives_signed_dnl_extremes(tmp_path: Path) -> None:
    # DNL_k = (V[k+1] - V[k]) / LSB - 1 with the endpoint LSB (IEEE Std 1241
    # definition of DNL), computed here independently: a 3-bit sweep whose largest |DNL| is a
    # negative step, so "max" and "min" must differ.
    volts = np.array([0.0, 0.10, 0.21, 0.25, 0.40, 0.50, 0.61, 0.70])
    lsb = (volts[-1] - volts[0]) / 7
    dnl = np.diff(volts) / lsb - 1
    csv = tmp_path / "sweep.csv"
    csv.write_text("code,volts\n" + "".join(f"{k},{v}\n" for k, v in enumerate(volts)))
    res = ladderpack_cli("levels", str(csv), "--bits", "3", "-o", str(tmp_path / "l.json"))
    assert res.returncode == 0, res.stderr
    line = next(t for t in res.stdout.splitlines() if t.strip().startswith("DNL"))
    assert f"{dnl.min():+.3f} to {dnl.max():+.3f} LSB" in line
    assert f"largest |DNL| {np.abs(dnl).max():.3f} LSB" in line
