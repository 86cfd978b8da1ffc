"""Phase flicker: the figures against synthetic series, and the command against the simulator's known ripple."""

import json

import numpy as np
import pytest
from conftest import small_config_file

from analysis.flicker import flicker_figures
from rig.cli import main

FLICKER = {"camera.exposure_s": 0.0002, "pattern.grating_high": 80, "simulator.timing.frame_rate_hz": 1000.0,
           "simulator.timing.flicker_rad": 0.05, "simulator.timing.flicker_hz": 120.0,
           "simulator.timing.vibration_urad": 0.0}

def test_sine_flicker_rms_peak_to_peak_and_frequency():
    """A sine of amplitude a has rms a / sqrt(2) and peak to peak 2a; its line sits at its frequency."""
    t = np.arange(2000) / 1000.0
    phase = 0.3 + 0.8 * t + 0.02 * np.sin(2 * np.pi * 97.3 * t + 1.0)
    fig = flicker_figures(t, phase)
    assert fig.rms_rad == pytest.approx(0.02 / np.sqrt(2), rel=0.01)
    assert fig.peak_to_peak_rad == pytest.approx(0.04, rel=0.01)
    assert fig.dominant_hz == pytest.approx(97.3, abs=fig.bin_hz / 2)
    assert fig.frame_rate_hz == pytest.approx(1000.0) and not fig.above_nyquist
    assert np.max(fig.spectrum_rad) == pytest.approx(0.02, rel=0.1)


def test_ripple_faster_than_nyquist_is_flagged_when_its_frequency_is_known():
    """Shannon: a 120 Hz ripple sampled at 100 frames/s aliases to 20 Hz."""
    t = np.arange(500) / 100.0
    fig = flicker_figures(t, 0.01 * np.sin(2 * np.pi * 120.0 * t), expected_hz=120.0)
    assert fig.above_nyquist and fig.dominant_hz == pytest.approx(20.0, abs=fig.bin_hz)


def test_flicker_command_recovers_the_simulated_ripple(tmp_path, capsys):
    cfg = small_config_file(tmp_path, **FLICKER)
    out = tmp_path / "run"
    assert main(["flicker", "--sim", "--config", str(cfg), "--gray", "60", "--seconds", "1", "--out", str(out),
                 "--json"]) == 0
    text = capsys.readouterr().out
    summary = json.loads(text[text.index("{"):])
    for key in ("rms_rad", "peak_to_peak_rad", "dominant_hz", "frame_rate_hz"):
        assert key in summary
    assert summary["rms_rad"] == pytest.approx(summary["simulator_true_rms_rad"], rel=0.10)
    assert summary["dominant_hz"] == pytest.approx(120.0, abs=summary["spectral_bin_hz"])
    assert (out / "flicker.csv").is_file() and (out / "flicker.png").is_file()
    assert json.loads((out / "run.json").read_text())["status"] == "complete"
