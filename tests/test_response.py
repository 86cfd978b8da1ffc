"""Liquid-crystal response: dispersion, tilt, temperature and the double-pass phase."""

import numpy as np
import pytest

from analysis.config import Response, config_from_dict
from simulators.response import PanelResponse, cauchy_index, tilt_rad


@pytest.mark.parametrize("wavelength_nm, dn", [(561, 0.220), (780, 0.199), (1064, 0.190)])
def test_e7_birefringence_from_extended_cauchy(wavelength_nm, dn):
    """E7 at 25 C, n = A + B/l^2 + C/l^4 with Tkachenko et al., Mol. Cryst. Liq. Cryst. 454, 263 (2006):
    dn = 0.220 at 561 nm, 0.199 at 780 nm, 0.190 at 1064 nm (derived in shared/REFERENCES.md)."""
    r = PanelResponse(Response(), 8, wavelength_nm)
    assert r.birefringence == pytest.approx(dn, abs=1.5e-3)
    assert cauchy_index(Response().no_cauchy, wavelength_nm / 1000) == pytest.approx(r.n_o)


def test_tilt_is_zero_below_threshold_and_tends_to_upright():
    """Lu & Saleh (Opt. Eng. 29, 240, 1990, from memory): no tilt below V_c, pi/2 - 2 arctan(1) = 0 at V_c,
    approaching pi/2 at high voltage."""
    t = tilt_rad(np.array([0.0, 0.9, 0.9 + 0.9 * np.log(3), 20.0]), threshold_v=0.9, v0=0.9)
    assert t[0] == 0 and t[1] == 0
    assert t[2] == pytest.approx(np.pi / 2 - 2 * np.arctan(1 / 3))
    assert t[3] == pytest.approx(np.pi / 2, abs=1e-6)
    assert np.all(np.diff(tilt_rad(np.linspace(0, 5, 200), 0.9, 0.9)) >= 0)


def test_full_swing_equals_the_double_pass_retardance():
    """Reflective cell: phi_max = 4 pi dn d / lambda (common practice) when the drive tilts the director upright."""
    resp = Response(v_min=0.0, v_max=20.0)
    r = PanelResponse(resp, 8, 633.0)
    assert r.phase_rad(255) == pytest.approx(4 * np.pi * r.birefringence * resp.cell_gap_um / 0.633, rel=1e-4)


def test_curve_rises_from_zero_and_is_smaller_at_longer_wavelengths():
    cfg = config_from_dict({})
    short = PanelResponse(cfg.simulator.response, 8, 780.0).curve()[1]
    long = PanelResponse(cfg.simulator.response, 8, 1064.0).curve()[1]
    assert short[0] == 0 and long[0] == 0
    assert np.all(np.diff(long) >= 0) and long[-1] > 2 * np.pi
    assert np.all(short[1:] > long[1:])


def test_warmer_panel_has_less_range_and_obliquity_adds_path():
    cool = PanelResponse(Response(temperature_c=25.0), 8, 1064.0)
    warm = PanelResponse(Response(temperature_c=45.0), 8, 1064.0)
    assert warm.phase_rad(255) < 0.95 * cool.phase_rad(255)
    tilted = PanelResponse(Response(), 8, 1064.0, incidence_deg=10.0)
    n_mean = (cool.n_e + 2 * cool.n_o) / 3
    factor = 1 / np.cos(np.arcsin(np.sin(np.deg2rad(10.0)) / n_mean))
    assert tilted.phase_rad(255) == pytest.approx(cool.phase_rad(255) * factor)


def test_ten_bit_panel_spans_the_same_voltage_range():
    r8 = PanelResponse(Response(), 8, 1064.0)
    r10 = PanelResponse(Response(), 10, 1064.0)
    assert r10.phase_rad(1023) == pytest.approx(r8.phase_rad(255))
    assert r10.phase_rad(512) == pytest.approx(float(np.interp(512 / 1023 * 255, np.arange(256), r8.curve()[1])),
                                               abs=2e-3)
