"""Phase flicker of a held gray level from a time series of fringe phases."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class FlickerFigures:
    """Flicker of the fringe phase (rad) about its slow trend, and its spectrum.

    ``spectrum_rad`` is the amplitude spectrum (rad, one-sided: a sine of amplitude a shows as a at its frequency);
    ``above_nyquist`` warns that the frame rate cannot resolve the ripple seen (its true frequency may alias).
    """

    rms_rad: float
    peak_to_peak_rad: float
    dominant_hz: float
    frame_rate_hz: float
    bin_hz: float
    freqs_hz: np.ndarray
    spectrum_rad: np.ndarray
    above_nyquist: bool


def flicker_figures(t_s, phase_rad, expected_hz: float | None = None) -> FlickerFigures:
    """RMS and peak-to-peak phase flicker about a linear trend, and the dominant frequency of its spectrum.

    Frames must be evenly spaced in time (gaps from dropped frames are filled by linear interpolation). The
    dominant frequency is the largest spectral line, refined by a parabola through its neighbours (a fraction of a
    bin). ``expected_hz`` (a known drive frequency) above half the frame rate sets ``above_nyquist``.
    """
    t = np.asarray(t_s, float)
    phase = np.unwrap(np.asarray(phase_rad, float))
    if t.size < 8 or t.size != phase.size:
        raise ValueError(f"frames: expected at least 8 timestamped phases, got {t.size}")
    order = np.argsort(t)
    t, phase = t[order], phase[order]
    dt = float(np.median(np.diff(t)))
    if dt <= 0:
        raise ValueError("frames: timestamps must increase")
    grid = t[0] + dt * np.arange(int(round((t[-1] - t[0]) / dt)) + 1)
    series = np.interp(grid, t, phase)
    series = series - np.polyval(np.polyfit(grid - grid[0], series, 1), grid - grid[0])
    n = series.size
    window = np.hanning(n)
    spectrum = 2 * np.abs(np.fft.rfft(series * window)) / window.sum()
    freqs = np.fft.rfftfreq(n, dt)
    k = int(np.argmax(spectrum[1:])) + 1
    shift = 0.0
    if 1 <= k < spectrum.size - 1:
        a, b, c = np.log(spectrum[k - 1:k + 2] + 1e-30)
        shift = 0.5 * (a - c) / (a - 2 * b + c) if a - 2 * b + c < 0 else 0.0
    frame_rate = 1.0 / dt
    dominant = (k + shift) * (freqs[1] - freqs[0])
    aliased = expected_hz is not None and expected_hz > frame_rate / 2
    return FlickerFigures(float(np.sqrt(np.mean(series**2))), float(np.ptp(series)), float(dominant), frame_rate,
                          float(freqs[1] - freqs[0]), freqs, spectrum, bool(aliased))
