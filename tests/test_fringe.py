"""Carrier, fringe band and phase estimators against known phases, the Cramér–Rao bound and the simulator."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from analysis.band import Band, find_band, survey_band
from analysis.carrier import Carrier, NoFringesError, find_carrier
from analysis.fringe import (METHODS, WEIGHTED_ORDER, carrier_lsq, cosine_fit, estimate, exposure, fourier,
                             lsq_model, pixel_noise_var, weighted_lsq)
from conftest import split_for
from synthetic import fringes

SHAPE = (96, 160)
FULL = Band(0, SHAPE[1], 0, SHAPE[0])
CARRIER = Carrier(0.094, 0.0)


def wrap(x):
    return np.angle(np.exp(1j * np.asarray(x)))


def test_carrier_period_and_angle_to_a_fraction_of_a_bin():
    """Period and orientation of rotated fringes; the spectrum bin is 1/160 cycles/px, so sub-bin refinement is
    what brings the period within 0.3 % and the angle within 0.3 deg."""
    for period, angle in ((10.6, 0.0), (7.3, 4.0), (12.9, -6.5)):
        f = 1 / period
        img = fringes(0.4, SHAPE, f * math.cos(math.radians(angle)), f * math.sin(math.radians(angle)), noise=5.0)
        c = find_carrier(img)
        assert c.period_px == pytest.approx(period, rel=3e-3)
        assert c.angle_deg == pytest.approx(angle, abs=0.3)
        assert c.sharpness > 0.8


def test_carrier_prefers_the_fundamental_over_a_stronger_second_harmonic():
    """Where the grating's +1/-1 orders overlap they beat at twice the carrier; the band's carrier is the
    fundamental even when the beat is the strongest peak."""
    img = fringes(0.0, SHAPE, 0.094, amplitude=60.0) + 150 * np.cos(2 * np.pi * 0.188 * np.arange(SHAPE[1]))[None, :]
    assert find_carrier(img).fx == pytest.approx(0.094, rel=5e-3)


@pytest.mark.parametrize("method,factor", [("weighted-lsq", 1.2), ("carrier-lsq", 1.3), ("fourier", 1.6)])
def test_scatter_near_the_cramer_rao_bound(method, factor):
    """Phase scatter on 60 noisy frames within ``factor`` of the bound for a sinusoid of known frequency in white
    Gaussian noise, var >= 2 sigma^2 / (N A^2) (S. M. Kay, Fundamentals of Statistical Signal Processing: Estimation
    Theory, 1993, Example 3.4, from memory; worked number N = 100, eta = 10 -> 0.0316 rad in REFERENCES.md). The
    reported per-frame uncertainty agrees with the scatter within 25 %. (The factor 1.6 for the Fourier method
    pays for the band edges it must leave out.)"""
    rng = np.random.default_rng(3)
    sigma, amp = 20.0, 60.0
    truth = rng.uniform(-np.pi, np.pi, 60)
    model = lsq_model(FULL, CARRIER)
    results = [estimate(fringes(p, SHAPE, amplitude=amp, noise=sigma, rng=rng), FULL, CARRIER, method, model=model)
               for p in truth]
    err = wrap(np.array([r.phase_rad for r in results]) - truth)
    crb = math.sqrt(2 * sigma**2 / (FULL.width * FULL.height * amp**2))
    scatter = math.sqrt(np.mean(err**2))
    assert scatter < factor * crb
    assert np.mean([r.std_rad for r in results]) == pytest.approx(scatter, rel=0.25)


@pytest.mark.parametrize("method", METHODS)
def test_known_phase_steps_recovered(method):
    """Phase steps written into clean synthetic fringes come back within 1 mrad (cosine fit: 5 mrad)."""
    steps = np.linspace(0, 2 * np.pi, 9)[:-1] - 2.0
    got = np.array([estimate(fringes(p, SHAPE), FULL, CARRIER, method).phase_rad for p in steps])
    tol = 5e-3 if method == "cosine-fit" else 1e-3
    assert np.max(np.abs(wrap(got - steps))) < tol


def test_carrier_lsq_unbiased_under_envelope_rotation_and_chirp():
    """Gaussian envelopes, a sloping stray-light background, 0.4 deg of rotation and a slight chirp: the error of
    carrier-lsq does not depend on the phase (spread below 2 mrad over a full turn), while a cosine fit to one
    image row is biased by an amount that changes with the phase itself."""
    steps = np.linspace(-np.pi, np.pi, 13)[:-1]
    fy = 0.094 * math.tan(math.radians(0.4))
    imgs = [fringes(p, SHAPE, 0.094, fy, envelope=True, chirp=2e-5) for p in steps]
    lsq = np.array([carrier_lsq(im, lsq_model(FULL, find_carrier(imgs[0]))).phase_rad for im in imgs])
    line = np.array([cosine_fit(im, FULL, CARRIER, line=SHAPE[0] // 2).phase_rad for im in imgs])
    lsq_err, line_err = wrap(lsq - steps), wrap(line - steps)
    assert np.ptp(lsq_err) < 2e-3
    assert np.ptp(line_err) > 5 * np.ptp(lsq_err)


def test_taper_keeps_light_diffracted_past_a_knife_edge_out():
    """Light diffracted past a knife edge just outside the band carries the Fresnel quadratic phase pi s^2 / L^2
    (Fresnel edge diffraction, Goodman) and a phase that does not follow the fringes'; beating with them at the
    carrier it biases the phase by an amount that depends on the phase. A hard band edge cuts the oscillating tail
    at full weight; the raised-cosine taper at the edges the carrier crosses cuts the error at least 4x."""
    steps = np.linspace(-np.pi, np.pi, 13)[:-1]
    x = np.arange(SHAPE[1]) - (SHAPE[1] - 1) / 2
    s = x - x[0] + 30.0  # distance from an edge 30 px left of the band
    tail = 10.0 * np.exp(1j * np.pi * s**2 / 30.0**2)  # 5 % of the fringe amplitude

    def spread(taper_periods):
        model = lsq_model(FULL, CARRIER, taper_periods=taper_periods)
        got = []
        for p in steps:
            row = 300 + np.real((200 * np.exp(1j * p) + tail) * np.exp(2j * np.pi * CARRIER.fx * x))
            got.append(carrier_lsq(np.tile(row, (SHAPE[0], 1)), model).phase_rad)
        return np.ptp(wrap(np.array(got) - steps))

    assert spread(3.0) < spread(0.0) / 4


def test_reported_std_is_the_scatter_on_bright_structured_frames():
    """Bright fringes with shot noise (Poisson counts) and a fine ripple in the beams the smooth envelope cannot
    follow: the ripple is the same in every frame, so the reported uncertainty must match the frame-to-frame
    scatter (within 15 %), not the fit's residual, which the ripple dominates."""
    rng = np.random.default_rng(5)
    x = np.arange(SHAPE[1]) - (SHAPE[1] - 1) / 2
    ripple = (1 + 0.08 * np.cos(2 * np.pi * x / 23))[None, :]
    model = lsq_model(FULL, CARRIER)
    truth = rng.uniform(-3, 3, 40)
    noise, std = [], []
    for p in truth:
        clean = fringes(p, SHAPE, amplitude=2400.0, background=3000.0, envelope=True) * ripple
        e = carrier_lsq(rng.poisson(clean).astype(float), model)
        noise.append(wrap(e.phase_rad - carrier_lsq(clean, model).phase_rad))
        std.append(e.std_rad)
    assert np.mean(std) == pytest.approx(math.sqrt(np.mean(np.square(noise))), rel=0.15)


def test_pixel_noise_variance_ignores_rotated_fringes_and_background():
    """White noise of known variance under rotated fringes (10 deg) on a sloping background: the 4-tap filter
    along the fringes returns the variance within 5 % (its own sampling scatter on a frame this small is ~2 %),
    and zero without noise."""
    rng = np.random.default_rng(0)
    f = 0.094
    fx, fy = f * math.cos(math.radians(10)), f * math.sin(math.radians(10))
    img = fringes(0.3, SHAPE, fx, fy, amplitude=400.0, background=600.0, envelope=True, noise=7.0, rng=rng)
    assert pixel_noise_var(img, Carrier(fx, fy)) == pytest.approx(49.0, rel=0.05)
    clean = fringes(0.3, SHAPE, fx, fy, amplitude=400.0, background=600.0, envelope=True)
    assert pixel_noise_var(clean, Carrier(fx, fy)) < 0.01


def test_clipped_pixels_are_left_out():
    """Fringes driven past full scale on a few percent of the pixels: with the clipped pixels left out the phase
    stays within 2 mrad and the amplitude within 1 % of the unclipped frame's, where fitting the clipped counts
    as if valid loses amplitude."""
    steps = np.linspace(-np.pi, np.pi, 7)[:-1]
    model = lsq_model(FULL, CARRIER)
    clip = 470.0
    for p in steps:
        clean = carrier_lsq(fringes(p, SHAPE, envelope=True), model)
        img = np.minimum(fringes(p, SHAPE, envelope=True), clip)
        assert 0 < np.mean(img >= clip) < 0.1
        out, kept = carrier_lsq(img, model, clip_adu=clip), carrier_lsq(img, model)
        assert abs(wrap(out.phase_rad - clean.phase_rad)) < 2e-3
        assert out.amplitude_adu == pytest.approx(clean.amplitude_adu, rel=0.01)
        assert kept.amplitude_adu < out.amplitude_adu


@settings(max_examples=20, deadline=None)
@given(scale=st.floats(0.05, 20.0), phase=st.floats(-3.0, 3.0))
def test_intensity_scaling_changes_no_phase(scale, phase):
    """Scaling every count by a constant leaves phase and contrast unchanged and scales the amplitude."""
    img = fringes(phase, SHAPE, envelope=True, noise=4.0)
    model = lsq_model(FULL, CARRIER)
    a, b = carrier_lsq(img, model), carrier_lsq(img * scale, model)
    assert b.phase_rad == pytest.approx(a.phase_rad, abs=1e-9)
    assert b.contrast == pytest.approx(a.contrast, rel=1e-9)
    assert b.amplitude_adu == pytest.approx(scale * a.amplitude_adu, rel=1e-9)


def test_fourier_reports_contrast():
    """Visibility A / B of clean fringes (B = 300, A = 150 -> 0.5) from every estimator."""
    img = fringes(0.3, SHAPE, amplitude=150.0)
    for est in (fourier(img, FULL, CARRIER), cosine_fit(img, FULL, CARRIER), carrier_lsq(img, lsq_model(FULL, CARRIER)),
                weighted_lsq(img, lsq_model(FULL, CARRIER, WEIGHTED_ORDER))):
        assert est.contrast == pytest.approx(0.5, abs=0.01)


@pytest.mark.parametrize("method", ["weighted-lsq", "carrier-lsq"])
def test_complex_fringe_amplitude_and_background(method):
    """The least-squares estimators keep the frame's complex fringe amplitude A exp(i phi) (ADU) and the background
    level, which a cyclic-error fit over all levels needs: B = 300, A = 150 and phi = 0.3 on clean fringes, dark
    80 ADU included in B."""
    est = estimate(fringes(0.3, SHAPE, amplitude=150.0, background=380.0), FULL, CARRIER, method, dark_adu=80.0)
    assert est.fringe_adu == pytest.approx(150.0 * np.exp(0.3j), abs=0.2)
    assert est.background_adu == pytest.approx(380.0, abs=0.2)
    assert est.contrast == pytest.approx(0.5, abs=1e-3)


def test_no_fringes_is_a_one_line_error():
    """A frame of noise and a uniform beam gives NoFringesError naming the contrast found and the threshold."""
    rng = np.random.default_rng(0)
    img = 500 + rng.normal(0, 3, SHAPE) + 4 * np.cos(2 * np.pi * 0.094 * np.arange(SHAPE[1]))[None, :]
    with pytest.raises(NoFringesError, match=r"^no fringes: contrast 0\.\d\d below 0\.05 in the brightest region"):
        find_band(img)


def test_exposure_figures():
    """Peak fraction of full scale above dark and the count of pixels at full scale."""
    img = np.full(SHAPE, 40.0)
    img[10, 10:15] = 4095
    img[20:, :] = 1000
    e = exposure(img, FULL, 4095, dark_adu=40.0)
    assert e.saturated_px == 5
    assert e.peak_fraction == pytest.approx((1000 - 40) / (4095 - 40), rel=1e-6)
    assert e.underexposed


def test_band_on_the_simulated_bench_follows_the_mirror_gray(small_cfg):
    """On simulated frames the automatic band holds the mirror x first-order fringes: phase differences measured
    in it match the simulator's true curve within 0.03 rad and its period equals the grating period on the sensor
    (two beams at angle lambda / Lambda make fringes of period Lambda, REFERENCES.md). The grating pair 0/80 is
    close to a pi step, so the grating's zero order is nearly dark: with a strong zero order its light, diffracted
    past the split's edge, beats with the first order at the carrier and shifts the measured phase by an amount
    that depends on the gray (several 10 mrad on this small bench)."""
    from analysis.config import replace
    from simulators.bench import Bench
    from simulators.devices import SimCamera, SimScreen

    cfg = replace(small_cfg, **{"simulator.timing.vibration_urad": 0.0, "pattern.grating_high": 80})
    bench = Bench(cfg)
    screen, cam = SimScreen(bench), SimCamera(bench)
    grays = (0, 60, 120, 200)
    frames = []
    for g in grays:
        screen.show(split_for(cfg, g))
        bench.clock.sleep(0.05)
        frames.append(cam.grab().image)
    survey = find_band(frames, dark_adu=cfg.simulator.noise.dark_offset_adu)
    period = cfg.pattern.grating_period_px * cfg.modulator.pitch_um / cfg.camera.pitch_um
    assert survey.carrier.period_px == pytest.approx(period, rel=0.01)
    assert survey.fringe_count > 8 and survey.period_spread < 0.1
    model = lsq_model(survey.band, survey.carrier)
    phases = np.array([carrier_lsq(f, model).phase_rad for f in frames])
    measured = np.unwrap(phases - phases[0])
    _, true = bench.true_curve()
    expected = true[list(grays)]
    sign = np.sign(measured[-1]) * np.sign(expected[-1])
    assert np.max(np.abs(sign * measured - expected)) < 0.03
    again = survey_band(frames[0], survey.band)
    assert again.band == survey.band and again.fringe_count == pytest.approx(survey.fringe_count, rel=0.01)
