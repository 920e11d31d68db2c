"""R-2R ladder circuit model, solved by nodal analysis, and its design checks.

Topology (voltage-mode R-2R): node k (k = 0 at the LSB end) joins bit k's 2R leg;
a rung resistor R joins node k to node k + 1; a 2R termination runs from node 0 to
ground; the output is node N-1, optionally loaded by a resistor to ground.  Pin k
drives its leg from the supply (high) or ground (low) through its own source
resistance, which differs between the two states.  Every resistor has its own value.

Kirchhoff's current law at each node gives a tridiagonal conductance system, solved
for all codes at once (Thomas algorithm, vectorised over codes).  Nothing is
approximated: with ideal values the model reproduces the textbook result
``V(code) = V_ref code / 2^N`` and an output resistance of exactly R.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, replace
from typing import Any, TypedDict

import numpy as np

from ladderpack.errors import OptionError
from ladderpack.options import LadderDesignSpec, check_bits

__all__ = [
    "BOLTZMANN",
    "DRIVE_SOURCE_OHMS",
    "E_SERIES",
    "Ladder",
    "LadderDesign",
    "design_ladder",
    "e_series",
    "ideal_ladder",
    "johnson_noise_volts",
    "perturbed",
    "spice_netlist",
]

#: Boltzmann constant, J/K (exact since the 2019 SI redefinition).
BOLTZMANN = 1.380649e-23

#: Worst-case pin source resistance (high, low) in ohms at 3.3 V IOVDD for each drive
#: setting, from the RP2040 datasheet's output-voltage limits (VOH >= 2.62 V and
#: VOL <= 0.5 V at the rated current): R_high <= (3.3 - 2.62) / I, R_low <= 0.5 / I
#: (REFERENCES.md section 12).  Upper bounds: typical parts are much lower.
DRIVE_SOURCE_OHMS = {
    2: ((3.3 - 2.62) / 2e-3, 0.5 / 2e-3),
    4: ((3.3 - 2.62) / 4e-3, 0.5 / 4e-3),
    8: ((3.3 - 2.62) / 8e-3, 0.5 / 8e-3),
    12: ((3.3 - 2.62) / 12e-3, 0.5 / 12e-3),
}

#: IEC 60063 preferred numbers (REFERENCES.md section 8).
E_SERIES = {
    "E24": (
        1.0,
        1.1,
        1.2,
        1.3,
        1.5,
        1.6,
        1.8,
        2.0,
        2.2,
        2.4,
        2.7,
        3.0,
        3.3,
        3.6,
        3.9,
        4.3,
        4.7,
        5.1,
        5.6,
        6.2,
        6.8,
        7.5,
        8.2,
        9.1,
    ),
    "E96": tuple(round(10 ** (i / 96), 2) for i in range(96)),
    "E192": tuple(9.20 if i == 185 else round(10 ** (i / 192), 2) for i in range(192)),
}


def e_series(name: str, lo_ohms: float = 100.0, hi_ohms: float = 1e6) -> list[float]:
    """Preferred values of series `name` between `lo_ohms` and `hi_ohms`, ascending."""
    if name not in E_SERIES:
        raise OptionError(f"must be one of {', '.join(E_SERIES)}; got {name!r}", field="series")
    out = []
    for decade in range(-1, 8):
        for m in E_SERIES[name]:
            v = round(m * 10**decade, 6)
            if lo_ohms <= v <= hi_ohms:
                out.append(v)
    return sorted(set(out))


@dataclass(frozen=True)
class Ladder:
    """An R-2R ladder with every part's own value.

    Attributes
    ----------
    legs : tuple of tuple of float
        For each bit (LSB first), the resistors in series forming its 2R leg
        (one value, or two R when legs are built from two equal parts), ohms.
    rungs : tuple of float
        The N-1 series resistors between adjacent nodes (LSB end first), ohms.
    termination_ohms : float
        The 2R resistor from the LSB node to ground, ohms.
    source_high_ohms, source_low_ohms : tuple of float
        Each pin's source resistance when driving high and low, ohms.
    supply_volts : float
        Pin high level (IOVDD), volts.
    load_ohms : float or None
        Resistive load from the output to ground, ohms (None: unloaded).
    """

    legs: tuple[tuple[float, ...], ...]
    rungs: tuple[float, ...]
    termination_ohms: float
    source_high_ohms: tuple[float, ...]
    source_low_ohms: tuple[float, ...]
    supply_volts: float = 3.3
    load_ohms: float | None = None

    def __post_init__(self) -> None:
        n = len(self.legs)
        check_bits(n)
        if (
            len(self.rungs) != n - 1
            or len(self.source_high_ohms) != n
            or len(self.source_low_ohms) != n
        ):
            raise OptionError(
                f"a {n}-bit ladder needs {n} legs, {n - 1} rungs and {n} source "
                "resistances per state",
                field="ladder",
            )
        values = [*(r for leg in self.legs for r in leg), *self.rungs, self.termination_ohms]
        if any(not (math.isfinite(r) and r > 0) for r in values):
            raise OptionError("every resistor must be > 0 ohm", field="ladder")
        if any(
            not (math.isfinite(r) and r >= 0)
            for r in (*self.source_high_ohms, *self.source_low_ohms)
        ):
            raise OptionError("source resistances must be >= 0 ohm", field="ladder")
        if self.load_ohms is not None and not self.load_ohms > 0:
            raise OptionError(f"must be > 0 ohm, got {self.load_ohms!r}", field="load_ohms")

    @property
    def bits(self) -> int:
        """Number of bits N."""
        return len(self.legs)

    def _system(self, codes: np.ndarray) -> tuple[np.ndarray, ...]:
        n = self.bits
        bits = ((codes[:, None] >> np.arange(n)[None, :]) & 1).astype(bool)
        leg = np.array([sum(p) for p in self.legs])
        rs = np.where(bits, np.array(self.source_high_ohms), np.array(self.source_low_ohms))
        g_leg = 1.0 / (leg[None, :] + rs)
        g_rung = 1.0 / np.array(self.rungs)
        diag = g_leg.copy()
        diag[:, 0] += 1.0 / self.termination_ohms
        if n > 1:
            diag[:, :-1] += g_rung[None, :]
            diag[:, 1:] += g_rung[None, :]
        if self.load_ohms is not None:
            diag[:, -1] += 1.0 / self.load_ohms
        off = -g_rung  # symmetric off-diagonal, same for every code
        return bits, g_leg, diag, off

    def node_volts(self, codes: np.ndarray | None = None) -> np.ndarray:
        """Voltage at every node for each code, shape ``(codes, N)`` (node N-1 is the output)."""
        c = np.arange(1 << self.bits) if codes is None else np.asarray(codes, dtype=np.int64)
        bits, g_leg, diag, off = self._system(c)
        rhs = g_leg * np.where(bits, self.supply_volts, 0.0)
        return _solve_tridiagonal(diag, off, rhs)

    def levels(self, codes: np.ndarray | None = None) -> np.ndarray:
        """Output voltage of each code (all codes by default)."""
        return self.node_volts(codes)[:, -1]

    def output_ohms(self, codes: np.ndarray | None = None) -> np.ndarray:
        """Thevenin output resistance for each code (sources shorted through their pins)."""
        c = np.arange(1 << self.bits) if codes is None else np.asarray(codes, dtype=np.int64)
        _, _, diag, off = self._system(c)
        rhs = np.zeros_like(diag)
        rhs[:, -1] = 1.0  # inject 1 A at the output
        return _solve_tridiagonal(diag, off, rhs)[:, -1]

    def pin_currents(self, codes: np.ndarray | None = None) -> np.ndarray:
        """Current out of each pin into its leg, amperes, shape ``(codes, N)``."""
        c = np.arange(1 << self.bits) if codes is None else np.asarray(codes, dtype=np.int64)
        bits, g_leg, _, _ = self._system(c)
        v = self.node_volts(c)
        return (np.where(bits, self.supply_volts, 0.0) - v) * g_leg


def _solve_tridiagonal(diag: np.ndarray, off: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """Solve symmetric tridiagonal systems (Thomas algorithm), one per row of `diag`.

    `off` holds the N-1 off-diagonal values shared by every row, or one row of them
    per system (shape ``(rows, N - 1)``).  The sweep runs over node-major copies, so
    each step reads contiguous memory.
    """
    n = diag.shape[1]
    dg = np.ascontiguousarray(diag.T)
    r = np.ascontiguousarray(rhs.T)
    o = np.ascontiguousarray(off.T) if off.ndim == 2 else off[:, None]
    c = np.zeros_like(dg)
    d = np.zeros_like(r)
    denom = dg[0].copy()
    if n > 1:
        c[0] = o[0] / denom
    d[0] = r[0] / denom
    for i in range(1, n):
        denom = dg[i] - o[i - 1] * c[i - 1]
        if i < n - 1:
            c[i] = o[i] / denom
        d[i] = (r[i] - o[i - 1] * d[i - 1]) / denom
    x = np.zeros_like(r)
    x[-1] = d[-1]
    for i in range(n - 2, -1, -1):
        x[i] = d[i] - c[i] * x[i + 1]
    return x.T


def ideal_ladder(
    bits: int,
    r_ohms: float = 10_000.0,
    *,
    supply_volts: float = 3.3,
    source_high_ohms: float = 0.0,
    source_low_ohms: float = 0.0,
    load_ohms: float | None = None,
    split_legs: bool = False,
) -> Ladder:
    """A ladder with nominal values: legs and termination 2R, rungs R.

    Parameters
    ----------
    bits : int
        Ladder width N.
    r_ohms : float
        The unit resistance R, ohms.
    supply_volts : float
        Pin high level, volts.
    source_high_ohms, source_low_ohms : float
        Every pin's source resistance driving high and low, ohms.
    load_ohms : float, optional
        Output load to ground, ohms.
    split_legs : bool
        Build each 2R leg (and the termination) from two R in series.
    """
    bits = check_bits(bits)
    leg = (r_ohms, r_ohms) if split_legs else (2 * r_ohms,)
    return Ladder(
        tuple(leg for _ in range(bits)),
        tuple(r_ohms for _ in range(bits - 1)),
        2 * r_ohms,
        (source_high_ohms,) * bits,
        (source_low_ohms,) * bits,
        supply_volts,
        load_ohms,
    )


def perturbed(
    ladder: Ladder, rng: np.random.Generator, *, tolerance: float, distribution: str = "uniform"
) -> Ladder:
    """A copy with every resistor off by a random relative error.

    `tolerance` is the fractional tolerance (0.01 for 1 %): 'uniform' draws in
    +/-tolerance; 'normal' takes tolerance as 3 sigma (common practice for
    resistor tolerance bands).
    """

    def draw(n: int) -> np.ndarray:
        if distribution == "uniform":
            return rng.uniform(-tolerance, tolerance, n)
        if distribution == "normal":
            return rng.normal(0.0, tolerance / 3.0, n)
        raise OptionError(f"must be uniform or normal; got {distribution!r}", field="distribution")

    legs = tuple(
        tuple(float(r * (1 + e)) for r, e in zip(leg, draw(len(leg)), strict=True))
        for leg in ladder.legs
    )
    rungs = tuple(
        float(r * (1 + e)) for r, e in zip(ladder.rungs, draw(len(ladder.rungs)), strict=True)
    )
    term = float(ladder.termination_ohms * (1 + draw(1)[0]))
    return replace(ladder, legs=legs, rungs=rungs, termination_ohms=term)


#: Monte Carlo trials solved together (16 x 4096 codes x 16 nodes: about 8 MB an array).
MC_BATCH = 16


def _perturbed_levels(
    nominal: Ladder, rng: np.random.Generator, count: int, tolerance: float, distribution: str
) -> np.ndarray:
    """Levels of the next `count` :func:`perturbed` copies of `nominal`, solved at once.

    The draws come in the order :func:`perturbed` takes them (each leg's parts, the
    rungs, the termination; trial after trial) and every ladder goes through the same
    arithmetic as :meth:`Ladder.levels`, so row ``k`` equals
    ``perturbed(nominal, rng, ...).levels()`` of the k-th call, bit for bit (tested).

    Returns
    -------
    numpy.ndarray
        ``(count, 2**N)`` output volts.
    """
    n = nominal.bits
    parts = [len(leg) for leg in nominal.legs]
    per = sum(parts) + (n - 1) + 1
    if distribution == "uniform":
        e = rng.uniform(-tolerance, tolerance, count * per)
    elif distribution == "normal":
        e = rng.normal(0.0, tolerance / 3.0, count * per)
    else:
        raise OptionError(f"must be uniform or normal; got {distribution!r}", field="distribution")
    nominal_values = np.array(
        [*(r for leg in nominal.legs for r in leg), *nominal.rungs, nominal.termination_ohms]
    )
    values = nominal_values[None, :] * (1 + e.reshape(count, per))  # (trials, resistors)
    cols = np.cumsum([0, *parts])
    leg = values[:, cols[:-1]]
    for k in range(1, max(parts)):  # the parts of split legs, added in order as sum() does
        has = np.array([p > k for p in parts])
        leg = np.where(has[None, :], leg + values[:, np.minimum(cols[:-1] + k, per - 1)], leg)
    rungs = values[:, cols[-1] : cols[-1] + n - 1]
    term = values[:, -1]
    codes = np.arange(1 << n)
    bits = ((codes[:, None] >> np.arange(n)[None, :]) & 1).astype(bool)
    rs = np.where(bits, np.array(nominal.source_high_ohms), np.array(nominal.source_low_ohms))
    g_leg = 1.0 / (leg[:, None, :] + rs[None, :, :])  # (trials, codes, N)
    g_rung = 1.0 / rungs  # (trials, N - 1)
    diag = g_leg.copy()
    diag[:, :, 0] += (1.0 / term)[:, None]
    if n > 1:
        diag[:, :, :-1] += g_rung[:, None, :]
        diag[:, :, 1:] += g_rung[:, None, :]
    if nominal.load_ohms is not None:
        diag[:, :, -1] += 1.0 / nominal.load_ohms
    rhs = g_leg * np.where(bits, nominal.supply_volts, 0.0)[None, :, :]
    flat = _solve_tridiagonal(
        diag.reshape(-1, n), -np.repeat(g_rung, 1 << n, axis=0), rhs.reshape(-1, n)
    )
    return flat[:, -1].reshape(count, 1 << n)


def johnson_noise_volts(r_ohms: float, band_hz: float, temperature_k: float = 300.0) -> float:
    """RMS thermal noise ``sqrt(4 k T R B)`` (Johnson 1928; Nyquist 1928), volts."""
    return math.sqrt(4 * BOLTZMANN * temperature_k * r_ohms * band_hz)


def spice_netlist(
    ladder: Ladder,
    code: int,
    *,
    title: str = "ladderpack R-2R ladder",
    ngspice_control: bool = False,
) -> str:
    """A SPICE netlist of the ladder driven with one code, with an operating-point analysis.

    Node names: ``n<k>`` ladder nodes (``n<N-1>`` is the output), ``p<k>`` pin
    outputs, ``m<k>`` the midpoint of a two-part leg.  The pin drivers are ideal
    sources behind their state's source resistance.  With `ngspice_control` the
    netlist ends in an ngspice ``.control`` block that prints the output voltage.
    """
    n = ladder.bits
    if not 0 <= code < (1 << n):
        raise OptionError(f"must be 0..{(1 << n) - 1}, got {code}", field="code")
    lines = [f"* {title}: {n} bits, code {code}"]
    for k in range(n):
        high = (code >> k) & 1
        rs = ladder.source_high_ohms[k] if high else ladder.source_low_ohms[k]
        lines.append(f"V{k} s{k} 0 DC {float(ladder.supply_volts if high else 0.0)!r}")
        lines.append(f"RS{k} s{k} p{k} {float(max(rs, 1e-6))!r}")
        parts = ladder.legs[k]
        nodes = [f"p{k}"] + [f"m{k}_{j}" for j in range(len(parts) - 1)] + [f"n{k}"]
        for j, r in enumerate(parts):
            lines.append(f"RL{k}_{j} {nodes[j]} {nodes[j + 1]} {float(r)!r}")
    for k, r in enumerate(ladder.rungs):
        lines.append(f"RR{k} n{k} n{k + 1} {float(r)!r}")
    lines.append(f"RT n0 0 {float(ladder.termination_ohms)!r}")
    if ladder.load_ohms is not None:
        lines.append(f"RLOAD n{n - 1} 0 {float(ladder.load_ohms)!r}")
    if ngspice_control:  # batch-mode block printing the output with full precision
        lines += [".control", "set numdgt=15", "op", f"print v(n{n - 1})", ".endc"]
    else:
        lines.append(".op")
    lines += [".end", ""]
    return "\n".join(lines)


class LinearityFigures(TypedDict):
    """The largest linearity errors of one level table, LSB."""

    max_abs_inl_endpoint_lsb: float
    max_abs_inl_best_fit_lsb: float
    max_abs_dnl_lsb: float
    min_dnl_lsb: float
    monotonic: bool


class WorstCase(TypedDict):
    """First-order worst case over the tolerance band, LSB."""

    max_abs_inl_endpoint_lsb: float
    min_dnl_lsb: float
    max_abs_dnl_lsb: float
    monotonic: bool
    monotonic_tolerance: float


class Percentiles(TypedDict):
    """Percentiles and maximum of a Monte Carlo figure."""

    p50: float
    p90: float
    p99: float
    max: float


class MonteCarlo(TypedDict):
    """Spread of the linearity over random resistor draws."""

    trials: int
    worst_trial: int
    max_abs_inl_best_fit_lsb: Percentiles
    max_abs_dnl_lsb: Percentiles
    monotonic_share: float


class DesignReport(TypedDict):
    """What :func:`design_check` found (units in the key names)."""

    bits: int
    r_ohms: float
    tolerance: float
    distribution: str
    source_high_ohms: float
    source_low_ohms: float
    drive_ma: int
    supply_volts: float
    load_ohms: float | None
    lsb_volts: float
    nominal: LinearityFigures
    ideal_sources: LinearityFigures
    worst_case: WorstCase
    monte_carlo: MonteCarlo
    pin_current_max_a: float
    pin_current_ok: bool
    supply_current_max_a: float
    output_ohms_max: float
    johnson_noise_volts: float
    johnson_noise_lsb: float
    settling_tau_s: float
    settling_half_lsb_s: float
    sample_period_s: float
    settles_in_one_sample: bool
    recommended_r_ohms: list[float] | None
    recommended_series: str
    sine_through_levels: dict[str, float]
    r_in_recommended_range: bool


def _summary(volts: np.ndarray) -> LinearityFigures:
    from ladderpack.levels import linearity

    lin = linearity(volts)
    return {
        "max_abs_inl_endpoint_lsb": lin["max_abs_inl_endpoint"],
        "max_abs_inl_best_fit_lsb": lin["max_abs_inl_best_fit"],
        "max_abs_dnl_lsb": lin["max_abs_dnl"],
        "min_dnl_lsb": lin["min_dnl"],
        "monotonic": lin["monotonic"],
    }


def design_check(
    bits: int,
    r_ohms: float = 10_000.0,
    *,
    tolerance: float = 0.01,
    distribution: str = "uniform",
    source_high_ohms: float | None = None,
    source_low_ohms: float | None = None,
    drive_ma: int = 4,
    supply_volts: float = 3.3,
    load_ohms: float | None = None,
    load_farads: float = 20e-12,
    rate_hz: float = 22050.0,
    band_hz: float = 20000.0,
    temperature_k: float = 300.0,
    trials: int = 200,
    seed: int = 0,
    split_legs: bool = False,
    series: str = "E96",
    inl_share_lsb: float = 0.5,
    progress: Callable[[int], None] | None = None,
) -> DesignReport:
    """Check a ladder design: linearity, tolerance spread, pin current, noise, settling, R range.

    `progress`, if given, is called with the number of steps just done (Monte Carlo
    trials and candidate resistor values); :func:`design_steps` gives the total.

    Parameters
    ----------
    bits : int
        Ladder width N.
    r_ohms : float
        Unit resistance R, ohms (legs 2R).
    tolerance : float
        Resistor tolerance as a fraction (0.01 = 1 %).
    distribution : {'uniform', 'normal'}
        Monte Carlo distribution ('normal' takes the tolerance as 3 sigma).
    source_high_ohms, source_low_ohms : float, optional
        Pin source resistance, ohms; default the datasheet bound for `drive_ma`.
    drive_ma : {2, 4, 8, 12}
        GPIO drive strength, mA: sets the default source resistances and the
        current limit each pin is checked against.
    supply_volts : float
        IOVDD, volts.
    load_ohms : float, optional
        Output load, ohms.
    load_farads : float
        Capacitance on the output, farads, for the settling check.
    rate_hz : float
        Sample rate, Hz (settling must fit one sample period).
    band_hz : float
        Audio band for the thermal-noise figure, Hz.
    temperature_k : float
        Temperature for the thermal noise, kelvin.
    trials : int
        Monte Carlo trials.
    seed : int
        Monte Carlo seed.
    split_legs : bool
        Build each 2R from two R.
    series : {'E24', 'E96', 'E192'}
        Preferred-value series for the recommended R range.
    inl_share_lsb : float
        Largest best-fit INL, LSB, that source resistance may cause in a
        recommended R.

    Returns
    -------
    dict
        Plain data, ready for text or JSON output.
    """
    bits = check_bits(bits)
    if drive_ma not in DRIVE_SOURCE_OHMS:
        raise OptionError(f"must be one of 2, 4, 8, 12 mA; got {drive_ma!r}", field="drive_ma")
    if not (math.isfinite(tolerance) and 0 <= tolerance < 0.5):
        raise OptionError(f"must be a fraction 0..0.5, got {tolerance!r}", field="tolerance")
    if isinstance(trials, bool) or not isinstance(trials, int) or trials < 1:
        raise OptionError(f"must be a whole number >= 1, got {trials!r}", field="trials")
    bound_high, bound_low = DRIVE_SOURCE_OHMS[drive_ma]
    rs_high = bound_high if source_high_ohms is None else source_high_ohms
    rs_low = bound_low if source_low_ohms is None else source_low_ohms

    def build(r: float, high: float, low: float) -> Ladder:
        return ideal_ladder(
            bits,
            r,
            supply_volts=supply_volts,
            source_high_ohms=high,
            source_low_ohms=low,
            load_ohms=load_ohms,
            split_legs=split_legs,
        )

    nominal = build(r_ohms, rs_high, rs_low)
    volts = nominal.levels()
    lsb = (volts[-1] - volts[0]) / ((1 << bits) - 1)
    rng = np.random.default_rng(seed)
    mc = []
    for lo in range(0, trials, MC_BATCH):
        count = min(MC_BATCH, trials - lo)
        for v in _perturbed_levels(nominal, rng, count, tolerance, distribution):
            mc.append(_summary(v))
        if progress is not None:
            progress(count)

    def pct(key: str) -> Percentiles:
        vals = np.array([float(m[key]) for m in mc])  # type: ignore[literal-required]
        p50, p90, p99 = (float(np.percentile(vals, q)) for q in (50, 90, 99))
        return {"p50": p50, "p90": p90, "p99": p99, "max": float(vals.max())}

    # First-order worst case over tolerance: every resistor pushed to the end of its band
    # that increases the error, from finite-difference sensitivities of the levels.
    worst = _worst_case(nominal, tolerance)
    currents = nominal.pin_currents()
    r_out = nominal.output_ohms()
    noise = johnson_noise_volts(float(r_out.max()), band_hz, temperature_k)
    tau = float(r_out.max()) * load_farads
    settle = tau * math.log(2 ** (bits + 1))  # full-scale step to within 1/2 LSB
    # The recommended range: the source resistance's INL share and the pin current only
    # get better as R grows (both go as 1/R), the settling time and the thermal noise only
    # get worse (both grow with the output resistance, about R). So the values that pass
    # form one run of the series, found by two bisections instead of a full scan.
    values = e_series(series)
    settle_factor = load_farads * math.log(2 ** (bits + 1))

    def low_ok(r: float) -> bool:
        lad = build(r, rs_high, rs_low)
        lin = _summary(lad.levels())
        return (
            lin["max_abs_inl_best_fit_lsb"] <= inl_share_lsb
            and float(np.max(np.abs(lad.pin_currents()))) <= drive_ma * 1e-3
        )

    def high_ok(r: float) -> bool:
        r_max = float(build(r, rs_high, rs_low).output_ohms().max())
        return (
            r_max * settle_factor <= 1.0 / rate_hz
            and johnson_noise_volts(r_max, band_hz, temperature_k) <= 0.1 * lsb
        )

    budget = scan_steps(series)

    def first_true(pred: Callable[[float], bool], want: bool) -> int:
        nonlocal budget
        lo, hi = 0, len(values)
        while lo < hi:
            mid = (lo + hi) // 2
            if progress is not None:
                progress(1)
            budget -= 1
            if pred(values[mid]) == want:
                hi = mid
            else:
                lo = mid + 1
        return lo

    first = first_true(low_ok, True)  # the smallest R passing INL and current
    past = first_true(high_ok, False)  # the first R too slow or too noisy
    if progress is not None and budget > 0:
        progress(budget)
    recommended = values[first:past]
    sine = sine_through_levels(volts)
    return {
        "bits": bits,
        "r_ohms": r_ohms,
        "sine_through_levels": sine,
        "r_in_recommended_range": bool(
            recommended and min(recommended) <= r_ohms <= max(recommended)
        ),
        "tolerance": tolerance,
        "distribution": distribution,
        "source_high_ohms": rs_high,
        "source_low_ohms": rs_low,
        "drive_ma": drive_ma,
        "supply_volts": supply_volts,
        "load_ohms": load_ohms,
        "lsb_volts": float(lsb),
        "nominal": _summary(volts),
        "ideal_sources": _summary(build(r_ohms, 0.0, 0.0).levels()),
        "worst_case": worst,
        "monte_carlo": {
            "trials": trials,
            "worst_trial": int(np.argmax([float(m["max_abs_inl_best_fit_lsb"]) for m in mc]))
            if mc
            else 0,
            "max_abs_inl_best_fit_lsb": pct("max_abs_inl_best_fit_lsb"),
            "max_abs_dnl_lsb": pct("max_abs_dnl_lsb"),
            "monotonic_share": float(np.mean([bool(m["monotonic"]) for m in mc])),
        },
        "pin_current_max_a": float(np.max(np.abs(currents))),
        "pin_current_ok": bool(np.max(np.abs(currents)) <= drive_ma * 1e-3),
        "supply_current_max_a": float(np.max(np.sum(np.clip(currents, 0, None), axis=1))),
        "output_ohms_max": float(r_out.max()),
        "johnson_noise_volts": noise,
        "johnson_noise_lsb": noise / lsb,
        "settling_tau_s": tau,
        "settling_half_lsb_s": settle,
        "sample_period_s": 1.0 / rate_hz,
        "settles_in_one_sample": settle <= 1.0 / rate_hz,
        "recommended_r_ohms": ([min(recommended), max(recommended)] if recommended else None),
        "recommended_series": series,
    }


def scan_steps(series: str = "E96") -> int:
    """Steps of the recommended-range search: two bisections over the series."""
    return 2 * len(e_series(series)).bit_length()


def design_steps(trials: int, series: str = "E96") -> int:
    """Steps :func:`design_check` reports to its `progress` callback."""
    return trials + scan_steps(series)


def monte_carlo_trial(
    nominal: Ladder, *, seed: int, tolerance: float, distribution: str, trial: int
) -> Ladder:
    """Trial number `trial` (0-based) of :func:`design_check`'s Monte Carlo run.

    Rebuilt from the same seed, so its levels can be written as a LevelSet.
    """
    rng = np.random.default_rng(seed)
    lad = nominal
    for _ in range(trial + 1):
        lad = perturbed(nominal, rng, tolerance=tolerance, distribution=distribution)
    return lad


def sine_through_levels(volts: np.ndarray, *, level_dbfs: float = -0.5) -> dict[str, float]:
    """SINAD and THD of a sine played through a level table, and of an ideal ladder.

    A coherent sine (67 cycles in 4096 samples, IEEE Std 1241 practice) at `level_dbfs`
    is rounded to the N-bit codes, given each code's level, and analysed with
    :func:`ladderpack.measure.analyse`; the same codes through ideal levels give the
    reference, so the difference is what the ladder's errors cost.

    Parameters
    ----------
    volts : numpy.ndarray
        Level of each code (2**N values), volts.
    level_dbfs : float
        Peak of the sine, dBFS.
    """
    from ladderpack.measure import analyse

    count = int(np.asarray(volts).size)
    bits = count.bit_length() - 1
    n, cycles = 4096, 67
    half = 1 << (bits - 1)
    x = 10 ** (level_dbfs / 20) * np.sin(2 * np.pi * cycles * np.arange(n) / n)
    codes = np.clip(np.floor(x * half + half + 0.5), 0, count - 1).astype(np.int64)
    v = np.asarray(volts, dtype=np.float64)
    real = analyse(v[codes], float(n), freq_hz=float(cycles), full_scale=(v[-1] - v[0]) / 2)
    ideal = analyse(
        codes.astype(np.float64), float(n), freq_hz=float(cycles), full_scale=(count - 1) / 2
    )
    return {
        "level_dbfs": level_dbfs,
        "sinad_db": real["sinad_db"],
        "thd_db": real["thd_db"],
        "ideal_sinad_db": ideal["sinad_db"],
        "ideal_thd_db": ideal["thd_db"],
    }


def _worst_case(ladder: Ladder, tolerance: float) -> WorstCase:
    """First-order worst case of INL and DNL over the resistor tolerance band.

    The levels are linearised around nominal (finite differences per resistor), and
    for each code each resistor is pushed to whichever end of its band makes that
    code's endpoint-INL (and each step's DNL) worst; the two signs are taken
    separately.
    """
    base = ladder.levels()
    n = ladder.bits
    lsb = (base[-1] - base[0]) / ((1 << n) - 1)
    k = np.arange(1 << n)

    def inl(v: np.ndarray) -> np.ndarray:
        lsb_v = (v[-1] - v[0]) / ((1 << n) - 1)
        return (v - (v[0] + k * lsb_v)) / lsb_v

    inl0 = inl(base)
    dnl0 = np.diff(base) / lsb - 1
    h = 1e-6
    d_inl, d_dnl = [], []
    for which in range(2 * n):  # legs (first part) and rungs/termination
        if which < n:
            legs = list(ladder.legs)
            legs[which] = (legs[which][0] * (1 + h), *legs[which][1:])
            lad = replace(ladder, legs=tuple(legs))
        elif which < 2 * n - 1:
            rungs = list(ladder.rungs)
            rungs[which - n] *= 1 + h
            lad = replace(ladder, rungs=tuple(rungs))
        else:
            lad = replace(ladder, termination_ohms=ladder.termination_ohms * (1 + h))
        v = lad.levels()
        d_inl.append((inl(v) - inl0) / h)
        d_dnl.append((np.diff(v) / lsb - 1 - dnl0) / h)
    si = np.abs(np.array(d_inl)).sum(axis=0) * tolerance
    sd1 = np.abs(np.array(d_dnl)).sum(axis=0)  # worst DNL change per unit tolerance
    sd = sd1 * tolerance
    # The widest tolerance whose worst case keeps every step above -1 LSB (monotonic):
    # the worst-case DNL is linear in the tolerance, dnl0 - sd1 x tol.
    if np.any(dnl0 < -1.0):
        mono_tol = 0.0
    else:
        with np.errstate(divide="ignore"):
            mono_tol = float(np.min(np.where(sd1 > 0, (dnl0 + 1.0) / sd1, np.inf)))
    return {
        "monotonic_tolerance": mono_tol,
        "max_abs_inl_endpoint_lsb": float(np.max(np.abs(inl0) + si)),
        "min_dnl_lsb": float(np.min(dnl0 - sd)),
        "max_abs_dnl_lsb": float(np.max(np.abs(dnl0) + sd)),
        "monotonic": bool(np.min(dnl0 - sd) >= -1.0),
    }


@dataclass(frozen=True)
class LadderDesign:
    """What ``ladderpack ladder`` reports of a design, and the files it may write.

    Attributes
    ----------
    report : DesignReport
        :func:`design_check`'s report.
    netlist : str, optional
        The nominal ladder's SPICE netlist, when asked for (``spec.spice``).
    levels : LevelSet, optional
        The nominal ladder's modelled levels (``spec.levels_out``).
    trial_levels : LevelSet, optional
        The levels of one Monte Carlo trial (``spec.mc_levels_out``): the one with the
        largest best-fit INL, or ``spec.mc_trial``.
    """

    report: DesignReport
    netlist: str | None = None
    levels: Any = None
    trial_levels: Any = None


def design_ladder(
    spec: LadderDesignSpec, *, progress: Callable[[int], None] | None = None
) -> LadderDesign:
    """Check a ladder design and make what the spec asks for besides the report.

    Parameters
    ----------
    spec : LadderDesignSpec
        The parts, the drive, the load, the checks' settings and what to make.
    progress : callable, optional
        Called with the work done since the last call (:func:`design_steps` in all).

    Examples
    --------
    >>> d = design_ladder(LadderDesignSpec(bits=6, trials=10))
    >>> d.report["nominal"]["monotonic"], d.levels is None
    (True, True)
    """
    from ladderpack.levels import LevelSet

    tol = spec.tolerance_pct / 100
    report = design_check(
        spec.bits,
        spec.r_ohms,
        tolerance=tol,
        distribution=spec.distribution,
        source_high_ohms=spec.source_high_ohms,
        source_low_ohms=spec.source_low_ohms,
        drive_ma=spec.drive_ma,
        supply_volts=spec.supply_volts,
        load_ohms=spec.load_ohms,
        load_farads=spec.load_pf * 1e-12,
        rate_hz=spec.rate_hz,
        band_hz=spec.band_hz,
        temperature_k=spec.temperature_k,
        trials=spec.trials,
        seed=spec.seed,
        split_legs=spec.split_legs,
        series=spec.series,
        inl_share_lsb=spec.inl_share_lsb,
        progress=progress,
    )
    model = ideal_ladder(
        spec.bits,
        spec.r_ohms,
        supply_volts=spec.supply_volts,
        source_high_ohms=report["source_high_ohms"],
        source_low_ohms=report["source_low_ohms"],
        load_ohms=spec.load_ohms,
        split_legs=spec.split_legs,
    )
    span = spec.supply_volts * ((1 << spec.bits) - 1) / (1 << spec.bits)
    netlist = levels = trial = None
    if spec.spice:
        code = (1 << (spec.bits - 1)) if spec.spice_code is None else spec.spice_code
        netlist = spice_netlist(model, code)
    if spec.levels_out:
        levels = LevelSet(
            spec.bits,
            model.levels(),
            "model",
            {
                "r_ohms": spec.r_ohms,
                "supply_volts": spec.supply_volts,
                "source_high_ohms": report["source_high_ohms"],
                "source_low_ohms": report["source_low_ohms"],
                "load_ohms": spec.load_ohms,
                "ideal_span_volts": span,
            },
        )
    if spec.mc_levels_out:
        k = report["monte_carlo"]["worst_trial"] if spec.mc_trial is None else spec.mc_trial
        lad = monte_carlo_trial(
            model, seed=spec.seed, tolerance=tol, distribution=spec.distribution, trial=k
        )
        trial = LevelSet(
            spec.bits,
            lad.levels(),
            "model",
            {
                "r_ohms": spec.r_ohms,
                "tolerance": tol,
                "distribution": spec.distribution,
                "seed": spec.seed,
                "monte_carlo_trial": k,
                "supply_volts": spec.supply_volts,
                "ideal_span_volts": span,
            },
        )
    return LadderDesign(report, netlist, levels, trial)
