"""Figures as PNG bytes (matplotlib, Agg): curves of several wavelengths, predictions and the report's panels.

Every function returns the encoded PNG so callers can write it to a file or embed it in a page; nothing here
reads or writes files.
"""

from __future__ import annotations

import io

import numpy as np

# One palette for every figure of the project's pages: ink for data, accents for fits and marks.
INK = "#1f3b4d"
ACCENT = "#c2571a"
MUTED = "#8a96a0"
SERIES = ("#1f6f8b", "#c2571a", "#5b8c3a", "#7a4f9a", "#b8860b", "#3c3c3c")
DPI = 110


def _plt():
    """pyplot on the Agg backend, imported on first use: it costs a third of a second that commands without
    figures should not pay."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    return plt


def _png(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    _plt().close(fig)
    return buf.getvalue()


def _axes(width_in: float = 7.0, height_in: float = 4.2, ncols: int = 1):
    fig, axes = _plt().subplots(1, ncols, figsize=(width_in, height_in), dpi=DPI, squeeze=False)
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


def curve_figure(gray, phase, std, smooth=None, truth=None, label: str = "measured", band=None) -> bytes:
    """The calibration curve with 2-sigma error bars, its smooth monotone fit (if any), an adaptive sweep's model
    ``band`` = (gray, phase, std) drawn as its mean and 2-sigma band (if any) and (simulator) the truth."""
    fig, (ax,) = _axes()
    if band is not None:
        g, mean, sd = (np.asarray(a, float) for a in band)
        # the band is a few mrad wide on a curve of several rad: drawn at 50x so that it can be seen
        ax.fill_between(g, (mean - 100 * sd) / np.pi, (mean + 100 * sd) / np.pi, color=ACCENT, alpha=0.25, lw=0,
                        label="model ±2σ (band drawn 50× wide)")
        ax.plot(g, mean / np.pi, "-", lw=1.0, color=ACCENT, label="model")
    ax.errorbar(gray, phase / np.pi, yerr=2 * std / np.pi, fmt="o", ms=2.2, lw=0.7, capsize=0, color=INK,
                label=f"{label} (±2σ)")
    if smooth is not None:
        ax.plot(gray, smooth / np.pi, "-", lw=1.1, color=ACCENT, label="smooth monotone fit")
    if truth is not None:
        ax.plot(truth[0], truth[1] / np.pi, "--", lw=0.9, color=MUTED, label="simulator truth")
    ax.axhline(2, color=MUTED, lw=0.6, ls=":")
    ax.set_xlabel("gray level")
    ax.set_ylabel("phase (π rad)")
    ax.legend(fontsize=8, loc="upper left")
    fig.tight_layout()
    return _png(fig)


def residual_figure(gray, residual, std) -> bytes:
    """Measured minus smooth fit (mrad) with the measurement's 2-sigma band."""
    fig, (ax,) = _axes(7.0, 3.2)
    ax.fill_between(gray, -2e3 * std, 2e3 * std, color=MUTED, alpha=0.3, lw=0, label="±2σ of the measurement")
    ax.plot(gray, 1e3 * residual, ".", ms=3, color=INK, label="measured − fit")
    ax.axhline(0, color=ACCENT, lw=0.8)
    ax.set_xlabel("gray level")
    ax.set_ylabel("residual (mrad)")
    ax.legend(fontsize=8, loc="upper right")
    fig.tight_layout()
    return _png(fig)


def table_figure(target_rad, gray, measured=None) -> bytes:
    """The lookup table: gray level for each target phase; beside it the measured phase through the table."""
    fig, axes = _axes(11.0 if measured is not None else 7.0, 3.8, 2 if measured is not None else 1)
    axes[0].step(target_rad / np.pi, gray, where="post", lw=1.0, color=INK)
    axes[0].set_xlabel("target phase (π rad)")
    axes[0].set_ylabel("gray level")
    axes[0].set_title("lookup table", fontsize=10)
    if measured is not None:
        axes[1].plot(target_rad / np.pi, 1e3 * measured, ".", ms=2.5, color=ACCENT)
        axes[1].set_xlabel("target phase (π rad)")
        axes[1].set_ylabel("phase error (mrad)")
        axes[1].set_title("measured curve through the table", fontsize=10)
    fig.tight_layout()
    return _png(fig)


def tuning_figure(high_gray, contrast, low: int, chosen: int) -> bytes:
    """Fringe contrast against the grating's high gray (low gray fixed), the chosen pair marked."""
    order = np.argsort(high_gray)
    fig, (ax,) = _axes(7.0, 3.4)
    ax.plot(np.asarray(high_gray)[order], np.asarray(contrast)[order], "o-", ms=3, lw=0.8, color=INK)
    ax.axvline(chosen, color=ACCENT, lw=1.0, label=f"chosen pair {low}/{chosen}")
    ax.set_xlabel(f"grating high gray (low gray {low})")
    ax.set_ylabel("fringe contrast")
    ax.legend(fontsize=8)
    fig.tight_layout()
    return _png(fig)


def frame_figure(image, band_xywh: tuple[int, int, int, int], caption: str) -> bytes:
    """A saved fringe crop (camera counts) with the analysed band outlined."""
    from matplotlib.patches import Rectangle

    h, w = image.shape
    fig, ax = _plt().subplots(figsize=(6.0, max(2.0, 5.2 * h / w)), dpi=DPI)
    ax.imshow(image, cmap="gray", interpolation="nearest")
    x, y, bw, bh = band_xywh
    ax.add_patch(Rectangle((x - 0.5, y - 0.5), bw, bh, fill=False, ec=ACCENT, lw=1.4))
    ax.set_title(caption, fontsize=9)
    ax.set_xlabel("camera x (px, in the saved crop)")
    ax.set_ylabel("camera y (px)")
    fig.tight_layout()
    return _png(fig)


def drift_figure(t_s, phase_rad, model_t_s=None, model_rad=None) -> bytes:
    """Phase of the reference gray at each visit (mrad, relative to the first) and the fitted drift."""
    fig, (ax,) = _axes(7.0, 3.2)
    ax.plot(t_s, 1e3 * np.asarray(phase_rad), "o", ms=3, color=INK, label="reference visits")
    if model_t_s is not None:
        ax.plot(model_t_s, 1e3 * np.asarray(model_rad), "-", lw=1.0, color=ACCENT, label="drift model")
    ax.set_xlabel("time (s)")
    ax.set_ylabel("reference phase (mrad)")
    ax.legend(fontsize=8)
    fig.tight_layout()
    return _png(fig)


def logged_figure(series: list[tuple[str, np.ndarray, np.ndarray]]) -> bytes:
    """Logged quantities against time, one panel each: (label with unit, t_s, value)."""
    fig, axes = _plt().subplots(len(series), 1, figsize=(7.0, 2.4 * len(series)), dpi=DPI, sharex=True,
                                squeeze=False)
    for ax, (label, t, v) in zip(axes[:, 0], series):
        ax.plot(t, v, "-", lw=0.9, color=INK)
        ax.set_ylabel(label)
        ax.grid(alpha=0.25, lw=0.6)
    axes[-1, 0].set_xlabel("time (s)")
    fig.tight_layout()
    return _png(fig)


def flicker_figure(t_s, phase_rad, freqs_hz, spectrum_rad, dominant_hz: float) -> bytes:
    """The held gray's fringe phase against time (mrad about its mean) and its amplitude spectrum."""
    fig, axes = _plt().subplots(2, 1, figsize=(7, 5.5), dpi=DPI)
    a, b = axes
    unwrapped = np.unwrap(phase_rad)
    a.plot((t_s - t_s[0]) * 1e3, (unwrapped - np.mean(unwrapped)) * 1e3, lw=0.7, color=INK)
    a.set_xlabel("time (ms)")
    a.set_ylabel("fringe phase (mrad)")
    b.semilogy(freqs_hz[1:], spectrum_rad[1:] * 1e3 + 1e-6, lw=0.7, color=INK)
    b.axvline(dominant_hz, color=ACCENT, lw=0.8, label=f"{dominant_hz:.1f} Hz")
    b.set_xlabel("frequency (Hz)")
    b.set_ylabel("amplitude (mrad)")
    b.legend(fontsize=8)
    for ax in axes:
        ax.grid(alpha=0.25, lw=0.6)
    fig.tight_layout()
    return _png(fig)


def map_figure(ranges_rad: np.ndarray, first_2pi: np.ndarray) -> bytes:
    """Per-tile phase range (pi rad) and first gray reaching 2 pi (NaN where never), as rows x columns maps."""
    fig, axes = _plt().subplots(1, 2, figsize=(9, 3.8), dpi=DPI)
    for ax, data, title, unit in ((axes[0], ranges_rad / np.pi, "phase range", "π rad"),
                                  (axes[1], first_2pi, "first gray reaching 2π", "gray")):
        im = ax.imshow(data, cmap="viridis")
        ax.set_title(title)
        ax.set_xlabel("tile column")
        ax.set_ylabel("tile row")
        for (r, c), v in np.ndenumerate(data):
            ax.text(c, r, "—" if np.isnan(v) else f"{v:.3g}", ha="center", va="center", color="w", fontsize=8)
        fig.colorbar(im, ax=ax, label=unit, shrink=0.8)
    fig.tight_layout()
    return _png(fig)
