"""Camera sensor against the EMVA 1288 linear model."""

import numpy as np
import pytest

from analysis.config import Noise
from simulators.sensor import EXACT_BELOW_E, Sensor


def sensor(**kw):
    return Sensor(Noise(**kw), 12, seed=7)


@pytest.mark.parametrize("mean_e", [5.0, 25.0, 400.0, 3000.0])
def test_photon_transfer(mean_e):
    """EMVA 1288: var(ADU) = (mean - offset) / K + (read_e / K)^2 (+ 1/12 for rounding), K in e-/ADU; this covers
    the exact-Poisson range below EXACT_BELOW_E and the normal approximation above it."""
    s = sensor(e_per_adu=2.0, read_noise_e=4.0, dark_offset_adu=100.0)
    frames = s.expose(np.full((200, 500), mean_e, np.float32), gain_db=0.0).astype(float)
    signal = frames.mean() - 100.0
    assert signal == pytest.approx(mean_e / 2.0, rel=0.01, abs=0.05)
    assert frames.var() == pytest.approx(signal / 2.0 + (4.0 / 2.0) ** 2 + 1 / 12, rel=0.03)


def test_exact_draws_are_integers_of_charge_below_the_threshold():
    s = sensor(e_per_adu=1.0, read_noise_e=0.0, dark_offset_adu=0.0)
    frame = s.expose(np.full((100, 100), 2.0, np.float32), 0.0)
    assert 2.0 < EXACT_BELOW_E
    counts = np.bincount(frame.ravel())
    assert counts[0] / frame.size == pytest.approx(np.exp(-2.0), abs=0.01)  # Poisson P(0) = e^-mean


def test_gain_in_db_and_clipping_at_full_scale_and_full_well():
    s = sensor(e_per_adu=4.0, read_noise_e=0.0, dark_offset_adu=0.0, full_well_e=10000.0)
    e = np.array([[400.0, 1e6]], np.float32)
    assert s.expose(e, 0.0, noiseless=True).tolist() == [[100, 2500]]  # full well 10000 e- = 2500 ADU
    assert s.expose(e, 20 * np.log10(4.0), noiseless=True).tolist() == [[400, 4095]]  # ADC full scale


def test_noise_is_keyed_by_seed_and_frame():
    e = np.full((64, 64), 500.0, np.float32)
    assert np.array_equal(sensor().expose(e, 0.0, key=3), sensor().expose(e, 0.0, key=3))
    assert not np.array_equal(sensor().expose(e, 0.0, key=3), sensor().expose(e, 0.0, key=4))
