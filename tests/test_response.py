"""Liquid-crystal response against published dispersion fits and textbook formulas worked by hand in the tests."""

import numpy as np
import pytest

from analysis.config import Response, config_from_dict
from simulators.response import PanelResponse, tilt_rad

# Extended-Cauchy coefficients of E7 at 25 C, n = A + B / l^2 + C / l^4 (l in um): (n_e, n_o)
LI_2005 = ((1.6933, 0.0078, 0.0028), (1.4990, 0.0072, 0.0003))  # Li, Wen, Gauza, Lu, Wu, J. Display Technol. 1, 51
TKACHENKO_2006 = ((1.67798, 0.01696, 0.00127), (1.49669, 0.00785, 0.00026))  # Mol. Cryst. Liq. Cryst. 454, 263


@pytest.mark.parametrize("wavelength_nm", [532.0, 561.0, 589.0, 633.0, 656.0])
def test_two_published_e7_fits_give_one_birefringence(wavelength_nm):
    """Li et al. (2005, fitted on 0.45-0.656 um) and Tkachenko et al. (2006, 0.532-1.7 um) measured E7 separately;
    where their ranges overlap the panel model fed with either fit must give the same dn to within the two
    fits' disagreement, at most 1.5e-3 (0.7 %) over 532-656 nm (worked from the published coefficients; their
    stated accuracy of a few 1e-4 per index is from memory)."""
    li = PanelResponse(Response(ne_cauchy=LI_2005[0], no_cauchy=LI_2005[1]), 8, wavelength_nm).birefringence
    tk = PanelResponse(Response(ne_cauchy=TKACHENKO_2006[0], no_cauchy=TKACHENKO_2006[1]), 8,
                       wavelength_nm).birefringence
    assert 0.20 < tk < 0.23
    assert li == pytest.approx(tk, abs=3e-3)


def test_tilt_is_zero_below_threshold_and_tends_to_upright():
    """Lu & Saleh (Opt. Eng. 29, 240, 1990, from memory): no tilt below V_c, pi/2 - 2 arctan(1) = 0 at V_c,
    approaching pi/2 at high voltage."""
    t = tilt_rad(np.array([0.0, 0.9, 0.9 + 0.9 * np.log(3), 20.0]), threshold_v=0.9, v0=0.9)
    assert t[0] == 0 and t[1] == 0
    assert t[2] == pytest.approx(np.pi / 2 - 2 * np.arctan(1 / 3))
    assert t[3] == pytest.approx(np.pi / 2, abs=1e-6)
    assert np.all(np.diff(tilt_rad(np.linspace(0, 5, 200), 0.9, 0.9)) >= 0)


@pytest.mark.parametrize("gray", [0, 40, 100, 180, 255])
def test_retardance_worked_by_hand(gray):
    """Each step from the textbooks, written out here: drive V = v_min + (v_max - v_min) (g / 255)^gamma; director
    tilt theta = pi/2 - 2 arctan(exp(-(V - V_c) / V_0)) above V_c (Lu & Saleh 1990, from memory); the light makes
    the angle psi = pi/2 - theta with the optic axis, n(psi) = n_o n_e / sqrt(n_e^2 cos^2 psi + n_o^2 sin^2 psi)
    (index ellipsoid, M. Born and E. Wolf, Principles of Optics); reflective double pass through d at the
    refraction angle asin(sin(3 deg) / n_o): phi = 4 pi d (n(psi) - n_o) / (lambda cos), E7 indices of Tkachenko
    et al. 2006 at 1064 nm. The model's mean index (n_e + 2 n_o) / 3 for the refraction angle shortens the path by
    5e-5 against n_o (worked: theta^2 / 2 with theta = sin(3 deg) / n)."""
    lam = 1.064
    n_e = 1.67798 + 0.01696 / lam**2 + 0.00127 / lam**4
    n_o = 1.49669 + 0.00785 / lam**2 + 0.00026 / lam**4
    v = 0.9 + (3.0 - 0.9) * (gray / 255) ** 1.0
    theta = np.pi / 2 - 2 * np.arctan(np.exp(-(v - 0.9) / 0.9)) if v > 0.9 else 0.0
    psi = np.pi / 2 - theta
    n_psi = n_o * n_e / np.sqrt(n_e**2 * np.cos(psi) ** 2 + n_o**2 * np.sin(psi) ** 2)
    inside = np.arcsin(np.sin(np.deg2rad(3.0)) / n_o)
    phi = 4 * np.pi * 3.2 * (n_psi - n_o) / (lam * np.cos(inside))
    model = PanelResponse(Response(), 8, 1064.0, incidence_deg=3.0)
    assert float(model.retardance_rad(gray)) == pytest.approx(phi, rel=1e-4, abs=1e-9)


def test_full_swing_equals_the_double_pass_retardance():
    """Reflective cell: phi_max = 4 pi dn d / lambda (common practice) when the drive tilts the director upright;
    dn of E7 at 633 nm from Tkachenko's coefficients worked here by hand."""
    resp = Response(v_min=0.0, v_max=20.0)
    lam = 0.633
    dn = (1.67798 - 1.49669) + (0.01696 - 0.00785) / lam**2 + (0.00127 - 0.00026) / lam**4
    r = PanelResponse(resp, 8, 633.0)
    assert -r.phase_rad(255) == pytest.approx(4 * np.pi * dn * resp.cell_gap_um / lam, rel=1e-4)


def test_curve_falls_from_zero_and_is_steeper_at_shorter_wavelengths():
    """phi(g) - phi(0) with the field's exp(+i phi) sign: the retardance falls as the voltage rises."""
    cfg = config_from_dict({})
    short = PanelResponse(cfg.simulator.response, 8, 780.0).curve()[1]
    long = PanelResponse(cfg.simulator.response, 8, 1064.0).curve()[1]
    assert short[0] == 0 and long[0] == 0
    assert np.all(np.diff(long) <= 0) and long[-1] < -2 * np.pi
    assert np.all(short[1:] < long[1:])


def test_warmer_panel_has_less_range_by_the_order_law_and_obliquity_adds_path():
    """dn(T) proportional to (1 - T/T_c)^beta (order-parameter law, beta = 0.22, T_c = 58 C): from 25 C to 45 C the
    range shrinks to (13/33)^0.22 = 0.8147 (worked in kelvin here). At 10 deg incidence the double pass is longer
    by 1/cos(asin(sin 10 deg / n)) = 1.0064 for n ~ 1.55 (Snell's law)."""
    cool = PanelResponse(Response(temperature_c=25.0), 8, 1064.0)
    warm = PanelResponse(Response(temperature_c=45.0), 8, 1064.0)
    ratio = ((1 - 318.15 / 331.15) / (1 - 298.15 / 331.15)) ** 0.22
    assert ratio == pytest.approx(0.8147, abs=1e-4)
    assert warm.birefringence / cool.birefringence == pytest.approx(ratio, rel=1e-9)
    # the range follows within 1e-3: n(psi) is not linear in dn where the director is not quite upright at gray 255
    assert warm.phase_rad(255) / cool.phase_rad(255) == pytest.approx(ratio, rel=2e-3)
    tilted = PanelResponse(Response(), 8, 1064.0, incidence_deg=10.0)
    assert tilted.phase_rad(255) / cool.phase_rad(255) == pytest.approx(1.0064, abs=3e-4)


def test_ten_bit_panel_spans_the_same_voltage_range():
    r8 = PanelResponse(Response(), 8, 1064.0)
    r10 = PanelResponse(Response(), 10, 1064.0)
    assert r10.phase_rad(1023) == pytest.approx(r8.phase_rad(255))
    assert r10.phase_rad(512) == pytest.approx(float(np.interp(512 / 1023 * 255, np.arange(256), r8.curve()[1])),
                                               abs=2e-3)
