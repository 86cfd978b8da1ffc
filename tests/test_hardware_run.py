"""The run loop on the hardware path: the pattern window on the second monitor with the simulated camera, a
replay of a run folder, serial accessories in the journal, and frames discarded after pattern changes."""

import json

import numpy as np
import pytest

from analysis.config import load_config
from analysis.patterns import layout_of, split_screen
from rig.cli import main
from rig.devices.screen import Tee
from rig.output.runs import read_journal
from rig.run.engine import Engine
from rig.run.measure import FrameAnalyzer
from rig.run.session import open_devices
from rig.run.steps import Grab, Settle, ShowSplit
from simulators.bench import Bench
from simulators.devices import SimCamera, SimScreen
from simulators.instruments import MeterModel, PtyInstrument, ShutterModel
from xdisplay import panel_bench_toml, panel_display

LEVELS = [0, 16, 32, 48, 64, 80, 96, 112, 128, 144, 160, 176, 192, 208, 224, 240, 255]


def bench_config(tmp_path, backend="sim", device="", extra="", name="bench.toml"):
    path = tmp_path / name
    path.write_text(panel_bench_toml(backend, device, f"[sweep]\nlevels = {LEVELS}\nreference_every = 8\n") + extra)
    return path


def offset_free_rms(folder):
    """RMS (rad) of phase.csv against truth.csv, offset removed; the truth is turned to run the curve's way (a run
    without a sign probe makes its curve rise, the simulated panel's truth falls)."""
    truth = dict(np.loadtxt(folder / "truth.csv", delimiter=",", skiprows=1))
    rows = np.loadtxt(folder / "phase.csv", delimiter=",", skiprows=1, usecols=(0, 1))
    true = np.array([truth[g] for g in rows[:, 0]])
    true *= np.sign((true[-1] - true[0]) * (rows[-1, 1] - rows[0, 1]))
    err = rows[:, 1] - true
    return float(np.sqrt(np.mean((err - err.mean()) ** 2)))


@pytest.fixture(scope="module")
def window_run(tmp_path_factory):
    panel_display()
    tmp = tmp_path_factory.mktemp("window")
    out = tmp / "run"
    assert main(["sweep", "--config", str(bench_config(tmp)), "--pair", "0:80", "--out", str(out)]) == 0
    return out


def test_open_devices_puts_the_panel_window_on_the_second_monitor(tmp_path):
    panel_display()
    devices = open_devices(load_config(bench_config(tmp_path)), sim=False)
    try:
        assert isinstance(devices.screen, Tee) and devices.bench is not None
        window = devices.screen.window
        assert window._window.get_location() == (1280, 0)
        pattern = split_screen(1920, 1080, 200, 0, 80, layout_of(load_config(bench_config(tmp_path)).pattern))
        assert np.array_equal(window.show_checked(pattern), window.expected_rgb(pattern))
        assert "1920x1080 at (1280, 0)" in devices.identity["screen"]
    finally:
        devices.close()
    assert window._window is None  # closed with the devices


def test_sweep_through_the_real_window_recovers_the_simulated_curve(window_run):
    info = json.loads((window_run / "run.json").read_text())
    assert info["status"] == "complete" and info["devices"]["camera_backend"] == "sim"
    phase = np.loadtxt(window_run / "phase.csv", delimiter=",", skiprows=1, usecols=0)
    # the configured levels, and the second drift reference gray (about pi from the first) that the sweep visits
    assert sorted(phase.astype(int)) == sorted({*LEVELS, info["scale_gray"]})
    assert offset_free_rms(window_run) < 0.03


def test_sweep_replays_a_run_folder(window_run, tmp_path):
    cfg = bench_config(tmp_path, backend="replay", device=str(window_run))
    out = tmp_path / "replayed"
    code = main(["sweep", "--config", str(cfg), "--pair", "0:80", "--out", str(out),
                 "--laser-safety-acknowledged"])
    assert code == 0
    info = json.loads((out / "run.json").read_text())
    assert info["status"] == "complete" and info["devices"]["camera_backend"] == "replay"
    frames = read_journal(out / "journal.jsonl").frames()
    assert {r["gray"] for r in frames if r["purpose"] == "level"} == set(LEVELS)
    sequences = [r["sequence"] for r in frames]
    assert sequences == sorted(sequences) and len(set(sequences)) == len(sequences)  # served in order, none twice


class RisingPower(MeterModel):
    """A power meter whose laser fades 2 % per reading: past the 5 % threshold after a few levels."""

    def __call__(self, line):
        reply = super().__call__(line)
        if line == self.query:
            self.value *= 0.98
        return reply


def test_accessories_in_a_run_dark_frame_readings_and_drift_warning(tmp_path):
    panel_display()
    shutter_model = ShutterModel()
    parts = [PtyInstrument(shutter_model), PtyInstrument(RisingPower("power meter", "MEAS:POW?", 2e-3)),
             PtyInstrument(MeterModel("thermometer", "MEAS:TEMP?", 23.5))]
    try:
        extra = "".join(f"[accessories.{role}]\nport = \"{p.port}\"\ntimeout_s = 0.5\n"
                        for role, p in zip(("shutter", "power_meter", "thermometer"), parts))
        out = tmp_path / "run"
        assert main(["sweep", "--config", str(bench_config(tmp_path, extra=extra)), "--pair", "0:80",
                     "--out", str(out), "--no-frames"]) == 0
    finally:
        for p in parts:
            p.close()
    info = json.loads((out / "run.json").read_text())
    assert "shutter closed" in info["dark_source"]
    assert parts[0].received[1:5] == ["SHUT?", "SHUT:CLOS", "SHUT?", "SHUT:OPEN"]  # dark frame before the rest
    frames = read_journal(out / "journal.jsonl").frames()
    assert all("power_w" in r and r["temperature_c"] == pytest.approx(23.5) for r in frames)
    powers = [r["power_w"] for r in frames]
    assert powers[0] > powers[-1]
    assert sum("power_w drifted" in w for w in info["warnings"]) == 1
    assert not shutter_model.is_open  # left closed at the end


def test_engine_discards_the_configured_frames_after_each_pattern_change(small_cfg):
    bench = Bench(small_cfg)
    camera = SimCamera(bench)
    engine = Engine(small_cfg, SimScreen(bench), camera, bench.clock, FrameAnalyzer(4095, 40.0), discard_frames=3)

    def steps():
        for gray in (0, 100):
            yield ShowSplit(gray, 0, 80)
            yield Settle(0.0)
            yield Grab(2, "level", gray, wait=True)

    try:
        engine.run(steps())
    finally:
        engine.close()
    assert engine.faults["discarded"] == 6 and camera.delivered == 10 and engine.frames_grabbed == 4


def test_hardware_template_loads_and_marks_what_to_change():
    from configs import HERE
    path = HERE / "bench-hardware.toml"
    cfg = load_config(path)
    assert cfg.camera.backend == "opencv"
    text = path.read_text()
    for section in ("[modulator]", "[laser]", "[camera]", "[geometry]", "[accessories.shutter]",
                    "[accessories.power_meter]", "[accessories.rotator]", "[accessories.thermometer]"):
        assert section in text
    assert text.count("# CHANGE") >= 15
