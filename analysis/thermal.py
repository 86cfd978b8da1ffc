"""Phase curve at a temperature between (or near) calibrated ones: phi(g, T) from runs at two or more temperatures.

Model. The birefringence follows the nematic order parameter, dn(T) proportional to S(T) = (1 - T/T_c)^beta
(Haller's approximation; T and T_c in kelvin; the simulator uses the same law). At each gray the phase is taken as
affine in S: phi(g, T) = A(g) + B(g) S(T). A pure rescaling (A = 0) is the first-order picture; A absorbs the part of
dn_eff(theta) that is not proportional to dn, so with two runs the model reproduces both exactly.

Fit. The runs' overall scale ratios (weighted least-squares slope of each curve against the first, through the
origin) fix the law: two runs give one ratio, enough for one of T_c and beta, so the other is held at a stated value
and the prediction is repeated with the roles swapped (beta held, T_c fitted); half the spread between the two
closures is reported as an uncertainty term. Three or more runs fit both. Per gray, A and B come from weighted least
squares over the runs.

Uncertainty (rad, per gray): the runs' stds propagated through the per-gray fit, plus the closure term. Outside the
measured temperatures the result is an extrapolation and says so.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize

KELVIN = 273.15
BETA_TYPICAL = 0.22  # order-parameter exponent held when two runs cannot fix it (nematics: about 0.2, from memory)


@dataclass(frozen=True, eq=False)
class TemperatureRun:
    """One calibration: panel temperature (C) and its curve at every gray (phase and std, rad)."""

    temperature_c: float
    phase_rad: np.ndarray
    phase_std_rad: np.ndarray


@dataclass(frozen=True, eq=False)
class ThermalPrediction:
    """The curve predicted at ``temperature_c`` with its std (rad) per gray, and how it was obtained."""

    temperature_c: float
    phase_rad: np.ndarray
    phase_std_rad: np.ndarray
    clearing_c: float
    exponent: float
    measured_range_c: tuple[float, float]
    closure_rad: float  # RMS over grays of the closure term
    inside: bool

    def note(self) -> str | None:
        """A sentence when the temperature lies outside the measured range (an extrapolation), else None."""
        if self.inside:
            return None
        lo, hi = self.measured_range_c
        return (f"temperature {self.temperature_c:g} C lies outside the measured range {lo:g}..{hi:g} C: the table is "
                f"an extrapolation of the order-parameter law")


def order_parameter(temperature_c, clearing_c: float, exponent: float):
    """S(T) = (1 - T/T_c)^beta (temperatures in C, the law in kelvin); 0 at and above the clearing point."""
    t = (np.asarray(temperature_c, float) + KELVIN) / (clearing_c + KELVIN)
    return np.maximum(1.0 - t, 0.0) ** exponent


def _check(runs: list[TemperatureRun], clearing_c: float) -> None:
    if len(runs) < 2:
        raise ValueError(f"runs: expected calibrations at 2 or more temperatures, got {len(runs)}")
    temps = [r.temperature_c for r in runs]
    if len({round(t, 2) for t in temps}) < len(temps):
        raise ValueError(f"temperature_c: expected distinct temperatures, got {temps}")
    if max(temps) >= clearing_c:
        raise ValueError(f"clearing_c: expected a clearing point above every run's temperature, got {clearing_c}")
    size = runs[0].phase_rad.size
    if any(r.phase_rad.size != size or r.phase_std_rad.size != size for r in runs):
        raise ValueError("phase_rad: expected every run's curve at the same gray levels")


def _ratios(runs: list[TemperatureRun]) -> np.ndarray:
    ref = runs[0].phase_rad
    out = []
    for r in runs:
        w = 1.0 / (r.phase_std_rad**2 + runs[0].phase_std_rad**2 + 1e-12)
        out.append(float(np.sum(w * r.phase_rad * ref) / np.sum(w * ref**2)))
    return np.array(out)


def _law(temps: np.ndarray, ratios: np.ndarray, clearing_c: float, exponent: float | None):
    """(T_c, beta) reproducing the ratios: fit beta (T_c held), T_c (beta held, exponent given), or both."""
    def resid(p, tc, beta):
        tc = p[0] if tc is None else tc
        beta = p[-1] if beta is None else beta
        s = order_parameter(temps, tc, beta)
        return s / s[0] - ratios

    if temps.size == 2 and exponent is None:
        fit = optimize.least_squares(resid, [BETA_TYPICAL], args=(clearing_c, None), bounds=([0.01], [1.0]))
        return clearing_c, float(fit.x[0])
    if temps.size == 2:
        fit = optimize.least_squares(resid, [clearing_c], args=(None, exponent),
                                     bounds=([temps.max() + 0.5], [temps.max() + 500.0]))
        return float(fit.x[0]), exponent
    fit = optimize.least_squares(resid, [clearing_c, BETA_TYPICAL], args=(None, None),
                                 bounds=([temps.max() + 0.5, 0.01], [temps.max() + 500.0, 1.0]))
    return float(fit.x[0]), float(fit.x[1])


def _affine(runs, s_runs, s_new):
    """Per gray, the weighted least-squares value of A + B S at ``s_new`` and its std."""
    y = np.array([r.phase_rad for r in runs])
    var = np.array([np.maximum(r.phase_std_rad, 1e-9) ** 2 for r in runs])
    design = np.column_stack([np.ones_like(s_runs), s_runs])
    at = np.array([1.0, s_new])
    phase, std = np.empty(y.shape[1]), np.empty(y.shape[1])
    for j in range(y.shape[1]):
        w = 1.0 / var[:, j]
        cov = np.linalg.inv(design.T @ (design * w[:, None]))
        coef = cov @ design.T @ (w * y[:, j])
        phase[j], std[j] = at @ coef, math.sqrt(float(at @ cov @ at))
    return phase, std


def predict_temperature(runs: list[TemperatureRun], temperature_c: float, clearing_c: float) -> ThermalPrediction:
    """The curve at ``temperature_c`` from runs at two or more temperatures (see the module docstring).

    ``clearing_c`` is the liquid crystal's nematic-isotropic point (C): fitted with three or more runs, held with two.
    """
    _check(runs, clearing_c)
    if not math.isfinite(temperature_c) or temperature_c >= clearing_c:
        raise ValueError(f"temperature_c: expected a temperature below the clearing point {clearing_c:g} C, "
                         f"got {temperature_c}")
    temps = np.array([r.temperature_c for r in runs], float)
    ratios = _ratios(runs)
    tc, beta = _law(temps, ratios, clearing_c, None)
    s = order_parameter(temps, tc, beta)
    phase, std = _affine(runs, s, float(order_parameter(temperature_c, tc, beta)))
    closure = np.zeros_like(phase)
    if temps.size == 2:
        tc2, beta2 = _law(temps, ratios, clearing_c, BETA_TYPICAL)
        other, _ = _affine(runs, order_parameter(temps, tc2, beta2), float(order_parameter(temperature_c, tc2, beta2)))
        closure = 0.5 * np.abs(other - phase)
    inside = bool(temps.min() <= temperature_c <= temps.max())
    return ThermalPrediction(float(temperature_c), phase, np.sqrt(std**2 + closure**2), tc, beta,
                             (float(temps.min()), float(temps.max())), float(np.sqrt(np.mean(closure**2))), inside)
