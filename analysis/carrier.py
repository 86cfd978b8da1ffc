"""Fringe carrier: the spatial frequency of straight fringes, from the peak of an image's 2-D spectrum."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

HARMONIC_LEVEL = 0.1  # a sub-harmonic peak this strong (in power) is the true carrier, see find_carrier


class NoFringesError(ValueError):
    """An image holds no usable fringes; the message says what was measured and what was expected."""


@dataclass(frozen=True)
class Carrier:
    """Fringe carrier as a spatial frequency (cycles/px) along image x (columns) and y (rows).

    ``sharpness`` is the fraction of the searched spectral power within two bins of the peak (0 to 1): near 1
    for one clean band of straight fringes, low for chirped, curved or mixed fringes.
    """

    fx: float
    fy: float
    sharpness: float = 1.0

    @property
    def frequency(self) -> float:
        """Spatial frequency (cycles/px)."""
        return math.hypot(self.fx, self.fy)

    @property
    def period_px(self) -> float:
        """Fringe period (px) measured across the fringes."""
        return 1.0 / self.frequency

    @property
    def angle_deg(self) -> float:
        """Direction of the carrier from +x (deg, in (-90, 90]); 0 for vertical fringes."""
        return math.degrees(math.atan2(self.fy, self.fx))


def find_carrier(image: np.ndarray, min_period_px: float = 2.5, max_period_px: float | None = None) -> Carrier:
    """Carrier of the strongest straight fringes in ``image`` (any 2-D array of counts).

    The peak of the Hann-windowed power spectrum is located to a fraction of a bin by fitting a parabola to the
    log power along each axis (exact for a Gaussian peak, close for the Hann window's main lobe). Periods
    outside [min_period_px, max_period_px] are not searched; the default maximum is a quarter of the shorter
    side, so at least four fringes are needed. Where the grating side of a split-screen frame is in view its
    +1/-1 orders beat at twice the carrier; when the strongest peak has a sub-harmonic carrying at least
    HARMONIC_LEVEL of its power, that sub-harmonic is the carrier.
    """
    img = np.asarray(image, dtype=np.float64)
    if img.ndim != 2 or min(img.shape) < 8:
        raise ValueError(f"image: expected a 2-D array of at least 8x8 px, got shape {img.shape}")
    h, w = img.shape
    max_period_px = max_period_px or min(h, w) / 4
    window = np.hanning(h)[:, None] * np.hanning(w)[None, :]
    power = np.abs(np.fft.rfft2((img - img.mean()) * window)) ** 2
    fy = np.fft.fftfreq(h)[:, None]
    fx = np.fft.rfftfreq(w)[None, :]
    f = np.hypot(fx, fy)
    search = (f >= 1.0 / max_period_px) & (f <= 1.0 / min_period_px)
    # The rfft half plane holds fx = 0 twice (fy and -fy); keep one copy so the sharpness is not double counted.
    search &= ~((fx == 0) & (fy < 0))
    masked = np.where(search, power, 0.0)
    if not masked.any():
        raise NoFringesError("no fringes: the image spectrum is empty at fringe periods "
                             f"{min_period_px:g} to {max_period_px:g} px")
    iy, ix = np.unravel_index(np.argmax(masked), masked.shape)
    half = _near_peak(masked, fy[iy, 0] / 2, fx[0, ix] / 2, h, w)
    if half is not None and masked[half] >= HARMONIC_LEVEL * masked[iy, ix]:
        iy, ix = half
    dy = _log_parabola_offset(power[(iy - 1) % h, ix], power[iy, ix], power[(iy + 1) % h, ix])
    if 0 < ix < power.shape[1] - 1:
        dx = _log_parabola_offset(power[iy, ix - 1], power[iy, ix], power[iy, ix + 1])
    else:
        dx = 0.0
    cfx = (ix + dx) / w
    cfy = fy[iy, 0] + dy / h
    ry, rx = np.ogrid[:h, :power.shape[1]]
    dist_y = np.minimum(np.abs(ry - iy), h - np.abs(ry - iy))
    near = (dist_y <= 2) & (np.abs(rx - ix) <= 2)
    sharpness = float(masked[near].sum() / masked.sum())
    if cfx < 0 or (cfx == 0 and cfy < 0):
        cfx, cfy = -cfx, -cfy
    return Carrier(float(cfx), float(cfy), sharpness)


def _near_peak(power: np.ndarray, fy: float, fx: float, h: int, w: int) -> tuple[int, int] | None:
    """Index of the largest bin within one bin of frequency (fy, fx), or None if none is searched."""
    cy, cx = int(round(fy * h)), int(round(fx * w))
    best, where = 0.0, None
    for jy in range(cy - 1, cy + 2):
        for jx in range(max(cx - 1, 0), min(cx + 2, power.shape[1])):
            value = power[jy % h, jx]
            if value > best:
                best, where = value, (jy % h, jx)
    return where


def _log_parabola_offset(left: float, centre: float, right: float) -> float:
    """Sub-bin offset (bins, in [-0.5, 0.5]) of the vertex of a parabola through three log-power samples."""
    tiny = 1e-300
    a, b, c = (math.log(max(v, tiny)) for v in (left, centre, right))
    denom = a - 2 * b + c
    if denom >= 0:
        return 0.0
    return float(np.clip(0.5 * (a - c) / denom, -0.5, 0.5))
