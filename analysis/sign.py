"""Which way the panel's phase runs with gray, measured: a blazed staircase probe in the grating half.

With the panel's field multiplied by exp(+i phi) (analysis.curve.PHASE_CONVENTION), a phase that grows along a
direction tilts the reflected light toward it. A staircase of grays whose phase grows toward the mirror half
therefore sends its light into the diffraction order that overlaps the mirror half's reflection, the order whose
fringes the calibration measures; its mirror image sends the light the other way and the fringes nearly vanish. The
probe shows the staircase both ways round with grays rising away from the mirror half (A) and toward it (B): strong
fringes with A mean the phase falls as the gray rises; with B, that it rises. No model of the panel is needed, only
the geometry of the split screen, so the sign holds on any bench.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.interpolate import PchipInterpolator

MIN_RATIO = 2.0  # the stronger orientation's fringe amplitude must exceed the weaker's this many times
# a coarse scan is unwrapped only where its fringe phase moves at most this much between neighbouring grays (rad):
# a step of more than pi looks like its alias 2 pi away, and pi / 2 leaves room for the curve steepening in between
MAX_SCAN_STEP_RAD = math.pi / 2


@dataclass(frozen=True)
class SignProbe:
    """Result of the probe: ``direction`` ("rising", "falling" or "unknown"), the fringe amplitudes (ADU) with the
    staircase rising away from the mirror half and toward it, and their ratio (away / toward)."""

    direction: str
    amplitude_away_adu: float
    amplitude_toward_adu: float
    ratio: float
    step_grays: tuple[int, ...]

    def summary(self) -> dict:
        """JSON-ready figures of the probe."""
        return {"direction": self.direction, "basis": "measured", "method": "blazed staircase probe",
                "amplitude_rising_away_adu": self.amplitude_away_adu,
                "amplitude_rising_toward_adu": self.amplitude_toward_adu, "ratio": self.ratio,
                "min_ratio": MIN_RATIO, "step_grays": list(self.step_grays)}


def scan_midpoints(grays, fringe_phase_rad, max_step_rad: float = MAX_SCAN_STEP_RAD) -> tuple[int, ...]:
    """Grays halfway between neighbours of a coarse (gray, fringe phase) scan whose phase (rad) moves more than
    ``max_step_rad``, wrapped to +-pi, between them: measured there, they make the scan fine enough to unwrap. A
    steep curve on many grays (4 pi over 4096 grays) moves by more than pi between evenly spread grays, and its
    unwrapped scan then turns back on itself. Neighbours 1 gray apart have no midpoint."""
    order = np.argsort(grays)
    g = np.asarray(grays)[order]
    step = np.angle(np.exp(1j * np.diff(np.asarray(fringe_phase_rad, float)[order])))
    wide = (np.abs(step) > max_step_rad) & (np.diff(g) > 1)
    return tuple(int(a + b) // 2 for a, b in zip(g[:-1][wide], g[1:][wide]))


def staircase_grays(grays, fringe_phase_rad, reference_gray: int, steps: int) -> tuple[int, ...]:
    """Grays whose phase lies 2 pi k / ``steps`` (k = 0 .. steps - 1) from the reference gray's, from a coarse
    (gray, fringe phase) scan fine enough to unwrap (``scan_midpoints`` finds none); the phase's sign is not needed,
    only its size growing with gray.

    Between the scan's grays the curve is the shape-preserving piecewise cubic through them (PCHIP), which follows
    the curve's bend where straight lines cut across it. Where the panel reaches less than a target, the gray of
    its largest phase is used: the staircase is then short of a full blaze but still steers most light one way.
    """
    grays = np.asarray(grays)
    order = np.argsort(grays)
    grays = grays[order]
    curve = PchipInterpolator(grays, np.unwrap(np.asarray(fringe_phase_rad, float)[order]))
    fine = np.arange(grays.min(), grays.max() + 1)
    reach = np.maximum.accumulate(np.abs(curve(fine) - curve(reference_gray)))
    targets = 2 * math.pi * np.arange(steps) / steps
    index = np.minimum(np.searchsorted(reach, targets), fine.size - 1)
    index[0] = int(np.argmin(np.abs(fine - reference_gray)))
    return tuple(int(g) for g in fine[index])


def probe_direction(amplitude_away_adu, amplitude_toward_adu, step_grays=()) -> SignProbe:
    """The direction from the fringe amplitudes (ADU; one or more frames each) of the two orientations."""
    away = float(np.mean(amplitude_away_adu))
    toward = float(np.mean(amplitude_toward_adu))
    ratio = away / max(toward, 1e-12)
    direction = "falling" if ratio >= MIN_RATIO else "rising" if ratio <= 1 / MIN_RATIO else "unknown"
    return SignProbe(direction, away, toward, ratio, tuple(int(g) for g in step_grays))
