"""Liquid-crystal response of a reflective panel: gray -> voltage -> director tilt -> birefringence -> phase.

Sources:
- Director tilt of an electrically controlled birefringence cell above the Freedericksz threshold V_c,
  theta(V) = pi/2 - 2 arctan(exp(-(V - V_c) / V_0)) (K. Lu and B. E. A. Saleh, Opt. Eng. 29, 240 (1990), from memory).
- Effective extraordinary index for a director tilted by theta out of the cell plane,
  1/n(theta)^2 = cos^2(theta)/n_e^2 + sin^2(theta)/n_o^2 (index ellipsoid, any crystal-optics text).
- Extended Cauchy dispersion n = A + B/lambda^2 + C/lambda^4 (lambda in um); default coefficients of the nematic
  mixture E7 at 25 C from Tkachenko et al., Mol. Cryst. Liq. Cryst. 454, 263 (2006), valid 0.532-1.7 um.
- Temperature: birefringence follows the order parameter, dn(T) proportional to (1 - T/T_c)^beta (Haller's
  approximation; beta of about 0.2 from memory).
- Reflective double pass: phi = 4 pi d dn_eff / lambda, lengthened by 1/cos of the refraction angle in the cell.

Sign (the project's convention): the panel multiplies the reflected field by exp(+i phi(g)) with phi the optical
delay (waves exp(i(k.r - w t))), so the extraordinary light's phi(g) is the retardance. It falls as the voltage
tilts the director upright; ``phase_rad`` returns phi(g) - phi(0) with that true direction (negative, falling).
"""

from __future__ import annotations

import numpy as np

KELVIN = 273.15


def cauchy_index(coeffs: tuple[float, float, float], wavelength_um: float) -> float:
    """Refractive index from extended-Cauchy coefficients (A, B in um^2, C in um^4)."""
    a, b, c = coeffs
    return a + b / wavelength_um**2 + c / wavelength_um**4


def order_factor(temperature_c: float, clearing_c: float, exponent: float) -> float:
    """Birefringence at ``temperature_c`` relative to its value at absolute zero of the order law."""
    return (1.0 - (temperature_c + KELVIN) / (clearing_c + KELVIN)) ** exponent


def tilt_rad(voltage: np.ndarray, threshold_v: float, v0: float) -> np.ndarray:
    """Mid-layer director tilt (rad, 0 in the cell plane) for rms drive ``voltage`` (V)."""
    over = np.maximum(np.asarray(voltage, dtype=float) - threshold_v, 0.0)
    return np.where(over > 0, np.pi / 2 - 2 * np.arctan(np.exp(-over / v0)), 0.0)


class PanelResponse:
    """Phase response of one panel at one wavelength, incidence angle and temperature.

    ``resp`` is a config ``[simulator.response]`` section; gray levels run 0..2**bit_depth - 1.
    """

    def __init__(self, resp, bit_depth: int, wavelength_nm: float, incidence_deg: float = 0.0):
        self.resp = resp
        self.gray_max = 2**bit_depth - 1
        lam_um = wavelength_nm * 1e-3
        self.wavelength_um = lam_um
        n_e = cauchy_index(resp.ne_cauchy, lam_um)
        self.n_o = cauchy_index(resp.no_cauchy, lam_um)
        scale = (order_factor(resp.temperature_c, resp.clearing_c, resp.order_exponent)
                 / order_factor(resp.reference_temperature_c, resp.clearing_c, resp.order_exponent))
        self.n_e = self.n_o + (n_e - self.n_o) * scale
        n_mean = (self.n_e + 2 * self.n_o) / 3
        inside = np.arcsin(np.sin(np.deg2rad(incidence_deg)) / n_mean)
        self.path_factor = 1.0 / np.cos(inside)

    @property
    def birefringence(self) -> float:
        """Full birefringence n_e - n_o at this wavelength and temperature."""
        return self.n_e - self.n_o

    def voltage(self, gray) -> np.ndarray:
        """Rms drive voltage (V) for gray level(s), through the electronic gamma."""
        g = np.asarray(gray, dtype=float) / self.gray_max
        r = self.resp
        return r.v_min + (r.v_max - r.v_min) * g**r.electronic_gamma

    def retardance_rad(self, gray) -> np.ndarray:
        """Double-pass extraordinary-minus-ordinary phase (rad) at gray level(s)."""
        theta = tilt_rad(self.voltage(gray), self.resp.threshold_v, self.resp.v0)
        n_eff = 1.0 / np.sqrt(np.cos(theta) ** 2 / self.n_e**2 + np.sin(theta) ** 2 / self.n_o**2)
        return 4 * np.pi * self.resp.cell_gap_um * (n_eff - self.n_o) * self.path_factor / self.wavelength_um

    def phase_rad(self, gray) -> np.ndarray:
        """Phase the panel adds at gray level(s) less that at gray 0 (rad): the true curve, falling with gray."""
        return self.retardance_rad(gray) - self.retardance_rad(0)

    def curve(self) -> tuple[np.ndarray, np.ndarray]:
        """Every gray level and its true phase phi(g) - phi(0) (rad)."""
        grays = np.arange(self.gray_max + 1)
        return grays, self.phase_rad(grays)

    def slope_weight(self, gray) -> np.ndarray:
        """|d phase / d voltage| at gray level(s), relative to its largest value over the panel's range.

        Flicker comes from ripple on the drive voltage, so its phase amplitude scales with this slope.
        """
        if not hasattr(self, "_slope"):
            grays = np.arange(self.gray_max + 1)
            slope = np.abs(np.gradient(self.retardance_rad(grays), self.voltage(grays)))
            self._slope = slope / slope.max()
        return self._slope[np.asarray(gray, dtype=int)]
