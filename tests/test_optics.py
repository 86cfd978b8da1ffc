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


def test_propagation_conserves_energy_but_for_the_pixel_aperture():
    """Parseval: angular-spectrum propagation is unitary (any Fourier-optics text); the flat pixels' aperture
    sinc^2(f p) ~ 1 - (pi f p)^2 / 3 sends the fraction p^2 / (12 w^2) per axis of a Gaussian beam (1/e^2 radius w,
    power spectrum of variance 1 / (4 pi^2 w^2)) into the pixel grid's orders: 1.34e-4 for p = 8.5 um, w = 300 um."""
    beam = beam_field(256, 256, PITCH_UM, Beam(radius_mm=0.3), LAMBDA_UM, 1e-3)
    out = Propagator(256, 256, PITCH_UM, LAMBDA_UM, 50e3)(beam.astype(np.complex64))
    lost = 2 * PITCH_UM**2 / (12 * 300.0**2)
    assert np.sum(np.abs(out) ** 2) * PITCH_UM**2 == pytest.approx(1e-3 * (1 - lost), rel=1e-5)


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


@pytest.mark.parametrize("z_mm", [30.0, 66.4, 150.0])
def test_angular_spectrum_field_is_the_gaussian_beam_with_gouy_phase_and_curvature(z_mm):
    """A Gaussian waist w0 propagated by z is, with waves exp(i(k z - w t)) and the common exp(i k z) left out,
    E = (w0 / w) exp(-r^2 / w^2) exp(i k r^2 / 2R - i psi), w = w0 sqrt(1 + (z/zR)^2), R = z (1 + (zR/z)^2),
    psi = arctan(z / zR) (the Gouy phase), zR = pi w0^2 / lambda (A. E. Siegman, Lasers, 1986, ch. 17; his
    exp(+j w t) convention flips the signs of both phases). Compared in amplitude and phase over r < 1.5 w."""
    w0, n = 150.0, 512
    beam = beam_field(n, n, PITCH_UM, Beam(radius_mm=w0 / 1e3), LAMBDA_UM, 1e-3)
    prop = Propagator(n, n, PITCH_UM, LAMBDA_UM, z_mm * 1e3)
    out = prop(beam.astype(np.complex64))
    oy, ox = prop.offset
    out = out[oy:oy + n, ox:ox + n] / beam[n // 2, n // 2]  # back on the panel grid, relative to the waist's peak
    x = (np.arange(n) - (n - 1) / 2) * PITCH_UM
    r2 = x[None, :] ** 2 + x[:, None] ** 2
    z = z_mm * 1e3
    z_r = np.pi * w0**2 / LAMBDA_UM
    w = w0 * np.sqrt(1 + (z / z_r) ** 2)
    radius = z * (1 + (z_r / z) ** 2)
    gouy = np.arctan(z / z_r)
    k = 2 * np.pi / LAMBDA_UM
    # the grid's samples sit half a pitch off the centre: the waist's peak sample is exp(-pitch^2/2 / w0^2)
    peak = np.exp(-(PITCH_UM**2 / 2) / w0**2)
    analytic = peak ** -1 * (w0 / w) * np.exp(-r2 / w**2) * np.exp(1j * (k * r2 / (2 * radius) - gouy))
    inside = r2 < (1.5 * w) ** 2
    assert np.max(np.abs(out[inside] - analytic[inside])) < 2e-3 * (w0 / w)
    centre = np.angle(out[n // 2 - 1: n // 2 + 1, n // 2 - 1: n // 2 + 1].mean())
    assert centre == pytest.approx(-gouy + k * (PITCH_UM**2 / 2) / (2 * radius), abs=1e-3)


@pytest.mark.parametrize("low, high", [(0, 40), (0, 80), (30, 128), (0, 200)])
def test_binary_grating_efficiency_through_the_propagator(low, high):
    """Binary phase grating, 50 % duty, step dphi: eta(+-1) = (2/pi)^2 sin^2(dphi/2), eta(0) = cos^2(dphi/2)
    (J. W. Goodman, Introduction to Fourier Optics). The simulated panel's stripes are propagated 100 mm, where the
    orders (20.9 mrad apart) lie 4 beam radii apart; each order's power is summed in its own window."""
    r = PanelResponse(Response(), 8, 1064.0)
    dphi = float(r.retardance_rad(high) - r.retardance_rad(low))
    width, height, z_um = 2048, 128, 100e3
    beam = beam_field(width, height, PITCH_UM, Beam(radius_mm=0.5), LAMBDA_UM, 1e-3)
    stripes = grating_mask(width, height, SplitLayout(period_px=6))
    field = (beam * np.exp(1j * np.where(stripes, r.retardance_rad(high), r.retardance_rad(low)))).astype(np.complex64)
    prop = Propagator(width, height, PITCH_UM, LAMBDA_UM, z_um)
    power = (np.abs(prop(field)) ** 2).sum(axis=0)
    total = np.sum(np.abs(field) ** 2)  # the propagator is unitary on what it keeps (Parseval)
    cols = (np.arange(prop.shape[1]) - prop.offset[1] - (width - 1) / 2) * PITCH_UM
    spot = z_um * np.tan(np.arcsin(LAMBDA_UM / (6 * PITCH_UM)))

    def share(centre_um):
        return power[np.abs(cols - centre_um) < 1000.0].sum() / total

    eta1 = (2 / np.pi) ** 2 * np.sin(dphi / 2) ** 2
    assert share(spot) == pytest.approx(eta1, abs=2e-3)
    assert share(-spot) == pytest.approx(eta1, abs=2e-3)
    assert share(0.0) == pytest.approx(np.cos(dphi / 2) ** 2, abs=2e-3)


def test_photon_count_from_watts_by_hand():
    """E = h c / lambda with the exact SI constants h = 6.62607015e-34 J s, c = 299 792 458 m/s (CODATA 2018):
    at 1064 nm one joule is 5.3563e18 photons. A pixel of 4.8 um under 1 uW/mm^2 for 1 ms behind OD 3 with
    QE 0.12 collects 1e-6 W/mm^2 * 2.304e-5 mm^2 * 1e-3 s * 5.3563e18 / 1000 * 0.12 = 14.81 electrons."""
    from analysis.config import config_from_dict
    from simulators.bench import Bench
    h, c = 6.62607015e-34, 299792458.0
    per_joule = 1.064e-6 / (h * c)
    assert per_joule == pytest.approx(5.3563e18, rel=1e-4)
    cfg = config_from_dict({"modulator": {"width_px": 64, "height_px": 48}, "camera": {"width_px": 32, "height_px": 24},
                            "geometry": {"distance_mm": 10.0, "camera_offset_mm": [0.0, 0.0]},
                            "pattern": {"grating_period_px": 4}, "simulator": {"beam": {"radius_mm": 0.2}}})
    bench = Bench(cfg)
    irradiance_w_per_um2 = np.full(4, 1e-6 / 1e6)
    electrons = bench.electrons(irradiance_w_per_um2, 1e-3)
    assert electrons == pytest.approx(1e-6 * (4.8e-3) ** 2 * 1e-3 * per_joule * 1e-3 * 0.12, rel=1e-5)
    assert electrons[0] == pytest.approx(14.81, abs=0.01)
