"""The pre-flight check (rig/preflight.py): every part reported passed, failed or missing, with what to do."""

import re

import numpy as np
import pytest

from analysis.config import config_from_dict
from rig.devices.screen import DisplayInfo
from rig.run.preflight import FAILED, MISSING, PASSED, check_bench, exit_code
from simulators.instruments import MeterModel, PtyInstrument, ShutterModel
from toy_camera import ToyCamera

DESKTOP = DisplayInfo(0, "desk", 0, 0, 1280, 1024, True)
PANEL = DisplayInfo(1, "panel", 1280, 0, 1600, 1200, False)


def replay_folder(tmp_path, shape=(200, 256)):
    """Two 12-bit frames named by gray, as a replay camera serves them."""
    import cv2
    folder = tmp_path / "frames"
    folder.mkdir(parents=True)
    rng = np.random.default_rng(3)
    for gray in (0, 16):
        cv2.imwrite(str(folder / f"g{gray:03d}.png"), rng.integers(40, 3000, shape).astype(np.uint16))
    return folder


def bench(tmp_path, **sections):
    raw = {"camera": {"backend": "replay", "device": str(replay_folder(tmp_path)), "width_px": 256, "height_px": 200},
           "geometry": {"distance_mm": 40.0, "camera_offset_mm": [-0.42, 0.0]},
           "simulator": {"beam": {"radius_mm": 1.0}}}
    for key, value in sections.items():
        raw.setdefault(key, {}).update(value)
    return config_from_dict(raw, source="bench.toml")


def by_name(items):
    return {i.name: i for i in items}


def test_a_ready_bench_passes_and_parts_not_fitted_are_missing(tmp_path):
    shutter = PtyInstrument(ShutterModel())
    try:
        cfg = bench(tmp_path, accessories={"shutter": {"port": shutter.port, "timeout_s": 0.5}})
        items = by_name(check_bench(cfg, "bench.toml", displays=lambda: [DESKTOP, PANEL]))
    finally:
        shutter.close()
    assert set(items) == {"panel display", "camera opens", "camera grabs", "camera exposure", "camera gain",
                          "shutter", "power meter", "rotation mount", "temperature probe", "geometry"}
    for name in ("panel display", "camera opens", "camera grabs", "camera exposure", "camera gain", "shutter",
                 "geometry"):
        assert items[name].status == PASSED, items[name]
    assert "display 1" in items["panel display"].found
    assert "fringecal-sim,shutter" in items["shutter"].found  # it answered its identify query
    assert "*IDN?" in shutter.received
    for name in ("power meter", "rotation mount", "temperature probe"):
        assert items[name].status == MISSING and 'port = ""' in items[name].found and items[name].todo
    assert exit_code(list(items.values())) == 0


def test_each_failing_part_is_named_with_what_to_do(tmp_path):
    silent = PtyInstrument(MeterModel("power meter", "MEAS:POW?", 1e-3))
    silent.mode = "silent"
    try:
        cfg = bench(tmp_path, modulator={"width_px": 1920, "height_px": 1080},
                    camera={"width_px": 320},
                    accessories={"power_meter": {"port": silent.port, "timeout_s": 0.05, "retries": 0},
                                 "thermometer": {"port": str(tmp_path / "no-such-port")}},
                    geometry={"distance_mm": 2000.0})
        items = by_name(check_bench(cfg, "bench.toml", displays=lambda: [DESKTOP, PANEL]))
    finally:
        silent.close()
    failed = {name for name, i in items.items() if i.status == FAILED}
    assert failed == {"panel display", "camera grabs", "power meter", "temperature probe", "geometry"}
    assert "1920x1080" in items["panel display"].found and "fringecal screens" in items["panel display"].todo
    assert "256x200" in items["camera grabs"].found and "camera.width_px" in items["camera grabs"].todo
    assert "no reply" in items["power meter"].found and 'port to ""' in items["power meter"].todo
    assert "no-such-port" in items["temperature probe"].found
    assert "fringecal plan --config bench.toml" in items["geometry"].todo
    assert all(i.todo for i in items.values() if i.status == FAILED)
    assert exit_code(list(items.values())) == 3


def test_a_camera_that_does_not_open_fails_every_camera_item(tmp_path):
    cfg = bench(tmp_path, camera={"device": str(tmp_path / "empty")})
    (tmp_path / "empty").mkdir()
    items = by_name(check_bench(cfg, "bench.toml", displays=lambda: [DESKTOP, PANEL]))
    for name in ("camera opens", "camera grabs", "camera exposure", "camera gain"):
        assert items[name].status == FAILED and items[name].todo
    assert "empty" in items["camera opens"].found and "camera.device" in items["camera opens"].todo


class StuckCamera(ToyCamera):
    """A camera that keeps a 1 ms exposure whatever it is asked and has fixed gain."""

    def _do_set_exposure(self, exposure_s):
        return 0.001

    def _do_set_gain(self, gain_db):
        from rig.devices.cameras import UnsupportedSetting
        raise UnsupportedSetting("camera.gain_db: this camera has fixed gain")


def test_exposure_and_gain_are_read_back(tmp_path):
    cfg = bench(tmp_path, camera={"backend": "test_preflight:StuckCamera", "exposure_s": 0.004, "gain_db": 6.0,
                                  "bit_depth": 12})
    items = by_name(check_bench(cfg, "bench.toml", displays=lambda: [DESKTOP, PANEL]))
    assert items["camera opens"].status == items["camera grabs"].status == PASSED
    assert items["camera exposure"].status == FAILED and "read back 0.001 s" in items["camera exposure"].found
    assert items["camera gain"].status == FAILED and "fixed gain" in items["camera gain"].found
    cfg = bench(tmp_path / "again", camera={"backend": "test_preflight:StuckCamera", "exposure_s": 0.001})
    items = by_name(check_bench(cfg, "bench.toml", displays=lambda: [DESKTOP, PANEL]))
    assert items["camera exposure"].status == PASSED


def test_preflight_command_on_the_two_monitor_display_reports_every_item(tmp_path, capsys):
    """On CI's X server (primary 1280x1024 beside a 1920x1080 'panel'), with a replay camera and one serial part."""
    from rig.cli import main
    from xdisplay import panel_bench_toml, panel_display

    panel = panel_display()
    shutter = PtyInstrument(ShutterModel())
    config = tmp_path / "bench.toml"
    config.write_text(panel_bench_toml("replay", str(replay_folder(tmp_path)),
                                       f'[accessories.shutter]\nport = "{shutter.port}"\ntimeout_s = 0.5\n'))
    try:
        code = main(["preflight", "--config", str(config)])
        out = capsys.readouterr().out
        config.write_text(config.read_text().replace("width_px = 1920", "width_px = 1600"))
        assert main(["preflight", "--config", str(config)]) == 3
        assert re.search(r"^FAIL panel display ", capsys.readouterr().out, flags=re.M)
    finally:
        shutter.close()
    for name in ("panel display", "camera opens", "camera grabs", "camera exposure", "camera gain", "shutter",
                 "power meter", "rotation mount", "temperature probe", "geometry"):
        assert re.search(rf"^(ok  |FAIL|--  ) {name} ", out, flags=re.M), name
    assert f"display {panel.index}" in out
    assert "7 passed, 0 failed, 3 not fitted" in out
    assert code == 0
    config.write_text(config.read_text() + "[laser]\nwavelength_nm = 20\n")
    assert main(["preflight", "--config", str(config)]) == 2
    assert "[laser.wavelength_nm]" in capsys.readouterr().err
