"""PNG plots (optional 'plot' extra: matplotlib with the Agg backend)."""

from __future__ import annotations

import io
from collections.abc import Mapping
from typing import Any

import numpy as np

from ladderpack.errors import LadderpackError

__all__ = ["levels_png", "ntf_png", "spectrum_png"]


def _pyplot() -> Any:
    try:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:
        raise LadderpackError(
            "plots need matplotlib: pip install 'ladderpack[plot]'", field="plot"
        ) from None
    return plt


def _png(fig: Any) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110, metadata={"Software": None})
    _pyplot().close(fig)
    return buf.getvalue()


def spectrum_png(
    y: np.ndarray, rate_hz: float, analysis: Mapping[str, Any], *, full_scale: float = 1.0
) -> bytes:
    """Spectrum (Hann window, dBFS) with the fundamental and harmonics marked."""
    plt = _pyplot()
    n = y.size
    win = np.hanning(n)
    mag = np.abs(np.fft.rfft((y - np.mean(y)) * win)) * 2 / np.sum(win) / full_scale
    f = np.fft.rfftfreq(n, 1 / rate_hz)
    fig, ax = plt.subplots(figsize=(8, 4.5))
    ax.plot(f, 20 * np.log10(mag + 1e-12), lw=0.7)
    f0 = analysis["freq_hz"]
    ax.axvline(f0, color="tab:green", ls="--", lw=0.8, label=f"fundamental {f0:.1f} Hz")
    for k, dbc in enumerate(analysis["harmonics_dbc"], start=2):
        fk = (k * f0) % rate_hz
        fk = rate_hz - fk if fk > rate_hz / 2 else fk
        ax.plot([fk], [analysis["amplitude_dbfs"] + dbc], "rv", ms=5)
        ax.annotate(
            str(k),
            (fk, analysis["amplitude_dbfs"] + dbc),
            textcoords="offset points",
            xytext=(0, 6),
            ha="center",
            fontsize=7,
        )
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("level (dBFS)")
    ax.set_title(
        f"SINAD {analysis['sinad_db']:.1f} dB, THD {analysis['thd_db']:.1f} dB, "
        f"ENOB {analysis['enob_bits']:.2f} bits"
    )
    ax.set_ylim(max(-200, float(np.min(20 * np.log10(mag + 1e-12)))), 5)
    ax.grid(alpha=0.3)
    ax.legend(loc="upper right", fontsize=8)
    fig.tight_layout()
    return _png(fig)


def levels_png(volts: np.ndarray, title: str = "ladder levels") -> bytes:
    """Transfer curve, INL and DNL of a level table, in three panels."""
    from ladderpack.levels import linearity

    plt = _pyplot()
    lin = linearity(volts)
    codes = np.arange(volts.size)
    fig, axes = plt.subplots(3, 1, figsize=(8, 8), sharex=True)
    axes[0].plot(codes, volts, lw=0.8)
    axes[0].set_ylabel("output (V)")
    axes[0].set_title(title)
    axes[1].plot(codes, lin["inl_best_fit"], lw=0.8, label="best fit")
    axes[1].plot(codes, lin["inl_endpoint"], lw=0.8, label="endpoint")
    axes[1].set_ylabel("INL (LSB)")
    axes[1].legend(fontsize=8)
    axes[2].plot(codes[:-1], lin["dnl"], lw=0.8)
    axes[2].axhline(-1, color="tab:red", ls="--", lw=0.8)
    axes[2].set_ylabel("DNL (LSB)")
    axes[2].set_xlabel("code")
    for ax in axes:
        ax.grid(alpha=0.3)
    fig.tight_layout()
    return _png(fig)


def ntf_png(shaper: Any, rate_hz: float, *, band_hz: float | None = None) -> bytes:
    """Noise transfer |NTF(f)| of a shaping filter, dB."""
    plt = _pyplot()
    f = np.linspace(1.0, rate_hz / 2, 2048)
    mag = 20 * np.log10(np.abs(shaper.response(f, rate_hz)) + 1e-12)
    fig, ax = plt.subplots(figsize=(8, 4.5))
    ax.plot(f, mag, lw=0.9)
    ax.axhline(0, color="grey", lw=0.6)
    if band_hz:
        ax.axvline(band_hz, color="tab:orange", ls="--", lw=0.8, label=f"band {band_hz:g} Hz")
        ax.legend(fontsize=8)
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("|NTF| (dB)")
    ax.set_title(f"noise transfer: {shaper.name} at {rate_hz:g} Hz")
    ax.grid(alpha=0.3)
    fig.tight_layout()
    return _png(fig)
