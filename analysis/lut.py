"""Linearising lookup tables: from a measured phase-vs-gray curve to the gray that gives each target phase.

The measured curve is smoothed (a weighted smoothing spline with its strength chosen by generalised cross-validation,
then made non-decreasing by isotonic regression), interpolated at every integer gray by a monotone piecewise cubic
(F. N. Fritsch and R. E. Carlson, SIAM J. Numer. Anal. 17, 238 (1980), with the Fritsch-Butland derivatives that
SciPy's PCHIP uses) and, for each target phase, the gray whose phase is nearest is chosen.

Targets are ``range_rad * i / levels``, i = 0 .. levels - 1, measured from the phase of the table's first gray, so a
table for 2 pi wraps seamlessly: the step from the last entry to the first of the next period is one target step.

A falling curve (a nematic panel's phase usually falls as the drive rises) is handled on its negative, which rises;
the table for it is that table read backwards, so entry i still gives the gray whose phase is target i + const
(mod 2 pi). The direction, the phase convention and any dips of the measured curve travel with the table.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.interpolate import make_smoothing_spline

from analysis.curve import DIRECTIONS, PHASE_CONVENTION, Dip, find_dips, isotonic

TWO_PI = 2 * math.pi
SPLINE_MIN_POINTS = 5  # the GCV smoothing spline needs at least five samples


@dataclass(frozen=True, eq=False)
class LookupTable:
    """A linearising table and how well it does on the curve it came from (phases in rad).

    ``gray[i]`` is the gray that delays ``target_phase_rad[i] = range_rad * i / levels``. ``window`` is the first and
    last gray of the measured curve the table draws from; ``reach_rad`` the smoothed curve's full span;
    ``uncertainty_rad`` the RMS measurement std at the table's grays; ``rms_linearity_rad`` and
    ``worst_linearity_rad`` the RMS and largest deviation of the measured (unsmoothed) curve through the table from
    a linear ramp, which a dip the smoothing flattened shows and the quantisation figures do not. ``direction`` is
    how the curve runs ("rising" or "falling"), ``dips`` the measured curve's falls against it (see
    analysis.curve.find_dips), ``phase_convention`` what "phase" means.
    """

    gray: np.ndarray
    target_phase_rad: np.ndarray
    range_rad: float
    bit_depth: int
    window: tuple[int, int]
    reach_rad: float
    distinct_grays: int
    worst_quantisation_rad: float
    rms_quantisation_rad: float
    rms_linearity_rad: float
    uncertainty_rad: float
    notes: tuple[str, ...]
    warnings: tuple[str, ...]
    direction: str = "rising"
    worst_linearity_rad: float = 0.0
    dips: tuple[Dip, ...] = ()
    phase_convention: str = PHASE_CONVENTION

    @property
    def levels(self) -> int:
        """Number of entries."""
        return int(self.gray.size)

    @property
    def worst_error_rad(self) -> float:
        """Largest phase error (rad) of the table: quantisation on the smooth curve or deviation of the measured one."""
        return max(self.worst_quantisation_rad, self.worst_linearity_rad)

    @property
    def short_of_two_pi(self) -> bool:
        """True when the table spans less than 2 pi (it then does not wrap)."""
        return self.range_rad < TWO_PI * (1 - 1e-9)

    @property
    def range_label(self) -> str:
        """The range in multiples of pi for a file name, e.g. "2pi" or "1.10pi"."""
        return "2pi" if not self.short_of_two_pi else f"{self.range_rad / math.pi:.2f}pi"

    def metadata_fields(self) -> dict:
        """JSON-ready fields lut.json needs beyond the table's figures: direction, convention, range, dips."""
        return {"direction": self.direction, "phase_convention": self.phase_convention,
                "short_of_two_pi": self.short_of_two_pi, "range_label": self.range_label,
                "header": self.header_line(), "worst_linearity_rad": self.worst_linearity_rad,
                "worst_error_rad": self.worst_error_rad, "dips": [d.summary() for d in self.dips]}

    def header_line(self) -> str:
        """One line that says what the table holds (a text file writes it as a comment above the grays)."""
        step = self.range_rad / self.levels
        span = (f"wanted phase 0..{self.range_rad:.4f} rad ({self.range_rad / math.pi:.2f} pi)"
                + (", SHORT OF 2 pi: phases above it cannot be made, the table does not wrap"
                   if self.short_of_two_pi else ", wrapping"))
        return (f"fringecal table, {self.levels} entries, {span}; entry i gives the gray whose phase is "
                f"i * {step:.6f} rad + const{'' if self.short_of_two_pi else ' (mod 2 pi)'}; {self.direction} curve"
                + (f"; {len(self.dips)} dip(s) in the measured curve" if self.dips else ""))


def monotone_cubic(x: np.ndarray, y: np.ndarray, x_new: np.ndarray) -> np.ndarray:
    """Shape-preserving piecewise-cubic Hermite interpolation of samples (x strictly increasing) at ``x_new``.

    Interior derivatives are the Fritsch-Butland weighted harmonic mean of the neighbouring secants (zero where the
    secants change sign or vanish), end derivatives the shape-preserving three-point formula; two points give a line.
    Monotone data give a monotone interpolant, so a rising phase curve never folds back between samples.
    """
    x, y = np.asarray(x, float), np.asarray(y, float)
    h = np.diff(x)
    secant = np.diff(y) / h
    d = np.empty_like(y)
    if x.size == 2:
        d[:] = secant[0]
    else:
        w1, w2 = 2 * h[1:] + h[:-1], h[1:] + 2 * h[:-1]
        same_sign = secant[:-1] * secant[1:] > 0
        # (w1 + w2) / (w1 / s0 + w2 / s1), written without the reciprocals that overflow for tiny secants
        numerator = (w1 + w2) * secant[:-1] * secant[1:]
        denominator = w1 * secant[1:] + w2 * secant[:-1]
        d[1:-1] = np.divide(numerator, denominator, out=np.zeros_like(numerator), where=same_sign)
        d[0] = _end_slope(h[0], h[1], secant[0], secant[1])
        d[-1] = _end_slope(h[-1], h[-2], secant[-1], secant[-2])
    x_new = np.asarray(x_new, float)
    k = np.clip(np.searchsorted(x, x_new, side="right") - 1, 0, x.size - 2)
    t = (x_new - x[k]) / h[k]
    h00, h10 = (1 + 2 * t) * (1 - t) ** 2, t * (1 - t) ** 2
    h01, h11 = t**2 * (3 - 2 * t), t**2 * (t - 1)
    return h00 * y[k] + h10 * h[k] * d[k] + h01 * y[k + 1] + h11 * h[k] * d[k + 1]


def _end_slope(h0: float, h1: float, s0: float, s1: float) -> float:
    d = ((2 * h0 + h1) * s0 - h0 * s1) / (h0 + h1)
    if np.sign(d) != np.sign(s0):
        return 0.0
    if np.sign(s0) != np.sign(s1) and abs(d) > abs(3 * s0):
        return 3 * s0
    return d


def smooth_curve(gray: np.ndarray, phase_rad: np.ndarray, phase_std_rad: np.ndarray | None = None) -> np.ndarray:
    """Smoothed, non-decreasing phase (rad) at the measured grays.

    Points are weighted by 1/std^2 (equal weights where no positive std is known); the smoothing spline's strength
    comes from generalised cross-validation, so noise-free data are left almost untouched.
    """
    gray, phase = np.asarray(gray, float), np.asarray(phase_rad, float)
    weight = np.ones_like(phase)
    if phase_std_rad is not None:
        std = np.asarray(phase_std_rad, float)
        known = std > 0
        if known.all():
            weight = 1.0 / std**2
            weight /= weight.mean()
    smooth = phase
    if gray.size >= SPLINE_MIN_POINTS:
        smooth = make_smoothing_spline(gray, phase, w=weight)(gray)
    return isotonic(smooth, weight)


def validate_curve(gray: np.ndarray, phase_rad: np.ndarray, bit_depth: int, direction: str | None = None) -> None:
    """Raise ValueError naming the field if a measured curve cannot make a table (or runs against ``direction``)."""
    gray, phase = np.asarray(gray), np.asarray(phase_rad, float)
    gmax = 2**bit_depth - 1
    if gray.ndim != 1 or gray.shape != phase.shape:
        raise ValueError(f"gray, phase_rad: expected two 1-D arrays of equal length, got {gray.shape}, {phase.shape}")
    if gray.size < 2:
        raise ValueError(f"gray: expected at least 2 measured gray levels, got {gray.size}")
    if not np.all(np.isfinite(phase)):
        raise ValueError("phase_rad: expected finite phases")
    if np.any(gray != np.round(gray)) or gray.min() < 0 or gray.max() > gmax:
        raise ValueError(f"gray: expected integer gray levels in [0, {gmax}] for a {bit_depth}-bit panel")
    if np.any(np.diff(gray) <= 0):
        raise ValueError("gray: expected strictly ascending gray levels")
    if direction is not None and direction not in DIRECTIONS:
        raise ValueError(f"direction: expected rising or falling, got {direction!r}")
    if phase[-1] == phase[0] or direction is not None and DIRECTIONS[direction] * (phase[-1] - phase[0]) < 0:
        raise ValueError(f"phase_rad: expected a {direction or 'rising or falling'} curve, got {phase[0]:.3f} rad at "
                         f"the first gray and {phase[-1]:.3f} rad at the last")


def build_lut(gray: np.ndarray, phase_rad: np.ndarray, phase_std_rad: np.ndarray | None = None, *,
              bit_depth: int = 8, levels: int | None = None, range_rad: float | None = None,
              direction: str | None = None, smooth: bool = True) -> LookupTable:
    """Build the table for ``levels`` targets over [0, range_rad) (defaults: 2**bit_depth levels, 2 pi).

    Pass the measured curve (not a smoothed one: the table smooths it, and judges its error and its dips on what
    was measured) with its std. ``direction`` ("rising" or "falling") defaults to the way the curve runs from its
    first gray to its last; a curve running the other way is refused. Dips need the std to be judged.

    A panel reaching more than the range gets the window of grays that spans it with the smallest RMS quantisation
    error: that error grows both where the curve is steep (coarse resolution) and where it is uneven (poor
    linearity), so one figure weighs both. A panel reaching less gets a table for its reach; an explicit
    ``range_rad`` beyond the reach is kept, its top targets clipped to the last gray, with a note. ``smooth=False``
    takes a curve that is already a smooth monotone model at every gray (an adaptive sweep's) as it is.
    """
    validate_curve(gray, phase_rad, bit_depth, direction)
    levels = 2**bit_depth if levels is None else int(levels)
    if levels < 2:
        raise ValueError(f"levels: expected at least 2 table entries, got {levels}")
    if range_rad is not None and not (math.isfinite(range_rad) and range_rad > 0):
        raise ValueError(f"range_rad: expected a phase range > 0 rad, got {range_rad}")
    gray = np.asarray(gray).astype(np.int64)
    run = 1 if np.asarray(phase_rad, float)[-1] > np.asarray(phase_rad, float)[0] else -1
    # The table is built on run * phase, which rises, and read backwards at the end for a falling curve.
    phase = run * np.asarray(phase_rad, float)
    std = None if phase_std_rad is None else np.asarray(phase_std_rad, float)
    dips = find_dips(gray, phase, std) if std is not None and np.all(std > 0) else ()

    all_grays = np.arange(gray[0], gray[-1] + 1)
    # Interpolating an isotonic fit keeps it non-decreasing; accumulate guards the last ulp.
    smoothed = smooth_curve(gray, phase, std) if smooth else phase
    curve = np.maximum.accumulate(monotone_cubic(gray, smoothed, all_grays))
    reach = float(curve[-1] - curve[0])
    notes, warnings = [], []
    if range_rad is None:
        range_rad = TWO_PI if reach >= TWO_PI else reach
        if reach < TWO_PI:
            warnings.append(f"the panel reaches only {reach:.3f} rad ({reach / math.pi:.2f} pi) of 2 pi; "
                         f"table built for its reach, phases above it cannot be made")
    elif range_rad > reach:
        warnings.append(f"range {range_rad:.3f} rad exceeds the panel's reach {reach:.3f} rad; "
                     f"targets above the reach get the last gray")

    step = range_rad / levels
    last_target = step * (levels - 1)
    starts = np.flatnonzero(curve + last_target <= curve[-1]) if range_rad <= reach else np.array([0])
    targets = step * np.arange(levels)
    best = None
    for start in starts:
        index = _nearest(curve, curve[start] + targets, start)
        error = curve[index] - curve[start] - targets
        rms = float(np.sqrt(np.mean(error**2)))
        if best is None or rms < best[0] or rms == best[0] and np.unique(index).size > np.unique(best[2]).size:
            best = (rms, start, index, error)
    rms, s, index, error = best
    table = all_grays[index]
    window = (int(all_grays[s]), int(table.max()))
    if range_rad <= reach and reach > range_rad + step:
        notes.append(f"the panel reaches {reach:.3f} rad ({reach / math.pi:.2f} pi); the table uses grays "
                     f"{window[0]}..{window[1]} of {gray[0]}..{gray[-1]}, the window spanning "
                     f"{range_rad:.3f} rad with the smallest RMS quantisation error")

    for d in dips:
        warnings.append(f"the measured curve falls against its direction by {d.depth_rad:.3f} rad "
                        f"({d.significance:.1f} sigma) from gray {d.from_gray} to {d.to_gray}; the table follows the "
                        f"smoothed curve there")
    measured = monotone_cubic(gray, phase, table) - curve[s] - targets
    uncertainty = 0.0 if std is None else float(np.sqrt(np.mean(np.interp(table, gray, std) ** 2)))
    if run < 0:
        table = table[::-1]
    return LookupTable(
        gray=table.astype(np.int64), target_phase_rad=targets, range_rad=float(range_rad), bit_depth=bit_depth,
        window=window, reach_rad=reach, distinct_grays=int(np.unique(table).size),
        worst_quantisation_rad=float(np.abs(error).max()), rms_quantisation_rad=rms,
        rms_linearity_rad=float(np.std(measured)), uncertainty_rad=uncertainty, notes=tuple(notes),
        warnings=tuple(warnings), direction="rising" if run > 0 else "falling",
        worst_linearity_rad=float(np.abs(measured - measured.mean()).max()), dips=dips)


def _nearest(curve: np.ndarray, targets: np.ndarray, start: int) -> np.ndarray:
    """Index (>= start) of the entry of the non-decreasing ``curve`` nearest to each target."""
    hi = np.clip(np.searchsorted(curve, targets), start + 1, curve.size - 1)
    lo = hi - 1
    return np.where(np.abs(curve[hi] - targets) < np.abs(targets - curve[lo]), hi, lo)

