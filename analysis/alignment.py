"""Alignment figures of one camera frame, and the plain hint a person at the bench needs next."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from analysis.band import find_band
from analysis.carrier import NoFringesError, find_carrier
from analysis.patterns import Rect

GOOD_CONTRAST = 0.5       # below this the fringes are usable but the bench is not aligned (common practice)
POOR_CONTRAST = 0.2
MAX_PERIOD_SPREAD = 0.05  # rms local-period deviation, as a fraction (a well-aligned simulated bench shows 0.02)
LOW_PEAK, HIGH_PEAK = 0.25, 0.95


@dataclass(frozen=True)
class AlignmentFigures:
    """What one frame says about the alignment; fringe fields are None when no fringes were found."""

    peak_fraction: float          # brightest pixels (99.9th percentile) above dark, as a fraction of full scale
    saturated_px: int
    contrast: float               # median fringe visibility in the band (0 without fringes)
    period_px: float | None
    angle_deg: float | None
    period_spread: float | None   # rms local-period deviation across the band, fraction of the period
    fringe_count: float | None
    band: Rect | None = None      # the fringe band (image px)


def alignment_figures(image: np.ndarray, full_scale: int, dark_adu: float = 0.0) -> AlignmentFigures:
    """Exposure, contrast, fringe period, orientation and period uniformity of one split-screen frame."""
    img = np.asarray(image)
    peak = (float(np.percentile(img[::2, ::2], 99.9)) - dark_adu) / (full_scale - dark_adu)
    saturated = int(np.count_nonzero(img >= full_scale))
    try:
        survey = find_band(img, dark_adu, find_carrier(img))
    except NoFringesError:
        return AlignmentFigures(peak, saturated, 0.0, None, None, None, None)
    c = survey.carrier
    return AlignmentFigures(peak, saturated, survey.contrast, c.period_px, c.angle_deg, survey.period_spread,
                            survey.fringe_count, survey.band)


def hint(fig: AlignmentFigures) -> str:
    """The likeliest fault and what to do about it, in one sentence."""
    if fig.saturated_px or fig.peak_fraction > HIGH_PEAK:
        return "saturated: lower the exposure or attenuate the beam"
    if fig.peak_fraction < LOW_PEAK:
        return "underexposed: raise the exposure or the light level"
    if fig.period_px is None or fig.contrast < POOR_CONTRAST:
        return ("no usable fringes: rotate the polarisation onto the panel's director (half-wave plate) and check "
                "that the grating's first order overlaps the mirror half on the camera")
    if fig.period_spread is not None and fig.period_spread > MAX_PERIOD_SPREAD:
        return "fringe period not uniform across the band: adjust the tilt of the panel or the camera"
    if fig.contrast < GOOD_CONTRAST:
        return "low contrast: rotate the polarisation (half-wave plate) towards the panel's director"
    return "aligned: fringes are uniform and contrast is good"


def best_waveplate_deg(angles_deg, contrast) -> tuple[float, float]:
    """Half-wave-plate angle (deg, in [0, 90)) of the most fringe contrast, and the fit's rms residual.

    A half-wave plate at angle a turns the polarisation by 2a, and only the component along the director is modulated,
    so the contrast is an even function of cos^2(2 (a - a0)): periodic in a with 90 degrees. Its 4a harmonic, from a
    linear least-squares fit of c0 + c1 cos 4a + c2 sin 4a, has its maximum exactly at a0.
    """
    a = np.deg2rad(np.asarray(angles_deg, float))
    v = np.asarray(contrast, float)
    if a.size < 3:
        raise ValueError(f"angles_deg: expected at least 3 angles, got {a.size}")
    design = np.column_stack([np.ones_like(a), np.cos(4 * a), np.sin(4 * a)])
    coef, *_ = np.linalg.lstsq(design, v, rcond=None)
    best = np.rad2deg(np.arctan2(coef[2], coef[1]) / 4) % 90.0
    return float(best), float(np.sqrt(np.mean((design @ coef - v) ** 2)))
