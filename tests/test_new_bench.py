"""``fringecal new-bench``: a starter config from flags or from questions on stdin, or a copy of a shipped one."""

import io
import sys

import pytest

from analysis.config import load_config
from configs import HERE
from rig.cli import main


def test_flags_answer_the_questions_and_the_end_of_input_keeps_placeholders(tmp_path, monkeypatch, capsys):
    monkeypatch.setattr(sys, "stdin", io.StringIO(""))
    out = tmp_path / "bench.toml"
    assert main(["new-bench", "--out", str(out), "--panel-px", "1280x1024", "--pitch-um", "12.5", "--bit-depth", "10",
                 "--wavelength-nm", "780", "--camera", "replay", "--device", "frames/", "--shutter", "/dev/ttyACM0",
                 "--power-meter", "none", "--rotator", "COM4", "--thermometer", ""]) == 0
    cfg = load_config(out)
    assert (cfg.modulator.width_px, cfg.modulator.height_px, cfg.modulator.pitch_um) == (1280, 1024, 12.5)
    assert cfg.modulator.bit_depth == 10 and cfg.laser.wavelength_nm == 780.0
    assert (cfg.camera.backend, cfg.camera.device) == ("replay", "frames/")
    ports = {r: getattr(cfg.accessories, r).port for r in ("shutter", "power_meter", "rotator", "thermometer")}
    assert ports == {"shutter": "/dev/ttyACM0", "power_meter": "", "rotator": "COM4", "thermometer": ""}
    text = out.read_text()
    assert "width_px = 1280\n" in text and "wavelength_nm = 780.0\n" in text  # answered: no CHANGE mark
    assert "power_mw = 3.0               # CHANGE" in text  # not asked: a placeholder
    printed = capsys.readouterr().out
    assert f"fringecal preflight --config {out}" in printed and "marked CHANGE" in printed


def test_questions_on_stdin_are_asked_again_after_a_bad_answer(tmp_path, monkeypatch, capsys):
    answers = ["1920", "1080", "tiny", "6.4", "", "532", "opencv", "2", "/dev/ttyUSB0", "", "", ""]
    monkeypatch.setattr(sys, "stdin", io.StringIO("".join(a + "\n" for a in answers)))
    out = tmp_path / "bench.toml"
    assert main(["new-bench", "--out", str(out)]) == 0
    cfg = load_config(out)
    assert (cfg.modulator.width_px, cfg.modulator.height_px, cfg.modulator.pitch_um) == (1920, 1080, 6.4)
    assert cfg.laser.wavelength_nm == 532.0 and cfg.camera.device == "2"
    assert cfg.accessories.shutter.port == "/dev/ttyUSB0" and cfg.accessories.thermometer.port == ""
    assert "bit_depth = 8                # CHANGE" in out.read_text()  # left empty: the placeholder stays
    asked = capsys.readouterr().out
    assert "[modulator.pitch_um] expected a number" in asked and asked.count("panel pixel pitch") == 2


def test_copy_writes_a_shipped_config_as_it_is(tmp_path):
    out = tmp_path / "mine.toml"
    assert main(["new-bench", "--copy", "bench-template", "--out", str(out)]) == 0
    assert out.read_bytes() == (HERE / "bench-template.toml").read_bytes()


@pytest.mark.parametrize("args, fragment", [
    (["--copy", "tweezers-780", "--wavelength-nm", "780"], "--copy: a shipped config is copied as it is; drop "
                                                           "--wavelength-nm"),
    (["--panel-px", "1920 by 1080"], "--panel-px: [modulator.width_px, height_px] expected WIDTHxHEIGHT"),
    (["--bit-depth", "16"], "--bit-depth: [modulator.bit_depth] expected an integer in [8, 12]"),
    (["--camera", "webcam"], "--camera: [camera.backend] expected sim, opencv, replay, genicam, or module:Class"),
])
def test_bad_flags_name_the_flag_and_write_nothing(tmp_path, monkeypatch, capsys, args, fragment):
    monkeypatch.setattr(sys, "stdin", io.StringIO(""))
    out = tmp_path / "bench.toml"
    assert main(["new-bench", "--out", str(out), *args]) == 2
    err = capsys.readouterr().err
    assert fragment in err and len(err.strip().splitlines()) == 1
    assert not out.exists()


def test_an_existing_config_is_not_overwritten(tmp_path, capsys):
    out = tmp_path / "bench.toml"
    out.write_text("# mine\n")
    assert main(["new-bench", "--out", str(out), "--copy", "small-bench"]) == 2
    assert "exists" in capsys.readouterr().err and out.read_text() == "# mine\n"
