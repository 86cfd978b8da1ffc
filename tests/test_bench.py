"""The simulated bench end to end: superposition shortcut, fringes, transients, polarisation, disturbances, faults."""

import math
import time

import numpy as np
import pytest
from conftest import band_phasor, split_for

from analysis.config import replace
from analysis.patterns import grating_half, layout_of
from rig.devices.protocols import Camera, Clock, Screen
from simulators.bench import Bench
from simulators.devices import SimCamera, SimScreen

BAND = slice(60, 200)  # camera columns inside the band of the small bench


def settled_irradiance(bench, pattern, settle_s=0.2):
    bench.show(pattern)
    bench.clock.sleep(settle_s)
    cam = bench.cfg.camera
    return bench.irradiance(bench.clock.now(), cam.exposure_s).reshape(cam.height_px, cam.width_px)


def wrap(a):
    return (a + np.pi) % (2 * np.pi) - np.pi


@pytest.mark.parametrize("extra", [{}, {"simulator.response.crosstalk_px": 1.5,
                                        "simulator.response.polarization_deg": 20.0,
                                        "simulator.response.reflectance_droop": 0.05,
                                        "simulator.cover_glass.inner_reflectance": 0.005,
                                        "simulator.cover_glass.front_reflectance": 0.002,
                                        "simulator.cover_glass.front_wedge_urad": [40.0, -20.0]},
                                   {"simulator.cover_glass.inner_reflectance": 0.005,
                                    "simulator.cover_glass.front_reflectance": 0.002,
                                    "simulator.timing.warming_k_per_min": 5.0}])
def test_superposition_shortcut_equals_full_propagation(small_cfg, extra):
    """The camera field is linear in the panel field, so region-by-region superposition must equal propagating
    the whole panel field (to float32 rounding)."""
    bench = Bench(replace(small_cfg, **extra))
    for gray in (0, 37, 128, 201):
        shortcut = settled_irradiance(bench, split_for(small_cfg, gray)).ravel()
        full = bench.irradiance_full(bench.clock.now(), small_cfg.camera.exposure_s)
        assert np.max(np.abs(shortcut - full)) < 1e-4 * full.max()


def test_shortcut_with_cell_gap_variation_stays_within_its_expansion_error(small_cfg):
    cfg = replace(small_cfg, **{"simulator.response.thickness_variation": 0.03})
    bench = Bench(cfg)
    for gray in (0, 150, 255):
        shortcut = settled_irradiance(bench, split_for(cfg, gray)).ravel()
        full = bench.irradiance_full(bench.clock.now())
        assert np.max(np.abs(shortcut - full)) < 2e-3 * full.max()


def test_fringe_period_is_the_grating_period_for_every_mirror_gray(small_cfg):
    """Two plane waves at angle theta = asin(lambda / period) make fringes of period lambda / sin(theta), i.e. the
    grating period itself, whatever the mirror's phase (common practice)."""
    bench = Bench(small_cfg)
    expected_px = small_cfg.pattern.grating_period_px * small_cfg.modulator.pitch_um / small_cfg.camera.pitch_um
    periods = []
    for gray in (0, 90, 180):
        profile = settled_irradiance(bench, split_for(small_cfg, gray))[:, BAND].mean(axis=0)
        n = 1 << 16
        spec = np.abs(np.fft.rfft((profile - profile.mean()) * np.hanning(profile.size), n))
        periods.append(n / (np.argmax(spec[10:]) + 10))
    assert periods == pytest.approx([expected_px] * 3, rel=0.01)
    assert max(periods) - min(periods) < 0.002 * expected_px


def test_fringe_phase_follows_the_true_curve_with_its_sign(small_cfg):
    """The band's fringe phase, relative to gray 0, moves by the panel's true phase phi(g) - phi(0), sign included.

    Mirror light M exp(i phi_m) travels along the axis, the first order of the grating on the right travels toward
    -x as G exp(i phi_1 - i k s x); their cross term 2 |M G| cos(k s x + phi_m - phi_1) demodulated with
    exp(-i k s x) has the phase phi_m - phi_1 (two-beam interference, any optics text).
    """
    cfg = replace(small_cfg, **{"simulator.timing.vibration_urad": 0.0})
    bench = Bench(cfg)
    grays, truth = bench.true_curve()
    assert truth[-1] < -np.pi  # the retardance falls with voltage: phi(g) falls with gray
    ref = band_phasor(settled_irradiance(bench, split_for(cfg, 0)), cfg, BAND)
    levels = [16, 64, 100, 150, 220, 255]
    measured = np.array([np.angle(band_phasor(settled_irradiance(bench, split_for(cfg, g)), cfg, BAND) / ref)
                         for g in levels])
    assert np.max(np.abs(wrap(measured - truth[levels]))) < 0.02


def test_liquid_crystal_settles_with_its_time_constant(small_cfg):
    """A frame taken too soon after a change carries a phase between the old and new values."""
    cfg = replace(small_cfg, **{"simulator.timing.lc_tau_s": 0.01, "simulator.timing.display_latency_s": 0.0,
                                "simulator.timing.vibration_urad": 0.0})
    bench = Bench(cfg)
    settled_irradiance(bench, split_for(cfg, 0))
    bench.show(split_for(cfg, 80))
    t0 = bench.clock.now()
    mirror = [r for r in bench.state_at(t0).regions if r.gray == 80][0]
    assert mirror.retardance(t0 + 0.01, 0.01) - mirror.target_rad == pytest.approx(
        (mirror.start_rad - mirror.target_rad) * math.exp(-1))
    early = band_phasor(bench.irradiance(t0 + 0.005, 0.0).reshape(200, 256), cfg, BAND)
    late = band_phasor(bench.irradiance(t0 + 0.5, 0.0).reshape(200, 256), cfg, BAND)
    assert abs(wrap(np.angle(early / late))) > 0.3


def test_contrast_falls_with_polarisation_off_the_director(small_cfg):
    """Only the field component along the director is modulated: the fringe term scales with cos^2 of the angle,
    the rest reflects as from a mirror and only adds background."""
    amps = {}
    for angle in (0.0, 60.0):
        cfg = replace(small_cfg, **{"simulator.response.polarization_deg": angle,
                                    "simulator.noise.stray_light": 0.0})
        amps[angle] = abs(band_phasor(settled_irradiance(Bench(cfg), split_for(cfg, 50)), cfg, BAND))
    assert amps[60.0] / amps[0.0] == pytest.approx(np.cos(np.deg2rad(60.0)) ** 2, rel=0.01)


@pytest.mark.parametrize("distance_mm", [40.0, 80.0])
def test_panel_tilt_shifts_the_fringes_by_twice_k_times_the_shear(small_cfg, distance_mm):
    """A panel tilted by alpha adds 2 k alpha x to the reflected field; a band point receives mirror light from x and
    first-order light from x + s, the shear s = z tan(theta_1) with sin(theta_1) = lambda / period (grating
    equation), so the fringes move by -2 k alpha s (common practice for a lateral-shear interferometer). Paraxially
    2 k alpha s = 4 pi alpha z / period, independent of the wavelength."""
    offset = -0.42 * distance_mm / 40.0  # keep the camera on the band as it moves away
    cfg = replace(small_cfg, **{"simulator.timing.vibration_urad": 0.0, "geometry.distance_mm": distance_mm,
                                "geometry.camera_offset_mm": [offset, 0.0]})
    bench = Bench(cfg)
    settled_irradiance(bench, split_for(cfg, 40))
    t = bench.clock.now()
    base = band_phasor(bench.irradiance(t, 0.0).reshape(200, 256), cfg, BAND)
    tilted = band_phasor(bench.irradiance(t, 0.0, tilt_urad=(2.0, 0.0)).reshape(200, 256), cfg, BAND)
    period_um = cfg.pattern.grating_period_px * cfg.modulator.pitch_um
    expected = -4 * np.pi * 2e-6 * distance_mm * 1e3 / period_um
    # the per-region pistons stand for a rigid shift of the image: 2 % of modelling error (diffraction at the split)
    assert wrap(np.angle(tilted / base)) == pytest.approx(expected, rel=0.03)


def test_flicker_ripples_the_phase_at_its_frequency(small_cfg):
    cfg = replace(small_cfg, **{"simulator.timing.flicker_rad": 0.2, "simulator.timing.flicker_hz": 240.0})
    bench = Bench(cfg)
    settled_irradiance(bench, split_for(cfg, 100))
    state = bench.state_at(bench.clock.now())
    t = bench.clock.now() + np.arange(512) / 2000.0
    mirror = [i for i, r in enumerate(state.regions) if r.gray == 100][0]
    trace = np.array([bench.region_phases(state, ti, 0.0)[mirror] for ti in t])
    spec = np.abs(np.fft.rfft(trace - trace.mean()))
    assert np.fft.rfftfreq(t.size, 1 / 2000.0)[np.argmax(spec)] == pytest.approx(240.0, abs=2000.0 / 512)
    assert np.ptp(trace) == pytest.approx(0.4 * bench.response.slope_weight(100), rel=0.02)


def test_phase_range_is_larger_at_780_than_at_1064_nm(demo_cfg):
    from configs import HERE
    from analysis.config import load_config
    short = Bench(load_config(HERE / "tweezers-780.toml")).true_curve()[1]
    assert abs(short[-1]) > 1.3 * abs(Bench(demo_cfg).true_curve()[1][-1])


def test_devices_satisfy_the_rig_protocols(small_cfg):
    bench = Bench(small_cfg)
    assert isinstance(SimScreen(bench), Screen) and isinstance(SimCamera(bench), Camera)
    assert isinstance(bench.clock, Clock)


def test_camera_frames_are_spaced_by_the_frame_period_and_carry_metadata(small_cfg):
    bench = Bench(small_cfg)
    cam = SimCamera(bench)
    frames = [cam.grab() for _ in range(5)]
    stamps = np.diff([f.timestamp_s for f in frames])
    assert stamps == pytest.approx([1 / small_cfg.simulator.timing.frame_rate_hz] * 4)
    assert [f.sequence for f in frames] == list(range(frames[0].sequence, frames[0].sequence + 5))
    f = frames[-1]
    assert f.image.dtype == np.uint16 and f.image.shape == (200, 256) and f.bit_depth == 12 and f.complete
    assert f.exposure_s == small_cfg.camera.exposure_s
    with pytest.raises(ValueError, match="exposure_s"):
        cam.exposure_s = 0.0


def test_a_frame_that_started_before_the_change_is_not_yet_the_new_pattern(small_cfg):
    cfg = replace(small_cfg, **{"simulator.timing.vibration_urad": 0.0, "simulator.noise.read_noise_e": 0.0})
    bench = Bench(cfg)
    screen, cam = SimScreen(bench), SimCamera(bench)
    screen.show(split_for(cfg, 0))
    bench.clock.sleep(0.2)
    before = cam.grab()
    screen.show(split_for(cfg, 80))
    stale = cam.grab()  # the camera's next frame: exposed before the panel had responded
    assert stale.timestamp_s - stale.exposure_s / 2 < bench.clock.now()
    bench.clock.sleep(0.2)
    after = cam.grab()
    p0, ps, p1 = (band_phasor(f.image, cfg, BAND) for f in (before, stale, after))
    assert abs(wrap(np.angle(ps / p0))) < 0.05 and abs(wrap(np.angle(p1 / p0))) > 0.5


def test_configured_faults_happen_at_their_rates(small_cfg):
    cfg = replace(small_cfg, **{"simulator.faults.timeout_rate": 0.2, "simulator.faults.corrupt_rate": 0.1,
                                "simulator.faults.drop_rate": 0.1})
    cam = SimCamera(Bench(cfg))
    timeouts, frames = 0, []
    for _ in range(400):
        try:
            frames.append(cam.grab(timeout_s=0.5))
        except TimeoutError:
            timeouts += 1
    assert timeouts / 400 == pytest.approx(0.2, abs=0.06)
    incomplete = [f for f in frames if not f.complete]
    assert len(incomplete) / len(frames) == pytest.approx(0.1, abs=0.05)
    assert all(np.any(f.image[-1] == 0) for f in incomplete)
    gaps = np.diff([f.sequence for f in frames])
    assert np.all(gaps >= 1) and np.mean(gaps > 1) > 0.05


def test_camera_that_dies_stays_dead(small_cfg):
    cam = SimCamera(Bench(replace(small_cfg, **{"simulator.faults.die_after_frames": 3})))
    for _ in range(3):
        cam.grab()
    for _ in range(2):
        with pytest.raises(ConnectionError, match="after 3 frames"):
            cam.grab()


def test_realtime_mode_sleeps_like_hardware(small_cfg):
    cfg = replace(small_cfg, **{"simulator.timing.realtime": True, "simulator.timing.frame_rate_hz": 50.0})
    cam = SimCamera(Bench(cfg))
    cam.grab()
    t0 = time.monotonic()
    for _ in range(5):
        cam.grab()
    assert time.monotonic() - t0 >= 5 / 50.0 - 0.005


def test_same_seed_same_frames(small_cfg):
    a, b = (SimCamera(Bench(small_cfg)).grab().image for _ in range(2))
    assert np.array_equal(a, b)


def test_camera_roi_crops_the_sensor(small_cfg):
    from analysis.patterns import Rect
    bench = Bench(replace(small_cfg, **{"simulator.timing.vibration_urad": 0.0}))
    cam = SimCamera(bench)
    full = cam.grab()
    cam.roi = Rect(10, 110, 20, 70)
    bench2 = Bench(replace(small_cfg, **{"simulator.timing.vibration_urad": 0.0}))
    cam2 = SimCamera(bench2)
    cam2.roi = Rect(10, 110, 20, 70)
    crop = cam2.grab()
    assert crop.image.shape == (50, 100)
    assert np.array_equal(crop.image, full.image[20:70, 10:110])


def test_horizontal_split_gives_horizontal_fringes(small_cfg):
    cfg = replace(small_cfg, **{"pattern.split": "horizontal", "pattern.grating_side": "bottom",
                                "geometry.camera_offset_mm": [0.0, -0.42]})
    image = settled_irradiance(Bench(cfg), split_for(cfg, 30))
    period = cfg.pattern.grating_period_px * cfg.modulator.pitch_um / cfg.camera.pitch_um
    rows = np.arange(40, 160)
    profile_y = image[rows, :].mean(axis=1)
    profile_x = image[100, :]
    along_y = abs(np.sum(np.hanning(rows.size) * profile_y * np.exp(-2j * np.pi * rows / period)))
    cols = np.arange(profile_x.size)
    along_x = abs(np.sum(np.hanning(cols.size) * profile_x * np.exp(-2j * np.pi * cols / period)))
    assert along_y > 20 * along_x * rows.size / cols.size


def test_a_bench_started_later_on_the_time_line_reproduces_the_frames(small_cfg):
    """Noise and vibration are keyed by frame number, so a resumed simulated run sees what an uninterrupted one saw."""
    first = Bench(small_cfg)
    for gray in (0, 120, 50):
        SimScreen(first).show(split_for(small_cfg, gray))
        first.clock.sleep(0.1)
    resume_at = first.clock.now() - 0.1
    wanted = SimCamera(first).grab()
    resumed = Bench(small_cfg, start_s=resume_at)
    SimScreen(resumed).show(split_for(small_cfg, 50))
    resumed.clock.sleep(0.1)
    got = SimCamera(resumed).grab()
    assert got.sequence == wanted.sequence and np.array_equal(got.image, wanted.image)


def test_patterns_with_more_regions_than_the_cache_still_render(small_cfg):
    """A staircase of 30 grays makes 30 regions, more than the field cache keeps: none of them may be evicted."""
    bench = Bench(small_cfg)
    stairs = (np.arange(small_cfg.modulator.width_px) * 30 // small_cfg.modulator.width_px).astype(np.uint8) * 8
    for offset in (0, 1):
        bench.show(np.broadcast_to(stairs + offset, (small_cfg.modulator.height_px, stairs.size)).copy())
        bench.clock.sleep(0.2)
        image = bench.irradiance(bench.clock.now(), 0.0)
        assert np.all(np.isfinite(image)) and image.max() > 0


def test_a_mirror_at_the_gratings_low_gray_still_tilts_as_the_mirror_half(small_cfg):
    """A panel tilt moves the fringes by 2 k alpha times the lever arm between the mirror half and the grating half,
    whether or not the mirror's gray equals the grating's low gray (and whatever the panel showed before)."""
    cfg = replace(small_cfg, **{"simulator.timing.vibration_urad": 0.0})
    shifts = []
    for before in (0, 120):  # from rest at the same gray, or from another gray
        bench = Bench(cfg)
        settled_irradiance(bench, split_for(cfg, before))
        settled_irradiance(bench, split_for(cfg, 0))
        t = bench.clock.now()
        base = band_phasor(bench.irradiance(t, 0.0).reshape(200, 256), cfg, BAND)
        tilted = band_phasor(bench.irradiance(t, 0.0, tilt_urad=(2.0, 0.0)).reshape(200, 256), cfg, BAND)
        shifts.append(np.angle(tilted / base))
    assert shifts[0] == pytest.approx(shifts[1], abs=1e-4) and abs(shifts[0]) > 1e-3


def test_warming_scales_the_curve_by_the_order_parameter_law(small_cfg):
    """Birefringence follows the order parameter, dn(T) proportional to (1 - T/T_c)^beta (I. Haller, Prog. Solid
    State Chem. 10, 103 (1975), from memory): 5 K of warming from 25 C with T_c = 58 C and beta = 0.22 shrinks
    the curve to (28.0 / 33.0)^0.22 = 0.9645 of itself, worked by hand here in kelvin. The reference gray's fringe
    phase moves too: the mirror's retardance shrinks against the first order's."""
    cfg = replace(small_cfg, **{"simulator.timing.vibration_urad": 0.0, "simulator.timing.warming_k_per_min": 5.0})
    bench = Bench(cfg)
    r = cfg.simulator.response
    assert (r.temperature_c, r.clearing_c, r.order_exponent) == (25.0, 58.0, 0.22)
    kelvin = 273.15
    hand = ((1 - (30.0 + kelvin) / (58.0 + kelvin)) / (1 - (25.0 + kelvin) / (58.0 + kelvin))) ** 0.22
    assert hand == pytest.approx(0.9645, abs=1e-4)
    phases = {}
    for t_s in (1.0, 61.0):  # 5 K apart
        for gray, late_s in ((0, 0.0), (64, 0.5)):  # gray 64: about -2.3 rad, unwrapped
            bench.clock.wait_until(t_s + late_s - 0.3)
            bench.show(split_for(cfg, gray))
            bench.clock.wait_until(t_s + late_s)
            phases[t_s, gray] = band_phasor(bench.irradiance(t_s + late_s, 0.0).reshape(200, 256), cfg, BAND)
    span = [np.angle(phases[t, 64] / phases[t, 0]) for t in (1.0, 61.0)]
    t1_c, t2_c = bench.temperature_c(1.0), bench.temperature_c(61.0)
    assert t2_c - t1_c == pytest.approx(5.0)
    assert span[1] / span[0] == pytest.approx(hand, abs=2e-3)
    assert abs(np.angle(phases[61.0, 0] / phases[1.0, 0])) > 0.02


def test_sampled_truth_is_the_strip_the_band_sees(small_cfg):
    """With a 5 % cell-gap variation the true curve differs across the panel (the retardance scales with the gap,
    D. Engstrom et al., Opt. Express 21, 16086 (2013)): the fringes in the band follow the mirror strip whose light
    lands there, not the whole illuminated panel."""
    cfg = replace(small_cfg, **{"simulator.timing.vibration_urad": 0.0,
                                "simulator.response.thickness_variation": 0.05})
    bench = Bench(cfg)
    _, whole = bench.true_curve()
    _, strip = bench.sampled_true_curve(band_px=(BAND.start, BAND.stop, 0, 200))
    levels = [40, 100, 150, 200, 255]
    ref = band_phasor(settled_irradiance(bench, split_for(cfg, 0)), cfg, BAND)
    measured = np.array([np.angle(band_phasor(settled_irradiance(bench, split_for(cfg, g)), cfg, BAND) / ref)
                         for g in levels])
    off_strip = np.abs(wrap(measured - strip[levels]))
    off_whole = np.abs(wrap(measured - whole[levels]))
    assert np.max(np.abs(strip - whole)) > 0.03  # 38 mrad at gray 255
    assert np.max(off_strip) < 0.007 and np.max(off_whole) > 5 * np.max(off_strip)  # 3.3 and 40 mrad
    weight = bench.sampled_weight()
    mirror = ~grating_half(cfg.modulator.width_px, cfg.modulator.height_px, layout_of(cfg.pattern))
    assert weight[~mirror].sum() == 0 and weight[mirror].sum() > 0
