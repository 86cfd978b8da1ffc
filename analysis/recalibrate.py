"""Recalibration from an earlier curve: a handful of levels, the earlier shape rescaled, and a chi-square test.

After the wavelength, the temperature or the angle of incidence changed, the liquid crystal's tilt at each gray is
the same and only the retardance's scale moves (phi = 4 pi d dn_eff / lambda: see analysis/dispersion.py), so the new
curve is the earlier one rescaled, up to a small smooth correction (dn_eff is not exactly proportional to dn). The
handful of new levels is fitted by weighted least squares with a * f(g) + b + c * g / g_max (f the earlier curve);
the chi-square of that fit against the stated stds (the new levels' and the earlier curve's, rescaled) says whether
the shape still holds. The model the sweep goes on with is analysis.adaptive's, with f as one of its basis functions.
Levels that all lie within UNWRAP_CHECK_RAD of the rescaled shape were unwrapped consistently with it, however far
apart they are, so they need no levels in between for the unwrapping's sake.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats

from analysis.adaptive import coarse_levels

RECALIBRATION_LEVELS = 9   # levels measured first when an earlier curve is given
SHAPE_P_VALUE = 0.01       # the shape is rejected when the chi-square is this improbable
UNWRAP_CHECK_RAD = 0.5     # levels within this of the rescaled shape cannot have slipped by 2 pi


def recalibration_levels(gray_max: int, count: int = RECALIBRATION_LEVELS) -> list[int]:
    """The handful of levels a recalibration measures first: ``count`` grays evenly over 0..gray_max."""
    return coarse_levels(gray_max, count)


@dataclass(frozen=True)
class ShapeCheck:
    """How the earlier shape fits the new levels: scale a, chi-square, degrees of freedom, p-value, verdict."""

    scale: float
    scale_std: float
    chi2: float
    dof: int
    p_value: float
    holds: bool
    worst_residual_rad: float  # largest misfit of a level: far below pi means the levels are unwrapped consistently

    def describe(self) -> str:
        """One line for the log and the summary."""
        verdict = "holds" if self.holds else "does not hold"
        return (f"the earlier curve's shape {verdict}: scale {self.scale:.4f} ± {self.scale_std:.4f}, "
                f"chi-square {self.chi2:.1f} for {self.dof} degrees of freedom (p = {self.p_value:.3g}, "
                f"limit {SHAPE_P_VALUE})")


def check_shape(gray, phase_rad, std_rad, shape_rad, shape_std_rad, gray_max: int) -> ShapeCheck:
    """Fit a * f + b + c * g / g_max to the new levels and test the fit's chi-square (see the module docstring).

    ``shape_rad``/``shape_std_rad`` are the earlier curve and its std at every gray 0..gray_max, in the same
    direction as ``phase_rad``.
    """
    gray = np.asarray(gray, int)
    y, std = np.asarray(phase_rad, float), np.asarray(std_rad, float)
    f, f_std = np.asarray(shape_rad, float)[gray], np.asarray(shape_std_rad, float)[gray]
    if gray.size < 4:
        raise ValueError(f"gray: expected at least 4 new levels to test the earlier shape, got {gray.size}")
    design = np.column_stack([f, np.ones_like(f), gray / gray_max])
    a = 1.0
    for _ in range(3):  # the earlier curve's noise enters scaled by a
        w = 1.0 / (std**2 + (a * f_std) ** 2 + 1e-18)
        normal = design.T @ (design * w[:, None])
        coef = np.linalg.solve(normal, design.T @ (w * y))
        a = float(coef[0])
    residual = y - design @ coef
    chi2 = float(np.sum(w * residual**2))
    dof = gray.size - design.shape[1]
    p = float(stats.chi2.sf(chi2, dof))
    return ShapeCheck(a, math.sqrt(float(np.linalg.inv(normal)[0, 0])), chi2, dof, p, p >= SHAPE_P_VALUE,
                      float(np.max(np.abs(residual))))


def unwrapped_consistently(check: ShapeCheck) -> bool:
    """True when no level is far enough off the rescaled shape to have slipped by a multiple of 2 pi."""
    return check.worst_residual_rad < UNWRAP_CHECK_RAD
