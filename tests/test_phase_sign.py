"""The phase sign convention on the simulated bench: patterns drawn through the true curve do what they were drawn for.

Convention (decided for the project): the panel multiplies the reflected field by exp(+i phi(g)), waves written
exp(i(k.r - w t)), so phi is k times the extra optical path. Then psi = +2 pi x / L steers toward +x and
psi = -pi r^2 / (lambda f) focuses at f > 0 (J. W. Goodman, Introduction to Fourier Optics: a thin lens's phase
-k r^2 / 2f in the exp(-i w t) convention).
"""

from types import SimpleNamespace

import numpy as np
import pytest

from analysis.config import replace
from analysis.fringe import DEFAULT_METHOD
from rig.run.folder import RunFolder
from rig.run.session import Session
from rig.run.stages import find_sign, get_ready
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


# A 12-bit panel with a 5.8 um cell (about 4 pi at 1064 nm) that starts 3 K colder than it will settle: the range a
# little wider than 4 pi over 4096 grays.
STEEP_PANEL = {"modulator.bit_depth": 12, "pattern.grating_high": 2048, "simulator.response.cell_gap_um": 5.8,
               "simulator.timing.warmup_k": 3.0, "simulator.timing.warmup_tau_s": 240.0}


def test_a_steep_curve_is_scanned_finely_enough_to_draw_the_staircase(small_cfg):
    """Sampled at 8 even grays, a 4 pi curve on 4096 grays moves by more than pi between neighbours where it is
    steepest (Nyquist: a phase step of more than pi aliases to its image 2 pi away) and unwraps the wrong way. With
    the midpoints scan_midpoints asks for, the staircase's grays sit at the intended phase steps 2 pi k / 6 of the
    simulator's true curve, whichever way the fringe phase runs and whatever its offset."""
    from analysis.sign import scan_midpoints, staircase_grays
    from rig.run.steps import LOCATE_GRAYS

    _, phi = Bench(replace(small_cfg, **STEEP_PANEL)).true_curve(at_s=0.0)
    assert abs(phi[-1]) > 4 * np.pi
    for sign in (1, -1):
        def fringe(g):
            return list(np.angle(np.exp(1j * (sign * phi[g] + 0.7))))
        scan = [round(i * 4095 / (LOCATE_GRAYS - 1)) for i in range(LOCATE_GRAYS)]
        for _ in range(6):
            extra = scan_midpoints(scan, fringe(scan))
            if not extra:
                break
            scan = sorted(scan + list(extra))
        assert not scan_midpoints(scan, fringe(scan)) and len(scan) <= 8 + 24
        steps = staircase_grays(scan, fringe(scan), 0, 6)
        np.testing.assert_allclose(np.abs(phi[list(steps)]), 2 * np.pi * np.arange(6) / 6, atol=0.015)


def test_the_sign_probe_names_a_steep_panels_direction(tmp_path, small_cfg):
    """The band and sign stages on the steep 12-bit panel: the probe's staircase is a blaze whose steps are the
    intended 2 pi / 6 on the true curve, so the strong fringes come with the staircase rising away from the mirror
    half (the phase falls with gray, analysis/sign.py). Achieved: ratio 215 (0.8-1.0, 'unknown', with the 8-gray
    scan alone), steps within 0.007 rad."""
    cfg = replace(small_cfg, **STEEP_PANEL)
    folder = RunFolder.create(tmp_path / "run", cfg, ["test"], {"camera_backend": "sim"}, save_frames=False)
    args = SimpleNamespace(sim=True, method=DEFAULT_METHOD, events=None)
    with Session(args, cfg, folder, "band and sign") as s:
        get_ready(s, cfg.pattern.grating_low, cfg.pattern.grating_high)
        assert find_sign(s, cfg.pattern.grating_low, cfg.pattern.grating_high) == "falling"
        at_s = s.devices.clock.now()
    probe = folder.info["direction"]
    assert probe["ratio"] > 100
    _, phi = Bench(cfg).true_curve(at_s=at_s)
    steps = probe["step_grays"]
    np.testing.assert_allclose(np.abs(phi[steps] - phi[steps[0]]), 2 * np.pi * np.arange(len(steps)) / len(steps),
                               atol=0.015)
