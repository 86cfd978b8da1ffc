"""Cyclic phase error (rad) from a constant leak phasor at the fringe carrier: fit, significance and correction.

A frame's complex fringe amplitude is z = a(g) exp(i phi) + L: the mirror beam against the first order, plus light
at the same carrier that does not pass through the mirror gray (the grating's zero order, light diffracted past the
split line, a coherent cover-glass ghost, the polarisation component the liquid crystal does not modulate). The
measured phase arg z then errs by arg(1 + (L / a) exp(-i phi)), periodic in phi with period 2 pi and at most
arcsin(|L| / a) rad. As in Heydemann's correction (Appl. Opt. 20, 3382, 1981) the points z lie on a circle, here
of radius a(g), a low-order polynomial in gray, about the centre L; the fit minimises the weighted radial distances
||z - L| - a(g)| (the geometric fit; each point's phase is free), started from Kasa's algebraic fit (IEEE Trans.
Instrum. Meas. 25, 8, 1976). The corrected phase is arg(z - L).

Which phasor rotates with what: the fringe is the mirror beam M against the first order F, z ~ M F*. The zero order
and light past the split line come from the grating half like F, so a piston or tilt of the panel moves them with
F; a cover-glass ghost is fixed to the glass. The drift the reference visits measure is that of M relative to F.
So L is fixed in the frame of the fringe carrier (to first order: a ghost turns against F by the grating half's own
piston, about half of a tilt's fringe shift for a tilt about the panel's centre), while the drift moves each point
along the circle, not off it. The fit therefore takes the raw z, before any drift correction: de-rotating z by the
drift would smear L over an arc. A slow change of L itself (the zero order's strength follows the grating's phase
step as the panel warms) is left in the residual.

Warming turns a cover-glass ghost against the panel's light (the glass's optical path grows), so L can move during a
sweep: given the frames' times, the centre may move as a polynomial in tau = 2 (t - t_mid) / span,
L(t) = L + tau L' + ..., up to MAX_LEAK_TIME_DEGREE, each power kept only when it lowers chi-square by
AMPLITUDE_TERM_CHI2 (points of one phase at many times, such as the drift references, pin it). In a sweep in gray
order the phase follows time, so a moving centre trades against the circle's shape: on a small bench with a 0.5 %
ghost and 5 K of warming the square term took the error from 7.8 to 34 mrad RMS. The leak's motion is therefore
only known to the model's precision: analysis.curve carries what one more power of time changes in the finished
curve as a model uncertainty.

The light itself changes in time too (laser power; the first order's efficiency as warming changes the grating's
phase step): the amplitudes share a gain 1 + c_1 tau + ..., up to MAX_GAIN_TIME_DEGREE, each power kept as above.
Unmodelled, the drift references' amplitude change pulls the leak along their phases: on the small bench with a
0.5 % ghost and 5 K of warming (a common change of about 0.3 %, the turning ghost's on top), the curve was 8 mrad
RMS off the truth without the gain and 3.3 mrad with it.

The circle is told from a smooth amplitude change only when the phases cover most of the circle: with less than
MIN_ARC_RAD the amplitude is held constant (the only radius a short arc pins down), the fit is reported but never
applied, and the possible error it describes is carried as an uncertainty instead.

A leak is also told from an amplitude change only when the model describes the amplitudes at all: an amplitude
that jumps from level to level (six levels at 1, 0.8, 0.55, 0.4, 0.6 and 0.9 of the light) is as well a leak as
not, and a fit through it returns a leak as large as the fringe. Where the levels repeat frames, the level means'
misfit (what the circle and its harmonic distortion leave) is compared with the frames' own scatter about them;
beyond LEVEL_MISFIT_MAX the leak is reported as not assessed: no correction, nothing carried, and the caller warns
that a cyclic error cannot be ruled out. An ellipse (a 2 % conjugate leak: level misfit 69 from the circle alone,
1.0 with the harmonics fitted beside it) stays assessed and its floor counts.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize

MIN_ARC_RAD = 1.5 * math.pi   # phases must cover this much of the circle before a correction is applied
SIGNIFICANCE = 3.0            # the leak is removed only when it lies this many standard errors from zero
MAX_AMPLITUDE_DEGREE = 3      # a(g) is a polynomial in gray of at most this degree
AMPLITUDE_TERM_CHI2 = 9.0     # a higher amplitude degree is kept only if it lowers chi-square this much
MAX_GAIN_TIME_DEGREE = 3      # the amplitudes' common gain changes as a polynomial in time of at most this degree
MAX_LEAK_TIME_DEGREE = 1      # the leak moves as a polynomial in time of at most this degree (each term as above)
RESIDUAL_HARMONICS = (2, 3)   # radial harmonics of the phase a single leak cannot make; their size is the floor
HARMONIC_RCOND = 0.1          # harmonic combinations whose singular value is below this share of the largest drop
HARMONIC_SIGMAS = 2.0         # a harmonic combination counts toward the floor when this many standard errors from 0
LEVEL_MISFIT_MAX = 16.0       # level means' radial misfit over the frames' own scatter (a variance ratio) beyond
                              # which the circle model does not describe the amplitudes and the leak is not assessed


@dataclass(frozen=True, eq=False)
class LeakFit:
    """A fitted leak phasor and the phase correction it implies for each input point.

    ``leak`` is L at the middle of the points' times, ``leak_drift`` L' (the change from there to the last time;
    0 when not fitted). ``ratio`` is |L| / a with a the fitted amplitude averaged over the points,
    ``leak_phase_rad`` arg L (the camera frame of the carrier), each with its standard uncertainty.
    ``significance`` is sqrt(L^T C^-1 L) with C the covariance of (Re L, Im L) (with L', of all four): the distance
    of L from zero in standard errors. ``correction_rad`` is what to add to each point's phase (zero where not
    applied); ``correction_std_rad`` its standard uncertainty, or, where the correction is not applied, the cyclic
    error left in (the would-be correction and its uncertainty combined; zero when the leak is not assessed).
    ``level_misfit`` is the level means' radial chi-square per level (what the circle and its harmonics leave) over
    the frames' chi-square per degree of freedom about their level means (about 1 when the model holds; nan without
    repeated frames), ``assessed`` whether it stayed within LEVEL_MISFIT_MAX. ``residual_rad`` is the RMS phase
    error of the distortion the circle model leaves (harmonics 2 and 3 of the radial residual, noise removed; 0
    when not assessed), a systematic floor. ``chi2_per_dof`` > 1 inflated the covariance by itself.
    """

    leak: complex
    leak_covariance: np.ndarray
    ratio: float
    ratio_std: float
    leak_phase_rad: float
    leak_phase_std_rad: float
    significance: float
    applied: bool
    arc_rad: float
    amplitude_degree: int
    chi2_per_dof: float
    residual_rad: float
    correction_rad: np.ndarray
    correction_std_rad: np.ndarray
    reason: str
    leak_drift: complex = 0j
    level_misfit: float = math.nan
    assessed: bool = True

    @property
    def peak_error_rad(self) -> float:
        """Largest phase error (rad) the fitted leak makes before correction: arcsin(|L| / a)."""
        return math.asin(min(self.ratio, 1.0))

    def summary(self) -> dict:
        """JSON-ready figures of the fit (ratio, phase and errors in rad)."""
        return {"applied": self.applied, "reason": self.reason, "ratio": self.ratio, "ratio_std": self.ratio_std,
                "leak_phase_rad": self.leak_phase_rad, "leak_phase_std_rad": self.leak_phase_std_rad,
                "significance_sigma": self.significance, "peak_error_rad": self.peak_error_rad,
                "arc_rad": self.arc_rad, "amplitude_degree": self.amplitude_degree,
                "chi2_per_dof": self.chi2_per_dof, "residual_rad": self.residual_rad, "assessed": self.assessed,
                "level_misfit": None if math.isnan(self.level_misfit) else self.level_misfit,
                "leak_drift_ratio": abs(self.leak_drift) / max(abs(self.leak) / max(self.ratio, 1e-300), 1e-300)
                if self.ratio > 0 else 0.0}


def leak_phase_error_rad(phase_rad, ratio: float, leak_phase_rad: float) -> np.ndarray:
    """Phase error (rad) a leak of relative amplitude ``ratio`` and phase ``leak_phase_rad`` makes at ``phase_rad``."""
    phase = np.asarray(phase_rad, float)
    return np.angle(1 + ratio * np.exp(1j * (leak_phase_rad - phase)))


def arc_covered_rad(angle_rad: np.ndarray) -> float:
    """Part of the circle (rad) the angles cover: 2 pi less the widest gap between neighbours."""
    a = np.sort(np.mod(np.asarray(angle_rad, float), 2 * math.pi))
    if a.size < 2:
        return 0.0
    gaps = np.diff(np.r_[a, a[0] + 2 * math.pi])
    return float(2 * math.pi - gaps.max())


def kasa_centre(z: np.ndarray) -> complex:
    """Centre of the circle through points z by Kasa's algebraic fit (|z|^2 = 2 Re(z c*) + d, linear least squares)."""
    design = np.column_stack([2 * z.real, 2 * z.imag, np.ones(z.size)])
    sol = np.linalg.lstsq(design, np.abs(z) ** 2, rcond=None)[0]
    return complex(sol[0], sol[1])


def fit_leak(gray, z, z_std, *, significance: float = SIGNIFICANCE, time_s=None, extra_leak_terms: int = 0) -> LeakFit:
    """Fit the leak phasor L and a smooth amplitude a(g) to complex fringe amplitudes z (one per frame or level).

    ``z_std`` is each point's standard uncertainty per component, in the unit of z (for an estimator that states
    only a phase std, pass std_rad * |z|). The amplitude's degree goes up from 0 while a term lowers chi-square by
    AMPLITUDE_TERM_CHI2; the covariance is scaled by chi-square per degree of freedom when that exceeds 1, so
    scatter the stated stds miss (laser power, vibration off the circle) widens the errors rather than hiding.
    The correction is applied when L lies ``significance`` standard errors or more from zero and the phases cover
    MIN_ARC_RAD; the reason is recorded either way. ``time_s`` (s, one per point) lets the amplitudes' common gain
    change and the leak move, each as a polynomial in time (see the module docstring); ``extra_leak_terms`` more
    powers of time than the data select are given to the leak's motion (the model check of analysis.curve).
    """
    g = np.asarray(gray, float)
    z = np.asarray(z, complex)
    sigma = np.maximum(np.asarray(z_std, float), 1e-12 * max(float(np.abs(z).max()), 1e-300))
    if not (g.shape == z.shape == sigma.shape) or z.ndim != 1:
        raise ValueError("gray, z, z_std: expected three 1-D arrays of equal length")
    if z.size < 2 * MAX_AMPLITUDE_DEGREE + 4:
        raise ValueError(f"z: expected at least {2 * MAX_AMPLITUDE_DEGREE + 4} points for a leak fit, got {z.size}")
    span = max(float(np.ptp(g)), 1e-9)
    x = 2 * (g - g.min()) / span - 1  # gray mapped onto [-1, 1] keeps the amplitude polynomial well conditioned
    tau = np.zeros(z.size)
    if time_s is not None:
        t = np.asarray(time_s, float)
        if t.shape != z.shape:
            raise ValueError("time_s: expected one time per point")
        tau = (2 * t - t.min() - t.max()) / max(float(np.ptp(t)), 1e-9)

    start = kasa_centre(z)
    if not np.isfinite(start) or abs(start) > 0.5 * float(np.median(np.abs(z))):
        start = 0j  # a leak as large as half the amplitude is no leak but a broken measurement; start at zero
    arc = arc_covered_rad(np.angle(z - start))
    max_degree = MAX_AMPLITUDE_DEGREE if arc >= MIN_ARC_RAD else 0

    def solve(degree: int, leak_terms: np.ndarray, gain_terms: np.ndarray):
        """Amplitude polynomial of ``degree`` in gray times a gain 1 + sum c_k tau^k (``gain_terms`` c_1.. to start
        from), the leak's powers of tau started at ``leak_terms``."""
        powers = np.vander(x, degree + 1)
        in_time = np.vander(tau, leak_terms.size, increasing=True)
        gain_time = np.vander(tau, gain_terms.size + 1, increasing=True)[:, 1:]
        n_l, n_a = 2 * leak_terms.size, degree + 1

        def residual(p):
            centres = in_time @ (p[0:n_l:2] + 1j * p[1:n_l:2])
            gain = 1 + gain_time @ p[n_l + n_a:]
            return (np.abs(z - centres) - (powers @ p[n_l:n_l + n_a]) * gain) / sigma

        radius = np.abs(z - in_time @ leak_terms) / (1 + gain_time @ gain_terms)
        start_l = np.column_stack([leak_terms.real, leak_terms.imag]).ravel()
        p0 = np.r_[start_l, np.linalg.lstsq(powers / sigma[:, None], radius / sigma, rcond=None)[0], gain_terms]
        fit = optimize.least_squares(residual, p0, method="lm", x_scale="jac")
        amplitude = (powers @ fit.x[n_l:n_l + n_a]) * (1 + gain_time @ fit.x[n_l + n_a:])
        return fit.x, fit.jac, float(np.sum(fit.fun**2)), amplitude, n_l, n_a

    params, jac, chi2, amplitude, n_l, n_a = solve(0, np.array([start]), np.zeros(0))
    degree = 0
    for trial_degree in range(1, max_degree + 1):
        trial = solve(trial_degree, np.array([complex(params[0], params[1])]), np.zeros(0))
        if chi2 - trial[2] < AMPLITUDE_TERM_CHI2:
            break
        params, jac, chi2, amplitude, n_l, n_a = trial
        degree = trial_degree
    if time_s is not None and max_degree:
        # first the light's own change in time (laser power; the first order's efficiency as warming changes the
        # grating's phase step), which multiplies every amplitude alike; then the leak's motion
        for _ in range(MAX_GAIN_TIME_DEGREE):
            trial = solve(degree, params[0:n_l:2] + 1j * params[1:n_l:2], np.r_[params[n_l + n_a:], 0.0])
            if chi2 - trial[2] < AMPLITUDE_TERM_CHI2:
                break
            params, jac, chi2, amplitude, n_l, n_a = trial
        for _ in range(MAX_LEAK_TIME_DEGREE):
            terms = params[0:n_l:2] + 1j * params[1:n_l:2]
            trial = solve(degree, np.r_[terms, 0j], params[n_l + n_a:])
            if chi2 - trial[2] < AMPLITUDE_TERM_CHI2:
                break
            params, jac, chi2, amplitude, n_l, n_a = trial
        for _ in range(extra_leak_terms):
            terms = params[0:n_l:2] + 1j * params[1:n_l:2]
            params, jac, chi2, amplitude, n_l, n_a = solve(degree, np.r_[terms, 0j], params[n_l + n_a:])
    dof = max(z.size - params.size, 1)
    chi2_dof = chi2 / dof
    cov = np.linalg.pinv(jac.T @ jac) * max(chi2_dof, 1.0)
    leak = complex(params[0], params[1])
    drift = complex(params[2], params[3]) if n_l >= 4 else 0j
    in_time = np.vander(tau, n_l // 2, increasing=True)
    centres = in_time @ (params[0:n_l:2] + 1j * params[1:n_l:2])
    mean_amp = float(amplitude.mean())
    arc = arc_covered_rad(np.angle(z - centres))

    cov_l = cov[:2, :2]
    lvec = np.array([leak.real, leak.imag])
    lall = params[:n_l]
    signif = float(math.sqrt(max(lall @ np.linalg.pinv(cov[:n_l, :n_l]) @ lall, 0.0)))
    mod = abs(leak)
    d_ratio = np.r_[lvec / max(mod, 1e-300) / mean_amp, np.zeros(n_l - 2),
                    -mod / mean_amp**2 * np.vander(x, n_a).mean(axis=0), np.zeros(params.size - n_l - n_a)]
    ratio_std = float(math.sqrt(max(d_ratio @ cov @ d_ratio, 0.0)))
    d_phase = np.array([-leak.imag, leak.real]) / max(mod**2, 1e-300)
    phase_std = float(math.sqrt(max(d_phase @ cov_l @ d_phase, 0.0))) if mod > 0 else math.pi

    # Gradient of arg(z - L_i) with respect to the leak's (Re, Im) per power of tau: (Im w, -Re w) tau^k / |w|^2.
    w = z - centres
    grad = np.column_stack([w.imag, -w.real]) / np.abs(w)[:, None] ** 2
    grad = np.column_stack([in_time[:, k:k + 1] * grad for k in range(n_l // 2)])
    cov_l = cov[:n_l, :n_l]
    would_be = np.angle(w) - np.angle(z)
    would_be = np.angle(np.exp(1j * would_be))
    corr_std = np.sqrt(np.maximum(np.einsum("ij,jk,ik->i", grad, cov_l, grad), 0.0))

    floor, rel_left = _harmonic_floor(g, np.angle(w), (np.abs(w) - amplitude) / amplitude, sigma / amplitude, jac)
    misfit = level_misfit(g, rel_left, sigma / amplitude)
    assessed = not misfit > LEVEL_MISFIT_MAX
    if not assessed:
        applied = False
        reason = (f"not assessed: the fringe amplitude changes from level to level in a way no smooth amplitude "
                  f"with a leak describes (level misfit {misfit:.0f} x the frames' scatter); a leak cannot be "
                  f"told from it")
    elif arc < MIN_ARC_RAD:
        applied = False
        reason = (f"not applied: the phases cover {arc:.2f} rad of the circle, a leak needs {MIN_ARC_RAD:.2f} rad "
                  f"to be told from a change of fringe amplitude with gray")
    elif signif < significance:
        applied = False
        reason = f"not applied: leak {signif:.1f} standard errors from zero (threshold {significance:g})"
    else:
        applied = True
        reason = f"applied: leak {signif:.1f} standard errors from zero"
    if applied:
        correction, correction_std = would_be, corr_std
    elif assessed:
        correction, correction_std = np.zeros(z.size), np.hypot(would_be, corr_std)
    else:
        correction, correction_std, floor = np.zeros(z.size), np.zeros(z.size), 0.0
    return LeakFit(leak, cov[:2, :2], mod / mean_amp, ratio_std, float(np.angle(leak)), phase_std, signif, applied,
                   arc, degree, chi2_dof, floor, correction, correction_std, reason, drift, misfit, assessed)


def level_misfit(gray: np.ndarray, resid: np.ndarray, sigma: np.ndarray) -> float:
    """Chi-square per level of the levels' weighted mean residuals over the frames' chi-square per degree of
    freedom about those means (a variance ratio, about 1 when the residuals are the frames' own scatter); nan when
    fewer than two frames repeat a level. ``resid`` and ``sigma`` in one unit, one per frame."""
    _, level = np.unique(gray, return_inverse=True)
    n_levels = int(level.max()) + 1
    weight = sigma**-2.0
    total = np.bincount(level, weight, n_levels)
    mean = np.bincount(level, weight * resid, n_levels) / total
    within_dof = resid.size - n_levels
    if within_dof < 2:
        return math.nan
    within = float(np.sum(weight * (resid - mean[level]) ** 2)) / within_dof
    between = float(np.sum(total * mean**2)) / n_levels
    return between / max(within, 1e-300)


def _harmonic_floor(gray: np.ndarray, theta: np.ndarray, rel_resid: np.ndarray, rel_sigma: np.ndarray,
                    jac: np.ndarray) -> tuple[float, np.ndarray]:
    """RMS phase error (rad) of the radial residual's harmonics RESIDUAL_HARMONICS, less what noise alone gives,
    and the relative residual left when the levels pin those harmonics beside the circle (else the residual as is).

    A distortion of the circle into an ellipse (unequal gains) or a three-lobed shape moves points along the circle
    by as much as across it, so the radial harmonics, which the fit can see, size the phase errors it cannot. They
    are fitted jointly with the circle to first order: their columns are taken orthogonal to the circle fit's
    whitened Jacobian ``jac`` (a cubic amplitude in gray takes up part of cos 2 theta; fitted after it, a 2 %
    ellipse left two thirds of its error unseen). Only the combinations the phases pin down count: points at a
    few distinct phases (six levels evenly round the circle make cos 3 theta and sin 3 theta one column, split
    only by the frames' phase noise) leave a direction whose estimate is mostly noise (a 6-level set with 0.2
    mrad of noise per level stated 28 mrad): singular values below HARMONIC_RCOND of the largest drop, and each
    remaining combination counts, less its noise variance, only when HARMONIC_SIGMAS standard errors from zero.
    The noise variance is the residual's chi-square per degree of freedom once the harmonics are removed, or 1.
    """
    cols = []
    for m in RESIDUAL_HARMONICS:
        cols += [np.cos(m * theta), np.sin(m * theta)]
    white = rel_resid / rel_sigma
    design = np.column_stack(cols) / rel_sigma[:, None]
    q, jsv, _ = np.linalg.svd(jac, full_matrices=False)
    q = q[:, jsv > 1e-9 * jsv[0]]
    design = design - q @ (q.T @ design)
    u, sv, _ = np.linalg.svd(design, full_matrices=False)
    keep = sv >= HARMONIC_RCOND * sv[0]
    coef = u[:, keep].T @ white                        # whitened coefficients along the pinned combinations
    left = white - u[:, keep] @ coef
    dof = max(white.size - q.shape[1] - int(keep.sum()), 1)
    var = max(float(np.sum(left**2)) / dof, 1.0)
    counted = coef**2 > HARMONIC_SIGMAS**2 * var
    power = float(np.sum((coef[counted] ** 2 - var) / sv[keep][counted] ** 2))
    if np.unique(gray).size < q.shape[1] + int(keep.sum()) + 2:
        left = white                                   # too few levels to tell harmonics from the amplitude's shape
    return math.sqrt(max(power, 0.0) / 2), left * rel_sigma
