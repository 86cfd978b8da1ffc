"""Adaptive sweep: a curve model with an uncertainty, the table's predicted error, the next levels, when to stop.

Model. The phase curve s * phi(g) (s = +1/-1 the curve's direction, so the model always rises) is a Gaussian process
(C. E. Rasmussen and C. K. I. Williams, Gaussian Processes for Machine Learning, MIT Press 2006, sections 2.2, 2.7
and 5.4): a mean of explicit basis functions with a vague prior (1, g, and for a recalibration the earlier curve's
shape) plus a Matérn-5/2 residual, observed with each level's stated variance plus a fitted excess noise. The
amplitude, length scale and excess noise maximise the marginal likelihood. A Gaussian process was chosen over a
physically shaped model because the posterior variance between measured levels IS the interpolation uncertainty the
stopping rule needs (a bootstrap of a spline only sees the noise at the measured levels, never the gaps), and because
a threshold-and-saturation law is biased on a panel whose electronics reshape the voltage map. Monotonicity is
imposed on the posterior mean (weighted isotonic projection) before the table is built.

Table error. The table is built (analysis.lut.build_lut) on the model's mean at every gray. Its predicted error is the
RMS over the table's entries of the model's error at the entry's gray, less the mean over the entries (a piston no
pattern sees): mean(diag C) - mean(C) with C the posterior covariance between the entries' grays. Quantisation is a
property of the panel, not of what was measured, and is reported by the table itself.

Next levels. First any gap between neighbouring measured levels wider than GAP_RAD in phase is halved (levels too far
apart cannot be unwrapped safely). Then the gray whose measurement would remove the most of the table's predicted error
variance is chosen, ||P C_Tc||^2 / (C_cc + noise), P the piston-removing projector: it lies where the table's entries
have the largest and most shared predicted error. The posterior variance does not depend on the values measured, so a
batch is chosen greedily, each choice entered as if measured, until the predicted error falls below the tolerance.
Every choice is a pure function of the measured levels, so a resumed sweep chooses what the uninterrupted one did.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import linalg, optimize

from analysis.lut import build_lut, isotonic

COARSE_LEVELS = 17        # first, evenly spaced levels (16 intervals: a step of 1/16 of the range each)
GAP_RAD = 1.0             # neighbouring measured levels further apart than this in phase get a level between
BATCH = 4                 # levels chosen per decision at most
TABLE_SAMPLES = 256       # table entries the predicted error is evaluated on (evenly spaced)
CANDIDATES = 1024         # candidate grays considered per choice at most (every gray up to 10 bits)
LENGTH_BOUNDS = (0.02, 1.0)    # Matérn length scale, as a fraction of the gray range
AMPLITUDE_BOUNDS = (1e-4, 30.0)  # rad
EXCESS_BOUNDS = (1e-5, 0.3)      # rad, noise beyond the levels' stated std
JITTER = 1e-10


def default_budget(bit_depth: int) -> int:
    """Levels an adaptive sweep may measure at most by default: 48 at 8 bits, 72 at 10, 96 at 12."""
    return 12 * (int(bit_depth) - 4)


def coarse_levels(gray_max: int, count: int = COARSE_LEVELS) -> list[int]:
    """The first levels of an adaptive sweep: ``count`` grays evenly spread over 0..gray_max."""
    return sorted({int(round(v)) for v in np.linspace(0, gray_max, count)})


def _matern52(r: np.ndarray) -> np.ndarray:
    s = math.sqrt(5.0) * r
    return (1.0 + s + s * s / 3.0) * np.exp(-s)


@dataclass(frozen=True)
class Hyper:
    """Kernel settings: residual amplitude (rad), length scale (fraction of the gray range), excess noise (rad)."""

    amplitude_rad: float
    length: float
    excess_rad: float


@dataclass(frozen=True, eq=False)
class CurveModel:
    """A fitted Gaussian-process model of s * phi(g) (rad, rising), with its posterior at any gray.

    ``gray``/``value_rad``/``std_rad`` are the measured levels (value = s * phase); ``shape_rad`` the earlier curve at
    every gray (recalibration) or None, ``shape_std_rad`` its std: the earlier curve's error, rescaled, is common to
    every new fit and is added to the posterior (per gray, uncorrelated). Use ``fit_model`` to make one.
    """

    gray_max: int
    sign: int
    gray: np.ndarray
    value_rad: np.ndarray
    std_rad: np.ndarray
    hyper: Hyper
    shape_rad: np.ndarray | None
    shape_std_rad: np.ndarray | None
    _chol: tuple  # (cho_factor of K, H, beta, K^-1 (y - H beta), cho_factor of H^T K^-1 H)
    birge: float = 1.0  # posterior variances are multiplied by this (>= 1, from the leave-one-out check)

    def _basis(self, gray) -> np.ndarray:
        x = np.asarray(gray, float) / self.gray_max
        columns = [np.ones_like(x), x]
        if self.shape_rad is not None:
            columns.append(np.interp(gray, np.arange(self.shape_rad.size), self.shape_rad))
        return np.column_stack(columns)

    def _kernel(self, ga, gb) -> np.ndarray:
        xa = np.asarray(ga, float)[:, None] / self.gray_max
        xb = np.asarray(gb, float)[None, :] / self.gray_max
        return self.hyper.amplitude_rad**2 * _matern52(np.abs(xa - xb) / self.hyper.length)

    def mean_rad(self, gray) -> np.ndarray:
        """Posterior mean of s * phi (rad) at ``gray``."""
        cho, _, beta, alpha, _ = self._chol
        return self._basis(gray) @ beta + self._kernel(gray, self.gray) @ alpha

    def covariance(self, ga, gb=None) -> np.ndarray:
        """Posterior covariance (rad^2) of the model between grays ``ga`` and ``gb`` (default ``ga``)."""
        gb = ga if gb is None else gb
        cho, h, _, _, a_cho = self._chol
        ka, kb = self._kernel(self.gray, ga), self._kernel(self.gray, gb)
        ra = self._basis(ga).T - h.T @ linalg.cho_solve(cho, ka)
        rb = self._basis(gb).T - h.T @ linalg.cho_solve(cho, kb)
        cov = self.birge * (self._kernel(ga, gb) - ka.T @ linalg.cho_solve(cho, kb)
                            + ra.T @ linalg.cho_solve(a_cho, rb))
        return cov + np.equal.outer(np.asarray(ga), np.asarray(gb)) * np.outer(self._shape_std(ga), self._shape_std(gb))

    def _shape_std(self, gray) -> np.ndarray:
        """The earlier curve's std at ``gray``, rescaled by the fitted scale (0 without an earlier curve)."""
        if self.shape_std_rad is None:
            return np.zeros(np.size(gray))
        return abs(float(self._chol[2][2])) * self.shape_std_rad[np.asarray(gray, int)]

    def std(self, gray) -> np.ndarray:
        """Posterior standard deviation (rad) of the model at ``gray``."""
        gray = np.atleast_1d(gray)
        cho, h, _, _, a_cho = self._chol
        k = self._kernel(self.gray, gray)
        r = self._basis(gray).T - h.T @ linalg.cho_solve(cho, k)
        var = (self.hyper.amplitude_rad**2 - np.sum(k * linalg.cho_solve(cho, k), axis=0)
               + np.sum(r * linalg.cho_solve(a_cho, r), axis=0))
        return np.sqrt(np.maximum(self.birge * var, 0.0) + self._shape_std(gray) ** 2)

    def curve(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Every gray, the model's phase (rad, in the measured direction, non-decreasing in s * phi) and its std."""
        grays = np.arange(self.gray_max + 1)
        std = self.std(grays)
        rising = isotonic(self.mean_rad(grays), 1.0 / np.maximum(std, 1e-9) ** 2)
        return grays, self.sign * rising, std

    def with_levels(self, extra_grays, noise_rad: float) -> "CurveModel":
        """The same model with levels added at ``extra_grays`` as if measured with ``noise_rad`` (for choosing)."""
        extra = np.asarray(extra_grays, int)
        gray = np.r_[self.gray, extra]
        value = np.r_[self.value_rad, self.mean_rad(extra)] if extra.size else self.value_rad
        std = np.r_[self.std_rad, np.full(extra.size, noise_rad)]
        return _condition(self.gray_max, self.sign, gray, value, std, self.hyper, self.shape_rad, self.shape_std_rad,
                          birge=self.birge)  # levels not measured yet say nothing about the stated stds


def _condition(gray_max, sign, gray, value, std, hyper, shape, shape_std=None, birge=None) -> CurveModel:
    model = CurveModel(gray_max, sign, np.asarray(gray, int), np.asarray(value, float), np.asarray(std, float),
                       hyper, shape, shape_std, ())
    k = model._kernel(gray, gray) + np.diag(std**2 + hyper.excess_rad**2)
    k[np.diag_indices_from(k)] += JITTER * max(hyper.amplitude_rad**2, 1e-12)
    cho = linalg.cho_factor(k, lower=True)
    h = model._basis(gray)
    a = h.T @ linalg.cho_solve(cho, h)
    a_cho = linalg.cho_factor(a + np.eye(a.shape[0]) * 1e-12 * np.trace(a), lower=True)
    beta = linalg.cho_solve(a_cho, h.T @ linalg.cho_solve(cho, value))
    alpha = linalg.cho_solve(cho, value - h @ beta)
    object.__setattr__(model, "_chol", (cho, h, beta, alpha, a_cho))
    if birge is not None:
        object.__setattr__(model, "birge", birge)
        return model
    # Leave-one-out check (R&W eq. 5.12 with the basis projected out): each level predicted from the others with
    # the variance the model claims. Levels whose stated std is too small show up as z-scores above 1; the model's
    # variances are scaled by their mean square, never down (a Birge ratio).
    kinv = linalg.cho_solve(cho, np.eye(gray.size))
    kh = kinv @ h
    q = kinv - kh @ linalg.cho_solve(a_cho, kh.T)
    dof = gray.size - h.shape[1]
    if dof >= 4:
        z2 = alpha**2 / np.maximum(np.diag(q), 1e-300)
        object.__setattr__(model, "birge", max(1.0, float(np.mean(z2))))
    return model


def _neg_log_evidence(theta, x, value, noise_var, basis) -> float:
    """Minus the log marginal likelihood with the basis coefficients integrated out (R&W eq. 2.45)."""
    amplitude, length, excess = np.exp(theta)
    k = amplitude**2 * _matern52(np.abs(x[:, None] - x[None, :]) / length)
    k[np.diag_indices_from(k)] += noise_var + excess**2 + JITTER * amplitude**2
    try:
        chol = np.linalg.cholesky(k)
    except np.linalg.LinAlgError:
        return 1e30
    wy = linalg.solve_triangular(chol, value, lower=True, check_finite=False)
    wh = linalg.solve_triangular(chol, basis, lower=True, check_finite=False)
    a = wh.T @ wh
    try:
        a_chol = np.linalg.cholesky(a + np.eye(a.shape[0]) * 1e-12 * np.trace(a))
    except np.linalg.LinAlgError:
        return 1e30
    proj = linalg.solve_triangular(a_chol, wh.T @ wy, lower=True, check_finite=False)
    return float(0.5 * (wy @ wy - proj @ proj) + np.sum(np.log(np.diag(chol))) + np.sum(np.log(np.diag(a_chol))))


def fit_model(gray, phase_rad, std_rad, gray_max: int, sign: int = 1, shape_rad=None,
              shape_std_rad=None) -> CurveModel:
    """Fit the model to measured levels (ascending grays, phase in the measured direction, std) of a curve.

    ``sign`` is the curve's direction (the model works on sign * phase); ``shape_rad`` an earlier curve of the panel
    at every gray 0..gray_max (in the same direction) whose rescaled copy becomes part of the mean.
    """
    gray = np.asarray(gray, int)
    if sign not in (1, -1):
        raise ValueError(f"sign: expected +1 or -1, got {sign!r}")
    if gray.size < 4:
        raise ValueError(f"gray: expected at least 4 measured levels for the model, got {gray.size}")
    if np.any(np.diff(gray) <= 0) or gray[0] < 0 or gray[-1] > gray_max:
        raise ValueError(f"gray: expected ascending gray levels in [0, {gray_max}]")
    value = sign * np.asarray(phase_rad, float)
    std = np.asarray(std_rad, float)
    if not (np.all(np.isfinite(value)) and np.all(np.isfinite(std)) and np.all(std >= 0)):
        raise ValueError("phase_rad, std_rad: expected finite phases and non-negative stds")
    shape = shape_std = None
    if shape_rad is not None:
        shape = sign * np.asarray(shape_rad, float)
        if shape.shape != (gray_max + 1,):
            raise ValueError(f"shape_rad: expected the earlier curve at all {gray_max + 1} grays, got {shape.shape}")
        shape_std = np.zeros(shape.shape) if shape_std_rad is None else np.asarray(shape_std_rad, float)
    # a starting amplitude from the scatter about a straight line, so the search starts on the data's own scale
    line = np.polyval(np.polyfit(gray, value, 1), gray)
    a0 = float(np.clip(np.std(value - line), 1e-3, 10.0))
    e0 = float(np.clip(np.median(std), 1e-4, 0.1))
    bounds = [tuple(np.log(b)) for b in (AMPLITUDE_BOUNDS, LENGTH_BOUNDS, EXCESS_BOUNDS)]
    template = _condition(gray_max, sign, gray, value, std, Hyper(1.0, 0.1, 1e-3), shape)
    args = (gray / gray_max, value, std**2, template._basis(gray))
    best = None
    for length in (0.08, 0.3):  # two starts: the evidence can have a short- and a long-scale optimum
        fit = optimize.minimize(_neg_log_evidence, np.log([a0, length, e0]),
                                args=args, method="L-BFGS-B", bounds=bounds)
        if best is None or fit.fun < best.fun:
            best = fit
    return _condition(gray_max, sign, gray, value, std, Hyper(*np.exp(best.x)), shape, shape_std)


@dataclass(frozen=True, eq=False)
class TablePrediction:
    """The table the model gives and its predicted error (rad): RMS over entries, piston removed."""

    table_gray: np.ndarray  # every entry's gray
    sample_gray: np.ndarray  # the entries the error is evaluated on
    rms_rad: float
    entry_std_rad: np.ndarray  # per sampled entry, piston removed


def _sample(table_gray: np.ndarray) -> np.ndarray:
    step = max(1, table_gray.size // TABLE_SAMPLES)
    return np.asarray(table_gray[::step], int)


def _table_error(model: CurveModel, sample: np.ndarray) -> tuple[float, np.ndarray]:
    cov = model.covariance(sample)
    # error of entry i less the entries' mean error: C_ii - 2 mean_j C_ij + mean C
    entry_var = np.diag(cov) - 2 * cov.mean(axis=1) + cov.mean()
    return float(math.sqrt(max(float(np.diag(cov).mean() - cov.mean()), 0.0))), np.sqrt(np.maximum(entry_var, 0.0))


def predict_table(model: CurveModel, bit_depth: int, range_rad: float | None = None) -> TablePrediction:
    """Build the table on the model's curve and predict its error (see the module docstring)."""
    grays, phase, _ = model.curve()
    lut = build_lut(grays, model.sign * phase, None, bit_depth=bit_depth, range_rad=range_rad, smooth=False)
    sample = _sample(lut.gray)
    rms, entry = _table_error(model, sample)
    return TablePrediction(lut.gray, sample, rms, entry)


def table_error_rad(table_gray, estimate_rad, truth_rad) -> float:
    """RMS error (rad) of the phases a table's entries deliver, piston removed: estimate vs truth at its grays.

    ``estimate_rad`` and ``truth_rad`` are curves over every gray (same direction); the table's entries index them.
    """
    g = np.asarray(table_gray, int)
    err = np.asarray(estimate_rad, float)[g] - np.asarray(truth_rad, float)[g]
    return float(np.sqrt(np.mean((err - err.mean()) ** 2)))


def unwrap_gaps(model: CurveModel) -> list[int]:
    """Midpoints of gaps between neighbouring measured levels wider than GAP_RAD in phase, widest first."""
    g, v = model.gray, model.value_rad
    wide = [(abs(v[i + 1] - v[i]), (int(g[i]) + int(g[i + 1])) // 2) for i in range(g.size - 1)
            if abs(v[i + 1] - v[i]) > GAP_RAD and g[i + 1] - g[i] > 1]
    return [mid for _, mid in sorted(wide, reverse=True)]


def next_levels(model: CurveModel, table: TablePrediction, tolerance_rad: float, room: int,
                batch: int = BATCH, gaps=None, exclude=()) -> list[int]:
    """Grays to measure next (at most ``min(batch, room)``), chosen as the module docstring says; [] if none help.

    ``gaps`` are unwrapping midpoints to measure first (default: unwrap_gaps(model)); grays in ``exclude`` (measured
    already, even if the curve left them out as outliers) are never chosen.
    """
    count = min(batch, room)
    if count <= 0:
        return []
    measured = set(model.gray.tolist()) | {int(g) for g in exclude}
    gaps = [g for g in (unwrap_gaps(model) if gaps is None else gaps) if g not in measured]
    if gaps:
        return sorted(gaps[:count])
    stride = max(1, (model.gray_max + 1) // CANDIDATES)
    candidates = np.array([g for g in range(0, model.gray_max + 1, stride) if g not in measured])
    noise = float(math.sqrt(np.median(model.std_rad**2) + model.hyper.excess_rad**2))
    chosen: list[int] = []
    current = model
    m = table.sample_gray.size
    for _ in range(count):
        if candidates.size == 0:
            break
        cross = current.covariance(table.sample_gray, candidates)
        centred = cross - cross.mean(axis=0, keepdims=True)
        gain = np.sum(centred**2, axis=0) / m / (current.std(candidates) ** 2 + noise**2)
        best = int(np.argmax(gain))
        if gain[best] <= 0:
            break
        chosen.append(int(candidates[best]))
        candidates = np.delete(candidates, best)
        current = model.with_levels(chosen, noise)
        if _table_error(current, table.sample_gray)[0] < tolerance_rad:
            break
    return sorted(chosen)


@dataclass(frozen=True)
class Decision:
    """What an adaptive sweep does next: measure ``grays`` (empty: stop) and why."""

    grays: tuple[int, ...]
    predicted_rms_rad: float
    reason: str  # "tolerance" | "budget" | "exhausted" | "measure"


def decide(model: CurveModel, bit_depth: int, tolerance_rad: float, budget: int, measured: int,
           check_gaps: bool = True, exclude=()) -> Decision:
    """Stop when the table's predicted error is below the tolerance or the level budget is spent; else choose.

    ``check_gaps=False`` skips the unwrapping rule (a recalibration whose levels all fit the earlier shape);
    ``exclude`` are grays never to choose (see next_levels).
    """
    table = predict_table(model, bit_depth)
    gaps = unwrap_gaps(model) if check_gaps else []
    if table.rms_rad < tolerance_rad and not gaps:
        return Decision((), table.rms_rad, "tolerance")
    if measured >= budget:
        return Decision((), table.rms_rad, "budget")
    grays = next_levels(model, table, tolerance_rad, budget - measured, gaps=gaps, exclude=exclude)
    return Decision(tuple(grays), table.rms_rad, "measure" if grays else "exhausted")
