"""One panel at several wavelengths: fit a dispersion model to calibrations and predict an unmeasured wavelength.

Model. A reflective cell delays by phi = 4 pi d dn_eff / lambda. The liquid crystal's tilt at a gray level does not
depend on the wavelength, so every curve has the same shape f(gray) and only its scale changes:

    phi(gray, lambda) = f(gray) * s(lambda),   s(lambda) = D(lambda) / lambda,
    D(lambda) = 1 + b / lambda^2 + c / lambda^4   (lambda in um),

D being the birefringence in an extended-Cauchy form, dn = A + B/lambda^2 + C/lambda^4, divided by A (b = B/A in
um^2, c = C/A in um^4). A and the cell gap d fold into f: calibrations fix only ratios of scales.

Fit. The first calibration is the reference. Every other curve is compared with it on common gray levels: its scale
ratio r_i is the weighted least-squares slope of phi_i against phi_ref (both curves start at 0 at gray 0), and the
residual scatter sets the ratio's uncertainty, so a wavelength whose shape does not match widens it. The ratios
then fix the dispersion: two calibrations give one ratio, enough for one coefficient, so c is tied to b by the
single-resonance relation c = b^2 (the Cauchy expansion of a one-oscillator birefringence,
dn = G lambda^2 lambda*^2 / (lambda^2 - lambda*^2), has B/A = lambda*^2 and C/A = lambda*^4); three or more fit b
and c freely. The shape f is the weighted mean of the curves divided by their ratios.

Uncertainty of a prediction (rad, per gray): the shape's std (the curves' own stds, widened by their scatter about
the shared shape) scaled to the new wavelength, the coefficients' covariance propagated, and with only two calibrations the closure term, the change of the prediction between
c = b^2 and c = 0 (the C term is not measured then, so the spread between these two closures is reported).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize

from analysis.lut import monotone_cubic


@dataclass(frozen=True, eq=False)
class Calibration:
    """One measured curve: wavelength (nm), ascending gray levels, phase and its std (rad)."""

    wavelength_nm: float
    gray: np.ndarray
    phase_rad: np.ndarray
    phase_std_rad: np.ndarray


@dataclass(frozen=True, eq=False)
class PanelModel:
    """A dispersion fit: reference wavelength, Cauchy ratios b (um^2) and c (um^4), the shared shape f (rad).

    ``tied`` is True when c = b^2 was imposed (two calibrations). ``ratios`` are the measured scale ratios of the
    calibrations to the reference (1 for the reference itself), ``ratio_std`` their uncertainties and
    ``residual_rms_rad`` the RMS misfit of each calibration to the model.
    """

    reference_nm: float
    b_um2: float
    c_um4: float
    covariance: np.ndarray
    tied: bool
    wavelengths_nm: tuple[float, ...]
    ratios: tuple[float, ...]
    ratio_std: tuple[float, ...]
    residual_rms_rad: tuple[float, ...]
    gray: np.ndarray
    shape_rad: np.ndarray
    shape_std_rad: np.ndarray


@dataclass(frozen=True, eq=False)
class Prediction:
    """The curve predicted at ``wavelength_nm``: phase and its std (rad) per gray, and its scale to the reference."""

    wavelength_nm: float
    gray: np.ndarray
    phase_rad: np.ndarray
    phase_std_rad: np.ndarray
    scale: float
    closure_rad: float  # RMS over grays of the closure term (0 with three or more calibrations)


def relative_birefringence(wavelength_nm, b_um2: float, c_um4: float):
    """D(lambda) = 1 + b / lambda^2 + c / lambda^4 (lambda from nm to um): birefringence over its constant term."""
    lam = np.asarray(wavelength_nm, float) * 1e-3
    return 1.0 + b_um2 / lam**2 + c_um4 / lam**4


def scale(wavelength_nm, reference_nm: float, b_um2: float, c_um4: float):
    """Phase at ``wavelength_nm`` over phase at ``reference_nm`` for the same gray: s(lambda) / s(reference)."""
    lam, ref = np.asarray(wavelength_nm, float), float(reference_nm)
    return (relative_birefringence(lam, b_um2, c_um4) / lam) / (relative_birefringence(ref, b_um2, c_um4) / ref)


def _check(calibrations: list[Calibration]) -> None:
    if len(calibrations) < 2:
        raise ValueError(f"calibrations: expected at least 2 curves of one panel, got {len(calibrations)}")
    seen = set()
    for cal in calibrations:
        if not (math.isfinite(cal.wavelength_nm) and cal.wavelength_nm > 0):
            raise ValueError(f"wavelength_nm: expected a wavelength > 0 nm, got {cal.wavelength_nm}")
        key = round(cal.wavelength_nm, 3)
        if key in seen:
            raise ValueError(f"wavelength_nm: {cal.wavelength_nm:g} nm is given twice; expected distinct wavelengths")
        seen.add(key)
        if cal.gray.size < 3 or np.any(np.diff(cal.gray) <= 0):
            raise ValueError(f"gray: the {cal.wavelength_nm:g} nm curve needs at least 3 ascending gray levels")


def _on(cal: Calibration, gray: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """A calibration's phase and std at ``gray`` (inside its measured span), by monotone interpolation."""
    return monotone_cubic(cal.gray, cal.phase_rad, gray), np.interp(gray, cal.gray, cal.phase_std_rad)


def _ratio(ref_phase, ref_std, phase, std) -> tuple[float, float]:
    """Weighted slope of ``phase`` against ``ref_phase`` through the origin, and its std from the residual scatter."""
    r = float(phase @ ref_phase / (ref_phase @ ref_phase))
    floor = 1e-6  # rad: keeps the weights finite for noise-free curves
    for _ in range(2):  # the weights depend on the ratio (the reference's noise enters scaled by it)
        w = 1.0 / (std**2 + (r * ref_std) ** 2 + floor**2)
        r = float(np.sum(w * phase * ref_phase) / np.sum(w * ref_phase**2))
    residual = phase - r * ref_phase
    dof = max(phase.size - 1, 1)
    birge = max(float(np.sum(w * residual**2)) / dof, 1.0)  # never claim better than the stated stds
    return r, math.sqrt(birge / float(np.sum(w * ref_phase**2)))


def fit_panel(calibrations: list[Calibration]) -> PanelModel:
    """Fit the dispersion model to two or more calibrations of one panel (the first is the reference)."""
    _check(calibrations)
    ref = calibrations[0]
    lo = max(int(c.gray[0]) for c in calibrations)
    hi = min(int(c.gray[-1]) for c in calibrations)
    gray = ref.gray[(ref.gray >= lo) & (ref.gray <= hi)]
    if gray.size < 3:
        raise ValueError("gray: the curves share fewer than 3 gray levels; expected overlapping sweeps")
    on = [_on(c, gray) for c in calibrations]
    if on[0][0][-1] == on[0][0][0]:
        raise ValueError("phase_rad: the reference curve is flat over the common gray levels; expected a change")
    ratios, ratio_std = [1.0], [0.0]
    for cal, (phase, std) in zip(calibrations[1:], on[1:]):
        r, sr = _ratio(on[0][0], on[0][1], phase, std)
        if r <= 0:
            raise ValueError(f"phase_rad: the {cal.wavelength_nm:g} nm curve runs the other way from the reference; "
                             "expected curves of one sign convention")
        ratios.append(r)
        ratio_std.append(sr)
    lams = np.array([c.wavelength_nm for c in calibrations], float)
    tied = len(calibrations) == 2
    b, c, cov = _fit_coefficients(lams, np.array(ratios), np.array(ratio_std), tied)

    # the shared shape: each curve brought to the reference wavelength, averaged with inverse-variance weights
    stack = np.array([phase / r for (phase, _), r in zip(on, ratios)])
    var = np.array([np.maximum(std / r, 1e-9) ** 2 for (_, std), r in zip(on, ratios)])
    w = 1.0 / var
    shape = np.sum(w * stack, axis=0) / np.sum(w, axis=0)
    # Curves that disagree by more than their stated noise (analysis bias, a shape that is not quite shared) widen
    # the shape's std by the standard error of their mean, from the scatter pooled over every gray.
    n = len(calibrations)
    scatter_var = float(np.sum((stack - shape) ** 2)) / (gray.size * (n - 1)) / n
    shape_std = np.sqrt(1.0 / np.sum(w, axis=0) + scatter_var)
    model_scales = scale(lams, lams[0], b, c)
    residual = tuple(float(np.sqrt(np.mean((phase - s * shape) ** 2))) for (phase, _), s in zip(on, model_scales))
    return PanelModel(float(lams[0]), b, c, cov, tied, tuple(float(v) for v in lams), tuple(ratios), tuple(ratio_std),
                      residual, gray.astype(np.int64), shape, shape_std)


def _fit_coefficients(lams: np.ndarray, ratios: np.ndarray, ratio_std: np.ndarray, tied: bool):
    """Cauchy ratios (b, c) and their covariance from the measured scale ratios of the non-reference curves."""
    sigma = np.maximum(ratio_std[1:], 1e-9)

    def coefficients(p):
        return (p[0], p[0] ** 2) if tied else (p[0], p[1])

    def residual(p):
        return (scale(lams[1:], lams[0], *coefficients(p)) - ratios[1:]) / sigma

    start = [0.05] if tied else [0.05, 0.0]
    fit = optimize.least_squares(residual, start, x_scale=[0.05] if tied else [0.05, 0.005])
    cov_p = np.linalg.pinv(fit.jac.T @ fit.jac)
    b, c = coefficients(fit.x)
    if tied:
        grad = np.array([[1.0], [2 * fit.x[0]]])  # d(b, c)/d b
        cov = grad @ cov_p @ grad.T
    else:
        cov = cov_p
    return float(b), float(c), cov


def predict(model: PanelModel, wavelength_nm: float) -> Prediction:
    """The curve of the fitted panel at ``wavelength_nm``, with its uncertainty per gray (see the module)."""
    if not (math.isfinite(wavelength_nm) and wavelength_nm > 0):
        raise ValueError(f"wavelength_nm: expected a wavelength > 0 nm, got {wavelength_nm}")
    ref, b, c = model.reference_nm, model.b_um2, model.c_um4
    s = float(scale(wavelength_nm, ref, b, c))
    eps_b, eps_c = 1e-6, 1e-8
    grad = np.array([(scale(wavelength_nm, ref, b + eps_b, c) - s) / eps_b,
                     (scale(wavelength_nm, ref, b, c + eps_c) - s) / eps_c])
    s_var = float(grad @ model.covariance @ grad)
    closure = 0.0
    if model.tied:
        # the other closure: refit b with c = 0 to the same ratio, and take the change of the scale
        lam1, r1 = model.wavelengths_nm[1], model.ratios[1]
        b0 = optimize.brentq(lambda bb: scale(lam1, ref, bb, 0.0) - r1, -0.5, 5.0)
        closure = abs(float(scale(wavelength_nm, ref, b0, 0.0)) - s)
    phase = s * model.shape_rad
    std = np.sqrt((s * model.shape_std_rad) ** 2 + s_var * model.shape_rad**2 + (closure * model.shape_rad) ** 2)
    closure_rms = float(np.sqrt(np.mean((closure * model.shape_rad) ** 2)))
    return Prediction(float(wavelength_nm), model.gray.copy(), phase, std, s, closure_rms)
