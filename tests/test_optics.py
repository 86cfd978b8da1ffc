"""Free-space propagation against textbook optics: Parseval, Gaussian beams, the grating equation, Goodman."""

import numpy as np
import pytest

from analysis.config import Beam, Response
from analysis.patterns import SplitLayout, grating_mask
from simulators.optics import Propagator, beam_field
from simulators.response import PanelResponse

PITCH_UM, LAMBDA_UM = 8.5, 1.064


def intensity_moments(field, prop):
    """Centroid (um) and second-moment radius w = 2 sigma (um) along x of |field|^2 on the padded grid."""
    power = np.abs(field) ** 2
    cols = (np.arange(prop.shape[1]) - prop.offset[1] - (prop.shape_in[1] - 1) / 2) * PITCH_UM
    px = power.sum(axis=0) / power.sum()
    mean = (px * cols).sum()
    return mean, 2 * np.sqrt((px * (cols - mean) ** 2).sum())


def test_propagation_conserves_energy():
    """Parseval: the angular-spectrum propagator is unitary on the field it keeps (any Fourier-optics text)."""
    beam = beam_field(256, 256, PITCH_UM, Beam(radius_mm=0.3), LAMBDA_UM, 1e-3)
    out = Propagator(256, 256, PITCH_UM, LAMBDA_UM, 50e3)(beam.astype(np.complex64))
    assert np.sum(np.abs(out) ** 2) * PITCH_UM**2 == pytest.approx(1e-3, rel=1e-4)


@pytest.mark.parametrize("z_mm", [20.0, 60.0, 120.0])
def test_gaussian_beam_radius_follows_siegman(z_mm):
    """w(z) = w0 sqrt(1 + (z/zR)^2), zR = pi w0^2 / lambda (A. E. Siegman, Lasers, 1986)."""
    w0_um = 100.0
    beam = beam_field(512, 64, PITCH_UM, Beam(radius_mm=w0_um / 1e3), LAMBDA_UM, 1e-3)
    prop = Propagator(512, 64, PITCH_UM, LAMBDA_UM, z_mm * 1e3)
    # a 1-D beam: make it uniform in y so that only x diffracts
    field = np.repeat(beam[32:33], 64, axis=0).astype(np.complex64)
    _, w = intensity_moments(prop(field)[prop.offset[0] + 32: prop.offset[0] + 33], prop)
    z_r = np.pi * w0_um**2 / LAMBDA_UM
    assert w == pytest.approx(w0_um * np.sqrt(1 + (z_mm * 1e3 / z_r) ** 2), rel=0.01)


def test_first_order_leaves_at_the_grating_equation_angle():
    """sin(theta_1) = lambda / period (grating equation, any optics handbook): at distance z the +1 order's spot
    sits at z tan(theta_1) from the beam axis."""
    period_px, z_um = 6, 100e3
    width, height = 1024, 16
    beam = beam_field(width, height, PITCH_UM, Beam(radius_mm=0.5), LAMBDA_UM, 1e-3)
    stripes = grating_mask(width, height, SplitLayout(period_px=period_px))
    field = (beam * np.exp(1j * np.pi * stripes)).astype(np.complex64)
    prop = Propagator(width, height, PITCH_UM, LAMBDA_UM, z_um)
    far = prop(field)[prop.offset[0] + height // 2]
    cols = (np.arange(prop.shape[1]) - prop.offset[1] - (width - 1) / 2) * PITCH_UM
    theta = np.arcsin(LAMBDA_UM / (period_px * PITCH_UM))
    expected = z_um * np.tan(theta)
    near = np.abs(cols - expected) < 1500
    power = np.abs(far[near]) ** 2
    assert (power * cols[near]).sum() / power.sum() == pytest.approx(expected, abs=PITCH_UM)


@pytest.mark.parametrize("low, high", [(0, 40), (0, 80), (30, 128), (0, 200)])
def test_binary_grating_efficiency_of_the_simulated_panel(low, high):
    """Binary phase grating, 50 % duty, step dphi: eta(+-1) = (2/pi)^2 sin^2(dphi/2), eta(0) = cos^2(dphi/2)
    (J. W. Goodman, Introduction to Fourier Optics); dphi from the simulated liquid-crystal response."""
    r = PanelResponse(Response(), 8, 1064.0)
    dphi = float(r.retardance_rad(high) - r.retardance_rad(low))
    stripes = grating_mask(600, 1, SplitLayout(period_px=6))[0]
    phase = np.where(stripes, r.retardance_rad(high), r.retardance_rad(low))
    field = np.repeat(np.exp(1j * phase), 16)  # each pixel a flat step
    power = np.abs(np.fft.fft(field)) ** 2
    power /= power.sum()
    assert power[100] == pytest.approx((2 / np.pi) ** 2 * np.sin(dphi / 2) ** 2, abs=2e-3)
    assert power[0] == pytest.approx(np.cos(dphi / 2) ** 2, abs=1e-9)
