"""The phase sign convention on the simulated bench: patterns drawn through the true curve do what they were drawn for.

Convention (decided for the project): the panel multiplies the reflected field by exp(+i phi(g)), waves written
exp(i(k.r - w t)), so phi is k times the extra optical path. Then psi = +2 pi x / L steers toward +x and
psi = -pi r^2 / (lambda f) focuses at f > 0 (J. W. Goodman, Introduction to Fourier Optics: a thin lens's phase
-k r^2 / 2f in the exp(-i w t) convention).
"""

import numpy as np
import pytest

from analysis.config import replace
from simulators.bench import Bench


def gray_for(bench, psi):
    """Gray levels whose true phase is psi (mod 2 pi), read on the true curve's first 2 pi, whichever way it runs."""
    grays, phi = bench.true_curve()
    reach = np.flatnonzero(np.abs(phi) >= 2 * np.pi)[0]
    g, p = grays[: reach + 1], phi[: reach + 1]
    direction = np.sign(p[-1])
    target = direction * np.mod(direction * np.asarray(psi), 2 * np.pi)  # the same phase on the curve's side
    order = np.argsort(p)
    return np.rint(np.interp(target, p[order], g[order])).astype(np.uint16)


def far_field(bench, pattern):
    """Intensity on the padded grid at the bench's distance and the grid's x and y (um from the panel centre)."""
    bench.show(pattern)
    bench.clock.sleep(0.5)
    field = bench.propagator(bench.panel_field(bench.clock.now()))
    ny, nx = bench.propagator.shape_in
    oy, ox = bench.propagator.offset
    pitch = bench.propagator.pitch_um
    x = (np.arange(field.shape[1]) - ox - (nx - 1) / 2) * pitch
    y = (np.arange(field.shape[0]) - oy - (ny - 1) / 2) * pitch
    return np.abs(field) ** 2, x, y


@pytest.fixture(scope="module")
def bench(small_cfg):
    return Bench(replace(small_cfg, **{"simulator.timing.vibration_urad": 0.0, "simulator.noise.stray_light": 0.0}))


def test_true_curve_falls_with_gray(bench):
    """A nematic cell's retardance falls as the voltage tilts the director upright; phi(g) is reported as it is."""
    _, phi = bench.true_curve()
    assert phi[0] == 0 and np.all(np.diff(phi) <= 0) and phi[-1] < -2 * np.pi


@pytest.mark.parametrize("direction", [1, -1])
def test_a_blazed_grating_through_the_true_curve_steers_where_it_was_drawn(bench, direction):
    """psi = 2 pi x / L (x along the panel's columns) tilts the wavefront toward +x: the beam's centroid moves by
    z sin(theta), sin(theta) = lambda / L (grating equation), times the power in the +1 order (95 % for an 8-level
    staircase: G. J. Swanson, MIT Lincoln Laboratory Technical Report 854 (1989), from memory)."""
    m = bench.cfg.modulator
    period_px = 8
    cols = np.arange(m.width_px)
    psi = direction * 2 * np.pi * (cols % period_px) / period_px
    pattern = np.broadcast_to(gray_for(bench, psi), (m.height_px, m.width_px)).copy()
    power, x, _ = far_field(bench, pattern)
    flat, _, _ = far_field(bench, np.zeros_like(pattern))
    shift = (power.sum(axis=0) @ x) / power.sum() - (flat.sum(axis=0) @ x) / flat.sum()
    z_um = bench.cfg.geometry.distance_mm * 1e3
    steer = z_um * bench.wavelength_um / (period_px * m.pitch_um)
    assert direction * shift == pytest.approx(steer, rel=0.08)


@pytest.mark.parametrize("focal_mm", [40.0, -40.0])
def test_a_lens_through_the_true_curve_focuses_for_positive_f(bench, focal_mm):
    """psi = -pi r^2 / (lambda f) is a thin lens of focal length f: at z = f > 0 the 1 mm beam is focused to a spot
    of radius lambda f / (pi w) = 14 um (Gaussian-beam optics, A. E. Siegman, Lasers, 1986); at f < 0 it diverges.
    Drawn with 8 phase levels (a quantised Fresnel lens)."""
    m = bench.cfg.modulator
    z_mm = bench.cfg.geometry.distance_mm
    x = (np.arange(m.width_px) - (m.width_px - 1) / 2) * m.pitch_um
    y = (np.arange(m.height_px) - (m.height_px - 1) / 2) * m.pitch_um
    r2 = x[None, :] ** 2 + y[:, None] ** 2
    step = 2 * np.pi / 8  # an 8-level lens: few regions to propagate, 95 % in the wanted order
    psi = np.floor(np.mod(-np.pi * r2 / (bench.wavelength_um * focal_mm * 1e3), 2 * np.pi) / step) * step
    power, xs, ys = far_field(bench, gray_for(bench, psi))
    near = (xs[None, :] ** 2 + ys[:, None] ** 2) < 50.0**2
    share = power[near].sum() / power.sum()
    if focal_mm == z_mm:
        assert share > 0.5
    else:
        assert share < 0.01
