"""Cover-glass ghosts on the simulated bench: a constant phasor at the fringe carrier and its cyclic error."""

import numpy as np
import pytest
from conftest import band_phasor, split_for

from analysis.config import replace
from simulators.bench import Bench

BAND = slice(60, 200)  # camera columns inside the band of the small bench
LEVELS = list(range(0, 256, 3))


def wrap(a):
    return (a + np.pi) % (2 * np.pi) - np.pi


def phase_error(cfg):
    """Noise-free fringe phase of each level less the true phi(g) - phi(0) (rad), and that truth."""
    bench = Bench(cfg)
    _, truth = bench.true_curve()
    out = []
    for gray in LEVELS:
        bench.show(split_for(cfg, gray))
        bench.clock.sleep(0.2)
        image = bench.irradiance(bench.clock.now(), 0.0).reshape(bench.camera_shape)
        out.append(np.angle(band_phasor(image, cfg, BAND)))
    err = wrap(np.array(out) - truth[LEVELS])
    return wrap(err - np.angle(np.mean(np.exp(1j * err)))), truth[LEVELS]


def cyclic_amplitude(err, phase):
    """Amplitude (rad) of the error's first harmonic in the true phase (least squares on sin, cos)."""
    design = np.column_stack([np.sin(phase), np.cos(phase), np.ones_like(phase)])
    coef = np.linalg.lstsq(design, err, rcond=None)[0]
    return float(np.hypot(coef[0], coef[1]))


@pytest.fixture(scope="module")
def quiet(small_cfg):
    return replace(small_cfg, **{"simulator.timing.vibration_urad": 0.0})


@pytest.fixture(scope="module")
def baseline(quiet):
    return cyclic_amplitude(*phase_error(quiet))


@pytest.mark.parametrize("surface, reflectance", [("inner", 0.005), ("front", 0.002), ("inner", 0.01)])
def test_a_parallel_ghost_makes_a_cyclic_error_of_its_relative_amplitude(quiet, baseline, surface, reflectance):
    """A leak phasor of relative amplitude eps added to the fringe phasor shifts its phase by
    arg(1 + eps exp(i (psi - phi))), a cyclic error of amplitude arcsin(eps) ~ eps rad with period 2 pi in phi
    (P. L. M. Heydemann, Appl. Opt. 20, 3382 (1981)). A ghost of intensity reflectance R beside a panel reflecting
    all the light has eps = sqrt(R): 71 mrad at R = 0.5 %."""
    cfg = replace(quiet, **{f"simulator.cover_glass.{surface}_reflectance": reflectance})
    err, phase = phase_error(cfg)
    eps = np.sqrt(reflectance)
    amplitude = cyclic_amplitude(err, phase)
    # the bench's own leak (grating zero order near the split) adds or subtracts up to its amplitude
    assert amplitude == pytest.approx(np.arcsin(eps), abs=0.05 * eps + baseline)
    assert np.max(np.abs(err)) == pytest.approx(np.arcsin(eps), abs=0.1 * eps + 2 * baseline)


def test_a_wedged_ghost_beats_off_the_carrier_and_leaves_less_error(quiet, baseline):
    """A surface tilted by w reflects at 2 w from the mirror beam: its fringes with the first order have another
    period, so their phasor at the carrier averages out over the band (common practice: wedged cover glasses)."""
    parallel = cyclic_amplitude(*phase_error(replace(quiet, **{"simulator.cover_glass.front_reflectance": 0.005})))
    wedged = cyclic_amplitude(*phase_error(replace(quiet, **{"simulator.cover_glass.front_reflectance": 0.005,
                                                            "simulator.cover_glass.front_wedge_urad": [3000.0, 0.0]})))
    assert wedged < 0.25 * parallel


def test_warming_turns_the_ghost_phasor(quiet):
    """The glass's optical path grows by t (dn/dT + n alpha) per kelvin; the panel's light passes it twice after the
    front reflection, so the front ghost's phase moves by -2 k t path_per_k per kelvin against the rest."""
    cfg = replace(quiet, **{"simulator.cover_glass.front_reflectance": 0.004,
                            "simulator.timing.warming_k_per_min": 3.0})
    bench = Bench(cfg)
    glass = cfg.simulator.cover_glass
    turn = []
    for t in (0.0, 60.0):
        turn.append(np.angle(bench.ghost_coefficients(t)[0]))
    expected = -2 * (2 * np.pi / 1.064) * glass.thickness_um * glass.path_per_k * 3.0
    assert wrap(turn[1] - turn[0]) == pytest.approx(wrap(expected), abs=1e-4)
