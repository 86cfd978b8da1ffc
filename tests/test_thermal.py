"""Tables for the panel's temperature: phi(g, T) from runs at two or more temperatures (order-parameter law)."""

import dataclasses

import numpy as np
import pytest

from analysis.config import Response
from analysis.thermal import TemperatureRun, order_parameter, predict_temperature
from simulators.response import PanelResponse


def true_curve(temperature_c, **changes):
    """The simulator's curve at ``temperature_c`` (its Cauchy coefficients hold at 25 C, clearing point 58 C)."""
    resp = dataclasses.replace(Response(), temperature_c=temperature_c, **changes)
    return PanelResponse(resp, 8, 1064.0).curve()[1]


def runs(temps, noise_rad=0.004, seed=0, **changes):
    rng = np.random.default_rng(seed)
    return [TemperatureRun(t, true_curve(t, **changes) + rng.normal(0, noise_rad, 256), np.full(256, noise_rad))
            for t in temps]


def rms(x):
    x = np.asarray(x) - np.mean(x)
    return float(np.sqrt(np.mean(x**2)))


def test_order_parameter_law_by_hand():
    """S = (1 - T/Tc)^beta in kelvin: at 25 C with Tc = 58 C and beta 0.22, (1 - 298.15/331.15)^0.22 = 0.09965^0.22 = 0.6021."""
    assert order_parameter(25.0, 58.0, 0.22) == pytest.approx((1 - 298.15 / 331.15) ** 0.22, rel=1e-12)
    assert order_parameter(25.0, 58.0, 0.22) == pytest.approx(0.6021, abs=1e-4)


@pytest.mark.parametrize("changes", [{}, {"cell_gap_um": 5.0}])
def test_30_c_from_25_and_35_c_within_10_mrad_and_honest(changes):
    """Runs at 25 and 35 C (4 mrad per gray) give the 30 C curve within 6 mrad RMS of the simulator's truth (achieved
    2.9), and the stated std is within 2x of the actual error."""
    pred = predict_temperature(runs((25.0, 35.0), **changes), 30.0, 58.0)
    err = pred.phase_rad - true_curve(30.0, **changes)
    assert pred.inside and pred.note() is None
    assert rms(err) < 0.006
    assert 0.5 < rms(err) / np.sqrt(np.mean(pred.phase_std_rad**2)) < 2.0


def test_exponent_recovered_from_three_runs():
    """Three temperatures fit both T_c and beta from a start at 70 C: the simulator's law (T_c 58 C, beta 0.22, its
    config defaults) comes back, and the curve at 40 C is within 3 mrad of the truth (achieved 1.6)."""
    pred = predict_temperature(runs((20.0, 30.0, 45.0), noise_rad=0.002), 40.0, 70.0)
    assert pred.clearing_c == pytest.approx(58.0, abs=2.0)
    assert pred.exponent == pytest.approx(0.22, abs=0.015)
    assert rms(pred.phase_rad - true_curve(40.0)) < 0.003
    assert pred.inside


def test_outside_the_measured_range_says_so_and_widens():
    """45 C from runs at 25 and 35 C is an extrapolation: the note says so and the std grows beyond the 30 C one."""
    data = runs((25.0, 35.0))
    inside = predict_temperature(data, 30.0, 58.0)
    outside = predict_temperature(data, 45.0, 58.0)
    assert not outside.inside
    assert "outside the measured range 25..35 C" in outside.note()
    assert np.mean(outside.phase_std_rad) > 2 * np.mean(inside.phase_std_rad)
    assert rms(outside.phase_rad - true_curve(45.0)) < 2.5 * np.sqrt(np.mean(outside.phase_std_rad**2))


def test_bad_input_names_the_field():
    with pytest.raises(ValueError, match="runs"):
        predict_temperature(runs((25.0,)), 30.0, 58.0)
    with pytest.raises(ValueError, match="temperature_c"):
        predict_temperature(runs((25.0, 25.0)), 30.0, 58.0)
    with pytest.raises(ValueError, match="temperature_c"):
        predict_temperature(runs((25.0, 35.0)), 60.0, 58.0)
