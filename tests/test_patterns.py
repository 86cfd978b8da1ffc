"""Split-screen and phase patterns: geometry, dtypes and the efficiency of quantised blazed gratings."""

import numpy as np
import pytest

from analysis.patterns import (Rect, SplitLayout, blazed_phase, lens_phase, phase_to_gray, split_in_rect,
                               split_screen, vortex_phase)


def test_vertical_split_has_a_uniform_mirror_and_a_binary_grating():
    img = split_screen(64, 40, mirror_gray=77, low=3, high=200, layout=SplitLayout("vertical", 0.5, "right", 8))
    assert img.dtype == np.uint8 and img.shape == (40, 64)
    assert np.all(img[:, :32] == 77)
    row = img[0, 32:]
    assert set(np.unique(img[:, 32:])) == {3, 200}
    assert np.all(img[:, 32:] == row)  # lines run parallel to the split
    assert np.array_equal(row[:8], [200] * 4 + [3] * 4) and np.array_equal(row[8:16], row[:8])


def test_horizontal_split_puts_the_grating_on_the_chosen_side():
    img = split_screen(30, 50, 9, 0, 1, SplitLayout("horizontal", 0.3, "top", 4))
    assert np.all(img[15:] == 9)
    assert np.all(img[:15] == img[:15, :1]) and set(np.unique(img[:15])) == {0, 1}


def test_twelve_bit_patterns_are_uint16_and_grays_are_range_checked():
    img = split_screen(16, 8, 4095, 0, 2048, SplitLayout(period_px=2), bit_depth=12)
    assert img.dtype == np.uint16 and img.max() == 4095
    with pytest.raises(ValueError, match="mirror_gray.*\\[0, 255\\]"):
        split_screen(16, 8, 256, 0, 1, SplitLayout(period_px=2))
    with pytest.raises(ValueError, match="grating_side"):
        SplitLayout("vertical", 0.5, "top", 4)


def test_sub_region_pattern_is_uniform_outside_its_rectangle():
    rect = Rect(10, 30, 5, 25)
    img = split_in_rect(50, 40, rect, 100, 0, 200, SplitLayout(period_px=4), background_gray=17)
    outside = np.ones(img.shape, bool)
    outside[5:25, 10:30] = False
    assert np.all(img[outside] == 17)
    assert np.all(img[5:25, 10:20] == 100) and set(np.unique(img[5:25, 20:30])) == {0, 200}
    with pytest.raises(ValueError, match="rect"):
        split_in_rect(50, 40, Rect(40, 60, 0, 10), 1, 0, 2, SplitLayout(period_px=4), 0)


@pytest.mark.parametrize("n, expected", [(2, 0.405), (4, 0.811), (8, 0.950), (16, 0.987)])
def test_quantised_blazed_grating_efficiency_matches_sinc_squared(n, expected):
    """First-order efficiency of an N-level blazed grating is sinc^2(1/N) = 40.5/81.1/95.0/98.7 % for N = 2/4/8/16
    (G. J. Swanson, MIT Lincoln Laboratory TR-854, 1989, from memory), for an ideal panel whose gray g delays
    2 pi g / 256 (identity table). Each pixel is a flat step, so the far field is taken of 32 samples a pixel."""
    gray = phase_to_gray(blazed_phase(16 * n, 4, period_px=n), bit_depth=8)
    field = np.repeat(np.exp(2j * np.pi * gray[0].astype(float) / 256), 32)
    power = np.abs(np.fft.fft(field)) ** 2
    power /= power.sum()
    assert power[16] == pytest.approx(np.sinc(1 / n) ** 2, abs=3e-4)  # 32 samples a pixel: 1e-4 sampling error
    assert power[16] == pytest.approx(expected, abs=1e-3)  # the table is rounded to 0.1 %


def test_phase_to_gray_uses_the_table_and_wraps_phase():
    lut = np.array([0, 10, 20, 30])
    gray = phase_to_gray(np.array([0.0, np.pi / 2, np.pi, 1.5 * np.pi, 2 * np.pi + 0.1]), lut=lut)
    assert gray.tolist() == [0, 10, 20, 30, 0]
    with pytest.raises(ValueError, match="lut"):
        phase_to_gray(np.zeros(3), lut=np.array([0, 300]))


def test_lens_phase_is_the_paraxial_parabola():
    """Thin lens: phase -k r^2 / (2 f) (Goodman, Introduction to Fourier Optics)."""
    phase = lens_phase(401, 3, focal_mm=500.0, wavelength_nm=1064.0, pitch_um=8.5)
    row = np.unwrap(phase[1])
    x_um = (np.arange(401) - 200) * 8.5
    k = 2 * np.pi / 1.064
    fit = np.polyfit(x_um, row - row[200], 2)
    assert fit[0] == pytest.approx(-k / (2 * 500e3), rel=1e-6)


@pytest.mark.parametrize("charge", [1, -2, 3])
def test_vortex_winds_by_its_charge(charge):
    phase = vortex_phase(64, 64, charge)
    ring = [phase[32 + int(round(20 * np.sin(a))), 32 + int(round(20 * np.cos(a)))]
            for a in np.linspace(0, 2 * np.pi, 400)]
    assert np.round((np.unwrap(ring)[-1] - np.unwrap(ring)[0]) / (2 * np.pi)) == charge
