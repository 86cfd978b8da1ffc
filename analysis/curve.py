"""Phase-vs-gray curve from per-frame fringe phases: drift removal, level means, unwrapping, sign, smooth fit.

Frames come in acquisition order with their gray, wrapped phase (rad), standard uncertainty (rad) and time (s).
Repeats of the reference gray spread through the sweep are drift references: their phase against time is the
drift, which is subtracted from every frame before the levels are combined. Every visit's noise enters the drift
model and, through it, every level, so the model has only as many terms as the visits show to be there: a curve
through every visit (or an extrapolation of one beyond the last visit) would add each visit's noise to the levels
near it, and several times that noise past the last visit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import interpolate, optimize

MAX_DRIFT_DEGREE = 3     # drift is modelled as a polynomial in time of at most this degree
DRIFT_TERM_CHI2 = 9.0    # a higher drift degree is kept only if it lowers chi-square this much (a 3-sigma term)
OUTLIER_SIGMAS = 5.0     # frames or levels this many robust standard deviations off are rejected
SMOOTH_KNOT_SPACING = 16  # gray levels between knots of the monotone smooth fit


class CurveError(ValueError):
    """The frames cannot make a phase curve; the message names what is missing."""


@dataclass(frozen=True)
class DriftModel:
    """Drift of the fringe phase (rad) against time (s): a polynomial in (t - t0), fitted to reference visits.

    ``covariance`` (rad^2, same order as the coefficients) is that of the weighted fit; ``chi2`` the visits'
    chi-square about the model, which is near ``n_visits - degree - 1`` when the visit uncertainties are honest.
    """

    coefficients: tuple[float, ...]  # highest power first, as numpy.polyval takes them
    t0_s: float
    n_visits: int
    span_rad: float  # largest minus smallest drift over the sweep
    covariance: tuple[tuple[float, ...], ...] = ()
    chi2: float = 0.0

    def __call__(self, t_s: np.ndarray) -> np.ndarray:
        return np.polyval(self.coefficients, np.asarray(t_s, dtype=float) - self.t0_s)

    def std_rad(self, t_s: np.ndarray) -> np.ndarray:
        """Standard uncertainty (rad) of the modelled drift at times ``t_s`` (s), from the visits' noise."""
        powers = np.vander(np.atleast_1d(np.asarray(t_s, dtype=float)) - self.t0_s, len(self.coefficients))
        if not self.covariance:
            return np.zeros(powers.shape[0])
        cov = np.asarray(self.covariance)
        return np.sqrt(np.maximum(np.einsum("ij,jk,ik->i", powers, cov, powers), 0.0))


@dataclass(frozen=True)
class CurveSummary:
    """Figures of a phase curve: range (rad), first gray at 2 pi (None if never), fit rms (rad), worst std (rad)."""

    range_rad: float
    first_gray_2pi: int | None
    smooth_rms_rad: float | None
    worst_std_rad: float
    worst_std_gray: int

    @property
    def range_pi(self) -> float:
        """Range in multiples of pi."""
        return self.range_rad / math.pi


@dataclass(frozen=True)
class PhaseCurve:
    """Phase (rad) against gray relative to the reference gray, one entry per measured gray (ascending)."""

    gray: np.ndarray
    phase_rad: np.ndarray
    std_rad: np.ndarray
    contrast: np.ndarray
    n_frames: np.ndarray
    reference_gray: int
    sign: int
    drift: DriftModel | None
    rejected_frames: tuple[int, ...]  # indices into the input frames
    rejected_grays: tuple[int, ...]
    smooth_rad: np.ndarray | None
    summary: CurveSummary


def circular_mean(phase_rad: np.ndarray, std_rad: np.ndarray) -> tuple[float, float]:
    """Mean direction (rad) of phases and its standard error (rad).

    The standard error is the larger of the scatter's (circular standard deviation / sqrt(n), for n >= 2) and the
    frames' own uncertainties combined (sqrt(mean std^2 / n)), so two nearly equal frames do not claim too much.
    """
    phase_rad, std_rad = np.asarray(phase_rad, float), np.asarray(std_rad, float)
    n = phase_rad.size
    resultant = np.mean(np.exp(1j * phase_rad))
    mean = float(np.angle(resultant))
    own = math.sqrt(float(np.mean(std_rad**2)) / n)
    if n < 2:
        return mean, own
    r = min(float(np.abs(resultant)), 1.0)
    scatter = math.sqrt(max(-2.0 * math.log(max(r, 1e-300)), 0.0) * n / (n - 1)) / math.sqrt(n)
    return mean, max(scatter, own)


def unwrap_levels(gray: np.ndarray, phase_rad: np.ndarray, history: int = 4) -> np.ndarray:
    """Unwrap phases at ascending grays by choosing, at each level, the 2 pi branch nearest a local prediction.

    The prediction extends the last ``history`` unwrapped levels by their median slope per gray, so one noisy
    level does not throw every later level off by 2 pi, and steep stretches with uneven gray spacing stay on
    their branch. On clean, finely sampled data this equals numpy.unwrap.
    """
    gray, phase = np.asarray(gray, float), np.asarray(phase_rad, float)
    out = phase.copy()
    for i in range(1, out.size):
        lo = max(0, i - history)
        if i - lo >= 2:
            slopes = np.diff(out[lo:i]) / np.diff(gray[lo:i])
            predicted = out[i - 1] + float(np.median(slopes)) * (gray[i] - gray[i - 1])
        else:
            predicted = out[i - 1]
        out[i] = phase[i] + 2 * np.pi * np.round((predicted - phase[i]) / (2 * np.pi))
    return out


def fit_drift(time_s: np.ndarray, phase_rad: np.ndarray, std_rad: np.ndarray, visit: np.ndarray) -> DriftModel:
    """Drift polynomial through reference frames (time, wrapped phase, std, visit number).

    Frames of one visit are averaged first; visits are unwrapped in time order. The degree starts at 0 and goes up
    while one more power lowers the visits' weighted chi-square by DRIFT_TERM_CHI2 or more, up to MAX_DRIFT_DEGREE
    (and the number of visits less one): a term the visits cannot show to be there only carries their noise into
    the levels. The visits' uncertainties must be honest for this test; circular_mean never lets them fall below
    the scatter of a visit's own frames.
    """
    visits = np.unique(visit)
    t = np.array([time_s[visit == v].mean() for v in visits])
    means = [circular_mean(phase_rad[visit == v], std_rad[visit == v]) for v in visits]
    phi = np.unwrap(np.array([m for m, _ in means]))
    err = np.array([max(s, 1e-9) for _, s in means])
    t0 = float(t[0])
    # Scaled time keeps the normal equations well conditioned; coefficients are converted back below.
    scale = max(float(np.ptp(t)), 1e-9)
    x = (t - t0) / scale

    def fit(degree):
        design = np.vander(x, degree + 1) / err[:, None]
        cov = np.linalg.inv(design.T @ design)
        coeffs = cov @ design.T @ (phi / err)
        return coeffs, cov, float(np.sum((design @ coeffs - phi / err) ** 2))

    coeffs, cov, chi2 = fit(0)
    for degree in range(1, min(MAX_DRIFT_DEGREE, len(visits) - 1) + 1):
        trial = fit(degree)
        if chi2 - trial[2] < DRIFT_TERM_CHI2:
            break
        coeffs, cov, chi2 = trial
    unscale = scale ** -np.arange(coeffs.size - 1, -1, -1.0)
    coeffs, cov = coeffs * unscale, cov * np.outer(unscale, unscale)
    ts = np.linspace(t.min(), t.max(), 64) - t0
    values = np.polyval(coeffs, ts)
    return DriftModel(tuple(float(c) for c in coeffs), t0, len(visits), float(values.max() - values.min()),
                      tuple(tuple(float(c) for c in row) for row in cov), chi2)


def monotone_fit(gray: np.ndarray, phase_rad: np.ndarray, std_rad: np.ndarray) -> np.ndarray:
    """Smooth rising fit of phase (rad) against gray: a cubic spline whose slope is held non-negative.

    The curve is c0 + sum_k w_k I_k(g) with I_k integrals of cubic B-splines (knots every SMOOTH_KNOT_SPACING
    grays), weights 1/std, and w_k >= 0, solved by bounded linear least squares; non-negative B-spline weights make
    a non-negative slope.
    """
    g, y = np.asarray(gray, float), np.asarray(phase_rad, float)
    w = 1 / np.maximum(np.asarray(std_rad, float), 1e-9 * max(np.ptp(y), 1.0))
    span = g.max() - g.min()
    n_inner = max(int(span // SMOOTH_KNOT_SPACING) - 1, 0)
    inner = np.linspace(g.min(), g.max(), n_inner + 2)[1:-1]
    knots = np.concatenate([[g.min()] * 4, inner, [g.max()] * 4])
    n_basis = len(knots) - 4
    fine = np.linspace(g.min(), g.max(), 2048)
    columns = []
    for k in range(n_basis):
        coef = np.zeros(n_basis)
        coef[k] = 1.0
        spline = interpolate.BSpline(knots, coef, 3)
        columns.append(np.interp(g, fine, _cumulative(fine, spline(fine))))
    design = np.column_stack([np.ones_like(g)] + columns)
    lower = np.r_[-np.inf, np.zeros(n_basis)]
    fit = optimize.lsq_linear(design * w[:, None], y * w, bounds=(lower, np.full(n_basis + 1, np.inf)))
    return design @ fit.x


def _cumulative(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Running trapezoidal integral of y(x) from x[0]."""
    return np.concatenate([[0.0], np.cumsum(0.5 * (y[1:] + y[:-1]) * np.diff(x))])


def phase_curve(gray, phase_rad, std_rad, time_s=None, contrast=None, reference_gray: int = 0,
                sign: int | None = None, smooth: bool = False) -> PhaseCurve:
    """Build the phase curve from per-frame results in acquisition order.

    ``time_s`` defaults to the acquisition index. ``sign`` +1 or -1 fixes the direction; None picks the one that
    makes the curve rise with gray overall (its least-squares slope is positive). A reference-gray frame that
    comes after frames of other grays starts a new drift visit; with two or more visits the drift is fitted and
    removed, and its uncertainty at each level's time joins the level's standard error. Frames more than OUTLIER_SIGMAS off their level's mean (levels of three or more frames) and levels
    that far off the median of their neighbours are rejected and listed.
    """
    gray = np.asarray(gray, dtype=int)
    phase = np.asarray(phase_rad, dtype=float)
    std = np.asarray(std_rad, dtype=float)
    n = gray.size
    if n == 0:
        raise CurveError("frames: expected at least one frame")
    if not (phase.size == std.size == n):
        raise CurveError("frames: gray, phase and std must have one entry per frame")
    time_s = np.arange(n, dtype=float) if time_s is None else np.asarray(time_s, dtype=float)
    contrast = np.full(n, np.nan) if contrast is None else np.asarray(contrast, dtype=float)
    if sign not in (None, 1, -1):
        raise CurveError(f"sign: expected +1, -1 or auto, got {sign!r}")
    is_ref = gray == reference_gray
    if not is_ref.any():
        raise CurveError(f"reference gray {reference_gray}: no frame was taken at it")
    # Visits are counted in time order so that frames handed over shuffled still group correctly.
    order = np.argsort(time_s, kind="stable")
    visit = np.zeros(n, dtype=int)
    visit[order] = np.cumsum(np.r_[True, ~is_ref[order][:-1]] & is_ref[order])
    drift = None
    if len(np.unique(visit[is_ref])) >= 2:
        drift = fit_drift(time_s[is_ref], phase[is_ref], std[is_ref], visit[is_ref])
        phase = np.angle(np.exp(1j * (phase - drift(time_s))))

    levels = np.unique(gray)
    keep = np.ones(n, dtype=bool)
    means, errors, counts, contrasts = [], [], [], []
    for g in levels:
        idx = np.flatnonzero(gray == g)
        if idx.size >= 3:
            # The medoid (the frame nearest all others) is a centre that one wild frame cannot drag.
            pairwise = np.abs(np.angle(np.exp(1j * (phase[idx][:, None] - phase[idx][None, :]))))
            dev = pairwise[np.argmin(pairwise.sum(axis=1))]
            scale = max(1.4826 * float(np.median(dev)), float(np.median(std[idx])))
            bad = dev > OUTLIER_SIGMAS * scale
            if bad.sum() < idx.size / 2:
                keep[idx[bad]] = False
                idx = idx[~bad]
        m, e = circular_mean(phase[idx], std[idx])
        if drift is not None:
            # The drift model's own error is common to a level's frames: it adds to the mean, not per frame.
            e = math.hypot(e, float(drift.std_rad(time_s[idx].mean())[0]))
        means.append(m)
        errors.append(e)
        counts.append(idx.size)
        contrasts.append(float(np.nanmean(contrast[idx])) if np.isfinite(contrast[idx]).any() else math.nan)
    means, errors = np.array(means), np.array(errors)
    counts, contrasts = np.array(counts), np.array(contrasts)

    unwrapped = unwrap_levels(levels, means)
    level_ok = _level_outliers(levels, unwrapped, errors)
    rejected_grays = tuple(int(g) for g in levels[~level_ok] if g != reference_gray)
    level_ok |= levels == reference_gray
    levels, means, errors = levels[level_ok], means[level_ok], errors[level_ok]
    counts, contrasts = counts[level_ok], contrasts[level_ok]
    unwrapped = unwrap_levels(levels, means)
    unwrapped = unwrapped - unwrapped[np.flatnonzero(levels == reference_gray)[0]]
    if sign is None:
        slope = np.polyfit(levels, unwrapped, 1)[0] if levels.size >= 2 else 1.0
        sign = 1 if slope >= 0 else -1
    curve = sign * unwrapped
    fitted = monotone_fit(levels, curve, errors) if smooth and levels.size >= 4 else None
    return PhaseCurve(levels, curve, errors, contrasts, counts, int(reference_gray), int(sign), drift,
                      tuple(int(i) for i in np.flatnonzero(~keep)), rejected_grays, fitted,
                      summarize(levels, curve, errors, fitted))


def _level_outliers(levels: np.ndarray, phase: np.ndarray, std: np.ndarray, half_window: int = 3) -> np.ndarray:
    """True for levels within OUTLIER_SIGMAS robust deviations of a line through their neighbours.

    The worst level is dropped and the rest re-examined, one at a time, so an outlier never condemns the
    neighbours whose lines it bent (at most a quarter of the levels can go).
    """
    ok = np.ones(levels.size, dtype=bool)
    for _ in range(levels.size // 4):
        idx = np.flatnonzero(ok)
        if idx.size < 2 * half_window + 1:
            break
        resid = np.empty(idx.size)
        for j, i in enumerate(idx):
            near = np.r_[idx[max(0, j - half_window):j], idx[j + 1:j + 1 + half_window]]
            # A line through the neighbours, not their median, so a steep but smooth stretch is not flagged.
            slope, offset = np.polyfit(levels[near], phase[near], 1)
            resid[j] = phase[i] - (slope * levels[i] + offset)
        scale = max(1.4826 * float(np.median(np.abs(resid))), 1e-12)
        excess = np.abs(resid) / (OUTLIER_SIGMAS * np.maximum(scale, std[idx]))
        worst = int(np.argmax(excess))
        if excess[worst] <= 1:
            break
        ok[idx[worst]] = False
    return ok


def summarize(gray: np.ndarray, phase_rad: np.ndarray, std_rad: np.ndarray, smooth_rad: np.ndarray | None
              ) -> CurveSummary:
    """Range, first gray reaching 2 pi, rms deviation from the smooth fit and worst uncertainty of a curve."""
    reach = np.flatnonzero(phase_rad >= 2 * np.pi)
    worst = int(np.argmax(std_rad))
    rms = float(np.sqrt(np.mean((phase_rad - smooth_rad) ** 2))) if smooth_rad is not None else None
    return CurveSummary(float(phase_rad.max() - phase_rad.min()), int(gray[reach[0]]) if reach.size else None,
                        rms, float(std_rad[worst]), int(gray[worst]))
