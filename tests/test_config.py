"""Configs: shipped files load, every value is checked, and mistakes are reported by file and key path."""

import subprocess
import sys

import pytest

from analysis.config import Config, ConfigError, as_dict, config_from_dict, describe, load_config
from configs import HERE


@pytest.mark.parametrize("name", ["tweezers-1064.toml", "tweezers-780.toml", "bench-template.toml"])
def test_shipped_configs_load(name):
    cfg = load_config(HERE / name)
    assert cfg.source.endswith(name)
    assert cfg.gray_max == 255


def test_template_lists_every_key_with_its_meaning():
    text = (HERE / "bench-template.toml").read_text()
    for path, _default, doc in describe():
        key = path.rsplit(".", 1)[1]
        assert f"\n{key} = " in text, path
        assert doc and doc in text, path


def test_template_values_are_the_code_defaults():
    """The template says it shows every default: each value, not only each key, is the dataclasses' own."""
    assert as_dict(load_config(HERE / "bench-template.toml")) == as_dict(Config())


def test_hardware_template_presets_no_port_and_a_neutral_panel():
    """A port that is not on this computer would stop the first run; the placeholder panel is the schema's
    neutral default, not one product's data sheet."""
    cfg = load_config(HERE / "bench-hardware.toml")
    assert [getattr(cfg.accessories, role).port for role in ("shutter", "power_meter", "rotator", "thermometer")] \
        == ["", "", "", ""]
    m, default = cfg.modulator, Config().modulator
    assert (m.width_px, m.height_px, m.pitch_um) == (default.width_px, default.height_px, default.pitch_um)


def write(tmp_path, text):
    path = tmp_path / "bench.toml"
    path.write_text(text)
    return path


@pytest.mark.parametrize("text, fragments", [
    ("[laser]\nwavelenght_nm = 780\n", ["[laser.wavelenght_nm]", "unknown key", "did you mean 'wavelength_nm'"]),
    ("[lazer]\nwavelength_nm = 780\n", ["[lazer]", "unknown key"]),
    ("[laser]\nwavelength_nm = 20\n", ["[laser.wavelength_nm]", "in [350.0, 2000.0]", "20"]),
    ("[laser]\nwavelength_nm = \"red\"\n", ["[laser.wavelength_nm]", "a number"]),
    ("[camera]\nbit_depth = 12.5\n", ["[camera.bit_depth]", "an integer"]),
    ("[simulator.timing]\nrealtime = 1\n", ["[simulator.timing.realtime]", "true or false"]),
    ("[pattern]\nsplit = \"diagonal\"\n", ["[pattern.split]", "'vertical', 'horizontal'"]),
    ("[pattern]\ngrating_high = 300\n", ["[pattern.grating_high]", "[0, 255]", "8-bit"]),
    ("[pattern]\nsplit = \"horizontal\"\n", ["[pattern.grating_side]", "top or bottom"]),
    ("[sweep]\nlevels = [0, 10, 256]\n", ["[sweep.levels]", "[0, 255]", "256"]),
    ("[geometry]\ncamera_offset_mm = [1.0]\n", ["[geometry.camera_offset_mm]", "list of 2 numbers"]),
    ("[simulator.response]\nv_max = 0.5\n", ["[simulator.response.v_max]", "above v_min"]),
    ("[camera]\nbackend = \"webcam\"\n", ["[camera.backend]", "module:Class"]),
    ("[laser\n", ["not valid TOML"]),
])
def test_bad_values_name_file_key_and_expectation(tmp_path, text, fragments):
    path = write(tmp_path, text)
    with pytest.raises(ConfigError) as err:
        load_config(path)
    message = str(err.value)
    assert message.startswith(str(path)) and "\n" not in message
    for fragment in fragments:
        assert fragment in message


def test_ten_bit_panel_accepts_grays_an_eight_bit_one_refuses():
    raw = {"modulator": {"bit_depth": 10}, "pattern": {"grating_high": 700}}
    assert config_from_dict(raw).pattern.grating_high == 700
    with pytest.raises(ConfigError, match="grating_high"):
        config_from_dict({"pattern": {"grating_high": 700}})


def test_sweep_levels_default_to_every_level():
    assert Config().sweep_levels() == tuple(range(256))
    assert config_from_dict({"sweep": {"levels": [5, 3, 3, 9]}}).sweep_levels() == (3, 5, 9)


def test_cli_turns_a_misspelt_key_into_one_line_and_exit_2(tmp_path):
    path = write(tmp_path, "[camera]\nexposure = 0.01\n")
    out = subprocess.run([sys.executable, "-m", "rig.cli", "sim-truth", "--config", str(path),
                          "--out", str(tmp_path / "t.csv")], capture_output=True, text=True)
    assert out.returncode == 2
    lines = out.stderr.strip().splitlines()
    assert len(lines) == 1 and "[camera.exposure] unknown key" in lines[0] and "exposure_s" in lines[0]
    assert "Traceback" not in out.stderr and not (tmp_path / "t.csv").exists()


@pytest.mark.parametrize("name", ["tweezers-1064.toml", "tweezers-780.toml", "bench-template.toml", "small-bench.toml"])
def test_a_config_written_as_toml_reads_back_equal(tmp_path, name):
    from analysis.config import to_toml
    cfg = load_config(HERE / name)
    path = tmp_path / "again.toml"
    path.write_text(to_toml(cfg))
    assert load_config(path) == cfg
