"""Verifying a table: linearity of the phase it makes, and the first-order efficiency of blazed gratings.

Efficiency of a pixelated grating. A period of N flat-topped pixels with phases phi_k sends into its first order

    eta_1 = sinc^2(1/N) * |(1/N) sum_k exp(i (phi_k - 2 pi k / N))|^2,

the pixel-aperture envelope at the first order's angle times the share of the pixel pattern's own (discrete)
spectrum in that order. Exact steps phi_k = 2 pi k / N give Swanson's N-level staircase efficiency sinc^2(1/N)
(G. J. Swanson, MIT Lincoln Laboratory TR-854, 1989); N = 2 with phases 0, dphi gives Goodman's binary grating,
(2/pi)^2 sin^2(dphi / 2).

Measuring it on the camera. Without a lens, orders overlap near the panel and separate with distance: order m of a
period N p leaves at sin(theta) = m lambda / (N p) and lands z tan(theta) from the zero order. Once the spots are
further apart than their size, the power inside a disc around the first order's spot, over the power inside the
same disc around the mirror's (uniform panel) spot, is the fraction of the reflected power in that order: the
efficiency, with the same losses (reflectance, stray light) cancelling in the ratio.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


def swanson_efficiency(period_px: int) -> float:
    """First-order efficiency sinc^2(1/N) of an exact N-level blazed staircase (N = period in pixels)."""
    return float(np.sinc(1.0 / period_px) ** 2)


def staircase_efficiency(pixel_phase_rad: np.ndarray) -> float:
    """First-order efficiency of one grating period given as the phase (rad) of each of its flat-topped pixels."""
    phi = np.asarray(pixel_phase_rad, float)
    n = phi.size
    if n < 2:
        raise ValueError(f"pixel_phase_rad: expected a period of at least 2 pixels, got {n}")
    share = abs(np.mean(np.exp(1j * (phi - 2 * np.pi * np.arange(n) / n)))) ** 2
    return swanson_efficiency(n) * float(share)


def order_offset_um(order: int, period_px: float, pitch_um: float, wavelength_nm: float, distance_mm: float) -> float:
    """Distance (um) on a plane ``distance_mm`` away between diffraction order ``order`` and the zero order."""
    sin_t = order * wavelength_nm * 1e-3 / (period_px * pitch_um)
    if abs(sin_t) >= 1:
        raise ValueError(f"period_px: order {order} of a {period_px} px period does not propagate")
    return distance_mm * 1e3 * math.tan(math.asin(sin_t))


def disc_power(image: np.ndarray, centre_xy_px: tuple[float, float], radius_px: float, background: float) -> float:
    """Sum of counts above ``background`` inside a disc of the image (centre as x, y in pixels)."""
    h, w = image.shape
    y, x = np.ogrid[:h, :w]
    inside = (x - centre_xy_px[0]) ** 2 + (y - centre_xy_px[1]) ** 2 <= radius_px**2
    return float(np.sum(np.asarray(image, float)[inside] - background))


def outside_discs(shape: tuple[int, int], centres_xy_px, radius_px: float) -> np.ndarray:
    """Boolean image, True away from every disc: where the stray-light background is estimated."""
    h, w = shape
    y, x = np.ogrid[:h, :w]
    mask = np.ones(shape, bool)
    for cx, cy in centres_xy_px:
        mask &= (x - cx) ** 2 + (y - cy) ** 2 > (1.5 * radius_px) ** 2
    return mask


@dataclass(frozen=True)
class Linearity:
    """Measured phase minus target (rad) over a sweep of targets, after removing its mean: RMS, worst, and the
    RMS of the measurement's own std (rad)."""

    residual_rad: np.ndarray
    rms_rad: float
    worst_rad: float
    uncertainty_rad: float


def linearity(target_rad: np.ndarray, measured_rad: np.ndarray, std_rad: np.ndarray) -> Linearity:
    """How far phases measured for a sweep of targets (same order, unwrapped) lie from the targets.

    A constant offset means nothing to a phase pattern and is removed; the slope is not fitted, since a table that
    makes 0.9 rad for 1 rad is wrong by exactly that.
    """
    target, measured = np.asarray(target_rad, float), np.asarray(measured_rad, float)
    residual = measured - target
    residual = residual - residual.mean()
    return Linearity(residual, float(np.sqrt(np.mean(residual**2))), float(np.abs(residual).max()),
                     float(np.sqrt(np.mean(np.asarray(std_rad, float) ** 2))))
