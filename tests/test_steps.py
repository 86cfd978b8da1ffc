"""Step generators are plain generators: what they measure can be read with no hardware."""

import numpy as np
import pytest

from analysis.config import config_from_dict
from analysis.tuning import coarse_peak, vertex_gray
from rig.run.steps import (Checkpoint, FrameResult, Grab, Measurement, SetExposure, Settle, ShowSplit, exposure_steps,
                       farthest_gray, opposite_gray, sweep_order, sweep_steps, sweep_units, tune_steps)


def cfg_with(**sweep):
    return config_from_dict({"sweep": sweep})


def test_sweep_measures_every_level_once_with_references_every_k():
    cfg = cfg_with(reference_every=16, frames_per_level=3, reference_frames=7)
    steps = list(sweep_steps(cfg, 0, 80))
    grabs = [s for s in steps if isinstance(s, Grab)]
    levels = [g.gray for g in grabs if g.purpose == "level"]
    assert levels == list(range(256))
    refs = [i for i, g in enumerate(grabs) if g.purpose == "reference"]
    assert len(refs) == 1 + 16 and refs[0] == 0 and refs[-1] == len(grabs) - 1
    assert np.all(np.diff(refs) == 17)
    assert all(g.frames == (7 if g.purpose == "reference" else 3) and g.keep and not g.wait for g in grabs)
    # every unit: show, settle, grab, checkpoint — and every checkpoint key is unique
    assert len(steps) == 1 + 4 * len(grabs)
    keys = [s.key for s in steps if isinstance(s, Checkpoint)]
    assert len(keys) == len(set(keys)) == len(grabs)
    for show, settle, grab in zip(steps[1::4], steps[2::4], steps[3::4]):
        assert isinstance(show, ShowSplit) and show.mirror_gray == grab.gray and (show.low, show.high) == (0, 80)
        assert isinstance(settle, Settle) and settle.seconds == cfg.sweep.settle_s


def test_resumed_sweep_skips_exactly_the_finished_units():
    cfg = cfg_with(levels=list(range(0, 256, 8)))
    units = sweep_units(cfg)
    done = frozenset(key for key, _, _ in units[:10])
    again = [s for s in sweep_steps(cfg, 0, 80, done) if isinstance(s, Grab)]
    assert [(g.unit, g.gray) for g in again] == [(k, g) for k, _, g in units[10:]]


@pytest.mark.parametrize("order", ["shuffled", "up-down"])
def test_sweep_orders(order):
    levels = list(range(20))
    out = sweep_order(levels, order, seed=3)
    if order == "shuffled":
        assert sorted(out) == levels and out != levels and out == sweep_order(levels, order, seed=3)
    else:
        assert out == levels + levels[::-1]


def fake_measurement(peak=0.5, saturated=0, amplitude=0.0, contrast=0.5):
    return Measurement((FrameResult(0, "x", 0.0, 0, peak, saturated, 0.0, 0.01, contrast, amplitude),))


def drive(generator, respond):
    """Run a step generator with ``respond(step)`` standing in for the engine (it sees every step and answers waiting
    grabs); return (steps, the generator's return value)."""
    steps, reply = [], None
    while True:
        try:
            step = generator.send(reply)
        except StopIteration as stop:
            return steps, stop.value
        steps.append(step)
        answer = respond(step)
        reply = answer if isinstance(step, Grab) and step.wait else None


def test_exposure_converges_on_a_linear_camera_and_halves_when_saturated():
    camera = {"exposure_s": 0.0}

    def respond(step):  # the brightest pixels grow in proportion to exposure and clip at full scale
        if isinstance(step, SetExposure):
            camera["exposure_s"] = step.exposure_s
        peak = 400.0 * camera["exposure_s"]
        return fake_measurement(min(peak, 1.0), saturated=100 if peak >= 1.0 else 0)

    steps, exposure = drive(exposure_steps(cfg_with(), 0.02, 0, 80), respond)  # starts saturated
    assert 0.60 <= 400.0 * exposure <= 0.80
    exposures = [s.exposure_s for s in steps if isinstance(s, SetExposure)]
    assert exposures[1] == pytest.approx(exposures[0] / 2)


def test_tuning_finds_the_pi_step_of_a_model_grating():
    """First-order field of a binary grating is proportional to |sin(dphi/2)| (Goodman): tune_steps must land on the
    gray whose step is pi, also on a panel with more than 2 pi (the first maximum, not the 3 pi one)."""
    cfg = cfg_with()
    phase = 4.2 * np.pi * (np.arange(256) / 255) ** 1.3  # a panel of 4.2 pi
    pi_gray = float(np.interp(np.pi, phase, np.arange(256)))

    def respond(step):
        if isinstance(step, Grab):
            return fake_measurement(amplitude=1000 * abs(np.sin(phase[step.gray] / 2)) + 3.0)

    steps, result = drive(tune_steps(cfg, (0, 60)), respond)
    assert abs(result.high - pi_gray) <= 1
    assert result.measurements <= 48
    assert phase[result.high] == pytest.approx(np.pi, abs=0.1)


def test_coarse_peak_prefers_the_first_maximum_and_vertex_is_the_parabola_top():
    pts = [(16, 0.2), (32, 0.9), (48, 0.3), (64, 0.1), (80, 0.95), (96, 0.2)]
    assert coarse_peak(pts, 0, 255) == (16, 48)
    quad = {g: 1 - (g - 41.3) ** 2 / 500 for g in range(30, 55, 4)}
    assert vertex_gray(quad, 42) == pytest.approx(41.3)


def test_opposite_gray_is_pi_away_from_the_reference():
    grays = [0, 36, 73, 109, 146, 182, 219, 255]
    truth = lambda g: 2.2 * np.pi * (g / 255) ** 0.8
    wrapped = np.angle(np.exp(1j * (np.array([truth(g) for g in grays]) + 0.7)))
    g = opposite_gray(grays, wrapped, 0)
    assert abs(truth(g) - np.pi) < 0.15


def test_farthest_gray_is_the_longest_lever_even_past_two_pi():
    """A 3 pi panel: the scan's phases wrap twice, and the farthest gray is still the top one; a curve that turns
    back (a dip at its end) gives its turning point; a reference mid-scan looks both ways."""
    grays = [0, 32, 48, 64, 96, 128, 160, 192, 224, 255]
    for truth, reference, expected in ((lambda g: 3.0 * np.pi * (g / 255) ** 0.7, 0, 255),
                                       (lambda g: 2.5 * np.pi * np.sin(np.pi * g / 320), 0, 160),
                                       (lambda g: 2.0 * np.pi * g / 255, 192, 0)):
        wrapped = np.angle(np.exp(1j * (np.array([truth(g) for g in grays]) - 1.1)))
        assert farthest_gray(grays, wrapped, reference) == expected
