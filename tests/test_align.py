"""The alignment view: its figures react to polarisation, exposure and the grating pair, and its hints say why."""

import numpy as np
import pytest
from conftest import small_config_file, split_for

from analysis.alignment import AlignmentFigures, alignment_figures, hint
from analysis.config import replace
from rig.cli import main
from rig.commands.align import AlignState, align_loop, apply_key, render, text_image
from rig.run.session import open_devices
from simulators.bench import Bench
from simulators.devices import SimCamera


def frame_at(cfg, **extra):
    cfg = replace(cfg, **extra)
    bench = Bench(cfg)
    bench.show(split_for(cfg, 0, 0, 80))
    bench.clock.sleep(0.2)
    return SimCamera(bench).grab().image


def test_contrast_follows_the_polarisation_and_the_hint_names_it(small_cfg):
    """Only the field along the director is modulated, so the fringe term falls as cos^2 of the angle while the
    rest adds background: contrast drops, and the hint says to rotate the polarisation."""
    figs = {a: alignment_figures(frame_at(small_cfg, **{"simulator.response.polarization_deg": a}), 4095, 40.0)
            for a in (0.0, 50.0, 75.0)}
    assert figs[0.0].contrast > figs[50.0].contrast > figs[75.0].contrast
    assert figs[0.0].contrast > 0.8 and "aligned" in hint(figs[0.0])
    assert "polarisation" in hint(figs[50.0]) and "polarisation" in hint(figs[75.0])
    period = small_cfg.pattern.grating_period_px * small_cfg.modulator.pitch_um / small_cfg.camera.pitch_um
    assert figs[0.0].period_px == pytest.approx(period, rel=0.01) and abs(figs[0.0].angle_deg) < 0.2


def test_roll_of_the_camera_shows_as_fringe_angle(small_cfg):
    fig = alignment_figures(frame_at(small_cfg, **{"geometry.camera_roll_deg": 4.0}), 4095, 40.0)
    assert abs(fig.angle_deg) == pytest.approx(4.0, abs=0.3)


def test_saturation_and_underexposure_hints(small_cfg):
    bright = alignment_figures(frame_at(small_cfg, **{"camera.exposure_s": 0.02}), 4095, 40.0)
    dim = alignment_figures(frame_at(small_cfg, **{"camera.exposure_s": 0.0001}), 4095, 40.0)
    assert bright.saturated_px > 0 and "lower the exposure" in hint(bright)
    assert dim.peak_fraction < 0.25 and "raise the exposure" in hint(dim)


class Script:
    """Keys pressed one per update, like a person at the keyboard."""

    def __init__(self, keys):
        self.keys = list(keys)

    def poll(self):
        return [self.keys.pop(0)] if self.keys else []


def test_keys_nudge_the_grating_pair_and_exposure_and_quit(small_cfg):
    devices = open_devices(small_cfg, sim=True)
    state = AlignState(0, 80, 0, devices.camera.exposure_s)
    seen = []
    align_loop(small_cfg, devices, state, Script(["+", "+", "]", "-", "q"]), lambda s, m: seen.append(
        (s.high, s.exposure_s, s.figures.contrast)), seconds=60, rate_hz=1000)
    assert state.done and state.high == 81
    assert state.exposure_s == pytest.approx(small_cfg.camera.exposure_s * 1.25)
    assert devices.camera.exposure_s == pytest.approx(state.exposure_s)
    assert [s[0] for s in seen] == [81, 82, 82, 81]
    assert state.best_contrast == max(s[2] for s in seen)
    assert not apply_key("x", state, 255)


def test_view_renders_figures_picture_and_hint(small_cfg):
    from rich.console import Console
    import io
    image = frame_at(small_cfg)
    state = AlignState(0, 80, 0, 0.0015, alignment_figures(image, 4095, 40.0), 0.9, 3, text_image(image))
    console = Console(record=True, width=100, file=io.StringIO(), color_system=None)
    console.print(render(state))
    text = console.export_text()
    for expected in ("grating 0/80", "contrast", "period", "aligned", "keys:"):
        assert expected in text
    assert len(state.picture) == 16 and all(len(row) == 64 for row in state.picture)
    assert len(set("".join(state.picture))) > 4  # fringes show as a spread of shades


def test_align_command_without_a_terminal_runs_for_its_seconds(small_cfg, tmp_path, capsys):
    cfg = small_config_file(tmp_path)
    assert main(["align", "--sim", "--config", str(cfg), "--seconds", "1", "--rate", "5", "--terminal"]) == 0
    lines = [l for l in capsys.readouterr().out.splitlines() if l.startswith("frame")]
    assert 2 <= len(lines) <= 6 and "contrast" in lines[0]


def test_waveplate_fit_finds_the_contrast_maximum():
    """A half-wave plate at a turns the polarisation by 2a (any optics text): contrast ~ f(cos^2 2(a - a0))."""
    from analysis.alignment import best_waveplate_deg
    angles = np.arange(0, 90, 7.5)
    amp = np.cos(2 * np.deg2rad(angles - 61.0)) ** 2
    contrast = 0.9 * amp / (amp + 0.3 * (1 - amp))
    best, _ = best_waveplate_deg(angles, contrast)
    assert best == pytest.approx(61.0, abs=0.05)


def test_scan_waveplate_on_the_simulator_turns_the_polarisation_onto_the_director(small_cfg, capsys):
    """The simulated bench starts 35 deg off the director: the scan must turn the plate by -17.5 deg (mod 90)."""
    from rig.commands.align import scan_waveplate
    from simulators.devices import SimRotator
    cfg = replace(small_cfg, **{"simulator.response.polarization_deg": 35.0, "pattern.grating_high": 80})
    devices = open_devices(cfg, sim=True)
    rotator = SimRotator(devices.bench)
    lines = []
    reached = scan_waveplate(cfg, devices, rotator, AlignState(0, 80, 0, devices.camera.exposure_s), lines.append)
    assert (reached + 17.5) % 90 == pytest.approx(0.0, abs=1.0) or (reached + 17.5) % 90 == pytest.approx(90.0, abs=1.0)
    assert abs(devices.bench.polarization_deg % 180) < 2.0 or abs(devices.bench.polarization_deg % 180 - 180) < 2.0
    contrasts = [float(l.rsplit(" ", 1)[1]) for l in lines[:-1]]
    assert float(lines[-1].rsplit(" ", 1)[1]) >= max(contrasts) - 0.01
