"""Figures as PNG bytes (matplotlib, Agg): curves of several wavelengths, predictions and the report's panels.

Every function returns the encoded PNG so callers can write it to a file or embed it in a page; nothing here
reads or writes files.
"""

from __future__ import annotations

import io

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402  (the backend must be chosen first)
import numpy as np  # noqa: E402

# One palette for every figure of the project's pages: ink for data, accents for fits and marks.
INK = "#1f3b4d"
ACCENT = "#c2571a"
MUTED = "#8a96a0"
SERIES = ("#1f6f8b", "#c2571a", "#5b8c3a", "#7a4f9a", "#b8860b", "#3c3c3c")
DPI = 110


def _png(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    plt.close(fig)
    return buf.getvalue()


def _axes(width_in: float = 7.0, height_in: float = 4.2, ncols: int = 1):
    fig, axes = plt.subplots(1, ncols, figsize=(width_in, height_in), dpi=DPI, squeeze=False)
    for ax in axes[0]:
        ax.grid(alpha=0.25, lw=0.6)
        for side in ("top", "right"):
            ax.spines[side].set_visible(False)
    return fig, axes[0]


def wavelengths_figure(curves: list[tuple[str, float | None, np.ndarray, np.ndarray]],
                       shapes: list[tuple[np.ndarray, np.ndarray]] | None) -> bytes:
    """Measured curves (label, nm, gray, phase rad) overlaid; beside them, each divided by its scale ratio."""
    fig, axes = _axes(11.0 if shapes else 7.0, 4.2, 2 if shapes else 1)
    for i, (label, nm, gray, phase) in enumerate(curves):
        name = f"{nm:g} nm" if nm else label
        axes[0].plot(gray, phase / np.pi, ".-", ms=2.5, lw=0.8, color=SERIES[i % len(SERIES)], label=name)
    axes[0].axhline(2, color=MUTED, lw=0.8, ls="--")
    axes[0].set_xlabel("gray level")
    axes[0].set_ylabel("phase (π rad)")
    axes[0].set_title("measured curves", fontsize=10)
    axes[0].legend(fontsize=8)
    if shapes:
        for i, ((label, nm, _, _), (gray, phase)) in enumerate(zip(curves, shapes)):
            axes[1].plot(gray, phase / np.pi, "-", lw=1.0, color=SERIES[i % len(SERIES)],
                         label=f"{nm:g} nm" if nm else label)
        axes[1].set_xlabel("gray level")
        axes[1].set_ylabel(f"phase at {curves[0][1]:g} nm (π rad)")
        axes[1].set_title("scaled to the first wavelength: one shape", fontsize=10)
        axes[1].legend(fontsize=8)
    fig.tight_layout()
    return _png(fig)


def prediction_figure(sources: list[tuple[float, np.ndarray, np.ndarray]], wavelength_nm: float, gray: np.ndarray,
                      phase: np.ndarray, std: np.ndarray) -> bytes:
    """The predicted curve with a 2-sigma band, among the measured curves it came from (nm, gray, phase rad)."""
    fig, (ax,) = _axes()
    for i, (nm, g, p) in enumerate(sources):
        ax.plot(g, p / np.pi, "-", lw=0.9, color=SERIES[(i + 1) % len(SERIES)], label=f"measured {nm:g} nm")
    ax.fill_between(gray, (phase - 2 * std) / np.pi, (phase + 2 * std) / np.pi, color=ACCENT, alpha=0.25, lw=0,
                    label="±2σ")
    ax.plot(gray, phase / np.pi, "-", lw=1.4, color=ACCENT, label=f"predicted {wavelength_nm:g} nm")
    ax.axhline(2, color=MUTED, lw=0.8, ls="--")
    ax.set_xlabel("gray level")
    ax.set_ylabel("phase (π rad)")
    ax.legend(fontsize=8)
    fig.tight_layout()
    return _png(fig)
