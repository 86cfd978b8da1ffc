"""Recalibration from an earlier curve: the rescaled shape with a handful of levels, and the chi-square verdict."""

import dataclasses

import numpy as np
import pytest

from analysis import adaptive
from analysis.config import Response
from analysis.recalibrate import check_shape, recalibration_levels
from simulators.response import PanelResponse


def true_curve(wavelength_nm, **changes):
    """The simulator's curve phi(g) - phi(0) (rad), in its true direction (it falls with gray, sign.md)."""
    return PanelResponse(dataclasses.replace(Response(), **changes), 8, wavelength_nm).curve()[1]


def direction(curve):
    return 1 if curve[-1] > curve[0] else -1


def measure(truth, grays, noise_rad, rng):
    y = truth[grays] + rng.normal(0, noise_rad, grays.size)
    return y - y[0]


def test_new_wavelength_from_an_earlier_curve_in_a_handful_of_levels():
    """1064 nm curve (4 mrad per gray) -> 780 nm and 1310 nm: 9 new levels, the shape holds (chi-square), and the
    table from the rescaled shape is within 10 mrad of the truth, its predicted error within 2x of the actual.
    The scale matches the dispersion the simulator uses (n_e - n_o of E7 over lambda) to 1 %."""
    g = np.array(recalibration_levels(255))
    for seed, (wavelength, changes) in enumerate([(780.0, {}), (1310.0, {"cell_gap_um": 4.0})]):
        rng = np.random.default_rng(seed)
        old = true_curve(1064.0, **changes) + rng.normal(0, 0.004, 256)
        old -= old[0]
        new = true_curve(wavelength, **changes)
        y = measure(new, g, 0.004, rng)
        check = check_shape(g, y, np.full(g.size, 0.004), old, np.full(256, 0.004), 255)
        assert check.holds, check.describe()
        assert check.scale == pytest.approx(new[-1] / true_curve(1064.0, **changes)[-1], rel=0.01)
        model = adaptive.fit_model(g, y, np.full(g.size, 0.004), 255, sign=direction(y), shape_rad=old,
                                   shape_std_rad=np.full(256, 0.004))
        table = adaptive.predict_table(model, 8)
        _, est, _ = model.curve()
        actual = adaptive.table_error_rad(table.table_gray, est, new)
        assert actual < 0.010
        assert 0.5 < actual / table.rms_rad < 2.0


def test_a_different_panel_shape_is_rejected():
    """An earlier curve of a panel with another electronic gamma does not describe the new one: chi-square fails."""
    g = np.array(recalibration_levels(255))
    old = true_curve(1064.0, electronic_gamma=2.2)
    y = measure(true_curve(780.0), g, 0.004, np.random.default_rng(1))
    check = check_shape(g, y, np.full(g.size, 0.004), old, np.full(256, 0.004), 255)
    assert not check.holds and check.p_value < 1e-6
    assert "does not hold" in check.describe()


def test_chi_square_is_calibrated_when_the_shape_is_exact():
    """A curve that is exactly a rescaled copy plus honest noise: the shape is accepted in about 99 % of draws (the
    test's level), here >= 90 of 100."""
    truth = true_curve(1064.0)
    g = np.array(recalibration_levels(255))
    accepted = 0
    for seed in range(100):
        rng = np.random.default_rng(seed)
        y = measure(1.3 * truth, g, 0.004, rng)
        accepted += check_shape(g, y, np.full(g.size, 0.004), truth, np.zeros(256), 255).holds
    assert accepted >= 90
