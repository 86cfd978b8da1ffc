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


def test_fixed_pattern_maps_have_the_configured_spread_and_stay_put():
    """EMVA 1288 spatial non-uniformity: PRNU is the relative std of the pixels' gain, DSNU the std of their dark
    offset (e-); both belong to the camera, so every frame carries the same pattern, and another seed another one."""
    s = sensor(prnu=0.006, dsnu_e=2.5, hot_pixels=30)
    gain, offset, dark = s.fixed_pattern((200, 256))
    n = gain.size
    assert gain.mean() == pytest.approx(1.0, abs=4 * 0.006 / np.sqrt(n))
    assert gain.std() == pytest.approx(0.006, rel=0.02)  # std of a std over 51200 samples: 0.3 %
    assert offset.std() == pytest.approx(2.5, rel=0.02)
    assert np.count_nonzero(dark == s.noise.hot_pixel_e_per_s) == 30
    again = sensor(prnu=0.006, dsnu_e=2.5, hot_pixels=30).fixed_pattern((200, 256))
    assert all(np.array_equal(a, b) for a, b in zip((gain, offset, dark), again))
    other = Sensor(Noise(prnu=0.006, dsnu_e=2.5, hot_pixels=30), 12, seed=8).fixed_pattern((200, 256))
    assert not np.array_equal(gain, other[0])
    mean = np.mean([s.expose(np.full((200, 256), 2000.0, np.float32), 0.0, key=k).astype(float)
                    for k in range(8)], axis=0)
    # the frame-averaged image follows the gain map, diluted by what is not gain: the DSNU (fixed) and the shot,
    # read and rounding noise averaged over 8 frames (e-^2); K = 2.5 e-/ADU
    spread_e = 2000.0 * 0.006
    other_e2 = 2.5**2 + (2000.0 + 6.0**2 + 2.5**2 / 12) / 8
    assert np.corrcoef(mean.ravel(), gain)[0, 1] == pytest.approx(spread_e / np.sqrt(spread_e**2 + other_e2), abs=0.02)


@pytest.mark.parametrize("kind", ["normal", "hot"])
def test_photon_transfer_holds_per_pixel_class(kind):
    """EMVA 1288 photon transfer, pixel by pixel: var(ADU) - var_dark = (mean - mean_dark) / K whatever the pixel's
    gain, offset or dark current, so the slope over every pixel of a class is 1/K."""
    k_e, exposure = 2.0, 0.01
    s = Sensor(Noise(e_per_adu=k_e, read_noise_e=4.0, dark_offset_adu=100.0, prnu=0.05, dsnu_e=3.0,
                     dark_current_e_per_s=500.0, hot_pixels=400, hot_pixel_e_per_s=1e5), 12, seed=11)
    shape = (40, 50)
    dark_rate = s.fixed_pattern(shape)[2]
    pick = dark_rate > 1e4 if kind == "hot" else dark_rate < 1e4

    def stats(level_e):
        frames = np.array([s.expose(np.full(shape, level_e, np.float32), 0.0, key=k, exposure_s=exposure).ravel()
                           for k in range(400)], float)
        return frames.mean(axis=0)[pick], frames.var(axis=0)[pick]

    m0, v0 = stats(0.0)
    m1, v1 = stats(1500.0)
    slope = np.sum((v1 - v0) * (m1 - m0)) / np.sum((m1 - m0) ** 2)
    assert slope == pytest.approx(1 / k_e, rel=0.03)  # 400 frames: 7 % per pixel, averaged over the class
    assert np.mean(m0 - 100.0) * k_e == pytest.approx(np.mean(dark_rate[pick]) * exposure, rel=0.05, abs=1.0)
