"""Phase-vs-gray curve from per-frame fringe results: cyclic correction, drift, level means, unwrapping,
direction, uncertainty budget, dips and a smooth fit.

Frames come in acquisition order with their gray, wrapped phase (rad), standard uncertainty (rad) and time (s);
optionally their fringe amplitude, which makes each frame's complex amplitude for the leak (cyclic-error) fit of
``analysis.cyclic``. Repeats of the reference gray spread through the sweep are drift references: their phase
against time is the piston drift. Repeats of a second reference gray (``scale_gray``) add the drift of the curve's
scale: the measured phase is modelled as (1 + s(t)) phi(g) + p(t), s = 0 at the first reference visit (or at a
time the caller names, such as the sweep's middle), so the curve is that of the panel as it was then. Every visit's noise enters the drift model and, through it, every level,
so the model has only as many terms as the visits show to be there.

Each level's standard uncertainty is a budget after the GUM (JCGM 100:2008), components combined in quadrature:
pixel noise (the estimator's stated std), frame scatter beyond it (type A, pooled over the levels), the drift
model's uncertainty, the cyclic correction's uncertainty (or the cyclic error left in when it is not applied), and
a systematic floor from the distortion the circle model leaves. Where the levels lie closer to a smooth curve than
independent frames would put them (periodic flicker averages out of back-to-back frames), the frame scatter takes
only the share they show.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np
from scipy import interpolate, optimize, stats

from analysis.cyclic import MIN_ARC_RAD, LeakFit, fit_leak

MAX_DRIFT_DEGREE = 3     # drift is modelled as a polynomial in time of at most this degree
DRIFT_TERM_CHI2 = 9.0    # a higher drift degree is kept only if it lowers chi-square this much (a 3-sigma term)
SCALE_EXTRA_DEGREES = 1  # the scale drift takes this many more powers of time than its visits show (see fit_drift)
OUTLIER_SIGMAS = 5.0     # frames or levels this many robust standard deviations off are rejected
SMOOTH_KNOT_SPACING = 16  # gray levels between knots of the monotone smooth fit
DIP_SIGMAS = 3.0         # a fall against the curve's direction this many combined standard errors deep is a dip
OWN_SCATTER_P = 0.01     # a level whose frames scatter beyond the pooled spread at this level uses its own spread
SCATTER_NEIGHBOURS = 8   # the frames' excess spread is pooled over this many measured levels either side
SCALE_SIGMAS = 3.0       # a scale drift seen this many standard errors from zero (one reference gray) is warned of
ROUGHNESS_HALF_WINDOW = 6  # levels either side of a level whose cubic predicts it, for the levels' excess scatter
ROUGHNESS_MIN_LEVELS = 64  # levels a curve needs before its roughness is judged ...
ROUGHNESS_MAX_STEP = 4     # ... at most this many grays apart (median): sparse levels bend beyond a cubic's reach
ORDERED_RHO = 0.5          # levels whose times follow gray this closely (|Spearman rho|) make an ordered sweep
DIRECTIONS = {"rising": 1, "falling": -1}
PHASE_CONVENTION = ("phase is the delay the panel adds to the reflected field (the field is multiplied by "
                    "exp(+i phi(g)), waves written exp(i(k.r - w t))), relative to the reference gray")


class CurveError(ValueError):
    """The frames cannot make a phase curve; the message names what is missing."""


@dataclass(frozen=True)
class DriftModel:
    """Drift of the fringe phase (rad) against time (s): piston p(t) and, with a second reference gray, scale s(t).

    The measured phase is (1 + s(t)) phi(g) + p(t), phi relative to the reference gray. ``coefficients`` are p's,
    a polynomial in (t - t0), highest power first (as numpy.polyval takes them); ``scale_coefficients`` those of
    q(t) = (1 + s(t)) phi(scale_gray), the second reference's phase above the first, so s(t) = q(t) / q(ts) - 1
    with ts = ``scale_at_s`` (None: t0), the time whose panel the corrected curve describes.
    ``covariance`` (rad^2) is that of the piston coefficients, ``joint_covariance`` that of piston then scale
    coefficients; ``chi2`` the visits' chi-square about the model, near the visits less the terms when their
    uncertainties are honest. Without a second reference the scale is zero and its fields are empty.
    """

    coefficients: tuple[float, ...]
    t0_s: float
    n_visits: int
    span_rad: float  # largest minus smallest piston over the sweep
    covariance: tuple[tuple[float, ...], ...] = ()
    chi2: float = 0.0
    scale_coefficients: tuple[float, ...] = ()
    scale_gray: int | None = None
    scale_visits: int = 0
    joint_covariance: tuple[tuple[float, ...], ...] = ()
    scale_span: float = 0.0  # largest minus smallest s(t) over the sweep (dimensionless)
    scale_at_s: float | None = None

    def __call__(self, t_s: np.ndarray) -> np.ndarray:
        return np.polyval(self.coefficients, np.asarray(t_s, dtype=float) - self.t0_s)

    def scale(self, t_s: np.ndarray) -> np.ndarray:
        """Relative scale change s(t) at times ``t_s`` (s); zero without a second reference gray."""
        t = np.asarray(t_s, dtype=float)
        if not self.scale_coefficients:
            return np.zeros_like(t)
        return np.polyval(self.scale_coefficients, t - self.t0_s) / self._q_ref() - 1.0

    def _q_ref(self) -> float:
        """q at the time the curve refers to."""
        at = self.t0_s if self.scale_at_s is None else self.scale_at_s
        return float(np.polyval(self.scale_coefficients, at - self.t0_s))

    def sensitivity(self, t_s: np.ndarray, phase_rad: np.ndarray | float = 0.0) -> tuple[np.ndarray, np.ndarray]:
        """The drift-corrected phases' derivatives with respect to the model's coefficients at times ``t_s`` (s)
        for phases ``phase_rad`` (one row per time), and the coefficients' covariance (rad^2): the model's errors
        at any two times are correlated through it.

        The corrected phase is (measured - p(t)) / (1 + s(t)); with a piston only, -1 times p's powers of time.
        """
        t = np.atleast_1d(np.asarray(t_s, dtype=float)) - self.t0_s
        piston = np.vander(t, len(self.coefficients))
        if not self.scale_coefficients:
            cov = np.asarray(self.covariance) if self.covariance else np.zeros((piston.shape[1],) * 2)
            return -piston, cov
        phase = np.broadcast_to(np.asarray(phase_rad, dtype=float), t.shape)
        q = np.asarray(self.scale_coefficients)
        powers = np.vander(t, q.size)
        at = np.vander(np.atleast_1d((self.t0_s if self.scale_at_s is None else self.scale_at_s) - self.t0_s),
                       q.size)[0]
        b0 = self._q_ref()
        one_plus_s = (powers @ q) / b0
        ds_dq = powers / b0 - np.outer(powers @ q, at) / b0**2
        jac = np.column_stack([-piston / one_plus_s[:, None], -(phase / one_plus_s)[:, None] * ds_dq])
        return jac, np.asarray(self.joint_covariance)

    def std_rad(self, t_s: np.ndarray, phase_rad: np.ndarray | float = 0.0) -> np.ndarray:
        """Standard uncertainty (rad) of the drift correction at times ``t_s`` (s) for phases ``phase_rad``, from
        the visits' noise through the model's covariance (see ``sensitivity``)."""
        jac, cov = self.sensitivity(t_s, phase_rad)
        return np.sqrt(np.maximum(np.einsum("ij,jk,ik->i", jac, cov, jac), 0.0))

    def summary(self, time_base: str = "time_s") -> dict:
        """JSON-ready description of the model (coefficients in rad per unit of the time base to a power)."""
        out = {"model": f"piston: polynomial of degree {len(self.coefficients) - 1} in time", "t0_s": self.t0_s,
               "coefficients_rad_per_s_power": list(self.coefficients), "reference_visits": self.n_visits,
               "span_rad": self.span_rad, "chi2": self.chi2, "time_base": time_base}
        if self.scale_coefficients:
            out.update(scale_model=f"scale: polynomial of degree {len(self.scale_coefficients) - 1} in time, "
                                   f"from visits of gray {self.scale_gray}",
                       scale_gray=self.scale_gray, scale_visits=self.scale_visits,
                       scale_coefficients_rad_per_s_power=list(self.scale_coefficients), scale_span=self.scale_span,
                       curve_at_s=self.t0_s if self.scale_at_s is None else self.scale_at_s)
        return out


@dataclass(frozen=True)
class Dip:
    """A fall of the measured curve against its direction: from ``from_gray`` to ``to_gray``, ``depth_rad`` deep,
    ``significance`` combined standard errors of the two levels."""

    from_gray: int
    to_gray: int
    depth_rad: float
    significance: float

    def summary(self) -> dict:
        return {"from_gray": self.from_gray, "to_gray": self.to_gray, "depth_rad": self.depth_rad,
                "significance_sigma": self.significance}


@dataclass(frozen=True)
class CurveSummary:
    """Figures of a phase curve: range (rad), first gray at 2 pi (None if never), fit rms (rad), worst std (rad),
    and the dips found."""

    range_rad: float
    first_gray_2pi: int | None
    smooth_rms_rad: float | None
    worst_std_rad: float
    worst_std_gray: int
    dips: tuple[Dip, ...] = ()

    @property
    def range_pi(self) -> float:
        """Range in multiples of pi."""
        return self.range_rad / math.pi


@dataclass(frozen=True, eq=False)
class UncertaintyBudget:
    """Per-level standard uncertainties (rad) by source, combined in quadrature (GUM, JCGM 100:2008).

    Type A: ``pixel_noise_rad`` (the estimator's stated std over the level's frames), ``frame_scatter_rad`` (the
    frames' spread beyond it: pooled over all levels, or the level's own where it scatters significantly more),
    ``drift_rad`` (the drift model's, from the visits' noise). Type B: ``cyclic_rad`` (the cyclic correction's
    uncertainty, or the cyclic error left in where it is not applied), ``floor_rad`` (distortion the leak model
    leaves, from the radial residual's harmonics). ``excess_scatter_rad`` is the pooled per-frame scatter beyond
    the stated std, ``scatter_dof`` its degrees of freedom, ``own_scatter_grays`` the levels using their own,
    ``scatter_share`` the share of the frame scatter the levels' spread supports (see scatter_share).
    """

    gray: np.ndarray
    pixel_noise_rad: np.ndarray
    frame_scatter_rad: np.ndarray
    drift_rad: np.ndarray
    cyclic_rad: np.ndarray
    floor_rad: np.ndarray
    excess_scatter_rad: float = 0.0
    scatter_dof: int = 0
    own_scatter_grays: tuple[int, ...] = ()
    scatter_share: float = 1.0  # of the frames' scatter over their count, as the levels' spread supports it

    COMPONENTS = ("pixel_noise_rad", "frame_scatter_rad", "drift_rad", "cyclic_rad", "floor_rad")

    @property
    def combined_rad(self) -> np.ndarray:
        """Combined standard uncertainty (rad) of each level."""
        return np.sqrt(sum(getattr(self, name) ** 2 for name in self.COMPONENTS))

    def select(self, keep: np.ndarray) -> UncertaintyBudget:
        """The budget of the levels where ``keep`` is true."""
        return UncertaintyBudget(self.gray[keep], *(getattr(self, n)[keep] for n in self.COMPONENTS),
                                 self.excess_scatter_rad, self.scatter_dof, self.own_scatter_grays,
                                 self.scatter_share)

    def summary(self) -> dict:
        """JSON-ready budget: each component's median and largest value over the levels (rad), and the pooling."""
        kinds = {"pixel_noise_rad": "A", "frame_scatter_rad": "A", "drift_rad": "A", "cyclic_rad": "B",
                 "floor_rad": "B"}
        parts = {name[:-4]: {"type": kinds[name], "median_rad": float(np.median(getattr(self, name))),
                             "max_rad": float(np.max(getattr(self, name)))} for name in self.COMPONENTS}
        combined = self.combined_rad
        return {"method": "GUM (JCGM 100:2008): standard uncertainties combined in quadrature", "components": parts,
                "combined_median_rad": float(np.median(combined)), "combined_max_rad": float(np.max(combined)),
                "excess_frame_scatter_rad": self.excess_scatter_rad, "scatter_dof": self.scatter_dof,
                "own_scatter_grays": list(self.own_scatter_grays), "frame_scatter_share": self.scatter_share}

    def rows(self) -> list[dict]:
        """One JSON-ready dict per level: gray and each component (rad)."""
        return [{"gray": int(g), **{n: float(getattr(self, n)[i]) for n in self.COMPONENTS},
                 "combined_rad": float(self.combined_rad[i])} for i, g in enumerate(self.gray)]


@dataclass(frozen=True)
class PhaseCurve:
    """Phase (rad) against gray relative to the reference gray, one entry per measured gray (ascending).

    ``std_rad`` is the combined standard uncertainty of ``budget``. ``direction`` is "rising" or "falling";
    ``direction_basis`` how it was known ("assumed" when the caller did not say). ``sign`` is the factor that turned
    fringe phase into panel phase. ``cyclic`` is the leak fit (None without amplitudes); ``warnings`` what the
    analysis could not remove.
    """

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
    direction: str = "rising"
    direction_basis: str = "assumed"
    budget: UncertaintyBudget | None = None
    cyclic: LeakFit | None = None
    warnings: tuple[str, ...] = field(default=())

    def analysis_fields(self, time_base: str = "time_s") -> dict:
        """JSON-ready figures of the corrections and the uncertainty, for analysis.json (phases in rad)."""
        return {
            "direction": self.direction, "direction_basis": self.direction_basis, "sign": self.sign,
            "phase_convention": PHASE_CONVENTION,
            "drift": None if self.drift is None else self.drift.summary(time_base),
            "cyclic": None if self.cyclic is None else self.cyclic.summary(),
            "budget": None if self.budget is None else self.budget.summary(),
            "budget_per_level": [] if self.budget is None else self.budget.rows(),
            "dips": [d.summary() for d in self.summary.dips], "warnings": list(self.warnings),
        }


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


def _visit_means(time_s, phase_rad, std_rad, visit, pooled=False):
    """Mean time (s), wrapped mean phase (rad) and its error (rad) of each visit, in visit order. ``pooled``: the
    frames' stds already hold the frames' scatter, pooled over the sweep; a visit's own spread is not consulted."""
    visits = np.unique(visit)
    t = np.array([time_s[visit == v].mean() for v in visits])
    if pooled:
        means = [(float(np.angle(np.mean(np.exp(1j * phase_rad[visit == v])))),
                  math.sqrt(float(np.mean(std_rad[visit == v] ** 2)) / np.sum(visit == v))) for v in visits]
    else:
        means = [circular_mean(phase_rad[visit == v], std_rad[visit == v]) for v in visits]
    return t, np.array([m for m, _ in means]), np.array([max(s, 1e-9) for _, s in means])


def _polyfit_select(x, y, err, blocks):
    """Weighted least squares of y on polynomial blocks in x, each block's degree raised while it pays.

    ``blocks`` is a list of row masks: block k adds powers of x on its rows. Degrees start at 0 and the block whose
    next power lowers chi-square most gets it, while that lowers it by DRIFT_TERM_CHI2 and terms stay below rows;
    a second block (the scale drift) then takes SCALE_EXTRA_DEGREES more powers where rows allow (see fit_drift).
    Returns (degrees, coefficients per block highest first, covariance, chi2), x already scaled.
    """
    def fit(degrees):
        cols = []
        for mask, d in zip(blocks, degrees):
            cols.append(np.vander(x, d + 1) * mask[:, None])
        design = np.hstack(cols) / err[:, None]
        cov = np.linalg.pinv(design.T @ design)
        coeffs = cov @ design.T @ (y / err)
        return coeffs, cov, float(np.sum((design @ coeffs - y / err) ** 2))

    degrees = [0] * len(blocks)
    best = fit(degrees)
    while True:
        trials = []
        for k, mask in enumerate(blocks):
            trial_deg = degrees.copy()
            trial_deg[k] += 1
            if trial_deg[k] > min(MAX_DRIFT_DEGREE, int(mask.sum()) - 1) or sum(trial_deg) + len(blocks) > x.size:
                continue
            trials.append((fit(trial_deg), trial_deg))
        if not trials:
            break
        (coeffs, cov, chi2), trial_deg = min(trials, key=lambda tr: tr[0][2])
        if best[2] - chi2 < DRIFT_TERM_CHI2:
            break
        best, degrees = (coeffs, cov, chi2), trial_deg
    if len(blocks) == 2:  # the scale's extra powers, as far as its visits and the rows allow
        extra = min(degrees[1] + SCALE_EXTRA_DEGREES, MAX_DRIFT_DEGREE, int(blocks[1].sum()) - 1,
                    x.size - len(blocks) - degrees[0]) - degrees[1]
        if extra > 0:
            degrees = [degrees[0], degrees[1] + extra]
            best = fit(degrees)
    return degrees, *best


def fit_drift(time_s: np.ndarray, phase_rad: np.ndarray, std_rad: np.ndarray, visit: np.ndarray,
              pooled: bool = False) -> DriftModel:
    """Piston drift polynomial through reference frames (time, wrapped phase, std, visit number).

    Frames of one visit are averaged first; visits are unwrapped in time order. The degree starts at 0 and goes up
    while one more power lowers the visits' weighted chi-square by DRIFT_TERM_CHI2 or more, up to MAX_DRIFT_DEGREE
    (and the number of visits less one): a term the visits cannot show to be there only carries their noise into
    the levels. The scale drift (fit_drift_scale) then takes SCALE_EXTRA_DEGREES more: a warming panel's scale
    bends in time (the order parameter's law is not linear) by less than its visits can show, and the line's bias
    rescales every level at once, unstated, where the extra power only widens the stated std (model selection
    bias; the extra term's noise is in the covariance). The visits' uncertainties must be honest for this test;
    circular_mean never lets them fall below the scatter of a visit's own frames, unless ``pooled`` says that the
    frames' ``std_rad`` already holds their scatter, pooled over the sweep (phase_curve's; a few frames' own
    spread is a poor estimate of it, and taking the larger of the two overstates it).
    """
    t, phi, err = _visit_means(np.asarray(time_s, float), np.asarray(phase_rad, float), np.asarray(std_rad, float),
                               np.asarray(visit), pooled)
    return _drift_model(t, np.unwrap(phi), err, np.zeros(t.size, bool), None)


def fit_drift_scale(time_s, phase_rad, std_rad, visit, is_scale, scale_phase_rad: float,
                    scale_gray: int, pooled: bool = False) -> DriftModel:
    """Piston and scale drift through visits of two reference grays (time, wrapped phase, std, visit, which gray).

    ``is_scale`` marks frames of the second reference gray, ``scale_phase_rad`` an estimate of its phase above the
    first (from the levels, to pick its 2 pi branch). The first gray's visits give p(t); the second's give
    p(t) + q(t), q(t) = (1 + s(t)) phi(scale_gray); both polynomials are fitted together, each with the degree its
    visits show (see fit_drift, also for ``pooled``).
    """
    time_s, phase_rad, std_rad = (np.asarray(a, float) for a in (time_s, phase_rad, std_rad))
    visit, is_scale = np.asarray(visit), np.asarray(is_scale, bool)
    ta, pa, ea = _visit_means(time_s[~is_scale], phase_rad[~is_scale], std_rad[~is_scale], visit[~is_scale], pooled)
    tb, pb, eb = _visit_means(time_s[is_scale], phase_rad[is_scale], std_rad[is_scale], visit[is_scale], pooled)
    pa = np.unwrap(pa)
    piston = _drift_model(ta, pa, ea, np.zeros(ta.size, bool), None)
    base = piston(tb) + scale_phase_rad
    pb = base + np.angle(np.exp(1j * (pb - base)))
    order = np.argsort(np.r_[ta, tb], kind="stable")
    return _drift_model(np.r_[ta, tb][order], np.r_[pa, pb][order], np.r_[ea, eb][order],
                        np.r_[np.zeros(ta.size, bool), np.ones(tb.size, bool)][order], scale_gray)


def _drift_model(t, phi, err, is_scale, scale_gray) -> DriftModel:
    """The DriftModel of visit means (unwrapped) at times t; ``is_scale`` rows also carry q(t)."""
    t0 = float(t[~is_scale][0])
    # Scaled time keeps the normal equations well conditioned; coefficients are converted back below.
    span = max(float(np.ptp(t)), 1e-9)
    x = (t - t0) / span
    blocks = [np.ones(t.size, bool)] + ([is_scale] if is_scale.any() else [])
    degrees, coeffs, cov, chi2 = _polyfit_select(x, phi, err, blocks)
    # Scatter the visits' errors still miss widens the covariance by the Birge ratio, so it reaches the levels.
    cov = cov * max(chi2 / max(t.size - sum(d + 1 for d in degrees), 1), 1.0)
    unscale = np.concatenate([span ** -np.arange(d, -1, -1.0) for d in degrees])
    coeffs, cov = coeffs * unscale, cov * np.outer(unscale, unscale)
    n_p = degrees[0] + 1
    ts = np.linspace(t.min(), t.max(), 64) - t0
    values = np.polyval(coeffs[:n_p], ts)
    as_tuple = lambda m: tuple(tuple(float(c) for c in row) for row in m)  # noqa: E731
    scale_fields = {}
    if len(degrees) == 2:
        q = coeffs[n_p:]
        s = np.polyval(q, ts) / q[-1] - 1
        scale_fields = dict(scale_coefficients=tuple(float(c) for c in q), scale_gray=int(scale_gray),
                            scale_visits=int(is_scale.sum()), joint_covariance=as_tuple(cov),
                            scale_span=float(s.max() - s.min()))
    return DriftModel(tuple(float(c) for c in coeffs[:n_p]), t0, int((~is_scale).sum()),
                      float(values.max() - values.min()), as_tuple(cov[:n_p, :n_p]), chi2, **scale_fields)


def isotonic_blocks(y: np.ndarray, weight: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Pool-adjacent-violators: the weighted least-squares non-decreasing fit's block means and block sizes."""
    means, weights, counts = [], [], []
    for value, w in zip(np.asarray(y, float), np.asarray(weight, float)):
        means.append(value)
        weights.append(w)
        counts.append(1)
        while len(means) > 1 and means[-2] > means[-1]:
            w_sum = weights[-2] + weights[-1]
            means[-2] = (means[-2] * weights[-2] + means[-1] * weights[-1]) / w_sum
            weights[-2] = w_sum
            counts[-2] += counts[-1]
            del means[-1], weights[-1], counts[-1]
    return np.array(means), np.array(counts, dtype=int)


def isotonic(y: np.ndarray, weight: np.ndarray) -> np.ndarray:
    """Weighted least-squares non-decreasing fit to ``y`` (pool-adjacent-violators)."""
    means, counts = isotonic_blocks(y, weight)
    return np.repeat(means, counts)


def find_dips(gray, phase_rad, std_rad, direction: int = 1) -> tuple[Dip, ...]:
    """Falls of a measured curve against its direction (+1 rising, -1 falling) that noise does not explain.

    The isotonic fit pools levels that go the wrong way into blocks. A block is a dip when its levels scatter about
    their mean more than noise does (chi-square beyond the DIP_SIGMAS two-sided normal tail for its degrees of
    freedom) and its deepest fall, from a level to a later one, exceeds DIP_SIGMAS combined standard errors: a
    single noisy pair or a long flat stretch of noise passes neither.
    """
    g = np.asarray(gray)
    y = direction * np.asarray(phase_rad, float)
    std = np.maximum(np.asarray(std_rad, float), 1e-12)
    _, counts = isotonic_blocks(y, 1 / std**2)
    p_limit = 2 * stats.norm.sf(DIP_SIGMAS)
    dips, start = [], 0
    for count in counts:
        idx = np.arange(start, start + count)
        start += count
        if count < 2:
            continue
        w = 1 / std[idx] ** 2
        mean = np.sum(w * y[idx]) / w.sum()
        if stats.chi2.sf(float(np.sum(w * (y[idx] - mean) ** 2)), count - 1) > p_limit:
            continue
        fall = y[idx][:, None] - y[idx][None, :]
        sigma = np.hypot(std[idx][:, None], std[idx][None, :])
        z = np.triu(fall / sigma, 1)
        i, j = np.unravel_index(np.argmax(z), z.shape)
        if z[i, j] > DIP_SIGMAS:
            dips.append(Dip(int(g[idx[i]]), int(g[idx[j]]), float(fall[i, j]), float(z[i, j])))
    return tuple(dips)


def monotone_fit(gray: np.ndarray, phase_rad: np.ndarray, std_rad: np.ndarray, direction: int = 1) -> np.ndarray:
    """Smooth monotone fit of phase (rad) against gray, rising (``direction`` +1) or falling (-1).

    The curve is c0 + sum_k w_k I_k(g) with I_k integrals of cubic B-splines (knots every SMOOTH_KNOT_SPACING
    grays), weights 1/std, and w_k >= 0, solved by bounded linear least squares on direction * phase; non-negative
    B-spline weights make a non-negative slope.
    """
    g, y = np.asarray(gray, float), direction * np.asarray(phase_rad, float)
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
    return direction * (design @ fit.x)


def _cumulative(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Running trapezoidal integral of y(x) from x[0]."""
    return np.concatenate([[0.0], np.cumsum(0.5 * (y[1:] + y[:-1]) * np.diff(x))])


def scale_drift_check(gray, phase_rad, std_rad, time_s) -> tuple[float, float]:
    """Scale change over the sweep (dimensionless) seen in the levels alone, and its standard uncertainty.

    A scale drift s(t) = beta (t - mean t) moves each level by beta phi (t - mean t). Fitted together with a
    smooth cubic spline in gray (knots every SMOOTH_KNOT_SPACING grays), beta is seen only when the levels were
    measured out of gray order; in gray order its uncertainty is large and nothing is claimed. The covariance is
    scaled by chi-square per degree of freedom when that exceeds 1.
    """
    g, y = np.asarray(gray, float), np.asarray(phase_rad, float)
    std, t = np.maximum(np.asarray(std_rad, float), 1e-12), np.asarray(time_s, float)
    span_t = max(float(np.ptp(t)), 1e-9)
    n_inner = max(int(np.ptp(g) // SMOOTH_KNOT_SPACING) - 1, 0)
    if g.size < n_inner + 4 + 3:
        return 0.0, math.inf
    knots = np.concatenate([[g.min()] * 4, np.linspace(g.min(), g.max(), n_inner + 2)[1:-1], [g.max()] * 4])
    basis = interpolate.BSpline.design_matrix(g, knots, 3).toarray()
    design = np.column_stack([basis, y * (t - t.mean()) / span_t]) / std[:, None]
    coef, *_ = np.linalg.lstsq(design, y / std, rcond=None)
    chi2 = float(np.sum((design @ coef - y / std) ** 2))
    cov = np.linalg.pinv(design.T @ design) * max(chi2 / max(g.size - design.shape[1], 1), 1.0)
    return float(coef[-1]), float(math.sqrt(max(cov[-1, -1], 0.0)))


def _visits(mask: np.ndarray, order: np.ndarray) -> np.ndarray:
    """Visit number of each frame where ``mask``: a masked frame after unmasked ones (in time order) starts one."""
    visit = np.zeros(mask.size, dtype=int)
    m = mask[order]
    visit[order] = np.cumsum(np.r_[True, ~m[:-1]] & m)
    return visit


@dataclass(frozen=True)
class _Levels:
    """Per-level statistics of drift-corrected frames (arrays over ascending grays)."""

    gray: np.ndarray
    mean_rad: np.ndarray       # circular mean, wrapped
    n: np.ndarray
    stated_var: np.ndarray     # mean of the frames' stated variances (rad^2)
    own_var: np.ndarray        # the frames' sample variance about their mean (rad^2; NaN for one frame)
    time_s: np.ndarray
    contrast: np.ndarray
    cyclic_rad: np.ndarray     # the cyclic correction's std, common to the level's frames
    keep: np.ndarray           # frames kept (outliers rejected)


def _level_stats(gray, phase, std, time_s, contrast, cyclic) -> _Levels:
    """Group frames by gray, reject outlier frames, and return each level's statistics."""
    levels = np.unique(gray)
    keep = np.ones(gray.size, dtype=bool)
    rows = []
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
        mean = float(np.angle(np.mean(np.exp(1j * phase[idx]))))
        dev = np.angle(np.exp(1j * (phase[idx] - mean)))
        own = float(np.sum(dev**2) / (idx.size - 1)) if idx.size >= 2 else math.nan
        c = float(np.nanmean(contrast[idx])) if np.isfinite(contrast[idx]).any() else math.nan
        rows.append((mean, idx.size, float(np.mean(std[idx] ** 2)), own, float(time_s[idx].mean()), c,
                     float(np.mean(cyclic[idx]))))
    cols = [np.array(c) for c in zip(*rows)]
    return _Levels(levels, cols[0], cols[1].astype(int), cols[2], cols[3], cols[4], cols[5], cols[6], keep)


def _frame_scatter(lv: _Levels) -> tuple[np.ndarray, np.ndarray, float, int, np.ndarray]:
    """Pixel-noise and frame-scatter standard errors (rad) of each level's mean, as type-A evaluations.

    The frames' spread beyond their stated std (vibration, flicker) is pooled over levels with two or more frames
    (JCGM 100:2008, 4.2.4): four frames alone give a spread uncertain by a factor of two. Each level takes the pool
    of its SCATTER_NEIGHBOURS neighbours either side, since the spread changes with gray (flicker follows the
    slope of phase against drive voltage; vibration does not change). A level whose own spread exceeds the pool
    of its neighbours (itself left out) at the OWN_SCATTER_P level of an F test uses its own. Returns pixel,
    scatter, the all-level pooled excess per frame (rad), its degrees of freedom and the levels on their own spread.
    The scatter over the frame count assumes frames independent; scatter_share tests that on the levels.
    """
    multi = lv.n >= 2
    near = lambda v: np.convolve(v, np.ones(2 * SCATTER_NEIGHBOURS + 1))[SCATTER_NEIGHBOURS:][:v.size]  # noqa: E731
    own = np.zeros(lv.n.size, dtype=bool)
    excess, dof = 0.0, 0
    for _ in range(5):  # levels on their own spread leave the pool, which may free others
        pool = multi & ~own
        dof = int(np.sum(lv.n[pool] - 1))
        if not dof:
            break
        excess = max(float(np.sum((lv.n[pool] - 1) * (lv.own_var[pool] - lv.stated_var[pool]))) / dof, 0.0)
        dof_each = np.where(pool, lv.n - 1, 0).astype(float)
        sum_each = np.where(pool, (lv.n - 1) * (np.nan_to_num(lv.own_var) - lv.stated_var), 0.0)
        # each level against its neighbours' pool (itself left out), not the whole curve's: flicker's gray
        # dependence would otherwise send whole stretches onto their own, noisier and selected-high spreads
        others = near(dof_each) - dof_each
        local = np.where(others > 0, (near(sum_each) - sum_each) / np.maximum(others, 1), excess)
        limit = stats.f.isf(OWN_SCATTER_P, np.maximum(lv.n - 1, 1), np.where(others > 0, others, dof))
        flagged = multi & (np.nan_to_num(lv.own_var) > (lv.stated_var + np.maximum(local, 0.0)) * limit)
        if np.array_equal(flagged, own):
            break
        own = flagged
    pool = multi & ~own
    dof_each = np.where(pool, lv.n - 1, 0).astype(float)
    sum_each = np.where(pool, (lv.n - 1) * (np.nan_to_num(lv.own_var) - lv.stated_var), 0.0)
    local_dof = near(dof_each)
    local = np.where(local_dof > 0, near(sum_each) / np.maximum(local_dof, 1), excess)
    frame_var = np.where(own, lv.own_var, lv.stated_var + np.maximum(local, 0.0))
    pixel = np.sqrt(lv.stated_var / lv.n)
    scatter = np.sqrt(np.maximum(frame_var - lv.stated_var, 0.0) / lv.n)
    return pixel, scatter, math.sqrt(excess), dof, own


def estimator_floor_rad(gray, difference_rad) -> float:
    """Systematic floor (rad) from two estimators' per-frame phase differences: their level means' RMS spread.

    A constant difference is no error (the curve is relative), and the level means' own noise (their frames'
    scatter over the frame count) is removed. The disagreement is taken whole as the possible error of either,
    since it is the error of one when the other is right.
    """
    g, d = np.asarray(gray), np.asarray(difference_rad, float)
    levels = np.unique(g)
    means = np.array([np.angle(np.mean(np.exp(1j * d[g == v]))) for v in levels])
    noise = [np.var(d[g == v], ddof=1) / np.sum(g == v) for v in levels if np.sum(g == v) >= 2]
    spread = np.angle(np.exp(1j * (means - np.angle(np.mean(np.exp(1j * means))))))
    excess = float(np.mean(spread**2)) - (float(np.mean(noise)) if noise else 0.0)
    return math.sqrt(max(excess, 0.0))


def _dense(g: np.ndarray) -> bool:
    """Whether levels at grays ``g`` are many and close enough for their roughness to be judged."""
    return g.size >= ROUGHNESS_MIN_LEVELS and float(np.median(np.diff(g))) <= ROUGHNESS_MAX_STEP


def _leave_one_out(g: np.ndarray, sig: np.ndarray):
    """For each level i: the indices of its ROUGHNESS_HALF_WINDOW neighbours either side and the weights that
    make a cubic's value at i, fitted to them with standard errors ``sig``."""
    n, h = g.size, ROUGHNESS_HALF_WINDOW
    for i in range(n):
        lo, hi = max(0, min(i - h, n - 2 * h - 1)), min(n, max(i + h + 1, 2 * h + 1))
        idx = np.r_[lo:i, i + 1:hi]
        x = (g[idx] - g[i]) / max(float(np.ptp(g[idx])), 1.0)
        yield i, idx, np.linalg.pinv(np.vander(x, 4) / sig[idx, None])[-1] / sig[idx]


def roughness_excess_rad(gray, phase_rad, std_rad) -> float:
    """Standard deviation (rad) of errors the levels share no frame with, from the curve's roughness (type A).

    A panel's curve is smooth in gray, so each level, left out, is predicted by a weighted cubic through its
    ROUGHNESS_HALF_WINDOW neighbours either side; with honest stds the residuals r_i have variance v_i (the
    level's and the prediction's). Errors that are constant over a level's frames but change from level to level
    (a drift the references miss, slow vibration, flicker beating with the frame clock) make them larger: solving
    mean(r_i^2 - v_i) = s^2 mean(1 + q_i), q_i the prediction weights' squared sum, for the common excess s (the
    Birge ratio's remedy, applied to one variance component). Zero unless the residuals' chi-square exceeds its
    expectation by three standard deviations, or the curve is sparse (fewer than ROUGHNESS_MIN_LEVELS levels, or
    more than ROUGHNESS_MAX_STEP grays between them: an adaptive sweep's levels, whose model judges its own fit).
    """
    g, phi, sig = (np.asarray(v, dtype=float) for v in (gray, phase_rad, std_rad))
    n = g.size
    if not _dense(g):
        return 0.0
    r2, v, q = np.empty(n), np.empty(n), np.empty(n)
    for i, idx, w in _leave_one_out(g, sig):
        r2[i] = (phi[i] - w @ phi[idx]) ** 2
        v[i] = sig[i] ** 2 + float(np.sum(w**2 * sig[idx] ** 2))
        q[i] = float(np.sum(w**2))
    if np.sum(r2 / v) <= n + 3 * math.sqrt(2 * n):
        return 0.0
    return math.sqrt(max(float(np.mean(r2 - v)), 0.0) / float(np.mean(1 + q)))


def scatter_share(gray, phase_rad, std_rad, scatter_rad, shared=None) -> float:
    """The share [0, 1] of the frame-scatter variance ``scatter_rad`` (part of ``std_rad``) that the levels'
    spread about a smooth curve supports.

    A level's frame scatter over its frame count assumes the frames independent. Flicker at the panel's refresh
    beating with the camera's frame rate is periodic instead: back-to-back frames sample its cycle evenly and their
    mean cancels most of it, so the levels lie closer to a smooth curve than their stated stds say. With the
    leave-one-out cubic of roughness_excess_rad, mean(r_i^2) = mean(a_i) + share * mean(b_i), a_i and b_i the
    other and the scatter parts of r_i's variance, gives the share (the Birge ratio's remedy, below one, for the
    component whose independence is in doubt), raised by its standard error. One unless the residuals' chi-square
    falls short of its expectation by three standard deviations, or the curve is sparse. ``std_rad`` holds the
    errors independent from level to level; ``shared`` = (J, C), errors correlated across levels (the drift
    model's: derivatives, one row per level, and covariance), of which the residuals carry only what differs.
    """
    g, phi, sig, sc = (np.asarray(v, dtype=float) for v in (gray, phase_rad, std_rad, scatter_rad))
    n = g.size
    if not _dense(g) or not np.any(sc > 0):
        return 1.0
    r2, a, b = np.empty(n), np.empty(n), np.empty(n)
    for i, idx, w in _leave_one_out(g, sig):
        r2[i] = (phi[i] - w @ phi[idx]) ** 2
        b[i] = sc[i] ** 2 + float(np.sum(w**2 * sc[idx] ** 2))
        a[i] = sig[i] ** 2 + float(np.sum(w**2 * sig[idx] ** 2)) - b[i]
        if shared is not None:
            row = shared[0][i] - w @ shared[0][idx]
            a[i] += float(row @ shared[1] @ row)
    if np.sum(r2 / (a + b)) >= n - 3 * math.sqrt(2 * n):
        return 1.0
    share = (float(np.mean(r2 - a)) + float(np.std(r2)) / math.sqrt(n)) / float(np.mean(b))
    return float(min(max(share, 0.0), 1.0))


def time_follows_gray(gray, time_s) -> bool:
    """Whether levels were measured in an order tied to gray (ascending or descending; |Spearman rho| of their
    times against gray at least ORDERED_RHO), so that slow changes in time look like the curve's shape."""
    g, t = np.asarray(gray, dtype=float), np.asarray(time_s, dtype=float)
    if g.size < 3 or np.ptp(t) == 0:
        return False
    return bool(abs(stats.spearmanr(g, t).statistic) >= ORDERED_RHO)


def _remove_drift(gray, phase, std, time_s, contrast, cyclic, reference_gray, scale_gray, warnings, scale_at_s=None,
                  share=1.0):
    """Fit the drift model to the reference visits and return it (or None) with the frames' corrected phases.

    With a second reference gray the scale acts on unwrapped phase: each frame takes the 2 pi branch of its level
    in a first, piston-only pass (which also gives the second gray's phase above the first, to place its visits).
    """
    is_ref = gray == reference_gray
    # Visits are counted in time order so that frames handed over shuffled still group correctly.
    order = np.argsort(time_s, kind="stable")
    visit = _visits(is_ref, order)
    # A visit of two frames can show almost no scatter by chance: each frame's error takes the frames' pooled
    # spread beyond their stated std (vibration, flicker), from every run of back-to-back frames of one gray.
    # (``share``: of that spread, what the level means bear out; see scatter_share)
    std = np.sqrt(std**2 + share * _pooled_excess(gray, phase, std, order))
    if len(np.unique(visit[is_ref])) < 2:
        if scale_gray is not None:
            warnings.append(f"reference gray {reference_gray} was measured in fewer than two visits: no drift model")
        return None, phase
    drift = fit_drift(time_s[is_ref], phase[is_ref], std[is_ref], visit[is_ref], pooled=True)
    piston_only = np.angle(np.exp(1j * (phase - drift(time_s))))
    if scale_gray is None:
        return drift, piston_only
    is_sc = gray == scale_gray
    visit_sc = _visits(is_sc, order)
    if len(np.unique(visit_sc[is_sc])) < 2:
        warnings.append(f"scale gray {scale_gray} was measured in fewer than two visits: piston drift only")
        return drift, piston_only
    first = _level_stats(gray, piston_only, std, time_s, contrast, cyclic)
    rough = unwrap_levels(first.gray, first.mean_rad)
    rough = rough - rough[first.gray == reference_gray][0]
    sel = is_ref | is_sc
    drift = fit_drift_scale(time_s[sel], phase[sel], std[sel], np.where(is_sc, visit_sc, visit)[sel], is_sc[sel],
                            float(rough[first.gray == scale_gray][0]), scale_gray, pooled=True)
    if scale_at_s is not None:
        drift = replace(drift, scale_at_s=float(scale_at_s))
    branch = rough[np.searchsorted(first.gray, gray)]
    unwrapped = branch + np.angle(np.exp(1j * (phase - drift(time_s) - branch)))
    return drift, np.angle(np.exp(1j * unwrapped / (1 + drift.scale(time_s))))


def _pooled_excess(gray, phase, std, order) -> float:
    """Variance (rad^2) of frames beyond their stated std, pooled over runs of consecutive frames of one gray."""
    g, p, e = gray[order], phase[order], std[order]
    starts = np.flatnonzero(np.r_[True, g[1:] != g[:-1]])
    ends = np.r_[starts[1:], g.size]
    num, dof = 0.0, 0
    for a, b in zip(starts, ends):
        if b - a < 2:
            continue
        dev = np.angle(np.exp(1j * (p[a:b] - np.angle(np.mean(np.exp(1j * p[a:b]))))))
        num += float(np.sum(dev**2) - (b - a - 1) * np.mean(e[a:b] ** 2))
        dof += b - a - 1
    return max(num / dof, 0.0) if dof else 0.0


def frames_for_target(group, phase_rad, std_rad, target_rad: float, fewest: int = 2, most: int = 16
                      ) -> tuple[int, float, float]:
    """Frames per level that bring a level mean's standard error to ``target_rad``, from runs of back-to-back frames.

    ``group`` labels the runs (frames of one run share a pattern). The frames' variance about their run's mean,
    pooled (JCGM 100:2008, 4.2.4), less their stated pixel-noise variance, is the scatter that averaging more
    frames beats down (vibration, flicker); a level of n frames then has the standard error
    sqrt((pixel^2 + scatter^2) / n). Returns (frames, clamped to [fewest, most]; per-frame scatter beyond the
    pixel noise, rad; per-frame pixel noise, rad).
    """
    group = np.asarray(group)
    phase, std = np.asarray(phase_rad, float), np.asarray(std_rad, float)
    if not (group.size == phase.size == std.size) or not np.all(np.isfinite(phase) & np.isfinite(std)):
        raise CurveError("frames: expected one finite phase and std per frame of the scatter probe")
    if not target_rad > 0:
        raise CurveError(f"target: expected a positive standard error, got {target_rad!r}")
    if not any(np.sum(group == g) >= 2 for g in np.unique(group)):
        raise CurveError("frames: the scatter probe needs a run of two or more frames of one pattern")
    scatter_var = _pooled_excess(group, phase, std, np.arange(group.size))
    pixel_var = float(np.mean(std**2))
    frames = math.ceil((pixel_var + scatter_var) / target_rad**2 - 1e-9)
    return min(max(frames, fewest), most), math.sqrt(scatter_var), math.sqrt(pixel_var)


def phase_curve(gray, phase_rad, std_rad, time_s=None, contrast=None, reference_gray: int = 0,
                sign: int | None = None, smooth: bool = False, *, direction: str = "unknown",
                direction_basis: str | None = None, amplitude=None, scale_gray: int | None = None,
                check_phase_rad=None, scale_at_s: float | None = None, extra_leak_terms: int = 0,
                share: float | None = None) -> PhaseCurve:
    """Build the phase curve from per-frame results in acquisition order.

    ``time_s`` defaults to the acquisition index. ``direction`` ("rising", "falling") is how the panel's phase runs
    with gray, as established by the caller (``direction_basis`` says how, e.g. "blazed-grating probe"); the curve
    is signed to run that way. "unknown" keeps the old behaviour: the curve is made to rise and its direction is
    recorded as assumed. ``sign`` +1 or -1 instead fixes the factor from fringe phase to panel phase directly (the
    direction is then the data's); given with a direction, the two must agree.

    ``amplitude`` (each frame's fringe amplitude, e.g. in ADU) turns on the cyclic-error fit of analysis.cyclic on
    the complex amplitudes amplitude * exp(i phase); the correction is applied when significant. A reference-gray
    frame after frames of other grays starts a drift visit; two or more visits give the piston drift, and two or
    more visits of ``scale_gray`` too the scale drift. Frames more than OUTLIER_SIGMAS off their level's mean
    (levels of three or more frames) and levels that far off a line through their neighbours are rejected and
    listed. ``check_phase_rad``, the same frames' phases by a second, independent estimator, sizes a systematic
    floor from the two's disagreement (see estimator_floor_rad). ``std_rad`` of the result is the combined
    uncertainty of ``budget``. ``scale_at_s`` (s) is the time whose panel a scale-corrected curve describes
    (default: the first reference visit). ``extra_leak_terms`` gives the leak's motion in time that many more
    powers than the data select (analysis.cyclic.fit_leak).

    Where a leak correction is applied to frames of an ordered sweep (time_follows_gray), the whole curve is made
    again with one more power of time in the leak's motion, and each level's difference between the two (common
    piston removed, less the noise variance the extra term adds) joins the cyclic component as a type-B model
    uncertainty (GUM 4.3): the motion trades against the curve's shape when time follows gray (analysis.cyclic),
    and its error reaches every level through the drift references as well. A shuffled sweep separates the two,
    and the leak fit's own test of its terms stands.

    The frame scatter's share that the levels' spread supports (scatter_share) scales it; below one, the curve is
    made again with it (``share`` given), so that the drift visits' means take it too. The roughness beyond the
    stated stds joins the floor (roughness_excess_rad).
    """
    given = dict(gray=gray, sign=sign)  # as the caller gave them, for the leak model's check
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
    if direction not in ("rising", "falling", "unknown"):
        raise CurveError(f"direction: expected rising, falling or unknown, got {direction!r}")
    is_ref = gray == reference_gray
    if not is_ref.any():
        raise CurveError(f"reference gray {reference_gray}: no frame was taken at it")
    if scale_gray is not None and (scale_gray == reference_gray or not (gray == scale_gray).any()):
        raise CurveError(f"scale gray {scale_gray}: expected a gray other than the reference gray, with frames")
    warnings: list[str] = []
    disagreement = None
    if check_phase_rad is not None:
        check = np.asarray(check_phase_rad, dtype=float)
        if check.shape != (n,) or not np.all(np.isfinite(check)):
            raise CurveError("check_phase_rad: expected one finite phase per frame from the second estimator")
        disagreement = np.angle(np.exp(1j * (check - phase)))

    leak, cyclic = None, np.zeros(n)
    if amplitude is not None:
        amp = np.asarray(amplitude, dtype=float)
        if amp.shape != (n,) or not np.all(np.isfinite(amp) & (amp > 0)):
            raise CurveError("amplitude: expected one positive, finite fringe amplitude per frame")
        try:
            leak = fit_leak(gray, amp * np.exp(1j * phase), std * amp, time_s=time_s,
                            extra_leak_terms=extra_leak_terms)
        except ValueError as exc:
            warnings.append(f"cyclic error not fitted: {exc}")
        if leak is not None:
            phase = np.angle(np.exp(1j * (phase + leak.correction_rad)))
            cyclic = leak.correction_std_rad
            if not leak.assessed:
                warnings.append(f"cyclic error {leak.reason}: a cyclic error is not ruled out and not in the "
                                f"uncertainty; measure more levels over a whole fringe period")
            elif not leak.applied and leak.arc_rad < MIN_ARC_RAD:
                warnings.append(f"cyclic error of a leak |L|/a = {leak.ratio:.4f} +- {leak.ratio_std:.4f} "
                                f"{leak.reason}; the error left in is carried in the uncertainty")

    drift, phase = _remove_drift(gray, phase, std, time_s, contrast, cyclic, reference_gray, scale_gray, warnings,
                                 scale_at_s, 1.0 if share is None else share)

    lv = _level_stats(gray, phase, std, time_s, contrast, cyclic)
    pixel, scatter, excess, dof, own = _frame_scatter(lv)
    if not dof:
        warnings.append("frame scatter not evaluated: every level has a single frame")
    type_a = np.sqrt(pixel**2 + scatter**2 + lv.cyclic_rad**2)
    unwrapped = unwrap_levels(lv.gray, lv.mean_rad)
    level_ok = _level_outliers(lv.gray, unwrapped, type_a)
    rejected_grays = tuple(int(g) for g in lv.gray[~level_ok] if g != reference_gray)
    level_ok |= lv.gray == reference_gray
    levels = lv.gray[level_ok]
    unwrapped = unwrap_levels(levels, lv.mean_rad[level_ok])
    unwrapped = unwrapped - unwrapped[np.flatnonzero(levels == reference_gray)[0]]
    t_level = lv.time_s[level_ok]
    drift_std = np.zeros(levels.size)
    if drift is not None:
        drift_std = drift.std_rad(t_level, unwrapped)

    data_slope = np.polyfit(levels, unwrapped, 1)[0] if levels.size >= 2 else 1.0
    data_dir = 1 if data_slope >= 0 else -1
    if sign is not None and direction != "unknown" and sign * data_dir != DIRECTIONS[direction]:
        raise CurveError(f"direction: {direction} contradicts sign {sign:+d} on this data")
    sign_given = sign is not None
    if sign is None:
        sign = data_dir * DIRECTIONS.get(direction, 1)
    curve = sign * unwrapped
    run = 1 if sign * data_dir > 0 else -1
    name = "rising" if run > 0 else "falling"
    if direction_basis:
        basis = direction_basis
    else:
        basis = "given by the caller" if direction != "unknown" else "from the given sign" if sign_given else "assumed"

    cyclic_level = lv.cyclic_rad[level_ok]
    ordered = time_follows_gray(levels, t_level)
    if leak is not None and leak.applied and not extra_leak_terms and ordered:
        other = phase_curve(given["gray"], phase_rad, std_rad, time_s, contrast, reference_gray, given["sign"],
                            direction=direction, amplitude=amplitude, scale_gray=scale_gray, scale_at_s=scale_at_s,
                            extra_leak_terms=1)
        if other.cyclic is not None and other.cyclic.applied:
            _, here, there = np.intersect1d(levels, other.gray, return_indices=True)
            diff = np.zeros(levels.size)
            d = curve[here] - other.phase_rad[there]
            diff[here] = d - np.median(d)
            # nested fits: their difference's noise variance is that of the larger model less the smaller's
            noise = np.zeros(levels.size)
            noise[here] = other.budget.cyclic_rad[there] ** 2 - cyclic_level[here] ** 2
            cyclic_level = np.sqrt(cyclic_level**2 + np.maximum(diff**2 - noise, 0.0))
    floor = leak.residual_rad if leak is not None else 0.0
    if disagreement is not None:
        keep = lv.keep & np.isin(gray, levels)
        floor = math.hypot(floor, estimator_floor_rad(gray[keep], disagreement[keep]))
    pixel, scatter = pixel[level_ok], scatter[level_ok]
    # the drift model's errors are partly common to all levels and, in an ordered sweep, smooth in gray: they
    # enter the levels' spread about a smooth curve through their correlations
    given_share = share
    if share is None:
        share = scatter_share(levels, curve, np.hypot(pixel, scatter), scatter,
                              None if drift is None else drift.sensitivity(t_level, unwrapped))
    if share < 1 and given_share is None:  # the drift visits' means take the share too
        return phase_curve(given["gray"], phase_rad, std_rad, time_s, contrast, reference_gray, given["sign"], smooth,
                           direction=direction, direction_basis=direction_basis, amplitude=amplitude,
                           scale_gray=scale_gray, check_phase_rad=check_phase_rad, scale_at_s=scale_at_s,
                           extra_leak_terms=extra_leak_terms, share=share)
    scatter = scatter * math.sqrt(share)
    type_a_level = np.sqrt(pixel**2 + scatter**2 + drift_std**2 + cyclic_level**2)
    floor = math.hypot(floor, roughness_excess_rad(levels, curve, np.sqrt(type_a_level**2 + floor**2)))
    budget = UncertaintyBudget(levels, pixel, scatter, drift_std, cyclic_level, np.full(levels.size, floor), excess,
                               dof, tuple(int(g) for g in lv.gray[own & level_ok]), share)
    errors = budget.combined_rad
    dips = find_dips(levels, curve, errors, run)
    for d in dips:
        warnings.append(f"the curve falls against its direction by {d.depth_rad:.3f} rad ({d.significance:.1f} "
                        f"sigma) from gray {d.from_gray} to {d.to_gray}; a monotone table cannot follow it there")
    if drift is None or not drift.scale_coefficients:
        beta, beta_std = scale_drift_check(levels, curve, errors, t_level)
        if abs(beta) > SCALE_SIGMAS * beta_std:
            warnings.append(f"the levels show the curve's scale changing by {beta:+.2%} +- {beta_std:.2%} over the "
                            f"sweep, which one reference gray cannot remove; measure a second reference gray")
    fitted = monotone_fit(levels, curve, errors, run) if smooth and levels.size >= 4 else None
    return PhaseCurve(levels, curve, errors, lv.contrast[level_ok], lv.n[level_ok], int(reference_gray), int(sign),
                      drift, tuple(int(i) for i in np.flatnonzero(~lv.keep)), rejected_grays, fitted,
                      summarize(levels, curve, errors, fitted, run, dips), name, basis, budget, leak,
                      tuple(warnings))


def sweep_curve(gray, phase_rad, std_rad, time_s, contrast=None, amplitude=None, reference_gray: int = 0, *,
                direction: str = "unknown", direction_basis: str | None = None, scale_gray: int | None = None,
                smooth: bool = False) -> tuple[PhaseCurve, float, bool]:
    """The curve of a sweep's frames (any order) as every sweep makes it, and the time (s) it refers to.

    The rules a full and an adaptive sweep share: frames in time order; the cyclic-error fit only when every frame
    has a positive fringe ``amplitude``; the scale drift only once ``scale_gray`` has frames; the curve referred to
    the middle of the frames' times. Returns the curve, that time, and whether the amplitudes were used.
    """
    t = np.asarray(time_s, dtype=float)
    order = np.argsort(t, kind="stable")
    take = lambda v: None if v is None else np.asarray(v, dtype=float)[order]  # noqa: E731
    gray = np.asarray(gray, dtype=int)[order]
    amp = take(amplitude)
    used = amp is not None and amp.size > 0 and bool(np.all(np.isfinite(amp) & (amp > 0)))
    mid_s = 0.5 * (float(t.min()) + float(t.max())) if t.size else 0.0
    curve = phase_curve(gray, take(phase_rad), take(std_rad), t[order], take(contrast), reference_gray, None,
                        smooth=smooth, direction=direction, direction_basis=direction_basis,
                        amplitude=amp if used else None,
                        scale_gray=scale_gray if scale_gray is not None and np.any(gray == scale_gray) else None,
                        scale_at_s=mid_s)
    return curve, mid_s, used


def _level_outliers(levels: np.ndarray, phase: np.ndarray, std: np.ndarray, half_window: int = 3) -> np.ndarray:
    """True for levels within OUTLIER_SIGMAS robust deviations of a line through their neighbours.

    The worst level is dropped and the rest re-examined, one at a time, so an outlier never condemns the
    neighbours whose lines it bent (at most a quarter of the levels can go). Two or more neighbouring levels off
    together are kept: that is a feature of the curve, such as a dip, which find_dips reports, not a glitch.
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
    bad = ~ok
    in_run = bad & (np.r_[False, bad[:-1]] | np.r_[bad[1:], False])
    return ok | in_run


def summarize(gray: np.ndarray, phase_rad: np.ndarray, std_rad: np.ndarray, smooth_rad: np.ndarray | None,
              direction: int = 1, dips: tuple[Dip, ...] = ()) -> CurveSummary:
    """Range, first gray reaching 2 pi (in the curve's direction), rms deviation from the smooth fit, worst
    uncertainty and dips of a curve."""
    reach = np.flatnonzero(direction * phase_rad >= 2 * np.pi)
    worst = int(np.argmax(std_rad))
    rms = float(np.sqrt(np.mean((phase_rad - smooth_rad) ** 2))) if smooth_rad is not None else None
    return CurveSummary(float(phase_rad.max() - phase_rad.min()), int(gray[reach[0]]) if reach.size else None,
                        rms, float(std_rad[worst]), int(gray[worst]), dips)
