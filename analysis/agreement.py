"""How well a measured curve and its stated uncertainty agree with a known true curve (the simulator's).

A curve is relative (a constant piston means nothing to a table), so the weighted mean difference is removed first
and costs one degree of freedom. An honest standard uncertainty gives chi-square per level near 1 and about 95 % of
the levels within two standard uncertainties of the truth; a stated std too small shows as chi-square well above 1.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Agreement:
    """Measured minus true, piston removed: RMS and worst error (rad), chi-square per level of the stated std, the
    share of levels within 2 sigma, the levels compared and the median stated std (rad)."""

    rms_rad: float
    worst_rad: float
    chi2_per_level: float
    within_2sigma: float
    levels: int
    median_std_rad: float

    def summary(self) -> dict:
        return {"rms_error_rad": self.rms_rad, "worst_error_rad": self.worst_rad,
                "chi2_per_level": self.chi2_per_level, "within_2sigma": self.within_2sigma, "levels": self.levels,
                "median_stated_std_rad": self.median_std_rad}


def agreement(gray, phase_rad, std_rad, true_gray, true_phase_rad) -> Agreement:
    """Compare a measured curve (grays, phase, stated std, rad) with a true curve given at ``true_gray``."""
    g = np.asarray(gray, int)
    phase, std = np.asarray(phase_rad, float), np.asarray(std_rad, float)
    truth = np.interp(g, np.asarray(true_gray, float), np.asarray(true_phase_rad, float))
    if g.size < 2 or np.any(std <= 0):
        raise ValueError("std_rad: expected two or more levels with a positive stated std")
    weight = 1 / std**2
    err = phase - truth
    err = err - np.sum(weight * err) / weight.sum()
    return Agreement(float(np.sqrt(np.mean(err**2))), float(np.abs(err).max()),
                     float(np.sum(err**2 * weight) / (g.size - 1)), float(np.mean(np.abs(err) <= 2 * std)),
                     int(g.size), float(np.median(std)))
