"""The geometry planner: grating equation, fringe period and sampling, and its overlap band against the simulator."""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np
import pytest
from scipy import ndimage

from analysis.config import load_config, replace
from analysis.geometry import (MIN_SAMPLES, RECOMMENDED_SAMPLES, first_order_angle_rad, fringe_period_um, plan,
                               setup_from_config)
from analysis.patterns import layout_of, split_screen
from configs import DEFAULT_SIM
from rig.cli import main
from simulators.bench import Bench


def demo_setup(**changes):
    return dataclasses.replace(setup_from_config(load_config(DEFAULT_SIM)), **changes)


@pytest.mark.parametrize("wavelength_nm, period_um", [(632.8, 1.0), (1064.0, 51.0), (780.0, 17.0), (405.0, 0.5)])
def test_first_order_angle_obeys_the_grating_equation(wavelength_nm, period_um):
    """sin(theta_1) = lambda / period (grating equation, any optics handbook); e.g. 632.8 nm on 1 um: 39.26 deg."""
    theta = first_order_angle_rad(wavelength_nm, period_um)
    assert math.sin(theta) == pytest.approx(wavelength_nm * 1e-3 / period_um, rel=1e-12)
    if period_um == 1.0:
        assert math.degrees(theta) == pytest.approx(39.26, abs=0.01)


def test_no_first_order_when_the_period_is_shorter_than_the_wavelength():
    """lambda / period >= 1: the grating equation has no real first-order angle."""
    with pytest.raises(ValueError, match="period"):
        first_order_angle_rad(1064.0, 1.0)


@pytest.mark.parametrize("period_px", [4, 6, 16, 64])
def test_fringe_period_on_the_sensor_is_the_grating_period(period_px):
    """Two beams at the first-order angle make fringes of period lambda / sin(theta) = the grating period: equal in the
    small-angle limit (common practice), and independent of the distance."""
    near = plan(demo_setup(period_px=period_px, distance_mm=50.0))
    far = plan(demo_setup(period_px=period_px, distance_mm=200.0))
    assert near.fringe_period_um == pytest.approx(period_px * 8.5, rel=1e-9)
    assert far.fringe_period_px == near.fringe_period_px == pytest.approx(period_px * 8.5 / 4.8, rel=1e-9)
    assert fringe_period_um(1064.0, 0.01) == pytest.approx(1064e-3 / 0.01, rel=1e-4)


@pytest.mark.parametrize("period_px, camera_um, expect", [
    (2, 10.0, "Nyquist"),     # 1.7 samples per fringe: aliased (Shannon: more than 2 needed)
    (6, 20.0, "under-samples"),  # 2.55 samples
    (6, 14.0, "recommended"),  # 3.6 samples: allowed, 4 recommended (practice)
    (6, 4.8, None),            # 10.6 samples
])
def test_sampling_warnings_follow_nyquist_and_practice(period_px, camera_um, expect):
    """Below 2 samples per fringe the fringes alias (Shannon); below 3 they are under-sampled; 4 or more is common
    practice. The recommended period is the shortest even one with at least 4 samples."""
    result = plan(demo_setup(period_px=period_px, camera_pixel_um=camera_um))
    sampling = [w for w in result.warnings if "samples per fringe" in w]
    if expect is None:
        assert sampling == [] and result.samples_per_fringe >= RECOMMENDED_SAMPLES
    else:
        assert len(sampling) == 1 and expect in sampling[0]
    if expect == "under-samples":
        assert 2 <= result.samples_per_fringe < MIN_SAMPLES
    best = result.recommended_period_px
    assert best % 2 == 0 and best * 8.5 >= RECOMMENDED_SAMPLES * camera_um > (best - 2) * 8.5


def test_overlap_grows_with_distance_until_the_beam_limits_it():
    """Band width z tan(theta) from the split line into the mirror half, capped by the 3.5 mm beam; the working
    range ends where the beam caps it, and the overlap start is where the band outgrows two Fresnel zones."""
    theta = math.asin(1.064 / 51.0)
    for z in (20.0, 80.0, 150.0):
        result = plan(demo_setup(distance_mm=z))
        assert result.overlap_width_mm == pytest.approx(z * math.tan(theta), rel=1e-9)
        assert result.band_mm[1] == pytest.approx(0.0, abs=1e-12)  # the split line at the panel centre
    capped = plan(demo_setup(distance_mm=250.0))
    assert capped.overlap_width_mm < 250.0 * math.tan(theta)
    result = plan(demo_setup())
    assert result.distance_range_mm[1] == pytest.approx(3.5 / math.tan(theta), rel=1e-9)
    z0 = result.overlap_start_mm
    assert z0 * math.tan(theta) == pytest.approx(2 * math.sqrt(1.064e-3 * z0), rel=1e-9)
    assert result.distance_range_mm[0] <= result.recommended_distance_mm <= result.distance_range_mm[1]


def test_grating_on_the_left_puts_the_band_right_of_the_split():
    """Mirror image: the first order crosses the split line the other way."""
    cfg = replace(load_config(DEFAULT_SIM), **{"pattern.grating_side": "left"})
    result = plan(setup_from_config(cfg))
    assert result.band_mm[0] == pytest.approx(0.0, abs=1e-12) and result.band_mm[1] > 3.0


def measured_band(cfg, high_gray):
    """Band edges (mm) and fringe period (px) measured on a noise-free simulated frame.

    Edges: the local fringe amplitude (demodulated at the fringe frequency, smoothed over one period) falls to half
    of its plateau, taken 1.5-3 Fresnel zones inside the edge; a Fresnel knife edge has half its amplitude at the
    geometric shadow line.
    """
    bench = Bench(cfg)
    m, p, cam = cfg.modulator, cfg.pattern, cfg.camera
    bench.show(split_screen(m.width_px, m.height_px, 0, 0, high_gray, layout_of(p), m.bit_depth))
    bench.clock.sleep(0.05)
    row = bench.irradiance(bench.clock.now(), cam.exposure_s).reshape(cam.height_px, cam.width_px).mean(axis=0)
    n = cam.width_px
    pitch_mm = cam.pitch_um * 1e-3
    x = cfg.geometry.camera_offset_mm[0] + (np.arange(n) - (n - 1) / 2) * pitch_mm

    spectrum = np.abs(np.fft.rfft((row - row.mean()) * np.hanning(n)))
    k = int(np.argmax(spectrum[5:])) + 5
    a, b, c = np.log(spectrum[k - 1:k + 2])
    period_px = n / (k + 0.5 * (a - c) / (a - 2 * b + c))  # Gaussian interpolation of the spectral peak

    carrier = row * np.exp(-2j * np.pi * np.arange(n) / period_px)
    amp = np.abs(ndimage.gaussian_filter1d(carrier.real, period_px)
                 + 1j * ndimage.gaussian_filter1d(carrier.imag, period_px))
    inside = np.flatnonzero(amp > 0.25 * amp.max())
    zone_px = math.sqrt(cfg.laser.wavelength_nm * 1e-6 * cfg.geometry.distance_mm) / pitch_mm

    def edge(coarse, inward):
        start = int(coarse + inward * 1.5 * zone_px)
        stop = int(coarse + inward * 3 * zone_px)
        plateau = np.median(amp[min(start, stop):max(start, stop) + 1])
        j = start
        while amp[j] > 0.5 * plateau:
            j -= inward
        frac = (0.5 * plateau - amp[j]) / (amp[j + inward] - amp[j])
        return x[j] + frac * inward * pitch_mm

    return (edge(inside[0], +1), edge(inside[-1], -1)), period_px


@pytest.mark.parametrize("distance_mm", [40.0, 150.0])
def test_band_appears_on_the_simulated_camera_where_the_planner_says(distance_mm):
    """A simulated bench at the distance, its camera centred where the planner puts the band, shows fringes of the
    planned period (within 1 %) over the planned band (each edge within 3 fringes). The grating uses the pi-step
    gray pair, which empties its zeroth order (Goodman: eta_0 = cos^2(dphi / 2)), so no fringes lie beyond the split."""
    base = replace(load_config(DEFAULT_SIM), **{"modulator.height_px": 64, "camera.height_px": 16,
                                                "geometry.distance_mm": distance_mm})
    planned = plan(setup_from_config(base))
    cfg = replace(base, **{"geometry.camera_offset_mm": [planned.band_center_mm, 0.0]})
    grays, phase = Bench(cfg).response.curve()
    high = int(np.argmin(np.abs(np.abs(phase) - math.pi)))  # a pi step, whichever way the phase runs
    (low_mm, high_mm), period_px = measured_band(cfg, high)
    assert period_px == pytest.approx(planned.fringe_period_px, rel=0.01)
    fringe_mm = planned.fringe_period_um * 1e-3
    assert abs(low_mm - planned.band_mm[0]) < 3 * fringe_mm
    assert abs(high_mm - planned.band_mm[1]) < 3 * fringe_mm


def test_plan_command_prints_json_with_the_documented_keys(capsys):
    """--json carries the planner's figures; flags override the config."""
    assert main(["plan", "--json", "--period-px", "8", "--distance-mm", "120"]) == 0
    doc = json.loads(capsys.readouterr().out)
    for key in ("first_order_angle_mrad", "fringe_period_px", "overlap_start_mm", "overlap_width_mm",
                "samples_per_fringe", "recommended_distance_mm"):
        assert isinstance(doc[key], float)
    assert doc["first_order_angle_mrad"] == pytest.approx(1e3 * math.asin(1.064 / 68.0))
    assert doc["overlap_width_mm"] == pytest.approx(120.0 * math.tan(math.asin(1.064 / 68.0)))
    assert "shorter grating period" in doc["trade_off"]


@pytest.mark.parametrize("argv, field", [
    (["--wavelength-nm", "-5"], "--wavelength-nm"),
    (["--period-px", "1"], "--period-px"),
    (["--distance-mm", "0"], "--distance-mm"),
    (["--pitch-um", "0.1", "--period-px", "2"], "period"),
])
def test_plan_refuses_bad_values_in_one_line(capsys, argv, field):
    """Exit 2 and one line naming the field."""
    assert main(["plan", *argv]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and field in err[0]
